"""Hand layouts read as drawn: off-grid units, CSV variants, cell origins, sub-cells."""

import struct

import gdstk
import numpy as np
import pytest

from placer.cli import cli
from placer.io.gdsread import LayoutError
from placer.io.handlayout import read_layout


def _two_rows_gds(path, *, offset=(0.0, 0.0), origin_corner=False, rotation=0.0,
                  reflect=False, contacts=False, pitch=1.0, names=("A", "B")):
    """2 x 10 units of two devices at ``pitch``; unit (0, 3) moved by ``offset``."""
    lib = gdstk.Library("hand", unit=1e-6, precision=1e-9)
    unit = lib.new_cell("FINGER")
    w = 0.4 * pitch
    if origin_corner:              # drawn from its lower-left corner, not its centre
        unit.add(gdstk.rectangle((0, 0), (2 * w, 2 * w), layer=1))
        centre = (w, w)
    else:
        unit.add(gdstk.rectangle((-w, -w), (w, w), layer=1))
        centre = (0.0, 0.0)
    if contacts:                   # the unit places its own contacts by reference
        cut = lib.new_cell("CUT")
        cut.add(gdstk.rectangle((-0.05, -0.05), (0.05, 0.05), layer=3))
        for dx in (-0.2, 0.2):
            unit.add(gdstk.Reference(cut, (centre[0] + dx, centre[1])))
    top = lib.new_cell("TOP")
    for r in range(2):
        for c in range(10):
            x, y = c * pitch, -r * pitch * 2
            if (r, c) == (0, 3):
                x, y = x + offset[0], y + offset[1]
            top.add(gdstk.Reference(unit, (x, y), rotation=rotation, x_reflection=reflect))
            # the label at the unit's drawn centre
            cx, cy = centre
            if reflect:
                cy = -cy
            cs, sn = np.cos(rotation), np.sin(rotation)
            lx, ly = x + cx * cs - cy * sn, y + cx * sn + cy * cs
            top.add(gdstk.Label(names[(r + c) % 2], (lx, ly), layer=10))
    lib.write_gds(str(path))


def test_one_unit_off_the_grid_is_snapped_and_listed_not_a_new_grid(tmp_path):
    """One unit 50 nm off a 1 um pitch: the grid stays 2 x 10 at 1 x 2 um and the unit is
    listed with its offset (it used to make a 2 x 101 grid at 0.05 um)."""
    _two_rows_gds(tmp_path / "off.gds", offset=(0.05, 0.0))
    rec = read_layout(tmp_path / "off.gds")
    assert rec.pattern.shape == (2, 10)
    assert rec.pitch_um == pytest.approx((1.0, 2.0))
    assert any("snapped 1 units" in n and "5.0% of a pitch" in n for n in rec.notes)


def test_a_unit_far_off_the_grid_is_named_not_absorbed(tmp_path):
    _two_rows_gds(tmp_path / "far.gds", offset=(0.45, 0.0))
    with pytest.raises(LayoutError, match=r"1 units lie more than 25% of a pitch off"):
        read_layout(tmp_path / "far.gds")


def test_csv_off_grid_by_two_percent_keeps_its_grid(tmp_path):
    """A CSV with x = 1.02 among units on a 1 um pitch: 2 rows on the 1 um grid."""
    rows = ["x_um,y_um,device"] + [f"{c * 1.0 + (0.02 if (r, c) == (0, 1) else 0):g},"
                                   f"{-r * 2.0:g},{'AB'[(r + c) % 2]}"
                                   for r in range(2) for c in range(51)]
    (tmp_path / "u.csv").write_text("\n".join(rows) + "\n")
    rec = read_layout(tmp_path / "u.csv")
    assert rec.pattern.shape == (2, 51) and rec.pitch_um == pytest.approx((1.0, 2.0))
    assert any("snapped 1 units" in n for n in rec.notes)


@pytest.mark.parametrize("text", [
    "X,Y,Name\n0,0,A\n1,0,B\n2,0,A\n3,0,B\n",
    "name;y_um;x_um\nA;0;0\nB;0;1\nA;0;2\nB;0;3\n",
    "0\t0\tA\n1\t0\tB\n2\t0\tA\n3\t0\tB\n",
    "\ufeff0,0,A,>\n1,0,B,<\n2,0,A,>\n3,0,B,<\n",
])
def test_csv_headers_in_any_case_and_order_no_header_and_other_separators(tmp_path, text):
    (tmp_path / "u.csv").write_text(text, encoding="utf-8")
    rec = read_layout(tmp_path / "u.csv")
    assert rec.fmt == "csv"
    assert rec.pattern.shape == (1, 4)
    assert [rec.pattern.devices[d] for d in rec.pattern.ids[0]] == ["A", "B", "A", "B"]


def test_cells_drawn_about_a_corner_sit_at_their_drawn_centre(tmp_path):
    """Units placed by a corner origin and mirrored: their bounding-box centres form the
    1 um grid (by the origin they would look off-grid with empty slots)."""
    _two_rows_gds(tmp_path / "corner.gds", origin_corner=True, reflect=True)
    rec = read_layout(tmp_path / "corner.gds")
    assert rec.pattern.shape == (2, 10)
    assert np.all(rec.pattern.ids >= 0)


