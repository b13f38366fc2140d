"""Independent wiring-parasitics checker for placer's GDSII stick layouts.

This module measures the wire resistance and capacitance of a routed layout from
the GDSII file, its layer map and a handful of wiring figures.  It is written from
the wiring parasitics contract alone, apart from the code that writes the layouts,
so that the two can check each other.

The contract implemented
------------------------
Inputs: the GDSII file, its layer-map TOML (``[layers]`` role = [layer, datatype];
the roles used are ``metal1``, ``metal2`` and ``via1``) and the figures
``metal1_ohm_per_sq``, ``metal2_ohm_per_sq`` (sheet resistance, ohm per square),
``via_ohm`` (ohm per via1 cut), ``wire_ff_per_um``, ``coupling_ff_per_um``,
``overlap_ff_per_um2``, ``metal1_space`` and ``metal2_space`` (minimum spacing, um).

Structure of the file:

* one top cell, the only cell no other cell references.  Every reference it holds
  (with any reflection, right-angle rotation, magnification or array repetition)
  places one *unit instance*; 1 um user unit, 1 nm database unit.
* a *wire* is a metal1 or metal2 rectangle drawn directly in the top cell; a *cut*
  is a via1 rectangle drawn directly in the top cell.  Wires and cuts must be
  axis-aligned rectangles (anything else is refused).
* *unit metal* is the metal1/metal2 of one instance, flattened.  Within one
  instance, unit metal shapes that touch on one layer, or that the instance's own
  via1 shapes join, form one *terminal node*, an ideal (zero-resistance) node.
* net names come from TEXT labels whose (layer, texttype) equals the (layer,
  datatype) of metal1 or metal2.  A label names the terminal node or wire whose
  metal of that layer holds its anchor (boundary included).  A net's *pins* are its
  labels that lie on a wire and on no unit metal of their layer; all pins of a net
  are one ideal node.
  Wires, cuts and terminal nodes get their net by connectivity: wires of one layer
  that touch or overlap, a cut and the metal1/metal2 it overlaps with positive
  area, a wire and unit metal of its layer that touch or overlap.

Resistance, per net:

* a wire is a strip along its longer side (along x when square); between two
  points on it it has resistance sheet x length / width;
* connection points on a wire: the centre of each cut on it; the centre of each
  overlap with another wire of its layer (both wires get a point there, and the two
  points are one node); each pin label anchor on it; where the wire overlaps a
  terminal node's metal of its layer, the overlapped stretch (along the strip)
  belongs to that terminal node and its two ends are connection points;
* the strip between two neighbouring connection points is one resistor; the parts
  of a wire beyond its last connection carry no current;
* a cut is a resistor of via_ohm between the metal1 and the metal2 it lies on,
  wire or terminal metal;
* a *tap* is one terminal node of one instance; its figure is the effective
  resistance from that node to the net's pin node.  A unit at slot (row r, column
  c) sits at reference origin x = c * pitch_x, y = -r * pitch_y, and the tap is
  reported at its instance's reference origin.

Capacitance:

* ground capacitance of a net: wire_ff_per_um x the sum of its wires' longer sides;
* two metal shapes of different nets on one layer (wires or unit metal, never two
  shapes of the same instance) *face* each other when their projections on one
  axis overlap with positive length L and their gap s on the other axis is positive
  and at most 3 x the layer's minimum spacing s_min; they couple with
  coupling_ff_per_um x L x s_min / s.  The *facing length at minimum space* of a
  net pair is the sum of L over its facing pairs with s <= s_min + 1 nm.  Shapes
  are taken one by one as drawn (rectangles, not merged);
* metal2 over metal1 of another net couples with overlap_ff_per_um2 x overlap area.

Per net also: wire length (sum of the longer sides of its wires, um) and its number
of cuts.

Readings where the contract leaves room (each is a choice of this checker):

* any net label on a wire names the wire's net (not only pins), as a label names
  its metal in the layout contract.
* a cut "lies on" the metal it overlaps with positive area; a wire and unit metal
  of its layer that only touch still join, with a stretch of zero length.
* every terminal node that gets a net is a tap, dummy instances' included.
* the overlap coupling skips, like facing, metal2 and metal1 of the same instance:
  a capacitor unit's plates are the device, not a parasitic.  It is also taken
  shape by shape, not merged.
* unit metal of different instances that touches on one layer joins their
  terminal nodes (zero resistance).
* a tap that no resistor path joins to its net's pin gets ``r_ohm`` None, as does
  every tap of a net without a pin.
* a node carrying two net names (a short) is refused with ValueError.

Command line::

    python -m tests.parasitics LAYOUT.gds --layers MAP.toml [--routing FIGURES.json]
        [--top-edge Y]

prints the result of `measure` as JSON.  ``FIGURES.json`` holds any of the
figure keys; the others take `DEFAULT_FIGURES`.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import tomllib
from collections import defaultdict
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from os import PathLike
from pathlib import Path
from typing import Any

import gdstk
import numpy as np
import numpy.typing as npt
import shapely
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.sparse.linalg import splu

__all__ = ["DEFAULT_FIGURES", "FIGURE_KEYS", "main", "measure"]

FIGURE_KEYS = (
    "metal1_ohm_per_sq",
    "metal2_ohm_per_sq",
    "via_ohm",
    "wire_ff_per_um",
    "coupling_ff_per_um",
    "overlap_ff_per_um2",
    "metal1_space",
    "metal2_space",
)

DEFAULT_FIGURES: dict[str, float] = {
    "metal1_ohm_per_sq": 0.1,
    "metal2_ohm_per_sq": 0.07,
    "via_ohm": 5.0,
    "wire_ff_per_um": 0.2,
    "coupling_ff_per_um": 0.1,
    "overlap_ff_per_um2": 0.05,
    "metal1_space": 0.25,  # templates/*.toml metal1_space
    "metal2_space": 0.3,  # templates/*.toml metal2_space
}
"""Illustrative figures; the spacings are the generic templates' minimum spaces."""

