"""Spec reader: defaults, and one clear message for each kind of bad input."""

import pytest

from placer.errors import LimitError, SpecError
from placer.jobs.load import load_spec, parse_spec

GOOD = """
name = "bias_mirror"
kind = "mos"
[devices]
IREF = 2
IOUT = 8
[array]
rows = 1
columns = 10
dummies = "ends"
pitch_um = [1.0, 2.0]
"""


def test_parse_spec_reads_example_keys():
    s = parse_spec(GOOD, "s.toml")
    assert s.devices == ("IREF", "IOUT") and s.counts == (2, 8)
    assert (s.array.rows, s.array.columns, s.array.dummies) == (1, 10, "ends")
    assert s.array.pitch_um == (1.0, 2.0)
    assert s.gradient.order == 3 and s.correlated.kernel == "exponential"


def test_default_name_comes_from_file_stem(tmp_path):
    path = tmp_path / "my-mirror.toml"
    path.write_text("[devices]\nA = 1\nB = 1\n")
    assert load_spec(path).name == "my_mirror"


@pytest.mark.parametrize("text, match", [
    ("[devices\nA = 1", r"s.toml: invalid TOML: .*line 1"),
    ("[devices]\nA = 1\n[array]\ncolums = 3", r"unknown key 'colums' \(did you mean 'columns'\?\)"),
    ("[devices]\nA = 0", r"\[devices\] A must be >= 1, got 0"),
    ("[devices]\nA = -3", r"\[devices\] A must be >= 1, got -3"),
    ("[devices]\nA = 1.5", r"\[devices\] A must be a whole number, got 1.5"),
    ("[devices]\nA = true", r"A must be a whole number, got true"),
    ("[devices]\nA = 1\nA = 2", r"invalid TOML"),
    ("[devices]\nA = 1\na = 2", r"'a' and 'A' differ only by case"),
    ('[devices]\n"2X" = 1', r"name '2X' is invalid"),
    ('[devices]\n"A/B" = 1', r"name 'A/B' is invalid"),
    ("[devices]\nA = 4\nB = 4\n[array]\nrows = 1\ncolumns = 7",
     r"1 x 7 = 7 slots cannot hold 8 units"),
    ('[devices]\nA = 1\n[array]\ndummies = "edge"',
     r"dummies must be one of 'none', 'ends', 'ring', got 'edge'"),
    ("[devices]\nA = 1\n[array]\npitch_um = [1.0]", r"pitch_um must be \[x, y\]"),
    ("[devices]\nA = 1\n[array]\npitch_um = [1.0, -2]",
     r"pitch_um must be two numbers from 0.001 um"),
    ("[devices]\nA = 1\n[correlated]\nlength_um = 0",
     r"length_um must be between 0.001 and 1e\+06 um, got 0"),
    ("[devices]\nA = 1\n[gradient]\nlinear_ppm_per_um = nan", r"must be finite"),
    ("[devices]\nA = 1\n[gradient]\norder = 1", r"order must be >= 2"),
    ('[devices]\nA = 1\nkind = "mosfet"',
     r"\[devices\] kind must be a whole number, got 'mosfet'"),
    ('kind = "mosfet"\n[devices]\nA = 1', r"kind must be one of 'mos', 'cap', 'res'"),
    ("[array]\nrows = 2", r"missing \[devices\] table"),
    ("[devices]", r"\[devices\] is empty"),
    ("devices = 3", r"\[devices\] must be a table, got an integer"),
    ('name = "a/b"\n[devices]\nA = 1', r"spec name 'a/b' is invalid"),
    ('name = "CON"\n[devices]\nA = 1', r"reserved file name"),
    ('[devices]\nA = 1\n[terminals]\nA = { gat = "G" }',
     r"\[terminals\] A: unknown terminal 'gat' of a mos unit \(did you mean 'gate'\?\)"),
    ('[devices]\nA = 1\n[terminals]\nB = { gate = "G" }', r"'B' is not a device"),
    ('[devices]\nA = 1\n[terminals]\nA = { gate = "G", gate = "H" }', r"invalid TOML"),
    ('[devices]\nA = 1\n[terminals]\nA = "G"', r"must be a table of terminal = net"),
    ('[devices]\nA = 1\n[terminals]\nA = { gate = 3 }', r"gate must be a net name"),
    ('[devices]\nA = 1\n[terminals]\nA = { gate = "a b" }', r"net 'a b' is invalid"),
    ('[devices]\nA = 1\nB = 1\n[terminals]\nA = { drain = "b" }',
     r"net 'b' clashes with the device 'B'"),
    ('[devices]\nA = 1\nB = 1\n[terminals]\nA = { drain = "X" }\nB = { drain = "x" }',
     r"nets 'X' and 'x' differ only by case"),
    ('kind = "res"\n[devices]\nR = 3\nS = 1\n[terminals]\nS = { a = "R_N1" }',
     r"clashes with an inner node of the series resistor 'R'"),
    ('kind = "res"\n[devices]\nR = 3\n[terminals]\nR = { join = "chain" }',
     r"join must be 'series' or 'parallel'"),
    ('kind = "cap"\n[devices]\nC = 3\n[terminals]\nC = { join = "series" }',
     r"unknown terminal 'join' of a cap unit"),
    ('[devices]\nA = 1\n[array]\ndummy_net = "9"', r"dummy_net net '9' is invalid"),
])
def test_parse_spec_rejects_bad_input_with_one_line(text, match):
    with pytest.raises(SpecError, match=match) as info:
        parse_spec(text, "s.toml")
    assert "\n" not in str(info.value)
    assert str(info.value).startswith("s.toml:")


