"""Switching sequences of unary arrays: the textbook orders and a search for a better one.

The baselines (each a placement and an order at once):

``row_by_row``
    cells in reading order -- what a plain thermometer decoder over a raster gives; its
    INL grows with the array under a linear gradient.
``row_column``
    rows taken from the middle outwards, alternately above and below, and within each
    row the columns likewise: the symmetric row-column order of thermometer decoders
    [1] (placer's rendition).
``centre_pairs``
    consecutive codes on slots mirrored through the centre, pairs from the centre out:
    each pair's linear error cancels (symmetric switching [1], placer's rendition).
``quadrant_split``
    every cell split into four sub-units mirrored about both axes, the quadrant's slots
    in the symmetric row-column order: hierarchical symmetric switching [1]; it needs
    ``sub_units = 4`` and even rows and columns.
``quad_quadrant_walk``
    every cell split into sixteen sub-units, one in each sub-quadrant, mirrored at both
    levels, the cells taking each sub-quadrant's slots in a pseudo-random walk: the
    quad-quadrant random walk of [3] (placer's rendition; the published walk was chosen
    with care, this one is a fixed pseudo-random order); it needs ``sub_units = 16`` and
    rows and columns that are multiples of 4.

For a segmented array (binary LSB cells among the unary ones) every baseline puts the
binary cells on its order's first slots, largest bit first, leaves one LSB's slots spare
where the core has room (so the binary section fills 2^b LSBs) and gives the unary cells
the slots after: at the core's centre in the centre-out orders, as a layout engineer
commonly does (common practice).

:func:`switching_sequence` searches placement and order together for the least worst
|INL| over every code (linear gradient in its worst direction plus the bowl,
:func:`placer.model.unary.worst_inl`): a greedy order that keeps each partial sum of
centred positions and bowl values small, then simulated annealing [2] on exchanges of
two sub-units (one of them possibly a dummy slot), from the best of the greedy order and
the baselines; binary cells' sub-units are exchanged like the unary ones'.

References
----------
[1] Y. Nakamura, T. Miki, A. Maeda, H. Kondoh, N. Yazawa, "A 10-b 70-MS/s CMOS D/A
    converter", IEEE J. Solid-State Circuits 26(4), 637-642, 1991 (symmetrical and
    hierarchical symmetrical switching) -- cited from memory.
[2] S. Kirkpatrick, C. D. Gelatt, M. P. Vecchi, "Optimization by simulated annealing",
    Science 220(4598), 671-680, 1983.
[3] G. Van der Plas, J. Vandenbussche, W. Sansen, M. Steyaert, G. Gielen, "A 14-bit
    intrinsic accuracy Q^2 random walk CMOS DAC", IEEE J. Solid-State Circuits 34(12),
    1708-1718, 1999 -- cited from memory.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from placer.model.unary import UnaryFields, UnaryLayout, slot_field, slot_xy, worst_inl

__all__ = ["BASELINES", "row_by_row", "row_column", "centre_pairs", "quadrant_split",
           "quad_quadrant_walk",
           "switching_sequence", "SequenceResult", "repair_sequence", "SequenceRepair"]

IntArray = NDArray[np.int64]


def _centre_out(n: int) -> list[int]:
    """0 .. n-1 from the middle outwards, alternately below and above: for 8,
    3 4 2 5 1 6 0 7."""
    lo, hi = (n - 1) // 2, (n - 1) // 2 + 1
    out = []
    while lo >= 0 or hi < n:
        if lo >= 0:
            out.append(lo)
            lo -= 1
        if hi < n:
            out.append(hi)
            hi += 1
    return out


def _assemble(rows: int, cols: int, pitch: tuple[float, float], order: list[int],
              n_cells: int, sub_units: int, binary_bits: int) -> UnaryLayout:
    """A layout from a slot order: the binary cells (a segmented array) on its first
    slots, largest bit first, then -- where the core has room -- one LSB's slots left
    spare, so that the binary section fills 2^b LSBs and the unary cells start on an
    even footing; then the unary cells, each on consecutive slots of the order."""
    k = sub_units >> binary_bits
    n_bin = ((1 << binary_bits) - 1) * k
    need = n_cells * sub_units + n_bin
    if len(order) < need:
        raise ValueError(f"{n_cells} cells of {sub_units} sub-units need {need} slots; "
                         f"the core has {len(order)}")
    bits: list[IntArray] = []
    at = 0
    for j in reversed(range(binary_bits)):
        bits.insert(0, np.array(order[at:at + (k << j)], dtype=np.int64))
        at += k << j
    if binary_bits and len(order) >= need + k:
        at += k
    cells = np.array(order[at:at + n_cells * sub_units], dtype=np.int64)
    return UnaryLayout(rows, cols, pitch, cells.reshape(n_cells, sub_units), tuple(bits))


def row_by_row(rows: int, cols: int, pitch: tuple[float, float], n_cells: int,
               sub_units: int = 1, binary_bits: int = 0) -> UnaryLayout:
    """Cells in reading order (a cell's sub-units on consecutive slots)."""
    return _assemble(rows, cols, pitch, list(range(rows * cols)), n_cells, sub_units,
                     binary_bits)


def row_column(rows: int, cols: int, pitch: tuple[float, float], n_cells: int,
               sub_units: int = 1, binary_bits: int = 0) -> UnaryLayout:
    """Rows from the middle out, and the columns of each row from the middle out."""
    order = [r * cols + c for r in _centre_out(rows) for c in _centre_out(cols)]
    return _assemble(rows, cols, pitch, order, n_cells, sub_units, binary_bits)


def centre_pairs(rows: int, cols: int, pitch: tuple[float, float], n_cells: int,
                 sub_units: int = 1, binary_bits: int = 0) -> UnaryLayout:
    """Consecutive slots mirrored through the centre, nearest the centre first."""
    xy = slot_xy(rows, cols, pitch)
    n = rows * cols
    rank = np.lexsort((np.arctan2(xy[:, 1], xy[:, 0]), np.round((xy * xy).sum(axis=1), 9)))
    used = np.zeros(n, dtype=bool)
    order: list[int] = []
    for s in rank.tolist():
        if used[s]:
            continue
        twin = n - 1 - s                       # the slot mirrored through the centre
        used[s] = used[twin] = True
        order += [s] if twin == s else [s, twin]
    return _assemble(rows, cols, pitch, order, n_cells, sub_units, binary_bits)


def quadrant_split(rows: int, cols: int, pitch: tuple[float, float], n_cells: int,
                   sub_units: int = 4, binary_bits: int = 0) -> UnaryLayout:
    """Each cell on four slots mirrored about both axes, the quadrant's slots taken in the
    symmetric row-column order (nearest the centre lines first)."""
    if sub_units != 4 or rows % 2 or cols % 2 or binary_bits:
        raise ValueError("the quadrant split needs 4 sub-units a cell, no binary cells and "
                         "even rows and columns")
    hr, hc = rows // 2, cols // 2
    cells = []
    for r in range(hr):
        for c in range(hc):
            # distance from the centre lines: r rows above the middle, c columns left
            rr, cc = hr - 1 - r, hc - 1 - c
            cells.append([rr * cols + cc, rr * cols + (cols - 1 - cc),
                          (rows - 1 - rr) * cols + cc, (rows - 1 - rr) * cols + (cols - 1 - cc)])
    # quadrant slots in the symmetric order: rows then columns nearest the centre first
    cells.sort(key=lambda q: (_quad_rank(q[0], cols, hr, hc)))
    if len(cells) < n_cells:
        raise ValueError(f"{n_cells} cells of 4 sub-units need {4 * n_cells} slots; the "
                         f"core has {rows * cols}")
    return UnaryLayout(rows, cols, pitch, np.array(cells[:n_cells], dtype=np.int64))


def quad_quadrant_walk(rows: int, cols: int, pitch: tuple[float, float], n_cells: int,
                       sub_units: int = 16, binary_bits: int = 0) -> UnaryLayout:
    """Each cell on sixteen slots, one in each sub-quadrant (the core cut in four, each
    quarter again in four), the sub-quadrants mirror images of one another about the
    centre lines of the core and of its quadrants, so every cell's centroid is the core's
    centre; within a sub-quadrant the cells take its slots in one fixed pseudo-random
    order (a walk that jumps about the sub-quadrant, seed 1): the quad-quadrant split
    with a random-walk order [3], placer's rendition."""
    if sub_units != 16 or rows % 4 or cols % 4 or binary_bits:
        raise ValueError("the quad-quadrant walk needs 16 sub-units a cell, no binary cells "
                         "and rows and columns that are multiples of 4")
    hr, hc = rows // 4, cols // 4
    if n_cells > hr * hc:
        raise ValueError(f"{n_cells} cells of 16 sub-units need sub-quadrants of {n_cells} "
                         f"slots; {rows} x {cols} gives {hr * hc}")
    walk = np.random.default_rng(1).permutation(hr * hc)[:n_cells]
    cells = []
    for w in walk.tolist():
        i, j = divmod(w, hc)
        slots = []
        for sub_r in (0, 1):
            for sub_c in (0, 1):
                a = i if sub_r == 0 else 2 * hr - 1 - i          # in the quadrant
                b = j if sub_c == 0 else 2 * hc - 1 - j
                for top in (0, 1):
                    for left in (0, 1):
                        r = a if top == 0 else rows - 1 - a
                        c = b if left == 0 else cols - 1 - b
                        slots.append(r * cols + c)
        cells.append(slots)
    return UnaryLayout(rows, cols, pitch, np.array(cells, dtype=np.int64))


def _quad_rank(slot: int, cols: int, hr: int, hc: int) -> tuple[int, int]:
    r, c = divmod(slot, cols)
    return (hr - 1 - r, hc - 1 - c)


BASELINES: dict[str, Callable[..., UnaryLayout]] = {
    "row-by-row": row_by_row,
    "row-column": row_column,
    "centre pairs": centre_pairs,
    "quadrant split": quadrant_split,
    "quad-quadrant walk": quad_quadrant_walk,
}


@dataclass(frozen=True)
class SequenceResult:
    """The best layout found, its worst |INL| (LSB) and the work done."""

    layout: UnaryLayout
    worst_inl_lsb: float
    start: str
    moves: int
    seconds: float
    cut: bool = False                # the time limit ended it before its move budget


def _cost(xy: NDArray[np.float64], bowl: NDArray[np.float64], g: float, n_cells: int,
          m: int, n_bits: int = 0) -> Callable[[IntArray], float]:
    """The worst |INL| (LSB) of a permutation of slots whose first ``n_cells * m`` form the
    unary cells in order and the next the binary bits, LSB first
    (:func:`placer.model.unary.worst_inl`, on positions looked up once)."""
    nm = n_cells * m
    k = m >> n_bits
    n_act = nm + ((1 << n_bits) - 1) * k
    starts = np.cumsum([0] + [k << j for j in range(n_bits)])[:-1]
    table = ((np.arange(1 << n_bits)[:, None] >> np.arange(n_bits)) & 1).astype(float)
    vals = np.column_stack([xy, bowl])

    def cost(pm: IntArray) -> float:
        v = vals[pm[:n_act]]
        v = v - v.mean(axis=0)
        pre = np.cumsum(v[:nm].reshape(n_cells, m, 3).sum(axis=1), axis=0)
        if n_bits:
            low = table @ np.add.reduceat(v[nm:], starts, axis=0)
            tot = np.concatenate([low, (pre[:, None, :] + low[None]).reshape(-1, 3)])
        else:
            tot = pre
        return float(1e-6 / k * (g * np.hypot(tot[:, 0], tot[:, 1])
                                 + np.abs(tot[:, 2])).max())

    return cost


def _state(layout: UnaryLayout) -> IntArray:
    """The permutation of slots a layout is: its cells' slots, then the dummies'."""
    used = layout.active()
    return np.concatenate([used, np.setdiff1d(np.arange(layout.rows * layout.cols),
                                              used)]).astype(np.int64)


def _from_state(perm: IntArray, like: UnaryLayout) -> UnaryLayout:
    """The layout of permutation ``perm`` with ``like``'s cells and bits."""
    n, m = like.cells.shape
    at = n * m
    bits = []
    for b in like.bits:
        bits.append(perm[at:at + len(b)].copy())
        at += len(b)
    return UnaryLayout(like.rows, like.cols, like.pitch_um, perm[:n * m].reshape(n, m).copy(),
                       tuple(bits))


def _owners(like: UnaryLayout) -> IntArray:
    """Each permutation position's cell (unary cells 0 .. N-1, then the bits; -1 for a
    dummy slot): an exchange within one cell changes nothing."""
    sizes = [like.sub_units] * like.n_cells + [len(b) for b in like.bits]
    own = np.repeat(np.arange(len(sizes)), sizes)
    return np.concatenate([own, np.full(like.rows * like.cols - len(own), -1)])


def _greedy(rows: int, cols: int, pitch: tuple[float, float], n_cells: int,
            fields: UnaryFields) -> UnaryLayout:
    """One sub-unit a cell: each next cell the free slot that keeps the partial sums of
    the centred positions (weighted by the gradient) and bowl values smallest. The
    centre of the N cells is taken as the core's (exact when no slot is spare)."""
    xy = slot_xy(rows, cols, pitch)
    b = slot_field(rows, cols, pitch, fields)
    # the cells' mean position and bowl, assuming the spare slots are the outermost
    n = rows * cols
    keep = np.argsort((xy * xy).sum(axis=1), kind="stable")[:n_cells]
    p_bar, b_bar = xy[keep].mean(axis=0), b[keep].mean()
    g = fields.linear_ppm_per_um
    free = np.ones(n, dtype=bool)
    d = np.zeros(2)
    q = 0.0
    order = []
    for _ in range(n_cells):
        cand = np.nonzero(free)[0]
        nd = d + (xy[cand] - p_bar)
        nq = q + (b[cand] - b_bar)
        cost = g * np.hypot(nd[:, 0], nd[:, 1]) + np.abs(nq)
        # ties: nearer the centre first (keeps the outer slots for later, or as dummies)
        pick = cand[np.lexsort(((xy[cand] ** 2).sum(axis=1), np.round(cost, 9)))[0]]
        order.append(int(pick))
        free[pick] = False
        d += xy[pick] - p_bar
        q += b[pick] - b_bar
    return UnaryLayout(rows, cols, pitch, np.array(order, dtype=np.int64).reshape(-1, 1))


def switching_sequence(rows: int, cols: int, pitch: tuple[float, float], n_cells: int,
                       fields: UnaryFields, *, sub_units: int = 1, binary_bits: int = 0,
                       seed: int = 0, moves: int = 200_000,
                       time_limit_s: float = 10.0) -> SequenceResult:
    """Placement and switching order of ``n_cells`` cells of ``sub_units`` sub-units (and
    ``binary_bits`` binary cells: a segmented array) on a ``rows`` x ``cols`` core for the
    least worst |INL| (see the module's text).

    Parameters
    ----------
    rows, cols : int
        The core; it must hold every cell's sub-units.
    pitch : tuple of float
        Slot pitch (x, y) in um.
    n_cells : int
        Unary cells (e.g. 63 for six thermometer bits).
    fields : UnaryFields
        The linear gradient (worst direction) and the bowl.
    sub_units, binary_bits, seed, moves, time_limit_s
        Sub-units a unary cell; binary cells (bit j on ``2^j sub_units / 2^b`` slots);
        the random seed; the annealing's move budget and its time cap (the move budget
        makes the result repeatable when the cap is not reached).

    Returns
    -------
    SequenceResult
        The best layout and its worst |INL| in LSB.
    """
    t0 = time.monotonic()
    m = sub_units
    starts: dict[str, UnaryLayout] = {}
    for name, fn in BASELINES.items():
        try:
            starts[name] = fn(rows, cols, pitch, n_cells, m, binary_bits)
        except ValueError:
            continue
    if m == 1 and not binary_bits:
        starts["greedy"] = _greedy(rows, cols, pitch, n_cells, fields)
    if not starts:
        raise ValueError(f"{n_cells} cells of {m} sub-units do not fit {rows} x {cols}")
    scores = {k: worst_inl(v, fields) for k, v in starts.items()}
    start = min(scores, key=lambda k: (scores[k], k))
    like = starts[start]
    # state: every slot in a permutation; the cells' first (unary in order, then the
    # bits), the dummies after
    perm = _state(like)
    owner = _owners(like)
    n = rows * cols
    n_act = len(like.active())
    xy = slot_xy(rows, cols, pitch)
    cost = _cost(xy, slot_field(rows, cols, pitch, fields), fields.linear_ppm_per_um,
                 n_cells, m, binary_bits)

    rng = np.random.default_rng(seed)
    cur = cost(perm)
    best = perm.copy()
    best_f = cur
    # temperature from the mean uphill step of a few trial moves
    ups = []
    for _ in range(64):
        a, b = int(rng.integers(n_act)), int(rng.integers(n))
        trial = perm.copy()
        trial[a], trial[b] = trial[b], trial[a]
        dv = cost(trial) - cur
        if dv > 0:
            ups.append(dv)
    t_start = float(np.mean(ups)) if ups else max(cur, 1e-12)
    done = 0
    cut = False
    for it in range(moves):
        if (it & 1023) == 0 and time.monotonic() - t0 > time_limit_s:
            cut = True
            break
        a, b = int(rng.integers(n_act)), int(rng.integers(n))
        if owner[a] == owner[b]:
            continue
        perm[a], perm[b] = perm[b], perm[a]
        new = cost(perm)
        temp = t_start * (1e-4 ** (it / max(moves - 1, 1)))
        if new <= cur or rng.random() < np.exp(-(new - cur) / max(temp, 1e-300)):
            cur = new
            if cur < best_f:
                best_f = cur
                best = perm.copy()
        else:
            perm[a], perm[b] = perm[b], perm[a]
        done += 1
    out = _from_state(best, like)
    return SequenceResult(out, worst_inl(out, fields), start, done, time.monotonic() - t0,
                          cut)


@dataclass(frozen=True)
class SequenceRepair:
    """The fewest exchanges found that bring a given order's worst |INL| down."""

    layout: UnaryLayout
    swaps: tuple[tuple[int, int], ...]      # (slot, slot) exchanged, in the order made
    before_lsb: float
    after_lsb: float
    cut: bool = False                # the time limit ended it before max_swaps or a stop


def repair_sequence(layout: UnaryLayout, fields: UnaryFields, max_swaps: int = 4,
                    time_limit_s: float = 60.0) -> SequenceRepair:
    """Greedy repair of a given placement and order: each step makes the one exchange of
    two slots' contents (two cells, or a cell and a dummy slot; a cell's sub-units move
    one at a time) that lowers the worst |INL| most, until ``max_swaps`` are made or no
    exchange helps (or ``time_limit_s`` is spent: the best exchange of a step cut short
    is still made)."""
    t_end = time.monotonic() + time_limit_s
    n = layout.rows * layout.cols
    perm = _state(layout)
    owner = _owners(layout)
    n_act = len(layout.active())
    xy = slot_xy(layout.rows, layout.cols, layout.pitch_um)
    cost = _cost(xy, slot_field(layout.rows, layout.cols, layout.pitch_um, fields),
                 fields.linear_ppm_per_um, layout.n_cells, layout.sub_units, len(layout.bits))

    before = cur = cost(perm)
    swaps: list[tuple[int, int]] = []
    cut = False
    for _ in range(max_swaps):
        best = (cur * (1 - 1e-12), -1, -1)
        for a in range(n_act):
            if time.monotonic() > t_end:
                cut = True
                break
            for b in range(a + 1, n):
                if owner[a] == owner[b]:
                    continue
                perm[a], perm[b] = perm[b], perm[a]
                f = cost(perm)
                perm[a], perm[b] = perm[b], perm[a]
                if f < best[0]:
                    best = (f, a, b)
        f, a, b = best
        if a < 0:
            break
        swaps.append((int(perm[a]), int(perm[b])))
        perm[a], perm[b] = perm[b], perm[a]
        cur = f
        if time.monotonic() > t_end and len(swaps) < max_swaps:
            cut = True
            break
    return SequenceRepair(_from_state(perm, layout), tuple(swaps), before, cur, cut)