IntArray = npt.NDArray[np.int64]
FloatArray = npt.NDArray[np.float64]
Key = tuple[int, int]

_METALS = ("metal1", "metal2")
_SOLVE_BLOCK = 4_000_000  # entries of the dense right-hand side solved at once


# --------------------------------------------------------------------------
# Reading
# --------------------------------------------------------------------------


@dataclass
class _Geometry:
    """The shapes the contract speaks of, in whole database units.

    Rectangles are rows ``(x0, y0, x1, y1)``; layers are 0 (metal1) or 1 (metal2).
    """

    wires: IntArray
    wire_layer: IntArray
    cuts: IntArray
    unit: IntArray
    unit_layer: IntArray
    unit_inst: IntArray
    unit_node: IntArray
    n_nodes: int
    node_inst: IntArray
    origins: IntArray
    label_text: list[str]
    label_layer: IntArray
    label_xy: IntArray
    db_um: float


def _layer_keys(layers_path: str | PathLike[str]) -> dict[str, Key]:
    """metal1, metal2 and via1 (layer, datatype) from a layer-map TOML file."""
    with open(layers_path, "rb") as handle:
        data = tomllib.load(handle)
    table = data.get("layers")
    if not isinstance(table, Mapping):
        raise ValueError(f"{layers_path}: no [layers] table")
    keys: dict[str, Key] = {}
    for role in (*_METALS, "via1"):
        pair = table.get(role)
        if (
            not isinstance(pair, list)
            or len(pair) != 2
            or not all(isinstance(v, int) and not isinstance(v, bool) for v in pair)
        ):
            raise ValueError(f"{layers_path}: layers.{role} must be [layer, datatype]")
        keys[role] = (pair[0], pair[1])
    if len(set(keys.values())) != 3:
        raise ValueError(f"{layers_path}: metal1, metal2 and via1 must differ")
    return keys


def _rects(polygons: Sequence[gdstk.Polygon], scale: float, what: str) -> IntArray:
    """Axis-aligned rectangles (n, 4) in database units; anything else is refused."""
    out = np.zeros((len(polygons), 4), dtype=np.int64)
    by_size: dict[int, list[int]] = defaultdict(list)
    for k, poly in enumerate(polygons):
        by_size[len(poly.points)].append(k)
    for members in by_size.values():
        pts = np.stack([np.asarray(polygons[k].points, dtype=float) for k in members])
        pts = np.rint(pts * scale).astype(np.int64)  # (m, size, 2)
        lo, hi = pts.min(axis=1), pts.max(axis=1)
        on_corner = (
            ((pts[..., 0] == lo[:, None, 0]) | (pts[..., 0] == hi[:, None, 0]))
            & ((pts[..., 1] == lo[:, None, 1]) | (pts[..., 1] == hi[:, None, 1]))
        ).all(axis=1)
        nxt = np.roll(pts, -1, axis=1)
        twice_area = np.abs((pts[..., 0] * nxt[..., 1] - pts[..., 1] * nxt[..., 0]).sum(axis=1))
        box = np.prod(hi - lo, axis=1)
        bad = ~on_corner | (twice_area != 2 * box) | (box <= 0)
        if bad.any():
            poly = polygons[members[int(np.argmax(bad))]]
            raise ValueError(
                f"{what}: a shape on layer {poly.layer}/{poly.datatype} "
                "is not an axis-aligned rectangle"
            )
        out[members] = np.concatenate([lo, hi], axis=1)
    return out


def _own_polygons(cell: gdstk.Cell, key: Key, depth: int | None) -> list[gdstk.Polygon]:
    """Polygons (paths outlined, repetitions applied) of one key, to `depth` levels."""
    return list(
        cell.get_polygons(
            apply_repetitions=True, include_paths=True, depth=depth, layer=key[0], datatype=key[1]
        )
    )


def _linear(ref: gdstk.Reference) -> FloatArray:
    """The 2 x 2 matrix of a reference: rotation . magnification . x-reflection."""
    quarter = ref.rotation / (math.pi / 2)
    if abs(quarter - round(quarter)) > 1e-9:
        raise ValueError(f"reference to {ref.cell_name!r} is not rotated by a right angle")
    cos, sin = (round(math.cos(ref.rotation)), round(math.sin(ref.rotation)))
    flip = -1.0 if ref.x_reflection else 1.0
    mag = ref.magnification
    return np.array([[cos, -sin], [sin, cos]], dtype=float) @ np.diag([mag, flip * mag])


def _place(rects: IntArray, linear: FloatArray, shifts: FloatArray) -> IntArray:
    """Rectangles of one cell placed by k matrices: (k * n, 4), instance-major."""
    lo = np.einsum("kij,nj->kni", linear, rects[:, :2].astype(float)) + shifts[:, None]
    hi = np.einsum("kij,nj->kni", linear, rects[:, 2:].astype(float)) + shifts[:, None]
    lo, hi = np.rint(lo), np.rint(hi)
    out = np.concatenate([np.minimum(lo, hi), np.maximum(lo, hi)], axis=2)
    return out.reshape(-1, 4).astype(np.int64)


