"""Every command keeps the set-or-nothing promise: an interrupt (SIGINT or SIGTERM) at
any moment leaves the previous outputs or the whole new set, never a mix; a write the
system cuts short is an error, not a file; inputs are read with a bound.

Each test here failed before the mechanism it guards (signals held during the move-in,
SIGTERM taken like Ctrl-C by every command and at start-up, search workers ended with
their parent, the GDSII stream checked whole, regular files only)."""

from __future__ import annotations

import os
import resource
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from placer.cli import cli
from placer.io import staging
from tests.helpers import (
    ROOT,
    SAMPLES,
    gds_box,
    gds_records,
    refused,
    run_placer,
    spec_file,
)

HAND = SAMPLES / "bias_mirror_hand.txt"
MIRROR = SAMPLES / "bias_mirror.toml"


def _interrupt_on_first_move(monkeypatch, sig: int) -> None:
    """The first file of the move-in sends ``sig`` to this process."""
    real = os.replace
    sent = []

    def replace(src, dst, *a, **k):
        # the move-in: from the staging folder into the output folder (staging a file
        # also ends in a replace, within the staging folder)
        if not sent and ".placer-staging-" in str(src) and ".placer-staging-" not in str(dst):
            sent.append(sig)
            os.kill(os.getpid(), sig)
        return real(src, dst, *a, **k)

    monkeypatch.setattr(staging.os, "replace", replace)


_COMMANDS = {
    "arrange": (["arrange", str(MIRROR), "--time-limit", "1", "--quiet"],
                ["budget.png", "pattern.gds", "pattern.png", "pattern.sp", "pattern.svg",
                 "pattern.txt", "report.json"]),
    "draw": (["draw", str(HAND), "--spec", str(MIRROR)],
             ["bias_mirror_hand.gds", "bias_mirror_hand.png", "bias_mirror_hand.svg"]),
    "repair": (["repair", str(HAND), "--spec", str(MIRROR), "--time-limit", "2"],
               ["repair.json", "repaired.gds", "repaired.png", "repaired.svg",
                "repaired.txt"]),
    "compare": (["compare", str(MIRROR), "--time-limit", "1"],
                ["bias_mirror-compare.pdf", "bias_mirror-compare.png"]),
    "lesson": (["lesson", str(MIRROR), "--time-limit", "1"], ["bias_mirror-lesson.html"]),
}


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM])
@pytest.mark.parametrize("command", list(_COMMANDS))
def test_a_signal_during_the_move_in_leaves_the_whole_set(tmp_path, runner, monkeypatch,
                                                          sig, command):
    """Every command: SIGINT or SIGTERM while its files move in leaves the whole set and
    says so, exit 130 (draw and repair left a half set and said 'nothing written')."""
    out = tmp_path / "o"
    args, expected = _COMMANDS[command]
    _interrupt_on_first_move(monkeypatch, sig)
    result = runner.invoke(cli, [*args, "--out", str(out)])
    assert result.exit_code == 130, result.output
    names = sorted(p.name for p in out.iterdir())
    assert names == expected                    # the whole set, and nothing staged left
    assert "are complete" in result.output
    assert "nothing written" not in result.output


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM])
def test_grades_two_pictures_move_in_together(tmp_path, runner, monkeypatch, sig):
    """Both of grade's pictures (--sensitivity-plot, --budget-plot): an interrupt while they move
    in leaves both (grade wrote one picture, then the interrupt, and none of the other)."""
    pictures = [tmp_path / "units.svg", tmp_path / "budget.png"]
    real, sent = os.replace, []

    def replace(src, dst, *a, **k):
        if not sent and Path(dst) in pictures:      # the first picture to land
            sent.append(sig)
            os.kill(os.getpid(), sig)
        return real(src, dst, *a, **k)

    monkeypatch.setattr(os, "replace", replace)
    result = runner.invoke(cli, ["grade", str(HAND), "--spec", str(MIRROR),
                                 "--sensitivity-plot", str(pictures[0]),
                                 "--budget-plot", str(pictures[1])])
    assert result.exit_code == 130, result.output
    assert all(p.is_file() and p.stat().st_size > 1000 for p in pictures)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["budget.png", "units.svg"]
    assert "are complete" in result.output


