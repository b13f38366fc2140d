"""Unit cells drawn from the spec's W and L and a template's rules, and the pitch they need.

Every cell is a set of rectangles about the unit's centre (the centre of its active
area: the gate over the diffusion, the top plate, the resistor body) plus its terminals:
for each, the pad the router labels, the point where a vertical metal2 stub leaves it
(through a via1 when the pad is metal1) and runs down into the routing channel below the
row. Below each row lies a channel of horizontal metal1 tracks; the row pitch holds the
cell and that channel, so the slot grid of the spec is where the units are drawn.

All numbers are micrometres. The rules are placeholders of placer's own (see the shipped
templates); a user's template gives a process's values.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Any

from placer.errors import TemplateError, shown

__all__ = [
    "TemplateError",
    "Rect",
    "Exit",
    "Terminal",
    "UnitCell",
    "Channel",
    "Rules",
    "RULES",
    "load_rules",
    "spacing_rules",
    "shipped_text",
    "unit_cell",
    "channel",
    "first_track_above",
    "min_pitch",
    "down_only",
    "snap",
    "DB_UNIT_UM",
    "REACH",
]

DB_UNIT_UM = 1e-3          # 1 nm database unit, micrometre user unit
#: Coupling between two nets is counted out to this many minimum spacings (the
#: parasitics' rule); the cells and the router keep apart beyond it what must not couple.
REACH = 3.0
_PER_UM = 1000             # database units per micrometre
MAX_RULE_UM = 1000.0

#: Rules every cell reads, then each cell geometry's own (a kind's ``cell``).
_COMMON = ("contact", "contact_space", "metal1_width", "metal1_space", "metal1_enclosure",
           "via1", "metal2_width", "metal2_space", "metal2_enclosure")
RULES = {
    "finger": _COMMON + ("diffusion_enclosure", "gate_contact_space", "gate_extension",
                      "gate_enclosure", "contact_diffusion_space", "diffusion_space",
                      "gate_space"),
    "plate": _COMMON + ("plate_margin",),
    "strip": _COMMON + ("gate_enclosure", "gate_space"),
}
#: Rules a template may give and must give only for what uses them: a MOS block's guard
#: ring (:mod:`placer.layout.guard`).
OPTIONAL_RULES = {"finger": ("guard_space", "tap_enclosure", "well_enclosure", "well_space")}



def snap(v: float) -> float:
    """Round to a whole database unit (1 nm) so GDSII truncation cannot move it.

    Examples
    --------
    >>> snap(2.3000000000000003)
    2.3
    """
    return round(v * _PER_UM) / _PER_UM


def _up(v: float) -> float:
    """Round up to a whole database unit (a minimum stays a minimum)."""
    return math.ceil(v * _PER_UM - 1e-6) / _PER_UM


@dataclass(frozen=True)
class Rect:
    """An axis-parallel rectangle of one role (layer), in micrometres."""

    role: str
    x0: float
    y0: float
    x1: float
    y1: float

    def moved(self, dx: float, dy: float, flip: bool = False) -> Rect:
        """The rectangle reflected left to right (if ``flip``) and then moved."""
        x0, x1 = (-self.x1, -self.x0) if flip else (self.x0, self.x1)
        return Rect(self.role, x0 + dx, self.y0 + dy, x1 + dx, self.y1 + dy)

    @property
    def centre(self) -> tuple[float, float]:
        """Centre point."""
        return ((self.x0 + self.x1) / 2, (self.y0 + self.y1) / 2)


@dataclass(frozen=True)
class Exit:
    """Where a vertical metal2 stub may leave a terminal's pad for a routing channel:
    ``side`` "down" (the channel below the row) or "up" (the channel above it), the point
    the stub starts from and whether a via1 joins it to a metal1 pad there."""

    side: str
    x: float
    y: float
    via: bool

    def moved(self, dx: float, dy: float, flip: bool = False) -> Exit:
        """The exit reflected left to right (if ``flip``) and then moved."""
        return Exit(self.side, snap((-self.x if flip else self.x) + dx), snap(self.y + dy),
                    self.via)


@dataclass(frozen=True)
class Terminal:
    """A unit terminal: its pad, and the exits a stub to a channel may take (the first
    one leaves downwards)."""

    name: str
    pad: Rect
    exits: tuple[Exit, ...]
    shapes: tuple[Rect, ...] = ()

    @property
    def metal(self) -> tuple[Rect, ...]:
        """Every metal shape of the terminal, its labelled pad first."""
        return (self.pad,) + tuple(s for s in self.shapes if s != self.pad)

    def exit(self, side: str) -> Exit | None:
        """The exit on ``side`` ("down" or "up"), or None."""
        return next((e for e in self.exits if e.side == side), None)

    @property
    def exit_x(self) -> float:
        """X of the downward exit."""
        return self.exits[0].x

    @property
    def exit_y(self) -> float:
        """Y of the downward exit."""
        return self.exits[0].y

    @property
    def via(self) -> bool:
        """Whether the downward exit needs a via1 (a metal1 pad)."""
        return self.exits[0].via


def down_only(name: str, pad: Rect, x: float, y: float, via: bool) -> Terminal:
    """A terminal whose only exit leaves downwards from (x, y)."""
    return Terminal(name, pad, (Exit("down", x, y, via),))


@dataclass(frozen=True)
class Rules:
    """A template's drawing rules (micrometres), with the sizes derived from them."""

    kind: str
    values: dict[str, float]
    source: str

    def __getattr__(self, key: str) -> float:
        try:
            return self.values[key]
        except KeyError:
            raise AttributeError(key) from None

    @property
    def land1(self) -> float:
        """Metal1 landing of a via1."""
        return self.values["via1"] + 2 * self.values["metal1_enclosure"]

    @property
    def land2(self) -> float:
        """Metal2 landing of a via1."""
        return self.values["via1"] + 2 * self.values["metal2_enclosure"]

    @property
    def stub_width(self) -> float:
        """Width of a vertical metal2 wire (stub or trunk)."""
        return _up(max(self.values["metal2_width"], self.land2))

    @property
    def track_width(self) -> float:
        """Width of a horizontal metal1 track."""
        return _up(max(self.values["metal1_width"], self.land1))


