"""The slot grid of a spec: usable slots, pins, row bands, open edges, and dummies.

The core is a rows x columns grid. Its mask marks each slot usable ('.'), keep-out
('#': stays empty, never a dummy) or outside the footprint ('-': may hold an outline
dummy). Dummies go where the spec's style puts them around the footprint: ``ring`` on
every outside slot next to a usable one (diagonals included) with the pattern grown by
one slot all round; ``ends`` beside the ends of every row's run of usable slots; spare
usable slots become dummies too.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from placer.io.pattern import DUMMY, EMPTY
from placer.io.spec import Spec

__all__ = ["mask_codes", "usable", "pinned_slots", "device_rows", "full_pattern_ids",
           "open_edge", "PAD"]

IntArray = NDArray[np.int64]
#: Slots added on each side (rows, columns) for each dummy style.
PAD = {"none": (0, 0), "ends": (0, 1), "ring": (1, 1)}


def mask_codes(spec: Spec, rows: int, cols: int) -> NDArray[np.str_]:
    """The core's mask as characters, (rows, cols): '.', '#' or '-'."""
    mask = spec.placement.mask
    if mask is None:
        return np.full((rows, cols), ".")
    if (len(mask), len(mask[0])) != (rows, cols):
        raise ValueError(f"mask is {len(mask)} x {len(mask[0])}, core {rows} x {cols}")
    return np.array([list(row) for row in mask])


def usable(spec: Spec, rows: int, cols: int) -> NDArray[np.bool_] | None:
    """Usable slots in reading order, or None when every slot is."""
    if spec.placement.mask is None:
        return None
    return (mask_codes(spec, rows, cols) == ".").ravel()


def pinned_slots(spec: Spec, cols: int) -> tuple[tuple[int, int], ...]:
    """(slot, device index) of every pinned unit, slots in reading order of the core."""
    index = {n: i for i, n in enumerate(spec.devices)}
    return tuple((r * cols + c, index[d]) for d, r, c in spec.placement.pins)


def device_rows(spec: Spec) -> tuple[tuple[int, ...] | None, ...] | None:
    """Core rows each device may use (None: any), or None when no group has rows."""
    bands = {d: g.rows for g in spec.placement.groups for d in g.devices}
    if not any(v is not None for v in bands.values()):
        return None
    return tuple(bands.get(d) for d in spec.devices)


def full_pattern_ids(spec: Spec, core: IntArray, rows: int, cols: int) -> IntArray:
    """The whole pattern's ids: the core's devices, dummies by the spec's style around the
    footprint and on spare slots, EMPTY on keep-out and unused outside slots.

    ``core`` (rows * cols) holds device ids, -1 for a spare usable slot, -2 for a slot
    the core does not use.

    Examples
    --------
    >>> from placer.jobs.load import parse_spec
    >>> spec = parse_spec('[devices]\\nA = 2\\n[array]\\nrows = 1\\ncolumns = 2\\n', "s")
    >>> full_pattern_ids(spec, np.array([0, 0]), 1, 2).tolist()
    [[-1, 0, 0, -1]]
    """
    codes = mask_codes(spec, rows, cols)
    pr, pc = PAD[spec.array.dummies]
    grid = np.full((rows + 2 * pr, cols + 2 * pc), EMPTY, dtype=int)
    code = np.full(grid.shape, "-")
    code[pr:pr + rows, pc:pc + cols] = codes
    assign = np.asarray(core, dtype=int).reshape(rows, cols)
    inner = grid[pr:pr + rows, pc:pc + cols]
    inner[:] = np.where(assign >= 0, assign, np.where(codes == ".", DUMMY, EMPTY))
    use = code == "."
    style = spec.array.dummies
    if style == "ring":
        pad = np.pad(use, 1)
        near = np.zeros(grid.shape, dtype=bool)
        for dr in (-1, 0, 1):
            for dc in (-1, 0, 1):
                near |= pad[1 + dr:1 + dr + grid.shape[0], 1 + dc:1 + dc + grid.shape[1]]
        grid[(code == "-") & near] = DUMMY
    elif style == "ends":
        left = np.zeros(grid.shape, dtype=bool)
        right = np.zeros(grid.shape, dtype=bool)
        left[:, :-1] = use[:, 1:]
        right[:, 1:] = use[:, :-1]
        grid[(code == "-") & (left | right)] = DUMMY
    return grid.astype(int)


def open_edge(spec: Spec, rows: int, cols: int,
              use: NDArray[np.bool_] | None = None) -> tuple[bool, ...]:
    """Usable core slots with a side open once the dummies are placed: next to an empty
    slot or the pattern's border rather than a unit or a dummy."""
    mask = (np.ones(rows * cols, dtype=bool) if use is None and spec.placement.mask is None
            else (use if use is not None else usable(spec, rows, cols)))
    assert mask is not None
    core = np.where(mask, 0, -2)
    ids = full_pattern_ids(spec, core, rows, cols)
    filled = np.pad(ids != EMPTY, 1, constant_values=False)
    closed = (filled[:-2, 1:-1] & filled[2:, 1:-1] & filled[1:-1, :-2] & filled[1:-1, 2:])
    pr, pc = PAD[spec.array.dummies]
    openness = ~closed[pr:pr + rows, pc:pc + cols].ravel()
    return tuple(bool(x) for x in (openness & mask))
