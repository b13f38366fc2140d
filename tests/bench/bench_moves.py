"""Benchmark of the move loop: moves per CPU second of placer's compiled loop beside a plain
compiled kernel (tests/bench/plain_kernel.c, written apart from it) on the same problem.

Both run the quadratic stage (worst pair + a share of the mean pair, linear term capped)
from the same start, alternating, and the median of the repeats is quoted. "singles"
restricts placer's loop to the single swaps the plain kernel makes (like for like);
"as searched" is its stage as the search runs it, half of the proposals being
centroid-keeping two-for-two exchanges (each counted as one move). Target: placer's
singles within 1.5 x of the plain kernel's rate.

Run:  python tests/bench/bench_moves.py [--update-readme] [--repeat 3] [--moves 2000000]
"""

from __future__ import annotations

import argparse
import os
import platform
import statistics
import sys
import time

import numpy as np
import plain_kernel  # this script's folder
from readme_block import replace_block

import placer.search._local as local
from placer.search import Problem, compile_problem, orbit_assignment
from placer.search._local import STAGE, caps_none, run_stage

TARGET = 1.5


def _binary(bits: int) -> list[int]:
    return [1, 1, *(2 ** b for b in range(1, bits))]


# (label, rows, cols, counts, linear cap (um) or None)
CASES = [
    ("8-bit cap array 16x16", 16, 16, _binary(8), 1.0),
    ("10-bit cap array 32x32", 32, 32, _binary(10), 1.0),
    ("12-bit cap array 64x64", 64, 64, _binary(12), 1.0),
    ("mirror 4:8:...:32 on 12x12", 12, 12, [4 * k for k in range(1, 9)], None),
]


def _start(rows: int, cols: int, counts: list[int], cap: float | None) -> np.ndarray:
    if cap is not None:
        return plain_kernel.binary_array_start(rows, cols, counts, 0)
    rng = np.random.default_rng(0)
    return rng.permutation(np.repeat(np.arange(len(counts)), counts))


def _ours(comp, start, n_moves: int, seed: int, cap: float | None, singles: bool) -> float:
    dev = orbit_assignment(comp, start.astype(np.int64))
    caps = caps_none()
    if cap is not None:
        caps[STAGE["linear"]] = cap * (1 + 1e-12)
    share = local.TWO_FOR_TWO_SHARE
    local.TWO_FOR_TWO_SHARE = 0 if singles else share
    try:
        t = time.process_time()
        res = run_stage(comp, dev, "quadratic", n_moves, seed, time.monotonic() + 3600, caps,
                        smoothing=local.SMOOTHING)
        return res.tried / (time.process_time() - t)
    finally:
        local.TWO_FOR_TWO_SHARE = share


def _plain(rows, cols, start, n_moves: int, seed: int, cap: float | None) -> float:
    t = time.process_time()
    res = plain_kernel.run(rows, cols, 1.0, start, n_moves, seed,
                           np.inf if cap is None else cap * (1 + 1e-12),
                           lam=local.SMOOTHING, t_end=local.COOLING,
                           g2half=0.01, n_dev=None)
    return res["tried"] / (time.process_time() - t)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--update-readme", action="store_true")
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--moves", type=int, default=2_000_000)
    args = ap.parse_args()
    t_all = time.monotonic()
    rows_out = []
    ok = True
    for label, rows, cols, counts, cap in CASES:
        comp = compile_problem(Problem(tuple(counts), rows, cols))
        start = _start(rows, cols, counts, cap)
        rates: dict[str, list[float]] = {"plain": [], "singles": [], "searched": []}
        for rep in range(args.repeat):           # alternate, so drift hits all alike
            rates["plain"].append(_plain(rows, cols, start, args.moves, rep + 1, cap))
            rates["singles"].append(_ours(comp, start, args.moves, rep + 1, cap, True))
            rates["searched"].append(_ours(comp, start, args.moves, rep + 1, cap, False))
        med = {k: statistics.median(v) / 1e6 for k, v in rates.items()}
        ratio = med["plain"] / med["singles"]
        ok &= ratio <= TARGET
        n_pairs = len(counts) * (len(counts) - 1) // 2
        rows_out.append(f"| {label} | {sum(counts)} | {n_pairs} | {med['plain']:.2f} | "
                        f"{med['singles']:.2f} | {ratio:.2f} | {med['searched']:.2f} |")
    cpus = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count()
    table = "\n".join([
        f"Machine: {platform.machine()}, {cpus} CPUs, Python {platform.python_version()}; "
        f"`python tests/bench/bench_moves.py` ({args.moves} moves a run, median of "
        f"{args.repeat}, alternating; {time.monotonic() - t_all:.0f} s in all).",
        "",
        "| quadratic stage | units | pairs | plain kernel M moves / CPU s | placer, single swaps "
        "| plain / placer | placer as searched (with exchanges) |",
        "|---|---|---|---|---|---|---|",
        *rows_out,
        "",
        f"Target (placer's single swaps within {TARGET} x of the plain kernel's rate): "
        f"{'met' if ok else 'MISSED'}."])
    print(table)
    if args.update_readme:
        replace_block("bench:moves", table)
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