def test_absurd_unit_count_is_refused_with_the_limit_named():
    with pytest.raises(LimitError, match="exceeds the limit of 65536"):
        parse_spec("[devices]\nA = 1000000000", "s.toml")


def test_unreadable_and_binary_files(tmp_path):
    with pytest.raises(SpecError, match="cannot read"):
        load_spec(tmp_path / "missing.toml")
    bad = tmp_path / "bin.toml"
    bad.write_bytes(b"\xff\xfe\x00")
    with pytest.raises(SpecError, match="not a UTF-8 text file"):
        load_spec(bad)


def test_default_nets_reproduce_each_kinds_usual_circuit():
    """Common practice: a mirror shares gate and source and keeps its own drain; a capacitor
    array shares the top plate; resistors keep their own ends, units in series. Dummies
    tie to a mirror's shared source, else to a rail (VSS), never to a signal node such as
    a capacitor array's top plate (common practice: a dummy on the top plate adds its
    wire and plate capacitance to the most sensitive node)."""
    mos = parse_spec("[devices]\nA = 1\nB = 2\n", "s.toml")
    assert mos.nets == ({"gate": "GATE", "source": "SOURCE", "drain": "A_D"},
                        {"gate": "GATE", "source": "SOURCE", "drain": "B_D"})
    assert mos.dummy_net == "SOURCE"
    cap = parse_spec('kind = "cap"\n[devices]\nA = 1\nB = 2\n', "s.toml")
    assert [n["top"] for n in cap.nets] == ["TOP", "TOP"] and cap.dummy_net == "VSS"
    res = parse_spec('kind = "res"\n[devices]\nR = 3\n', "s.toml")
    assert res.joins == ("series",) and res.dummy_net == "VSS"
    assert res.net_names() == ["R_A", "R_B", "VSS", "R_N1", "R_N2"]


def test_a_differential_pair_and_separate_sources_are_expressible():
    spec = parse_spec('[devices]\nP = 2\nN = 2\n[terminals]\n'
                      'P = { gate = "INP", drain = "ON", source = "TAIL" }\n'
                      'N = { gate = "INN", drain = "OP", source = "TAIL" }\n', "s.toml")
    assert spec.net_names() == ["INP", "TAIL", "ON", "INN", "OP", "VSS"]
    assert spec.dummy_net == "VSS"      # never the tail: common practice, see above
    split = parse_spec('[devices]\nA = 2\nB = 2\n[terminals]\nA = { source = "SA" }\n'
                       'B = { source = "SB" }\n', "s.toml")
    assert split.dummy_net == "VSS"


def test_a_pitch_left_out_is_the_smallest_that_holds_cell_and_channel():
    """The computed pitch is exactly the router's minimum: one nanometre less in y is
    refused by the drawing check."""
    from dataclasses import replace

    from placer.errors import RouteError
    from placer.layout.pitch import check_pitch

    spec = parse_spec("[devices]\nA = 2\nB = 2\n[unit]\nwidth_um = 2\nlength_um = 1\n", "s")
    assert not spec.array.pitch_given
    check_pitch(spec)
    px, py = spec.array.pitch_um
    tight = replace(spec, array=replace(spec.array, pitch_um=(px - 0.001, py),
                                        pitch_given=True))
    with pytest.raises(RouteError, match="leaves no room for the unit cell"):
        check_pitch(tight)
