"""How placer spends a time budget: start-up, short limits, longer limits, the whole run.

    python tests/bench/bench_budget.py [--update-readme]

Every command runs in a fresh process (wall time as a user sees it):

* start-up: ``placer --version``, ``placer --help`` and a whole ``arrange`` of 4 units
  (median of 5 runs each);
* short limits: at ``--time-limit 0.5`` the 8-bit capacitor array (256 units, 16 x 16 + a
  ring) against its best-known quadratic error (tests/bench/optima.json) and a 36-unit
  mirror of eight devices (1:2:...:8 on 6 x 6) against the linear error a 10 s run of the
  same seed reaches, three seeds each;
* more time: a 144-unit mirror 4:8:...:32 on 12 x 12 at ``--time-limit 10`` on three
  seeds, against its best-known quadratic error;
* the whole run: wall time of ``arrange`` beside its ``--time-limit`` at 4 to 4096 units.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from tests.bench.cases import CASES, ratio  # noqa: E402
from tests.bench.readme_block import replace_block  # noqa: E402

OPTIMA = json.loads((ROOT / "tests" / "bench" / "optima.json").read_text())
CAP256 = "8-bit cap array 16x16 + ring"
MIRROR144 = "mirror 4:8:...:32 on 12x12"
SEEDS = (1, 2, 3)


def _spec(devices: list[int], rows: int | None = None, cols: int | None = None,
          kind: str = "mos", dummies: str = "none") -> str:
    text = f'kind = "{kind}"\n[devices]\n' + ratio(devices) + "\n"
    if rows is not None:
        text += f'[array]\nrows = {rows}\ncolumns = {cols}\ndummies = "{dummies}"\n'
    return text


def _run(args: list[str]) -> float:
    t0 = time.perf_counter()
    subprocess.run([sys.executable, "-m", "placer", *args], check=True,
                   capture_output=True, cwd=ROOT)
    return time.perf_counter() - t0


def _arrange(text: str, limit: float, seed: int = 0) -> tuple[float, dict]:
    with tempfile.TemporaryDirectory() as tmp:
        spec = Path(tmp) / "b.toml"
        spec.write_text(text)
        wall = _run(["arrange", str(spec), "--out", str(Path(tmp) / "o"), "--time-limit",
                     str(limit), "--seed", str(seed), "--quiet"])
        return wall, json.loads((Path(tmp) / "o" / "report.json").read_text())


def _median_wall(args_of: object, n: int = 5) -> float:
    walls = []
    for _ in range(n):
        with tempfile.TemporaryDirectory() as tmp:
            walls.append(_run(args_of(tmp)))          # type: ignore[operator]
    return statistics.median(walls)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--update-readme", action="store_true")
    args = ap.parse_args()
    t_all = time.perf_counter()
    out: list[str] = []

    # start-up
    with tempfile.TemporaryDirectory() as keep:
        four = Path(keep) / "four.toml"
        four.write_text(_spec([2, 2]))
        rows = [("`placer --version`", _median_wall(lambda _t: ["--version"])),
                ("`placer --help`", _median_wall(lambda _t: ["--help"])),
                ("`placer arrange` of 4 units (2 + 2), every output",
                 _median_wall(lambda t: ["arrange", str(four), "--out", str(Path(t) / "o"),
                                         "--quiet"]))]
    out += ["| start-up | wall s (median of 5) |", "|---|---|"]
    out += [f"| {label} | {wall:.2f} |" for label, wall in rows]
    print("\n".join(out), flush=True)

    # short limits
    cap256 = next(text for label, text, _ in CASES if label == CAP256)
    best256 = OPTIMA[CAP256]["quadratic_ppm"]
    m36 = _spec([1, 2, 3, 4, 5, 6, 7, 8], 6, 6)
    out += ["", "| at `--time-limit 0.5` | seed | wall s | moves | linear um | quad ppm | "
            "against |", "|---|---|---|---|---|---|---|"]
    for seed in SEEDS:
        wall, rep = _arrange(cap256, 0.5, seed)
        k = rep["keys"]
        out.append(f"| {CAP256} | {seed} | {wall:.2f} | {rep['moves']} | "
                   f"{k['linear_um']:.4g} | {k['quadratic_ppm']:.5g} | "
                   f"{k['quadratic_ppm'] / best256:.4f} x best known |")
        print(out[-1], flush=True)
    for seed in SEEDS:
        wall, rep = _arrange(m36, 0.5, seed)
        _, ref = _arrange(m36, 10.0, seed)
        k, lin10 = rep["keys"], ref["keys"]["linear_um"]
        out.append(f"| mirror 1:2:...:8 on 6x6 | {seed} | {wall:.2f} | {rep['moves']} | "
                   f"{k['linear_um']:.4g} | {k['quadratic_ppm']:.5g} | linear "
                   f"{'=' if abs(k['linear_um'] - lin10) < 1e-9 else '>'} {lin10:.4g} "
                   "at 10 s |")
        print(out[-1], flush=True)

    # more time
    m144 = _spec([4, 8, 12, 16, 20, 24, 28, 32], 12, 12)
    best144 = OPTIMA[MIRROR144]["quadratic_ppm"]
    out += ["", "| at `--time-limit 10` | seed | wall s | search | quad ppm | against |",
            "|---|---|---|---|---|---|"]
    for seed in SEEDS:
        wall, rep = _arrange(m144, 10.0, seed)
        q = rep["keys"]["quadratic_ppm"]
        out.append(f"| {MIRROR144} | {seed} | {wall:.2f} | {rep['stopped']} | {q:.6g} | "
                   f"{q / best144:.5f} x best known |")
        print(out[-1], flush=True)

    # the whole run
    out += ["", "| whole `arrange` | units | `--time-limit` s | wall s (median of 3) | "
                "wall - limit s |", "|---|---|---|---|---|"]
    sizes = [("mirror 1:1", [2, 2]), ("mirror 1:2:4:9", [4, 8, 16, 36]),
             ("mirror 1:1:2", [64, 64, 128]), ("mirror 1:1:2", [256, 256, 512]),
             ("mirror 1:1:2", [1024, 1024, 2048])]
    for label, counts in sizes:
        for limit in (2.0, 10.0):
            # the median of three runs: one run on a shared machine is noisy
            wall = statistics.median(_arrange(_spec(counts), limit)[0] for _ in range(3))
            out.append(f"| {label} | {sum(counts)} | {limit:g} | {wall:.2f} | "
                       f"{wall - limit:+.2f} |")
            print(out[-1], flush=True)

    head = (f"Machine: {platform.machine()}, {os.cpu_count()} CPUs, Python "
            f"{platform.python_version()}; `python tests/bench/bench_budget.py` "
            f"({time.perf_counter() - t_all:.0f} s in all).")
    table = head + "\n\n" + "\n".join(out)
    print(table)
    if args.update_readme:
        replace_block("bench:budget", table)
    return 0


if __name__ == "__main__":
    sys.exit(main())
