"""Tests of the independent connectivity checker (tests/extraction.py).

Every layout here is built by the test itself, with gdstk or with a small
record writer, in a temporary directory.  Expected positions are worked out by
hand from the GDSII placement rules (mirror in x, magnify, rotate, move).
"""

from __future__ import annotations

import math
import struct
import subprocess
import sys
import time
from pathlib import Path

import gdstk
import numpy as np
import pytest
import shapely
from hypothesis import given
from hypothesis import strategies as st

from tests.extraction import Report, check, components, main, read_layout
from tests.helpers import ROOT

LAYER_MAP = """\
[layers]
diffusion = [1, 0]
gate      = [2, 0]
contact   = [3, 0]
metal1    = [4, 0]
metal2    = [5, 0]
via1      = [6, 0]
label     = [10, 0]
outline   = [11, 0]
dummy     = [12, 0]
marker    = [13, 0]

[connect]
conductors = ["diffusion", "gate", "metal1", "metal2"]
cuts = { contact = ["diffusion", "gate", "metal1"], via1 = ["metal1", "metal2"] }
splits = { gate = ["diffusion"] }
"""

LAYERS = {
    "diffusion": (1, 0),
    "gate": (2, 0),
    "contact": (3, 0),
    "metal1": (4, 0),
    "metal2": (5, 0),
    "via1": (6, 0),
    "label": (10, 0),
    "outline": (11, 0),
}
M1 = LAYERS["metal1"]


# --------------------------------------------------------------------------
# helpers
# --------------------------------------------------------------------------


def rect(role: str, x0: float, y0: float, x1: float, y1: float) -> gdstk.Polygon:
    layer, datatype = LAYERS[role]
    return gdstk.rectangle((x0, y0), (x1, y1), layer=layer, datatype=datatype)


def text(role: str, name: str, x: float, y: float) -> gdstk.Label:
    layer, texttype = LAYERS[role]
    return gdstk.Label(name, (x, y), layer=layer, texttype=texttype)


def write_map(tmp_path: Path, body: str = LAYER_MAP, name: str = "map.toml") -> Path:
    path = tmp_path / name
    path.write_text(body)
    return path


def write_cells(tmp_path: Path, *cells: gdstk.Cell, unit=1e-6, precision=1e-9) -> Path:
    lib = gdstk.Library(unit=unit, precision=precision)
    for cell in cells:
        lib.add(cell)
    path = tmp_path / "layout.gds"
    lib.write_gds(path)
    return path


def flat(tmp_path: Path, *elements, layer_map: str = LAYER_MAP, **kwargs) -> Report:
    """Check a one-cell layout holding `elements`."""
    top = gdstk.Cell("TOP")
    top.add(*elements)
    return check(write_cells(tmp_path, top), write_map(tmp_path, layer_map), **kwargs)


def bounds_um(layout, key) -> list[tuple[float, ...]]:
    """Sorted bounding boxes (micrometres) of the flattened polygons on `key`."""
    boxes = shapely.bounds(layout.polygons[key]) * layout.db_um
    return sorted(tuple(round(float(v), 6) for v in box) for box in boxes)


def box(x0, y0, x1, y1) -> tuple[float, ...]:
    return (min(x0, x1), min(y0, y1), max(x0, x1), max(y0, y1))


# --------------------------------------------------------------------------
# shorts, opens, stray labels
# --------------------------------------------------------------------------


def test_overlapping_shapes_with_two_names_are_one_short(tmp_path):
    report = flat(
        tmp_path,
        rect("metal1", 0, 0, 2, 1),
        rect("metal1", 1, 0.5, 3, 2),
        text("metal1", "A", 0.5, 0.5),
        text("metal1", "B", 2.5, 1.5),
    )
    assert report.shorts == [("A", "B")]
    assert report.opens == [] and report.stray_labels == []
    assert report.n_nodes == 1
    assert report.nets == {"A": 1, "B": 1}
    assert not report.ok()


def test_shapes_touching_at_an_edge_or_a_corner_merge_but_a_gap_does_not(tmp_path):
    report = flat(
        tmp_path,
        rect("metal1", 0, 0, 0.3, 1),
        rect("metal1", 0.3, 0, 0.7, 1),  # shares an edge with the first
        rect("metal1", 0.7, 1, 1.1, 2),  # shares one corner with the second
        rect("metal1", 1.101, 1, 2, 2),  # one nanometre away from the third
        text("metal1", "A", 0.1, 0.5),
        text("metal1", "A", 1.0, 1.5),
        text("metal1", "A", 1.5, 1.5),
    )
    assert report.opens == ["A"]
    assert report.n_nodes == 2
    assert report.nets == {"A": 3}
    assert report.shorts == []


