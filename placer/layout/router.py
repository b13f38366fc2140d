"""Two-layer channel router that keeps the match: every unit terminal wired to its net.

Between rows of units run channels of horizontal metal1 tracks; vertical metal2 stubs
join each terminal (through a via1 when its pad is metal1) to its net's track, in the
channel below its row or, where the cell offers an exit upwards, the channel above.
Tracks run to vertical metal2 trunks beside the array, where each net has its pin. So
horizontal wires are metal1 at distinct heights, vertical wires metal2 at distinct x,
different nets cross only on different layers, and a via sits only where a net meets
itself. Each channel holds only the tracks it needs, and tracks that do not overlap
share a height (the left-edge algorithm, with the order the stubs above and below
impose); the row pitch follows from the fullest channel.

Each kind is wired so that what matters for its match is equal by construction:

* MOS: every net of a row runs the full width of its channel to a trunk on each side
  (mirror-placed, so every track has the same length and crosses every other net's
  trunk once); matched nets (the two gates and two drains of a pair, a mirror's
  outputs) take mirror-image track positions, swapped from channel to channel so that
  their stubs even out, each gate beside its own drain; a matched net gets a track in
  every channel its partners use, and the shorter of two matched nets has its trunks
  lengthened to the other's length.
* Capacitor arrays: the top plates of a row are joined by a metal2 strap across the
  row (through a corridor in each dummy) to a trunk of their own on the left, so the top
  plate never shares a channel with a bottom plate and every unit sees the same metal;
  the bottom plates leave upwards or downwards, whichever keeps the channels emptier,
  to trunks on the right.
* Resistors: consecutive units of a series chain are joined by the shortest local
  link (its inner node gets no trunk and no pin); the ends and parallel nets go to the
  nearer side.

Dummies tie all their terminals to the rail (``[array] dummy_net``); a column of dummies
at either end of the array is joined by a vertical spine instead of stubs and tracks.

Nets come from the spec (``[terminals]``, ``[array] dummy_net``); the units of a series
resistor are chained in snake order (left to right on even rows, right to left on odd
rows), the node between units i and i+1 being ``<device>_N<i>``.
"""

from __future__ import annotations

import math
from collections import defaultdict
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING

import numpy as np

from placer.errors import RouteError
from placer.io.pattern import DUMMY, EMPTY, Pattern
from placer.kinds import KINDS, series_node
from placer.layout.cells import (
    DB_UNIT_UM,
    REACH,
    Exit,
    Rect,
    Rules,
    UnitCell,
    _up,
    channel,
    first_track_above,
    load_rules,
    min_pitch,
    snap,
    unit_cell,
)
from placer.layout.ring import Strip, dummy_only, ring_strips

if TYPE_CHECKING:
    from placer.io.spec import Spec

__all__ = ["RouteError", "Label", "Wire", "Tap", "NetSummary", "Wiring", "unit_nets",
           "plan_tracks", "route",
           "finger_nets", "DUMMY_DEVICE"]

#: Device name of a dummy unit in taps and net summaries.
DUMMY_DEVICE = "dummy"
_INF = math.inf



@dataclass(frozen=True)
class Label:
    """A text label: net or device name on a role, at a point."""

    text: str
    role: str
    x: float
    y: float


@dataclass(frozen=True)
class Wire:
    """One drawn wire of a net: a rectangle on metal1 or metal2 (``what`` says which part
    of the route it is: stub, track, trunk, strap, spine)."""

    net: str
    layer: str
    x0: float
    y0: float
    x1: float
    y1: float
    what: str

    @property
    def length(self) -> float:
        """Length along the longer side."""
        return max(self.x1 - self.x0, self.y1 - self.y0)

    @property
    def rect(self) -> Rect:
        """The wire as a rectangle of its layer."""
        return Rect(self.layer, self.x0, self.y0, self.x1, self.y1)


@dataclass(frozen=True)
class Tap:
    """A unit terminal a net reaches: the slot, its device (or ``dummy``), the terminal
    and the pad shapes (absolute coordinates) that carry it."""

    net: str
    slot: tuple[int, int]
    device: str
    terminal: str
    pads: tuple[Rect, ...]


@dataclass(frozen=True)
class NetSummary:
    """One net of the routed block: what it reaches and how much wire it takes. The
    resistance (largest of its terminals' resistances to the pin) and capacitance (to
    ground and to every other net) come from the drawn geometry
    (:mod:`placer.layout.parasitics`)."""

    name: str
    terminals: tuple[tuple[str, str], ...]
    units: int
    wire_um: float
    metal1_um: float
    metal2_um: float
    vias: int
    resistance_ohm: float
    capacitance_ff: float
    pin: tuple[float, float] | None
    pins: tuple[tuple[float, float], ...] = ()
    coupling_ff: float = 0.0


