"""repair applies its swaps to the user's own GDSII (repaired-own.gds): the swapped units'
references exchanged in place, every other byte as it was.

The edited file is checked with gdstk, a general-purpose GDSII library independent of
placer's reader: the references of the array cell, the labels and every other cell."""

from __future__ import annotations

import gdstk
import numpy as np
import pytest

from placer.cli import cli
from placer.io.handlayout import read_layout
from placer.io.pattern import parse_pattern
from tests.helpers import SAMPLES

SPEC = SAMPLES / "bias_mirror.toml"


def _clustered(path, *, corner: bool, aref: bool = False) -> None:
    """2 x 8 units, A on the left half and B on the right (a linear error to repair);
    labels in the array cell at each unit's centre. ``corner``: the unit cell is drawn
    from its lower-left corner and every other unit is mirrored, so that moving a
    reference's origin by the pitch would not move its centre there."""
    lib = gdstk.Library("hand", unit=1e-6, precision=1e-9)
    cut = lib.new_cell("CUT")                     # a sub-cell the edit must leave alone
    cut.add(gdstk.rectangle((-0.05, -0.05), (0.05, 0.05), layer=3))
    unit = lib.new_cell("FINGER")
    if corner:
        unit.add(gdstk.rectangle((0, 0), (0.8, 1.6), layer=1))
        unit.add(gdstk.Reference(cut, (0.4, 0.4)))
    else:
        unit.add(gdstk.rectangle((-0.4, -0.8), (0.4, 0.8), layer=1))
        unit.add(gdstk.Reference(cut, (0.0, -0.4)))
    top = lib.new_cell("TOP")
    top.add(gdstk.FlexPath([(-1, -5), (9, -5)], 0.2, layer=5))    # the user's wiring
    if aref:
        top.add(gdstk.Reference(unit, (0, 0), columns=8, rows=2, spacing=(1.0, -2.0)))
    for r in range(2):
        for c in range(8):
            x, y = c * 1.0, -r * 2.0
            mirror = corner and c % 2 == 1
            if not aref:
                if corner:   # a mirrored corner cell: shift so its centre stays on the grid
                    top.add(gdstk.Reference(unit, (x - 0.4, y + (0.8 if mirror else -0.8)),
                                            x_reflection=mirror))
                else:
                    top.add(gdstk.Reference(unit, (x, y)))
            top.add(gdstk.Label("A" if c < 4 else "B", (x, y), layer=10))
    lib.write_gds(str(path))


def _names(pattern):
    return [[pattern.devices[i] if i >= 0 else str(i) for i in row] for row in pattern.ids]


def _refs(path):
    lib = gdstk.read_gds(str(path))
    top = next(c for c in lib.cells if c.name == "TOP")
    refs = []
    for r in top.references:                    # cell, mirror, and where its centre lands
        (x0, y0), (x1, y1) = r.bounding_box()
        refs.append((r.cell.name, bool(r.x_reflection), round((x0 + x1) / 2, 4),
                     round((y0 + y1) / 2, 4)))
    refs.sort()
    labels = sorted((lb.text, round(lb.origin[0], 4), round(lb.origin[1], 4))
                    for lb in top.labels)
    others = {c.name: sorted(tuple(np.round(p.points, 4).ravel()) for p in c.polygons)
              for c in lib.cells if c.name != "TOP"}
    paths = [np.round(p.spine(), 4).tolist() for p in top.paths]
    return refs, labels, others, paths


@pytest.mark.parametrize("corner", [False, True])
def test_repair_exchanges_the_swapped_references_and_nothing_else(tmp_path, runner, corner):
    hand = tmp_path / "hand.gds"
    _clustered(hand, corner=corner)
    out = tmp_path / "o"
    res = runner.invoke(cli, ["repair", str(hand), "--out", str(out), "--time-limit", "3"])
    assert res.exit_code == 0, res.output
    own = out / "repaired-own.gds"
    assert own.is_file(), res.output
    # placer's own reader: the edited file is the repaired pattern, unit for unit
    repaired = parse_pattern((out / "repaired.txt").read_text())
    again = read_layout(own).pattern
    assert _names(again) == _names(repaired)
    # gdstk: the same references (cells, transforms), only the swapped ones moved, each
    # label on its unit; the other cells and the wiring untouched
    refs0, labels0, others0, paths0 = _refs(hand)
    refs1, labels1, others1, paths1 = _refs(own)
    assert others1 == others0 and paths1 == paths0
    # every unit still lands centre on centre on a slot of the grid (with its own cell
    # and mirror), and the labels are the same ones, moved
    assert sorted((n, m) for n, m, _, _ in refs1) == sorted((n, m) for n, m, _, _ in refs0)
    assert sorted((x, y) for _, _, x, y in refs1) == sorted((x, y) for _, _, x, y in refs0)
    swaps = res.output.count(". swap ")
    assert swaps >= 1 and labels1 != labels0
    assert sorted(t for t, _, _ in labels1) == sorted(t for t, _, _ in labels0)
    # the label of every unit lies at that unit's centre in the edited file
    for text, x, y in labels1:
        assert again.ids[round(-y / 2.0), round(x)] == again.devices.index(text)
    # byte for byte: only XY records changed (same length, same records)
    a, b = hand.read_bytes(), own.read_bytes()
    assert len(a) == len(b)
    changed = sum(x != y for x, y in zip(a, b, strict=True))
    assert 0 < changed <= 8 * 4 * swaps


