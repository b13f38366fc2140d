"""placer sequence: a unary array's order found or graded, its files, and bad input."""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner

from placer.cli import cli
from placer.io.unaryspec import read_sequence_grid, read_unary_spec
from placer.model.unary import worst_inl
from tests.helpers import spec_file
from tests.test_unary import _transfer_inl, _values

#: a [unary] table's head with a slot pitch
U = "[unary]\npitch_um = 10.0\n"

SMALL = """name = "wren_msb"
[unary]
cells = 15
rows = 4
columns = 4
pitch_um = [8.0, 6.0]
[gradient]
linear_ppm_per_um = 20.0
quadratic_ppm_per_um2 = 0.05
"""


def _run(args: list[str]):
    return CliRunner().invoke(cli, ["sequence", *args])


def test_search_writes_the_grid_report_and_picture_and_the_grid_grades_alike(tmp_path):
    spec = spec_file(tmp_path, SMALL)
    res = _run([str(spec), "--out", str(tmp_path / "o"), "--time-limit", "30"])
    assert res.exit_code == 0, res.output
    out = tmp_path / "o"
    assert sorted(p.name for p in out.iterdir()) == ["report.json", "sequence.gds",
                                                      "sequence.png", "sequence.txt"]
    rep = json.loads((out / "report.json").read_text())
    s = read_unary_spec(spec)
    lay = read_sequence_grid(out / "sequence.txt", s)     # the written grid reads back
    assert rep["worst_inl_lsb"] == pytest.approx(worst_inl(lay, s.fields), rel=1e-12)
    assert rep["sequence"] == lay.grid().tolist()
    # the INL curve in the worst direction: the transfer curve computed apart
    theta = np.radians(rep["worst_direction_deg"])
    want = _transfer_inl(_values(lay, theta, 20.0, 0.05))
    assert rep["inl_lsb"] == pytest.approx(want, abs=1e-3 * max(map(abs, want)))
    assert max(map(abs, want)) == pytest.approx(rep["worst_inl_lsb"], rel=2e-3)
    # graded from the grid: the same figures, and every baseline no better
    again = _run([str(spec), "--grid", str(out / "sequence.txt"), "--out",
                  str(tmp_path / "g")])
    assert again.exit_code == 0, again.output
    graded = json.loads((tmp_path / "g" / "report.json").read_text())
    assert graded["worst_inl_lsb"] == pytest.approx(rep["worst_inl_lsb"], rel=1e-12)
    assert all(v >= rep["worst_inl_lsb"] * (1 - 1e-12)
               for v in graded["baselines_worst_inl_lsb"].values())
    assert "Worst |INL|" in res.output and "row-by-row" in res.output
    # the budget: per code, the systematic envelope plus 3 sigma of the independent
    # random and correlated parts (variances add), at its worst code
    env = np.array(rep["linear_part_lsb"]) + np.abs(rep["bowl_part_lsb"])
    rnd, cor = np.array(rep["random_sigma_lsb"]), np.array(rep["correlated_sigma_lsb"])
    assert rep["inl_at_3_sigma_lsb"] == pytest.approx(
        float((env + 3 * np.sqrt(rnd ** 2 + cor ** 2)).max()), rel=1e-12)
    assert "Budget: |INL| at 3 sigma" in res.output


@pytest.mark.slow          # several seconds: CI runs it (PLACER_SLOW=1)
def test_the_same_seed_gives_the_same_order(tmp_path):
    spec = spec_file(tmp_path, SMALL)
    for name in ("a", "b"):
        assert _run([str(spec), "--out", str(tmp_path / name), "--seed", "3",
                     "--time-limit", "60"]).exit_code == 0
    assert (tmp_path / "a" / "sequence.txt").read_text() == \
        (tmp_path / "b" / "sequence.txt").read_text()


