"""Sensitivity of a layout to gradients, unit by unit, and the fewest swaps that repair it."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from placer.io.pattern import Pattern, unit_positions
from placer.io.spec import GradientSpec, Spec
from placer.model.exact_moments import moment_differences
from placer.model.grade import Grade
from placer.search import Keys, Problem, keys_of, search

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
                g_ppm_per_um: float, gradient: GradientSpec | None = None
                ) -> tuple[str, list[UnitSensitivity]]:
    """Each unit's contribution to a pair's error under a field, largest first.

    By default the field is the linear gradient in the worst pair's worst direction:
    with (a, b) that pair and u the direction, the error is G u.(c_a - c_b) =
    sum_i G w_i u.(r_i - C), w_i = +1/n_a on a's units, -1/n_b on b's, C the centre of
    all device units. With ``gradient`` giving a hot spot (or a known direction) the
    field is that one, and the pair the one it hurts most. The terms add up to the
    pair's error exactly. Returns a description of the pair and field, and the units.
    """
    xy, dev = unit_positions(pattern, pitch_um)
    r, c = np.nonzero(pattern.ids >= 0)
    centre = xy.mean(axis=0)
    n = np.bincount(dev, minlength=len(pattern.devices))
    if gradient is not None and gradient.hot_spot is not None and grade.pairs:
        hs = gradient.hot_spot
        field = hs.ppm * np.exp(-np.hypot(xy[:, 0] - hs.x_um, xy[:, 1] - hs.y_um)
                                / hs.fall_off_um)
        worst = max(grade.pairs, key=lambda p: abs(p.hot_spot_ppm or 0.0))
        what = "hot spot"
    elif gradient is not None and gradient.direction_deg is not None and grade.pairs:
        worst = max(grade.pairs, key=lambda p: abs(p.known_direction_ppm or 0.0))
        angle = np.radians(gradient.direction_deg)
        field = g_ppm_per_um * ((xy - centre) @ np.array([np.cos(angle), np.sin(angle)]))
        what = f"gradient at {gradient.direction_deg:g} deg"
    else:
        w0 = grade.worst("linear_ppm")
        if w0 is None or w0.linear_ppm == 0:
            return ("no linear error", [])
        worst = w0
        angle = np.radians(worst.linear_worst_angle_deg)
        field = g_ppm_per_um * ((xy - centre) @ np.array([np.cos(angle), np.sin(angle)]))
        what = "worst linear gradient"
    a, b = pattern.devices.index(worst.a), pattern.devices.index(worst.b)
    w = np.where(dev == a, 1.0 / n[a], np.where(dev == b, -1.0 / n[b], 0.0))
    contrib = w * field
    if what != "hot spot":                  # a constant adds nothing: about the centre
        contrib = w * (field - field.mean())
    order = np.argsort(-contrib, kind="stable")
    out = [UnitSensitivity(int(r[i]), int(c[i]), float(xy[i, 0]), float(xy[i, 1]),
                           pattern.devices[dev[i]], float(contrib[i]))
           for i in order if w[i] != 0]
    return (f"{worst.a}/{worst.b} under the {what}", out)


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
    limited: str = ""            # what a large layout or the time limit cut short


#: Swaps are tried between at most this many units (the pairs grow as its square): a
#: larger layout offers the units farthest out along its worst pair's gradient.
REPAIR_UNITS = 800


def _problem(pattern: Pattern, spec: Spec, pitch_um: tuple[float, float]) -> Problem:
    """The pattern's slots as a search problem: only the slots that hold device units are
    usable, so the search reaches its best on the same slots as the layout."""
    from dataclasses import replace

    from placer.jobs.arrange import problem_for

    rows, cols = pattern.shape
    spec = replace(spec, counts=tuple(pattern.counts()),
                   array=replace(spec.array, pitch_um=pitch_um, dummies="none"))
    prob = problem_for(spec, rows, cols, usable=(pattern.ids >= 0).ravel())
    return replace(prob, open_edge=None, corr_sigma_ppm=0.0, finger_nets=None)


def _batch_worst(prob: Problem, sums: NDArray[np.int64], pairs: NDArray[np.int64],
                 total: NDArray[np.int64], n_units: int) -> tuple[NDArray[np.float64],
                                                                  NDArray[np.float64]]:
    """Worst-pair linear (um) and quadratic (ppm) of a batch of states, (K,) each.

    ``sums`` (K, D, 6) holds each device's sums of 1, u, v, uu, uv, vv in doubled
    offsets; the kernel is :func:`placer.model.exact_moments.moment_differences` (about the
    centre of the device units).
    """
    hx, hy = prob.pitch_um[0] / 2, prob.pitch_um[1] / 2
    # float64: a batch of thousands of states; the integer sums stay exact below 2^53
    d1, q, nn, _ = moment_differences(sums.astype(float), pairs,
                                      np.array([n_units, total[0], total[1]], dtype=float))
    lin = np.sqrt((hx * d1[..., 0]) ** 2 + (hy * d1[..., 1]) ** 2) / nn
    quad = (0.5 * prob.quadratic_ppm_per_um2
            * np.sqrt((hx * hx * q[..., 0]) ** 2 + 2 * (hx * hy * q[..., 1]) ** 2
                      + (hy * hy * q[..., 2]) ** 2) / (n_units * nn))
    return lin.max(-1), quad.max(-1)


def repair(pattern: Pattern, spec: Spec, pitch_um: tuple[float, float], max_swaps: int,
           *, seed: int = 0, time_limit_s: float = 30.0, beam: int = 24) -> RepairResult:
    """The fewest unit swaps (at most ``max_swaps``) that bring the linear error to the best
    the search reaches on the same slots, then the lowest quadratic error at that count.

    Only units of different devices are exchanged; dummies and empty slots stay. One swap
    is searched exhaustively; longer sequences by a beam of the ``beam`` best states per
    depth, each expanded by every swap (numpy-batched). The result is never worse than the
    layout given: with no improving swap it comes back unchanged. Past ``REPAIR_UNITS``
    units, swaps are tried among the units farthest out along the worst pair's worst
    gradient direction (they move the centroids most); the time limit covers the target's
    search and the swaps, and ``limited`` says what either cut short.

    Parameters
    ----------
    pattern : Pattern
        The layout to repair, devices in the spec's order.
    spec : Spec
        Its devices and model assumptions.
    pitch_um : tuple of float
        The layout's slot pitch (x, y).
    max_swaps : int
        The most unit exchanges to make.
    seed : int
        Seed of the search for the target linear error.
    time_limit_s : float
        Covers the target's search and the swaps.
    beam : int
        States kept per depth of the swap search.

    Returns
    -------
    RepairResult
        The repaired pattern, the swaps made (slot pairs) and the errors before and
        after.
    """
    import time

    t0 = time.monotonic()
    prob = _problem(pattern, spec, pitch_um)
    flat = pattern.ids.ravel().astype(np.int64)
    assign = np.where(flat >= 0, flat, -2)
    movable = np.nonzero(flat >= 0)[0]
    before = keys_of(prob, assign)
    found = search(prob, seed=seed, time_limit_s=0.5 * time_limit_s)
    if found.stopped == "interrupted":
        raise KeyboardInterrupt                # Ctrl-C in the search: no repair at all
    target = found.keys.linear_um
    target = min(target, before.linear_um)
    deadline = t0 + time_limit_s
    limited = []
    if len(movable) > REPAIR_UNITS:
        movable = _outermost(pattern, pitch_um, movable, REPAIR_UNITS)
        limited.append(f"swaps tried among the {REPAIR_UNITS} units farthest out along the "
                       "worst gradient direction (of "
                       f"{int(np.sum(flat >= 0))})")

    rows, cols = pattern.shape
    r_idx, c_idx = np.divmod(np.arange(rows * cols), cols)
    u = (2 * c_idx - (cols - 1)).astype(np.int64)
    v = ((rows - 1) - 2 * r_idx).astype(np.int64)
    mono = np.column_stack([np.ones_like(u), u, v, u * u, u * v, v * v]).astype(np.int64)
    n_dev = len(pattern.devices)
    pairs = prob.pair_array()
    every = np.nonzero(flat >= 0)[0]
    n_units = len(every)
    total = mono[every, 1:3].sum(axis=0)
    tol = 1e-9 * max(1.0, target)
    si, ti = np.triu_indices(len(movable), 1)
    s_all, t_all = movable[si], movable[ti]

    def expand(state: IntArray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        keep = state[s_all] != state[t_all]
        s, t = s_all[keep], t_all[keep]
        sums = np.zeros((n_dev, 6), dtype=np.int64)
        np.add.at(sums, state[every], mono[every])
        lin = np.empty(len(s))
        quad = np.empty(len(s))
        for k in range(0, len(s), 4096):
            ss, tt = s[k:k + 4096], t[k:k + 4096]
            a, b = state[ss], state[tt]
            d = mono[tt] - mono[ss]
            trial = np.broadcast_to(sums, (len(ss), *sums.shape)).copy()
            idx = np.arange(len(ss))
            trial[idx, a] += d
            trial[idx, b] -= d
            lin[k:k + 4096], quad[k:k + 4096] = _batch_worst(prob, trial, pairs, total,
                                                             n_units)
        return s, t, lin, quad

    states: list[tuple[float, float, IntArray, tuple[tuple[int, int], ...]]] = [
        (before.linear_um, before.quadratic_ppm, assign, ())]
    best = states[0]
    for depth in range(max_swaps):
        if best[0] <= target + tol or len(pairs) == 0:
            break
        if depth and time.monotonic() > deadline:
            limited.append(f"stopped at the time limit after {depth} swap(s)")
            break
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
    _, _, final, path = best
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
    after = keys_of(prob, final)
    return RepairResult(tuple(swaps), repaired, before, after, target,
                        after.linear_um <= target + tol, "; ".join(limited))


def _outermost(pattern: Pattern, pitch_um: tuple[float, float], movable: IntArray,
               k: int) -> IntArray:
    """The ``k`` of ``movable`` slots farthest from the centre along the worst pair's
    centroid difference (half from each end), in slot order."""
    xy, dev = unit_positions(pattern, pitch_um)
    n = np.bincount(dev, minlength=len(pattern.devices))
    cen = np.array([xy[dev == d].mean(axis=0) if n[d] else (0.0, 0.0)
                    for d in range(len(pattern.devices))])
    gap = max(((a, b) for a in range(len(cen)) for b in range(a + 1, len(cen))),
              key=lambda p: float(np.hypot(*(cen[p[0]] - cen[p[1]]))), default=(0, 0))
    u = cen[gap[0]] - cen[gap[1]]
    u = u / np.hypot(*u) if np.hypot(*u) > 0 else np.array([1.0, 0.0])
    along = (xy - xy.mean(axis=0)) @ u            # unit_positions: the movable slots, in order
    order = np.argsort(along, kind="stable")
    pick = np.concatenate([order[:k // 2], order[len(order) - (k - k // 2):]])
    return np.sort(movable[pick])
