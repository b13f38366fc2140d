"""A repair applied to the user's own GDSII: the moved units' references shifted in
place, nothing else touched.

A repair's swaps, taken in order, permute the units among their slots (one slot may
take part in several swaps). Each unit that ends in another slot moves once, from its
own centre to the centre of the unit that stood in that slot: in a layout whose array
cell places each unit by a reference of its own, that is an edit of the reference's XY
record (an SREF's point, or all three of a one-instance AREF's). A device label placed in
the array cell belongs to the nearest unit within half a pitch each way (the importer's
rule) and moves with it. Every other byte of the file stays as it was: the other cells,
the properties, the record order. The wiring the user drew is not rerouted: the result
is the placement to wire again.

A unit placed inside a row or array cell (an AREF of several instances, or a cell that
places several units) cannot move alone without restructuring the user's hierarchy;
such a repair is not applied, and the reason names the unit.
"""

from __future__ import annotations

import struct
from dataclasses import dataclass
from pathlib import Path

from placer.errors import LayoutError
from placer.io.files import read_limited
from placer.io.gdsread import Ref, StreamLibrary, Structure, parse_stream
from placer.io.handlayout import MAX_LAYOUT_BYTES, apply_transform, full_boxes, top_cell

__all__ = ["Moved", "swap_units", "unit_moves"]

Slot = tuple[int, int]
Point = tuple[float, float]


@dataclass(frozen=True)
class Moved:
    """The edited stream and how many references and labels moved."""

    data: bytes
    references: int
    labels: int


def unit_moves(swaps: list[tuple[Slot, Slot]]) -> dict[Slot, Slot]:
    """Where each unit ends when ``swaps`` are made in order: {from slot: to slot} for
    every unit that moves (a slot may take part in several swaps).

    >>> unit_moves([((0, 0), (0, 1)), ((0, 1), (0, 2))])
    {(0, 1): (0, 0), (0, 2): (0, 1), (0, 0): (0, 2)}
    """
    holds: dict[Slot, Slot] = {}            # slot -> the slot its unit started in
    for a, b in swaps:
        holds[a], holds[b] = holds.get(b, b), holds.get(a, a)
    return {start: now for now, start in holds.items() if start != now}


def _label_count(cells: dict[str, Structure], label_layer: tuple[int, int]
                 ) -> dict[str, int]:
    """Device labels each cell holds, its sub-cells' included (instances counted)."""
    memo: dict[str, int] = {}

    def count(name: str, depth: int) -> int:
        if name not in memo:
            if depth > 64:
                raise LayoutError("references nest deeper than 64 levels (a cycle?)")
            s = cells[name]
            memo[name] = (sum((t.layer, t.texttype) == label_layer for t in s.texts)
                          + sum(r.count * count(r.cell, depth + 1) for r in s.refs))
        return memo[name]

    for name in cells:
        count(name, 0)
    return memo


def _instance_box(ref: Ref, box: tuple[float, float, float, float]
                  ) -> tuple[float, float, float, float]:
    corners = [apply_transform(cx, cy, ref.x, ref.y, ref.reflect, ref.angle_deg, ref.mag)
               for cx in (box[0], box[2]) for cy in (box[1], box[3])]
    xs, ys = [c[0] for c in corners], [c[1] for c in corners]
    return min(xs), min(ys), max(xs), max(ys)