def test_with_force_a_folder_in_the_way_changes_nothing(tmp_path, runner):
    """--force with a folder where a file of the set goes: refused before any file is
    replaced (the .gds and .png were replaced, then the .svg failed)."""
    out = tmp_path / "o"
    args = ["draw", str(HAND), "--spec", str(MIRROR), "--out", str(out)]
    assert runner.invoke(cli, args).exit_code == 0
    before = {p.name: p.read_bytes() for p in out.iterdir()}
    (out / "bias_mirror_hand.svg").unlink()
    (out / "bias_mirror_hand.svg").mkdir()
    result = runner.invoke(cli, [*args, "--force"])
    assert result.exit_code == 1 and "is a folder" in result.output
    for name in ("bias_mirror_hand.gds", "bias_mirror_hand.png"):
        assert (out / name).read_bytes() == before[name]


def test_a_dangling_link_is_not_replaced_without_force(tmp_path, runner):
    out = tmp_path / "o"
    out.mkdir()
    (out / "pattern.txt").symlink_to(tmp_path / "nowhere")
    result = runner.invoke(cli, ["arrange", str(MIRROR), "--out", str(out), "--time-limit",
                                 "1", "--quiet"])
    assert result.exit_code == 1 and "pattern.txt already exists" in result.output
    assert (out / "pattern.txt").is_symlink()


def test_force_keeps_a_users_own_file_that_only_looks_like_an_output(tmp_path, runner):
    out = tmp_path / "o"
    args = ["arrange", str(MIRROR), "--out", str(out), "--time-limit", "1", "--quiet"]
    assert runner.invoke(cli, args).exit_code == 0
    (out / "candidate-notes.txt").write_text("mine")
    assert runner.invoke(cli, [*args, "--force"]).exit_code == 0
    assert (out / "candidate-notes.txt").read_text() == "mine"


def _wait_for_staging(proc: subprocess.Popen, out: Path) -> None:
    deadline = time.monotonic() + 120
    while not (out.is_dir() and any(p.name.startswith(".placer-staging-")
                                    for p in out.iterdir())):
        assert proc.poll() is None and time.monotonic() < deadline, proc.stderr.read()
        time.sleep(0.02)


def _children(pid: int) -> list[int]:
    try:
        text = Path(f"/proc/{pid}/task/{pid}/children").read_text()
    except OSError:
        return []
    return [int(x) for x in text.split()]


def _gone(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().split()[2]
    except OSError:
        return True
    return state == "Z"


@pytest.mark.skipif(not Path("/proc").is_dir(), reason="reads /proc")
@pytest.mark.parametrize("sig", [signal.SIGINT,
                                 pytest.param(signal.SIGTERM, marks=pytest.mark.slow)])
@pytest.mark.parametrize("command", ["compare", "repair", "lesson"])
def test_a_signal_during_a_search_ends_the_command_with_nothing_written(tmp_path, sig,
                                                                        command):
    """Ctrl-C or SIGTERM while compare, repair or lesson searches: exit 130, nothing
    written, no staging folder, and no search worker left running (compare's lived on
    for seconds after its parent; repair and compare wrote their outputs and exited 0)."""
    big = spec_file(tmp_path, "[devices]\n" + "\n".join(
        f"D{i} = {c}" for i, c in enumerate([1, 1, 2, 4, 8, 16, 32, 64, 128, 256])) +
        "\n[array]\nrows = 16\ncolumns = 32\n")
    out = tmp_path / "o"
    if command == "repair":
        pattern = tmp_path / "hand.txt"
        rows = []
        ids = [f"D{i}" for i, c in enumerate([1, 1, 2, 4, 8, 16, 32, 64, 128, 256])
               for _ in range(c)]
        for r in range(16):
            rows.append(" ".join(ids[r * 32:(r + 1) * 32]))
        pattern.write_text("\n".join(rows) + "\n")
        args = ["repair", str(pattern), "--spec", str(big)]
    else:
        # a mixed-ratio core: its restarts and chains search for seconds (the 512-unit
        # array converges within a second or two)
        mixed = spec_file(tmp_path, "[devices]\n" + "\n".join(
            f"D{i} = {c}" for i, c in enumerate([5, 6, 7, 8, 9, 10])) +
            "\n[array]\nrows = 5\ncolumns = 9\n", "mixed.toml")
        args = [command, str(mixed)]
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    proc = subprocess.Popen([sys.executable, "-m", "placer", *args, "--out", str(out),
                             "--time-limit", "60"], cwd=tmp_path, env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    _wait_for_staging(proc, out)
    time.sleep(1.5)                          # well into the search
    workers = _children(proc.pid)
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=60)
    assert proc.returncode == 130, err
    assert "Traceback" not in err and "nothing written" in err
    assert list(out.iterdir()) == [] if out.exists() else True
    deadline = time.monotonic() + 10
    while not all(_gone(w) for w in workers):
        assert time.monotonic() < deadline, f"search workers {workers} outlived the command"
        time.sleep(0.05)


def _catches(pid: int, sig: int) -> bool:
    """The process has a handler for ``sig`` (its SigCgt mask in /proc)."""
    try:
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith("SigCgt:"):
                return bool(int(line.split()[1], 16) >> (sig - 1) & 1)
    except OSError:
        pass
    return False


@pytest.mark.skipif(not Path("/proc").is_dir(), reason="reads /proc")
def test_sigterm_at_start_up_is_a_quiet_interrupt(tmp_path):
    """As soon as placer's start-up has a SIGTERM handler (seen in /proc the moment it is
    installed, before the heavy imports), SIGTERM ends the run as Ctrl-C does: exit 130
    and one line (it killed the process with 143). The interpreter catches SIGINT itself
    from its first moment, so the start-up's SIGINT is tested by timing instead
    (test_hardening.py)."""
    sig = signal.SIGTERM
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    p = subprocess.Popen([sys.executable, "-m", "placer", "grade", str(HAND)], cwd=tmp_path,
                         env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 60
    while not _catches(p.pid, sig):
        assert p.poll() is None and time.monotonic() < deadline, "no handler was installed"
        time.sleep(0.002)
    p.send_signal(sig)
    _, err = p.communicate(timeout=60)
    if p.returncode == 0:
        return                                 # the run had finished its work first
    assert p.returncode == 130, (p.returncode, err)
    assert "Traceback" not in err and "Interrupted" in err


def test_a_gdsii_cut_short_by_a_file_size_limit_is_an_error_and_nothing_is_written(tmp_path):
    """Under ``ulimit -f`` the GDSII writer stopped at the limit and the run said
    'Wrote' (exit 0) beside a truncated file."""
    rows = [" ".join(["A", "B"] * 24)] * 48
    pattern = tmp_path / "big.txt"
    pattern.write_text("\n".join(rows) + "\n")
    limit = 200 * 1024

    def small_files() -> None:
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))

    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    res = subprocess.run([sys.executable, "-m", "placer", "draw", str(pattern), "--out", "o"],
                         cwd=tmp_path, env=env, capture_output=True, text=True, timeout=300,
                         preexec_fn=small_files)
    refused(res, "cannot write")
    assert ".placer-staging" not in res.stderr        # named where the user looks: o/
    assert not (tmp_path / "o").exists() or list((tmp_path / "o").iterdir()) == []


