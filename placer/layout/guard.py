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
from placer.layout.cells import Rect, Rules, snap
from placer.layout.router import Label, Wiring

__all__ = ["GUARD_RULES", "Guard", "guard_ring", "body_net"]

#: The template rules a guard ring reads (optional in a template; needed with a ring).
GUARD_RULES = ("guard_space", "tap_enclosure", "well_enclosure")


@dataclass(frozen=True)
class Guard:
    """The ring's shapes and labels, its net and the well's box (None for NMOS)."""

    net: str
    shapes: tuple[Rect, ...]
    labels: tuple[Label, ...]
    outer: tuple[float, float, float, float]
    well: tuple[float, float, float, float] | None


def body_net(spec: Any) -> tuple[str, str]:
    """The net of the ring and a note when it is a guess: the devices' shared bulk; else
    their shared source (a mirror's rail); else VSS (NMOS) or VDD (PMOS), a net no
    terminal names, said in the note. Devices whose bulks differ cannot share one ring."""
    bulks = {n.get("bulk") for n in spec.nets}
    if len(bulks) == 1 and None not in bulks:
        return str(bulks.pop()), ""
    if len(bulks - {None}) > 1 or (None in bulks and len(bulks) > 1):
        given = sorted(str(b) for b in bulks - {None})
        raise SpecError(f"{spec.source}: [array] guard_ring ties one body net, but the "
                        f"devices' bulk terminals differ ({', '.join(given)}"
                        f"{' and unset' if None in bulks else ''}); give every device the "
                        "same bulk")
    sources = {n.get("source") for n in spec.nets}
    if len(sources) == 1 and None not in sources:
        return str(sources.pop()), ""
    net = "VDD" if spec.unit.polarity == "p" else "VSS"
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


def guard_ring(wiring: Wiring, rules: Rules, net: str, well: bool) -> Guard:
    """The ring around ``wiring``'s box on ``net`` (with a well around it when ``well``)."""
    g = _need(rules)
    r = rules.values
    c, cs = r["contact"], r["contact_space"]
    wd = snap(c + 2 * r["diffusion_enclosure"])          # the ring's diffusion width
    m1 = snap(max(r["metal1_width"], c + 2 * r["metal1_enclosure"], rules.land1))
    wd = max(wd, m1)
    x0, y0, x1, y1 = wiring.bbox
    gap = g["guard_space"]
    ix0, iy0, ix1, iy1 = snap(x0 - gap), snap(y0 - gap), snap(x1 + gap), snap(y1 + gap)
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
    box = None
    if well:
        we = g["well_enclosure"]
        box = (snap(ox0 - e - we), snap(oy0 - e - we), snap(ox1 + e + we), snap(oy1 + e + we))
        shapes.append(Rect("well", *box))
        # the well's own label: any break between it and the ring shows as an open
        labels.append(Label(net, "well", snap(box[0] + we / 2), snap((box[1] + box[3]) / 2)))
    return Guard(net, tuple(shapes), tuple(labels), (ox0, oy0, ox1, oy1), box)


def with_guard(wiring: Wiring, guard: Guard) -> None:
    """Add the ring to ``wiring``'s drawing and grow its box (after the extraction)."""
    wiring.shapes.extend(guard.shapes)
    wiring.labels.extend(guard.labels)
    boxes = [guard.outer] + ([guard.well] if guard.well is not None else [])
    x0 = min(b[0] for b in boxes)
    y0 = min(b[1] for b in boxes)
    x1 = max(b[2] for b in boxes)
    y1 = max(b[3] for b in boxes)
    wiring.bbox = (snap(min(x0, wiring.bbox[0])), snap(min(y0, wiring.bbox[1])),
                   snap(max(x1, wiring.bbox[2])), snap(max(y1, wiring.bbox[3])))
    wiring.size_um = (snap(wiring.bbox[2] - wiring.bbox[0]),
                      snap(wiring.bbox[3] - wiring.bbox[1]))
