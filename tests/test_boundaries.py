"""Where placer meets its callers: the compiled core's arguments, a missing compiled core,
limits checked where the input enters, and signal handlers put back after a command.

Each of these once ended in a crash, a traceback or a leaked handler."""

from __future__ import annotations

import signal
import subprocess
import sys
import textwrap

import numpy as np
import pytest

from placer.cli import cli
from tests.helpers import ROOT, SAMPLES, refused, run_placer, spec_file


def _python(code: str) -> subprocess.CompletedProcess[str]:
    """``code`` in a fresh interpreter: a crash there fails the test, not the test run."""
    return subprocess.run([sys.executable, "-c", textwrap.dedent(code)], cwd=ROOT, text=True,
                          capture_output=True, timeout=120)


def test_keys_of_refuses_device_ids_outside_the_problem():
    """An assignment naming a device the problem does not have is a ValueError, not a read
    outside the compiled core's arrays (it was a segmentation fault)."""
    res = _python("""
        from placer.search import Problem, keys_of
        try:
            keys_of(Problem((2, 2), 1, 4), [0, 100000, 100000, 0])
        except ValueError as err:
            print("refused:", err)
    """)
    assert res.returncode == 0, (res.returncode, res.stderr)
    assert "refused: slot 1 holds 100000" in res.stdout


@pytest.mark.parametrize("change, words", [
    ("dev_of[1] = 7", "dev_of[1] = 7 is outside [0, 3)"),
    ("pairs[0] = -1", "pairs[0] = -1 is outside [0, 2)"),
    ("dev_of = dev_of.astype(np.float64)", "dev_of: expected int64 items"),
    ("orb_m = orb_m.astype(np.float64)", "orb_m: expected int64 items"),
    ("iparams[1] = -5", "n_dev = -5 is outside"),
])
def test_the_compiled_core_checks_types_and_indices_at_its_boundary(change, words):
    """The compiled ``keys`` entry validates every buffer's type and every index it will
    follow before touching them: a clean ValueError naming the argument."""
    res = _python(f"""
        import numpy as np
        from placer.search import Problem, compile_problem, orbit_assignment
        from placer.search import _native
        comp = compile_problem(Problem((2, 2), 1, 4))
        dev_of = orbit_assignment(comp, np.array([0, 1, 1, 0]))
        orb_m = np.ascontiguousarray(comp.orb_m)
        pairs = np.ascontiguousarray(comp.pairs).copy()
        iparams = np.array([comp.n_orb, 2, len(pairs), 2, comp.n_units], dtype=np.int64)
        {change}
        try:
            _native.keys(orb_m, np.ascontiguousarray(comp.orb_h), comp.counts, pairs,
                          dev_of, np.ascontiguousarray(comp.base), np.zeros(4), iparams,
                          np.zeros((len(pairs), 4)))
            print("accepted")
        except ValueError as err:
            print("refused:", err)
    """)
    assert res.returncode == 0, (res.returncode, res.stderr)
    assert "refused:" in res.stdout and words in res.stdout, res.stdout


def test_a_missing_compiled_core_is_one_line(tmp_path):
    """Without the compiled module, arrange says so in one line (exit 1), not an
    ImportError traceback; grade still works."""
    spec = SAMPLES / "bias_mirror.toml"
    code = """
        import sys
        sys.modules["placer.search._native"] = None      # as if it was never built
        from placer._entry import main
        sys.argv = ["placer", *sys.argv[1:]]
        main()
    """
    base = [sys.executable, "-c", textwrap.dedent(code)]
    res = subprocess.run([*base, "arrange", str(spec), "--out", str(tmp_path / "o"),
                          "--time-limit", "1"], cwd=ROOT, text=True, capture_output=True,
                         timeout=120)
    refused(res, "compiled search core", "C compiler")
    assert not (tmp_path / "o").exists()
    graded = subprocess.run([*base, "grade", str(SAMPLES / "bias_mirror_hand.txt"), "--spec",
                             str(spec)], cwd=ROOT, text=True, capture_output=True, timeout=120)
    assert graded.returncode == 0, graded.stderr


def test_row_bands_beyond_their_device_limit_are_refused_where_the_spec_is_read(tmp_path):
    """63 devices with a row band passed validation and then failed inside the search with
    a traceback; the spec reader refuses them in one line."""
    names = [f"D{i}" for i in range(63)]
    devices = "\n".join(f"{n} = 1" for n in names)
    listed = ", ".join(f'"{n}"' for n in names)
    spec = spec_file(tmp_path, f"[devices]\n{devices}\n[array]\nrows = 8\ncolumns = 8\n"
                               f"[groups.all]\ndevices = [{listed}]\n"
                               "rows = [0, 1, 2, 3, 4, 5, 6, 7]\n")
    res = run_placer(["arrange", str(spec), "--out", "o", "--time-limit", "1"], tmp_path)
    refused(res, "row bands", "at most 61 devices", "has 63")


def test_a_command_run_in_process_puts_the_signal_handlers_back(tmp_path, runner):
    """Run through click's test runner (as the API and test suites do), a command leaves
    SIGINT and SIGTERM as it found them."""
    def mine(signum, frame):
        raise AssertionError("not to be called")

    old = {s: signal.signal(s, mine) for s in (signal.SIGINT, signal.SIGTERM)}
    try:
        result = runner.invoke(cli, ["arrange", str(SAMPLES / "bias_mirror.toml"), "--out",
                                     str(tmp_path / "o"), "--time-limit", "1", "--quiet"])
        assert result.exit_code == 0, result.output
        assert signal.getsignal(signal.SIGINT) is mine
        assert signal.getsignal(signal.SIGTERM) is mine
        result = runner.invoke(cli, ["grade", str(SAMPLES / "bias_mirror_hand.txt"), "--spec",
                                     str(SAMPLES / "bias_mirror.toml")])
        assert result.exit_code == 0, result.output
        assert signal.getsignal(signal.SIGINT) is mine
        assert signal.getsignal(signal.SIGTERM) is mine
    finally:
        for s, h in old.items():
            signal.signal(s, h)


def test_public_assignment_boundary_takes_integer_arrays_only():
    from placer.search import Problem, keys_of

    with pytest.raises(ValueError, match="4 integers"):
        keys_of(Problem((2, 2), 1, 4), np.array([0.0, 1.0, 1.0, 0.0]))
