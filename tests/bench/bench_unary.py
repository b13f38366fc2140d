"""Benchmark of switching sequences for unary arrays: worst |INL| of placer's sequence
search beside the textbook orders it implements, at 63 and 255 cells.

Fields: a linear gradient of 1 %/mm (10 ppm/um) in its worst direction plus the default
curvature (the radial bowl of 0.02 ppm/um^2); cells on a 10 um x 10 um pitch, one
sub-unit each (and, for the quadrant split, four; for the quad-quadrant walk,
sixteen); and a segmented 10-bit array (6 unary
bits of 16 unit sources a cell, 4 binary bits). Targets (issue: unary arrays): placer
no worse than the best baseline on both sizes, at least 20 % better on one, and at most a
tenth of row-by-row.

Run:  python tests/bench/bench_unary.py [--update-readme] [--seeds 3] [--moves 200000]
"""

from __future__ import annotations

import argparse
import sys
import time

from readme_block import replace_block  # this script's folder

from placer.model.unary import UnaryFields, random_inl_sigma, worst_inl
from placer.search.switching import BASELINES, switching_sequence

PITCH = (10.0, 10.0)
FIELDS = UnaryFields(linear_ppm_per_um=10.0, quadratic_ppm_per_um2=0.02)
# (cells, rows, cols)
SIZES = [(63, 8, 8), (255, 16, 16)]


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--update-readme", action="store_true")
    ap.add_argument("--seeds", type=int, default=3)
    ap.add_argument("--moves", type=int, default=200_000)
    args = ap.parse_args()
    t_all = time.monotonic()
    names = [n for n in BASELINES if n not in ("quadrant split", "quad-quadrant walk")]
    head = ("| cells | core | " + " | ".join(names) + " | placer (worst of "
            f"{args.seeds} seeds) | s | placer / best baseline | placer / row-by-row |")
    lines = [head, "|" + "---|" * (head.count("|") - 1)]
    ok_all, better20 = True, False
    for n, rows, cols in SIZES:
        base = {k: worst_inl(BASELINES[k](rows, cols, PITCH, n, 1), FIELDS) for k in names}
        runs = [switching_sequence(rows, cols, PITCH, n, FIELDS, seed=s, moves=args.moves,
                                   time_limit_s=600) for s in range(args.seeds)]
        ours = max(r.worst_inl_lsb for r in runs)
        secs = max(r.seconds for r in runs)
        best = min(base.values())
        ok_all &= ours <= best and ours <= 0.1 * base["row-by-row"]
        better20 |= ours <= 0.8 * best
        lines.append(f"| {n} | {rows} x {cols} | " + " | ".join(f"{1e3 * base[k]:.4g}"
                                                              for k in names)
                     + f" | {1e3 * ours:.4g} | {secs:.1f} | {ours / best:.3f} | "
                       f"{ours / base['row-by-row']:.4f} |")
        print(lines[-1], flush=True)
    # the quadrant split (four sub-units a cell) against the search with four sub-units
    n, rows, cols = 63, 16, 16
    quad = worst_inl(BASELINES["quadrant split"](rows, cols, PITCH, n, 4), FIELDS)
    q_runs = [switching_sequence(rows, cols, PITCH, n, FIELDS, sub_units=4, seed=s,
                                 moves=args.moves, time_limit_s=600)
              for s in range(args.seeds)]
    q_ours = max(r.worst_inl_lsb for r in q_runs)
    # sixteen sub-units a cell: the quad-quadrant walk
    n, rows, cols = 63, 32, 32
    walk = worst_inl(BASELINES["quad-quadrant walk"](rows, cols, PITCH, n, 16), FIELDS)
    w_runs = [switching_sequence(rows, cols, PITCH, n, FIELDS, sub_units=16, seed=s,
                                 moves=args.moves, time_limit_s=600)
              for s in range(args.seeds)]
    w_ours = max(r.worst_inl_lsb for r in w_runs)
    # a segmented 10-bit array: 63 unary cells of 16 unit sources and binary cells of
    # 8, 4, 2, 1 (1023 units on 32 x 32)
    n, bits, rows, cols = 63, 4, 32, 32
    s_base = {k: worst_inl(BASELINES[k](rows, cols, PITCH, n, 16, bits), FIELDS)
              for k in names}
    s_runs = [switching_sequence(rows, cols, PITCH, n, FIELDS, sub_units=16,
                                 binary_bits=bits, seed=s, moves=args.moves,
                                 time_limit_s=600) for s in range(args.seeds)]
    s_ours = max(r.worst_inl_lsb for r in s_runs)
    seg = ("Segmented 6 + 4 bits (63 unary cells of 16 unit sources, binary cells of 8, "
           "4, 2, 1; 32 x 32): " + ", ".join(f"{k} {1e3 * v:.4g}" for k, v in s_base.items())
           + f", placer {1e3 * s_ours:.4g} milli-LSB "
             f"({max(r.seconds for r in s_runs):.1f} s).")
    print(seg, flush=True)
    sigma = random_inl_sigma(255, 1e-3).max()
    table = "\n".join([
        "Worst |INL| in milli-LSB over every code, linear gradient 1 %/mm in its worst "
        "direction plus the bowl of 0.02 ppm/um^2, 10 um pitch; "
        f"`python tests/bench/bench_unary.py` ({time.monotonic() - t_all:.0f} s in all).",
        "", *lines, "",
        f"Four sub-units a cell (63 cells on 16 x 16): quadrant split {1e3 * quad:.4g}, "
        f"placer {1e3 * q_ours:.4g} milli-LSB.",
        "",
        f"Sixteen sub-units a cell (63 cells on 32 x 32): quad-quadrant walk "
        f"{1e3 * walk:.4g}, placer {1e3 * w_ours:.4g} milli-LSB.",
        "",
        seg,
        "",
        f"For scale: cells of 0.1 % random mismatch give 255 cells an INL sigma of "
        f"{1e3 * sigma:.3g} milli-LSB at mid-scale.",
        "",
        f"Targets (no worse than the best baseline, at least 20 % better on one size, at "
        f"most a tenth of row-by-row): {'met' if ok_all and better20 else 'MISSED'}."])
    print(table)
    if args.update_readme:
        replace_block("bench:unary", table)
    return 0 if ok_all and better20 else 1


if __name__ == "__main__":
    sys.exit(main())
