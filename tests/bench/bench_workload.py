"""The fixed-work estimate (placer/jobs/workload.py) beside the measured run, per case.

    python tests/bench/bench_workload.py [--fit] [--update-readme]

Each case runs ``arrange --time-limit 0.3`` in a fresh process with the estimate's check
switched off (so that the work it would refuse is measured too); the search stops within
its share of the 0.3 s, and the rest of the wall time is the fixed work the estimate
predicts. The ratio measured / estimated shows how well the model's terms fit this
machine: refit the coefficients in workload.py from this table on a machine of another
speed. Beside it, the work after the search (from the end of the last core shape's search
to the process's end), which sets the search's share of ``arrange``'s limit: estimated by
``after_search`` and measured; ``--fit`` prints its coefficients fitted to this machine
(least squares on the relative error, non-negative).
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
    ("2 devices, 4 units", "[devices]\nA = 2\nB = 2\n"),
    ("3 devices, 64 units", _mos([("A", 16), ("B", 16), ("C", 32)], 4)),
    ("samples/bias_mirror (with its budget)", "@bias_mirror"),
    ("samples/sar_cdac (with its budget)", "@sar_cdac"),
    ("samples/ref_ladder (with its budget)", "@ref_ladder"),
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

CASES = [(label, (ROOT / "samples" / f"{text[1:]}.toml").read_text() if text[0] == "@"
          else text) for label, text in CASES]

_RUN = """
import atexit, os, sys, time
import placer.jobs.arrange as a
import placer.jobs.workload as w
w.check = lambda *a, **k: None          # measure what the check would refuse, too
ends = []
_shape = a._run_shape
def _timed(*args, **kw):
    out = _shape(*args, **kw)
    ends.append(time.monotonic())       # the search of one core shape is over
    return out
a._run_shape = _timed
atexit.register(lambda: open(os.environ["PLACER_BENCH_AFTER"], "w").write(
    f"{time.monotonic() - ends[-1]:.4f}" if ends else "nan"))
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


def measure(text: str) -> tuple[int, float, float, float]:
    """(exit code, wall seconds, peak MB, seconds after the search) of one unchecked
    arrange run."""
    import os

    with tempfile.TemporaryDirectory() as tmp:
        spec = Path(tmp) / "s.toml"
        spec.write_text(text)
        after = Path(tmp) / "after"
        out = subprocess.run([sys.executable, "-c", _WRAP, sys.executable, "-c", _RUN,
                              "arrange", str(spec), "--out", str(Path(tmp) / "o"),
                              "--time-limit", "0.3", "--quiet"],
                             capture_output=True, text=True, cwd=tmp,
                             env={**os.environ, "PLACER_BENCH_AFTER": str(after)}
                             ).stdout.split()
        return (int(out[0]), float(out[1]), int(out[2]) / 1024,
                float(after.read_text()) if after.is_file() else float("nan"))


def _terms(spec) -> list[float]:
    """The after-search model's terms of ``spec`` (see placer.jobs.workload)."""
    from placer.jobs import workload as w

    units, (nets, links) = spec.n_units, w._nets(spec, True)
    return [1.0, units, units * nets ** 1.5 + links * w._PER_LINK_S / w._AFTER_PER_UNIT_NET_S,
            len(spec.devices) * w._slots(spec),
            (units ** 3 if spec.monte_carlo.samples > 0 else 0),
            (1.0 if spec.electrical is not None else 0.0)]


def main() -> int:
    import numpy as np

    from placer.jobs.load import parse_spec
    from placer.jobs.workload import after_search, estimate

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--update-readme", action="store_true")
    ap.add_argument("--fit", action="store_true",
                    help="also print after-search coefficients fitted to this machine")
    args = ap.parse_args()
    rows = ["| case | estimated s | measured s | measured / estimated | estimated MB "
            "| measured MB | after the search: estimated s | measured s |",
            "|---|---|---|---|---|---|---|---|"]
    t0 = time.perf_counter()
    bad = 0
    terms, afters = [], []
    for label, text in CASES:
        spec = parse_spec(text, "s.toml")
        est = estimate(spec)
        code, wall, mb, after = measure(text)
        bad += code != 0
        terms.append(_terms(spec))
        afters.append(after)
        rows.append(f"| {label} | {est.seconds:.1f} | {wall:.1f} | {wall / est.seconds:.2f} "
                    f"| {est.peak_mb:.0f} | {mb:.0f} | {after_search(spec):.2f} | "
                    f"{after:.2f} |")
        print(rows[-1], flush=True)
    if args.fit:
        from scipy.optimize import nnls

        # relative error: each case weighed by 1 / measured
        a = np.array(terms) / np.array(afters)[:, None]
        coef, _ = nnls(a, np.ones(len(afters)))
        print("after-search coefficients (base, unit, unit x nets^1.5, device x slot, "
              "MC unit^3, electrical budget):", " ".join(f"{c:.3g}" for c in coef))
    block = "\n".join([*rows, "", f"`python tests/bench/bench_workload.py` (`arrange "
                       f"--time-limit 0.3` with the check off, each in a fresh process; "
                       f"{time.perf_counter() - t0:.0f} s in all)."])
    if args.update_readme:
        replace_block("bench:workload", block)
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
