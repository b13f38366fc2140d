"""The batch command: every spec of a folder arranged, several at a time, each into its
own folder with its own outputs, and a summary and an index page of all of them."""

from __future__ import annotations

import json
import shutil

from tests.helpers import SAMPLES, refused, run_placer, spec_file


def test_a_folder_of_specs_is_arranged_into_a_folder_per_block_with_a_summary(tmp_path):
    specs = tmp_path / "specs"
    specs.mkdir()
    for name in ("bias_mirror", "input_pair", "ref_ladder"):
        shutil.copy(SAMPLES / f"{name}.toml", specs / f"{name}.toml")
    res = run_placer(["batch", str(specs), "--out", "chip", "--time-limit", "1", "--jobs",
                      "2", "--quiet"], tmp_path)
    assert res.returncode == 0, res.stderr
    chip = tmp_path / "chip"
    summary = json.loads((chip / "summary.json").read_text())
    assert [b["name"] for b in summary["blocks"]] == ["bias_mirror", "input_pair", "ref_ladder"]
    for block in summary["blocks"]:
        folder = chip / block["name"]
        report = json.loads((folder / "report.json").read_text())
        assert block["core"] == report["core_shape"] and block["exit_code"] == 0
        assert (folder / "pattern.gds").stat().st_size > 0
        assert f'{block["name"]}/pattern.png' in (chip / "index.html").read_text()
    assert "3 blocks (0 failed), 2 at a time" in res.stdout


def test_a_failing_block_is_reported_and_the_others_complete(tmp_path):
    specs = tmp_path / "specs"
    specs.mkdir()
    shutil.copy(SAMPLES / "input_pair.toml", specs / "good.toml")
    spec_file(specs, "[devices]\nA = 2\nB = 2\n[array]\nrows = 3\ncolumns = 3\n"
                     "holes = false\n", "bad.toml")
    res = run_placer(["batch", str(specs), "--out", "chip", "--time-limit", "1", "--quiet"],
                     tmp_path)
    assert res.returncode == 1
    # one Error line for scripts and logs (exit 1 came with none)
    errors = [ln for ln in res.stderr.splitlines() if ln.startswith("Error:")]
    assert errors == ["Error: 1 of 2 blocks failed (bad); chip/summary.json gives each "
                      "one's reason"], res.stderr
    blocks = {b["name"]: b for b in json.loads((tmp_path / "chip" / "summary.json")
                                               .read_text())["blocks"]}
    assert blocks["good"]["exit_code"] == 0 and blocks["bad"]["exit_code"] == 1
    assert "holes = false" in blocks["bad"]["error"]
    assert not (tmp_path / "chip" / "bad").exists() or not any((tmp_path / "chip" / "bad")
                                                                .iterdir())


def test_two_specs_of_one_name_are_refused_before_any_run(tmp_path):
    (tmp_path / "a").mkdir()
    (tmp_path / "b").mkdir()
    shutil.copy(SAMPLES / "input_pair.toml", tmp_path / "a" / "block.toml")
    shutil.copy(SAMPLES / "bias_mirror.toml", tmp_path / "b" / "block.toml")
    res = run_placer(["batch", str(tmp_path / "a"), str(tmp_path / "b"), "--out", "chip"],
                     tmp_path)
    refused(res, "would both write block/")
    assert not (tmp_path / "chip").exists()


def test_blocks_import_the_package_the_batch_runs_from_not_the_working_folders(tmp_path):
    """Run from a folder holding another 'placer' (a source checkout, say), every block
    failed with ModuleNotFoundError: a block started as `python -m placer` imported the
    working folder's package instead of the installed one."""
    import os
    import subprocess
    import sys

    from tests.helpers import ROOT

    decoy = tmp_path / "placer"
    decoy.mkdir()
    (decoy / "__init__.py").write_text("raise ImportError('the working folder, not placer')\n")
    (decoy / "__main__.py").write_text("raise SystemExit('the working folder, not placer')\n")
    shutil.copy(SAMPLES / "input_pair.toml", tmp_path / "pair.toml")
    res = subprocess.run([sys.executable, "-P", "-m", "placer", "batch", "pair.toml", "--out",
                          "chip", "--time-limit", "1", "--quiet"], cwd=tmp_path, text=True,
                         capture_output=True, timeout=300,
                         env={**os.environ, "PYTHONPATH": str(ROOT)})
    assert res.returncode == 0, res.stdout + res.stderr
    assert (tmp_path / "chip" / "pair" / "pattern.txt").is_file()


def test_an_interrupted_batch_keeps_its_finished_blocks_and_says_so(tmp_path):
    """Ctrl-C after the first of two blocks: that block's folder is whole, there is no
    summary, and the message says which blocks are complete (it said 'nothing written'
    beside a finished block)."""
    import os
    import signal
    import subprocess
    import sys
    import time

    from tests.helpers import ROOT

    specs = tmp_path / "specs"
    specs.mkdir()
    shutil.copy(SAMPLES / "input_pair.toml", specs / "a_pair.toml")
    shutil.copy(SAMPLES / "bias_mirror.toml", specs / "b_mirror.toml")
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    proc = subprocess.Popen([sys.executable, "-m", "placer", "batch", str(specs), "--out",
                             "chip", "--jobs", "1", "--time-limit", "3", "--quiet"],
                            cwd=tmp_path, env=env, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)
    first = tmp_path / "chip" / "a_pair" / "report.json"
    deadline = time.monotonic() + 120
    while not first.exists() and proc.poll() is None and time.monotonic() < deadline:
        time.sleep(0.02)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=120)
    assert proc.returncode == 130, err
    assert "1 block(s) that finished are complete" in err and "a_pair" in err, err
    names = {p.name for p in (tmp_path / "chip" / "a_pair").iterdir()}
    assert {"pattern.txt", "report.json", "pattern.gds", "pattern.png"} <= names
    assert not (tmp_path / "chip" / "summary.json").exists()
    assert not any(p.name.startswith(".placer-staging") for p in (tmp_path / "chip").iterdir())


def test_a_block_killed_after_its_files_moved_in_counts_as_finished(tmp_path):
    """The race CI once met: the batch's SIGTERM reached a block between its command's end
    (the set moved in) and its process's end, where the default action kills it (-15);
    its set is whole, so it counts as finished -- but only with a report of this run."""
    import signal
    import time

    from placer.jobs.batch import finished_whole

    folder = tmp_path / "blk"
    folder.mkdir()
    started = time.time()
    assert not finished_whole(-signal.SIGTERM, "", folder, started)       # nothing moved in
    (folder / "report.json").write_text("{}")
    assert finished_whole(-signal.SIGTERM, "", folder, started)
    assert not finished_whole(-signal.SIGTERM, "", folder, started + 3600)  # an old report
    assert finished_whole(0, "", folder, started)
    assert finished_whole(130, "Interrupted; the outputs in x are complete.", folder, 0.0)
    assert not finished_whole(130, "Interrupted; nothing written.", tmp_path / "none", 0.0)
    assert not finished_whole(1, "Error: x", folder, started)
