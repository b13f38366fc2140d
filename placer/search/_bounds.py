"""A quadratic error no arrangement beats, at a given linear error.

The quadratic term of a pair (a, b) is ``g2/2 * ||M_a - M_b||_F``, where ``M_d`` is the
mean of ``(p - c)(p - c)^T`` over device d's units and c is the centroid of all device
units (``_native.c``). For any symmetric U with ``||U||_F = 1``, Cauchy-Schwarz gives
``||M_a - M_b||_F >= |f_a - f_b|`` with ``f_d = <M_d, U>`` = the mean over d's units of
``(p - c)^T U (p - c)``. On a core with no spare slot, c and the sum ``sum_d n_d f_d``
are the same for every arrangement, and each ``f_d`` lies between the means of the n_d
smallest and the n_d largest values of ``(q - c)^T U (q - c)`` over the slots. A
one-unit device s gets a tighter upper end from the linear error L: its unit is its
centroid, and ``p_s - c = sum_d (n_d / N)(p_s - mu_d)`` with ``|p_s - mu_d| <= L`` times
the number of ranked pairs between s and d, so its slot lies within that distance of c.

The smallest worst-pair spread ``max |f_a - f_b|`` the intervals and the fixed sum
allow is a linear programme; it bounds the worst pair's quadratic term of every
arrangement whose linear term is at most L. With every pair ranked it has a closed form
(two thresholds on clipped weighted sums); otherwise scipy's HiGHS solves it.
"""

from __future__ import annotations

from collections import deque

import numpy as np
from numpy.typing import NDArray

from placer.search._problem import Problem

__all__ = ["quadratic_bound", "spread_bound", "LP_MAX_DEVICES"]

FloatArray = NDArray[np.float64]

#: Devices up to which a problem with only some pairs ranked gets the LP bound.
LP_MAX_DEVICES = 64
#: The bound is rounded down by this fraction (solver tolerance, floating sums).
SAFETY = 1e-9


def _hops(prob: Problem) -> NDArray[np.int64]:
    """Ranked pairs between every two devices (n_dev x n_dev; -1: not connected)."""
    n = prob.n_dev
    adj: list[list[int]] = [[] for _ in range(n)]
    for a, b in prob.pair_array().tolist():
        adj[a].append(b)
        adj[b].append(a)
    out = np.full((n, n), -1, dtype=np.int64)
    for s in range(n):
        out[s, s] = 0
        todo = deque([s])
        while todo:
            u = todo.popleft()
            for v in adj[u]:
                if out[s, v] < 0:
                    out[s, v] = out[s, u] + 1
                    todo.append(v)
    return out


def _threshold(lo: FloatArray, hi: FloatArray, w: FloatArray, total: float,
               upper: bool) -> float:
    """Where a clipped weighted sum crosses ``total``, by bisection, rounded outwards.

    ``upper``: the largest x with ``sum w * max(lo, x) <= total`` (rounded up); else
    the smallest y with ``sum w * min(hi, y) >= total`` (rounded down).
    """
    span = float(max(abs(lo).max(), abs(hi).max(), abs(total) / w.sum())) + 1.0
    if upper:
        a, b = float(lo.min()), span
        for _ in range(200):
            m = 0.5 * (a + b)
            if m in (a, b):
                break
            if (w * np.maximum(lo, m)).sum() <= total:
                a = m
            else:
                b = m
        return b
    a, b = -span, float(hi.max())
    for _ in range(200):
        m = 0.5 * (a + b)
        if m in (a, b):
            break
        if (w * np.minimum(hi, m)).sum() >= total:
            b = m
        else:
            a = m
    return a