@pytest.mark.parametrize("text, grid, message", [
    ('[devices]\nA = 2\n', None, "needs a [unary] table"),
    (U + 'cells = 20\nrows = 4\ncolumns = 4\n', None, "need 20 slots"),
    (U + 'cells = 15\ncolums = 4\n', None, "unknown key 'colums'"),
    (U + 'cells = 4095\nsub_units = 4\n', None, "more than the limit of 4096"),
    (U + 'cells = 15\nrows = 1000\ncolumns = 1000\n', None, "limit of 16384"),
    (U + 'cells = 15\n[gradient]\nvt_mv_per_mm = 1.0\n', None, "not used by a unary"),
    (U + 'cells = 3\nrows = 2\ncolumns = 2\n', "1 2\n2 .\n", "cell 2 is on 2 slots"),
    (U + 'cells = 3\nrows = 2\ncolumns = 2\n', "1 2\n3 x\n", "no cell number"),
    (U + 'cells = 3\nrows = 2\ncolumns = 2\n', "1 2 3\n", "the grid is 1 rows"),
    (U + 'cells = 3\nbinary_bits = 2\nsub_units = 6\n', None,
     "no multiple of 2^binary_bits = 4"),
    (U + 'cells = 1\nbinary_bits = 7\n', None, "binary_bits"),
    (U + 'cells = 64\nbinary_bits = 6\n', None, "and 6 binary bits are 4159 sub-units"),
    (U + 'cells = 1\nbinary_bits = 1\nrows = 2\ncolumns = 2\n', "1 b0\nb0 1\n",
     "binary cell b0 is on 2 slots; it takes 1"),
    (U + 'cells = 1\nbinary_bits = 1\nrows = 2\ncolumns = 2\n', "1 b1\n. 1\n",
     "or . (a dummy)"),
    ('[unary]\ncells = 15\n', None, "pitch_um is missing"),
    ('[unary]\npitch_um = 3.0\ncells = 15\n[unit]\nwidth_um = 4.0\nlength_um = 2.0\n', None,
     "does not fit its slot"),
])
def test_bad_input_is_one_line_and_writes_nothing(tmp_path, text, grid, message):
    spec = spec_file(tmp_path, text)
    args = [str(spec), "--out", str(tmp_path / "o")]
    if grid is not None:
        g = tmp_path / "g.txt"
        g.write_text(grid)
        args += ["--grid", str(g)]
    res = _run(args)
    assert res.exit_code == 1
    assert message in res.output and "Traceback" not in res.output
    assert len(res.output.strip().splitlines()) == 1
    assert not (tmp_path / "o").exists() or not any((tmp_path / "o").iterdir())


def test_the_gdsii_labels_every_slot_with_its_sequence_number(tmp_path):
    """Read back by the independent stream parser (tests/streamread.py): one reference a
    slot at its pitch, and at each cell's slot the label S<n> of its sequence number on
    the layer map's label layer; the dummy slot gets the dummy cell and no label."""
    from tests.streamread import flatten, read

    spec = spec_file(tmp_path, SMALL)
    assert _run([str(spec), "--out", str(tmp_path / "o"), "--time-limit", "1"]).exit_code == 0
    s = read_unary_spec(spec)
    grid = read_sequence_grid(tmp_path / "o" / "sequence.txt", s).grid()
    lib = read((tmp_path / "o" / "sequence.gds").read_bytes())
    top = lib.order[-1]
    refs = [e for e in lib.cells[top] if e.kind == "SREF"]
    assert len(refs) == grid.size
    labels = {}
    for el, _ in flatten(lib, top):
        if el.kind == "TEXT":
            assert el.layer == 10                 # the generic layer map's label layer
            (x, y), = el.xy
            labels[(round(-y / 6000), round(x / 8000))] = el.text  # 8 x 6 um pitch, in nm
    want = {(r, c): f"S{int(grid[r, c])}" for r in range(4) for c in range(4) if grid[r, c]}
    assert labels == want
    dummy_refs = [e for e in refs if e.sname.endswith("DUMMY")]
    assert len(dummy_refs) == int((grid == 0).sum()) == 1