def _gaps(a: IntArray, b: IntArray) -> tuple[IntArray, IntArray]:
    """Gap on x and on y between rows of a and b (negative: overlap length)."""
    gx = np.maximum(a[:, 0], b[:, 0]) - np.minimum(a[:, 2], b[:, 2])
    gy = np.maximum(a[:, 1], b[:, 1]) - np.minimum(a[:, 3], b[:, 3])
    return gx, gy


def _near(a: IntArray, b: IntArray | None, gap: int) -> tuple[IntArray, IntArray]:
    """Pairs (i of a, j of b) with gap on x and on y both <= `gap` (boundaries count).

    With ``b`` None the pairs are taken within ``a`` with i < j.
    """
    other = a if b is None else b
    empty = np.empty(0, dtype=np.int64)
    if len(a) == 0 or len(other) == 0:
        return empty, empty
    tree = shapely.STRtree(shapely.box(*other.T.astype(float)))
    grown = a + np.array([-gap, -gap, gap, gap])
    i, j = tree.query(shapely.box(*grown.T.astype(float)))
    i, j = i.astype(np.int64), j.astype(np.int64)
    if b is None:
        keep = i < j
        i, j = i[keep], j[keep]
    gx, gy = _gaps(a[i], other[j])
    keep = (gx <= gap) & (gy <= gap)
    return i[keep], j[keep]


def _groups(n: int, a: IntArray, b: IntArray) -> tuple[int, IntArray]:
    """Connected components of n vertices joined by edges (a, b)."""
    graph = coo_matrix((np.ones(len(a)), (a, b)), shape=(n, n))
    count, label = connected_components(graph, directed=False)
    return int(count), label.astype(np.int64)


@dataclass
class _Cell:
    """One referenced cell, flattened in its own frame."""

    rects: IntArray  # metal1 then metal2
    layer: IntArray
    node: IntArray  # terminal node of each metal rectangle, local numbering
    n_nodes: int
    labels: list[tuple[str, int, float, float]]  # text, metal index, x, y (database units)


def _cell(cell: gdstk.Cell, keys: dict[str, Key], scale: float) -> _Cell:
    """Flatten a unit cell and group its metal into terminal nodes."""
    parts = [_rects(_own_polygons(cell, keys[m], None), scale, cell.name) for m in _METALS]
    rects = np.concatenate(parts)
    layer = np.repeat(np.arange(2), [len(p) for p in parts]).astype(np.int64)
    vias = _rects(_own_polygons(cell, keys["via1"], None), scale, cell.name)
    i, j = _near(rects, None, 0)
    same = layer[i] == layer[j]
    a, b = [i[same]], [j[same]]
    vi, mj = _near(vias, rects, 0)
    gx, gy = _gaps(vias[vi], rects[mj])
    inside = (gx < 0) & (gy < 0)
    vi, mj = vi[inside], mj[inside]
    # A via joins every metal rectangle it overlaps: chain them through the via.
    order = np.argsort(vi, kind="stable")
    vi, mj = vi[order], mj[order]
    run = vi[1:] == vi[:-1]
    a.append(mj[:-1][run])
    b.append(mj[1:][run])
    n_nodes, node = _groups(len(rects), np.concatenate(a), np.concatenate(b))
    labels: list[tuple[str, int, float, float]] = []
    for m, name in enumerate(_METALS):
        key = keys[name]
        for label in cell.get_labels(
            apply_repetitions=True, depth=None, layer=key[0], texttype=key[1]
        ):
            x, y = np.asarray(label.origin, dtype=float) * scale
            labels.append((label.text.rstrip("\0"), m, float(x), float(y)))
    return _Cell(rects, layer, node, n_nodes, labels)


