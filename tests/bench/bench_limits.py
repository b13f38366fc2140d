"""The largest inputs placer accepts, and absurd ones it refuses: wall time and peak memory
of the command, each run in a fresh process.

    python tests/bench/bench_limits.py [--update-readme]

The search stops on its time limit at any size; what remains is the fixed work (reading,
scoring the baselines and the result, routing, GDSII, pictures). The largest blocks get
the smallest limit their estimated fixed work allows (placer/jobs/workload.py); the rest
run at ``--time-limit 1``. Refusals must come before any work.
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

# (label, spec text, expected exit code[, time limit])
CASES: list[tuple] = [
    ("65 536 units (the limit), 256 x 256 core + ring, 2 devices (`--time-limit 27`)",
     "[devices]\nA = 32768\nB = 32768\n[array]\nrows = 256\ncolumns = 256\n"
     "dummies = \"ring\"\n", 0, 27),
    ("one row of 1024 fingers (the column limit)",
     "[devices]\nA = 512\nB = 512\n[array]\nrows = 1\ndummies = \"none\"\n", 0),
    ("256 devices (the limit) of 16 units (`--time-limit 23`)",
     "[devices]\n" + "".join(f"D{i} = 16\n" for i in range(256)), 0, 23),
    ("12-bit capacitor array, 64 x 64 + ring, with its budget (`--time-limit 2`)",
     "kind = \"cap\"\n[devices]\nCT = 1\nC0 = 1\n" + "".join(f"C{b} = {2 ** b}\n"
                                                          for b in range(1, 12))
     + "[array]\nrows = 64\ncolumns = 64\ndummies = \"ring\"\n[electrical]\n"
       "termination = \"CT\"\nmc_samples = 200\n", 0, 2),
    ("refused: one row of 32 768 columns",
     "[devices]\nA = 16384\nB = 16384\n[array]\nrows = 1\n", 1),
    ("refused: 1000 devices", "[devices]\n" + "".join(f"D{i} = 1\n" for i in range(1000)), 1),
    ("refused: TOML nested 100 000 deep", "[devices]\nA = 1\n" + "a" + ".a" * 100_000
     + " = 1\n", 1),
    ("refused: Monte Carlo of 1 000 000 samples x 136 pairs",
     "[devices]\n" + "".join(f"D{i} = 1\n" for i in range(17))
     + "[monte_carlo]\nsamples = 1000000\n", 1),
    ("refused: 2048 units with 16 Monte Carlo samples at `--time-limit 0.3`",
     "[devices]\nA = 1024\nB = 1024\n[array]\nrows = 32\n[monte_carlo]\nsamples = 16\n",
     1, 0.3),
    ("refused (memory, at any limit): 256 devices on 256 x 256",
     "[devices]\n" + "".join(f"D{i} = 256\n" for i in range(256))
     + "[array]\nrows = 256\ncolumns = 256\ndummies = \"none\"\n", 1, 86400),
]

def _layout_bombs() -> list[tuple[str, bytes]]:
    """Hand layouts that would expand to far more than the limits, for ``grade``."""
    from tests.helpers import gds_aref, gds_box, gds_records, gds_ref, gds_text

    names = [b"U", b"A", b"B", b"TOP"]
    return [
        ("refused (grade): one 1000 x 400 AREF of a unit",
         gds_records([(b"U", gds_box()), (b"TOP", gds_aref(b"U", 1000, 400))])),
        ("refused (grade): 3 levels of 100 references",
         gds_records([(b"U", gds_box())] + [
             (names[i], b"".join(gds_ref(names[i - 1], k * 2000) for k in range(100)))
             for i in range(1, 4)])),
        ("refused (grade): 4 900 000 text records",
         gds_records([(b"TOP", gds_text(b"AB", 0, 0, 9) * 4_900_000)])),
    ]


_WRAP = """
import resource, subprocess, sys, time
t = time.perf_counter()
r = subprocess.run(sys.argv[1:], capture_output=True, text=True)
dt = time.perf_counter() - t
kb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss
print(r.returncode, f"{dt:.2f}", kb, (r.stderr.strip().splitlines() or [""])[-1][:90])
"""


def measure(text: str, limit: float = 1) -> tuple[int, float, float, str]:
    """(exit code, wall seconds, peak MB, last stderr line) of one arrange run."""
    with tempfile.TemporaryDirectory() as tmp:
        spec = Path(tmp) / "s.toml"
        spec.write_text(text)
        out = subprocess.run([sys.executable, "-c", _WRAP, sys.executable, "-m", "placer",
                              "arrange", str(spec), "--out", str(Path(tmp) / "o"),
                              "--time-limit", f"{limit:g}", "--quiet"],
                             capture_output=True, text=True, cwd=tmp).stdout.split(" ", 3)
    return int(out[0]), float(out[1]), int(out[2]) / 1024, out[3].strip()


def measure_grade(data: bytes) -> tuple[int, float, float, str]:
    """(exit code, wall seconds, peak MB, last stderr line) of grading one GDSII file."""
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "bomb.gds"
        path.write_bytes(data)
        out = subprocess.run([sys.executable, "-c", _WRAP, sys.executable, "-m", "placer",
                              "grade", str(path)],
                             capture_output=True, text=True, cwd=tmp).stdout.split(" ", 3)
    return int(out[0]), float(out[1]), int(out[2]) / 1024, out[3].strip()


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--update-readme", action="store_true")
    args = ap.parse_args()
    rows = ["| input | exit | wall s | peak MB |", "|---|---|---|---|"]
    t0 = time.perf_counter()
    bad = 0
    for label, text, want, *limit in CASES:
        code, wall, mb, last = measure(text, *limit)
        bad += code != want
        rows.append(f"| {label} | {code} | {wall:.1f} | {mb:.0f} |")
        print(rows[-1], last if code else "", flush=True)
    for label, data in _layout_bombs():
        code, wall, mb, last = measure_grade(data)
        bad += code != 1
        rows.append(f"| {label} | {code} | {wall:.1f} | {mb:.0f} |")
        print(rows[-1], last, flush=True)
    block = "\n".join([*rows, "", f"`python tests/bench/bench_limits.py` "
                       f"(`arrange --time-limit 1` unless marked, or `grade` where marked, "
                       f"each in a fresh "
                       f"process; "
                       f"{time.perf_counter() - t0:.0f} s in all)."])
    if args.update_readme:
        replace_block("bench:limits", block)
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
