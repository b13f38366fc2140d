"""Robustness run: damaged inputs for every reader and garbage for the command line.

Each case must end in a clear one-line message with a documented exit code, within a
time bound, never in a traceback or a hang, and must leave every existing file intact.

    python -m tests.robustness.fuzz [--cases 300] [--seed 0] [--update-readme]

prints, per reader, the cases tried and how they ended; the README quotes that table.
"""

from __future__ import annotations

import argparse
import hashlib
import os
import shutil
import signal
import sys
import tempfile
import time
from collections import Counter
from collections.abc import Callable
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from placer.errors import PlacerError
from tests.bench.readme_block import replace_block

ROOT = Path(__file__).resolve().parents[2]
SAMPLES = ROOT / "samples"
TIME_BOUND_S = 20


class Hang(Exception):
    pass


@contextmanager
def time_bound(seconds: int):
    def handler(signum, frame):
        raise Hang

    old = signal.signal(signal.SIGALRM, handler)
    signal.alarm(seconds)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, old)


def classify(fn: Callable[[], object]) -> str:
    """'ok', 'clear' (a one-line PlacerError), 'traceback' or 'hang'."""
    try:
        with time_bound(TIME_BOUND_S):
            fn()
        return "ok"
    except Hang:
        return "hang"
    except PlacerError as err:
        msg = str(err)
        return "clear" if msg and "\n" not in msg else "traceback"
    except Exception:  # noqa: BLE001 - anything else is what the run is looking for
        return "traceback"


# ------------------------------------------------------------------ mutations

def mutate(data: bytes, rng: np.random.Generator, gds: bool = False) -> bytes:
    """Truncate, flip bits, splice, or (GDSII) damage a record's length field."""
    out = bytearray(data)
    kind = int(rng.integers(0, 4 if gds else 3))
    if kind == 0 and len(out) > 1:
        out = out[: int(rng.integers(0, len(out)))]
    elif kind == 1:
        for _ in range(int(rng.integers(1, 8))):
            if out:
                out[int(rng.integers(0, len(out)))] ^= 1 << int(rng.integers(0, 8))
    elif kind == 2:
        a, b = sorted(int(x) for x in rng.integers(0, len(out) + 1, 2))
        junk = bytes(rng.integers(0, 256, int(rng.integers(0, 16)), dtype=np.uint8))
        out = out[:a] + junk + out[b:]
    else:
        # walk the records and damage one length field
        starts, pos = [], 0
        while pos + 4 <= len(out):
            starts.append(pos)
            length = int.from_bytes(out[pos:pos + 2], "big")
            if length < 4:
                break
            pos += length
        if starts:
            at = starts[int(rng.integers(0, len(starts)))]
            out[at:at + 2] = int(rng.integers(0, 65536)).to_bytes(2, "big")
    return bytes(out)


def _spec_case(data: bytes, tmp: Path) -> Callable[[], object]:
    from placer.jobs.load import load_spec

    path = tmp / "fuzz.toml"
    path.write_bytes(data)
    return lambda: load_spec(path)


def _pattern_case(data: bytes, tmp: Path) -> Callable[[], object]:
    from placer.io.pattern import read_pattern

    path = tmp / "fuzz.txt"
    path.write_bytes(data)
    return lambda: read_pattern(path)


def _layout_case(data: bytes, tmp: Path, suffix: str) -> Callable[[], object]:
    from placer.io.handlayout import read_layout
    from placer.jobs.load import default_spec
    from placer.model.grade import grade_pattern

    path = tmp / f"fuzz{suffix}"
    path.write_bytes(data)

    def run() -> None:
        rec = read_layout(path)
        p = rec.pattern
        grade_pattern(p, default_spec("fuzz", p.devices, p.counts()))

    return run


READERS = {
    "spec (TOML)": ("bias_mirror.toml", _spec_case, False),
    "pattern text": ("bias_mirror_hand.txt", _pattern_case, False),
    "CSV of unit centres": ("bias_mirror_hand.csv", lambda d, t: _layout_case(d, t, ".csv"),
                            False),
    "GDSII importer": ("bias_mirror_hand.gds", lambda d, t: _layout_case(d, t, ".gds"), True),
}


def reader_cases(name: str, n: int, seed: int) -> Counter[str]:
    sample, make, gds = READERS[name]
    data = (SAMPLES / sample).read_bytes()
    rng = np.random.default_rng(seed)
    tally: Counter[str] = Counter()
    with tempfile.TemporaryDirectory() as tmp:
        for _ in range(n):
            tally[classify(make(mutate(data, rng, gds), Path(tmp)))] += 1
    return tally


# ------------------------------------------------------------------ command line