def _read(gds_path: str | PathLike[str], keys: dict[str, Key]) -> _Geometry:
    """Read the layout and collect wires, cuts, unit metal, terminal nodes and labels."""
    lib = gdstk.read_gds(str(gds_path), filter=set(keys.values()))
    scale = lib.unit / lib.precision
    db_um = lib.precision / 1e-6
    tops = [c for c in lib.top_level() if isinstance(c, gdstk.Cell)]
    if len(tops) != 1:
        raise ValueError(f"{gds_path}: expected one top cell, found {len(tops)}")
    top = tops[0]

    metal_parts = [_rects(_own_polygons(top, keys[m], 0), scale, top.name) for m in _METALS]
    wires = np.concatenate(metal_parts)
    wire_layer = np.repeat(np.arange(2), [len(p) for p in metal_parts]).astype(np.int64)
    cuts = _rects(_own_polygons(top, keys["via1"], 0), scale, top.name)

    # Instances, in reference order (array repetitions expanded).
    cells: dict[str, _Cell] = {}
    placed: dict[str, list[tuple[int, FloatArray, FloatArray]]] = defaultdict(list)
    origins: list[FloatArray] = []
    for ref in top.references:
        child = ref.cell
        if not isinstance(child, gdstk.Cell):
            raise ValueError(f"{gds_path}: reference to a missing cell {ref.cell_name!r}")
        if child.name not in cells:
            cells[child.name] = _cell(child, keys, scale)
        offsets = np.zeros((1, 2))
        if ref.repetition is not None and ref.repetition.size > 0:
            offsets = np.asarray(ref.repetition.get_offsets(), dtype=float).reshape(-1, 2)
        linear = _linear(ref)
        for offset in offsets:
            shift = (np.asarray(ref.origin, dtype=float) + offset) * scale
            placed[child.name].append((len(origins), linear, shift))
            origins.append(np.rint(shift))
    n_inst = len(origins)
    nodes_per_inst = np.zeros(n_inst, dtype=np.int64)
    for name, items in placed.items():
        nodes_per_inst[[k for k, _, _ in items]] = cells[name].n_nodes
    node_base = np.concatenate([[0], np.cumsum(nodes_per_inst)])
    n_nodes = int(node_base[-1])
    node_inst = np.repeat(np.arange(n_inst), nodes_per_inst).astype(np.int64)

    unit, unit_layer, unit_inst, unit_node = [], [], [], []
    label_text: list[str] = []
    label_layer: list[int] = []
    label_xy: list[FloatArray] = []
    for name, items in placed.items():
        c = cells[name]
        inst = np.array([k for k, _, _ in items], dtype=np.int64)
        linear = np.stack([m for _, m, _ in items])
        shifts = np.stack([s for _, _, s in items])
        unit.append(_place(c.rects, linear, shifts))
        unit_layer.append(np.tile(c.layer, len(items)))
        unit_inst.append(np.repeat(inst, len(c.rects)))
        unit_node.append((node_base[inst][:, None] + c.node[None, :]).ravel())
        if c.labels:
            anchors = np.array([(x, y) for _, _, x, y in c.labels])
            where = np.einsum("kij,nj->kni", linear, anchors) + shifts[:, None]
            for per_inst in where:
                label_text += [t for t, _, _, _ in c.labels]
                label_layer += [m for _, m, _, _ in c.labels]
                label_xy.append(per_inst)
    for m, name in enumerate(_METALS):
        key = keys[name]
        for label in top.get_labels(apply_repetitions=True, depth=0, layer=key[0], texttype=key[1]):
            label_text.append(label.text.rstrip("\0"))
            label_layer.append(m)
            label_xy.append(np.asarray(label.origin, dtype=float)[None] * scale)

    def cat(parts: list[IntArray], width: int | None = None) -> IntArray:
        if parts:
            return np.concatenate(parts).astype(np.int64)
        return np.zeros((0, width) if width else 0, dtype=np.int64)

    return _Geometry(
        wires=wires,
        wire_layer=wire_layer,
        cuts=cuts,
        unit=cat(unit, 4),
        unit_layer=cat(unit_layer),
        unit_inst=cat(unit_inst),
        unit_node=cat(unit_node),
        n_nodes=n_nodes,
        node_inst=node_inst,
        origins=np.array(origins, dtype=np.int64).reshape(-1, 2),
        label_text=label_text,
        label_layer=np.array(label_layer, dtype=np.int64),
        label_xy=np.rint(np.concatenate(label_xy)).astype(np.int64)
        if label_xy
        else np.zeros((0, 2), dtype=np.int64),
        db_um=db_um,
    )


# --------------------------------------------------------------------------
# Nets
# --------------------------------------------------------------------------


@dataclass
class _Nets:
    """Net of every wire, cut and terminal node (-1: none), and the pins."""

    names: list[str]
    wire: IntArray
    cut: IntArray
    node: IntArray
    pin_label: IntArray  # label indices that are pins
    pin_wire: IntArray  # the wire each such pin lies on (one row per wire it lies on)


def _label_hits(geo: _Geometry, rects: IntArray, layer: IntArray) -> tuple[IntArray, IntArray]:
    """Pairs (label, rectangle of the same layer) whose rectangle holds the anchor."""
    points = np.concatenate([geo.label_xy, geo.label_xy], axis=1)
    li, ri = _near(points, rects, 0)
    keep = geo.label_layer[li] == layer[ri]
    return li[keep], ri[keep]


def _nets(geo: _Geometry, top_edge: int | None) -> _Nets:
    """Connect wires, cuts and terminal nodes; name each group from its labels."""
    nw, nc, nt = len(geo.wires), len(geo.cuts), geo.n_nodes
    cut0, node0 = nw, nw + nc
    a: list[IntArray] = []
    b: list[IntArray] = []

    i, j = _near(geo.wires, None, 0)  # wires of one layer touching or overlapping
    same = geo.wire_layer[i] == geo.wire_layer[j]
    a.append(i[same])
    b.append(j[same])
    i, j = _near(geo.cuts, geo.wires, 0)  # a cut on a wire (positive area)
    gx, gy = _gaps(geo.cuts[i], geo.wires[j])
    on = (gx < 0) & (gy < 0)
    a.append(cut0 + i[on])
    b.append(j[on])
    i, j = _near(geo.cuts, geo.unit, 0)  # a cut on unit metal (positive area)
    gx, gy = _gaps(geo.cuts[i], geo.unit[j])
    on = (gx < 0) & (gy < 0)
    a.append(cut0 + i[on])
    b.append(node0 + geo.unit_node[j[on]])
    i, j = _near(geo.wires, geo.unit, 0)  # a wire on unit metal of its layer
    same = geo.wire_layer[i] == geo.unit_layer[j]
    a.append(i[same])
    b.append(node0 + geo.unit_node[j[same]])
    i, j = _near(geo.unit, None, 0)  # unit metal of two instances touching
    join = (geo.unit_layer[i] == geo.unit_layer[j]) & (geo.unit_inst[i] != geo.unit_inst[j])
    a.append(node0 + geo.unit_node[i[join]])
    b.append(node0 + geo.unit_node[j[join]])
    _, group = _groups(nw + nc + nt, np.concatenate(a), np.concatenate(b))

    # Labels name the wire or the terminal node whose metal holds their anchor.
    names_of: dict[int, set[str]] = defaultdict(set)
    wl, wr = _label_hits(geo, geo.wires, geo.wire_layer)
    for li, ri in zip(wl.tolist(), wr.tolist(), strict=True):
        names_of[int(group[ri])].add(geo.label_text[li])
    ul, ur = _label_hits(geo, geo.unit, geo.unit_layer)
    for li, ri in zip(ul.tolist(), ur.tolist(), strict=True):
        names_of[int(group[node0 + geo.unit_node[ri]])].add(geo.label_text[li])
    shorts = sorted(", ".join(sorted(s)) for s in names_of.values() if len(s) > 1)
    if shorts:
        raise ValueError("nodes carry two or more net names: " + "; ".join(shorts))
    names = sorted({next(iter(s)) for s in names_of.values()})
    index = {name: k for k, name in enumerate(names)}
    net_of_group = np.full(int(group.max(initial=-1)) + 1, -1, dtype=np.int64)
    for g, s in names_of.items():
        net_of_group[g] = index[next(iter(s))]
    net = net_of_group[group]

    # Pins: labels on a wire and on no unit metal of their layer (with ``top_edge``
    # given: labels on a wire within one wire width of that edge).
    if top_edge is None:
        on_unit = np.zeros(len(geo.label_text), dtype=bool)
        on_unit[ul] = True
        is_pin = ~on_unit[wl]
    else:
        w = geo.wires[wr]
        width = np.minimum(w[:, 2] - w[:, 0], w[:, 3] - w[:, 1])
        is_pin = top_edge - geo.label_xy[wl, 1] <= width
    return _Nets(
        names=names,
        wire=net[:nw],
        cut=net[cut0:node0],
        node=net[node0:],
        pin_label=wl[is_pin],
        pin_wire=wr[is_pin],
    )