def test_touching_is_exact_after_off_grid_transforms(tmp_path):
    # 1 um shrunk by 0.7 comes out a hair below 0.7 um in floating point; snapped to
    # the database grid it meets the shape that starts at 0.7 um.
    unit = gdstk.Cell("UNIT")
    unit.add(rect("metal1", 0, 0, 1, 1))
    top = gdstk.Cell("TOP")
    top.add(gdstk.Reference(unit, (0, 0), magnification=0.7))
    top.add(rect("metal1", 0, 0.7, 0.7, 1.4))
    top.add(text("metal1", "A", 0.35, 0.35), text("metal1", "A", 0.35, 1.0))
    gds = write_cells(tmp_path, unit, top)
    coords = shapely.get_coordinates(read_layout(gds, {M1}).polygons[M1])
    assert np.array_equal(coords, np.rint(coords))
    report = check(gds, write_map(tmp_path))
    assert report.opens == []
    assert report.n_nodes == 1


def test_labels_of_one_net_on_separate_shapes_are_one_open(tmp_path):
    report = flat(
        tmp_path,
        rect("metal1", 0, 0, 1, 1),
        rect("metal1", 2, 0, 3, 1),
        rect("metal1", 4, 0, 5, 1),
        text("metal1", "A", 0.5, 0.5),
        text("metal1", "A", 2.5, 0.5),
        text("metal1", "A", 4.5, 0.5),
        text("metal1", "B", 4.2, 0.2),
    )
    assert report.opens == ["A"]
    assert report.shorts == [("A", "B")]
    assert report.n_nodes == 3
    assert report.nets == {"A": 3, "B": 1}


def test_stray_label_is_reported_and_other_texts_are_ignored(tmp_path):
    report = flat(
        tmp_path,
        rect("metal1", 0, 0, 1, 1),
        text("metal1", "A", 1, 1),  # on the corner: touches the shape
        text("metal1", "LOST", 1.25, 0.5),  # on nothing
        text("label", "M1_device", 5, 5),  # device name on the label role
        gdstk.Label("B", (0.5, 0.5), layer=4, texttype=7),  # same layer, other texttype
        text("outline", "C", 0.5, 0.5),
    )
    assert report.stray_labels == [("LOST", 1.25, 0.5)]
    assert report.nets == {"A": 1, "LOST": 1}
    assert report.shorts == [] and report.opens == []
    assert report.details() == ["stray label: 'LOST' at (1.25, 0.5) um"]


# --------------------------------------------------------------------------
# cuts and splits
# --------------------------------------------------------------------------


def test_a_via_joins_the_metals_it_overlaps(tmp_path):
    report = flat(
        tmp_path,
        rect("metal1", 0, 0, 2, 1),
        rect("metal2", 1, 0, 5, 1),
        rect("metal1", 4, 0, 6, 1),
        rect("via1", 1.2, 0.2, 1.8, 0.8),
        rect("via1", 4.2, 0.2, 4.8, 0.8),
        text("metal1", "A", 0.5, 0.5),
        text("metal1", "A", 5.5, 0.5),
        text("metal2", "A", 3, 0.5),
    )
    assert report.ok(), report.details()
    assert report.n_nodes == 1
    assert report.nets == {"A": 3}


def test_a_cut_that_only_touches_a_conductor_does_not_join_it(tmp_path):
    report = flat(
        tmp_path,
        rect("metal1", 0, 0, 1, 1),
        rect("metal2", 1, 0, 2, 1),
        rect("via1", 1, 0, 2, 1),  # overlaps metal2, only shares an edge with metal1
        text("metal1", "A", 0.5, 0.5),
        text("metal2", "B", 1.5, 0.5),
    )
    assert report.shorts == []
    assert report.n_nodes == 2
    # a cut on another layer joins nothing
    report = flat(
        tmp_path,
        rect("metal1", 0, 0, 2, 1),
        rect("metal2", 0, 0, 2, 1),
        rect("outline", 0, 0, 2, 1),
        text("metal1", "A", 0.5, 0.5),
        text("metal2", "B", 1.5, 0.5),
    )
    assert report.shorts == []