@dataclass
class Wiring:
    """Everything the router draws, the per-net figures and the block's size.

    ``tracks_per_channel`` counts the tracks of the channel below each row (index r) and,
    last, of the channel above row 0 (0 when unused); ``channel_tracks`` is the fullest
    channel between rows, which sets the row pitch.
    """

    shapes: list[Rect] = field(default_factory=list)
    labels: list[Label] = field(default_factory=list)
    nets: list[NetSummary] = field(default_factory=list)
    wires: list[Wire] = field(default_factory=list)
    vias: list[tuple[str, float, float]] = field(default_factory=list)
    taps: list[Tap] = field(default_factory=list)
    pins: dict[str, list[tuple[float, float, str]]] = field(default_factory=dict)
    tracks_per_row: list[int] = field(default_factory=list)
    channel_tracks: int = 0
    size_um: tuple[float, float] = (0.0, 0.0)
    bbox: tuple[float, float, float, float] = (0.0, 0.0, 0.0, 0.0)
    matched: list[tuple[str, ...]] = field(default_factory=list)
    strapped: bool = False
    notes: list[str] = field(default_factory=list)    # what the drawing could not do


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
    >>> from placer.jobs.load import parse_spec
    >>> from placer.io.pattern import parse_pattern
    >>> spec = parse_spec("kind = 'res'\\n[devices]\\nR = 3\\n")
    >>> nets = unit_nets(parse_pattern("R R R"), spec)
    >>> [nets[0, c]["a"] + "-" + nets[0, c]["b"] for c in range(3)]
    ['R_A-R_N1', 'R_N1-R_N2', 'R_N2-R_B']
    """
    drawn = KINDS[spec.kind].drawn
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
        if spec.joins[d] == "series":           # a chain: unit k runs from node k to k + 1
            k, n = seen[d], spec.counts[d]
            name = spec.devices[d]
            first, last = drawn[0], drawn[1]
            nets[first] = spec.nets[d][first] if k == 0 else series_node(name, k)
            nets[last] = spec.nets[d][last] if k == n - 1 else series_node(name, k + 1)
        seen[d] += 1
        out[r, c] = nets
    return out


def finger_nets(spec: Spec) -> tuple[list[tuple[str, str]], str]:
    """(source, drain) net of each MOS device and the dummy net: what the diffusion of a
    finger carries on its left and right for '>' (reversed for '<')."""
    return [(n["source"], n["drain"]) for n in spec.nets], spec.dummy_net


def _rules(spec: Spec, rules: Rules | None) -> Rules:
    return rules if rules is not None else load_rules(spec.kind)


def _cell(spec: Spec, rules: Rules, pitch_x: float | None) -> UnitCell:
    return unit_cell(spec.kind, spec.unit.width_um, spec.unit.length_um, pitch_x, rules)


# ----------------------------------------------------------------------------- planning

@dataclass(eq=False)
class _End:
    """A stub to draw: one unit terminal (or a dummy's tie) reaching its net's track."""

    net: str
    slot: tuple[int, int]
    device: str
    terminal: str
    pads: tuple[Rect, ...]
    exits: tuple[Exit, ...]          # absolute; the first is the default
    chosen: Exit | None = None

    @property
    def channel(self) -> int:
        assert self.chosen is not None
        return self.slot[0] if self.chosen.side == "down" else self.slot[0] - 1


@dataclass(eq=False)
class _Piece:
    """One horizontal track piece of a net in a channel."""

    net: str
    channel: int
    xs: list[float]
    lo: float                # -inf: runs to the net's left trunk
    hi: float                # +inf: runs to the right trunk
    full: bool = False
    lo_spine: bool = False   # the finite end sits on a rail spine
    hi_spine: bool = False
    track: int = -1


@dataclass
class _Plan:
    """What the router decided before any y coordinate: exits, pieces and tracks."""

    ends: list[_End]
    pieces: list[_Piece]
    tracks: dict[int, int]                   # channel -> tracks used
    strap_rows: dict[int, tuple[float, float]]   # row -> strap x range (top plates)
    ring_rows: list[int]
    spines: dict[str, tuple[int, str]]       # "left"/"right" -> (column, layer)
    dummy_taps: list[Tap]
    top_net: str | None
    trunk_order: list[str]                   # MOS: the left side's order, array outwards
    matched: list[tuple[str, ...]]
    kind_mode: str
    strips: dict[tuple[int, int], Strip] = field(default_factory=dict)   # a ring of strips
    notes: list[str] = field(default_factory=list)


def _abs_pads(cell: UnitCell, names: tuple[str, ...], x: float, y: float, flip: bool,
              dummy: bool) -> tuple[Rect, ...]:
    """Conductor shapes of the named terminals of a unit placed at (x, y)."""
    shapes = cell.dummy_shapes if dummy and cell.dummy_shapes is not None else cell.shapes
    pads = []
    for t in cell.terminals:
        if t.name in names:
            pads.append(t.pad.moved(x, y, flip))
    if not cell.shapes:            # a user's cell: only its terminal pads are known
        return tuple(pads)
    if dummy:
        return tuple(s.moved(x, y, flip) for s in shapes
                     if s.role in ("metal1", "metal2"))
    return tuple(pads)


def _spine_columns(pattern: Pattern) -> dict[str, int]:
    """The end columns of the pattern that hold dummies and nothing else (or empties)."""
    rows, cols = pattern.shape
    out: dict[str, int] = {}
    if cols < 2:
        return out
    for side, c in (("left", 0), ("right", cols - 1)):
        if dummy_only(pattern.ids[:, c]):
            out[side] = c
    return out


def _ring_rows(pattern: Pattern) -> list[int]:
    """Rows that hold dummies and nothing else (a dummy ring's top and bottom)."""
    out = []
    for r in range(pattern.shape[0]):
        if dummy_only(pattern.ids[r]):
            out.append(r)
    return out


def _plan(pattern: Pattern, spec: Spec, rules: Rules, cell: UnitCell, user: bool) -> _Plan:
    """The routing plan at the spec's pitch, never needing more tracks than at the
    cell's least x pitch: every spacing only grows with the x pitch, so the track of each
    piece at the least pitch is still good at a wider one, and a given pitch wider than
    the fitted one always routes."""
    plan = _plan_at(pattern, spec, rules, cell, user)
    least = min_pitch(cell, rules, 1)[0]
    if spec.array.pitch_um[0] <= least + 1e-9 or not plan.pieces:
        return plan
    narrow = _plan_at(pattern, replace(spec, array=replace(
        spec.array, pitch_um=(least, spec.array.pitch_um[1]))), rules, cell, user)
    most = max(plan.tracks.values())
    if max(narrow.tracks.values()) >= most:
        return plan
    def shape(q: _Piece) -> tuple[object, ...]:
        return (q.net, q.channel, len(q.xs), q.full, q.lo == -_INF, q.hi == _INF,
                q.lo_spine, q.hi_spine)

    if [shape(p) for p in plan.pieces] != [shape(p) for p in narrow.pieces] or \
            [(e.net, e.chosen.side if e.chosen else None) for e in plan.ends] != \
            [(e.net, e.chosen.side if e.chosen else None) for e in narrow.ends]:
        return plan
    for p, q in zip(plan.pieces, narrow.pieces, strict=True):
        p.track = q.track
    plan.tracks = dict(narrow.tracks)
    plan.trunk_order = narrow.trunk_order
    return plan


def _plan_at(pattern: Pattern, spec: Spec, rules: Rules, cell: UnitCell, user: bool
             ) -> _Plan:
    px = spec.array.pitch_um[0]
    rows, cols = pattern.shape
    routing = KINDS[spec.kind].routing
    nets = unit_nets(pattern, spec)
    rail = spec.dummy_net
    tops = {n["top"] for n in spec.nets} if routing == "plates" else set()
    bottoms = {n["bottom"] for n in spec.nets} if routing == "plates" else set()
    # the top plates strapped in their rows: one top net that no bottom plate or dummy shares
    strap = (routing == "plates" and not user and cell.strap_y is not None and len(tops) == 1
             and not tops & (bottoms | {rail}))
    top_net = next(iter(tops)) if strap else None
    spine_cols = _spine_columns(pattern) if not user and cell.spine is not None else {}
    ring = _ring_rows(pattern) if spine_cols else []
    spines: dict[str, tuple[int, str]] = {}
    for side, c in spine_cols.items():
        layer = "metal1" if (strap and side == "left") else cell.spine[2]  # type: ignore[index]
        spines[side] = (c, layer)
    spine_set = set(spine_cols.values())
    if len(spine_set) == 1 and "left" in spines and "right" in spines:
        spines.pop("right")

    # strapped rows: a strap across each row with units (over empty slots and through the
    # dummies' corridors) to the row's last unit; never a top plate in a channel, where its
    # metal1 track would have to cross the left spine
    strap_rows: dict[int, tuple[float, float]] = {}
    strapped: set[tuple[int, int]] = set()
    if strap:
        for r in range(rows):
            units = [c for c in range(cols) if int(pattern.ids[r, c]) >= 0]
            if not units or r in ring:
                continue
            end = units[-1] * px + cell.extent[2]
            strap_rows[r] = (0.0, snap(end))
            strapped.update((r, c) for c in units)

    if spec.array.ring_depth_um is not None and user:
        raise RouteError(f"{spec.source}: [array] ring_depth_um draws placer's own capacitor "
                         "cell's ring as strips; with a unit cell of your own (--unit-gds) the "
                         "ring is your cell (remove ring_depth_um)")
    strips = ring_strips(pattern, spec, cell, rules) if not user else {}
    notes: list[str] = []
    if spec.array.ring_depth_um is not None and not (strap and strips):
        if not strap:
            why = ("its plates are too short for a top-plate strap across each row"
                   if cell.strap_y is None else
                   "its units do not share one top plate of their own")
            raise RouteError(f"{spec.source}: [array] ring_depth_um draws a capacitor array's "
                             f"ring of dummies as strips, but {why} (remove ring_depth_um)")
        # a given pattern (a hand layout, an edited one) without a ring all round
        notes.append("ring_depth_um: this arrangement has no ring of dummies all round "
                     "(rows and columns of dummies only at its four edges); its dummies are "
                     "drawn as whole cells")
    ends: list[_End] = []
    dummy_taps: list[Tap] = []
    for (r, c), tnets in sorted(nets.items()):
        d = int(pattern.ids[r, c])
        x, y = c * px, -r * spec.array.pitch_um[1]
        flip = KINDS[spec.kind].fingers and int(pattern.orient[r, c]) < 0
        if d == DUMMY:
            pads = _abs_pads(cell, tuple(tnets), x, 0.0, flip, True)
            if (r, c) in strips:
                pads = tuple(s_.moved(x, 0.0) for s_ in strips[r, c].shapes
                             if s_.role in ("metal1", "metal2"))
            dummy_taps.append(Tap(rail, (r, c), DUMMY_DEVICE, "tie", pads))
            on_spine = c in spine_set
            in_ring_strap = strap and r in ring
            if on_spine or in_ring_strap:
                continue
            if cell.dummy_exits:          # placer's cells tie a dummy's terminals inside
                ends.append(_End(rail, (r, c), DUMMY_DEVICE, "tie", pads,
                                 tuple(e.moved(x, 0.0, flip) for e in cell.dummy_exits)))
                continue
            for t in cell.terminals:      # a user's cell: each terminal to the rail
                ends.append(_End(rail, (r, c), DUMMY_DEVICE, "tie",
                                 tuple(s.moved(x, 0.0, flip) for s in t.metal),
                                 tuple(e.moved(x, 0.0, flip) for e in t.exits)))
            continue
        dev = spec.devices[d]
        for t in cell.terminals:
            pads = tuple(s.moved(x, 0.0, flip) for s in t.metal)
            if (r, c) in strapped and t.name == "top":
                continue
            ends.append(_End(tnets[t.name], (r, c), dev, t.name, pads,
                             tuple(e.moved(x, 0.0, flip) for e in t.exits)))
        del y

    _choose_exits(ends, spec, rows, nets, pattern)
    matched = [m.nets for m in spec.matched_sets()]
    pieces = _pieces(ends, spec, rows, cols, px, rail, spines, cell, matched, top_net,
                         strips)
    try:
        order = _assign_tracks(pieces, ends, spec, rules, matched, rows, strict=True)
    except _Cycle:
        # stubs from both sides of a channel that no track order can keep apart: every
        # terminal takes its first (downward) exit, which never meets a stub from below
        for e in ends:
            e.chosen = e.exits[0]
        pieces = _pieces(ends, spec, rows, cols, px, rail, spines, cell, matched, top_net,
                         strips)
        order = _assign_tracks(pieces, ends, spec, rules, matched, rows)
    tracks: dict[int, int] = defaultdict(int)
    for p in pieces:
        tracks[p.channel] = max(tracks[p.channel], p.track + 1)
    mode = ("strap" if strap else "channel") if routing == "plates" else routing
    return _Plan(ends, pieces, dict(tracks), strap_rows, ring, spines, dummy_taps, top_net,
                 order, matched, mode, strips, notes)


def _choose_exits(ends: list[_End], spec: Spec, rows: int,
                  nets: dict[tuple[int, int], dict[str, str]], pattern: Pattern) -> None:
    """Pick each end's exit: MOS and single-exit cells leave downwards; a capacitor's
    bottom plates go up or down by net and row so that the fullest channel is as empty
    as it can be; a series resistor's link lands both its ends in one channel."""
    for e in ends:
        e.chosen = e.exits[0]
    routing = KINDS[spec.kind].routing
    if routing == "plates":
        _cap_exits([e for e in ends if len(e.exits) > 1], rows)
    elif routing == "chains":
        _res_exits(ends, spec, rows)


def _cap_exits(ends: list[_End], rows: int) -> None:
    by_row: dict[int, dict[str, list[_End]]] = defaultdict(lambda: defaultdict(list))
    for e in ends:
        by_row[e.slot[0]][e.net].append(e)
    present = [set(by_row[r]) for r in range(rows)]
    if not any(present):
        return
    widest = max(len(p) for p in present)

    def attempt(cap: int) -> dict[tuple[int, str], str] | None:
        choice: dict[tuple[int, str], str] = {}
        above: set[str] = set()          # the channel above row r, filled by row r-1
        for r in range(rows):
            here = present[r]
            nxt = present[r + 1] if r + 1 < rows else set()
            up = {n for n in here if n in above}
            rest = sorted(here - up, key=lambda n: (n in nxt, n))
            room = cap if r > 0 else 0    # row 0 stays out of a channel above the array
            for n in rest:
                if len(above | up) < room:
                    up.add(n)
            down = here - up
            if len(down) > cap:
                return None
            for n in up:
                choice[r, n] = "up"
            for n in down:
                choice[r, n] = "down"
            above = down
        return choice

    best = None
    for cap in range(max(1, math.ceil(widest / 2)), widest + 1):
        best = attempt(cap)
        if best is not None:
            break
    assert best is not None
    for r, by_net in by_row.items():
        for n, es in by_net.items():
            side = best[r, n]
            for e in es:
                e.chosen = next(x for x in e.exits if x.side == side)


def _res_exits(ends: list[_End], spec: Spec, rows: int) -> None:
    """Series links: both ends of an inner node in one channel, by the shortest stubs."""
    by_net: dict[str, list[_End]] = defaultdict(list)
    for e in ends:
        by_net[e.net].append(e)
    inner = {series_node(d, i) for d, n, j in zip(spec.devices, spec.counts, spec.joins,
                                                   strict=True) if j == "series"
             for i in range(1, n)}
    load: dict[int, int] = defaultdict(int)
    for net, es in by_net.items():
        if net not in inner or len(es) != 2:
            continue
        b, a = sorted(es, key=lambda e: e.terminal != "b")     # b of unit i, a of unit i+1
        rb, ra = b.slot[0], a.slot[0]

        def ex(e: _End, side: str) -> Exit:
            return next(x for x in e.exits if x.side == side)

        if rb == ra:
            # same row: both down (short b, long a) or both up (long b, short a)
            if rb > 0 and load[rb - 1] < load[rb]:
                b.chosen, a.chosen = ex(b, "up"), ex(a, "up")
            else:
                b.chosen, a.chosen = ex(b, "down"), ex(a, "down")
        elif ra == rb + 1:
            b.chosen, a.chosen = ex(b, "down"), ex(a, "up")
        elif rb == ra + 1:
            b.chosen, a.chosen = ex(b, "up"), ex(a, "down")
        else:
            b.chosen = ex(b, "down")
            a.chosen = ex(a, "up") if ra > 0 else ex(a, "down")
        load[b.channel] += 1
    for net, es in by_net.items():
        if net in inner:
            continue
        for e in es:
            if e.terminal == "a" and e.slot[0] > 0:
                e.chosen = next(x for x in e.exits if x.side == "up")


def _pieces(ends: list[_End], spec: Spec, rows: int, cols: int, px: float, rail: str,
            spines: dict[str, tuple[int, str]], cell: UnitCell,
            matched: list[tuple[str, ...]], top_net: str | None = None,
            strips: dict[tuple[int, int], Strip] | None = None) -> list[_Piece]:
    """Track pieces per channel and net, by the kind's rule for each net (the strapped
    top plates' net, ``top_net``, has its trunk on the left)."""
    routing = KINDS[spec.kind].routing
    inner = {series_node(d, i) for d, n, j in zip(spec.devices, spec.counts, spec.joins,
                                                   strict=True) if j == "series"
             for i in range(1, n)}
    groups: dict[tuple[int, str], list[float]] = defaultdict(list)
    for e in ends:
        assert e.chosen is not None
        groups[e.channel, e.net].append(e.chosen.x)
    spine_x = _spine_xs(spines, cell, px, strips or {})
    # one trunk side per net (its pieces then join through the trunk): the side nearer to
    # most of its landings, counted in columns so that the choice (and with it the track
    # plan) is the same at every x pitch
    def col(x: float) -> int:
        return round(x / px)

    lean: dict[str, float] = defaultdict(float)
    channels_of: dict[str, int] = defaultdict(int)
    for (_, net), xs in groups.items():
        lean[net] += sum(2 * col(x) - (cols - 1) for x in xs)
        channels_of[net] += 1
    pieces: list[_Piece] = []
    for (ch, net), xs in sorted(groups.items()):
        xs = sorted(xs)
        lo, hi = xs[0], xs[-1]
        if net == rail:
            both = ("left" in spine_x and "right" in spine_x
                    and 2 * (col(hi) - col(lo)) > cols - 1)
            if both:
                pieces.append(_Piece(net, ch, xs, spine_x["left"], spine_x["right"],
                                     lo_spine=True, hi_spine=True))
                continue
            go_left = col(lo) <= (cols - 1) - col(hi)
            if go_left and "left" in spine_x or not go_left and "right" not in spine_x \
                    and "left" in spine_x:
                pieces.append(_Piece(net, ch, xs, spine_x["left"], max(hi, spine_x["left"]),
                                     lo_spine=True))
            elif "right" in spine_x:
                pieces.append(_Piece(net, ch, xs, min(lo, spine_x["right"]), spine_x["right"],
                                     hi_spine=True))
            elif lean[net] <= 0:
                pieces.append(_Piece(net, ch, xs, -_INF, hi))
            else:
                pieces.append(_Piece(net, ch, xs, lo, _INF))
            continue
        if routing == "rows":
            pieces.append(_Piece(net, ch, xs, -_INF, _INF, full=True))
        elif routing == "plates" and net == top_net:
            pieces.append(_Piece(net, ch, xs, -_INF, hi))
        elif routing == "plates":
            pieces.append(_Piece(net, ch, xs, lo, _INF))
        elif net in inner and len(xs) == 2 and channels_of[net] == 1:
            pieces.append(_Piece(net, ch, xs, lo, hi))
        elif lean[net] <= 0:
            pieces.append(_Piece(net, ch, xs, -_INF, hi))
        else:
            pieces.append(_Piece(net, ch, xs, lo, _INF))
    if routing == "rows":
        # a matched net takes a track wherever its partners do (equal length and vias)
        by_ch: dict[int, set[str]] = defaultdict(set)
        for p in pieces:
            by_ch[p.channel].add(p.net)
        for ch, present in by_ch.items():
            for group in matched:
                if any(n in present for n in group):
                    for n in group:
                        if n not in present:
                            pieces.append(_Piece(n, ch, [], -_INF, _INF, full=True))
                            present.add(n)
    return pieces


def _base_order(matched: list[tuple[str, ...]], spec: Spec) -> tuple[list[tuple[str, str]],
                                                                    list[tuple[str, ...]]]:
    """Matched pairs from the outside in (a drain set just outside its gate set, so that
    each gate lies beside its own drain) and the larger sets."""
    sets = spec.matched_sets()
    pairs: list[tuple[str, str]] = []
    bigger: list[tuple[str, ...]] = []
    rank = {"drain": 0, "source": 1, "gate": 2, "": 3}
    for m in sorted(sets, key=lambda m: (rank.get(m.terminal, 3), m.devices)):
        if len(m.nets) == 2:
            pairs.append((m.nets[0], m.nets[1]))
        else:
            bigger.append(m.nets)
    del matched
    return pairs, bigger


def _mos_order(present: set[str], pairs: list[tuple[str, str]],
               bigger: list[tuple[str, ...]], fixed_order: list[str], flip: bool,
               rot: int) -> list[str]:
    left: list[str] = []
    right: list[str] = []
    middle: list[str] = []
    for a, b in pairs:
        if a in present or b in present:
            x, y = (b, a) if flip else (a, b)
            left.append(x)
            right.insert(0, y)
    for group in bigger:
        g = [n for n in group if n in present]
        if g:
            k = rot % len(g)
            middle += g[k:] + g[:k]
    taken = set(left) | set(right) | set(middle)
    fixed = [n for n in fixed_order if n in present and n not in taken]
    return [n for n in left if n in present] + middle + fixed + [n for n in right
                                                                 if n in present]


def _assign_tracks(pieces: list[_Piece], ends: list[_End], spec: Spec, rules: Rules,
                   matched: list[tuple[str, ...]], rows: int, strict: bool = False
                   ) -> list[str]:
    """Give every piece a track: MOS full pieces in the matched order of their channel,
    the rest by the left-edge algorithm under the order the stubs impose. Returns the
    MOS trunk order (left side, array outwards)."""
    gap = rules.track_width + rules.metal1_space
    reach = rules.stub_width + rules.metal2_space
    # stubs meeting end to end at one x: their metal2 landings need this many tracks apart
    pitch1 = channel_pitch = math.ceil((gap - 1e-9) * 1000) / 1000
    apart = max(1, math.ceil((rules.land2 + rules.metal2_space - 1e-9) / pitch1))
    del channel_pitch
    by_ch: dict[int, list[_Piece]] = defaultdict(list)
    for p in pieces:
        by_ch[p.channel].append(p)
    ends_by_ch: dict[int, list[_End]] = defaultdict(list)
    for e in ends:
        ends_by_ch[e.channel].append(e)
    net_order = {n: i for i, n in enumerate(spec.net_names())}
    pairs, bigger = _base_order(matched, spec)
    trunk_order: list[str] = []
    flips: dict[int, bool] = {}
    if KINDS[spec.kind].routing == "rows":
        flips = _balance_flips(by_ch, ends_by_ch, pairs, bigger, net_order)
        every = {p.net for p in pieces if p.full}
        trunk_order = _mos_order(every, pairs, bigger, sorted(every, key=lambda n: net_order[n]),
                                 False, 0)
    for ch, plist in by_ch.items():
        before: dict[_Piece, dict[_Piece, int]] = defaultdict(dict)
        full = [p for p in plist if p.full]
        if full:
            present = {p.net for p in full}
            order = _mos_order(present, pairs, bigger, sorted(present, key=lambda n: net_order[n]),
                               flips.get(ch, False), ch)
            by_net = {p.net: p for p in full}
            chain = [by_net[n] for n in order]
            for a, b in zip(chain, chain[1:], strict=False):
                before[b][a] = 1
        # stubs from above must land above stubs from below at the same x
        piece_of = {p.net: p for p in plist}
        downs = sorted((e.chosen.x, e.net) for e in ends_by_ch[ch]
                       if e.chosen is not None and e.chosen.side == "down")
        ups = sorted((e.chosen.x, e.net) for e in ends_by_ch[ch]
                     if e.chosen is not None and e.chosen.side == "up")
        if downs and ups:
            ux = np.array([u[0] for u in ups])
            for x, net in downs:
                i0 = int(np.searchsorted(ux, x - reach + 1e-9))
                i1 = int(np.searchsorted(ux, x + reach - 1e-9))
                for _, unet in ups[i0:i1]:
                    if unet != net:
                        before[piece_of[unet]][piece_of[net]] = apart
        _left_edge(plist, before, gap, strict)
    return trunk_order


def _balance_flips(by_ch: dict[int, list[_Piece]], ends_by_ch: dict[int, list[_End]],
                   pairs: list[tuple[str, str]], bigger: list[tuple[str, ...]],
                   net_order: dict[str, int]) -> dict[int, bool]:
    """Per channel, whether matched pairs swap sides: chosen so that each pair's stubs
    (units times track depth) add up alike over the block."""
    if not pairs:
        return {}
    total = dict.fromkeys(pairs, 0.0)
    options = []
    for ch, plist in by_ch.items():
        present = {p.net for p in plist if p.full}
        count: dict[str, int] = defaultdict(int)
        for e in ends_by_ch[ch]:
            count[e.net] += 1
        contrib = []
        for flip in (False, True):
            order = _mos_order(present, pairs, bigger, sorted(present, key=lambda n: net_order[n]),
                               flip, ch)
            depth = {n: i for i, n in enumerate(order)}
            contrib.append({pr: count[pr[0]] * depth.get(pr[0], 0)
                            - count[pr[1]] * depth.get(pr[1], 0) for pr in pairs})
        swing = sum(abs(contrib[0][pr] - contrib[1][pr]) for pr in pairs)
        options.append((swing, ch, contrib))
    flips: dict[int, bool] = {}
    for _, ch, contrib in sorted(options, key=lambda t: (-t[0], t[1])):
        cost = [sum(abs(total[pr] + contrib[f][pr]) for pr in pairs) for f in (0, 1)]
        f = 0 if cost[0] <= cost[1] else 1
        flips[ch] = bool(f)
        for pr in pairs:
            total[pr] += contrib[f][pr]
    return flips


class _Cycle(Exception):
    """The stubs of a channel ask for an order of tracks that contradicts itself."""


def _left_edge(plist: list[_Piece], before: dict[_Piece, dict[_Piece, int]], gap: float,
               strict: bool = False) -> None:
    """Tracks by the left-edge algorithm: each pass fills one track from the left with
    pieces that do not overlap and whose required-above pieces already have a track at
    least the required number of tracks higher."""
    remaining = sorted(plist, key=lambda p: (p.lo, p.hi, p.net))
    k = 0
    while remaining:
        last = -_INF
        placed = []
        for p in remaining:
            if p.lo < last + gap and not (last == -_INF and p.lo == -_INF):
                continue
            if last != -_INF and p.lo == -_INF:
                continue
            if any(q.track < 0 or q.track > k - sep for q, sep in before[p].items()):
                continue
            p.track = k
            placed.append(p)
            last = p.hi
            if last == _INF:
                break
        if not placed and any(all(q.track >= 0 for q in before[p]) for p in remaining):
            k += 1                          # only a separation holds them: leave it empty
            continue
        if not placed and strict:
            raise _Cycle
        if not placed:                      # a cycle of constraints: break it at the left
            p = remaining[0]
            p.track = k
            placed.append(p)
            before[p] = {}
        done = set(map(id, placed))
        remaining = [p for p in remaining if id(p) not in done]
        k += 1


def _spine_xs(spines: dict[str, tuple[int, str]], cell: UnitCell, px: float,
              strips: dict[tuple[int, int], Strip]) -> dict[str, float]:
    """The x of each side's rail spine: down the middle of a column of strips, else at the
    dummy cell's own spine (a metal1 spine at the cell's centre)."""
    out: dict[str, float] = {}
    for side, (c, layer) in spines.items():
        strip = next((st for (_, c_), st in sorted(strips.items()) if c_ == c), None)
        if strip is not None:
            out[side] = snap(c * px + strip.middle[0])
        else:
            off = cell.spine[0] if cell.spine is not None and layer != "metal1" else 0.0
            out[side] = snap(c * px + off)
    return out


def _edges(strips: dict[tuple[int, int], Strip], cell: UnitCell, rows: int, cols: int,
           px: float, py: float) -> tuple[float, float, float, float]:
    """The array's outer edges (left, bottom, right, top) from its cells, the ring's strips
    where they replace the outer rows' and columns' cells."""
    x0, y0, x1, y1 = cell.extent
    def kept(side: str) -> list[Rect]:
        return [st.keep for st in strips.values() if side in st.side.split("-")]
    left, right, top, bottom = kept("left"), kept("right"), kept("top"), kept("bottom")
    return (min(k.x0 for k in left) if left else x0,
            -(rows - 1) * py + (min(k.y0 for k in bottom) if bottom else y0),
            (cols - 1) * px + (max(k.x1 for k in right) if right else x1),
            max(k.y1 for k in top) if top else max(y1, cell.metal2_top))


def _dummy_spot(drawn: tuple[Rect, ...], pad: Rect) -> Rect:
    """Where a dummy's label for ``pad``'s role sits: the pad, when the dummy's own metal
    (``drawn``: a whole dummy cell's shapes, or a ring strip's) covers its centre, else
    the dummy's largest shape on that role (a dummy's top plate is cut by the corridor a
    strap passes through; a strip lies off the cell's centre)."""
    shapes = [s for s in drawn if s.role == pad.role]
    if not shapes:
        return pad
    x, y = pad.centre
    if any(s.x0 < x < s.x1 and s.y0 < y < s.y1 for s in shapes):
        return pad
    return max(shapes, key=lambda s: (s.x1 - s.x0) * (s.y1 - s.y0))


def plan_tracks(pattern: Pattern, spec: Spec, rules: Rules | None = None,
                cell: UnitCell | None = None, user: bool = False) -> int:
    """Tracks of the fullest channel between rows when ``pattern`` is routed (this does
    not depend on the row pitch, so it sets it)."""
    r_ = _rules(spec, rules)
    cell = cell if cell is not None else _cell(spec, r_, spec.array.pitch_um[0])
    plan = _plan(pattern, spec, r_, cell, user)
    return max((t for ch, t in plan.tracks.items() if ch >= 0), default=0)


# ----------------------------------------------------------------------------- drawing

def route(pattern: Pattern, spec: Spec, rules: Rules | None = None,
          cell: UnitCell | None = None, user: bool = False) -> Wiring:
    """Wire every terminal of ``pattern`` (in the spec's device order) to its net.

    Returns the wiring shapes (metal1 tracks, metal2 stubs, trunks, straps and spines,
    via1 cuts, MOS diffusion joins), the labels (every net at each unit terminal it
    reaches and at its pins), the wires, vias and taps of every net (for
    :mod:`placer.layout.parasitics`), in the coordinates of the top cell: slot (r, c) centred at
    (c px, -r py). ``user`` marks the user's own cell (stubs only, no straps or spines).
    Raises RouteError when a channel needs more tracks than the pitch holds.
    """
    r_ = _rules(spec, rules)
    px, py = spec.array.pitch_um
    cell = cell if cell is not None else _cell(spec, r_, px)
    plan = _plan(pattern, spec, r_, cell, user)
    ch = channel(cell, r_)
    rows, cols = pattern.shape
    between = max((t for c, t in plan.tracks.items() if c >= 0), default=0)
    need = min_pitch(cell, r_, between)
    if py + 1e-9 < need[1] or px + 1e-9 < need[0]:
        raise RouteError(
            f"{spec.source}: a channel of this arrangement needs {between} tracks; at pitch "
            f"[{px:g}, {py:g}] um there is room for fewer: use pitch_um = [{max(px, need[0]):g}, "
            f"{need[1]:g}] or more, or omit pitch_um to get the pitch the routing needs")
    sw, tw, land2 = r_.stub_width, r_.track_width, r_.land2
    above0 = first_track_above(cell, r_)

    def track_y(channel_index: int, k: int) -> float:
        if channel_index < 0:
            return snap(above0 + k * ch.track_pitch)
        return snap(-channel_index * py + ch.track_y(k))

    w = Wiring(strapped=plan.kind_mode == "strap", matched=list(plan.matched),
               notes=list(plan.notes))
    w.tracks_per_row = [plan.tracks.get(r, 0) for r in range(rows)] + [plan.tracks.get(-1, 0)]
    w.channel_tracks = between
    vias: list[tuple[str, float, float]] = []

    def add_wire(net: str, layer: str, x0: float, y0: float, x1: float, y1: float,
                 what: str) -> None:
        wire = Wire(net, layer, snap(min(x0, x1)), snap(min(y0, y1)), snap(max(x0, x1)),
                    snap(max(y0, y1)), what)
        w.wires.append(wire)

    def add_via(net: str, x: float, y: float) -> None:
        vias.append((net, snap(x), snap(y)))

    # array extents in x, for the trunks beside it
    edges = _edges(plan.strips, cell, rows, cols, px, py)
    x_lo_arr, x_hi_arr = edges[0], edges[2]
    for e in plan.ends:
        for x in (e.chosen.x,) if e.chosen else ():
            x_lo_arr = min(x_lo_arr, x - sw / 2)
            x_hi_arr = max(x_hi_arr, x + sw / 2)

    # trunks: which nets need one on each side, and their x
    left_nets: list[str] = []
    right_nets: list[str] = []
    for p in sorted(plan.pieces, key=lambda p: (p.channel, p.track)):
        if p.lo == -_INF and p.net not in left_nets:
            left_nets.append(p.net)
        if p.hi == _INF and p.net not in right_nets:
            right_nets.append(p.net)
    if plan.trunk_order:
        rank = {n: i for i, n in enumerate(plan.trunk_order)}
        first_l = {n: i for i, n in enumerate(left_nets)}
        first_r = {n: i for i, n in enumerate(right_nets)}
        left_nets.sort(key=lambda n: (rank.get(n, len(rank)), first_l[n]))
        right_nets.sort(key=lambda n: (-rank.get(n, -1), first_r[n]))
    if plan.top_net is not None and plan.strap_rows:
        left_nets = [plan.top_net] + [n for n in left_nets if n != plan.top_net]
    pitch2 = ch.stub_pitch
    first_left = snap(x_lo_arr - r_.metal2_space - sw / 2)
    first_right = snap(x_hi_arr + r_.metal2_space + sw / 2)
    if plan.kind_mode == "strap" and bool(np.any(pattern.ids[:, cols - 1] >= 0)):
        # units' top plates in the last column: the bottom plates' trunks stand beyond the
        # coupling reach of their metal2 and of the straps' ends, so that no bit's trunk
        # faces the top plate
        plate_x1 = max(s_.x1 for s_ in cell.shapes if s_.role == "metal2")
        strap_ends = [x1 for _, x1 in plan.strap_rows.values()]
        clear = (max([(cols - 1) * px + plate_x1, *strap_ends])
                 + REACH * r_.metal2_space + DB_UNIT_UM)
        first_right = max(first_right, _up(clear + sw / 2))
    trunk_x = {("left", n): snap(first_left - i * pitch2) for i, n in enumerate(left_nets)}
    trunk_x.update({("right", n): snap(first_right + i * pitch2)
                    for i, n in enumerate(right_nets)})

    # y of every piece's track
    for p in plan.pieces:
        p_y = track_y(p.channel, p.track)
        p.__dict__["y"] = p_y

    # stubs
    track_of: dict[tuple[int, str], _Piece] = {}
    for p in plan.pieces:
        track_of[p.channel, p.net] = p
    for e in plan.ends:
        assert e.chosen is not None
        p = track_of[e.channel, e.net]
        ty = p.__dict__["y"]
        row_y = -e.slot[0] * py
        ex, ey, via = e.chosen.x, snap(e.chosen.y + row_y), e.chosen.via
        pad = e.pads[0].moved(0.0, row_y)
        if e.chosen.side == "down":
            top = snap(ey + (land2 / 2 if via else sw / 2))
            if not via and top > pad.y1:
                top = pad.y1
            add_wire(e.net, "metal2", ex - sw / 2, ty - sw / 2, ex + sw / 2, top, "stub")
        else:
            bottom = snap(ey - (land2 / 2 if via else sw / 2))
            if not via and bottom < pad.y0:
                bottom = pad.y0
            add_wire(e.net, "metal2", ex - sw / 2, bottom, ex + sw / 2, ty + sw / 2, "stub")
        if via:
            add_via(e.net, ex, ey)
        add_via(e.net, ex, ty)

    # tracks
    spine_x = _spine_xs(plan.spines, cell, px, plan.strips)
    lowest: dict[tuple[str, str], float] = {}
    for p in plan.pieces:
        y = p.__dict__["y"]
        x0 = p.lo if p.lo != -_INF else trunk_x["left", p.net]
        x1 = p.hi if p.hi != _INF else trunk_x["right", p.net]
        add_wire(p.net, "metal1", x0 - tw / 2, y - tw / 2, x1 + tw / 2, y + tw / 2, "track")
        if p.lo == -_INF:
            add_via(p.net, x0, y)
            key = ("left", p.net)
            lowest[key] = min(lowest.get(key, y), y)
        if p.hi == _INF:
            add_via(p.net, x1, y)
            key = ("right", p.net)
            lowest[key] = min(lowest.get(key, y), y)
        for side, flag, x in (("left", p.lo_spine, x0), ("right", p.hi_spine, x1)):
            if flag and plan.spines[side][1] == "metal2":
                add_via(p.net, x, y)
            if flag:
                key = ("spine", side)
                lowest[key] = min(lowest.get(key, y), y)

    # straps of the top plates, and the top plate's trunk
    tx_top = None
    if plan.top_net is not None and plan.strap_rows:
        assert cell.strap_y is not None
        tx_top = trunk_x["left", plan.top_net]
        for r, (_, end) in sorted(plan.strap_rows.items()):
            y = snap(-r * py + cell.strap_y)
            add_wire(plan.top_net, "metal2", tx_top - sw / 2, y - sw / 2, end, y + sw / 2,
                     "strap")
            key = ("left", plan.top_net)
            lowest[key] = min(lowest.get(key, y), y)

    # spines and the ring rows' straps
    rail = spec.dummy_net
    for side, (c, layer) in plan.spines.items():
        x = spine_x[side]
        dummy_rows = [r for r in range(rows) if int(pattern.ids[r, c]) == DUMMY]
        via_y = cell.spine[1] if cell.spine is not None else None
        for r in dummy_rows:
            if via_y is not None and layer == "metal2":
                add_via(rail, x, -r * py + via_y)
        last = plan.strips.get((max(dummy_rows), c))
        if last is not None:                  # a strip: its lowest metal of the layer
            low = -max(dummy_rows) * py + min(s_.y0 for s_ in last.shapes if s_.role == layer)
        elif layer == "metal1" or via_y is None:
            low = -max(dummy_rows) * py + (cell.extent[1] if layer == "metal1"
                                           else (cell.metal2_bottom or cell.extent[1]))
        else:
            low = -max(dummy_rows) * py + via_y
        key = ("spine", side)
        lowest[key] = min(lowest.get(key, low), low)
    if plan.kind_mode == "strap" and cell.strap_y is not None and plan.spines:
        for r in plan.ring_rows:
            row_strip = next((st for (r_, _), st in sorted(plan.strips.items()) if r_ == r
                              and ("top" in st.side or "bottom" in st.side)), None)
            # along a row of strips, down its middle (over their top plates, each tied to
            # its bottom plate); else through the dummies' corridors at the strap's height
            y = snap(-r * py + (row_strip.middle[1] if row_strip is not None
                                else cell.strap_y))
            # from spine to spine, and on to every dummy of the row
            xs = [spine_x[s] for s in ("left", "right") if s in spine_x]
            xs += [c * px + (plan.strips[r, c].middle[0] if (r, c) in plan.strips else 0.0)
                   for c in range(cols) if int(pattern.ids[r, c]) == DUMMY]
            x0 = min(xs) - sw / 2
            x1 = max(xs) + sw / 2
            add_wire(rail, "metal2", x0, y - sw / 2, x1, y + sw / 2, "strap")
            # the strap ends on both spines: each reaches down to it, and a metal1 spine
            # takes it by a via on a landing of its own where no dummy stands beneath
            for side, (c_side, layer) in plan.spines.items():
                key = ("spine", side)
                lowest[key] = min(lowest.get(key, y), y)
                if layer == "metal1" and int(pattern.ids[r, c_side]) != DUMMY:
                    sx, half1 = spine_x[side], r_.land1 / 2
                    add_wire(rail, "metal1", sx - half1, y - half1, sx + half1, y + half1,
                             "spine")
                    add_via(rail, sx, y)
            if row_strip is not None:
                continue
            for c in range(cols):
                if int(pattern.ids[r, c]) != DUMMY:
                    continue
                # onto the dummy's bottom plate: a whole cell's middle, a strip's spine
                vx = snap(c * px + (plan.strips[r, c].middle[0] if (r, c) in plan.strips
                                    else 0.0))
                if vx != spine_x.get("right"):
                    add_via(rail, vx, y)

    # heights: the top of the block, where the pins sit
    top_y = edges[3]
    ups = [p.__dict__["y"] for p in plan.pieces if p.channel < 0]
    if ups:
        top_y = max(top_y, max(ups) + max(tw, land2) / 2)
    top_y = snap(top_y + (r_.metal2_space if ups else 0.0))

    for (side, net), x in trunk_x.items():
        key = (side, net)
        if key not in lowest:
            continue
        add_wire(net, "metal2", x - sw / 2, lowest[key] - sw / 2, x + sw / 2, top_y, "trunk")
        if net in _local_nets(spec):
            continue
        w.pins.setdefault(net, []).append((x, snap(top_y - sw / 2), "metal2"))
    joined = (any(p.lo_spine and p.hi_spine for p in plan.pieces)
              or (plan.kind_mode == "strap" and bool(plan.ring_rows)))
    header = None
    if len(plan.spines) == 2 and not joined:
        # two spines that nothing else joins: a rail across the top of the block
        header = snap(top_y + r_.metal1_space + tw / 2)
        add_wire(rail, "metal1", spine_x["left"] - tw / 2, header - tw / 2,
                 spine_x["right"] + tw / 2, header + tw / 2, "header")
    drawn_top = top_y                  # the spines' pins may stand above the trunks' top
    for side, (_, layer) in plan.spines.items():
        x = spine_x[side]
        lo = lowest[("spine", side)]
        width = sw if layer == "metal2" else tw
        top = top_y if header is None else header + width / 2
        if header is None:
            # the pin stands clear above the top unit's metal, so that it is the net's
            # pin and not a terminal's label (the layout contract)
            unit_top = cell.metal1_top if layer == "metal1" else cell.metal2_top
            if plan.strips:                 # the column's topmost dummy, a strip or a cell
                c = plan.spines[side][0]
                r0 = min(r for r in range(rows) if int(pattern.ids[r, c]) == DUMMY)
                first = plan.strips.get((r0, c))
                unit_top = -r0 * py + (unit_top if first is None else
                                       max(s_.y1 for s_ in first.shapes if s_.role == layer))
            top = max(top, _up(unit_top + width))
        add_wire(rail, layer, x - width / 2, lo - width / 2, x + width / 2, top, "spine")
        drawn_top = max(drawn_top, top)
        if header is not None and layer == "metal2":
            add_via(rail, x, header)
        if header is None:
            w.pins.setdefault(rail, []).append((x, snap(top - width / 2), layer))
    if header is not None:
        w.pins.setdefault(rail, []).append(
            (snap((spine_x["left"] + spine_x["right"]) / 2), header, "metal1"))
        top_y = snap(header + tw / 2)

    _equalise(w, plan, spec)

    # diffusion joins, labels, taps
    if KINDS[spec.kind].fingers and cell.diffusion is not None:
        _diffusion_joins(pattern, spec, cell, unit_nets(pattern, spec), w)
    w.vias = vias
    for e in plan.ends:
        if e.device != DUMMY_DEVICE:          # every dummy's tap is in plan.dummy_taps
            w.taps.append(Tap(e.net, e.slot, e.device, e.terminal, e.pads))
    ended = {(e.slot, e.terminal) for e in plan.ends}
    nets = unit_nets(pattern, spec)
    for (r, c), tnets in sorted(nets.items()):
        d = int(pattern.ids[r, c])
        if d == DUMMY:
            continue
        for t in cell.terminals:
            if ((r, c), t.name) in ended:
                continue
            pads = tuple(s.moved(c * px, 0.0) for s in t.metal)
            w.taps.append(Tap(tnets[t.name], (r, c), spec.devices[d], t.name, pads))
    w.taps += plan.dummy_taps
    # move every tap to its row (taps were built at y = 0)
    w.taps = [Tap(t.net, t.slot, t.device, t.terminal,
                  tuple(p.moved(0.0, -t.slot[0] * py) for p in t.pads)) for t in w.taps]
    for tap in w.taps:
        if tap.device == DUMMY_DEVICE:
            r, c = tap.slot
            flip = False
            strip = plan.strips.get((r, c))
            for term in cell.terminals:
                spot = _dummy_spot(cell.dummy_shapes or () if strip is None else strip.shapes,
                                   term.pad)
                spot = spot.moved(c * px, -r * py, flip)
                cx, cy = spot.centre
                w.labels.append(Label(tap.net, term.pad.role, snap(cx), snap(cy)))
        else:
            pad = tap.pads[0]
            cx, cy = pad.centre
            w.labels.append(Label(tap.net, pad.role, snap(cx), snap(cy)))
    for net, places in w.pins.items():
        for x, y, layer in places:
            w.labels.append(Label(net, layer, x, y))

    # shapes to draw
    for wire in w.wires:
        w.shapes.append(wire.rect)
    h = ch.via / 2
    for _, x, y in vias:
        w.shapes.append(Rect("via1", snap(x - h), snap(y - h), snap(x + h), snap(y + h)))

    _summaries(w, spec)
    xs0 = [s.x0 for s in w.shapes] + [edges[0]]
    xs1 = [s.x1 for s in w.shapes] + [edges[2]]
    ys0 = [s.y0 for s in w.shapes] + [edges[1]]
    w.bbox = (snap(min(xs0)), snap(min(ys0)), snap(max(xs1)), snap(max(top_y, drawn_top)))
    w.size_um = (snap(w.bbox[2] - w.bbox[0]), snap(w.bbox[3] - w.bbox[1]))
    return w


def _local_nets(spec: Spec) -> set[str]:
    """Inner nodes of series resistors: joined locally, no pin."""
    return {series_node(d, i) for d, n, j in zip(spec.devices, spec.counts, spec.joins,
                                                  strict=True) if j == "series"
            for i in range(1, n)}


def _equalise(w: Wiring, plan: _Plan, spec: Spec) -> None:
    """Lengthen the trunks of the shorter of two matched MOS nets with equal unit counts
    to the other's wire length."""
    if KINDS[spec.kind].routing != "rows":
        return
    units: dict[str, int] = defaultdict(int)
    for e in plan.ends:
        units[e.net] += 1
    for group in plan.matched:
        if len(group) < 2 or len({units[n] for n in group}) != 1:
            continue
        length = {n: sum(x.length for x in w.wires if x.net == n) for n in group}
        longest = max(length.values())
        for n in group:
            short = longest - length[n]
            trunks = [i for i, x in enumerate(w.wires) if x.net == n and x.what == "trunk"]
            if short <= 1e-6 or not trunks:
                continue
            each = short / len(trunks)
            for i in trunks:
                t = w.wires[i]
                w.wires[i] = Wire(t.net, t.layer, t.x0, snap(t.y0 - each), t.x1, t.y1, t.what)


def _summaries(w: Wiring, spec: Spec) -> None:
    """Per-net totals in the spec's net order (resistance and capacitance filled in later
    from the geometry)."""
    order = {n: i for i, n in enumerate(spec.net_names())}
    m1: dict[str, float] = defaultdict(float)
    m2: dict[str, float] = defaultdict(float)
    for x in w.wires:
        (m1 if x.layer == "metal1" else m2)[x.net] += x.length
    nvia: dict[str, int] = defaultdict(int)
    for net, _, _ in w.vias:
        nvia[net] += 1
    terms: dict[str, set[tuple[str, str]]] = defaultdict(set)
    units: dict[str, set[tuple[int, int]]] = defaultdict(set)
    for t in w.taps:
        terms[t.net].add((t.device, t.terminal if t.device != DUMMY_DEVICE else "tie"))
        units[t.net].add(t.slot)
    names = sorted(set(m1) | set(m2) | set(terms), key=lambda n: (order.get(n, len(order)), n))
    for n in names:
        pins = tuple((x, y) for x, y, _ in w.pins.get(n, []))
        w.nets.append(NetSummary(
            name=n, terminals=tuple(sorted(terms[n])), units=len(units[n]),
            wire_um=float(snap(m1[n] + m2[n])), metal1_um=float(snap(m1[n])),
            metal2_um=float(snap(m2[n])), vias=nvia[n], resistance_ohm=0.0,
            capacitance_ff=0.0, pin=pins[0] if pins else None, pins=pins))


def _diffusion_joins(pattern: Pattern, spec: Spec, cell: UnitCell,
                     nets: dict[tuple[int, int], dict[str, str]], w: Wiring) -> None:
    """Join the diffusion of neighbouring fingers as the spec's ``[unit] diffusion`` style
    says (:func:`placer.model.routing_estimate.diffusion_joins`: only where their facing
    terminals share a net; with "pairs", two fingers to an island)."""
    from placer.model.routing_estimate import diffusion_joins, dummy_net_id, mos_finger_nets

    assert cell.diffusion is not None
    x0, y0, x1, y1 = cell.diffusion
    px, py = spec.array.pitch_um
    joins = diffusion_joins(pattern.ids, pattern.orient, mos_finger_nets(spec),
                            dummy_net_id(spec), spec.unit.diffusion)
    for r, c in zip(*np.nonzero(joins), strict=True):
        r, c = int(r), int(c)
        # the same rule on the drawn nets: a join never ties two nets
        assert _facing(pattern, nets, r, c)[1] == _facing(pattern, nets, r, c + 1)[0]
        w.shapes.append(Rect("diffusion", snap(c * px + x1), snap(-r * py + y0),
                             snap((c + 1) * px + x0), snap(-r * py + y1)))


def _facing(pattern: Pattern, nets: dict[tuple[int, int], dict[str, str]], r: int, c: int
            ) -> tuple[str, str]:
    """(left, right) diffusion net of the finger at (r, c)."""
    n = nets[r, c]
    if int(pattern.orient[r, c]) < 0:
        return n["drain"], n["source"]
    return n["source"], n["drain"]
