"""Exact integer moments of a problem's orbits, and the keys of an assignment.

Positions are doubled offsets from the core centre in pitches (integers), so moment sums
are exact. An *orbit* is a group of slots that always takes one device: a single slot,
or a mirrored pair under a symmetry constraint. Pinned slots are not orbits; their
units enter as fixed base sums.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from placer.search._kernel import native
from placer.search._problem import Keys, Problem

__all__ = ["Compiled", "compile_problem", "pair_terms", "evaluate", "slot_assignment",
           "orbit_assignment", "total_row_tracks", "mos_breaks", "field_products"]

IntArray = NDArray[np.int64]
FloatArray = NDArray[np.float64]
SPARE = -1
UNUSABLE = -2


def _mirror_all(prob: Problem, r: IntArray, c: IntArray) -> tuple[IntArray, IntArray]:
    """Mirror images (row, column) of every slot under the problem's symmetry."""
    if prob.symmetry == "x":
        return r, prob.cols - 1 - c
    if prob.symmetry == "y":
        return prob.rows - 1 - r, c
    if prob.symmetry == "point":
        return prob.rows - 1 - r, prob.cols - 1 - c
    return r, c


@dataclass(frozen=True, eq=False)
class Compiled:
    """A problem as the compiled loops take it (see ``_native.c``)."""

    prob: Problem
    u: IntArray                 # doubled x offset of every grid slot
    v: IntArray                 # doubled y offset (up)
    orb_slot: IntArray          # (n_orb, 2): slots of each orbit, -1 pads
    orb_size: IntArray
    orb_m: IntArray             # (n_orb, 6): sums of 1, u, v, uu, uv, vv
    orb_h: FloatArray           # (n_orb, 9): order 3 and 4 monomial sums
    orb_hi: IntArray            # the same, as integers (branch and bound)
    orb_key: IntArray           # (n_orb, 2): grid (col, row) of a single-slot orbit
    key_grid: IntArray          # grid -> single-slot orbit, -1
    orb_edge: NDArray[np.uint8] | None
    base: IntArray              # (n_dev + 1, 6): pinned units' sums (spare last)
    base_h: FloatArray
    base_hi: IntArray
    counts: IntArray            # (n_dev + 1): units of each device, spare slots last
    left: IntArray              # (n_dev + 1): what the orbits must take
    pairs: IntArray
    pinned_slot: IntArray       # grid -> pinned device, or -1
    orb_allow: IntArray         # per orbit: a bit for each device (and spare) allowed
    n_units: int
    hx: float
    hy: float
    g2half: float
    slot_xy: FloatArray         # (2, n_slots) positions in um about the core centre

    @property
    def n_orb(self) -> int:
        """Orbits."""
        return len(self.orb_size)


def _monomials(u: IntArray, v: IntArray) -> tuple[IntArray, IntArray]:
    one = np.ones_like(u)
    ints = np.column_stack([one, u, v, u * u, u * v, v * v]).astype(np.int64)
    hi = np.column_stack([u ** 3, u ** 2 * v, u * v ** 2, v ** 3, u ** 4, u ** 3 * v,
                          u ** 2 * v ** 2, u * v ** 3, v ** 4]).astype(np.int64)
    return ints, hi


_COMPILED: list[tuple[Problem, Compiled]] = []     # the last few, newest last


def compile_problem(prob: Problem) -> Compiled:
    """Orbits, monomials and base sums of ``prob`` (a problem is frozen: compiled once).

    Parameters
    ----------
    prob : Problem
        The problem to compile.

    Returns
    -------
    Compiled
        Its orbits (slots that take one device together), their exact integer moments
        and the pinned units' base sums, as the compiled loops take them.
    """
    for held, comp in _COMPILED:
        if held is prob:
            return comp
    comp = _compile(prob)
    _COMPILED.append((prob, comp))
    del _COMPILED[:-4]
    return comp