@pytest.mark.parametrize("rotation", [np.pi / 2, 3 * np.pi / 2])
def test_turned_units_are_read_and_their_orientation_is_noted(tmp_path, rotation):
    _two_rows_gds(tmp_path / "turn.gds", rotation=rotation)
    rec = read_layout(tmp_path / "turn.gds")
    assert rec.pattern.shape == (2, 10)
    assert any("turned by 90 or 270 degrees" in n for n in rec.notes)
    assert np.all(rec.pattern.orient == 0)


def test_unit_cells_that_place_their_own_contacts_stay_one_unit_each(tmp_path):
    _two_rows_gds(tmp_path / "sub.gds", contacts=True)
    rec = read_layout(tmp_path / "sub.gds")
    assert rec.pattern.shape == (2, 10)
    assert rec.pattern.counts() == (10, 10)


def test_a_pitch_that_is_not_whole_nanometres_is_read(tmp_path):
    _two_rows_gds(tmp_path / "p.gds", pitch=1.2345)
    rec = read_layout(tmp_path / "p.gds")
    assert rec.pattern.shape == (2, 10)
    assert rec.pitch_um[0] == pytest.approx(1.2345, abs=1e-3)


def test_labels_that_differ_only_by_case_are_refused_with_the_pair_named(tmp_path):
    _two_rows_gds(tmp_path / "case.gds", names=("A", "a"))
    with pytest.raises(LayoutError, match="'A' and 'a' differ only by case"):
        read_layout(tmp_path / "case.gds")


def test_non_ascii_text_on_another_layer_does_not_reject_the_file(tmp_path):
    _two_rows_gds(tmp_path / "t.gds")
    lib = gdstk.read_gds(str(tmp_path / "t.gds"))
    top = next(c for c in lib.cells if c.name == "TOP")
    lib.write_gds(str(tmp_path / "t2.gds"))
    raw = bytearray((tmp_path / "t2.gds").read_bytes())
    # a TEXT on layer 99 with a byte beyond ASCII, appended before ENDSTR of TOP
    text = b"Z\xe9"
    rec_bytes = (struct.pack(">HBB", 4, 0x0C, 0) + struct.pack(">HBBh", 6, 0x0D, 2, 99)
                 + struct.pack(">HBBh", 6, 0x16, 2, 0) + struct.pack(">HBBii", 12, 0x10, 3, 0, 0)
                 + struct.pack(">HBB", 4 + len(text), 0x19, 6) + text
                 + struct.pack(">HBB", 4, 0x11, 0))
    assert top is not None
    end = raw.rfind(struct.pack(">HBB", 4, 0x07, 0))      # the last ENDSTR
    raw[end:end] = rec_bytes
    (tmp_path / "t3.gds").write_bytes(bytes(raw))
    rec = read_layout(tmp_path / "t3.gds")
    assert rec.pattern.shape == (2, 10)


def test_array_reference_bombs_and_absurd_units_are_refused(tmp_path, runner):
    lib = gdstk.Library("bomb", unit=1e-6, precision=1e-9)
    unit = lib.new_cell("U")
    unit.add(gdstk.rectangle((0, 0), (1, 1)))
    top = lib.new_cell("TOP")
    for i in range(3):
        top.add(gdstk.Reference(unit, (0, i * 2000.0), columns=1000, rows=1000,
                                spacing=(1, 1)))
    lib.write_gds(str(tmp_path / "bomb.gds"))
    with pytest.raises(Exception, match="limit"):
        read_layout(tmp_path / "bomb.gds")
    small = gdstk.Library("u", unit=1e-6, precision=1e-9)
    small.new_cell("TOP").add(gdstk.rectangle((0, 0), (1, 1)))
    small.write_gds(str(tmp_path / "u.gds"))
    raw = bytearray((tmp_path / "u.gds").read_bytes())
    at = raw.find(bytes([0, 20, 0x03, 0x05]))               # the UNITS record
    raw[at + 12:at + 20] = bytes([0x7F, 0x10, 0, 0, 0, 0, 0, 0])   # 1e70-ish metres
    (tmp_path / "units.gds").write_bytes(bytes(raw))
    result = runner.invoke(cli, ["grade", str(tmp_path / "units.gds"), "--json"])
    assert result.exit_code == 1 and "Traceback" not in result.output
    assert "UNITS" in result.output


def test_grade_gives_every_position_in_the_files_own_frame(runner):
    """One report, one frame: for a CSV the device table's centroids were in the pattern's
    frame (x from 0, y down from 0) while the units adding most were in the CSV's. Each
    centroid must be the mean of that device's rows of the CSV, read here directly."""
    import csv

    from tests.helpers import SAMPLES

    path = SAMPLES / "bias_mirror_hand.csv"
    rows = list(csv.DictReader(ln for ln in path.read_text().splitlines()
                               if not ln.startswith("#")))
    result = runner.invoke(cli, ["grade", str(path), "--spec", str(SAMPLES / "bias_mirror.toml")])
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    assert "in the CSV's coordinates" in next(ln for ln in lines if ln.startswith("Devices"))
    for device in ("MREF", "MOUTA", "MOUTB"):
        xs = [float(r["x_um"]) for r in rows if r["device"] == device]
        ys = [float(r["y_um"]) for r in rows if r["device"] == device]
        row = next(ln.split() for ln in lines if ln.split()[:1] == [device])
        assert float(row[2]) == pytest.approx(np.mean(xs), abs=0.06)
        assert float(row[3]) == pytest.approx(np.mean(ys), abs=0.006)
