"""placer arrange on the command line: outputs, determinism, refusals, candidates."""

import json

from placer.cli import cli
from placer.io.pattern import read_pattern
from tests.helpers import ROOT

SPEC = '[devices]\nMREF = 2\nMOUT = 4\n[array]\nrows = 1\ncolumns = 6\ndummies = "ends"\n'


def test_arrange_writes_pattern_and_report(runner, write, tmp_path):
    out = tmp_path / "out"
    result = runner.invoke(cli, ["arrange", str(write("s.toml", SPEC)), "--out", str(out),
                                 "--quiet"])
    assert result.exit_code == 0, result.output
    pattern = read_pattern(out / "pattern.txt")
    assert dict(zip(pattern.devices, pattern.counts(), strict=True)) == {"MREF": 2, "MOUT": 4}
    report = json.loads((out / "report.json").read_text())
    assert report["keys"]["linear_um"] == 0.0
    assert report["grade"]["pairs"][0]["linear_ppm"] == 0.0
    assert "Linear:" in result.output and "starting point" in result.output


def test_arrange_is_deterministic_under_a_seed(runner, write, tmp_path):
    spec = write("s.toml", "[devices]\nA = 1\nB = 1\nC = 2\nD = 4\nE = 8\nF = 16\n"
                           '[array]\nrows = 6\ncolumns = 6\ndummies = "ring"\n')
    texts = []
    for name in ("a", "b"):
        result = runner.invoke(cli, ["arrange", str(spec), "--out", str(tmp_path / name),
                                     "--seed", "4", "--quiet"])
        assert result.exit_code == 0, result.output
        texts.append((tmp_path / name / "pattern.txt").read_text())
    assert texts[0] == texts[1]


def test_arrange_refuses_to_overwrite_without_force(runner, write, tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "pattern.txt").write_text("precious\n")
    spec = str(write("s.toml", SPEC))
    result = runner.invoke(cli, ["arrange", spec, "--out", str(out), "--quiet"])
    assert result.exit_code == 1 and "already exists; use --force" in result.output
    assert (out / "pattern.txt").read_text() == "precious\n"
    assert not (out / "report.json").exists()
    result = runner.invoke(cli, ["arrange", spec, "--out", str(out), "--quiet", "--force"])
    assert result.exit_code == 0, result.output
    assert (out / "pattern.txt").read_text() != "precious\n"


def test_arrange_bad_inputs_fail_before_search(runner, write, tmp_path):
    spec = str(write("s.toml", SPEC))
    out = str(tmp_path / "o")
    result = runner.invoke(cli, ["arrange", spec, "--out", out, "--time-limit", "0"])
    assert result.exit_code == 2 and "Traceback" not in result.output
    bad = str(write("b.toml", "[devices]\nA = 9\n[array]\nrows = 2\ncolumns = 4\n"))
    result = runner.invoke(cli, ["arrange", bad, "--out", out])
    assert result.exit_code == 1 and "cannot hold 9 units" in result.output
    assert not (tmp_path / "o").exists()


def test_candidates_are_written_with_scores(runner, write, tmp_path):
    out = tmp_path / "c"
    spec = write("s.toml", "[devices]\nA = 4\nB = 4\nC = 8\n"
                           '[array]\nrows = 4\ncolumns = 4\ndummies = "none"\n')
    result = runner.invoke(cli, ["arrange", str(spec), "--out", str(out), "--candidates", "3",
                                 "--quiet"])
    assert result.exit_code == 0, result.output
    report = json.loads((out / "report.json").read_text())
    assert 1 <= len(report["candidates"]) <= 3
    for i in range(1, len(report["candidates"]) + 1):
        p = read_pattern(out / f"candidate-{i}.txt")
        assert dict(zip(p.devices, p.counts(), strict=True)) == {"A": 4, "B": 4, "C": 8}


def test_baseline_methods_run(runner, write, tmp_path):
    spec = str(write("s.toml", SPEC))
    for method in ("clustered", "interdigitated", "mirrored", "milp"):
        result = runner.invoke(cli, ["arrange", spec, "--out", str(tmp_path / method),
                                     "--method", method, "--quiet", "--time-limit", "10"])
        assert result.exit_code == 0, result.output
        if method == "milp":
            assert "Method MILP" in result.output and "MILP: solver" in result.output
            assert "no bound is claimed" in result.output
        else:
            assert f"Method {method};" in result.output
            assert "no search, no bound" in result.output


def test_a_pitch_finer_than_placers_cell_still_gives_the_pattern_and_its_figures(tmp_path,
                                                                                 runner):
    """pitch_um = [0.5, 2.0] (tall cells of the user's own): the search, the figures, the
    budget and the pictures hold at any pitch; only the GDSII and its netlist need a cell
    that fits, and the run says in one line why they are not there."""
    import json

    spec = tmp_path / "tall.toml"
    spec.write_text("[devices]\nA = 4\nB = 4\n[array]\nrows = 2\npitch_um = [0.5, 2.0]\n")
    out = tmp_path / "o"
    result = runner.invoke(cli, ["arrange", str(spec), "--out", str(out), "--time-limit", "2",
                                 "--quiet"])
    assert result.exit_code == 0, result.output
    assert sorted(p.name for p in out.iterdir()) == ["pattern.png", "pattern.svg",
                                                     "pattern.txt", "report.json"]
    assert "No GDSII written: the spec's pitch_um = [0.5, 2]" in result.output
    report = json.loads((out / "report.json").read_text())
    assert report["layout"] is None and "--unit-gds" in report["layout_note"]
    graded = runner.invoke(cli, ["grade", str(out / "pattern.txt"), "--spec", str(spec),
                                 "--json"])
    assert graded.exit_code == 0, graded.output
    pairs = json.loads(graded.output)["pairs"]
    assert [p["linear_ppm"] for p in pairs] == [p["linear_ppm"] for p in report["grade"]["pairs"]]


def test_a_pitch_finer_than_a_given_template_is_still_refused(tmp_path, runner):
    """With --template (or --unit-gds) the user asked for a drawing with that cell: a
    pitch it cannot hold stays a one-line refusal."""
    spec = tmp_path / "tall.toml"
    spec.write_text("[devices]\nA = 4\nB = 4\n[array]\nrows = 2\npitch_um = [0.5, 2.0]\n")
    template = ROOT / "templates" / "mos_finger.toml"
    result = runner.invoke(cli, ["arrange", str(spec), "--out", str(tmp_path / "o"),
                                 "--template", str(template), "--time-limit", "1"])
    assert result.exit_code == 1 and "leaves no room for the unit cell" in result.output