def test_a_gate_splits_the_diffusion_into_two_regions(tmp_path):
    shapes = [
        rect("diffusion", 0, 0, 3, 1),
        rect("gate", 1, -0.5, 1.2, 1.5),
        text("diffusion", "S", 0.5, 0.5),
        text("diffusion", "D", 2, 0.5),
        text("gate", "G", 1.1, 1.3),
    ]
    report = flat(tmp_path, *shapes)
    assert report.ok(), report.details()
    assert report.n_nodes == 3

    # A label in the channel lies on no diffusion piece.
    report = flat(tmp_path, *shapes, text("diffusion", "C", 1.1, 0.5))
    assert report.stray_labels == [("C", 1.1, 0.5)]

    # Without the split rule the diffusion is one piece: source and drain short.
    plain = LAYER_MAP.replace('splits = { gate = ["diffusion"] }', "splits = {}")
    report = flat(tmp_path, *shapes, layer_map=plain)
    assert report.shorts == [("D", "S")]

    # A gate that does not cross the diffusion fully leaves it in one piece.
    report = flat(
        tmp_path,
        rect("diffusion", 0, 0, 3, 1),
        rect("gate", 1, 0.5, 1.2, 1.5),
        text("diffusion", "S", 0.5, 0.5),
        text("diffusion", "D", 2, 0.5),
    )
    assert report.shorts == [("D", "S")]


def test_a_contact_on_gate_and_diffusion_joins_them(tmp_path):
    device = [
        rect("diffusion", 0, 0, 3, 1),
        rect("gate", 1, -0.5, 1.2, 1.5),
        text("diffusion", "S", 0.5, 0.5),
        text("diffusion", "D", 2, 0.5),
        text("gate", "G", 1.1, 1.3),
    ]
    # overlaps the gate and the source region
    report = flat(tmp_path, *device, rect("contact", 0.9, 0.4, 1.1, 0.6))
    assert report.shorts == [("G", "S")]
    assert report.n_nodes == 2
    # ... and metal1 above it
    report = flat(
        tmp_path,
        *device,
        rect("contact", 0.9, 0.4, 1.1, 0.6),
        rect("metal1", 0.8, 0.3, 1.3, 0.7),
        text("metal1", "M", 0.85, 0.35),
    )
    assert report.shorts == [("G", "M", "S")]
    # over the gate and the channel only: the channel is no conductor
    report = flat(tmp_path, *device, rect("contact", 1.05, 0.4, 1.15, 0.6))
    assert report.shorts == []
    assert report.n_nodes == 3


# --------------------------------------------------------------------------
# hierarchy
# --------------------------------------------------------------------------


def unit_cell() -> gdstk.Cell:
    """A cell with one asymmetric metal1 shape, x 1 .. 3, y 0 .. 1, and a label on it."""
    unit = gdstk.Cell("UNIT")
    unit.add(rect("metal1", 1, 0, 3, 1), text("metal1", "u", 2.5, 0.25))
    return unit


def test_references_are_reflected_rotated_magnified_and_arrayed(tmp_path):
    unit = unit_cell()
    top = gdstk.Cell("TOP")
    quarter = math.pi / 2
    top.add(
        gdstk.Reference(unit, (10, 0), rotation=quarter),
        gdstk.Reference(unit, (20, 0), rotation=2 * quarter),
        gdstk.Reference(unit, (30, 0), rotation=3 * quarter),
        gdstk.Reference(unit, (40, 0), x_reflection=True),
        gdstk.Reference(unit, (50, 0), rotation=quarter, x_reflection=True),
        gdstk.Reference(unit, (60, 0), magnification=2),
        gdstk.Reference(unit, (0, 20), columns=3, rows=2, spacing=(10, 5)),
        # gdstk turns the array lattice with the reference: columns run along +y
        gdstk.Reference(unit, (100, 0), rotation=quarter, columns=2, rows=2, spacing=(10, 4)),
        # ... and a mirrored array's rows run downwards
        gdstk.Reference(unit, (0, -20), x_reflection=True, columns=2, rows=2, spacing=(10, 4)),
    )
    gds = write_cells(tmp_path, unit, top)
    layout = read_layout(gds, {M1}, {M1})

    expected = [
        box(9, 1, 10, 3),  # 90: (x, y) -> (-y, x)
        box(17, -1, 19, 0),  # 180: (x, y) -> (-x, -y)
        box(30, -3, 31, -1),  # 270: (x, y) -> (y, -x)
        box(41, -1, 43, 0),  # mirror: (x, y) -> (x, -y)
        box(50, 1, 51, 3),  # mirror then 90: (x, y) -> (y, x)
        box(62, 0, 66, 2),  # magnified by 2
    ]
    expected += [
        box(1 + 10 * i, 20 + 5 * j, 3 + 10 * i, 21 + 5 * j) for i in range(3) for j in (0, 1)
    ]
    expected += [
        box(99 - 4 * j, 1 + 10 * i, 100 - 4 * j, 3 + 10 * i) for i in (0, 1) for j in (0, 1)
    ]
    expected += [
        box(1 + 10 * i, -21 - 4 * j, 3 + 10 * i, -20 - 4 * j) for i in (0, 1) for j in (0, 1)
    ]
    assert bounds_um(layout, M1) == sorted(expected)

    anchors = sorted(
        (round(x * layout.db_um, 6), round(y * layout.db_um, 6)) for _, x, y in layout.labels[M1]
    )
    expected_anchors = [(9.75, 2.5), (17.5, -0.25), (30.25, -2.5), (42.5, -0.25), (50.25, 2.5)]
    expected_anchors += [(65, 0.5)]
    expected_anchors += [(2.5 + 10 * i, 20.25 + 5 * j) for i in range(3) for j in (0, 1)]
    expected_anchors += [(99.75 - 4 * j, 2.5 + 10 * i) for i in (0, 1) for j in (0, 1)]
    expected_anchors += [(2.5 + 10 * i, -20.25 - 4 * j) for i in (0, 1) for j in (0, 1)]
    assert anchors == sorted(expected_anchors)

    # Every child label lands on its own copy: nothing stray, one open net.
    report = check(gds, write_map(tmp_path))
    assert report.stray_labels == []
    assert report.nets == {"u": 20}
    assert report.opens == ["u"]
    assert report.n_nodes == 20