@pytest.mark.slow          # several seconds: CI runs it (PLACER_SLOW=1)
def test_repair_of_a_given_order_finds_the_one_exchange_that_broke_it(tmp_path):
    """Row by row along one row of 8 cells (and a dummy) is far from the best order;
    exchanging two cells of a good order and repairing with one exchange restores an
    order at least as good, and the report lists the exchange made."""
    text = ('[unary]\ncells = 7\nrows = 1\ncolumns = 8\npitch_um = [10.0, 10.0]\n'
            '[gradient]\nlinear_ppm_per_um = 10.0\nquadratic_ppm_per_um2 = 0.0\n')
    spec = spec_file(tmp_path, text)
    assert _run([str(spec), "--out", str(tmp_path / "o"), "--time-limit", "60"]).exit_code == 0
    s = read_unary_spec(spec)
    good = read_sequence_grid(tmp_path / "o" / "sequence.txt", s)
    best = worst_inl(good, s.fields)
    grid = good.grid()[0].tolist()
    # exchange the cells switched on first and third
    i, j = grid.index(1), grid.index(3)
    grid[i], grid[j] = 3, 1
    broken = tmp_path / "broken.txt"
    broken.write_text(" ".join("." if v == 0 else str(v) for v in grid) + "\n")
    bad = worst_inl(read_sequence_grid(broken, s), s.fields)
    assert bad > best
    res = _run([str(spec), "--grid", str(broken), "--max-swaps", "1", "--out",
                str(tmp_path / "r")])
    assert res.exit_code == 0, res.output
    rep = json.loads((tmp_path / "r" / "report.json").read_text())
    assert rep["worst_inl_before_repair_lsb"] == pytest.approx(bad, rel=1e-12)
    assert rep["worst_inl_lsb"] <= best * (1 + 1e-12)
    assert len(rep["swaps"]) == 1 and "exchange the slots" in res.output
    # --max-swaps without --grid is a usage error
    assert _run([str(spec), "--max-swaps", "2", "--out", str(tmp_path / "x")]).exit_code == 2


@pytest.mark.parametrize("token", ["\u00b2", "9" * 5000, "\u0661"])
def test_grid_tokens_that_only_look_like_numbers_are_one_line(tmp_path, token):
    """Superscripts, other scripts' digits and huge numbers are no cell numbers (the
    review found the first two ending in a traceback and the third read as 1)."""
    spec = spec_file(tmp_path, U + 'cells = 3\nrows = 2\ncolumns = 2\n')
    g = tmp_path / "g.txt"
    g.write_text(f"{token} 2\n3 .\n")
    res = _run([str(spec), "--grid", str(g), "--out", str(tmp_path / "o")])
    assert res.exit_code == 1 and "no cell number" in res.output
    assert "Traceback" not in res.output


def test_a_core_wider_than_gdsii_holds_is_refused(tmp_path):
    spec = spec_file(tmp_path, '[unary]\ncells = 1000\nrows = 1\ncolumns = 1024\n'
                               'pitch_um = [100000.0, 100000.0]\n')
    res = _run([str(spec), "--out", str(tmp_path / "o")])
    assert res.exit_code == 1 and "a GDSII coordinate holds" in res.output


def test_a_repair_cut_by_the_time_limit_says_so(tmp_path):
    spec = spec_file(tmp_path, U + 'cells = 63\nrows = 8\ncolumns = 8\n')
    g = tmp_path / "g.txt"
    g.write_text("\n".join(" ".join(str(r * 8 + c + 1) if r * 8 + c < 63 else "."
                                    for c in range(8)) for r in range(8)) + "\n")
    res = _run([str(spec), "--grid", str(g), "--max-swaps", "3", "--time-limit", "0.000001",
                "--out", str(tmp_path / "o")])
    assert res.exit_code == 0, res.output
    assert "time limit" in res.output and "no exchange helps" not in res.output


SEGMENTED = """name = "wren_dac"
[unary]
cells = 3
binary_bits = 2
rows = 4
columns = 4
pitch_um = [8.0, 6.0]
[gradient]
linear_ppm_per_um = 20.0
quadratic_ppm_per_um2 = 0.05
"""


