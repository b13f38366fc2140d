"""Exact search: branch and bound that proves the lexicographic optimum, and the bounds.

The compiled branch and bound gives the free orbits to devices one at a time, outermost
first, and prunes a branch when interval bounds on every device's remaining moment sums
show that no completion beats the incumbent: first on the linear term alone (proving its
optimum), then on the quadratic term among completions at that linear value. Devices
with equal counts whose pairs are alike are interchangeable: each appears only after
the ones before it, so equal arrangements under relabelling are searched once.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import combinations
from math import factorial, prod

import numpy as np
from numpy.typing import NDArray

from placer.search._compiled import Compiled
from placer.search._kernel import native
from placer.search._problem import LINEAR_REL, Problem

__all__ = ["ExactResult", "branch_and_bound", "n_assignments", "linear_bound",
           "interchangeable"]

IntArray = NDArray[np.int64]
#: The diameter bound enumerates subsets of an m x m window for m one-unit devices.
MAX_SINGLES = 5


@dataclass(frozen=True)
class ExactResult:
    """Outcome of one branch-and-bound run."""

    dev_of: IntArray
    linear_um: float
    quadratic_ppm: float
    proven: bool
    status: int          # 0 exhausted (proven), 1 deadline, 2 interrupted, 3 node limit
    nodes: int


def n_assignments(comp: Compiled) -> int:
    """Distinct assignments of the free orbits (exact when orbits are single slots; for
    mirrored pairs, the count over pairs)."""
    sizes = comp.orb_size
    if len(sizes) == 0:
        return 1
    if np.all(sizes == 1):
        return factorial(len(sizes)) // prod(factorial(int(c)) for c in comp.left)
    # mirrored pairs and centre slots: split each device's units over the two kinds
    n2, n1 = int(np.sum(sizes == 2)), int(np.sum(sizes == 1))
    return factorial(n2 + n1) // prod(factorial(int(c) // 2 + int(c) % 2) for c in comp.left)


def interchangeable(prob: Problem) -> IntArray:
    """Class of each device (-1: none): devices with equal counts, no pinned units, and a
    pair set that swapping them maps onto itself."""
    n = prob.n_dev
    pairs = {tuple(sorted(p)) for p in prob.pair_array().tolist()}
    pinned = {d for _, d in prob.pinned}
    cls = np.full(n, -1, dtype=np.int64)
    for d, e in combinations(range(n), 2):
        if prob.counts[d] != prob.counts[e] or d in pinned or e in pinned:
            continue
        swap = {d: e, e: d}
        moved = {tuple(sorted((swap.get(a, a), swap.get(b, b)))) for a, b in pairs}
        if moved != pairs:
            continue
        c = cls[d] if cls[d] >= 0 else d
        cls[d] = c
        cls[e] = c
    return cls


def linear_bound(prob: Problem) -> float:
    """A linear term no assignment beats, from the devices of a single unit.

    Each one-unit device's centroid is its slot, so the worst pair among m such devices
    (when they are ranked against each other) is at least the smallest diameter of m
    distinct slots; it is found by enumerating m-slot subsets of an m x m window.

    Examples
    --------
    >>> linear_bound(Problem((1, 1, 4), 4, 4, pitch_um=(2.0, 3.0)))
    2.0
    >>> round(linear_bound(Problem((1, 1, 1, 8), 4, 4)), 6)
    1.414214
    """
    singles = [d for d, n in enumerate(prob.counts) if n == 1]
    ranked = {tuple(p) for p in prob.pair_array().tolist()}
    # only a clique of singles ranked against each other forces a diameter
    group: list[int] = []
    for d in singles:
        if all((min(d, e), max(d, e)) in ranked for e in group):
            group.append(d)
    m = min(len(group), MAX_SINGLES)
    if m < 2:
        return 0.0
    rows, cols = min(prob.rows, m), min(prob.cols, m)
    pts = np.array([(c * prob.pitch_um[0], r * prob.pitch_um[1])
                    for r in range(rows) for c in range(cols)])
    best = np.inf
    for subset in combinations(range(len(pts)), m):
        p = pts[list(subset)]
        diff = p[:, None, :] - p[None, :, :]
        best = min(best, float(np.sqrt((diff * diff).sum(-1)).max()))
    return best


def branch_and_bound(comp: Compiled, incumbent: IntArray, inc: tuple[float, ...],
                     deadline: float, *, mode: int, lin_cap: float = 0.0,
                     node_limit: int = 0) -> ExactResult:
    """Run the compiled branch and bound from the incumbent (per orbit).

    ``inc`` holds the incumbent's linear, quadratic and higher-order keys. ``mode`` 1
    proves the linear optimum; 2 the optimum of the later keys (quadratic, then the
    higher orders asked for) among assignments whose linear term is at most ``lin_cap``;
    0 all at once.
    """
    _native = native()

    prob = comp.prob
    r2 = (comp.orb_m[:, 3] * comp.hx ** 2 + comp.orb_m[:, 5] * comp.hy ** 2) / np.maximum(
        comp.orb_size, 1)
    levels = np.argsort(-r2, kind="stable").astype(np.int64)
    best_dev = np.ascontiguousarray(incumbent[levels], dtype=np.int64)
    classes = np.append(interchangeable(prob), -1).astype(np.int64)
    hi = [*inc[2:], 0.0, 0.0][:2]
    fp = np.array([comp.hx, comp.hy, comp.g2half, inc[0], inc[1], prob.relative_tie, deadline,
                   lin_cap * (1 + LINEAR_REL), hi[0], hi[1]])
    usable = prob.usable_mask()
    par = []
    for coord in (comp.u, comp.v):
        p = np.unique(coord[usable] % 2)
        par.append(int(p[0]) if len(p) == 1 else -1)
    every = int(len(comp.pairs) == prob.n_dev * (prob.n_dev - 1) // 2)
    ip = np.array([comp.n_orb, prob.n_dev, len(comp.pairs), len(levels), comp.n_units,
                   node_limit, mode, max(2, min(prob.cancel_order, 4)), every, *par],
                  dtype=np.int64)
    out = np.zeros(5)
    status = _native.bnb(np.ascontiguousarray(comp.orb_m), np.ascontiguousarray(comp.orb_hi),
                         comp.orb_size, levels, comp.left, np.ascontiguousarray(comp.pairs),
                         classes, np.ascontiguousarray(comp.base),
                         np.ascontiguousarray(comp.base_hi), best_dev, fp, ip, out,
                         comp.orb_allow)
    dev_of = np.empty(comp.n_orb, dtype=np.int64)
    dev_of[levels] = best_dev
    return ExactResult(dev_of, float(out[0]), float(out[1]), status == 0, int(status),
                       int(out[2]))