@dataclass(frozen=True)
class UnitCell:
    """One unit's drawing: shapes and terminals about its centre, and its extents.

    ``dummy_shapes`` draw the dummy unit: the same device with every terminal joined into
    one net (a tie), which leaves by ``dummy_exits``; a column of dummies is joined by a
    vertical spine at ``spine`` = (x, y of the via1 onto the tie, or None when the spine
    lies on the tie's own metal, layer of the spine). ``strap_y`` is, for a capacitor
    whose top plates a row strap joins, the strap's height (None: no strap).
    """

    kind: str
    shapes: tuple[Rect, ...]
    terminals: tuple[Terminal, ...]
    extent: tuple[float, float, float, float]
    metal1_top: float
    metal1_bottom: float
    metal2_top: float
    min_pitch_x: float
    diffusion: tuple[float, float, float, float] | None
    source: str
    dummy_shapes: tuple[Rect, ...] | None = None
    dummy_exits: tuple[Exit, ...] = ()
    spine: tuple[float, float | None, str] | None = None
    strap_y: float | None = None
    metal2_bottom: float | None = None

    def terminal(self, name: str) -> Terminal:
        """The terminal called ``name``."""
        for t in self.terminals:
            if t.name == name:
                return t
        raise KeyError(name)


@dataclass(frozen=True)
class Channel:
    """Geometry of the routing channel below a row, relative to the row's centre."""

    track_width: float
    track_pitch: float
    first_track_y: float
    stub_width: float
    stub_pitch: float
    via: float

    def track_y(self, k: int) -> float:
        """Centre y of track k (0 is nearest the row above)."""
        return snap(self.first_track_y - k * self.track_pitch)


def shipped_text(name: str) -> str:
    """A shipped template: the checkout's templates/ when running from one, else the
    installed package data (placer.templates)."""
    checkout = Path(__file__).resolve().parent.parent
    local = checkout / "templates" / name
    if (checkout / "pyproject.toml").is_file() and local.is_file():
        return local.read_text(encoding="utf-8")
    return resources.files("placer.templates").joinpath(name).read_text(encoding="utf-8")