# --------------------------------------------------------------------------
# Resistance
# --------------------------------------------------------------------------


def _taps_resistance(geo: _Geometry, nets: _Nets, figures: Mapping[str, float]) -> FloatArray:
    """Effective resistance from every terminal node to its net's pin node (NaN: none)."""
    nt, n_nets = geo.n_nodes, len(nets.names)
    wires = geo.wires
    horizontal = (wires[:, 2] - wires[:, 0]) >= (wires[:, 3] - wires[:, 1])
    axis = np.where(horizontal, 0, 1)
    width = np.where(horizontal, wires[:, 3] - wires[:, 1], wires[:, 2] - wires[:, 0])
    sheet = np.array([figures["metal1_ohm_per_sq"], figures["metal2_ohm_per_sq"]])
    pin_node0 = nt
    fresh = nt + n_nets  # next free node number

    ev_wire: list[IntArray] = []  # connection points: wire, position (x2), node
    ev_pos: list[IntArray] = []
    ev_node: list[IntArray] = []
    ua: list[IntArray] = []  # zero-resistance joins
    ub: list[IntArray] = []
    ra: list[IntArray] = []  # resistors
    rb: list[IntArray] = []
    rv: list[FloatArray] = []

    def along2(w: IntArray, x2: IntArray, y2: IntArray) -> IntArray:
        """Doubled position along wire w's strip of doubled points (x2, y2)."""
        return np.where(axis[w] == 0, x2, y2)

    # Overlaps of two wires of one layer: one shared node at the overlap's centre.
    i, j = _near(wires, None, 0)
    same = geo.wire_layer[i] == geo.wire_layer[j]
    i, j = i[same], j[same]
    cx2 = np.maximum(wires[i, 0], wires[j, 0]) + np.minimum(wires[i, 2], wires[j, 2])
    cy2 = np.maximum(wires[i, 1], wires[j, 1]) + np.minimum(wires[i, 3], wires[j, 3])
    node = fresh + np.arange(len(i))
    fresh += len(i)
    for w in (i, j):
        ev_wire.append(w)
        ev_pos.append(along2(w, cx2, cy2))
        ev_node.append(node)

    # Cuts: a via resistor between a metal1 node and a metal2 node at the cut.
    nc = len(geo.cuts)
    side = fresh + np.arange(2 * nc).reshape(nc, 2)  # [cut, metal index]
    fresh += 2 * nc
    ra.append(side[:, 0])
    rb.append(side[:, 1])
    rv.append(np.full(nc, float(figures["via_ohm"])))
    ccx2 = geo.cuts[:, 0] + geo.cuts[:, 2]
    ccy2 = geo.cuts[:, 1] + geo.cuts[:, 3]
    i, j = _near(geo.cuts, wires, 0)
    gx, gy = _gaps(geo.cuts[i], wires[j])
    on = (gx < 0) & (gy < 0)
    i, j = i[on], j[on]
    ev_wire.append(j)
    ev_pos.append(along2(j, ccx2[i], ccy2[i]))
    ev_node.append(side[i, geo.wire_layer[j]])
    i, j = _near(geo.cuts, geo.unit, 0)
    gx, gy = _gaps(geo.cuts[i], geo.unit[j])
    on = (gx < 0) & (gy < 0)
    i, j = i[on], j[on]
    ua.append(side[i, geo.unit_layer[j]])
    ub.append(geo.unit_node[j])

    # Pin anchors: points joined to the net's pin node.
    w = nets.pin_wire
    xy2 = 2 * geo.label_xy[nets.pin_label]
    ev_wire.append(w)
    ev_pos.append(along2(w, xy2[:, 0], xy2[:, 1]))
    ev_node.append(pin_node0 + nets.wire[w])

    # Stretches of a wire over terminal metal of its layer: ideal, owned by the node.
    i, j = _near(wires, geo.unit, 0)
    same = geo.wire_layer[i] == geo.unit_layer[j]
    st_wire, j = i[same], j[same]
    k = axis[st_wire]
    st_lo2 = 2 * np.maximum(wires[st_wire, k], geo.unit[j, k])
    st_hi2 = 2 * np.minimum(wires[st_wire, k + 2], geo.unit[j, k + 2])
    st_node = geo.unit_node[j]
    for pos in (st_lo2, st_hi2):
        ev_wire.append(st_wire)
        ev_pos.append(pos)
        ev_node.append(st_node)

    # Unit metal of two instances touching: their terminal nodes are one.
    i, j = _near(geo.unit, None, 0)
    join = (geo.unit_layer[i] == geo.unit_layer[j]) & (geo.unit_inst[i] != geo.unit_inst[j])
    ua.append(geo.unit_node[i[join]])
    ub.append(geo.unit_node[j[join]])

    # Walk every strip in order of its connection points.
    e_wire = np.concatenate(ev_wire).astype(np.int64)
    e_pos = np.concatenate(ev_pos).astype(np.int64)
    e_node = np.concatenate(ev_node).astype(np.int64)
    order = np.lexsort((e_pos, e_wire))
    e_wire, e_pos, e_node = e_wire[order], e_pos[order], e_node[order]
    n_ev = len(e_wire)
    base = int(e_pos.min(initial=0))
    span = int(e_pos.max(initial=0)) - base + 1
    keys = e_wire * span + (e_pos - base)
    lo_idx = np.searchsorted(keys, st_wire * span + (st_lo2 - base), side="left")
    hi_idx = np.searchsorted(keys, st_wire * span + (st_hi2 - base), side="right")
    # every point inside a stretch belongs to the stretch's terminal node
    count = hi_idx - lo_idx
    ua.append(np.repeat(st_node, count))
    ub.append(e_node[np.repeat(lo_idx, count) + _ranks(count)])
    # the intervals between points inside a stretch carry no resistor
    covered = np.zeros(n_ev + 1, dtype=np.int64)
    np.add.at(covered, lo_idx, 1)
    np.add.at(covered, np.maximum(hi_idx - 1, lo_idx), -1)
    inside = np.cumsum(covered)[: max(n_ev - 1, 0)] > 0

    same_wire = e_wire[1:] == e_wire[:-1]
    step = e_pos[1:] - e_pos[:-1]
    coincide = same_wire & (step == 0)
    ua.append(e_node[:-1][coincide])
    ub.append(e_node[1:][coincide])
    strip = same_wire & (step > 0) & ~inside
    wk = e_wire[:-1][strip]
    ra.append(e_node[:-1][strip])
    rb.append(e_node[1:][strip])
    rv.append(sheet[geo.wire_layer[wk]] * (step[strip] / 2.0) / width[wk])

    # Zero-ohm resistors (a zero figure) are joins too.
    r_a, r_b, r_v = np.concatenate(ra), np.concatenate(rb), np.concatenate(rv)
    zero = r_v <= 0
    ua.append(r_a[zero])
    ub.append(r_b[zero])
    r_a, r_b, r_v = r_a[~zero], r_b[~zero], r_v[~zero]
    _, root = _groups(fresh, np.concatenate(ua), np.concatenate(ub))
    r_a, r_b = root[r_a], root[r_b]
    loop = r_a == r_b
    r_a, r_b, r_v = r_a[~loop], r_b[~loop], r_v[~loop]

    result = np.full(nt, np.nan)
    n_root = int(root.max(initial=-1)) + 1
    _, part = _groups(n_root, r_a, r_b)
    tap_root = root[:nt]
    for net in range(n_nets):
        if not (nets.wire[nets.pin_wire] == net).any():
            continue  # the net has no pin
        pin = int(root[pin_node0 + net])
        taps = np.flatnonzero((nets.node == net) & (part[tap_root] == part[pin]))
        if len(taps) == 0:
            continue
        members = np.flatnonzero(part == part[pin])
        members = members[members != pin]
        local = np.full(n_root, -1, dtype=np.int64)
        local[members] = np.arange(len(members))
        result[taps[tap_root[taps] == pin]] = 0.0
        taps = taps[tap_root[taps] != pin]
        if len(taps) == 0:
            continue
        edge = part[r_a] == part[pin]
        ea, eb, g = r_a[edge], r_b[edge], 1.0 / r_v[edge]
        result[taps] = _diag_of_inverse(
            len(members), local[ea], local[eb], g, local[tap_root[taps]]
        )
    return result


