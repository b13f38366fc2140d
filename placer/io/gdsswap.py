"""A repair applied to the user's own GDSII: the swapped units' references exchanged in
place, nothing else touched.

A swap moves unit A to where unit B was and B to where A was. In a layout whose array
cell places each unit by a reference of its own, that is an edit of two XY records: each
reference moves by the difference of the two units' centres (so units of different
transforms, or cells drawn about a corner, land centre on centre), and a device label
placed in the array cell on top of a unit moves with it. Every other byte of the file
stays as it was: the other cells, the properties, the record order. The wiring the user
drew in the array cell is not rerouted: the result is the placement to wire again.

A unit placed inside a row or array cell (an AREF, or a cell that places several units)
cannot move alone without restructuring the user's hierarchy; such a repair is not
applied, and the reason says which unit.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass
from pathlib import Path

from placer.errors import LayoutError
from placer.io.files import read_limited
from placer.io.gdsread import Ref, parse_stream
from placer.io.handlayout import MAX_LAYOUT_BYTES, apply_transform, full_boxes, top_cell

__all__ = ["Moved", "swap_units"]


@dataclass(frozen=True)
class Moved:
    """The edited stream and what moved: references and labels, by how much (um)."""

    data: bytes
    references: int
    labels: int


def _centre(ref: Ref, box: tuple[float, float, float, float]) -> tuple[float, float,
                                                                         tuple[float, ...]]:
    corners = [apply_transform(cx, cy, ref.x, ref.y, ref.reflect, ref.angle_deg, ref.mag)
               for cx in (box[0], box[2]) for cy in (box[1], box[3])]
    xs, ys = [c[0] for c in corners], [c[1] for c in corners]
    inst = (min(xs), min(ys), max(xs), max(ys))
    return (inst[0] + inst[2]) / 2, (inst[1] + inst[3]) / 2, inst


def swap_units(path: Path, swaps: list[tuple[tuple[float, float], tuple[float, float]]], *,
               cell: str | None, label_layer: tuple[int, int], tolerance_um: float
               ) -> Moved:
    """``path``'s bytes with every pair of units in ``swaps`` exchanged.

    Parameters
    ----------
    path : Path
        The user's GDSII library (read again, whole, with the importer's byte limit).
    swaps : list of ((x, y), (x, y))
        The centres (um, the file's coordinates) of the two units of each swap.
    cell : str or None
        The array's cell (None: the one top cell, as the importer chose).
    label_layer : (int, int)
        Layer and text type of the device labels.
    tolerance_um : float
        How far a unit's centre may lie from the given one (a quarter pitch, say).

    Raises
    ------
    LayoutError
        When a unit of a swap is not placed by a reference of the array cell of its own.
    """
    source = str(path)
    data = read_limited(path, MAX_LAYOUT_BYTES, "layout", LayoutError)
    lib = parse_stream(data, source)
    top = top_cell(lib, cell, source)
    boxes = full_boxes(lib, source)
    scale = lib.user_in_m / 1e-6                  # um per user unit
    db = lib.db_in_user                           # user units per database unit
    units: list[tuple[float, float, Ref, tuple[float, ...]]] = []
    for ref in lib.structures[top].refs:
        box = boxes.get(ref.cell)
        if ref.count == 1 and box is not None:
            x, y, inst = _centre(ref, box)
            units.append((x * scale, y * scale, ref, inst))
    labels = [t for t in lib.structures[top].texts if (t.layer, t.texttype) == label_layer]

    def find(p: tuple[float, float]) -> tuple[float, float, Ref, tuple[float, ...]]:
        near = [u for u in units if abs(u[0] - p[0]) <= tolerance_um
                and abs(u[1] - p[1]) <= tolerance_um]
        if len(near) != 1:
            raise LayoutError(
                f"{source}: the unit at ({p[0]:.4g}, {p[1]:.4g}) um is not placed by a "
                f"reference of cell {top!r} of its own (it sits inside a row or array "
                "cell); apply the swaps by hand or flatten that level")
        return near[0]

    out = bytearray(data)
    moved: dict[int, tuple[int, int]] = {}        # XY offset -> database-unit shift

    def shift(at: int, dx: int, dy: int) -> None:
        if at < 0 or struct.unpack_from(">H", out, at)[0] != 12:
            raise LayoutError(f"{source}: an XY record at byte {at} is not one point")
        if at in moved:
            raise LayoutError(f"{source}: one unit appears in two swaps; repair again")
        moved[at] = (dx, dy)

    for a, b in swaps:
        ua, ub = find(a), find(b)
        for (x0, y0, ref, inst), (x1, y1, _, _) in ((ua, ub), (ub, ua)):
            dx = round((x1 - x0) / scale / db)
            dy = round((y1 - y0) / scale / db)
            shift(ref.xy_at, dx, dy)
            for t in labels:                     # a label on the unit goes with it
                if inst[0] <= t.x <= inst[2] and inst[1] <= t.y <= inst[3]:
                    shift(t.xy_at, dx, dy)
    n_labels = 0
    for at, (dx, dy) in moved.items():
        x, y = struct.unpack_from(">2i", out, at + 4)
        nx, ny = x + dx, y + dy
        if not (-2 ** 31 <= nx < 2 ** 31 and -2 ** 31 <= ny < 2 ** 31):
            raise LayoutError(f"{source}: a moved unit would leave the coordinate range")
        struct.pack_into(">2i", out, at + 4, nx, ny)
        n_labels += any(t.xy_at == at for t in labels)
    return Moved(bytes(out), len(moved) - n_labels, n_labels)
