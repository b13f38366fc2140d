"""A starter exercise for the lesson page: goals set from placer's own best arrangement.

``placer lesson SPEC --write-exercise`` writes one beside the page; a trainer then edits
its text, goals, hints and swaps allowed (the file format: :mod:`placer.io.exercise`).
"""

from __future__ import annotations

import math
from collections import defaultdict

import numpy as np
from numpy.typing import NDArray

from placer.io.exercise import MAX_SWAPS, Exercise, Goal
from placer.io.pattern import Pattern
from placer.io.spec import Spec

__all__ = ["swaps_between", "starter_exercise", "round_up"]

#: A starter goal lies this share of the way from placer's best figure back to the
#: start's: reachable without finding placer's exact arrangement.
GOAL_SHARE = 0.1


def swaps_between(start: NDArray[np.int_], target: NDArray[np.int_]) -> int:
    """Swaps of two slots that turn the ids ``start`` into ``target`` (the same multiset):
    first every pair of slots that each hold what the other needs (one swap puts both
    right), then one swap per slot still wrong. An upper bound on the fewest.

    Examples
    --------
    >>> swaps_between(np.array([0, 0, 1, 1]), np.array([0, 1, 1, 0]))
    1
    >>> swaps_between(np.array([0, 1, 2]), np.array([1, 2, 0]))
    2
    """
    cur = [int(v) for v in np.ravel(start)]
    want = [int(v) for v in np.ravel(target)]
    if sorted(cur) != sorted(want):
        raise ValueError("the two boards hold different units")
    wrong: dict[tuple[int, int], list[int]] = defaultdict(list)
    for s, (a, b) in enumerate(zip(cur, want, strict=True)):
        if a != b:
            wrong[a, b].append(s)
    swaps = 0
    for (a, b), slots in wrong.items():       # two slots that put each other right
        if a < b:
            back = wrong.get((b, a), [])
            k = min(len(slots), len(back))
            for s, t in zip(slots[:k], back[:k], strict=True):
                cur[s], cur[t] = cur[t], cur[s]
            swaps += k
    holders: dict[int, list[int]] = defaultdict(list)    # wrong slots by what they hold
    for s, (a, b) in enumerate(zip(cur, want, strict=True)):
        if a != b:
            holders[a].append(s)
    for s in range(len(cur)):
        if cur[s] == want[s]:
            continue
        need = want[s]
        while True:                          # a slot holding what s needs, not yet right
            t = holders[need].pop()
            if cur[t] == need and cur[t] != want[t]:
                break
        cur[s], cur[t] = cur[t], cur[s]
        holders[cur[t]].append(t)
        swaps += 1
    return swaps


def round_up(value: float) -> float:
    """``value`` rounded up to two significant digits (a goal people read).

    Examples
    --------
    >>> round_up(0.01234), round_up(57.01), round_up(0.0)
    (0.013, 58.0, 0.0)
    """
    if value <= 0:
        return 0.0
    step = 10.0 ** (math.floor(math.log10(value)) - 1)
    return float(f"{math.ceil(value / step - 1e-9) * step:.3g}")


def starter_exercise(spec: Spec, start: str, start_pattern: Pattern,
                     best_pattern: Pattern) -> Exercise:
    """An exercise that starts on ``start`` and asks for the worst linear error (and,
    with a curvature in the spec, the quadratic error) within :data:`GOAL_SHARE` of the
    way from placer's best back to the start, in as many swaps as turn the start into
    placer's arrangement."""
    from placer.model.grade import Grade, grade_pattern

    g0, g1 = grade_pattern(start_pattern, spec), grade_pattern(best_pattern, spec)

    def worst(g: Grade, key: str) -> float:
        return max((abs(getattr(p, key)) for p in g.pairs), default=0.0)

    goals = []
    keys = ["linear_ppm"] + (["quadratic_ppm"] if spec.gradient.quadratic_ppm_per_um2 > 0
                             else [])
    said = []
    for key in keys:
        a, b = worst(g0, key), worst(g1, key)
        goals.append(Goal(key, round_up(b + GOAL_SHARE * max(a - b, 0.0))))
        said.append(f"{key.split('_')[0]} {b:.3g} ppm")
    n = max(1, min(MAX_SWAPS, swaps_between(start_pattern.ids, best_pattern.ids)))
    pair = g0.worst("linear_ppm")
    hints = (
        (f"At the start the worst pair is {pair.a}/{pair.b}: bring those two devices' "
         "centroids (the circles on the board) together on the cross, the centre of all "
         "units." if pair is not None else "Bring every centroid onto the cross."),
        "Swapping two units that mirror each other through the centre moves no centroid; "
        "a swap that moves one device's unit towards the centre and another's away does.",
        "With the centroids together, look at the quadratic error: spread each device "
        "between the middle and the rim in the same proportion.",
        f"placer's own arrangement reaches {' and '.join(said)}, {n} swaps from the start; "
        "Reveal shows it.",
    )
    units = ", ".join(f"{d} = {c}" for d, c in zip(spec.devices, spec.counts, strict=True))
    return Exercise(
        block=spec.name, title=f"{spec.name}: match {units}",
        task=f"Start from the {start} arrangement and reach every goal in at most {n} swaps.",
        start=start, max_swaps=n, goals=tuple(goals), hints=hints)