def test_a_segmented_array_is_searched_graded_and_labelled(tmp_path):
    """Three unary cells of 4 unit sources and binary cells of 1 and 2 (a 4-bit
    segmented DAC, codes 0 to 15): the report's INL in the worst direction is the transfer
    curve computed apart, the grid names the binary cells b0 and b1 and reads back, and
    the GDSII labels each binary slot B<j> (read by the independent stream parser)."""
    from tests.streamread import flatten, read
    from tests.test_unary import _segmented_transfer_inl

    spec = spec_file(tmp_path, SEGMENTED)
    res = _run([str(spec), "--out", str(tmp_path / "o"), "--time-limit", "1"])
    assert res.exit_code == 0, res.output
    assert "2 binary cells of 1, 2 sub-units (codes 0 to 15)" in res.output
    rep = json.loads((tmp_path / "o" / "report.json").read_text())
    s = read_unary_spec(spec)
    lay = read_sequence_grid(tmp_path / "o" / "sequence.txt", s)
    text = (tmp_path / "o" / "sequence.txt").read_text()
    assert text.count("b0") == 1 and text.count("b1") == 2
    assert rep["full_scale_code"] == 15 and len(rep["inl_lsb"]) == 16
    want = _segmented_transfer_inl(lay, np.radians(rep["worst_direction_deg"]), 20.0, 0.05)
    assert rep["inl_lsb"] == pytest.approx(want, abs=1e-3 * max(map(abs, want)))
    assert max(map(abs, want)) == pytest.approx(rep["worst_inl_lsb"], rel=2e-3)
    assert rep["dnl_lsb"] == pytest.approx(np.diff(want), abs=2e-3 * max(map(abs, want)))
    # the random part: one unit source an LSB, a bridge over 15 codes
    assert rep["random_sigma_lsb"][8] == pytest.approx(
        s.lsb_sigma * np.sqrt(8 * 7 / 15), rel=1e-12)
    grid = lay.grid()
    lib = read((tmp_path / "o" / "sequence.gds").read_bytes())
    labels = {}
    for el, _ in flatten(lib, lib.order[-1]):
        if el.kind == "TEXT":
            (x, y), = el.xy
            labels[(round(-y / 6000), round(x / 8000))] = el.text
    want_labels = {(r, c): (f"S{v}" if v > 0 else f"B{-1 - v}")
                   for r in range(4) for c in range(4) if (v := int(grid[r, c]))}
    assert labels == want_labels
    assert sorted(labels.values()).count("B1") == 2


def _hand_gds(path, grid, pitch=(8.0, 6.0), origin=(100.0, 50.0), labels=None):
    """A GDSII drawn here with gdstk, apart from placer's writer: a current cell drawn
    about its corner, placed at every slot from ``origin`` (y down the rows), the label
    of each slot (``labels`` or S<n> / B<j> from ``grid``) on layer 10/0 at the cell's
    centre; dummy slots place a cell named EDGE_DUMMY."""
    import gdstk

    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    cur = lib.new_cell("ISRC")
    cur.add(gdstk.rectangle((0, 0), (0.8 * pitch[0], 0.8 * pitch[1]), layer=1))
    dum = lib.new_cell("EDGE_DUMMY")
    dum.add(gdstk.rectangle((0, 0), (0.8 * pitch[0], 0.8 * pitch[1]), layer=1))
    top = lib.new_cell("DAC_CORE")
    for r, row in enumerate(grid):
        for c, v in enumerate(row):
            x, y = origin[0] + c * pitch[0], origin[1] - r * pitch[1]
            top.add(gdstk.Reference(cur if v else dum, (x, y)))
            text = (labels or {}).get((r, c), f"S{v}" if v > 0 else f"B{-1 - v}" if v else "")
            if text:
                top.add(gdstk.Label(text, (x + 0.4 * pitch[0], y + 0.4 * pitch[1]),
                                    layer=10, texttype=0))
    lib.write_gds(str(path))


