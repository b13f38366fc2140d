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
#: Past REPAIR_UNITS, the swaps scored per state: sources x every unit (about this many).
SWAP_PAIRS = 200_000


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
    units, the swaps tried are those of the units adding most to the worst pair's error
    (per-unit sensitivity over the whole array) with any unit; the time limit covers the
    target's search and the swaps, and ``limited`` says what either cut short.

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
    sources = movable
    if len(movable) > REPAIR_UNITS:
        # a large layout: every swap of a unit that adds most to the worst pair's error
        # (per-unit sensitivity over the whole array) with any unit, not all pairs
        k = int(np.clip(SWAP_PAIRS // len(movable), 8, REPAIR_UNITS))
        sources = _adding_most(pattern, spec, pitch_um, movable, k)
        limited.append(f"swaps tried from the {len(sources)} units adding most to the worst "
                       f"pair's error, each with any of the {len(movable)} units")

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
    if len(sources) == len(movable):
        si, ti = np.triu_indices(len(movable), 1)
        s_all, t_all = movable[si], movable[ti]
    else:
        s_all = np.repeat(sources, len(movable))
        t_all = np.tile(movable, len(sources))
        keep = ~np.isin(t_all, sources) | (s_all < t_all)      # each pair once
        s_all, t_all = s_all[keep], t_all[keep]
    cut = [False]

    def expand(state: IntArray) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        keep = state[s_all] != state[t_all]
        s, t = s_all[keep], t_all[keep]
        sums = np.zeros((n_dev, 6), dtype=np.int64)
        np.add.at(sums, state[every], mono[every])
        lin = np.empty(len(s))
        quad = np.empty(len(s))
        for k in range(0, len(s), 4096):
            if k and time.monotonic() > deadline:
                # the limit covers the swaps too: what was scored stands, the rest is left
                cut[0] = True
                s, t, lin, quad = s[:k], t[:k], lin[:k], quad[:k]
                break
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
    if cut[0]:
        limited.append("the time limit cut a round of swaps short")
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


def _adding_most(pattern: Pattern, spec: Spec, pitch_um: tuple[float, float],
                 movable: IntArray, k: int) -> IntArray:
    """The ``k`` movable slots whose units add most to the worst pair's linear error
    (:func:`sensitivity`, over the whole array), in slot order; when fewer units add to
    it, the other slots fill up to ``k`` in slot order."""
    from dataclasses import replace as _replace

    from placer.model.grade import grade_pattern

    spec_here = _replace(spec, array=_replace(spec.array, pitch_um=pitch_um))
    _, sens = sensitivity(pattern, pitch_um, grade_pattern(pattern, spec_here),
                          spec.gradient.linear_ppm_per_um)
    cols = pattern.shape[1]
    chosen = [u.row * cols + u.col for u in sens if u.contribution_ppm > 0][:k]
    if len(chosen) < k:
        taken = set(chosen)
        rest = [int(s) for s in movable if int(s) not in taken]
        chosen += rest[:k - len(chosen)]
    return np.sort(np.array(chosen, dtype=np.int64))