def test_nested_flattening_agrees_with_gdstk(tmp_path):
    leaf = gdstk.Cell("LEAF")
    leaf.add(gdstk.Polygon([(0, 0), (2, 0), (0, 1)], layer=4))  # a triangle shows orientation
    leaf.add(rect("metal1", 3, 0, 4, 0.5))
    mid = gdstk.Cell("MID")
    mid.add(
        gdstk.Reference(
            leaf,
            (1, 2),
            rotation=3 * math.pi / 2,
            x_reflection=True,
            columns=2,
            rows=3,
            spacing=(5, 6),
        ),
        gdstk.Reference(leaf, (-7, 3), rotation=math.pi),
    )
    top = gdstk.Cell("TOP")
    top.add(
        gdstk.Reference(mid, (100, -50), rotation=math.pi / 2, magnification=3),
        gdstk.Reference(mid, (0, 0), x_reflection=True, columns=2, rows=1, spacing=(40, 0)),
    )
    gds = write_cells(tmp_path, leaf, mid, top)
    layout = read_layout(gds, {M1})

    def signature(points, scale: float) -> tuple:
        return tuple(sorted(map(tuple, np.rint(np.asarray(points) * scale).astype(int).tolist())))

    ours = sorted(signature(shapely.get_coordinates(p)[:-1], 1) for p in layout.polygons[M1])
    theirs = sorted(signature(p.points, 1000) for p in top.get_polygons(layer=4, datatype=0))
    assert len(ours) == 2 * 7 * 3  # 2 shapes, 7 leaves per MID, 3 MIDs
    assert ours == theirs


# A small GDSII record writer: it lets a test state array lattices explicitly,
# the way the file stores them, without any library's conventions in between.
# Record kinds, as numbered by the GDSII stream format:
HEADER, BGNLIB, LIBNAME, UNITS, ENDLIB, BGNSTR, STRNAME, ENDSTR = range(8)
BOUNDARY, PATH, SREF, AREF, TEXT, LAYER, DATATYPE, WIDTH, XY, ENDEL, SNAME, COLROW = range(8, 20)
TEXTTYPE, STRING, STRANS, MAG, ANGLE, PATHTYPE = 0x16, 0x19, 0x1A, 0x1B, 0x1C, 0x21
_DATES = struct.pack(">12h", *([2024, 1, 1, 0, 0, 0] * 2))


def _real8(value: float) -> bytes:
    """The stream format's 8-byte real: sign, excess-64 base-16 exponent, 56-bit fraction."""
    if value == 0:
        return bytes(8)
    sign = 0x80 if value < 0 else 0
    value = abs(value)
    exponent = 0
    while value >= 1:
        value /= 16
        exponent += 1
    while value < 1 / 16:
        value *= 16
        exponent -= 1
    return bytes([sign | (exponent + 64)]) + round(value * 2**56).to_bytes(7, "big")


def _record(kind: int, data_type: int = 0, payload: bytes = b"") -> bytes:
    return struct.pack(">HBB", 4 + len(payload), kind, data_type) + payload


