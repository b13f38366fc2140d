"""The user's own unit cell, taken from their GDSII library instead of placer's generic one.

Convention: the cell's origin is the unit's centre (the point the gradient model uses);
each terminal of the kind (``gate``, ``source``, ``drain`` for MOS; ``top``, ``bottom``
for capacitors; ``a``, ``b`` for resistors; any case) is a text label in the cell itself
(not in a sub-cell) on the layer and texttype of metal1 or metal2 (as the layer map
numbers them), placed on that terminal's pad. The copy of the cell written to the layout
leaves these labels out: there each terminal carries the label of its net instead.
The router leaves each terminal by a vertical metal2 stub straight down from the label
(through a via1 when the pad is metal1), so nothing of metal2 in the cell may lie below
a label except that terminal's own pad. The pitch is the cell's
bounding box in x, and in y the box plus the routing channel, unless the spec gives one.

A cell that would draw wrong is refused before use: a conductor reaching a side where the
next unit abuts (diffusion or gate touching it, metal nearer than half its spacing), a
label off its pad's metal, a metal1 pad that cannot enclose the via1 dropped at its label.
The pad the router and the extraction see is the largest rectangle of the pad's metal
around the label, so every net label and landing stays on metal.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Any

from placer.io.spec import Spec
from placer.kinds import KINDS
from placer.layout.cells import Rect, Rules, TemplateError, UnitCell, down_only, snap
from placer.layout.layers import LayerMap

__all__ = ["UserCell", "load_user_cell"]

MAX_USER_BYTES = 64 * 1024 * 1024


@dataclass(frozen=True)
class UserCell:
    """A unit cell from the user's library: the gdstk cell and its terminals."""

    gds_cell: Any
    cell: UnitCell
    rules: Rules
    source: str


#: Levels of references a user's unit cell may nest: placer's layout adds its top cell
#: and the array around it, and grade reads 64 levels in all.
MAX_CELL_DEPTH = 60


def _depth(cell: Any) -> int:
    """Levels of references below ``cell`` (1: it places none), found without recursion;
    a cycle of references counts as deeper than any limit."""
    import gdstk

    memo: dict[int, int] = {}
    open_: set[int] = set()
    stack: list[tuple[Any, bool]] = [(cell, False)]
    while stack:
        c, done = stack.pop()
        kids = [r.cell for r in c.references if isinstance(r.cell, gdstk.Cell)]
        if done:
            open_.discard(id(c))
            memo[id(c)] = 1 + max((memo[id(k)] for k in kids), default=0)
            continue
        if id(c) in memo:
            continue
        if any(id(k) in open_ for k in kids) or id(c) in open_:
            return 1 << 30                        # a cycle: no depth holds it
        open_.add(id(c))
        stack.append((c, True))
        stack.extend((k, False) for k in kids if id(k) not in memo)
    return memo[id(cell)]


def _bbox(cell: Any) -> tuple[float, float, float, float]:
    box = None
    for poly in cell.get_polygons():
        (x0, y0), (x1, y1) = poly.bounding_box()
        box = (x0, y0, x1, y1) if box is None else (min(box[0], x0), min(box[1], y0),
                                                     max(box[2], x1), max(box[3], y1))
    if box is None:
        raise TemplateError("holds no shapes")
    return box


