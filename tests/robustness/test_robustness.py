"""Robustness: damaged inputs, garbage arguments, limits, interruption, reproducibility."""

import hashlib
import os
import signal
import subprocess
import sys
import time

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from placer.cli import cli
from placer.errors import LimitError
from placer.jobs.load import parse_spec
from tests.helpers import ROOT
from tests.robustness import fuzz


@settings(max_examples=40, deadline=None)
@given(st.sampled_from(list(fuzz.READERS)), st.integers(0, 2 ** 32 - 1))
def test_damaged_inputs_end_in_a_clear_message(reader, seed):
    """Every reader, fed truncated, bit-flipped, spliced or length-damaged copies of the
    samples, returns or raises one clear line; never a traceback or a hang."""
    tally = fuzz.reader_cases(reader, 3, seed)
    assert tally["traceback"] == 0 and tally["hang"] == 0, tally


@pytest.mark.slow
@settings(max_examples=20, deadline=None)
@given(st.integers(0, 2 ** 32 - 1))
def test_random_command_lines_never_trace_back_or_lose_files(seed):
    tally, lost = fuzz.cli_cases(3, seed)
    assert tally["traceback"] == 0 and tally["hang"] == 0 and lost == 0, tally


@pytest.mark.parametrize("text, limit", [
    ("[devices]\nA = 1000000000\n", "exceeds the limit of 65536"),
    ("[devices]\nA = 4\n[array]\nrows = 1000\ncolumns = 1000\n", "exceed the limit of 262144"),
    ("[devices]\nA = 40000\nB = 40000\n", "units in all exceed the limit"),
])
def test_absurd_sizes_are_refused_early_with_the_limit_named(text, limit):
    with pytest.raises(LimitError, match=limit):
        parse_spec(text, "s.toml")


def test_huge_file_is_refused_before_reading(tmp_path, runner):
    big = tmp_path / "big.txt"
    with open(big, "wb") as fh:           # sparse: 1 GB of size, no real disk use
        fh.truncate(1 << 30)
    result = runner.invoke(cli, ["grade", str(big)])
    assert result.exit_code == 1 and "the limit for a layout is" in result.output


def _run(args, cwd, **kw):
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    return subprocess.Popen([sys.executable, "-m", "placer", *args], cwd=cwd, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, **kw)


@pytest.mark.slow
@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM])
def test_interrupting_arrange_keeps_the_best_so_far_and_loses_nothing(tmp_path, sig):
    """A signal during the search stops it; the best arrangement so far is written whole,
    or, if it came before the search, nothing is; no temporary file is left."""
    spec = tmp_path / "big.toml"
    counts = [1, 1, *(2 ** b for b in range(1, 10))]
    names = "\n".join(f"D{i} = {c}" for i, c in enumerate(counts))
    spec.write_text(f'[devices]\n{names}\n[array]\nrows = 32\ncolumns = 32\n'
                    'dummies = "ring"\n')
    out = tmp_path / "out"
    proc = _run(["arrange", str(spec), "--out", str(out), "--quiet"], tmp_path)
    # ready: the command's staging folder exists once its handlers are in place and the
    # search is about to start (however busy the machine); then let the search run a while
    deadline = time.monotonic() + 120
    while not (out.is_dir() and any(p.name.startswith(".placer-staging-")
                                    for p in out.iterdir())):
        assert proc.poll() is None and time.monotonic() < deadline, "arrange never started"
        time.sleep(0.02)
    time.sleep(1.0)
    proc.send_signal(sig)
    stdout, stderr = proc.communicate(timeout=120)
    assert b"Traceback" not in stderr, stderr.decode()
    leftovers = [p.name for p in out.iterdir() if p.name.startswith(".")] if out.exists() \
        else []
    assert leftovers == []
    assert proc.returncode in (0, 130)
    if (out / "pattern.txt").exists():
        from placer.io.pattern import parse_pattern

        text = (out / "pattern.txt").read_text()
        assert sum(parse_pattern(text).counts()) == 1024
        assert "stopped: interrupted" in stdout.decode() or proc.returncode == 130
        for name in ("report.json", "pattern.gds", "pattern.png", "pattern.svg"):
            assert (out / name).stat().st_size > 0
    else:
        assert proc.returncode == 130


@pytest.mark.slow
def test_same_inputs_and_seed_give_byte_identical_outputs(tmp_path, runner):
    spec = ROOT / "samples" / "sar_cdac.toml"
    digests = []
    for name in ("a", "b"):
        out = tmp_path / name
        result = runner.invoke(cli, ["arrange", str(spec), "--out", str(out), "--seed", "3",
                                     "--quiet"])
        assert result.exit_code == 0, result.output
        digests.append({p.name: hashlib.sha256(p.read_bytes()).hexdigest()
                        for p in sorted(out.iterdir())})
    assert digests[0] == digests[1]
    assert {"pattern.txt", "report.json", "pattern.gds", "pattern.svg"} <= set(digests[0])


def test_source_date_epoch_sets_the_gds_timestamp(tmp_path, monkeypatch):
    from placer.layout.gdswrite import gds_timestamp

    monkeypatch.setenv("SOURCE_DATE_EPOCH", "1700000000")
    assert gds_timestamp().year == 2023


@pytest.mark.parametrize("name", ["../x", "a/b", "CON", "x" * 30, "1abc"])
def test_unsafe_names_never_become_files_or_cells(name):
    with pytest.raises(Exception, match="invalid|reserved|longer"):
        parse_spec(f'name = "{name}"\n[devices]\nA = 1\n', "s.toml")


def test_16384_unit_search_keeps_correlation_memory_linear():
    """A 14-bit array (16384 units): the correlated field is held as O(slots x devices)
    numbers (the FFT products), never the slots' full correlation matrix, which alone
    would take 16384^2 x 8 bytes = 2.1 GB. The search runs in a child process whose peak
    resident memory is read back."""
    import subprocess
    import sys

    code = ("import resource\n"
            "from placer.search import Problem, search\n"
            "p = Problem((1, 1, *(2 ** b for b in range(1, 14))), 128, 128)\n"
            "search(p, seed=0, time_limit_s=2.0)\n"
            "print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss)\n")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True, timeout=300)
    peak_kb = int(out.stdout.split()[-1])
    assert peak_kb < 1_000_000, peak_kb