def _int2(kind: int, *values: int) -> bytes:
    return _record(kind, 2, struct.pack(f">{len(values)}h", *values))


def _int4(kind: int, *values: int) -> bytes:
    return _record(kind, 3, struct.pack(f">{len(values)}i", *values))


def _string(kind: int, value: str) -> bytes:
    raw = value.encode()
    return _record(kind, 6, raw + b"\0" * (len(raw) % 2))


def _strans(*, mirror: bool = False, mag: float | None = None, angle: float | None = None) -> bytes:
    out = _record(STRANS, 1, b"\x80\x00" if mirror else b"\x00\x00")
    if mag is not None:
        out += _record(MAG, 5, _real8(mag))
    if angle is not None:
        out += _record(ANGLE, 5, _real8(angle))
    return out


def _structure(name: str, *elements: bytes) -> bytes:
    return (
        _record(BGNSTR, 2, _DATES) + _string(STRNAME, name) + b"".join(elements) + _record(ENDSTR)
    )


def _boundary(layer: int, datatype: int, *xy: int) -> bytes:
    body = _int2(LAYER, layer) + _int2(DATATYPE, datatype) + _int4(XY, *xy)
    return _record(BOUNDARY) + body + _record(ENDEL)


def _text(layer: int, texttype: int, x: int, y: int, value: str) -> bytes:
    body = _int2(LAYER, layer) + _int2(TEXTTYPE, texttype) + _int4(XY, x, y)
    return _record(TEXT) + body + _string(STRING, value) + _record(ENDEL)


def _path(layer: int, pathtype: int, width: int, *xy: int) -> bytes:
    body = _int2(LAYER, layer) + _int2(DATATYPE, 0) + _int2(PATHTYPE, pathtype)
    return _record(PATH) + body + _int4(WIDTH, width) + _int4(XY, *xy) + _record(ENDEL)


def test_arrays_follow_the_lattice_points_stored_in_the_file(tmp_path):
    unit = _structure(
        "UNIT",
        _boundary(4, 0, 1000, 0, 3000, 0, 3000, 1000, 1000, 1000, 1000, 0),  # x 1..3, y 0..1 um
        _text(4, 0, 2500, 250, "u"),
    )
    top = _structure(
        "TOP",
        # mirrored, turned 90 degrees; 2 columns along (0, 8) um, 3 rows along (-6, 0) um:
        # the points are the origin, origin + 2 * column step, origin + 3 * row step
        _record(AREF)
        + _string(SNAME, "UNIT")
        + _strans(mirror=True, angle=90.0)
        + _int2(COLROW, 2, 3)
        + _int4(XY, 0, 0, 0, 16000, -18000, 0)
        + _record(ENDEL),
        # magnified 2, turned 270 degrees, at (50, 0) um
        _record(SREF)
        + _string(SNAME, "UNIT")
        + _strans(mag=2.0, angle=270.0)
        + _int4(XY, 50000, 0)
        + _record(ENDEL),
        # paths 0.2 um wide: flush ends, then ends extended by half the width
        _path(4, 0, 200, 100000, 0, 103000, 0),
        _path(4, 2, 200, 100000, 10000, 103000, 10000),
    )
    data = (
        _int2(HEADER, 600)
        + _record(BGNLIB, 2, _DATES)
        + _string(LIBNAME, "LIB")
        + _record(UNITS, 5, _real8(1e-3) + _real8(1e-9))  # user unit 1 um, database unit 1 nm
        + unit
        + top
        + _record(ENDLIB)
    )
    gds = tmp_path / "raw.gds"
    gds.write_bytes(data)
    layout = read_layout(gds, {M1}, {M1})

    # mirror then 90 degrees: (x, y) -> (y, x), so the shape spans x 0 .. 1, y 1 .. 3
    expected = [box(-6 * j, 1 + 8 * i, 1 - 6 * j, 3 + 8 * i) for i in (0, 1) for j in (0, 1, 2)]
    expected.append(box(50, -6, 52, -2))  # 270 degrees: (x, y) -> (y, -x), doubled
    expected.append(box(100, -0.1, 103, 0.1))
    expected.append(box(99.9, 9.9, 103.1, 10.1))
    assert bounds_um(layout, M1) == sorted(expected)
    anchors = sorted(
        (round(x * layout.db_um, 6), round(y * layout.db_um, 6)) for _, x, y in layout.labels[M1]
    )
    assert anchors == sorted(
        [(0.25 - 6 * j, 2.5 + 8 * i) for i in (0, 1) for j in (0, 1, 2)] + [(50.5, -5)]
    )