def load_user_cell(path: Path, name: str | None, spec: Spec, rules: Rules,
                   layers: LayerMap) -> UserCell:
    """Read cell ``name`` (default: the one top cell) of the GDSII file ``path``."""
    import gdstk

    from placer.io.files import read_limited
    from placer.io.gdsread import parse_stream

    src = str(path)
    data = read_limited(path, MAX_USER_BYTES, "unit-cell library", TemplateError)
    parsed = parse_stream(data, src)          # placer's strict reader first: a damaged
    if abs(parsed.user_in_m - 1e-6) > 1e-15:  # file ends in a message, not a crash
        raise TemplateError(f"{src}: user unit is {parsed.user_in_m:g} m; a unit-cell "
                            "library must be drawn in micrometres")
    lib = gdstk.read_gds(src)
    if any(not c.name for c in lib.cells):
        raise TemplateError(f"{src}: a cell has an empty name; give every cell of the "
                            "unit-cell library a name")
    cells = {c.name: c for c in lib.cells if isinstance(c, gdstk.Cell)}
    if name is None:
        tops = lib.top_level()
        if len(tops) != 1:
            raise TemplateError(f"{src}: {len(tops)} top cells ("
                                f"{', '.join(sorted(c.name for c in tops))[:200]}); name the "
                                "unit cell with --unit-cell")
        gcell = tops[0]
        if not isinstance(gcell, gdstk.Cell):
            raise TemplateError(f"{src}: the top cell is not a readable cell")
    elif name not in cells:
        raise TemplateError(f"{src}: no cell {name!r} (cells: "
                            f"{', '.join(sorted(cells))[:200]})")
    else:
        gcell = cells[name]
    where = f"{src}: cell {gcell.name!r}"
    if _depth(gcell) > MAX_CELL_DEPTH:
        raise TemplateError(f"{where} nests its references deeper than {MAX_CELL_DEPTH} "
                            "levels; the layout placer writes around it must stay readable "
                            "(grade reads 64 levels): flatten it")
    try:
        x0, y0, x1, y1 = (snap(v) for v in _bbox(gcell))
    except TemplateError as err:
        raise TemplateError(f"{where} {err}") from None
    flat = gcell.copy("_flat").flatten()
    by_layer = {role: layers[role] for role in ("metal1", "metal2")}
    polys = {role: [p for p in flat.polygons if (p.layer, p.datatype) == ld]
             for role, ld in by_layer.items()}
    wanted = KINDS[spec.kind].drawn
    found: dict[str, tuple[str, float, float]] = {}
    placed = gcell.copy(gcell.name)
    for lab in gcell.labels:
        role = next((r for r, ld in by_layer.items() if (lab.layer, lab.texttype) == ld), None)
        text = lab.text.strip().lower()
        if role is None or text not in wanted:
            continue
        if text in found:
            raise TemplateError(f"{where}: terminal {text!r} is labelled twice; label each "
                                "terminal once")
        found[text] = (role, snap(lab.origin[0]), snap(lab.origin[1]))
        placed.remove(*[x for x in placed.labels if x.text == lab.text
                        and tuple(x.origin) == tuple(lab.origin)])
    missing = [t for t in wanted if t not in found]
    if missing:
        raise TemplateError(
            f"{where}: no label for terminal(s) {', '.join(missing)}: put a text with the "
            f"terminal's name on its metal1 or metal2 pad (layer/texttype "
            f"{by_layer['metal1'][0]}/{by_layer['metal1'][1]} or {by_layer['metal2'][0]}/"
            f"{by_layer['metal2'][1]})")
    _check_sides(flat, (x0, y0, x1, y1), spec, rules, layers, where)
    terminals = []
    sw, m2s = rules.stub_width, rules.metal2_space
    for t in wanted:
        role, x, y = found[t]
        pad = next((p for p in polys[role] if _on(p, x, y)), None)
        if pad is None:
            raise TemplateError(f"{where}: label {t!r} at ({x:g}, {y:g}) is not on a {role} "
                                "shape; put it on the terminal's pad")
        if role == "metal1" and not _holds(pad, x, y, rules.land1):
            raise TemplateError(
                f"{where}: the metal1 pad of terminal {t!r} does not enclose the via1 placer "
                f"drops at its label ({rules.via1:g} um with {rules.metal1_enclosure:g} um "
                f"of metal1 around it: a {rules.land1:g} um square centred on the label at "
                f"({x:g}, {y:g})); widen the pad or move the label")
        # the pad as the router and the extraction see it: the largest rectangle of the
        # pad's metal around the label (the whole pad when it is a rectangle), so the net's
        # label and every landing stay on metal
        pad_rect = Rect(role, *(snap(v) for v in _inner_rect(pad, x, y)))
        # nothing of metal2 but the terminal's own pad below the label, within a stub's reach
        for p in polys["metal2"]:
            if role == "metal2" and p is pad:
                continue
            (qx0, qy0), (qx1, qy1) = p.bounding_box()
            if qx0 < x + sw / 2 + m2s and qx1 > x - sw / 2 - m2s and qy0 < y:
                raise TemplateError(f"{where}: metal2 at ({qx0:g}, {qy0:g})..({qx1:g}, {qy1:g}) "
                                    f"lies in the path of the stub that leaves terminal {t!r} "
                                    "straight down; keep metal2 clear below each label")
        terminals.append(down_only(t, pad_rect, x, y, role == "metal1"))
    xs = sorted(t.exit_x for t in terminals)
    for a, b in zip(xs, xs[1:], strict=False):
        if b - a < sw + m2s - 1e-9:
            raise TemplateError(f"{where}: terminal labels at x = {a:g} and {b:g} um are closer "
                                f"than a metal2 stub pitch ({sw + m2s:g} um); spread them")
    width = x1 - x0
    if width - (xs[-1] - xs[0]) < sw + m2s - 1e-9:
        raise TemplateError(f"{where}: the outermost terminal labels are too close to the "
                            "cell's sides for the stubs of neighbouring units")
    cell = UnitCell(spec.kind, (), tuple(terminals), (x0, y0, x1, y1), y1, y0, y1,
                    snap(width), None, src)
    return UserCell(placed, cell, rules, f"{src}:{gcell.name}")


