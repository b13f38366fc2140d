"""Two-layer channel router: every unit terminal wired to its net, correct by construction.

Below every row of units runs a channel. Each net that a row's terminals need gets a
horizontal metal1 track of its own in that channel (never over a unit); each terminal
reaches its track by a vertical metal2 stub that leaves the terminal's pad (through a
via1 when the pad is metal1) and lands on the track through a via1. Every net has a
vertical metal2 trunk beyond the array's right edge; its tracks run to it and join it
through a via1, and the trunk runs up to the array's top edge, where it carries the net's
pin label. So horizontal wires are metal1 at distinct heights, vertical wires metal2 at
distinct x, different nets cross only on different layers, and a via sits only where a
net meets itself.

Nets come from the spec (``[terminals]``, ``[array] dummy_net``); the units of a series
resistor are chained in snake order (left to right on even rows, right to left on odd
rows), the node between units i and i+1 being ``<device>_N<i>``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np

from placer.cells import Rect, Rules, UnitCell, channel, load_rules, min_pitch, snap, unit_cell
from placer.errors import PlacerError
from placer.kinds import KINDS_INFO, series_node
from placer.pattern import DUMMY, EMPTY, Pattern

if TYPE_CHECKING:
    from placer.spec import Spec

__all__ = ["RouteError", "Label", "NetSummary", "Wiring", "unit_nets", "track_bound",
           "pitch_needed", "check_pitch", "route", "finger_nets"]


class RouteError(PlacerError):
    """The pattern cannot be wired at the spec's pitch."""


@dataclass(frozen=True)
class Label:
    """A text label: net or device name on a role, at a point."""

    text: str
    role: str
    x: float
    y: float


@dataclass(frozen=True)
class NetSummary:
    """One net of the routed block."""

    name: str
    terminals: tuple[tuple[str, str], ...]
    units: int
    wire_um: float
    metal1_um: float
    metal2_um: float
    vias: int
    resistance_ohm: float
    capacitance_ff: float
    pin: tuple[float, float]


@dataclass
class Wiring:
    """Everything the router draws, plus the per-net figures and the block's size."""

    shapes: list[Rect] = field(default_factory=list)
    labels: list[Label] = field(default_factory=list)
    nets: list[NetSummary] = field(default_factory=list)
    tracks_per_row: list[int] = field(default_factory=list)
    channel_tracks: int = 0
    size_um: tuple[float, float] = (0.0, 0.0)
    bbox: tuple[float, float, float, float] = (0.0, 0.0, 0.0, 0.0)


def _snake(ids: np.ndarray) -> list[tuple[int, int]]:
    """Slots in snake order: even rows left to right, odd rows right to left."""
    out: list[tuple[int, int]] = []
    for r in range(ids.shape[0]):
        cols = range(ids.shape[1]) if r % 2 == 0 else range(ids.shape[1] - 1, -1, -1)
        out.extend((r, c) for c in cols)
    return out


def unit_nets(pattern: Pattern, spec: Spec) -> dict[tuple[int, int], dict[str, str]]:
    """The net of every drawn terminal of every unit, by slot (row, column).

    ``pattern`` is in the spec's device order. Dummies tie every terminal to the dummy net.

    Examples
    --------
    >>> from placer.spec import parse_spec
    >>> from placer.pattern import parse_pattern
    >>> spec = parse_spec("kind = 'res'\\n[devices]\\nR = 3\\n")
    >>> nets = unit_nets(parse_pattern("R R R"), spec)
    >>> [nets[0, c]["a"] + "-" + nets[0, c]["b"] for c in range(3)]
    ['R_A-R_N1', 'R_N1-R_N2', 'R_N2-R_B']
    """
    drawn = KINDS_INFO[spec.kind].drawn
    out: dict[tuple[int, int], dict[str, str]] = {}
    seen = [0] * len(spec.devices)
    for r, c in _snake(pattern.ids):
        d = int(pattern.ids[r, c])
        if d == EMPTY:
            continue
        if d == DUMMY:
            out[r, c] = {t: spec.dummy_net for t in drawn}
            continue
        nets = {t: spec.nets[d][t] for t in drawn}
        if spec.kind == "res" and spec.joins[d] == "series":
            k, n = seen[d], spec.counts[d]
            name = spec.devices[d]
            nets["a"] = spec.nets[d]["a"] if k == 0 else series_node(name, k)
            nets["b"] = spec.nets[d]["b"] if k == n - 1 else series_node(name, k + 1)
        seen[d] += 1
        out[r, c] = nets
    return out


def finger_nets(spec: Spec) -> tuple[list[tuple[str, str]], str]:
    """(source, drain) net of each MOS device and the dummy net: what the diffusion of a
    finger carries on its left and right for '>' (reversed for '<')."""
    return [(n["source"], n["drain"]) for n in spec.nets], spec.dummy_net