def _ranks(count: IntArray) -> IntArray:
    """0, 1, .., count[k] - 1 for every k, concatenated."""
    total = int(count.sum())
    if total == 0:
        return np.zeros(0, dtype=np.int64)
    starts = np.repeat(np.cumsum(count) - count, count)
    return np.arange(total, dtype=np.int64) - starts


def _diag_of_inverse(
    n: int, a: IntArray, b: IntArray, g: FloatArray, wanted: IntArray
) -> FloatArray:
    """Entries (k, k) of the inverse of the grounded conductance matrix, k in `wanted`.

    ``a``/``b`` are edge ends (-1 is the grounded node) and ``g`` their conductances.
    The matrix is symmetric positive definite; it is factored without pivoting as
    P A P^T = L D L^T, and the entries of the inverse on the pattern of L are found
    from the last column back (Takahashi's recurrence).  Should the factor not have
    that form, the entries are found by solving for unit right-hand sides instead.
    """
    first, second = a >= 0, b >= 0
    both = first & second
    rows = np.concatenate([a[first], b[second], a[both], b[both]])
    cols = np.concatenate([a[first], b[second], b[both], a[both]])
    vals = np.concatenate([g[first], g[second], -g[both], -g[both]])
    matrix = coo_matrix((vals, (rows, cols)), shape=(n, n)).tocsc()
    lu = splu(
        matrix,
        permc_spec="MMD_AT_PLUS_A",
        diag_pivot_thresh=0.0,
        options={"SymmetricMode": True},
    )
    if np.array_equal(lu.perm_r, lu.perm_c):
        try:
            diagonal: FloatArray = _takahashi(lu)[np.asarray(lu.perm_c)[wanted]]
            return diagonal
        except KeyError:  # an entry outside the factor's pattern: solve instead
            pass
    out = np.empty(len(wanted))
    block = max(1, _SOLVE_BLOCK // max(n, 1))
    for start in range(0, len(wanted), block):
        cols_k = wanted[start : start + block]
        rhs = np.zeros((n, len(cols_k)))
        rhs[cols_k, np.arange(len(cols_k))] = 1.0
        sol = lu.solve(rhs)
        out[start : start + len(cols_k)] = sol[cols_k, np.arange(len(cols_k))]
    return out


def _takahashi(lu: Any) -> FloatArray:
    """Diagonal of the inverse of L D L^T from unit lower L (``lu.L``) and U = D L^T.

    Z = (L D L^T)^-1 satisfies, column j from the last back, with S the rows
    below j where L has entries: Z[S, j] = -Z[S, S] L[S, j] and
    Z[j, j] = 1 / D[j] - L[S, j] . Z[S, j].  Every Z[S, S] needed lies on the
    pattern of L (the factor is closed under fill), so only those are kept.
    """
    factor = lu.L.tocsc()
    d = lu.U.diagonal()
    n = factor.shape[0]
    indptr, indices, data = factor.indptr, factor.indices, factor.data
    zdiag = np.empty(n)
    z: dict[int, float] = {}  # Z[p, q], p > q, under key p * n + q
    for j in range(n - 1, -1, -1):
        r = indices[indptr[j] : indptr[j + 1]]
        v = data[indptr[j] : indptr[j + 1]]
        below = r > j
        s, lv = r[below].tolist(), v[below].tolist()
        column = []
        for p in s:
            acc = 0.0
            for q, lq in zip(s, lv, strict=True):
                if p == q:
                    acc += zdiag[p] * lq
                else:
                    acc += z[p * n + q if p > q else q * n + p] * lq
            column.append(-acc)
        zjj = 1.0 / d[j]
        for p, lp, zp in zip(s, lv, column, strict=True):
            zjj -= lp * zp
            z[p * n + j] = zp
        zdiag[j] = zjj
    return zdiag


# --------------------------------------------------------------------------
# Capacitance
# --------------------------------------------------------------------------


def _couplings(
    geo: _Geometry, nets: _Nets, figures: Mapping[str, float]
) -> dict[tuple[int, int], list[float]]:
    """Per net pair (a < b): [c_ff, facing_um, facing_min_um, overlap_um2]."""
    shapes = np.concatenate([geo.wires, geo.unit])
    layer = np.concatenate([geo.wire_layer, geo.unit_layer])
    net = np.concatenate([nets.wire, nets.node[geo.unit_node]])
    inst = np.concatenate([np.full(len(geo.wires), -1), geo.unit_inst]).astype(np.int64)
    keep = net >= 0
    shapes, layer, net, inst = shapes[keep], layer[keep], net[keep], inst[keep]
    um, um2 = geo.db_um, geo.db_um**2
    one_nm = max(1, round(1e-3 / geo.db_um))
    out: dict[tuple[int, int], list[float]] = defaultdict(lambda: [0.0, 0.0, 0.0, 0.0])

    def add(na: IntArray, nb: IntArray, slot: int, values: FloatArray) -> None:
        lo, hi = np.minimum(na, nb), np.maximum(na, nb)
        pair = lo * (len(nets.names) + 1) + hi
        uniq, inv = np.unique(pair, return_inverse=True)
        sums = np.bincount(inv.ravel(), weights=values, minlength=len(uniq))
        for p, s in zip(uniq.tolist(), sums.tolist(), strict=True):
            key = divmod(p, len(nets.names) + 1)
            out[key][slot] += s

    for m, name in enumerate(_METALS):
        s_min_um = float(figures[f"{name}_space"])
        s_min = s_min_um / geo.db_um
        reach = math.floor(3 * s_min + 1e-6)
        sel = np.flatnonzero(layer == m)
        i, j = _near(shapes[sel], None, reach)
        i, j = sel[i], sel[j]
        other = (net[i] != net[j]) & ~((inst[i] == inst[j]) & (inst[i] >= 0))
        i, j = i[other], j[other]
        gx, gy = _gaps(shapes[i], shapes[j])
        on_y = (gx < 0) & (gy > 0)  # side by side in y, overlapping in x
        on_x = (gy < 0) & (gx > 0)
        face = on_x | on_y
        length = np.where(on_y, -gx, -gy)[face].astype(float)
        gap = np.where(on_y, gy, gx)[face].astype(float)
        na, nb = net[i][face], net[j][face]
        c = float(figures["coupling_ff_per_um"]) * length * um * s_min / gap
        add(na, nb, 0, c)
        add(na, nb, 1, length * um)
        tight = gap <= s_min + one_nm
        add(na[tight], nb[tight], 2, length[tight] * um)

    m1, m2 = np.flatnonzero(layer == 0), np.flatnonzero(layer == 1)
    i, j = _near(shapes[m2], shapes[m1], 0)
    i, j = m2[i], m1[j]
    gx, gy = _gaps(shapes[i], shapes[j])
    over = (gx < 0) & (gy < 0) & (net[i] != net[j]) & ~((inst[i] == inst[j]) & (inst[i] >= 0))
    area = (gx[over] * gy[over]).astype(float) * um2
    add(net[i][over], net[j][over], 0, float(figures["overlap_ff_per_um2"]) * area)
    add(net[i][over], net[j][over], 3, area)
    return out


# --------------------------------------------------------------------------
# Entry point
# --------------------------------------------------------------------------


def _check_figures(figures: Mapping[str, float]) -> dict[str, float]:
    missing = [k for k in FIGURE_KEYS if k not in figures]
    if missing:
        raise ValueError("figures miss " + ", ".join(missing))
    out: dict[str, float] = {}
    for k in FIGURE_KEYS:
        v = figures[k]
        if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v) or v < 0:
            raise ValueError(f"figure {k} must be a finite number >= 0, got {v!r}")
        out[k] = float(v)
    for k in ("metal1_space", "metal2_space"):
        if out[k] <= 0:
            raise ValueError(f"figure {k} must be > 0")
    return out