def test_an_order_read_from_gdsii_grades_as_its_grid(tmp_path):
    """A hand-drawn GDSII of a segmented array (labels S<n> and B<j> on its cells, drawn
    about a corner and placed from an offset origin) grades exactly as the same order
    given as a sequence grid, and a repair from it runs."""
    grid = [[1, -2, 2, 3], [3, -1, 1, 2], [2, 3, -2, 1], [0, 1, 3, 2]]
    spec = spec_file(tmp_path, SEGMENTED)
    _hand_gds(tmp_path / "hand.gds", grid)
    text = tmp_path / "hand.txt"
    tok = {0: ".", -1: "b0", -2: "b1"}
    text.write_text("\n".join(" ".join(tok.get(v, str(v)) for v in row) for row in grid))
    for name, path in (("g", tmp_path / "hand.gds"), ("t", text)):
        res = _run([str(spec), "--grid", str(path), "--out", str(tmp_path / name)])
        assert res.exit_code == 0, res.output
    a = json.loads((tmp_path / "g" / "report.json").read_text())
    b = json.loads((tmp_path / "t" / "report.json").read_text())
    assert a["sequence"] == b["sequence"] == grid
    assert a["worst_inl_lsb"] == b["worst_inl_lsb"]
    rep = _run([str(spec), "--grid", str(tmp_path / "hand.gds"), "--max-swaps", "1",
                "--out", str(tmp_path / "r")])
    assert rep.exit_code == 0 and "exchange the slots" in rep.output


@pytest.mark.parametrize("kind, message", [
    ("pitch", "the layout's pitch is 9 x 6 um, the spec's 8 x 6 (set pitch_um = [9, 6]"),
    ("label", "label 'MN3' at"),
    ("count", "cell 1 is on 3 slots"),
    ("size", "the units span 3 x 4 slots; the spec's core is 4 x 4"),
    ("layer", "15 units carry no S<n> or B<j> label on the label layer 10/0"),
    ("truncated", "hand.gds: not a readable GDSII stream"),
    ("empty", "hand.gds: not a readable GDSII stream"),
])
def test_a_bad_gdsii_order_is_one_line(tmp_path, kind, message):
    grid = [[1, -2, 2, 3], [3, -1, 1, 2], [2, 3, -2, 1], [0, 1, 3, 2]]
    labels = None
    pitch = (8.0, 6.0)
    if kind == "pitch":
        pitch = (9.0, 6.0)
    elif kind == "label":
        labels = {(0, 0): "MN3"}
    elif kind == "count":
        grid[3][1] = 0
    elif kind == "size":
        grid = grid[:3]
    elif kind == "layer":                      # labels on a layer the layer map does not name
        labels = {(r, c): "" for r in range(4) for c in range(4)}
    spec = spec_file(tmp_path, SEGMENTED)
    _hand_gds(tmp_path / "hand.gds", grid, pitch=pitch, labels=labels)
    data = (tmp_path / "hand.gds").read_bytes()
    if kind == "truncated":                    # named .gds: never read as a text grid
        (tmp_path / "hand.gds").write_bytes(data[:3])
    elif kind == "empty":
        (tmp_path / "hand.gds").write_bytes(b"")
    res = _run([str(spec), "--grid", str(tmp_path / "hand.gds"), "--out", str(tmp_path / "o")])
    assert res.exit_code == 1, res.output
    assert message in res.output and "Traceback" not in res.output
    assert len(res.output.strip().splitlines()) == 1
    assert not (tmp_path / "o").exists() or not any((tmp_path / "o").iterdir())


def test_arrange_of_a_unary_spec_points_to_sequence(tmp_path):
    res = CliRunner().invoke(cli, ["arrange", str(spec_file(tmp_path, SMALL)), "--out",
                                   str(tmp_path / "o")])
    assert res.exit_code == 1
    assert "unary array spec: run placer sequence" in res.output
    assert not (tmp_path / "o").exists()


