"""Sensitivity of a layout to gradients, unit by unit, and the fewest swaps that repair it."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from placer.pattern import Pattern, unit_positions
from placer.score import Grade
from placer.search import Keys, Problem, evaluate, search
from placer.spec import Spec

__all__ = ["UnitSensitivity", "Swap", "RepairResult", "sensitivity", "repair"]

IntArray = NDArray[np.int64]


@dataclass(frozen=True)
class UnitSensitivity:
    """One unit's share of the worst pair's error in the worst gradient direction."""

    row: int
    col: int
    x_um: float
    y_um: float
    device: str
    contribution_ppm: float


def sensitivity(pattern: Pattern, pitch_um: tuple[float, float], grade: Grade,
                g_ppm_per_um: float) -> tuple[str, list[UnitSensitivity]]:
    """Each unit's contribution to the worst pair's linear error, largest first.

    With the worst pair (a, b) and u the worst gradient direction, the error is
    G u.(c_a - c_b) = sum_i G w_i u.(r_i - C), w_i = +1/n_a on a's units, -1/n_b on b's,
    C the centre of all device units; the terms add up to the pair's error exactly.
    """
    worst = grade.worst("linear_ppm")
    if worst is None or worst.linear_ppm == 0:
        return ("no linear error", [])
    xy, dev = unit_positions(pattern, pitch_um)
    r, c = np.nonzero(pattern.ids >= 0)
    centre = xy.mean(axis=0)
    a, b = pattern.devices.index(worst.a), pattern.devices.index(worst.b)
    angle = np.radians(worst.linear_worst_angle_deg)
    u = np.array([np.cos(angle), np.sin(angle)])
    n = np.bincount(dev, minlength=len(pattern.devices))
    w = np.where(dev == a, 1.0 / n[a], np.where(dev == b, -1.0 / n[b], 0.0))
    contrib = g_ppm_per_um * w * ((xy - centre) @ u)
    order = np.argsort(-contrib, kind="stable")
    out = [UnitSensitivity(int(r[i]), int(c[i]), float(xy[i, 0]), float(xy[i, 1]),
                           pattern.devices[dev[i]], float(contrib[i]))
           for i in order if w[i] != 0]
    return (f"{worst.a}/{worst.b}", out)


@dataclass(frozen=True)
class Swap:
    """Exchange the units of two slots."""

    first: tuple[int, int]
    second: tuple[int, int]
    first_device: str
    second_device: str


@dataclass(frozen=True)
class RepairResult:
    """Swaps found, the repaired pattern and the keys before and after."""

    swaps: tuple[Swap, ...]
    pattern: Pattern
    before: Keys
    after: Keys
    target_linear_um: float
    reached_target: bool


def _problem(pattern: Pattern, spec: Spec, pitch_um: tuple[float, float]) -> Problem:
    rows, cols = pattern.shape
    return Problem(counts=tuple(pattern.counts()), rows=rows, cols=cols, pitch_um=pitch_um,
                   linear_ppm_per_um=spec.gradient.linear_ppm_per_um,
                   quadratic_ppm_per_um2=spec.gradient.quadratic_ppm_per_um2,
                   corr_sigma_ppm=spec.correlated.sigma_ppm,
                   corr_length_um=spec.correlated.length_um, kernel=spec.correlated.kernel,
                   tie_ppm=spec.search.tie_ppm)


def repair(pattern: Pattern, spec: Spec, pitch_um: tuple[float, float], max_swaps: int,
           *, seed: int = 0, time_limit_s: float = 30.0, beam: int = 24) -> RepairResult:
    """The fewest unit swaps (at most ``max_swaps``) that bring the linear error to the best
    the search reaches on the same slots, then the lowest quadratic error at that count.

    Only units of different devices are exchanged; dummies and empty slots stay. One swap
    is searched exhaustively; longer sequences by a beam of the ``beam`` best states per
    depth, each expanded by every swap (numpy-batched). The result is never worse than the
    layout given: with no improving swap it comes back unchanged.
    """
    prob = _problem(pattern, spec, pitch_um)
    flat = pattern.ids.ravel().astype(np.int64)
    assign = np.where(flat >= 0, flat, -1)
    movable = np.nonzero(flat >= 0)[0]
    before = evaluate(prob, assign)
    target = search(prob, seed=seed, time_limit_s=time_limit_s).keys.linear_um
    target = min(target, before.linear_um)

    from placer.search import _Geometry

    geo = _Geometry(prob)
    tol = 1e-9 * max(1.0, target)
    # all unordered pairs of movable slots
    si, ti = np.triu_indices(len(movable), 1)
    s_all, t_all = movable[si], movable[ti]

    def expand(state: IntArray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        keep = state[s_all] != state[t_all]
        s, t = s_all[keep], t_all[keep]
        sums = geo.sums(state)
        lin = np.empty(len(s))
        quad = np.empty(len(s))
        for k in range(0, len(s), 4096):
            ss, tt = s[k:k + 4096], t[k:k + 4096]
            a, b = state[ss], state[tt]
            d = geo.mono[tt] - geo.mono[ss]
            trial = np.broadcast_to(sums, (len(ss), *sums.shape)).copy()
            idx = np.arange(len(ss))
            trial[idx, a] += d
            trial[idx, b] -= d
            lw, qw = geo.worst_batch(trial)
            lin[k:k + 4096], quad[k:k + 4096] = lw, qw
        return s, t, lin, quad

    states: list[tuple[float, float, IntArray, tuple[tuple[int, int], ...]]] = [
        (before.linear_um, before.quadratic_ppm, assign, ())]
    best = states[0]
    for _depth in range(max_swaps):
        pool: dict[bytes, tuple[float, float, IntArray, tuple[tuple[int, int], ...]]] = {}
        for _lin0, _quad0, state, path in states:
            s, t, lin, quad = expand(state)
            order = np.lexsort((quad, np.round(lin, 9)))[:beam]
            for i in order:
                new = state.copy()
                new[s[i]], new[t[i]] = state[t[i]], state[s[i]]
                key = new.tobytes()
                if key not in pool:
                    pool[key] = (float(lin[i]), float(quad[i]), new,
                                 (*path, (int(s[i]), int(t[i]))))
        if not pool:
            break
        states = sorted(pool.values(), key=lambda x: (round(x[0], 9), x[1]))[:beam]
        top = states[0]
        if (round(top[0], 9), top[1]) < (round(best[0], 9), best[1]):
            best = top
        if best[0] <= target + tol:
            break
    _, _, final, path = best
    cols = pattern.shape[1]
    flat_ids = pattern.ids.copy().ravel()
    orient = pattern.orient.copy().ravel()
    swaps = []
    for p, q in path:   # replayed in order, so each swap names what it moves
        swaps.append(Swap(divmod(p, cols), divmod(q, cols), pattern.devices[flat_ids[p]],
                          pattern.devices[flat_ids[q]]))
        flat_ids[p], flat_ids[q] = flat_ids[q], flat_ids[p]
        orient[p], orient[q] = orient[q], orient[p]
    repaired = Pattern(pattern.devices, flat_ids.reshape(pattern.shape),
                       orient.reshape(pattern.shape))
    after = evaluate(prob, final)
    return RepairResult(tuple(swaps), repaired, before, after, target,
                        after.linear_um <= target + tol)
