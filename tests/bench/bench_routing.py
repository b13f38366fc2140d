"""Benchmark of routing: time and area of the routed block at 64, 256, 1024 and 4096 units.

For each size: a binary-weighted capacitor array and a mirror (1:1:2) in a seeded random
order inside a ring of dummies (and the 6-bit array without one and in a ring of strips,
and a series resistor ladder of 64 and 256 units), at the pitch its
routing needs. Times are the best of
``--repeat`` runs of each step (pitch fit, route, parasitic extraction); beside them the
share of that layout work in a whole ``placer arrange`` of the same spec with
``--time-limit 10`` (the whole run: search, grading, routing, files; one run in a
fresh process).

Run:  python tests/bench/bench_routing.py [--repeat 3] [--update-readme]
"""

from __future__ import annotations

import argparse
import os
import platform
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from readme_block import replace_block  # this script's folder

from placer.io.pattern import Pattern
from placer.jobs.load import parse_spec
from placer.layout.block import area_of, load_tools, prepare
from placer.layout.cells import load_rules, unit_cell
from placer.layout.parasitics import extract
from placer.layout.pitch import fitted
from placer.layout.router import route

SIZES = (64, 256, 1024, 4096)


def _cap_spec(n: int, ring: bool = True, strips: bool = False):
    bits = int(np.log2(n))
    counts = [1, 1, *(2 ** b for b in range(1, bits))]
    names = ["CT", *(f"C{i}" for i in range(len(counts) - 1))]
    text = ('name = "bench_cap"\nkind = "cap"\n[devices]\n'
            + "".join(f"{a} = {c}\n" for a, c in zip(names, counts, strict=True))
            + f'[array]\ndummies = "{"ring" if ring else "none"}"\n'
            + ("ring_depth_um = 1.0\n" if strips else "")
            + '[unit]\nwidth_um = 5.0\nlength_um = 5.0\n')
    return parse_spec(text, "bench_cap.toml"), counts, text


def _mos_spec(n: int):
    counts = [n // 4, n // 4, n // 2]
    text = (f'name = "bench_mirror"\n[devices]\nMREF = {counts[0]}\nMA = {counts[1]}\n'
            f'MB = {counts[2]}\n[array]\ndummies = "ring"\n[unit]\nwidth_um = 2.0\n'
            'length_um = 0.5\n')
    return parse_spec(text, "bench_mirror.toml"), counts, text


def _res_spec(n: int):
    counts = [n // 4, n // 4, n // 2]
    text = (f'name = "bench_ladder"\nkind = "res"\n[devices]\nRTOP = {counts[0]}\n'
            f'RMID = {counts[1]}\nRBOT = {counts[2]}\n[array]\ndummies = "ring"\n'
            '[unit]\nwidth_um = 2.0\nlength_um = 16.0\n[terminals]\n'
            'RTOP = { a = "VREF", b = "TAP2" }\nRMID = { a = "TAP2", b = "TAP1" }\n'
            'RBOT = { a = "TAP1", b = "VSS" }\n')
    return parse_spec(text, "bench_ladder.toml"), counts, text


def _pattern(spec, counts, ring: bool = True):
    side = int(round(np.sqrt(sum(counts))))
    ids = np.random.default_rng(0).permutation(
        np.repeat(np.arange(len(counts)), counts)).reshape(side, side)
    if ring:
        ids = np.pad(ids, 1, constant_values=-1)
    orient = np.where(ids >= 0, 1, 0).astype(np.int8)
    return Pattern(spec.devices, ids, orient)


def _time(fn, repeat):
    best, out = float("inf"), None
    for _ in range(repeat):
        t0 = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t0)
    return best, out


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--update-readme", action="store_true")
    args = ap.parse_args()
    rows = ["| block | units | fit s | route s | extract s | arrange s | layout share | "
            "block um | units fill |",
            "|---|---|---|---|---|---|---|---|---|"]
    cases = ([("capacitor array", _cap_spec, n, "ring") for n in SIZES]
             + [("capacitor array, ring of 1 um strips", _cap_spec, n, "strips")
                for n in (64, 1024)]
             + [("capacitor array, no ring", _cap_spec, 64, "none")]
             + [("mirror 1:1:2", _mos_spec, n, "ring") for n in SIZES]
             + [("resistor ladder 1:1:2 in series", _res_spec, n, "ring")
                for n in SIZES[:2]])
    for kind, make, n, style in cases:
        spec, counts, text = (make(n) if style == "ring" else
                              make(n, ring=False) if style == "none" else make(n, strips=True))
        pattern = _pattern(spec, counts, style != "none")
        rules = load_rules(spec.kind)
        t_fit, spec_f = _time(lambda s=spec, p=pattern, r=rules: fitted(p, s, r),
                              args.repeat)
        cell = unit_cell(spec.kind, spec.unit.width_um, spec.unit.length_um,
                         spec_f.array.pitch_um[0], rules)
        t_route, wiring = _time(lambda p=pattern, s=spec_f, r=rules, c=cell:
                                route(p, s, r, c), args.repeat)
        t_ext, _ = _time(lambda w=wiring, s=spec_f, r=rules: extract(w, s.routing, r),
                         args.repeat)
        spec_t, tools = load_tools(spec)
        area = area_of(prepare(pattern, spec_t, tools))
        w, h = wiring.size_um
        with tempfile.TemporaryDirectory() as tmp:
            path = Path(tmp) / "s.toml"
            path.write_text(text)
            t0 = time.perf_counter()
            subprocess.run([sys.executable, "-m", "placer", "arrange", str(path), "--out",
                            str(Path(tmp) / "o"), "--time-limit", "10", "--quiet"],
                           check=True, capture_output=True)
            t_arr = time.perf_counter() - t0
        share = (t_fit + t_route + t_ext) / t_arr
        rows.append(f"| {kind} | {n} | {t_fit:.2f} | {t_route:.2f} | {t_ext:.2f} | "
                    f"{t_arr:.1f} | {100 * share:.0f}% | {w:.0f} x {h:.0f} | "
                    f"{100 * area.unit_fraction:.1f}% |")
        print(rows[-1], flush=True)
    head = (f"Machine: {platform.machine()}, {os.cpu_count()} CPUs, Python "
            f"{platform.python_version()}; `python tests/bench/bench_routing.py` (best of "
            f"{args.repeat}; seeded random arrangements, in a ring of dummies (whole unit "
            "cells) unless marked).")
    table = head + "\n\n" + "\n".join(rows)
    print(table)
    if args.update_readme:
        replace_block("bench:routing", table)
    return 0


if __name__ == "__main__":
    sys.exit(main())
