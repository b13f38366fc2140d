"""The fixed-work estimate (placer/jobs/workload.py) beside the measured run, per case.

    python tests/bench/bench_workload.py [--update-readme]

Each case runs ``arrange --time-limit 0.3`` in a fresh process with the estimate's check
switched off (so that the work it would refuse is measured too); the search stops within
its 0.3 s, and the rest of the wall time is the fixed work the estimate predicts. The
ratio measured / estimated shows how well the model's terms fit this machine: refit the
coefficients in workload.py from this table on a machine of another speed.
"""

from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from tests.bench.readme_block import replace_block  # noqa: E402


def _mos(devices: list[tuple[str, int]], rows: int, extra: str = "") -> str:
    return ("[devices]\n" + "".join(f"{n} = {c}\n" for n, c in devices)
            + f"[array]\nrows = {rows}\n" + extra)


CASES: list[tuple[str, str]] = [
    ("2 devices, 256 units", _mos([("A", 128), ("B", 128)], 16)),
    ("2 devices, 1024 units", _mos([("A", 512), ("B", 512)], 32)),
    ("2 devices, 4096 units", _mos([("A", 2048), ("B", 2048)], 64)),
    ("2 devices, 16 384 units", _mos([("A", 8192), ("B", 8192)], 128)),
    ("8 devices, 16 384 units", _mos([(f"D{i}", 2048) for i in range(8)], 128)),
    ("16 devices, 1024 units", _mos([(f"D{i}", 64) for i in range(16)], 32)),
    ("64 devices, 1024 units", _mos([(f"D{i}", 16) for i in range(64)], 32)),
    ("64 devices, 4096 units", _mos([(f"D{i}", 64) for i in range(64)], 64)),
    ("256 devices, 4096 units", _mos([(f"D{i}", 16) for i in range(256)], 64)),
    ("2048 units, [monte_carlo] 16 samples",
     _mos([("A", 1024), ("B", 1024)], 32, "[monte_carlo]\nsamples = 16\n")),
    ("10-bit capacitor array with its budget",
     "kind = \"cap\"\n[devices]\nCT = 1\n" + "".join(f"C{b} = {2 ** b}\n" for b in range(10))
     + "[array]\nrows = 32\ncolumns = 32\n[electrical]\ntermination = \"CT\"\n"),
]

_RUN = """
import sys
import placer.jobs.workload as w
w.check = lambda *a, **k: None          # measure what the check would refuse, too
sys.argv = ["placer", *sys.argv[1:]]
from placer._entry import main
sys.exit(main())
"""

_WRAP = """
import resource, subprocess, sys, time
t = time.perf_counter()
r = subprocess.run(sys.argv[1:], capture_output=True, text=True)
dt = time.perf_counter() - t
kb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
print(r.returncode, f"{dt:.2f}", kb)
"""


def measure(text: str) -> tuple[int, float, float]:
    """(exit code, wall seconds, peak MB) of one unchecked arrange run."""
    with tempfile.TemporaryDirectory() as tmp:
        spec = Path(tmp) / "s.toml"
        spec.write_text(text)
        out = subprocess.run([sys.executable, "-c", _WRAP, sys.executable, "-c", _RUN,
                              "arrange", str(spec), "--out", str(Path(tmp) / "o"),
                              "--time-limit", "0.3", "--quiet"],
                             capture_output=True, text=True, cwd=tmp).stdout.split()
    return int(out[0]), float(out[1]), int(out[2]) / 1024


def main() -> int:
    from placer.jobs.load import parse_spec
    from placer.jobs.workload import estimate

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--update-readme", action="store_true")
    args = ap.parse_args()
    rows = ["| case | estimated s | measured s | measured / estimated | estimated MB "
            "| measured MB |", "|---|---|---|---|---|---|"]
    t0 = time.perf_counter()
    bad = 0
    for label, text in CASES:
        est = estimate(parse_spec(text, "s.toml"))
        code, wall, mb = measure(text)
        bad += code != 0
        rows.append(f"| {label} | {est.seconds:.1f} | {wall:.1f} | {wall / est.seconds:.2f} "
                    f"| {est.peak_mb:.0f} | {mb:.0f} |")
        print(rows[-1], flush=True)
    block = "\n".join([*rows, "", f"`python tests/bench/bench_workload.py` (`arrange "
                       f"--time-limit 0.3` with the check off, each in a fresh process; "
                       f"{time.perf_counter() - t0:.0f} s in all)."])
    if args.update_readme:
        replace_block("bench:workload", block)
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