def test_the_lesson_page_of_a_unary_spec_holds_the_orders_and_opens_on_a_given_one(tmp_path):
    """``placer lesson`` of a unary spec writes the sequence page: its data holds the
    textbook orders, placer's and (first, with --pattern) the given grid, each as the grid
    placer writes; an outsize core is refused in one line with nothing written."""
    import re

    from placer.search.switching import row_by_row

    spec = spec_file(tmp_path, SEGMENTED)
    s = read_unary_spec(spec)
    given = tmp_path / "mine.txt"
    given.write_text("1 b1 2 3\n3 b0 1 2\n2 3 b1 1\n. 1 3 2\n")
    res = CliRunner().invoke(cli, ["lesson", str(spec), "--out", str(tmp_path / "p"),
                                   "--pattern", str(given), "--time-limit", "1"])
    assert res.exit_code == 0, res.output
    html = (tmp_path / "p" / "wren_dac-lesson.html").read_text()
    blob = re.search(r'<script type="application/json" id="lesson-data">(.*?)</script>',
                     html, re.S).group(1)
    data = json.loads(blob)
    labels = [a["label"] for a in data["arrangements"]]
    assert labels == ["mine", "row-by-row", "row-column", "centre pairs", "placer"]
    assert data["arrangements"][0]["grid"] == read_sequence_grid(given, s).grid().tolist()
    assert data["arrangements"][1]["grid"] == row_by_row(4, 4, s.pitch_um, 3, 4, 2).grid().tolist()
    assert (data["binary_bits"], data["lsb_units"], data["cells"]) == (2, 1, 3)
    big = spec_file(tmp_path, U + 'cells = 4095\nrows = 65\ncolumns = 65\n', "big.toml")
    res = CliRunner().invoke(cli, ["lesson", str(big), "--out", str(tmp_path / "q")])
    assert res.exit_code == 1 and "handles at most 4096" in res.output
    assert len(res.output.strip().splitlines()) == 1
    assert not (tmp_path / "q").exists() or not any((tmp_path / "q").iterdir())


def test_a_known_direction_and_hot_spot_are_graded(tmp_path):
    """[gradient] direction_deg adds the INL at that direction (against the transfer curve
    computed apart); a hot spot joins the bowl's part, and the search's order is no worse
    under it than every baseline; a hot spot missing a key is one line."""
    from placer.search.switching import BASELINES
    from tests.test_unary import _segmented_transfer_inl

    text = SEGMENTED + ("direction_deg = 30\n"
                        "hot_spot = { x_um = 8, y_um = -6, ppm = 50, fall_off_um = 10 }\n")
    spec = spec_file(tmp_path, text)
    res = _run([str(spec), "--out", str(tmp_path / "o"), "--time-limit", "2"])
    assert res.exit_code == 0, res.output
    assert "At the given direction, 30 deg: worst |INL|" in res.output
    assert "hot spot of 50 ppm at (8, -6) um" in res.output
    rep = json.loads((tmp_path / "o" / "report.json").read_text())
    s = read_unary_spec(spec)
    lay = read_sequence_grid(tmp_path / "o" / "sequence.txt", s)
    spot = np.array([50e-6 * np.exp(-np.hypot(c * 8.0 - 8.0, -r * 6.0 + 6.0) / 10.0)
                     for r in range(4) for c in range(4)])
    # the spot's contribution, summed by code apart from the model
    inl0 = np.array(_segmented_transfer_inl(lay, np.radians(30.0), 20.0, 0.05))
    on = []
    for code in range(16):
        u, low = divmod(code, 4)
        slots = [int(x) for cell in lay.cells[:u] for x in cell]
        slots += [int(x) for j in range(2) if low >> j & 1 for x in lay.bits[j]]
        on.append(spot[slots].sum())
    on = np.array(on)
    spot_inl = on - np.arange(16) / 15 * on[15]          # end points fitted, first order
    want = inl0 + spot_inl
    assert rep["given_direction_inl_lsb"] == pytest.approx(want, abs=2e-3 * abs(want).max())
    assert rep["given_direction_worst_inl_lsb"] == pytest.approx(abs(want).max(), rel=3e-3)
    assert rep["assumptions"]["hot_spot"] == {"x_um": 8.0, "y_um": -6.0, "ppm": 50.0,
                                              "fall_off_um": 10.0}
    for name, fn in BASELINES.items():
        try:
            base = fn(4, 4, s.pitch_um, 3, 4, 2)
        except ValueError:
            continue
        assert rep["worst_inl_lsb"] <= worst_inl(base, s.fields) * (1 + 1e-12), name
    bad = spec_file(tmp_path, SEGMENTED + "hot_spot = { x_um = 8, ppm = 50 }\n", "bad.toml")
    res = _run([str(bad), "--out", str(tmp_path / "b")])
    assert res.exit_code == 1 and "y_um is missing" in res.output
    assert len(res.output.strip().splitlines()) == 1