_OPTIONS = {
    "grade": ["--spec", "--json", "--budget-plot", "--sensitivity-plot", "--cell", "--map",
              "--dummy-cell", "--layers"],
    "arrange": ["--seed", "--candidates", "--method", "--quiet", "--force", "--time-limit"],
    "draw": ["--spec", "--template", "--layers", "--gradient", "--force"],
    "compare": ["--seed", "--force", "--time-limit"],
    "repair": ["--spec", "--max-swaps", "--seed", "--force", "--cell", "--map"],
}
_VALUES = ["-1", "0", "0.2", "3", "1e9", "nan", "abc", "A=B", "MREF", "x.png", "x.txt",
           "milp", "auto", "", "--", "-x"]


def cli_case(rng: np.random.Generator, work: Path,
             exits: Counter[int] | None = None) -> Callable[[], object]:
    """One command line: a real command and file most of the time, options and values
    drawn at random (valid or not), sometimes pure garbage."""
    from click.testing import CliRunner

    from placer.cli import cli

    files = [str(work / n) for n in ("bias_mirror.toml", "bias_mirror_hand.txt",
                                     "bias_mirror_hand.gds", "bias_mirror_hand.csv",
                                     "missing.toml")]

    def pick(seq: list[str]) -> str:
        return seq[int(rng.integers(0, len(seq)))]

    if rng.random() < 0.1:
        argv = [pick(_VALUES + files + list(_OPTIONS)) for _ in range(int(rng.integers(0, 6)))]
    else:
        command = pick(list(_OPTIONS))
        argv = [command, pick(files)]
        if command != "grade" and rng.random() < 0.9:
            argv += ["--out", f"out/{int(rng.integers(0, 4))}"]
        for _ in range(int(rng.integers(0, 4))):
            option = pick(_OPTIONS[command])
            argv.append(option)
            if option not in ("--json", "--quiet", "--force", "--gradient"):
                argv.append(pick(_VALUES + files))
    if any(c in argv for c in ("arrange", "compare", "repair")):
        argv += ["--time-limit", "2"]

    def run() -> None:
        old = os.getcwd()
        os.chdir(work)
        try:
            result = CliRunner().invoke(cli, argv, catch_exceptions=True)
        finally:
            os.chdir(old)
        if exits is not None:
            exits[result.exit_code] += 1
        if result.exception is not None and not isinstance(result.exception, SystemExit):
            raise RuntimeError(f"{argv}: {result.exception!r}")
        if result.exit_code not in (0, 1, 2) or "Traceback" in result.output:
            raise RuntimeError(f"{argv}: exit {result.exit_code}")
        if result.exit_code == 1 and not any(ln.startswith("Error: ")
                                              for ln in result.output.splitlines()):
            raise RuntimeError(f"{argv}: exit 1 without an Error: line")

    return run


def _digest(folder: Path, names: list[str]) -> dict[str, str]:
    return {n: hashlib.sha256((folder / n).read_bytes()).hexdigest() for n in names}


def cli_cases(n: int, seed: int, exits: Counter[int] | None = None
              ) -> tuple[Counter[str], int]:
    rng = np.random.default_rng(seed)
    tally: Counter[str] = Counter()
    lost = 0
    with tempfile.TemporaryDirectory() as tmp:
        work = Path(tmp)
        names = ["bias_mirror.toml", "bias_mirror_hand.txt", "bias_mirror_hand.gds",
                 "bias_mirror_hand.csv"]
        for name in names:
            shutil.copy(SAMPLES / name, work / name)
        before = _digest(work, names)
        for _ in range(n):
            tally[classify(cli_case(rng, work, exits))] += 1
            if _digest(work, names) != before:
                lost += 1
                before = _digest(work, names)
    return tally, lost


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cases", type=int, default=300)
    ap.add_argument("--cli-cases", type=int, default=150)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--update-readme", action="store_true")
    args = ap.parse_args()
    t0 = time.monotonic()
    rows = ["| input | cases | read fine | clear error (exit 1/2) | tracebacks | hangs |"
            " files lost |", "|---|---|---|---|---|---|---|"]
    bad = 0
    for i, name in enumerate(READERS):
        t = reader_cases(name, args.cases, args.seed + i)
        rows.append(f"| {name} | {sum(t.values())} | {t['ok']} | {t['clear']} | "
                    f"{t['traceback']} | {t['hang']} | 0 |")
        bad += t["traceback"] + t["hang"]
    exits: Counter[int] = Counter()
    t, lost = cli_cases(args.cli_cases, args.seed + 99, exits)
    rows.append(f"| command line (random arguments) | {sum(t.values())} | exit 0: {exits[0]} | "
                f"exit 1: {exits[1]}, exit 2: {exits[2]} | {t['traceback']} | {t['hang']} | "
                f"{lost} |")
    bad += t["traceback"] + t["hang"] + lost
    rows.append("")
    rows.append(f"`python -m tests.robustness.fuzz --cases {args.cases} --cli-cases "
                f"{args.cli_cases} --seed {args.seed}`: {time.monotonic() - t0:.0f} s; per-case "
                f"bound {TIME_BOUND_S} s.")
    table = "\n".join(rows)
    print(table)
    if args.update_readme:
        replace_block("robustness", table)
    return 1 if bad else 0


if __name__ == "__main__":
    sys.exit(main())