def swap_units(path: Path, moves: list[tuple[Point, Point]], *, cell: str | None,
               label_layer: tuple[int, int], pitch_um: tuple[float, float]) -> Moved:
    """``path``'s bytes with each unit moved from one slot's centre to another's.

    Parameters
    ----------
    path : Path
        The user's GDSII library (read again, whole, with the importer's byte limit).
    moves : list of ((x, y), (x, y))
        For each unit that moves: the centre of its slot and of the slot it goes to
        (um, the file's coordinates); together a permutation of slots
        (:func:`unit_moves`).
    cell : str or None
        The array's cell (None: the one top cell, as the importer chose).
    label_layer : (int, int)
        Layer and text type of the device labels.
    pitch_um : (float, float)
        The array's pitch: a unit's centre may lie up to a quarter of it off its slot
        (the importer snaps that far), and a label belongs to a unit within half of it.

    Raises
    ------
    LayoutError
        When a unit to move is not placed by a reference of the array cell of its own.
    """
    source = str(path)
    data = read_limited(path, MAX_LAYOUT_BYTES, "layout", LayoutError)
    lib: StreamLibrary = parse_stream(data, source)
    top = top_cell(lib, cell, source)
    cells = lib.structures
    boxes = full_boxes(lib, source)
    labels_in_cell = _label_count(cells, label_layer)
    scale = lib.user_in_m / 1e-6                  # um per user unit
    db = lib.db_in_user                           # user units per database unit
    px, py = pitch_um
    labels = [t for t in cells[top].texts if (t.layer, t.texttype) == label_layer]
    lab_xy = [(t.x * scale, t.y * scale) for t in labels]

    # the array cell's own references that are units by the importer's rule: a cell
    # placing no cell, or one covering (with the labels on it) a single device label
    units: list[tuple[float, float, Ref]] = []
    for ref in cells[top].refs:
        box = boxes.get(ref.cell)
        if box is None:
            continue
        inst = _instance_box(ref, box)
        x, y = (inst[0] + inst[2]) / 2 * scale, (inst[1] + inst[3]) / 2 * scale
        on_top = sum(inst[0] * scale <= lx <= inst[2] * scale
                     and inst[1] * scale <= ly <= inst[3] * scale for lx, ly in lab_xy)
        n_labels = ref.count * labels_in_cell[ref.cell] + on_top
        leaf = not cells[ref.cell].refs
        if ref.count == 1 and (leaf or n_labels == 1):
            units.append((x, y, ref))

    def find(p: Point) -> tuple[float, float, Ref]:
        gx, gy = round(p[0] / px), round(p[1] / py)
        near = [units[i] for ox in (-1, 0, 1) for oy in (-1, 0, 1)
                for i in grid.get((gx + ox, gy + oy), [])
                if abs(units[i][0] - p[0]) <= px / 4 and abs(units[i][1] - p[1]) <= py / 4]
        if len(near) == 1:
            return near[0]
        where = f"({p[0]:.4g}, {p[1]:.4g}) um"
        if len(near) > 1:
            raise LayoutError(f"{source}: {len(near)} unit references of cell {top!r} lie "
                              f"at {where}; apply the swaps by hand")
        raise LayoutError(f"{source}: the unit at {where} is not placed by a reference of "
                          f"cell {top!r} of its own (it sits inside a row or array cell); "
                          "apply the swaps by hand or flatten that level")

    # each label to the nearest unit within half a pitch each way (the importer's rule),
    # found through a hash of the units by grid cell
    grid: dict[tuple[int, int], list[int]] = {}
    for i, (x, y, _) in enumerate(units):
        grid.setdefault((round(x / px), round(y / py)), []).append(i)
    owner: dict[int, list[int]] = {}
    for k, (lx, ly) in enumerate(lab_xy):
        gx, gy = round(lx / px), round(ly / py)
        cand = [((units[i][0] - lx) ** 2 + (units[i][1] - ly) ** 2, i)
                for ox in (-1, 0, 1) for oy in (-1, 0, 1) for i in grid.get((gx + ox, gy + oy), [])
                if abs(units[i][0] - lx) < px / 2 and abs(units[i][1] - ly) < py / 2]
        if cand:
            owner.setdefault(min(cand)[1], []).append(k)
    index = {id(u[2]): i for i, u in enumerate(units)}

    out = bytearray(data)
    n_refs = n_labels_moved = 0
    for start, end in moves:
        x0, y0, ref = find(start)
        x1, y1, _ = find(end)
        dx, dy = round((x1 - x0) / scale / db), round((y1 - y0) / scale / db)
        _shift(out, ref.xy_at, dx, dy, source, (x0, y0))
        n_refs += 1
        for k in owner.get(index[id(ref)], []):
            _shift(out, labels[k].xy_at, dx, dy, source, (x0, y0))
            n_labels_moved += 1
    return Moved(bytes(out), n_refs, n_labels_moved)


def _shift(out: bytearray, at: int, dx: int, dy: int, source: str, unit: Point) -> None:
    """Move every point of the XY record at byte ``at`` by (dx, dy) database units."""
    length = struct.unpack_from(">H", out, at)[0] if at >= 0 else 0
    if length not in (12, 28):                # one point (SREF, TEXT) or an AREF's three
        raise LayoutError(f"{source}: the unit at ({unit[0]:.4g}, {unit[1]:.4g}) um has an "
                          "XY record placer cannot move; apply the swaps by hand")
    n = (length - 4) // 4
    vals = list(struct.unpack_from(f">{n}i", out, at + 4))
    for i in range(0, n, 2):
        vals[i] += dx
        vals[i + 1] += dy
    if any(not -2 ** 31 <= v < 2 ** 31 for v in vals):
        raise LayoutError(f"{source}: the unit at ({unit[0]:.4g}, {unit[1]:.4g}) um would "
                          "leave the coordinate range")
    struct.pack_into(f">{n}i", out, at + 4, *vals)
