"""Benchmark of drawing: routed GDSII and PNG of a 32 x 32 array (target: under 3 s together).

Run:  python tests/bench/bench_draw.py [--update-readme]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from readme_block import replace_block  # this script's folder

from placer.io.pattern import Pattern
from placer.jobs.load import parse_spec
from placer.layout.block import layout_of
from placer.layout.gdswrite import write_gds
from placer.model.grade import grade_pattern
from placer.present.plot import save_preview


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--update-readme", action="store_true")
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    counts = [1, 1, *(2 ** b for b in range(1, 10))]
    names = [f"C{i}" for i in range(len(counts))]
    spec = parse_spec('kind = "cap"\n[devices]\n' + "".join(
        f"{n} = {c}\n" for n, c in zip(names, counts, strict=True)) + '[array]\nrows = 32\n'
        'columns = 32\ndummies = "ring"\n', "bench")
    rng = np.random.default_rng(0)
    ids = rng.permutation(np.repeat(np.arange(len(counts)), counts)).reshape(32, 32)
    ids = np.pad(ids, 1, constant_values=-1)
    pattern = Pattern(spec.devices, ids, np.zeros(ids.shape, dtype=np.int8))
    times = {"GDSII": [], "PNG": [], "grade": []}
    with tempfile.TemporaryDirectory() as tmp:
        for _ in range(args.repeat):
            t0 = time.perf_counter()
            grade = grade_pattern(pattern, spec)
            t1 = time.perf_counter()
            write_gds(layout_of(pattern, spec)[0], Path(tmp) / "a.gds")
            t2 = time.perf_counter()
            save_preview(pattern, spec.array.pitch_um, grade, "bench", [Path(tmp) / "a.png"])
            t3 = time.perf_counter()
            times["grade"].append(t1 - t0)
            times["GDSII"].append(t2 - t1)
            times["PNG"].append(t3 - t2)
    best = {k: min(v) for k, v in times.items()}
    total = best["GDSII"] + best["PNG"]
    lines = [f"| 32 x 32 array + ring (1156 slots) | seconds, best of {args.repeat} runs |",
             "|---|---|",
             *(f"| {k} | {v:.2f} |" for k, v in best.items()),
             f"| GDSII + PNG | {total:.2f} (target 3 s: {'met' if total < 3 else 'MISSED'}) |"]
    table = "\n".join(lines)
    print(table)
    if args.update_readme:
        replace_block("bench:draw", table)
    return 0 if total < 3 else 1


if __name__ == "__main__":
    sys.exit(main())
