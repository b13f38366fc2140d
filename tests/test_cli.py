"""Command line: results, JSON and one-line errors with the documented exit codes."""

import json

import pytest

from placer.cli import cli

SPEC = "[devices]\nA = 2\nB = 2\n[unit]\nwidth_um = 2.0\nlength_um = 2.0\n" \
       "[mismatch]\na_vt_mv_um = 5.0\n"


def test_grade_prints_tables_and_assumptions(runner, write):
    pat = write("p.txt", "A B B A\n")
    result = runner.invoke(cli, ["grade", str(pat), "--spec", str(write("s.toml", SPEC))])
    assert result.exit_code == 0, result.output
    assert "A/B" in result.output and "Assumptions:" in result.output
    assert "model estimates" in result.output


def test_grade_json_reproduces_pelgrom_check_value(runner, write):
    """Pelgrom et al., IEEE JSSC 1989 (doi:10.1109/JSSC.1989.572629): A_VT = 5 mV um (a typical
    figure, from memory) over WL = 2 x 2 um^2 per unit, two units per device in parallel:
    sigma = 5 / sqrt(8) mV."""
    pat = write("p.txt", "A B B A\n")
    result = runner.invoke(cli, ["grade", str(pat), "--spec", str(write("s.toml", SPEC)),
                                 "--json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    (pair,) = data["pairs"]
    assert pair["vt_sigma_mv"] == pytest.approx(5.0 / 8 ** 0.5)
    assert pair["linear_ppm"] == pytest.approx(0.0, abs=1e-12)
    assert data["worst"]["linear_ppm"] == "A/B"


def test_grade_without_spec_uses_defaults(runner, write):
    result = runner.invoke(cli, ["grade", str(write("p.txt", "A B\nB A\n")), "--json"])
    assert result.exit_code == 0, result.output
    assert json.loads(result.output)["assumptions"]["spec"] == "<defaults>"


@pytest.mark.parametrize("spec, pattern, message", [
    ("[devices\nA = 2", "A A", "s.toml: invalid TOML"),
    ("[devices]\nA = 2\nB = 2\n[array]\nrowz = 1", "A B B A", "did you mean 'rows'?"),
    ("[devices]\nA = 3\nB = 2", "A B B A", "device 'A' has 2 units, the spec"),
    (SPEC, "A B B\nA", "p.txt:2: row has 1 tokens, expected 3"),
    (SPEC, "A B ? A", "token 3 '?'"),
])
def test_grade_bad_input_is_one_line_exit_1(runner, write, spec, pattern, message):
    result = runner.invoke(cli, ["grade", str(write("p.txt", pattern)), "--spec",
                                 str(write("s.toml", spec))])
    assert result.exit_code == 1
    assert "Traceback" not in result.output
    lines = [ln for ln in result.output.splitlines() if ln]
    assert len(lines) == 1 and lines[0].startswith("Error: ") and message in lines[0]


def test_missing_file_is_a_usage_error_exit_2(runner, tmp_path):
    result = runner.invoke(cli, ["grade", str(tmp_path / "nope.txt")])
    assert result.exit_code == 2
    assert "does not exist" in result.output


def test_python_dash_m_entry_point():
    import subprocess
    import sys

    out = subprocess.run([sys.executable, "-m", "placer", "--version"], capture_output=True,
                         text=True, check=True)
    assert "placer" in out.stdout


def test_grade_writes_budget_and_sensitivity_pictures(runner, tmp_path):
    result = runner.invoke(cli, ["grade", "samples/bias_mirror_hand.gds", "--spec",
                                 "samples/bias_mirror.toml", "--budget-plot",
                                 str(tmp_path / "b.png"), "--sensitivity-plot",
                                 str(tmp_path / "s.svg")])
    assert result.exit_code == 0, result.output
    # the header names the gradient it used, filled in (not a template left unformatted)
    assert "gradient: 1 %/mm of drain current = beta 0.5 %/mm" in result.output
    assert "{" not in result.output
    assert (tmp_path / "b.png").read_bytes()[:4] == b"\x89PNG"
    assert b"<svg" in (tmp_path / "s.svg").read_bytes()[:400]
    result = runner.invoke(cli, ["grade", "samples/bias_mirror_hand.txt", "--budget-plot",
                                 str(tmp_path / "b.bmp")])
    assert result.exit_code == 1 and "must end in .png, .svg or .pdf" in result.output


def test_budget_plot_without_electrical_table_names_the_keys(runner, tmp_path):
    result = runner.invoke(cli, ["grade", "samples/bias_mirror_hand.txt", "--budget-plot",
                                 str(tmp_path / "b.png")])
    assert result.exit_code == 1
    assert "needs an [electrical] table with vov_v" in result.output
    assert not (tmp_path / "b.png").exists()


def test_repair_reads_a_csv_export(runner, tmp_path):
    result = runner.invoke(cli, ["repair", "samples/bias_mirror_hand.csv", "--spec",
                                 "samples/bias_mirror.toml", "--out", str(tmp_path / "r"),
                                 "--max-swaps", "3"])
    assert result.exit_code == 0, result.output
    assert "Linear worst pair" in result.output
    assert (tmp_path / "r" / "repaired.txt").exists()


def test_units_adding_most_are_placed_in_the_input_files_own_frame(runner):
    """The device table works in the slot grid (centre of the device units); the line of
    units to look at gives positions in the file's coordinates, and says so. The sample
    CSV's grid starts at (100, 50) um with a 2.3 x 5.15 um pitch: slot (row 1, col 1) is
    at (102.3, 44.85) um there."""
    out = runner.invoke(cli, ["grade", "samples/bias_mirror_hand.csv", "--spec",
                              "samples/bias_mirror.toml"]).output
    line = next(ln for ln in out.splitlines() if ln.startswith("Units adding most"))
    assert "(x, y in the CSV's coordinates)" in line
    assert "MREF at row 1 col 1 (102.3, 44.85 um)" in line
    txt = runner.invoke(cli, ["grade", "samples/bias_mirror_hand.txt"]).output
    assert "coordinates)" not in next(ln for ln in txt.splitlines()
                                      if ln.startswith("Units adding most"))


def test_version_answers_without_loading_numpy_or_the_commands():
    import subprocess
    import sys

    code = ("import sys; sys.argv = ['placer', '--version']\n"
            "from placer._entry import main\n"
            "main()\n"
            "print('numpy' in sys.modules, 'placer.cli' in sys.modules)")
    res = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         timeout=60)
    assert res.returncode == 0, res.stderr
    from placer import __version__

    assert res.stdout.splitlines() == [f"placer, version {__version__}", "False False"]
