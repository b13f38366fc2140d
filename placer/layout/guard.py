"""A guard ring around a routed MOS block: body tie, and the well of a PMOS block.

``[array] guard_ring = true`` draws, ``guard_space`` beyond everything the router drew, a
closed ring of tap diffusion (under the ``tap`` implant role) with a row of contacts and a
metal1 ring over it: the body tie of every finger (the substrate of an NMOS block, the
well of a PMOS block) and a shield around the block. A PMOS block (``[unit] polarity =
"p"``) sits in one well (the ``well`` role) that encloses the ring's tap diffusion by
``well_enclosure``; the ring, tapping the well, ties it. The ring is on the body net: the
devices' shared ``bulk`` net, else their shared source, else VSS (NMOS) or VDD (PMOS)
with a note. Where the router gave that net
a pin, a stub on the pin's metal runs from the pin up to the ring (through a via onto the
ring for metal2); else the ring carries the net's label and is the net's pin.

The ring carries no signal current: the parasitic extraction of the routed nets is made
before it is drawn and leaves it out.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from placer.errors import SpecError, TemplateError
from placer.layout.cells import Rect, Rules, _up, snap
from placer.layout.router import Label, Wiring

__all__ = ["GUARD_RULES", "Guard", "guard_ring", "body_net", "mixed_guard", "with_guard"]

#: The template rules a guard ring reads (optional in a template; needed with a ring).
GUARD_RULES = ("guard_space", "tap_enclosure", "well_enclosure")


@dataclass(frozen=True)
class Guard:
    """The ring's shapes and labels, its net and the well's box (None for NMOS)."""

    net: str
    shapes: tuple[Rect, ...]
    labels: tuple[Label, ...]
    outer: tuple[float, float, float, float]
    wells: tuple[tuple[float, float, float, float], ...] = ()


def body_net(spec: Any, polarity: str | None = None) -> tuple[str, str]:
    """The body net of the devices of ``polarity`` (default: the block's) and a note when
    it is a guess: their shared bulk; else their shared source (a mirror's rail); else VSS
    (n) or VDD (p), a net no terminal names, said in the note. Devices whose bulks differ
    cannot share one body."""
    pol = polarity or spec.unit.polarity
    mine = [n for d, n in zip(spec.devices, spec.nets, strict=True)
            if spec.polarity_of(d) == pol]
    bulks = {n.get("bulk") for n in mine}
    if len(bulks) == 1 and None not in bulks:
        return str(bulks.pop()), ""
    if len(bulks - {None}) > 1 or (None in bulks and len(bulks) > 1):
        given = sorted(str(b) for b in bulks - {None})
        raise SpecError(f"{spec.source}: [array] guard_ring ties one body net, but the "
                        f"devices' bulk terminals differ ({', '.join(given)}"
                        f"{' and unset' if None in bulks else ''}); give every device the "
                        "same bulk")
    sources = {n.get("source") for n in mine}
    if len(sources) == 1 and None not in sources:
        return str(sources.pop()), ""
    net = "VDD" if pol == "p" else "VSS"
    if any(net in n.values() for n in spec.nets) or net == spec.dummy_net:
        return net, ""
    return net, (f"guard ring: on {net}, a net no terminal names (the devices give no "
                 "bulk and share no source); give each device's bulk in [terminals]")


def _need(rules: Rules) -> dict[str, float]:
    missing = [k for k in GUARD_RULES if k not in rules.values]
    if missing:
        raise TemplateError(f"{rules.source}: a guard ring needs the rules "
                            f"{', '.join(missing)} (micrometres; see templates/mos_finger.toml)")
    return {k: rules.values[k] for k in GUARD_RULES}


def _cuts(a: float, b: float, size: float, space: float) -> list[float]:
    """Centres of contacts of ``size`` spaced ``space`` along [a, b], centred."""
    n = int((b - a + space + 1e-9) // (size + space))
    mid = (a + b) / 2
    return [snap(mid + (i - (n - 1) / 2) * (size + space)) for i in range(max(n, 0))]


def _widths(rules: Rules) -> tuple[float, float]:
    """(diffusion width, metal1 width) of a tap: one contact, enclosed."""
    r = rules.values
    wd = snap(r["contact"] + 2 * r["diffusion_enclosure"])
    m1 = snap(max(r["metal1_width"], r["contact"] + 2 * r["metal1_enclosure"], rules.land1))
    return max(wd, m1), m1


def guard_ring(wiring: Wiring, rules: Rules, net: str, well: bool,
               inner: tuple[float, float, float, float] | None = None) -> Guard:
    """The ring on ``net`` around ``inner`` (default: ``wiring``'s box grown by
    ``guard_space``), with a well around it when ``well``."""
    g = _need(rules)
    r = rules.values
    c, cs = r["contact"], r["contact_space"]
    wd, m1 = _widths(rules)
    x0, y0, x1, y1 = wiring.bbox
    gap = g["guard_space"]
    ix0, iy0, ix1, iy1 = (inner if inner is not None else
                          (snap(x0 - gap), snap(y0 - gap), snap(x1 + gap), snap(y1 + gap)))
    ox0, oy0, ox1, oy1 = snap(ix0 - wd), snap(iy0 - wd), snap(ix1 + wd), snap(iy1 + wd)
    sides = [(ox0, oy0, ox1, iy0), (ox0, iy1, ox1, oy1),       # bottom, top
             (ox0, iy0, ix0, iy1), (ix1, iy0, ox1, iy1)]       # left, right
    shapes: list[Rect] = []
    for a in sides:
        shapes.append(Rect("diffusion", *a))
    e = g["tap_enclosure"]
    for a in sides:
        shapes.append(Rect("tap", snap(a[0] - e), snap(a[1] - e), snap(a[2] + e),
                           snap(a[3] + e)))
    # the metal1 ring on the diffusion's centre line, contacts along every side
    h = (wd - m1) / 2
    mx0, my0, mx1, my1 = snap(ox0 + h), snap(oy0 + h), snap(ox1 - h), snap(oy1 - h)
    mids = (snap((oy0 + iy0) / 2), snap((iy1 + oy1) / 2), snap((ox0 + ix0) / 2),
            snap((ix1 + ox1) / 2))
    shapes += [Rect("metal1", mx0, my0, mx1, snap(my0 + m1)),
               Rect("metal1", mx0, snap(my1 - m1), mx1, my1),
               Rect("metal1", mx0, my0, snap(mx0 + m1), my1),
               Rect("metal1", snap(mx1 - m1), my0, mx1, my1)]
    half = c / 2
    for y in mids[:2]:
        for x in _cuts(ox0 + wd + cs, ox1 - wd - cs, c, cs):
            shapes.append(Rect("contact", snap(x - half), snap(y - half), snap(x + half),
                               snap(y + half)))
    for x in mids[2:]:
        for y in _cuts(iy0 + cs, iy1 - cs, c, cs):
            shapes.append(Rect("contact", snap(x - half), snap(y - half), snap(x + half),
                               snap(y + half)))
    labels = [Label(net, "metal1", snap((mx0 + mx0 + m1) / 2), snap((my0 + my1) / 2))]
    pins = wiring.pins.get(net, [])
    if pins:
        # from the net's pin at the block's top edge straight up to the ring's top side,
        # on the pin's own metal (a via onto the ring for metal2): one node
        px, py, layer = pins[0]
        sw = rules.stub_width if layer == "metal2" else m1
        top_mid = mids[1]
        shapes.append(Rect(layer, snap(px - sw / 2), snap(py - sw / 2), snap(px + sw / 2),
                           snap(top_mid + max(rules.land2, m1) / 2)))
        if layer == "metal2":
            v = rules.values["via1"] / 2
            shapes.append(Rect("via1", snap(px - v), snap(top_mid - v), snap(px + v),
                               snap(top_mid + v)))
    wells: tuple[tuple[float, float, float, float], ...] = ()
    if well:
        we = g["well_enclosure"]
        box = (snap(ox0 - e - we), snap(oy0 - e - we), snap(ox1 + e + we), snap(oy1 + e + we))
        shapes.append(Rect("well", *box))
        # the well's own label: any break between it and the ring shows as an open
        labels.append(Label(net, "well", snap(box[0] + we / 2), snap((box[1] + box[3]) / 2)))
        wells = (box,)
    return Guard(net, tuple(shapes), tuple(labels), (ox0, oy0, ox1, oy1), wells)


def with_guard(wiring: Wiring, guard: Guard) -> None:
    """Add the ring to ``wiring``'s drawing and grow its box (after the extraction)."""
    wiring.shapes.extend(guard.shapes)
    wiring.labels.extend(guard.labels)
    boxes = [guard.outer, *guard.wells]
    x0 = min(b[0] for b in boxes)
    y0 = min(b[1] for b in boxes)
    x1 = max(b[2] for b in boxes)
    y1 = max(b[3] for b in boxes)
    wiring.bbox = (snap(min(x0, wiring.bbox[0])), snap(min(y0, wiring.bbox[1])),
                   snap(max(x1, wiring.bbox[2])), snap(max(y1, wiring.bbox[3])))
    wiring.size_um = (snap(wiring.bbox[2] - wiring.bbox[0]),
                      snap(wiring.bbox[3] - wiring.bbox[1]))


def _row_polarity(pattern: Any, spec: Any) -> list[str]:
    """Each pattern row's polarity: its core row's (a ring's dummy rows take the nearest)."""
    from placer.model.grid import PAD

    pr = PAD[spec.array.dummies][0]
    rows = pattern.shape[0]
    core = spec.core_row_polarity(max(rows - 2 * pr, 1))
    return [core[min(max(r - pr, 0), len(core) - 1)] for r in range(rows)]


def mixed_guard(pattern: Any, spec: Any, cell: Any, wiring: Wiring, rules: Rules) -> Guard:
    """A block of n and p rows: each band of p rows in a well of its own, tied by an n+ tap
    strip beside the block (left of it, in the well's extension) joined by metal1 to the p
    body net's pin above the block; the guard ring around everything on the n body net."""
    g = _need(rules)
    if "well_space" not in rules.values:
        raise TemplateError(f"{rules.source}: a block of n and p rows needs the rule "
                            "well_space (n diffusion to a well's edge, micrometres; see "
                            "templates/mos_finger.toml)")
    space = rules.values["well_space"]
    we, e, gs = g["well_enclosure"], g["tap_enclosure"], g["guard_space"]
    wd, m1 = _widths(rules)
    c, cs = rules.values["contact"], rules.values["contact_space"]
    px, py = spec.array.pitch_um
    _, dy0, xd, dy1 = cell.diffusion
    pols = _row_polarity(pattern, spec)
    rows, cols = pattern.shape
    bx0, by0, bx1, by1 = wiring.bbox
    p_net, p_note = body_net(spec, "p")
    n_net, n_note = body_net(spec, "n")
    shapes: list[Rect] = []
    labels: list[Label] = []
    wells = []
    strip_x0, strip_x1 = snap(bx0 - gs - wd), snap(bx0 - gs)
    strip_mid = snap((strip_x0 + strip_x1) / 2)
    well_x0 = snap(strip_x0 - e - we)
    # as far beyond the last column's diffusion as beyond the first's: an arrangement
    # symmetric about the array's centre sees a symmetric well (its proximity term too)
    well_x1 = snap((cols - 1) * px + xd + (-xd - well_x0))
    tops = []
    r = 0
    while r < rows:
        if pols[r] != "p":
            r += 1
            continue
        r1 = r
        while r1 + 1 < rows and pols[r1 + 1] == "p":
            r1 += 1
        d_top, d_bot = snap(-r * py + dy1), snap(-r1 * py + dy0)     # the band's diffusion
        top, bot = snap(d_top + we), snap(d_bot - we)
        for nr, edge in ((r - 1, top), (r1 + 1, bot)):
            if 0 <= nr < rows:
                n_top, n_bot = -nr * py + dy1, -nr * py + dy0
                gap = (n_bot - edge) if nr < r else (edge - n_top)
                if gap < space - 1e-9:
                    need = py + (space - gap)
                    raise TemplateError(
                        f"{spec.source}: rows {r}..{r1} (p) sit in a well that comes "
                        f"{gap:.3g} um from row {nr}'s n diffusion, the rules ask "
                        f"{space:g} um (well_enclosure {we:g} + well_space {space:g}); give "
                        f"[array] pitch_um with a row pitch of at least {_up(need):g} um")
        box = (well_x0, bot, well_x1, top)
        wells.append(box)
        shapes.append(Rect("well", *box))
        labels.append(Label(p_net, "well", snap(well_x0 + we / 2), snap((bot + top) / 2)))
        # the n+ tie: a strip of tap diffusion with contacts, in the well beside the block
        shapes += [Rect("diffusion", strip_x0, d_bot, strip_x1, d_top),
                   Rect("tap", snap(strip_x0 - e), snap(d_bot - e), snap(strip_x1 + e),
                        snap(d_top + e))]
        h = c / 2
        for y in _cuts(d_bot + cs, d_top - cs, c, cs):
            shapes.append(Rect("contact", snap(strip_mid - h), snap(y - h), snap(strip_mid + h),
                               snap(y + h)))
        tops.append((d_bot, d_top))
        r = r1 + 1
    # one metal1 spine up the strips to above the block, then across to the p body's pin
    y_h = snap(by1 + gs / 2)
    low = min(b for b, _ in tops)
    shapes.append(Rect("metal1", snap(strip_mid - m1 / 2), low, snap(strip_mid + m1 / 2),
                       snap(y_h + m1 / 2)))
    pins = wiring.pins.get(p_net, [])
    n_pins = wiring.pins.get(n_net, [])
    if pins:
        x, y, layer = pins[0]
        if n_pins and n_pins[0][2] == "metal1" and strip_mid < n_pins[0][0] < x:
            raise TemplateError(f"{spec.source}: the {n_net} pin is on metal1 between the "
                                f"well tie and the {p_net} pin; the tie's metal1 cannot pass "
                                "it (give the dummies a routed net)")
        shapes.append(Rect("metal1", strip_mid - m1 / 2, snap(y_h - m1 / 2), snap(x + m1 / 2),
                           snap(y_h + m1 / 2)))
        if layer == "metal2":
            sw, v = rules.stub_width, rules.values["via1"] / 2
            shapes += [Rect("metal2", snap(x - sw / 2), snap(y - sw / 2), snap(x + sw / 2),
                            snap(y_h + rules.land2 / 2)),
                       Rect("via1", snap(x - v), snap(y_h - v), snap(x + v), snap(y_h + v))]
    else:
        labels.append(Label(p_net, "metal1", strip_mid, snap((low + y_h) / 2)))
    # the ring: clear of the block, of the ties' metal, and well_space beyond every well
    inner = (snap(min(bx0 - gs, well_x0 - space)), snap(min(by0 - gs, *(b[1] - space
                                                                       for b in wells))),
             snap(max(bx1 + gs, well_x1 + space)),
             snap(max(by1 + gs, y_h + m1 / 2 + gs, *(b[3] + space for b in wells))))
    ring = guard_ring(wiring, rules, spec.array.guard_net or n_net, False, inner)
    notes = [n for n in (p_note, "" if spec.array.guard_net else n_note) if n]
    for n in notes:
        wiring.notes.append(n)
    return Guard(ring.net, ring.shapes + tuple(shapes), ring.labels + tuple(labels),
                 ring.outer, tuple(wells))