def read_toml(path: Path | None, fallback: str) -> tuple[dict[str, Any], str]:
    """A template or layer-map file as a dict, with the name to quote in messages."""
    from placer.io.files import read_text, toml_depth
    from placer.limits import MAX_TOML_DEPTH

    if path is None:
        return tomllib.loads(shipped_text(fallback)), f"templates/{fallback}"
    text = read_text(Path(path), "template or layer map", TemplateError)
    if toml_depth(text) > MAX_TOML_DEPTH:
        raise TemplateError(f"{path}: tables, arrays or dotted keys nest deeper than "
                            f"{MAX_TOML_DEPTH} levels")
    try:
        return tomllib.loads(text), str(path)
    except (tomllib.TOMLDecodeError, RecursionError) as err:
        raise TemplateError(f"{path}: invalid TOML: {str(err)[:200]}") from None


def load_rules(kind: str, path: Path | None = None) -> Rules:
    """The drawing rules of ``kind``'s unit cell: the shipped template or ``path``."""
    from placer.kinds import KINDS

    data, src = read_toml(path, KINDS[kind].template)
    names = RULES[KINDS[kind].cell]
    optional = OPTIONAL_RULES.get(KINDS[kind].cell, ())
    for key in data:
        if key not in ("kind", "rules"):
            raise TemplateError(f"{src}: unknown key {shown(key)} (allowed: kind, rules)")
    if data.get("kind", kind) != kind:
        raise TemplateError(f"{src}: kind = {shown(data.get('kind'))} does not match the spec's "
                            f"kind {shown(kind)}")
    raw = data.get("rules")
    if not isinstance(raw, dict):
        raise TemplateError(f"{src}: needs a [rules] table")
    values: dict[str, float] = {}
    for key in raw:
        if key not in names + optional:
            import difflib

            near = difflib.get_close_matches(key, names + optional, n=1)
            hint = f" (did you mean {shown(near[0])}?)" if near else ""
            raise TemplateError(f"{src}: [rules] unknown rule {shown(key)}{hint}")
    for key in names + optional:
        if key not in raw:
            if key in optional:
                continue
            raise TemplateError(f"{src}: [rules] missing {key} (micrometres)")
        v = raw[key]
        if (isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v)
                or not DB_UNIT_UM <= v <= MAX_RULE_UM):
            raise TemplateError(f"{src}: [rules] {key} must be a number from {DB_UNIT_UM:g} "
                                f"(the 1 nm grid) to {MAX_RULE_UM:g} um, got {shown(v)}")
        values[key] = float(v)
    return Rules(kind, values, src)


def spacing_rules(rules: Rules) -> dict[str, float]:
    """The template's spacing between shapes of different nets, per conductor role."""
    r = rules.values
    out = {"metal1": r["metal1_space"], "metal2": r["metal2_space"]}
    if "diffusion_space" in r:
        out["diffusion"] = r["diffusion_space"]
    if "gate_space" in r:
        out["gate"] = r["gate_space"]
    return out


