"""Textbook arrangements for comparison and teaching, and a MILP moment-matching baseline."""

from __future__ import annotations

import time
from typing import Any

import numpy as np
from numpy.typing import NDArray

from placer.search import Problem, core_coords, deal

__all__ = ["BASELINES", "clustered", "interdigitated", "mirrored", "milp"]

IntArray = NDArray[np.int64]


def _constrained(prob: Problem) -> bool:
    return bool(prob.pinned) or prob.symmetry != "none" or prob.device_rows is not None


def _fill(prob: Problem, sequence: list[int]) -> IntArray:
    """Units in reading order over the usable slots; the rest spare (-1) or unused (-2).

    With pins, row bands or a symmetry constraint the units are dealt orbit by orbit (a
    slot, or a mirrored pair) in reading order, each orbit taking the next unit in the
    sequence that may go there and fits it; pinned units stay where they are.
    """
    usable = prob.usable_mask()
    assign = np.where(usable, -1, -2).astype(np.int64)
    if not _constrained(prob):
        slots = np.nonzero(usable)[0]
        assign[slots[:len(sequence)]] = sequence
        return assign
    from placer.search import compile_problem
    from placer.search._compiled import slot_assignment
    from placer.search._construct import greedy_start

    comp = compile_problem(prob)
    left = [int(x) for x in comp.left]
    seq = [d for d in sequence]
    for _, d in prob.pinned:                # pinned units are not dealt again
        seq.remove(d)
    dev_of = np.full(comp.n_orb, prob.n_dev, dtype=np.int64)
    for o in np.argsort(comp.orb_slot[:, 0], kind="stable"):
        k = int(comp.orb_size[o])
        for d in seq:
            if left[d] >= k and (int(comp.orb_allow[o]) >> d) & 1:
                dev_of[o] = d
                left[d] -= k
                for _ in range(k):
                    seq.remove(d)             # its first occurrence is at i
                break
    if any(left[:prob.n_dev]):             # the order strands a unit: a fair deal instead
        dev_of = greedy_start(comp, np.random.default_rng(0))
    return slot_assignment(comp, dev_of)


def clustered(prob: Problem) -> IntArray:
    """Each device's units contiguous, in reading order: the arrangement to avoid."""
    return _fill(prob, [d for d, n in enumerate(prob.counts) for _ in range(n)])


def interdigitated(prob: Problem) -> IntArray:
    """Plain interdigitation in reading order: A B C A B C ..., each device in turn until
    its units run out (so the larger devices fill the tail).

    Examples
    --------
    >>> interdigitated(Problem((2, 3), 1, 6)).tolist()
    [0, 1, 0, 1, 1, -1]
    """
    left = list(prob.counts)
    seq = []
    while any(left):
        for d in range(len(left)):
            if left[d]:
                seq.append(d)
                left[d] -= 1
    return _fill(prob, seq)


