"""A capacitor array's ring of dummies drawn as strips (``[array] ring_depth_um``).

A dummy at the edge of an array is there so that the outer units see the same
neighbour as the inner ones: a plate edge across the same gap, for the etch, the
lithography and the fringe field next to it. That needs the dummy's side that faces
the array, not its whole area (common practice; a whole unit cell is the cautious
default). A ring slot keeps its place on the grid, and its dummy is the part of a whole
cell's extent that faces the array, ``ring_depth_um`` deep: the left column keeps the
cell's right side, the right column its left side, the top row its bottom, the bottom
row its top, a corner both. The strip holds a bottom plate (metal1) over all of it and
a top plate (metal2) inset by the plate margin, tied to the bottom plate by a via1 in
each piece; a column's top plate is cut across at the strap's height, where a row's
top-plate strap passes through. Spines run down the middle of the column strips and the
rail's straps along the middle of the row strips.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from placer.errors import RouteError
from placer.io.pattern import DUMMY, EMPTY, Pattern
from placer.kinds import KINDS
from placer.layout.cells import Rect, Rules, UnitCell, _square, _up, snap

if TYPE_CHECKING:
    from placer.io.spec import Spec

__all__ = ["Strip", "dummy_only", "ring_strips", "least_depth"]


@dataclass(frozen=True)
class Strip:
    """The dummy drawn in one ring slot, in the slot's own coordinates."""

    keep: Rect                   # the part of the cell's extent kept (role "dummy")
    shapes: tuple[Rect, ...]     # bottom plate, top plate pieces, tie vias
    side: str                    # "left", "right", "top", "bottom" or a corner "top-left"...

    @property
    def middle(self) -> tuple[float, float]:
        """Where a spine (x) or a rail strap (y) crosses the strip."""
        return self.keep.centre


def least_depth(rules: Rules) -> float:
    """The least strip depth: the top plate inset by the plate margin on both sides still
    holds a via1 with its metal enclosure and is a metal2 width wide, and a metal2 spine
    down the strip's middle stays a metal2 space from the end of the row's top-plate
    strap beside it."""
    via = rules.via1 + 2 * max(rules.metal1_enclosure, rules.metal2_enclosure)
    return _up(max(2 * rules.plate_margin + max(via, rules.metal2_width),
                   rules.stub_width + 2 * rules.metal2_space))


def dummy_only(line: np.ndarray) -> bool:
    """A row or column that holds dummies and nothing else (or empty slots)."""
    return bool(np.any(line == DUMMY) and np.all((line == DUMMY) | (line == EMPTY)))


def ring_strips(pattern: Pattern, spec: Spec, cell: UnitCell, rules: Rules
                ) -> dict[tuple[int, int], Strip]:
    """The strip drawn in each dummy slot of the array's outer rows and columns that hold
    only dummies, when the spec asks for a ring of strips (else nothing)."""
    depth = spec.array.ring_depth_um
    if depth is None or KINDS[cell.kind].cell != "plate" or cell.dummy_shapes is None:
        return {}
    least = least_depth(rules)
    if depth < least - 1e-9:
        raise RouteError(f"{spec.source}: [array] ring_depth_um = {depth:g} um is too small "
                         f"for the template's plates and tie vias: use {least:g} um or more")
    x0, y0, x1, y1 = cell.extent
    if depth >= min(x1 - x0, y1 - y0):
        raise RouteError(f"{spec.source}: [array] ring_depth_um = {depth:g} um is a whole "
                         f"cell deep (the cell is {x1 - x0:g} x {y1 - y0:g} um): give less, "
                         "or omit it for a ring of whole cells")
    rows, cols = pattern.shape
    # a ring all round: the edge rows and columns hold dummies only (or empty slots)
    if rows < 3 or cols < 3 or not all(
            dummy_only(line) for line in (pattern.ids[0], pattern.ids[-1],
                                           pattern.ids[:, 0], pattern.ids[:, -1])):
        return {}
    edge_r = {0: "top", rows - 1: "bottom"}
    edge_c = {0: "left", cols - 1: "right"}
    pm = rules.plate_margin
    half = rules.stub_width / 2 + rules.metal2_space     # a strap's corridor, half width
    out: dict[tuple[int, int], Strip] = {}
    for r in range(rows):
        for c in range(cols):
            if int(pattern.ids[r, c]) != DUMMY or (r not in edge_r and c not in edge_c):
                continue
            kx0, ky0, kx1, ky1 = x0, y0, x1, y1
            if edge_c.get(c) == "left":
                kx0 = max(x0, snap(x1 - depth))
            if edge_c.get(c) == "right":
                kx1 = min(x1, snap(x0 + depth))
            if edge_r.get(r) == "top":
                ky1 = min(y1, snap(y0 + depth))
            if edge_r.get(r) == "bottom":
                ky0 = max(y0, snap(y1 - depth))
            keep = Rect("dummy", kx0, ky0, kx1, ky1)
            plate = Rect("metal2", snap(kx0 + pm), snap(ky0 + pm), snap(kx1 - pm),
                         snap(ky1 - pm))
            pieces = [plate]
            if r not in edge_r and cell.strap_y is not None:
                # a column's strip: the row's strap passes across it
                cut0, cut1 = snap(cell.strap_y - half), snap(cell.strap_y + half)
                pieces = [Rect("metal2", plate.x0, plate.y0, plate.x1, cut0),
                          Rect("metal2", plate.x0, cut1, plate.x1, plate.y1)]
                pieces = [p for p in pieces if p.y1 - p.y0 >= rules.via1
                          + 2 * rules.metal2_enclosure]
            ties = [_square("via1", *p.centre, rules.via1) for p in pieces]
            side = "-".join(s for s in (edge_r.get(r), edge_c.get(c)) if s)
            out[r, c] = Strip(keep, (Rect("metal1", kx0, ky0, kx1, ky1), *pieces, *ties),
                              side)
    return out