def spread_bound(lo: FloatArray, hi: FloatArray, w: FloatArray, total: float,
                 pairs: NDArray[np.int64] | None = None) -> float:
    """The least ``max |f_a - f_b|`` over the pairs, for f in [lo, hi] with
    ``sum w f = total`` (every pair when ``pairs`` is None); nan when infeasible.

    Examples
    --------
    >>> spread_bound(np.array([0.0, 3.0]), np.array([1.0, 5.0]), np.ones(2), 4.0)
    2.0
    >>> spread_bound(np.array([0.0, 0.0]), np.array([4.0, 4.0]), np.ones(2), 4.0)
    0.0
    """
    if (w * lo).sum() > total * (1 + 1e-12) or (w * hi).sum() < total * (1 - 1e-12):
        return float("nan")
    if pairs is None:
        # f in [x, x + t]: x at most min hi and where sum w max(lo, x) passes the total;
        # x + t at least max lo and where sum w min(hi, .) reaches it
        x_hi = min(float(hi.min()), _threshold(lo, hi, w, total, upper=True))
        y_lo = max(float(lo.max()), _threshold(lo, hi, w, total, upper=False))
        return max(0.0, y_lo - x_hi)
    from scipy.optimize import linprog

    n = len(lo)
    if len(pairs) == 0:
        return 0.0
    rows = np.zeros((2 * len(pairs), n + 1))
    k = np.arange(len(pairs))
    rows[2 * k, pairs[:, 0]] = 1.0
    rows[2 * k, pairs[:, 1]] = -1.0
    rows[2 * k + 1, pairs[:, 0]] = -1.0
    rows[2 * k + 1, pairs[:, 1]] = 1.0
    rows[:, n] = -1.0
    cost = np.zeros(n + 1)
    cost[n] = 1.0
    res = linprog(cost, A_ub=rows, b_ub=np.zeros(len(rows)),
                  A_eq=np.append(w, 0.0)[None, :], b_eq=[total],
                  bounds=[*zip(lo.tolist(), hi.tolist(), strict=True), (0.0, None)],
                  method="highs")
    return float(res.x[n]) if res.status == 0 else float("nan")


def quadratic_bound(prob: Problem, linear_um: float) -> float:
    """The least worst-pair quadratic error (ppm) of any arrangement of ``prob`` whose
    worst-pair linear error is at most ``linear_um``; nan where none is claimed.

    Claimed for the lexicographic objective on a core whose usable slots all hold units
    (spare slots move the centre), with every pair ranked or at most
    :data:`LP_MAX_DEVICES` devices.

    Parameters
    ----------
    prob : Problem
        The core, the devices, the ranked pairs and the quadratic gradient.
    linear_um : float
        The linear error (worst pair, um) the arrangements are held to.

    Returns
    -------
    float
        The bound in ppm, rounded down by :data:`SAFETY`; nan where none is claimed
        (another objective, spare slots, or no arrangement with that linear error).

    Examples
    --------
    >>> round(quadratic_bound(Problem((1, 1, 2), 1, 4), 1.0), 6)   # 1 x 4, 1 um pitch
    0.02
    """
    n = prob.n_dev
    if (prob.objective != "lexicographic" or prob.n_spare() != 0 or n < 2
            or not np.isfinite(linear_um) or linear_um < 0):
        return float("nan")
    ranked = prob.pair_array()
    pairs: NDArray[np.int64] | None = ranked
    if len({tuple(sorted(p)) for p in ranked.tolist()} - {(a, a) for a in range(n)}) \
            == n * (n - 1) // 2:
        pairs = None                        # every pair ranked: the closed form
    elif n > LP_MAX_DEVICES:
        return float("nan")
    mask = prob.usable_mask()
    idx = np.nonzero(mask)[0]
    r, c = np.divmod(idx, prob.cols)
    xy = np.stack([c * prob.pitch_um[0], r * prob.pitch_um[1]], axis=1).astype(float)
    xy -= xy.mean(axis=0)
    dist = np.hypot(xy[:, 0], xy[:, 1])
    counts = np.array(prob.counts, dtype=float)
    hops = _hops(prob)
    scatter = xy.T @ xy
    best = 0.0
    for u in (scatter / np.linalg.norm(scatter), np.eye(2) / np.sqrt(2.0)):
        g = np.einsum("ij,jk,ik->i", xy, u, xy)
        order = np.sort(g)
        cum = np.concatenate([[0.0], np.cumsum(order)])
        m = len(order)
        lo = np.array([cum[int(k)] / k for k in prob.counts])
        hi = np.array([(cum[m] - cum[m - int(k)]) / k for k in prob.counts])
        for s in np.nonzero(counts == 1)[0]:
            if (hops[s] < 0).any():
                continue
            reach = linear_um * float((counts * hops[s]).sum()) / counts.sum()
            near = dist <= reach * (1 + 1e-12) + 1e-12
            if not near.any():
                return float("nan")            # no arrangement has that linear error
            hi[s] = min(hi[s], float(g[near].max()))
        t = spread_bound(lo, hi, counts, float(g.sum()), pairs)
        if t != t:
            return float("nan")
        best = max(best, t)
    return 0.5 * prob.quadratic_ppm_per_um2 * best * (1 - SAFETY)
