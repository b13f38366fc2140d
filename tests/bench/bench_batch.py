"""What a chip's worth of matched blocks costs: ``placer batch`` over the eight samples,
three copies each (24 blocks), at ``--time-limit 2``, one block at a time and as many as
the machine has cores, in one run.

    python tests/bench/bench_batch.py [--update-readme]
"""

from __future__ import annotations

import argparse
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from tests.bench.readme_block import replace_block  # noqa: E402

COPIES = 3
TIME_LIMIT = 2.0


def run(specs: Path, out: Path, jobs: int) -> float:
    t0 = time.perf_counter()
    res = subprocess.run([sys.executable, "-m", "placer", "batch", str(specs), "--out",
                          str(out), "--time-limit", f"{TIME_LIMIT:g}", "--jobs", str(jobs),
                          "--quiet"], capture_output=True, text=True, cwd=out.parent,
                         env={**os.environ, "PYTHONPATH": str(ROOT)})
    if res.returncode != 0:
        raise SystemExit(f"batch failed:\n{res.stdout}\n{res.stderr}")
    return time.perf_counter() - t0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--update-readme", action="store_true")
    args = ap.parse_args()
    cores = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else 1
    with tempfile.TemporaryDirectory() as tmp:
        specs = Path(tmp) / "specs"
        specs.mkdir()
        samples = sorted((ROOT / "samples").glob("*.toml"))
        for k in range(COPIES):
            for s in samples:
                shutil.copy(s, specs / f"{s.stem}_{k}.toml")
        n = len(samples) * COPIES
        rows = ["| blocks | jobs | wall s | s per block |", "|---|---|---|---|"]
        for jobs in sorted({1, cores}):
            wall = run(specs, Path(tmp) / f"out{jobs}", jobs)
            rows.append(f"| {n} | {jobs} | {wall:.1f} | {wall / n:.2f} |")
            print(rows[-1], flush=True)
    block = "\n".join([*rows, "", f"`python tests/bench/bench_batch.py` (`batch --time-limit "
                       f"{TIME_LIMIT:g}` over the samples, {COPIES} copies each, on "
                       f"{cores} cores)."])
    if args.update_readme:
        replace_block("bench:batch", block)
    return 0


if __name__ == "__main__":
    sys.exit(main())