def _column(span0: float, span1: float, size: float, space: float) -> list[float]:
    """Centres of as many cuts of ``size`` as fit in [span0, span1], spaced and centred."""
    n = int((span1 - span0 + space + 1e-9) // (size + space))
    if n < 1:
        return []
    mid = (span0 + span1) / 2
    return [snap(mid + (i - (n - 1) / 2) * (size + space)) for i in range(n)]


def _square(role: str, x: float, y: float, size: float) -> Rect:
    h = size / 2
    return Rect(role, snap(x - h), snap(y - h), snap(x + h), snap(y + h))


def unit_cell(kind: str, width_um: float, length_um: float, pitch_x: float | None,
              rules: Rules) -> UnitCell:
    """The unit cell of ``kind`` for W = ``width_um`` and L = ``length_um``.

    ``pitch_x`` sets how far a MOS finger's diffusion reaches (up to half the diffusion
    space from the slot edge); None draws the narrowest cell. Raises TemplateError with
    the smallest size that works when W or L leave no room for the rules.
    """
    from placer.kinds import KINDS

    builder = {"finger": _mos, "plate": _cap, "strip": _res}[KINDS[kind].cell]
    return builder(width_um, length_um, pitch_x, rules)


def _too_small(what: str, have: float, need: float, rules: Rules) -> TemplateError:
    return TemplateError(f"unit {what} {have:g} um leaves no room for the rules of "
                         f"{rules.source}: it must be at least {_up(need):g} um")


def _mos(w: float, length: float, pitch_x: float | None, r: Rules) -> UnitCell:
    """A gate finger over its diffusion: contact columns and metal1 straps at both sides,
    the gate contacted on a pad below the diffusion. Drawn for '>' (source left)."""
    c, cs, de = r.contact, r.contact_space, r.diffusion_enclosure
    sw, land1, land2 = r.stub_width, r.land1, r.land2
    if w < c + 2 * de:
        raise _too_small("width W", w, c + 2 * de, r)
    strap_w = _up(max(r.metal1_width, c + 2 * r.metal1_enclosure, land1))
    # contact column centre: clear of the gate, and far enough from the gate's stub
    xc = _up(max(length / 2 + r.gate_contact_space + c / 2, sw + r.metal2_space))
    xd_need = xc + c / 2 + de
    pad_poly = _up(max(length, c + 2 * r.gate_enclosure))
    pad_m1 = _up(max(r.metal1_width, c + 2 * r.metal1_enclosure, land1))
    min_px = _up(max(2 * xd_need + r.diffusion_space, 2 * xc + sw + r.metal2_space,
                     2 * xc + strap_w + r.metal1_space, pad_poly + r.gate_space,
                     length + r.gate_space))
    px = min_px if pitch_x is None else pitch_x
    xd = snap(max(px / 2 - r.diffusion_space / 2, xd_need))
    ys = _column(-w / 2 + de, w / 2 - de, c, cs)
    y_lo, y_hi = ys[0] - c / 2, ys[-1] + c / 2
    s0 = snap(min(y_lo - r.metal1_enclosure, y_hi + r.metal1_enclosure - land1))
    s1 = snap(y_hi + r.metal1_enclosure)
    yv = snap(s0 + land1 / 2)                               # via1 at the strap's foot
    # gate contact below the diffusion, its metal1 pad clear of the straps
    yg = snap(min(-w / 2 - r.contact_diffusion_space - c / 2,
                  -w / 2 - c / 2 - r.gate_enclosure,
                  s0 - r.metal1_space - pad_m1 / 2))
    hw = pad_poly / 2
    shapes = [
        Rect("diffusion", -xd, snap(-w / 2), xd, snap(w / 2)),
        Rect("gate", snap(-length / 2), snap(yg - c / 2 - r.gate_enclosure), snap(length / 2),
             snap(w / 2 + r.gate_extension)),
        Rect("gate", snap(-hw), snap(yg - c / 2 - r.gate_enclosure), snap(hw),
             snap(yg + c / 2 + r.gate_enclosure)),
        _square("contact", 0.0, yg, c),
        Rect("marker", -xd, snap(-w / 2), snap(-length / 2), snap(w / 2)),
    ]
    pads = {}
    for name, x in (("source", -xc), ("drain", xc)):
        for y in ys:
            shapes.append(_square("contact", x, y, c))
        pads[name] = Rect("metal1", snap(x - strap_w / 2), s0, snap(x + strap_w / 2), s1)
    pads["gate"] = _square("metal1", 0.0, yg, pad_m1)
    shapes.extend(pads.values())
    terminals = (down_only("gate", pads["gate"], 0.0, yg, True),
                 down_only("source", pads["source"], -xc, yv, True),
                 down_only("drain", pads["drain"], xc, yv, True))
    bottom = snap(min(yg - pad_m1 / 2, yg - c / 2 - r.gate_enclosure))
    top = snap(w / 2 + r.gate_extension)
    # the dummy finger: source, drain and gate joined in metal1 (a bar across the foot of
    # the straps, down to the gate pad), leaving through the gate pad's via
    tie = (Rect("metal1", snap(-xc - strap_w / 2), s0, snap(xc + strap_w / 2),
                snap(s0 + strap_w)),
           Rect("metal1", snap(-pad_m1 / 2), snap(yg), snap(pad_m1 / 2), snap(s0 + strap_w)))
    return UnitCell("mos", tuple(shapes), terminals, (-xd, bottom, xd, top), s1,
                    snap(yg - pad_m1 / 2), snap(yv + land2 / 2), min_px,
                    (-xd, snap(-w / 2), xd, snap(w / 2)), r.source,
                    dummy_shapes=tuple(shapes) + tie,
                    dummy_exits=(Exit("down", 0.0, yg, True),),
                    spine=(0.0, yg, "metal2"))


def _cap(w: float, length: float, pitch_x: float | None, r: Rules) -> UnitCell:
    """Top plate (metal2) over a larger bottom plate (metal1). The top plate is notched in
    its lower and upper edge, and in each notch a via1 may lift the bottom plate to a
    stub: down from the lower notch, up from the upper one. The two vias stand one stub
    pitch apart about the centre (so stubs from the rows above and below a channel never
    need an order of tracks), and each notch is wide enough to hold the other's x too:
    a stub that crosses a channel to a track next to the row beyond ends over that row's
    notch, never over its top plate. So every unit's stub faces the metal of its own top
    plate only, the same for every unit and every track, and the top plate couples to
    each bit in proportion to its units. A plate too narrow for that has its notches in
    two opposite corners instead. The top plate is drawn tall enough that, less its
    notches, its area is at least W x L. Where the plate is tall enough, a metal2 strap
    across the row at ``strap_y`` joins neighbouring top plates (and passes through a
    corridor cut across each dummy's top plate); otherwise the top plate leaves by a stub
    of its own."""
    pm, sw, land2, m2s = r.plate_margin, r.stub_width, r.land2, r.metal2_space
    notch = _up(land2 + m2s)                 # the notch's depth (and a corner notch's width)
    if w < 2 * notch + m2s:
        raise _too_small("width W", w, 2 * notch + m2s, r)
    if length < 2 * notch:
        raise _too_small("length L", length, 2 * notch, r)
    # centred notches: the vias one stub pitch apart; a notch holds its own via's landing
    # with a metal2 space round it and reaches past the other via's x by a stub's half
    # width; the plate beside a notch keeps a metal2 width, and every stub stays more
    # than three spaces from the next plate
    apart = _up(sw + m2s)
    near = snap(apart / 2 + sw / 2 + DB_UNIT_UM)        # the notch's edge past the other x
    far = _up(apart / 2 + max(land2, sw) / 2 + m2s)     # and on its own via's side
    # deep enough that a stub crossing the channel to the track next to this plate (its
    # end a metal2 space off the plate's edge, less what a stub wider than its landing
    # pokes out) is beyond the coupling's reach of the notch's floor
    reach_in = REACH * m2s - (m2s - max(0.0, (sw - land2) / 2)) + DB_UNIT_UM
    deep = _up(max(notch, reach_in))
    centred = (w / 2 >= far + r.metal2_width + DB_UNIT_UM
               # the next plate at least a metal2 space beyond this one's edge
               and w / 2 + m2s > apart / 2 + sw / 2 + REACH * m2s + DB_UNIT_UM
               and length > 2 * deep + r.metal2_width)
    nw = near + far if centred else notch
    notch = deep if centred else notch
    tall = _up(length + 2 * nw * notch / w)          # area of W x L despite the notches
    hx, hy = snap(w / 2), snap(tall / 2)
    ey = snap(hy - land2 / 2)                         # via centres' height in the notches
    ex = snap(apart / 2) if centred else snap(hx - land2 / 2)
    mid = Rect("metal2", -hx, snap(-hy + notch), hx, snap(hy - notch))
    lower: tuple[Rect, ...]
    upper: tuple[Rect, ...]
    if centred:
        n0, n1 = -near, far                           # the lower notch's x range
        lower = (Rect("metal2", -hx, -hy, n0, snap(-hy + notch)),
                 Rect("metal2", n1, -hy, hx, snap(-hy + notch)))
        upper = (Rect("metal2", -hx, snap(hy - notch), -n1, hy),
                 Rect("metal2", -n0, snap(hy - notch), hx, hy))
    else:
        lower = (Rect("metal2", -hx, -hy, snap(hx - notch), snap(-hy + notch)),)
        upper = (Rect("metal2", snap(-hx + notch), snap(hy - notch), hx, hy),)
    plate = (mid, *lower, *upper)
    bottom = Rect("metal1", snap(-hx - pm), snap(-hy - pm), snap(hx + pm), snap(hy + pm))
    shapes = (bottom, *plate)
    tx = snap(hx - land2 / 2)                         # the top plate's own exits: corners
    terminals = (Terminal("top", mid, (Exit("down", -tx, -hy, False),
                                       Exit("up", tx, hy, False)), plate),
                 Terminal("bottom", bottom, (Exit("down", ex, -ey, True),
                                             Exit("up", -ex, ey, True))))
    min_px = _up(max(w + 2 * pm + r.metal1_space, w + m2s, w - land2 + sw + m2s))
    # the strap: across the plate's middle, clear of both notches, so that the stubs of
    # the upper and the lower notch stand equally far from it (its corridor in a dummy
    # the same)
    half = sw / 2 + m2s
    strap = 0.0 if hy - max(land2, notch) - half >= 0 else None
    if strap is not None:
        cut0, cut1 = snap(strap - half), snap(strap + half)
        pieces: tuple[Rect, ...] = (Rect("metal2", -hx, snap(-hy + notch), hx, cut0),
                                    *lower,
                                    Rect("metal2", -hx, cut1, hx, snap(hy - notch)),
                                    *upper)
        pieces = tuple(p for p in pieces if p.x1 > p.x0 and p.y1 > p.y0)
        # a dummy's top plate tied to its bottom plate by a via in each half: in the
        # middle piece, or where that is too thin, in the edge's band beside its notch
        side = snap((hx + near) / 2) if centred else snap(hx / 2)
        lo_xy = (0.0, snap((-hy + notch + cut0) / 2))
        hi_xy = (snap(hx / 2), snap((cut1 + hy - notch) / 2))
        if hy - notch - cut1 < land2:
            lo_xy = (-side if centred else 0.0, snap((-hy + cut0) / 2))
            hi_xy = (side, snap((cut1 + hy) / 2))
        dummy: tuple[Rect, ...] = (bottom, *pieces, _square("via1", *lo_xy, r.via1),
                                   _square("via1", *hi_xy, r.via1))
        spine: tuple[float, float | None, str] | None = (snap(hx / 2), None, "metal2")
    else:
        dummy = (bottom, *plate, _square("via1", 0.0, 0.0, r.via1))
        spine = (0.0, None, "metal2")
    return UnitCell("cap", shapes, terminals,
                    (snap(-hx - pm), snap(-hy - pm), snap(hx + pm), snap(hy + pm)),
                    snap(hy + pm), snap(-hy - pm), hy, min_px, None, r.source,
                    dummy_shapes=dummy, dummy_exits=terminals[1].exits, spine=spine,
                    strap_y=strap, metal2_bottom=-hy)


def _res(w: float, length: float, pitch_x: float | None, r: Rules) -> UnitCell:
    """A vertical body with a contacted head (gate layer) at each end; terminal a at the
    top head, b at the bottom head, both stubs leaving downwards at opposite sides.

    The body is drawn on the resistor role: it is a device between the heads, not a wire,
    so an extraction by the layout contract sees the two heads as two nets."""
    c, cs, ge = r.contact, r.contact_space, r.gate_enclosure
    sw, land1, land2, m1e = r.stub_width, r.land1, r.land2, r.metal1_enclosure
    head_w = _up(max(w, c + 2 * ge))
    head_h = _up(c + 2 * ge)
    a = _up(max((sw / 2 + land2 / 2 + r.metal2_space) / 2, land1 / 2))
    xs = _column(-head_w / 2 + ge, head_w / 2 - ge, c, cs)
    pad_h = _up(max(c + 2 * m1e, land1))
    cx0, cx1 = xs[0] - c / 2 - m1e, xs[-1] + c / 2 + m1e
    yt = snap(length / 2 + head_h / 2)
    yb = snap(-length / 2 - head_h / 2)
    shapes = [
        Rect("resistor", snap(-w / 2), snap(-length / 2), snap(w / 2), snap(length / 2)),
        Rect("gate", snap(-head_w / 2), snap(length / 2), snap(head_w / 2),
             snap(length / 2 + head_h)),
        Rect("gate", snap(-head_w / 2), snap(-length / 2 - head_h), snap(head_w / 2),
             snap(-length / 2)),
    ]
    for x in xs:
        shapes.append(_square("contact", x, yt, c))
        shapes.append(_square("contact", x, yb, c))
    pad_a = Rect("metal1", snap(min(-a - land1 / 2, cx0)), snap(yt - pad_h / 2),
                 snap(cx1), snap(yt + pad_h / 2))
    pad_b = Rect("metal1", snap(cx0), snap(yb - pad_h / 2), snap(max(a + land1 / 2, cx1)),
                 snap(yb + pad_h / 2))
    shapes += [pad_a, pad_b]
    x0 = min(pad_a.x0, -head_w / 2)
    x1 = max(pad_b.x1, head_w / 2)
    min_px = _up(max(head_w + r.gate_space, max(pad_a.x1 - pad_a.x0, pad_b.x1 - pad_b.x0,
                                                 x1 - x0) + r.metal1_space,
                     2 * a + sw + r.metal2_space))
    # each head leaves by a short stub on its own side of the row (a up, b down) or by a
    # long one past the body to the other side's channel
    terminals = (Terminal("a", pad_a, (Exit("down", -a, yt, True), Exit("up", -a, yt, True))),
                 Terminal("b", pad_b, (Exit("down", a, yb, True), Exit("up", a, yb, True))))
    bottom = snap(min(yb - pad_h / 2, -length / 2 - head_h))
    top = snap(max(yt + pad_h / 2, length / 2 + head_h))
    # the dummy: both heads joined by a metal1 bar over the body
    bar_w = _up(r.metal1_width)
    tie = Rect("metal1", snap(-bar_w / 2), pad_b.y0, snap(bar_w / 2), pad_a.y1)
    return UnitCell("res", tuple(shapes), terminals, (snap(x0), bottom, snap(x1), top),
                    pad_a.y1, pad_b.y0, snap(yt + land2 / 2), min_px, None, r.source,
                    dummy_shapes=tuple(shapes) + (tie,),
                    dummy_exits=(terminals[1].exits[0], terminals[0].exits[1]),
                    spine=(a, yb, "metal2"), metal2_bottom=snap(yb - land2 / 2))


def channel(cell: UnitCell, rules: Rules) -> Channel:
    """The channel below a row of ``cell``: its first track just clear of the cell (its
    metal1, and the metal2 landing of a via on the track clear of the cell's metal2)."""
    tw = rules.track_width
    first = cell.metal1_bottom - rules.metal1_space - tw / 2
    if cell.metal2_bottom is not None:
        first = min(first, cell.metal2_bottom - rules.metal2_space - rules.land2 / 2)
    return Channel(tw, _up(tw + rules.metal1_space), snap(first), rules.stub_width,
                   _up(rules.stub_width + rules.metal2_space), rules.via1)


def first_track_above(cell: UnitCell, rules: Rules) -> float:
    """Centre y of the lowest track of a channel above a row of ``cell`` (the row's
    centre at 0), clear of the cell's metal1 and metal2."""
    return _up(max(cell.metal1_top + rules.metal1_space + rules.track_width / 2,
                   cell.metal2_top + rules.metal2_space + rules.land2 / 2))


def min_pitch(cell: UnitCell, rules: Rules, tracks: int) -> tuple[float, float]:
    """Smallest slot pitch (x, y) for ``cell`` with a channel of ``tracks`` tracks.

    In y the row must hold the cell, then its channel, then clear the next row's cell:
    the lowest track stays one metal1 space above the next row's highest metal1, and its
    via landings one metal2 space above that row's highest metal2. With no track the rows
    only keep their spacing.
    """
    ch = channel(cell, rules)
    if tracks <= 0:
        need_m1 = cell.metal1_top + rules.metal1_space - cell.metal1_bottom
        bottom2 = cell.metal2_bottom if cell.metal2_bottom is not None else cell.metal2_top
        need_m2 = cell.metal2_top + rules.metal2_space - bottom2
    else:
        last = ch.track_y(tracks - 1)
        need_m1 = cell.metal1_top + rules.metal1_space + ch.track_width / 2 - last
        need_m2 = cell.metal2_top + rules.metal2_space + rules.land2 / 2 - last
    x0, y0, x1, y1 = cell.extent
    others = max(rules.values.get("gate_space", 0.0), rules.values.get("diffusion_space", 0.0))
    need_shapes = (y1 - y0) + others
    return (_up(cell.min_pitch_x), _up(max(need_m1, need_m2, need_shapes)))