def test_paths_are_read_with_their_width(tmp_path):
    report = flat(
        tmp_path,
        gdstk.FlexPath([(0, 0), (3, 0)], 0.2, layer=4, simple_path=True),
        gdstk.FlexPath([(0, 5), (3, 5)], 0.2, layer=4, simple_path=True, ends="extended"),
        text("metal1", "A", 0, 0),
        text("metal1", "A", 1, 0.1),  # on the edge, half a width from the spine
        text("metal1", "B", 1, 0.15),  # beyond the edge
        text("metal1", "C", 3.05, 0),  # beyond the flush end
        text("metal1", "D", 3.05, 5),  # inside the extended end
    )
    assert report.stray_labels == [("B", 1.0, 0.15), ("C", 3.05, 0.0)]
    assert report.opens == []
    assert report.n_nodes == 2


def test_the_top_cell_must_be_unique_or_named(tmp_path):
    first, second = gdstk.Cell("FIRST"), gdstk.Cell("SECOND")
    first.add(rect("metal1", 0, 0, 1, 1), text("metal1", "A", 0.5, 0.5))
    second.add(rect("metal1", 0, 0, 1, 1), text("metal1", "B", 0.5, 0.5), text("metal1", "C", 0, 0))
    gds, layers = write_cells(tmp_path, first, second), write_map(tmp_path)
    with pytest.raises(ValueError, match="one top cell"):
        check(gds, layers)
    assert check(gds, layers, cell="FIRST").nets == {"A": 1}
    assert check(gds, layers, cell="SECOND").shorts == [("B", "C")]
    with pytest.raises(ValueError, match="no cell named"):
        check(gds, layers, cell="THIRD")


# --------------------------------------------------------------------------
# layer maps and units
# --------------------------------------------------------------------------

PROCESS_MAP = """\
title = "a user's process map"

[layers]
poly = [7, 0]
m1   = [7, 1]
ct   = [8, 0]
text = [7, 2]

[connect]
conductors = ["poly", "m1"]
cuts = { ct = ["poly", "m1"] }
splits = {}

[drawing]
colours = ["red"]
"""


def test_same_layer_number_with_another_datatype_is_another_conductor(tmp_path):
    def poly(x0, y0, x1, y1):
        return gdstk.rectangle((x0, y0), (x1, y1), layer=7, datatype=0)

    def m1(x0, y0, x1, y1):
        return gdstk.rectangle((x0, y0), (x1, y1), layer=7, datatype=1)

    elements = [
        poly(0, 0, 1, 1),
        m1(0, 0, 1, 1),
        m1(2.5, 2.5, 3.5, 3.5),
        gdstk.Label("P", (0.5, 0.5), layer=7, texttype=0),
        gdstk.Label("M", (0.5, 0.5), layer=7, texttype=1),
        gdstk.Label("Q", (3, 3), layer=7, texttype=0),  # poly's label on an m1 shape
        gdstk.Label("R", (3, 3), layer=7, texttype=2),  # not a conductor's texttype
    ]
    report = flat(tmp_path, *elements, layer_map=PROCESS_MAP)
    assert report.shorts == []
    assert report.n_nodes == 3
    assert report.stray_labels == [("Q", 3.0, 3.0)]
    assert report.nets == {"M": 1, "P": 1, "Q": 1}

    joined = elements + [gdstk.rectangle((0.2, 0.2), (0.8, 0.8), layer=8)]
    assert flat(tmp_path, *joined, layer_map=PROCESS_MAP).shorts == [("M", "P")]


@pytest.mark.parametrize(
    ("body", "message"),
    [
        ("[connect]\nconductors = []\n", r"\[layers\]"),
        ("[layers]\na = [1, 0]\n", r"\[connect\]"),
        ("[layers]\na = [1]\n[connect]\nconductors = ['a']\n", "must be"),
        ("[layers]\na = [1, 0]\n[connect]\nconductors = ['b']\n", "unknown role"),
        (
            "[layers]\na = [1, 0]\nc = [2, 0]\n[connect]\nconductors = ['a']\n"
            "cuts = { c = ['a', 'x'] }\n",
            "unknown role",
        ),
        (
            "[layers]\na = [1, 0]\nb = [2, 0]\nc = [3, 0]\n[connect]\nconductors = ['a']\n"
            "cuts = { c = ['b'] }\n",
            "not a conductor",
        ),
        ("[layers]\na = [1, 0]\nb = [1, 0]\n[connect]\nconductors = ['a', 'b']\n", "share"),
        ("[layers]\na = [1, 0]\n[connect]\nconductors = []\n", "empty"),
    ],
)
def test_bad_layer_maps_are_refused(tmp_path, body, message):
    top = gdstk.Cell("TOP")
    top.add(rect("metal1", 0, 0, 1, 1))
    with pytest.raises(ValueError, match=message):
        check(write_cells(tmp_path, top), write_map(tmp_path, body))