def mirrored(prob: Problem) -> IntArray:
    """Interdigitated half mirrored through the core centre (A B B A ...).

    Half of each device's units are dealt over the first half of the usable slots in
    reading order; the point reflection of that half fills the second half; odd units
    left over take the middle slots.
    """
    usable = prob.usable_mask()
    slots = np.nonzero(usable)[0]
    n = len(slots)
    half = [c // 2 for c in prob.counts]
    seq = deal(half)
    if _constrained(prob):
        rest = [d for d, c in enumerate(prob.counts) for _ in range(c % 2)]
        return _fill(prob, seq + rest + seq[::-1])
    assign = np.where(usable, -1, -2).astype(np.int64)
    for i, d in enumerate(seq):
        assign[slots[i]] = d
        assign[slots[n - 1 - i]] = d
    rest = [d for d, c in enumerate(prob.counts) for _ in range(c % 2)]
    free = [slots[k] for k in np.argsort(np.abs(np.arange(n) - (n - 1) / 2), kind="stable")
            if assign[slots[k]] < 0]
    for s, d in zip(free, rest, strict=False):
        assign[s] = d
    return assign


def milp(prob: Problem, time_limit_s: float = 60.0) -> tuple[IntArray, dict[str, Any]]:
    """Moment matching as a mixed-integer linear program, solved with scipy's HiGHS.

    Binary x[s, d] puts device d (or the dummy, d = D) on slot s. For each device and each
    first- and second-order monomial m of the slot positions, slack variables measure
    |sum_s x[s, d] m_s - n_d * target_m| where the target is the core's mean monomial;
    the objective weights the first-order slacks 1000 times the second-order ones, each
    divided by n_d (a centroid, not a sum). Returns the assignment and solver facts.
    """
    from scipy.optimize import Bounds, LinearConstraint
    from scipy.optimize import milp as scipy_milp
    from scipy.sparse import coo_matrix, vstack

    t0 = time.monotonic()
    u_all, v_all = core_coords(prob.rows, prob.cols)
    usable = prob.usable_mask()
    sl = np.nonzero(usable)[0]                      # the usable slots, in reading order
    u, v = u_all[sl], v_all[sl]
    hx, hy = prob.pitch_um[0] / 2, prob.pitch_um[1] / 2
    mono = np.column_stack([u * hx, v * hy, (u * hx) ** 2, u * v * hx * hy, (v * hy) ** 2])
    target = mono.mean(axis=0)
    n_slots, n_dev = len(sl), prob.n_dev
    counts = [*prob.counts, n_slots - sum(prob.counts)]
    cols = n_dev + 1
    n_x = n_slots * cols
    n_e = n_dev * 5 * 2
    xi = np.arange(n_x).reshape(n_slots, cols)

    rows = []
    # one device (or dummy) per slot
    r = np.repeat(np.arange(n_slots), cols)
    rows.append((coo_matrix((np.ones(n_x), (r, xi.ravel())), shape=(n_slots, n_x + n_e)),
                 np.ones(n_slots), np.ones(n_slots)))
    # unit counts
    r = np.tile(np.arange(cols), n_slots)
    rows.append((coo_matrix((np.ones(n_x), (r, xi.ravel())), shape=(cols, n_x + n_e)),
                 np.array(counts, float), np.array(counts, float)))
    # moment deviations: sum_s x m - e+ + e- = n_d * target
    data: list[float] = []
    ri: list[int] = []
    ci: list[int] = []
    rhs = []
    k = 0
    for d in range(n_dev):
        for j in range(5):
            data.extend(mono[:, j])
            ri.extend([k] * n_slots)
            ci.extend(xi[:, d])
            e = n_x + 2 * (d * 5 + j)
            data.extend([-1.0, 1.0])
            ri.extend([k, k])
            ci.extend([e, e + 1])
            rhs.append(prob.counts[d] * target[j])
            k += 1
    rows.append((coo_matrix((data, (ri, ci)), shape=(k, n_x + n_e)), np.array(rhs),
                 np.array(rhs)))
    # symmetry: a slot and its mirror hold the same device
    if prob.symmetry != "none":
        pos = {int(s): i for i, s in enumerate(sl)}
        mr, mc = np.divmod(sl, prob.cols)
        if prob.symmetry in ("y", "point"):
            mr = prob.rows - 1 - mr
        if prob.symmetry in ("x", "point"):
            mc = prob.cols - 1 - mc
        twin = [pos[int(a * prob.cols + b)] for a, b in zip(mr, mc, strict=True)]
        eq_r, eq_c, eq_v = [], [], []
        k = 0
        for i, j in enumerate(twin):
            if j <= i:
                continue
            for d in range(cols):
                eq_r += [k, k]
                eq_c += [xi[i, d], xi[j, d]]
                eq_v += [1.0, -1.0]
                k += 1
        if k:
            rows.append((coo_matrix((eq_v, (eq_r, eq_c)), shape=(k, n_x + n_e)), np.zeros(k),
                         np.zeros(k)))
    a = vstack([m for m, _, _ in rows]).tocsr()
    lb = np.concatenate([lo for _, lo, _ in rows])
    ub = np.concatenate([hi for _, _, hi in rows])
    c = np.zeros(n_x + n_e)
    for d in range(n_dev):
        for j in range(5):
            e = n_x + 2 * (d * 5 + j)
            c[e:e + 2] = (1000.0 if j < 2 else 1.0) / prob.counts[d]
    integrality = np.concatenate([np.ones(n_x), np.zeros(n_e)])
    lo = np.zeros(n_x + n_e)
    hi = np.concatenate([np.ones(n_x), np.full(n_e, np.inf)])
    allowed = prob.allowed_mask()[sl]
    for d in range(cols):                          # row bands: a device only where allowed
        hi[xi[:, d]] = np.where((allowed >> d) & 1, 1.0, 0.0)
    index = {int(s): i for i, s in enumerate(sl)}
    for s, d in prob.pinned:                       # pinned units stay
        lo[xi[index[s], d]] = 1.0
    bounds = Bounds(lo, hi)
    res = scipy_milp(c, constraints=LinearConstraint(a, lb, ub), integrality=integrality,
                     bounds=bounds, options={"time_limit": max(time_limit_s, 0.1),
                                             "disp": False})
    gap = getattr(res, "mip_gap", None)
    facts = {"status": {0: "optimal", 1: "time limit", 2: "infeasible", 3: "unbounded",
                        4: "other"}.get(int(res.status), str(res.status)),
             "solver_s": round(time.monotonic() - t0, 3),
             "objective": float(res.fun) if res.x is not None else None,
             "gap": float(gap) if gap is not None and np.isfinite(gap) else None}
    if res.x is None:
        facts["fallback"] = "interdigitated (no solution in time)"
        return interdigitated(prob), facts
    x = res.x[:n_x].reshape(n_slots, cols)
    choice = np.argmax(x, axis=1)
    assign = np.where(usable, -1, -2).astype(np.int64)
    assign[sl] = np.where(choice == n_dev, -1, choice)
    if not np.array_equal(np.bincount(assign[assign >= 0], minlength=n_dev), prob.counts):
        facts["fallback"] = "interdigitated (rounded solution broke the counts)"
        return interdigitated(prob), facts
    return assign, facts


BASELINES = {"clustered": clustered, "interdigitated": interdigitated, "mirrored": mirrored}