def test_units_inside_an_array_reference_are_not_edited_and_the_note_says_why(tmp_path,
                                                                                  runner):
    hand = tmp_path / "hand.gds"
    _clustered(hand, corner=False, aref=True)
    out = tmp_path / "o"
    res = runner.invoke(cli, ["repair", str(hand), "--out", str(out), "--time-limit", "3"])
    assert res.exit_code == 0, res.output
    assert not (out / "repaired-own.gds").exists()
    assert "repaired-own.gds not written" in res.output
    assert "not placed by a reference of cell 'TOP' of its own" in res.output


def test_the_sample_hand_layout_is_repaired_in_place(tmp_path, runner):
    """The shipped GDSII hand layout: one swap, 8 bytes of two XY records changed."""
    out = tmp_path / "o"
    res = runner.invoke(cli, ["repair", str(SAMPLES / "bias_mirror_hand.gds"), "--spec",
                              str(SPEC), "--out", str(out), "--time-limit", "3"])
    assert res.exit_code == 0, res.output
    own = (out / "repaired-own.gds").read_bytes()
    orig = (SAMPLES / "bias_mirror_hand.gds").read_bytes()
    assert len(own) == len(orig) and own != orig
    repaired = parse_pattern((out / "repaired.txt").read_text())
    assert _names(read_layout(out / "repaired-own.gds").pattern) == _names(repaired)


def _layout(path, rows: list[str], *, box=(0.8, 1.6), label_off=(0.0, 0.0),
            pitch=(1.0, 2.0), aref1: bool = False) -> None:
    """One leaf unit cell (a ``box`` rectangle about its origin) per slot of ``rows``
    (one letter a device), placed by SREFs (or one-instance AREFs), a label per unit in
    the array cell at the unit's centre plus ``label_off``."""
    lib = gdstk.Library("hand", unit=1e-6, precision=1e-9)
    unit = lib.new_cell("U")
    unit.add(gdstk.rectangle((-box[0] / 2, -box[1] / 2), (box[0] / 2, box[1] / 2), layer=1))
    top = lib.new_cell("TOP")
    for r, row in enumerate(rows):
        for c, name in enumerate(row):
            x, y = c * pitch[0], -r * pitch[1]
            if aref1:
                top.add(gdstk.Reference(unit, (x, y), columns=1, rows=1, spacing=(1, 1)))
            else:
                top.add(gdstk.Reference(unit, (x, y)))
            top.add(gdstk.Label(name, (x + label_off[0], y + label_off[1]), layer=10))
    lib.write_gds(str(path))


def _repair_in_place(tmp_path, runner, hand):
    out = tmp_path / "o"
    res = runner.invoke(cli, ["repair", str(hand), "--out", str(out), "--time-limit", "3"])
    assert res.exit_code == 0, res.output
    return res, out


@pytest.mark.parametrize("case", ["chained", "label_beside", "overlapping", "aref1",
                                  "flat_units"])
def test_the_edited_layout_reads_back_as_the_repaired_pattern(tmp_path, runner, case):
    """Cases a review found wrong: a slot in two swaps (the swaps compose into one move
    per unit), a label beside its unit's box or inside a neighbour's (each label goes
    with the unit the importer gives it to), one-instance AREFs (all three points move),
    units much flatter than the pitch (the importer's per-axis tolerance)."""
    hand = tmp_path / "hand.gds"
    kw: dict = {
        "chained": {"rows": ["BCCACA", "ABBCAB"]},
        "label_beside": {"rows": ["AAAABBBB", "AAAABBBB"], "box": (0.6, 1.6),
                         "label_off": (0.4, 0.0)},
        "overlapping": {"rows": ["AAAACBBB", "AAAABBBB"], "box": (1.2, 1.6),
                        "label_off": (-0.45, 0.0)},
        "aref1": {"rows": ["AAAABBBB", "AAAABBBB"], "aref1": True},
        "flat_units": {"rows": ["AAAABBBB", "AAAABBBB"], "box": (0.8, 0.3)},
    }[case]
    _layout(hand, **kw)
    res, out = _repair_in_place(tmp_path, runner, hand)
    assert res.output.count(". swap ") >= 1
    assert (out / "repaired-own.gds").is_file(), res.output
    repaired = parse_pattern((out / "repaired.txt").read_text())
    assert _names(read_layout(out / "repaired-own.gds").pattern) == _names(repaired)


def test_a_row_cell_holding_several_units_is_not_moved_whole(tmp_path):
    """Rows of three units placed as cells: a row's centre is its middle unit's, and
    moving the middle units moved whole rows; now such a unit is named and nothing is
    edited."""
    from placer.errors import LayoutError
    from placer.io.gdsswap import swap_units

    lib = gdstk.Library("hand", unit=1e-6, precision=1e-9)
    unit = lib.new_cell("U")
    unit.add(gdstk.rectangle((-0.4, -0.8), (0.4, 0.8), layer=1))
    row = lib.new_cell("ROW")
    for c in range(3):
        row.add(gdstk.Reference(unit, (c * 1.0, 0)))
    top = lib.new_cell("TOP")
    for r, names in enumerate(["ABA", "BAB"]):
        top.add(gdstk.Reference(row, (0, -2.0 * r)))
        for c, n in enumerate(names):
            top.add(gdstk.Label(n, (c * 1.0, -2.0 * r), layer=10))
    path = tmp_path / "rows.gds"
    lib.write_gds(str(path))
    middle = [((1.0, 0.0), (1.0, -2.0)), ((1.0, -2.0), (1.0, 0.0))]
    with pytest.raises(LayoutError, match=r"unit at \(1, 0\) um is not placed by a "
                                          r"reference of cell 'TOP' of its own"):
        swap_units(path, middle, cell=None, label_layer=(10, 0), pitch_um=(1.0, 2.0))