def track_bound(spec: Spec) -> int:
    """Most tracks a channel can need: one per net of the block.

    The bound holds for every arrangement, so the pitch placer computes from it fits any
    pattern of the spec, and search, grade and drawing share one grid.
    """
    return len(spec.net_names())


def _rules(spec: Spec, rules: Rules | None) -> Rules:
    return rules if rules is not None else load_rules(spec.kind)


def _cell(spec: Spec, rules: Rules, pitch_x: float | None) -> UnitCell:
    return unit_cell(spec.kind, spec.unit.width_um, spec.unit.length_um, pitch_x, rules)


def pitch_needed(spec: Spec, rules: Rules | None = None, tracks: int | None = None
                 ) -> tuple[float, float]:
    """Smallest pitch for the spec's unit cell with a channel of ``tracks`` tracks
    (default: the bound of :func:`track_bound`)."""
    r = _rules(spec, rules)
    cell = _cell(spec, r, None)
    return min_pitch(cell, r, track_bound(spec) if tracks is None else tracks)


def check_pitch(spec: Spec, rules: Rules | None = None) -> None:
    """Refuse, before any work, a pitch too small for the unit cell or for one track.

    The full check (the channel holds every track the arrangement needs) is made by
    :func:`route`; this one needs no arrangement.
    """
    r = _rules(spec, rules)
    px, py = spec.array.pitch_um
    need_x, need_y = pitch_needed(spec, r, tracks=1)
    if px + 1e-9 < need_x or py + 1e-9 < need_y:
        full = pitch_needed(spec, r)
        raise RouteError(
            f"{spec.source}: [array] pitch_um = [{px:g}, {py:g}] leaves no room for the unit "
            f"cell (W {spec.unit.width_um:g} um, L {spec.unit.length_um:g} um, rules of "
            f"{r.source}) and its routing channel: it needs at least [{need_x:g}, {need_y:g}] "
            f"um (one track per channel), and [{full[0]:g}, {full[1]:g}] um holds any "
            "arrangement; omit pitch_um to get that pitch")