def test_positions_are_reported_in_micrometres_whatever_the_user_unit(tmp_path):
    top = gdstk.Cell("TOP")
    # user unit: 1 nm; database unit: 0.1 nm
    top.add(gdstk.rectangle((0, 0), (1000, 1000), layer=4))
    top.add(gdstk.rectangle((1100, 0), (2000, 1000), layer=4))
    top.add(gdstk.Label("A", (500, 500), layer=4), gdstk.Label("B", (1500, 500), layer=4))
    top.add(gdstk.Label("X", (1500, 1250), layer=4))
    gds = write_cells(tmp_path, top, unit=1e-9, precision=1e-10)
    report = check(gds, write_map(tmp_path), spacing_um={"metal1": 0.15})
    assert report.stray_labels == [("X", 1.5, 1.25)]
    assert report.spacing_violations == [("metal1", "A", "B", pytest.approx(0.1))]
    assert check(gds, write_map(tmp_path), spacing_um={"metal1": 0.1}).spacing_violations == []


# --------------------------------------------------------------------------
# spacing
# --------------------------------------------------------------------------


def test_spacing_is_checked_between_different_nodes_only(tmp_path):
    elements = [
        rect("metal1", 0, 0, 1, 1),
        rect("metal1", 1.1, 0, 2, 1),  # 0.1 from A
        rect("metal1", 0, 1.2, 1, 2),  # 0.2 from A, unlabelled
        # two metal1 shapes 0.1 apart, joined through metal2: one node
        rect("metal1", 3, 0, 4, 1),
        rect("metal1", 4.1, 0, 5, 1),
        rect("metal2", 3.5, 0.2, 4.6, 0.8),
        rect("via1", 3.6, 0.3, 3.8, 0.7),
        rect("via1", 4.3, 0.3, 4.5, 0.7),
        text("metal1", "A", 0.5, 0.5),
        text("metal1", "B", 1.5, 0.5),
        text("metal1", "N", 3.5, 0.5),
        text("metal1", "N", 4.5, 0.5),
    ]
    tight = flat(tmp_path, *elements, spacing_um={"metal1": 0.15})
    assert tight.spacing_violations == [("metal1", "A", "B", pytest.approx(0.1))]
    assert tight.opens == [] and tight.shorts == []

    loose = flat(tmp_path, *elements, spacing_um={"metal1": 0.25})
    assert loose.spacing_violations == [
        ("metal1", "?", "A", pytest.approx(0.2)),
        ("metal1", "?", "B", pytest.approx(math.hypot(0.1, 0.2))),
        ("metal1", "A", "B", pytest.approx(0.1)),
    ]
    # exactly at the limit is allowed; other conductors are not checked
    assert flat(tmp_path, *elements, spacing_um={"metal1": 0.1}).spacing_violations == []
    assert flat(tmp_path, *elements, spacing_um={"metal2": 5}).spacing_violations == []
    with pytest.raises(ValueError, match="not a conductor"):
        flat(tmp_path, *elements, spacing_um={"via1": 0.1})


def test_spacing_ignores_the_two_sides_of_one_gate(tmp_path):
    report = flat(
        tmp_path,
        rect("diffusion", 0, 0, 3, 1),
        rect("gate", 1, -0.5, 1.2, 1.5),
        rect("diffusion", 3.1, 0, 4, 1),
        text("diffusion", "S", 0.5, 0.5),
        text("diffusion", "D", 2, 0.5),
        text("diffusion", "X", 3.5, 0.5),
        spacing_um={"diffusion": 0.3},
    )
    assert report.spacing_violations == [("diffusion", "D", "X", pytest.approx(0.1))]


# --------------------------------------------------------------------------
# the graph helper, the command line and speed
# --------------------------------------------------------------------------