@pytest.mark.parametrize("make", ["device", "fifo", "folder-link"])
def test_inputs_that_are_not_regular_files_are_refused_at_once(tmp_path, make):
    """/dev/zero grew to the memory limit; a pipe never finished. A path that is not a
    regular file is refused before anything is read."""
    if make == "device":
        path = Path("/dev/zero")
    elif make == "fifo":
        path = tmp_path / "pipe.txt"
        os.mkfifo(path)
    else:
        path = tmp_path / "link.toml"
        path.symlink_to("/dev/zero")
    t0 = time.monotonic()
    res = run_placer(["grade", str(path)], tmp_path, timeout=60)
    refused(res, "not a regular file")
    assert time.monotonic() - t0 < 30
    res = run_placer(["arrange", str(path), "--out", "o"], tmp_path, timeout=60)
    refused(res, "not a regular file")
    # batch: a named spec that is a pipe or device was run as a block that failed, and
    # the batch wrote a summary of one failure with no Error line
    res = run_placer(["batch", str(path), "--out", "b"], tmp_path, timeout=60)
    refused(res, "not a regular file")
    assert not (tmp_path / "b").exists()


def test_a_unit_cell_library_with_an_empty_cell_name_is_one_line(tmp_path):
    """Gdstk raised 'ValueError: Empty cell name' through the command."""
    lib = tmp_path / "cells.gds"
    lib.write_bytes(gds_records([(b"", gds_box(4))]))
    res = run_placer(["arrange", str(MIRROR), "--out", "o", "--unit-gds", str(lib),
                      "--time-limit", "1"], tmp_path)
    refused(res, "empty name")


def test_one_file_named_for_both_of_grades_pictures_is_refused(tmp_path, runner):
    """The same file for --budget-plot and --sensitivity-plot kept one picture silently."""
    res = runner.invoke(cli, ["grade", str(HAND), "--spec", str(MIRROR), "--budget-plot",
                              str(tmp_path / "p.png"), "--sensitivity-plot",
                              str(tmp_path / "." / "p.png")])
    assert res.exit_code == 1 and "give each picture a file of its own" in res.output
    assert list(tmp_path.iterdir()) == []