def route(pattern: Pattern, spec: Spec, rules: Rules | None = None,
          cell: UnitCell | None = None) -> Wiring:
    """Wire every terminal of ``pattern`` (in the spec's device order) to its net.

    Returns the wiring shapes (metal1 tracks, metal2 stubs and trunks, via1 cuts, MOS
    diffusion joins) and labels (every net at each unit terminal it reaches and at its
    pin) in the coordinates of the top cell: slot (r, c) centred at (c px, -r py).
    Raises RouteError when a channel needs more tracks than the pitch holds.
    """
    r_ = _rules(spec, rules)
    px, py = spec.array.pitch_um
    cell = cell if cell is not None else _cell(spec, r_, px)
    ch = channel(cell, r_)
    nets = unit_nets(pattern, spec)
    order = {n: i for i, n in enumerate(spec.net_names())}
    rows, cols = pattern.shape
    sw, tw, via = ch.stub_width, ch.track_width, ch.via
    land2 = r_.land2

    # terminals per row: (net, exit x, exit y, pad, needs via)
    per_row: list[list[tuple[str, float, float, Any, bool, tuple[int, int], str]]] = []
    for r in range(rows):
        items = []
        for c in range(cols):
            if (r, c) not in nets:
                continue
            flip = spec.kind == "mos" and int(pattern.orient[r, c]) < 0
            x0, y0 = c * px, -r * py
            for t in cell.terminals:
                net = nets[r, c][t.name]
                ex = snap(x0 + (-t.exit_x if flip else t.exit_x))
                ey = snap(y0 + t.exit_y)
                items.append((net, ex, ey, t.pad.moved(x0, y0, flip), t.via, (r, c), t.name))
        per_row.append(items)

    present = [sorted({it[0] for it in items}, key=lambda n: order[n]) for items in per_row]
    tracks = max((len(p) for p in present), default=0)
    need = min_pitch(cell, r_, max(tracks, 1))
    if py + 1e-9 < need[1] or px + 1e-9 < need[0]:
        raise RouteError(
            f"{spec.source}: a channel of this arrangement needs {tracks} tracks; at pitch "
            f"[{px:g}, {py:g}] um there is room for fewer: use pitch_um = [{max(px, need[0]):g}, "
            f"{need[1]:g}] or more, or omit pitch_um to get a pitch that fits any arrangement")

    used = [n for n in spec.net_names() if any(n in p for p in present)]
    x_right = (cols - 1) * px + max(cell.extent[2], max((abs(t.exit_x) for t in cell.terminals),
                                                        default=0.0) + sw / 2)
    first_trunk = snap(x_right + r_.metal2_space + sw / 2)
    trunk_x = {n: snap(first_trunk + i * ch.stub_pitch) for i, n in enumerate(used)}
    top_y = snap(max(cell.extent[3], cell.metal2_top))

    w = Wiring(tracks_per_row=[len(p) for p in present], channel_tracks=tracks)
    m1_len: dict[str, float] = dict.fromkeys(used, 0.0)
    m2_len: dict[str, float] = dict.fromkeys(used, 0.0)
    vias: dict[str, int] = dict.fromkeys(used, 0)
    terms: dict[str, set[tuple[str, str]]] = {n: set() for n in used}
    units: dict[str, set[tuple[int, int]]] = {n: set() for n in used}
    lowest: dict[str, float] = {}
    kind_dummy = "dummy"

    def cut(x: float, y: float) -> None:
        h = via / 2
        w.shapes.append(Rect("via1", snap(x - h), snap(y - h), snap(x + h), snap(y + h)))

    for r, items in enumerate(per_row):
        track_of = {n: k for k, n in enumerate(present[r])}
        y_row = -r * py
        left: dict[str, float] = {}
        for net, ex, ey, pad, needs_via, slot, tname in items:
            ty = snap(y_row + ch.track_y(track_of[net]))
            top = snap(ey + (land2 / 2 if needs_via else sw / 2))
            if top > pad.y1 and not needs_via:
                top = pad.y1
            w.shapes.append(Rect("metal2", snap(ex - sw / 2), snap(ty - sw / 2),
                                 snap(ex + sw / 2), top))
            m2_len[net] += ey - ty
            if needs_via:
                cut(ex, ey)
                vias[net] += 1
            cut(ex, ty)
            vias[net] += 1
            left[net] = min(left.get(net, ex), ex)
            cx, cy = pad.centre
            w.labels.append(Label(net, pad.role, snap(cx), snap(cy)))
            d = int(pattern.ids[slot])
            terms[net].add((kind_dummy if d < 0 else spec.devices[d], tname))
            units[net].add(slot)
        for net, x in left.items():
            ty = snap(y_row + ch.track_y(track_of[net]))
            tx = trunk_x[net]
            w.shapes.append(Rect("metal1", snap(x - tw / 2), snap(ty - tw / 2),
                                 snap(tx + tw / 2), snap(ty + tw / 2)))
            m1_len[net] += tx - x
            cut(tx, ty)
            vias[net] += 1
            lowest[net] = min(lowest.get(net, ty), ty)

    for net in used:
        tx = trunk_x[net]
        w.shapes.append(Rect("metal2", snap(tx - sw / 2), snap(lowest[net] - sw / 2),
                             snap(tx + sw / 2), top_y))
        m2_len[net] += top_y - lowest[net]
        w.labels.append(Label(net, "metal2", tx, snap(top_y - sw / 2)))

    if spec.kind == "mos" and cell.diffusion is not None:
        _diffusion_joins(pattern, spec, cell, nets, w)

    ro = spec.routing
    for net in used:
        a, b = m1_len[net], m2_len[net]
        w.nets.append(NetSummary(
            name=net, terminals=tuple(sorted(terms[net])), units=len(units[net]),
            wire_um=float(a + b), metal1_um=float(a), metal2_um=float(b), vias=vias[net],
            resistance_ohm=float(a * ro.metal1_ohm_per_um + b * ro.metal2_ohm_per_um
                                 + vias[net] * ro.via_ohm),
            capacitance_ff=float((a + b) * ro.wire_ff_per_um),
            pin=(trunk_x[net], snap(top_y - sw / 2))))
    bottom = min(lowest.values(), default=-(rows - 1) * py) - sw / 2
    x1 = max(trunk_x.values(), default=x_right) + sw / 2
    x0 = cell.extent[0]
    w.bbox = (snap(x0), snap(min(bottom, -(rows - 1) * py + cell.extent[1])), snap(x1), top_y)
    w.size_um = (snap(w.bbox[2] - w.bbox[0]), snap(w.bbox[3] - w.bbox[1]))
    return w


def _diffusion_joins(pattern: Pattern, spec: Spec, cell: UnitCell,
                     nets: dict[tuple[int, int], dict[str, str]], w: Wiring) -> None:
    """Join the diffusion of neighbouring fingers whose facing terminals share a net."""
    assert cell.diffusion is not None
    x0, y0, x1, y1 = cell.diffusion
    px, py = spec.array.pitch_um
    rows, cols = pattern.shape
    for r in range(rows):
        for c in range(cols - 1):
            if (r, c) not in nets or (r, c + 1) not in nets:
                continue
            left_right = _facing(pattern, nets, r, c)[1]
            right_left = _facing(pattern, nets, r, c + 1)[0]
            if left_right == right_left:
                w.shapes.append(Rect("diffusion", snap(c * px + x1), snap(-r * py + y0),
                                     snap((c + 1) * px + x0), snap(-r * py + y1)))


def _facing(pattern: Pattern, nets: dict[tuple[int, int], dict[str, str]], r: int, c: int
            ) -> tuple[str, str]:
    """(left, right) diffusion net of the finger at (r, c)."""
    n = nets[r, c]
    if int(pattern.orient[r, c]) < 0:
        return n["drain"], n["source"]
    return n["source"], n["drain"]