def measure(
    gds_path: str | PathLike[str],
    layers_path: str | PathLike[str],
    figures: Mapping[str, float],
    *,
    top_edge_um: float | None = None,
) -> dict[str, Any]:
    """Measure the wiring parasitics of a placer layout.

    Parameters
    ----------
    gds_path : path-like
        The GDSII file.
    layers_path : path-like
        The layer-map TOML file (``[layers]`` metal1, metal2, via1).
    figures : mapping of str to float
        Every key of `FIGURE_KEYS` (see the module docstring).
    top_edge_um : float, optional
        For diagnosis: take as pins the labels on a wire within one wire width of
        this edge instead of the contract's rule.

    Returns
    -------
    dict
        ``nets``: name -> ``{"wire_um", "vias", "ground_ff"}``; ``taps``: one
        ``{"net", "x", "y", "r_ohm"}`` per terminal node of every instance (x, y:
        the instance's reference origin, um; r_ohm None when the net has no pin
        or nothing joins the node to it); ``couplings``: one ``{"a", "b", "c_ff",
        "facing_um", "facing_min_um", "overlap_um2"}`` per net pair (a < b) with
        any coupling.

    Raises
    ------
    ValueError
        When a figure is missing or bad, the layer map or layout is unusable, or a
        node carries two net names.
    """
    fig = _check_figures(figures)
    keys = _layer_keys(layers_path)
    geo = _read(gds_path, keys)
    top_edge = round(top_edge_um / geo.db_um) if top_edge_um is not None else None
    nets = _nets(geo, top_edge)
    r_tap = _taps_resistance(geo, nets, fig)
    pairs = _couplings(geo, nets, fig)

    um = geo.db_um
    length = np.maximum(geo.wires[:, 2] - geo.wires[:, 0], geo.wires[:, 3] - geo.wires[:, 1])
    n_nets = len(nets.names)
    named = nets.wire >= 0
    wire_um = np.bincount(nets.wire[named], weights=length[named], minlength=n_nets) * um
    vias = np.bincount(nets.cut[nets.cut >= 0], minlength=n_nets)
    result_nets = {
        name: {
            "wire_um": round(float(wire_um[k]), 6),
            "vias": int(vias[k]),
            "ground_ff": round(fig["wire_ff_per_um"] * float(wire_um[k]), 9),
        }
        for k, name in enumerate(nets.names)
    }
    taps = []
    for node in np.flatnonzero(nets.node >= 0).tolist():
        x, y = geo.origins[geo.node_inst[node]] * um
        r = float(r_tap[node])
        taps.append(
            {
                "net": nets.names[nets.node[node]],
                "x": round(float(x), 6),
                "y": round(float(y), 6),
                "r_ohm": None if math.isnan(r) else r,
            }
        )
    taps.sort(key=lambda t: (t["net"], -t["y"], t["x"]))
    couplings = [
        {
            "a": nets.names[a],
            "b": nets.names[b],
            "c_ff": round(v[0], 9),
            "facing_um": round(v[1], 6),
            "facing_min_um": round(v[2], 6),
            "overlap_um2": round(v[3], 9),
        }
        for (a, b), v in sorted(pairs.items())
        if v[0] > 0 or v[1] > 0 or v[3] > 0
    ]
    return {"nets": result_nets, "taps": taps, "couplings": couplings}