def _shape(poly: Any) -> Any:
    from shapely.geometry import Polygon

    return Polygon(poly.points).buffer(0)


def _on(poly: Any, x: float, y: float) -> bool:
    """The point lies on the polygon's metal (inside or on its edge, within 1 nm)."""
    from shapely.geometry import Point

    return bool(_shape(poly).distance(Point(x, y)) <= 1e-9)


def _holds(poly: Any, x: float, y: float, side: float) -> bool:
    """The polygon covers the square of ``side`` centred at (x, y) (within 1 nm)."""
    from shapely.geometry import box

    h = side / 2
    return bool(_shape(poly).buffer(1e-9, join_style=2).covers(box(x - h, y - h, x + h, y + h)))


#: A pad with more corners than this is taken as the square a via landing needs.
MAX_PAD_CORNERS = 32


def _inner_rect(poly: Any, x: float, y: float) -> tuple[float, float, float, float]:
    """The largest axis-aligned rectangle on the polygon's metal that holds (x, y), its
    sides on the polygon's own x and y coordinates (a rectilinear pad's rectangles all
    are); a point's neighbourhood of zero size when none holds it."""
    from shapely.geometry import box

    shape = _shape(poly).buffer(1e-9, join_style=2)
    pts = poly.points
    if len(pts) > MAX_PAD_CORNERS:
        return (x, y, x, y)
    xs = sorted({float(v) for v in pts[:, 0]})
    ys = sorted({float(v) for v in pts[:, 1]})
    best, area = (x, y, x, y), -1.0
    for i, xa in enumerate(xs):
        if xa > x + 1e-9:
            break
        for xb in xs[i + 1:]:
            if xb < x - 1e-9:
                continue
            for j, ya in enumerate(ys):
                if ya > y + 1e-9:
                    break
                for yb in ys[j + 1:]:
                    if yb < y - 1e-9:
                        continue
                    a = (xb - xa) * (yb - ya)
                    if a > area and shape.covers(box(xa, ya, xb, yb)):
                        best, area = (xa, ya, xb, yb), a
    return best


def _check_sides(flat: Any, bbox: tuple[float, float, float, float], spec: Spec,
                 rules: Rules, layers: LayerMap, where: str) -> None:
    """Refuse a cell whose conductors would touch or crowd a neighbour's: units abut at the
    cell's sides in x (at the spec's pitch, when it gives one), and in y when the spec's
    row pitch leaves no more than the cell's height. A conductor of the layer map reaching
    a side joins (or comes too near) the neighbour's: metal keeps half its spacing from
    the side, the rest stays off it."""
    x0, y0, x1, y1 = bbox
    width, height = x1 - x0, y1 - y0
    given = spec.array.pitch_um if spec.array.pitch_given else None
    gap_x = given[0] - width if given else 0.0
    gap_y = given[1] - height if given else None
    for role in layers.conductors:
        if role == "well":
            continue            # abutting wells of one net merge, as a well should
        ld = layers[role]
        space = {"metal1": rules.values.get("metal1_space", 0.0),
                 "metal2": rules.values.get("metal2_space", 0.0)}.get(role, 0.0)
        for p in flat.polygons:
            if (p.layer, p.datatype) != ld:
                continue
            (px0, py0), (px1, py1) = p.bounding_box()
            sides = [("left", px0 - x0, gap_x), ("right", x1 - px1, gap_x)]
            if gap_y is not None:
                sides += [("bottom", py0 - y0, gap_y), ("top", y1 - py1, gap_y)]
            for side, d, gap in sides:
                # the neighbour's nearest like shape may be as near its own side (mirrored
                # fingers face each other side for side)
                if 2 * d + gap < space - 1e-9 or (space == 0.0 and 2 * d + gap <= 1e-9):
                    need = f"{space / 2:g} um from" if space > 0 else "off"
                    raise TemplateError(
                        f"{where}: {role} at ({px0:g}, {py0:g})..({px1:g}, {py1:g}) reaches "
                        f"the cell's {side} side, where the next unit abuts: it would "
                        f"{'touch' if 2 * d + gap <= 1e-9 else 'come closer than the spacing to'}"
                        f" the neighbour's; keep {role} {need} the cell's sides (a shape on "
                        "another layer may set the cell's box)")