@given(
    st.integers(min_value=1, max_value=25).flatmap(
        lambda n: st.tuples(
            st.just(n),
            st.lists(st.tuples(st.integers(0, n - 1), st.integers(0, n - 1)), max_size=40),
        )
    )
)
def test_components_match_a_plain_search(case):
    n, edges = case
    a = np.array([e[0] for e in edges], dtype=int)
    b = np.array([e[1] for e in edges], dtype=int)
    count, label = components(n, a, b)

    neighbours: dict[int, set[int]] = {v: set() for v in range(n)}
    for u, v in edges:
        neighbours[u].add(v)
        neighbours[v].add(u)
    group = [-1] * n
    groups = 0
    for start in range(n):
        if group[start] >= 0:
            continue
        stack = [start]
        group[start] = groups
        while stack:
            for w in neighbours[stack.pop()]:
                if group[w] < 0:
                    group[w] = groups
                    stack.append(w)
        groups += 1
    assert count == groups
    assert label.tolist() == group


def cli_files(tmp_path: Path, bad: bool) -> tuple[Path, Path]:
    top = gdstk.Cell("TOP")
    top.add(rect("metal1", 0, 0, 1, 1), rect("metal1", 1.1, 0, 2, 1))
    top.add(text("metal1", "A", 0.5, 0.5), text("metal1", "B" if bad else "A", 0.5, 0.5))
    return write_cells(tmp_path, top), write_map(tmp_path)


def test_command_line_summary_and_exit_codes(tmp_path, capsys):
    gds, layers = cli_files(tmp_path, bad=False)
    assert main([str(gds), "--layers", str(layers)]) == 0
    assert capsys.readouterr().out == "shorts 0, opens 0, stray labels 0, spacing violations 0\n"

    gds, layers = cli_files(tmp_path, bad=True)
    assert main([str(gds), "--layers", str(layers), "--spacing", "metal1=0.2", "metal2=1"]) == 1
    assert capsys.readouterr().out.splitlines() == [
        "shorts 1, opens 0, stray labels 0, spacing violations 1",
        "short: A, B",
        "spacing: metal1 ? to A,B at 0.1 um",
    ]
    assert main([str(gds), "--layers", str(layers), "--cell", "NONE"]) == 2
    assert "no cell named" in capsys.readouterr().err
    assert main([str(tmp_path / "missing.gds"), "--layers", str(layers)]) == 2
    with pytest.raises(SystemExit):
        main([str(gds), "--layers", str(layers), "--spacing", "metal1"])


def test_runs_as_a_module(tmp_path):
    gds, layers = cli_files(tmp_path, bad=True)
    done = subprocess.run(
        [sys.executable, "-m", "tests.extraction", str(gds), "--layers", str(layers)],
        cwd=ROOT,
        capture_output=True,
        text=True,
        check=False,
    )
    assert done.returncode == 1
    assert done.stdout.splitlines()[0] == "shorts 1, opens 0, stray labels 0, spacing violations 0"


def test_two_thousand_references_check_quickly(tmp_path):
    unit = gdstk.Cell("UNIT")
    unit.add(
        rect("diffusion", 0, 0, 3, 1),
        rect("gate", 1, -0.3, 1.2, 1.6),
        rect("contact", 0.3, 0.3, 0.6, 0.6),
        rect("contact", 2.3, 0.3, 2.6, 0.6),
        rect("contact", 1.0, 1.3, 1.2, 1.5),
        rect("metal1", 0.2, 0.2, 0.7, 2.5),
        rect("metal1", 2.2, 0.2, 2.7, 0.7),
        rect("metal1", 0.9, 1.2, 1.3, 1.7),
        rect("via1", 0.3, 2.0, 0.6, 2.3),
        rect("metal2", 0.1, 1.9, 0.8, 2.4),
    )
    top = gdstk.Cell("TOP")
    for k in range(2000):
        x, y = 4.0 * (k % 50), 3.0 * (k // 50)
        top.add(gdstk.Reference(unit, (x, y), x_reflection=bool(k % 2), rotation=0))
        top.add(text("metal2", f"S{k}", x + 0.5, y + (-2.1 if k % 2 else 2.1)))
    gds, layers = write_cells(tmp_path, unit, top), write_map(tmp_path)
    start = time.perf_counter()
    report = check(gds, layers, spacing_um={"metal1": 0.25})
    elapsed = time.perf_counter() - start
    assert report.shorts == [] and report.opens == [] and report.stray_labels == []
    assert report.n_nodes == 2000 * 3  # source, drain and gate nodes of each unit
    # the gate's metal1 pad is 0.2 um from the source's metal1 strip in every unit
    assert len(report.spacing_violations) == 2000
    assert report.spacing_violations[0] == ("metal1", "?", "S0", pytest.approx(0.2))
    assert len(report.nets) == 2000
    assert elapsed < 5.0