def main(argv: Sequence[str] | None = None) -> int:
    """Run the checker from the command line; return the exit code."""
    parser = argparse.ArgumentParser(
        prog="python -m tests.parasitics",
        description="Measure wire resistance and capacitance of a placer GDSII layout.",
    )
    parser.add_argument("layout", type=Path, help="GDSII file")
    parser.add_argument("--layers", type=Path, required=True, help="layer-map TOML file")
    parser.add_argument("--routing", type=Path, help="JSON file of figures (others: defaults)")
    parser.add_argument("--top-edge", type=float, help="top edge for pins, um (diagnosis)")
    args = parser.parse_args(argv)
    try:
        figures = dict(DEFAULT_FIGURES)
        if args.routing is not None:
            given = json.loads(args.routing.read_text())
            unknown = sorted(set(given) - set(FIGURE_KEYS))
            if unknown:
                raise ValueError("unknown figures: " + ", ".join(unknown))
            figures.update(given)
        result = measure(args.layout, args.layers, figures, top_edge_um=args.top_edge)
    except (OSError, ValueError, tomllib.TOMLDecodeError, json.JSONDecodeError) as error:
        print(f"error: {error}", file=sys.stderr)
        return 2
    print(json.dumps(result, indent=1))
    return 0


if __name__ == "__main__":
    sys.exit(main())