def _compile(prob: Problem) -> Compiled:
    rows, cols = prob.rows, prob.cols
    r_idx, c_idx = np.divmod(np.arange(rows * cols), cols)
    u = (2 * c_idx - (cols - 1)).astype(np.int64)
    v = ((rows - 1) - 2 * r_idx).astype(np.int64)
    ints, hi = _monomials(u, v)
    usable = prob.usable_mask()
    pinned = np.full(rows * cols, -1, dtype=np.int64)
    for s, d in prob.pinned:
        pinned[s] = d
    n_dev = prob.n_dev
    base = np.zeros((n_dev + 1, 6), dtype=np.int64)
    base_hi = np.zeros((n_dev + 1, 9), dtype=np.int64)
    for slot in np.nonzero(pinned >= 0)[0]:
        base[pinned[slot]] += ints[slot]
        base_hi[pinned[slot]] += hi[slot]
    # orbits: a slot and its mirror image (itself without symmetry), in slot order
    slots = np.arange(rows * cols)
    mr, mc = _mirror_all(prob, r_idx, c_idx)
    mate = mr * cols + mc
    free = usable & (pinned < 0)
    first = slots[free & ((slots <= mate) | ~free[mate])]
    second = mate[first]
    orb_slot = np.column_stack([first, np.where(second == first, -1, second)]).astype(np.int64)
    orb_size = (1 + (second != first)).astype(np.int64)
    pair = orb_size == 2
    orb_m = ints[first] + np.where(pair[:, None], ints[second], 0)
    orb_hi = hi[first] + np.where(pair[:, None], hi[second], 0)
    key_grid = np.full(rows * cols, -1, dtype=np.int64)
    key_grid[first[~pair]] = np.nonzero(~pair)[0]
    orb_key = np.column_stack([first % cols, first // cols]).astype(np.int64)
    orb_edge = None
    if prob.open_edge is not None and any(prob.open_edge):
        edge = np.array(prob.open_edge, dtype=np.uint8)
        orb_edge = (edge[first] + np.where(pair, edge[second], 0)).astype(np.uint8)
    allowed = prob.allowed_mask()
    orb_allow = (allowed[first] & np.where(pair, allowed[second], allowed[first])
                 ).astype(np.int64).reshape(-1)
    n_units = sum(prob.counts)
    counts = np.array([*prob.counts, int(usable.sum()) - n_units], dtype=np.int64)
    left = counts.copy()
    for d in range(n_dev):
        left[d] -= int(np.sum(pinned == d))
    hx, hy = prob.pitch_um[0] / 2.0, prob.pitch_um[1] / 2.0
    return Compiled(
        prob=prob, u=u, v=v, orb_slot=orb_slot, orb_size=orb_size, orb_m=orb_m,
        orb_h=orb_hi.astype(float), orb_hi=orb_hi, orb_key=orb_key, key_grid=key_grid,
        orb_edge=orb_edge, base=base, base_h=base_hi.astype(float), base_hi=base_hi,
        counts=counts, left=left, pairs=prob.pair_array(), pinned_slot=pinned,
        orb_allow=orb_allow,
        n_units=n_units, hx=hx, hy=hy, g2half=0.5 * prob.quadratic_ppm_per_um2,
        slot_xy=np.vstack([u * hx, v * hy]).astype(float))


def slot_assignment(comp: Compiled, dev_of: IntArray) -> IntArray:
    """Device of every grid slot: device ids, SPARE (-1) or UNUSABLE (-2)."""
    prob = comp.prob
    out = np.where(prob.usable_mask(), SPARE, UNUSABLE).astype(np.int64)
    pinned = comp.pinned_slot >= 0
    out[pinned] = comp.pinned_slot[pinned]
    dev = np.asarray(dev_of, dtype=np.int64)[:comp.n_orb]
    vals = np.where(dev == prob.n_dev, SPARE, dev)
    out[comp.orb_slot[:, 0]] = vals
    two = comp.orb_size == 2
    out[comp.orb_slot[two, 1]] = vals[two]
    return out


def orbit_assignment(comp: Compiled, assign: IntArray) -> IntArray:
    """Device of every orbit (spare = n_dev) from a slot assignment.

    Parameters
    ----------
    comp : Compiled
        The compiled problem.
    assign : ndarray of int
        One value per slot of the core in reading order: a device id, -1 (spare) or
        -2 (unusable).

    Returns
    -------
    ndarray of int64
        Device of every orbit.

    Raises
    ------
    ValueError
        When ``assign`` is not one integer per slot of the core, each a device id, -1
        (spare) or -2 (unusable).
    """
    prob = comp.prob
    a = np.asarray(assign)
    if a.shape != (prob.rows * prob.cols,) or not np.issubdtype(a.dtype, np.integer):
        raise ValueError(f"a slot assignment is {prob.rows * prob.cols} integers (one per "
                         f"slot of the {prob.rows} x {prob.cols} core), not an array of "
                         f"shape {a.shape} and type {a.dtype}")
    bad = np.nonzero((a < -2) | (a >= prob.n_dev))[0]
    if len(bad):
        raise ValueError(f"slot {int(bad[0])} holds {int(a[bad[0]])}: a slot holds a device "
                         f"id 0 to {prob.n_dev - 1}, -1 (spare) or -2 (unusable)")
    first = comp.orb_slot[:, 0]
    d = a[first]
    return np.where(d >= 0, d, comp.prob.n_dev).astype(np.int64)


def pair_terms(comp: Compiled, dev_of: IntArray) -> FloatArray:
    """Per ranked pair: linear (um), quadratic (ppm), order-3 and order-4 moment
    differences (um^k), shape (n_pairs, 4) -- the arithmetic the compiled loops rank."""
    _native = native()

    out = np.zeros((len(comp.pairs), 4))
    if len(comp.pairs) == 0:
        return out
    fp = np.array([comp.hx, comp.hy, comp.g2half, comp.prob.linear_ppm_per_um])
    ip = np.array([comp.n_orb, comp.prob.n_dev, len(comp.pairs), max(comp.prob.cancel_order, 2),
                   comp.n_units], dtype=np.int64)
    _native.keys(np.ascontiguousarray(comp.orb_m), np.ascontiguousarray(comp.orb_h),
                 comp.counts, np.ascontiguousarray(comp.pairs),
                 np.ascontiguousarray(dev_of, dtype=np.int64), np.ascontiguousarray(comp.base),
                 fp, ip, out)
    return out


def total_row_tracks(prob: Problem, assign: IntArray) -> int:
    """Row tracks of an assignment: distinct devices in each row, summed
    (:func:`placer.model.routing_estimate.row_tracks`)."""
    from placer.model.routing_estimate import row_tracks

    return int(row_tracks(np.asarray(assign).reshape(prob.rows, prob.cols)).sum())


def mos_breaks(prob: Problem, assign: IntArray) -> int:
    """Fewest diffusion breaks the MOS rows need (0 for other kinds); with fingers two to
    an island (``prob.pair_dummy``), the fewest fingers left without a partner."""
    if prob.finger_nets is None:
        return 0
    from placer.model.routing_estimate import orient_row, pair_row

    grid = assign.reshape(prob.rows, prob.cols)
    if prob.pair_dummy is not None:
        return sum(pair_row(row, None, prob.finger_nets, prob.pair_dummy)[1] for row in grid)
    return sum(orient_row(row, None, prob.finger_nets)[1] for row in grid)


def _sigma(comp: Compiled, assign: IntArray) -> float:
    prob = comp.prob
    if prob.corr_sigma_ppm <= 0 or len(comp.pairs) == 0:
        return 0.0
    from placer.model import variation
    ids = np.where(assign >= 0, assign, -1).reshape(prob.rows, prob.cols)
    cov = variation.grid_device_covariance(ids, prob.pitch_um, prob.n_dev, prob.corr_length_um,
                                       prob.kernel)
    return float(prob.corr_sigma_ppm * np.sqrt(variation.pair_variance(cov, comp.pairs)).max())


def _edge(comp: Compiled, assign: IntArray) -> float:
    prob = comp.prob
    if prob.open_edge is None or not any(prob.open_edge):
        return 0.0
    edge = np.array(prob.open_edge, dtype=bool)
    n = np.array(prob.counts, dtype=float)
    e = np.bincount(assign[edge & (assign >= 0)], minlength=prob.n_dev)
    return float(np.max(np.abs(e / n - e.sum() / n.sum())))


def evaluate(comp: Compiled, dev_of: IntArray) -> Keys:
    """Every key of one assignment (per orbit), the worst pair of each.

    Parameters
    ----------
    comp : Compiled
        The compiled problem.
    dev_of : ndarray of int64
        Device of every orbit (spare = n_dev), as :func:`orbit_assignment` gives it.

    Returns
    -------
    Keys
        Linear, quadratic and higher-order errors of the worst pair, edge balance,
        correlated sigma, row tracks and diffusion breaks.
    """
    prob = comp.prob
    terms = pair_terms(comp, dev_of)
    assign = slot_assignment(comp, dev_of)
    worst = terms.max(axis=0) if len(terms) else np.zeros(4)
    higher = tuple(float(worst[2 + k - 3]) for k in range(3, prob.cancel_order + 1))
    return Keys(float(worst[0]), float(worst[1]), higher, _edge(comp, assign),
                _sigma(comp, assign), total_row_tracks(prob, assign), mos_breaks(prob, assign))


def field_products(comp: Compiled, dev_of: IntArray) -> FloatArray:
    """K E of the correlated field for a state: per grid slot, its correlation with each
    device's units (and the spare slots, last) over their number, (n_slots, n_dev + 1)."""
    from placer.model import variation
    prob = comp.prob
    assign = slot_assignment(comp, dev_of)
    groups = np.where(assign >= 0, assign, np.where(assign == SPARE, prob.n_dev, -1))
    return variation.grid_kernel_products(groups.reshape(prob.rows, prob.cols), prob.pitch_um,
                                      prob.n_dev + 1, prob.corr_length_um, prob.kernel)
