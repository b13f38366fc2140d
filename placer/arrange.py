"""From a spec to a finished arrangement: shapes, search, dummies, orientations, scores."""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from placer import baselines
from placer.errors import SpecError
from placer.pattern import DUMMY, Pattern
from placer.routing import (
    FingerNets,
    Routing,
    diffusion_breaks,
    estimate_routing,
    mos_finger_nets,
    orient_row,
)
from placer.score import Grade, grade_pattern
from placer.search import Keys, Problem, SearchOutcome, evaluate, search
from placer.spec import MAX_SLOTS, Spec

__all__ = ["METHODS", "Arrangement", "Candidate", "candidate_shapes", "build_pattern",
           "problem_for", "arrange", "baseline_pattern"]

METHODS = ("auto", "clustered", "interdigitated", "mirrored", "milp")
IntArray = NDArray[np.int64]


@dataclass(frozen=True)
class Candidate:
    """One arrangement on the trade-off between gradient error and routing effort."""

    pattern: Pattern
    keys: Keys
    systematic_ppm: float
    routing_um: float


@dataclass(frozen=True)
class Arrangement:
    """The chosen arrangement with everything the report says about it."""

    pattern: Pattern
    grade: Grade
    routing: Routing
    keys: Keys
    method: str
    core_shape: tuple[int, int]
    shape_reason: str
    linear_bound_um: float
    bound_proven: bool
    stopped: str
    elapsed_s: float
    iterations: int
    baselines: dict[str, Keys]
    candidates: tuple[Candidate, ...] = field(default=())

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready summary (the grade and routing in full)."""
        from dataclasses import asdict

        return {
            "method": self.method,
            "core_shape": list(self.core_shape),
            "shape_reason": self.shape_reason,
            "keys": asdict(self.keys),
            "linear_bound_um": (None if self.linear_bound_um != self.linear_bound_um
                                else self.linear_bound_um),
            "bound_proven": self.bound_proven,
            "stopped": self.stopped,
            "iterations": self.iterations,
            "baselines": {k: asdict(v) for k, v in self.baselines.items()},
            "routing": asdict(self.routing),
            "grade": self.grade.to_dict(),
            "candidates": [{"systematic_ppm": c.systematic_ppm, "routing_um": c.routing_um,
                            "keys": asdict(c.keys)} for c in self.candidates],
        }


def candidate_shapes(spec: Spec, limit: int = 4) -> list[tuple[int, int]]:
    """Core shapes to try: the spec's own, or those that fit the units with little slack.

    A shape's physical aspect (core width / height at the spec's pitch) is compared with
    the preferred ``aspect``; up to ``limit`` shapes with the least slack and the closest
    aspect are returned.

    Examples
    --------
    >>> from placer.spec import parse_spec
    >>> candidate_shapes(parse_spec("[devices]\\nA = 4\\nB = 4\\n[array]\\nrows = 2"))
    [(2, 4)]
    """
    n = spec.n_units
    rows, cols = spec.array.rows, spec.array.columns
    if rows is not None and cols is not None:
        return [(rows, cols)]
    if rows is not None:
        return [(rows, math.ceil(n / rows))]
    if cols is not None:
        return [(math.ceil(n / cols), cols)]
    px, py = spec.array.pitch_um
    slack = max(1, n // 8)
    options = []
    for r in range(1, n + 1):
        for c in {math.ceil(n / r), math.ceil(n / r) + 1}:
            spare = r * c - n
            if spare > slack or r * c > MAX_SLOTS:
                continue
            aspect = (c * px) / (r * py)
            options.append((abs(math.log(aspect / spec.array.aspect)), spare, r, c))
    options.sort()
    return [(r, c) for _, _, r, c in options[:limit]]


def _open_edge(rows: int, cols: int, dummies: str) -> tuple[bool, ...]:
    """Core slots with a side open to the outside once the dummies are added."""
    r, c = np.divmod(np.arange(rows * cols), cols)
    top_bottom = (r == 0) | (r == rows - 1)
    sides = (c == 0) | (c == cols - 1)
    if dummies == "ring":
        return tuple(False for _ in r)
    if dummies == "ends":
        return tuple(bool(x) for x in top_bottom)
    return tuple(bool(x) for x in top_bottom | sides)


def problem_for(spec: Spec, rows: int, cols: int) -> Problem:
    """The search problem of ``spec`` on a core of ``rows`` x ``cols`` slots."""
    if rows * cols < spec.n_units:
        raise SpecError(f"{spec.source}: {rows} x {cols} slots cannot hold {spec.n_units} units")
    return Problem(
        counts=spec.counts, rows=rows, cols=cols, pitch_um=spec.array.pitch_um,
        linear_ppm_per_um=spec.gradient.linear_ppm_per_um,
        quadratic_ppm_per_um2=spec.gradient.quadratic_ppm_per_um2,
        corr_sigma_ppm=spec.correlated.sigma_ppm, corr_length_um=spec.correlated.length_um,
        kernel=spec.correlated.kernel, cancel_order=spec.search.cancel_order,
        objective=spec.search.objective, tie_ppm=spec.search.tie_ppm,
        open_edge=_open_edge(rows, cols, spec.array.dummies),
        finger_nets=mos_finger_nets(spec) if spec.kind == "mos" else None,
    )


def build_pattern(spec: Spec, assign: IntArray, rows: int, cols: int) -> Pattern:
    """The full pattern: core assignment, dummies as the spec asks, MOS orientations."""
    core = assign.reshape(rows, cols)
    style = spec.array.dummies
    if style == "ends":
        core = np.pad(core, ((0, 0), (1, 1)), constant_values=DUMMY)
    elif style == "ring":
        core = np.pad(core, 1, constant_values=DUMMY)
    ids = core.astype(int)
    orient = np.zeros(ids.shape, dtype=np.int8)
    if spec.kind == "mos":
        nets = mos_finger_nets(spec)
        tally: dict[int, int] = {}
        for r in range(ids.shape[0]):
            marks, _ = orient_row(ids[r], tally, nets)
            orient[r] = marks
        orient = balance_orientations(ids, orient, nets)
    return Pattern(spec.devices, ids, orient)


def balance_orientations(ids: NDArray[np.int_], orient: NDArray[np.int8],
                         nets: FingerNets = None) -> NDArray[np.int8]:
    """Flip single fingers, or neighbouring pairs, to even out each device's > and < counts.

    A flip is kept only if it adds no diffusion break and lowers the total imbalance
    sum_d |#> - #<|, so the row stays as drawable as the DP left it.
    """
    orient = orient.copy()
    n_dev = int(ids.max()) + 1

    def imbalance(o: NDArray[np.int8]) -> int:
        tally = np.bincount(ids[ids >= 0], weights=o[ids >= 0], minlength=n_dev)
        return int(np.abs(tally).sum())

    def row_breaks(r: int) -> int:
        return diffusion_breaks(ids[r:r + 1], orient[r:r + 1], nets)

    improved = True
    while improved:
        improved = False
        best = imbalance(orient)
        for r in range(ids.shape[0]):
            base = row_breaks(r)
            for c in range(ids.shape[1]):
                for width in (1, 2):
                    cols = [x for x in range(c, min(c + width, ids.shape[1])) if ids[r, x] >= 0]
                    if len(cols) != width:
                        continue
                    orient[r, cols] *= -1
                    new = imbalance(orient)
                    if new < best and row_breaks(r) <= base:
                        best, improved = new, True
                        base = row_breaks(r)
                    else:
                        orient[r, cols] *= -1
    return orient


def baseline_pattern(spec: Spec, method: str, rows: int, cols: int,
                     time_limit_s: float = 60.0) -> IntArray:
    """Core assignment of one baseline method on the given core."""
    prob = problem_for(spec, rows, cols)
    if method == "milp":
        return baselines.milp(prob, time_limit_s)[0]
    return baselines.BASELINES[method](prob)


def _nets(spec: Spec) -> FingerNets:
    return mos_finger_nets(spec) if spec.kind == "mos" else None


def _systematic(prob: Problem, keys: Keys) -> float:
    return keys.linear_um * prob.linear_ppm_per_um + keys.quadratic_ppm


def arrange(spec: Spec, *, method: str = "auto", seed: int = 0, time_limit_s: float = 30.0,
            n_candidates: int = 0,
            progress: Callable[[str, Keys], None] | None = None) -> Arrangement:
    """Search the spec's shapes for the best arrangement and score it in full."""
    shapes = candidate_shapes(spec)
    if not shapes:
        raise SpecError(f"{spec.source}: no core shape holds {spec.n_units} units within "
                        f"{MAX_SLOTS} slots")
    share = time_limit_s / len(shapes)
    tried: list[tuple[tuple[float, ...], int, tuple[int, int], SearchOutcome, Problem]] = []
    textbook: dict[tuple[int, int], dict[str, tuple[IntArray, Keys]]] = {}
    interrupted = False
    for i, (rows, cols) in enumerate(shapes):
        prob = problem_for(spec, rows, cols)
        textbook[rows, cols] = {name: (a, evaluate(prob, a)) for name, fn in
                                baselines.BASELINES.items() for a in [fn(prob)]}
        if method == "auto":
            try:
                out = search(prob, seed=seed, time_limit_s=share, progress=progress)
            except KeyboardInterrupt:
                interrupted = True
                break
            # never return worse than a textbook arrangement on the same core
            for name, (assign, keys) in textbook[rows, cols].items():
                if keys.ranked(prob) < out.keys.ranked(prob):
                    out.assign, out.keys, out.method = assign, keys, name
                    out.linear_bound_um = min(out.linear_bound_um, keys.linear_um)
            if out.stopped == "interrupted":
                interrupted = True
        else:
            assign = baseline_pattern(spec, method, rows, cols, share)
            keys = evaluate(prob, assign)
            out = SearchOutcome(assign, keys, float("nan"), False, method)
        tried.append((out.keys.ranked(prob), i, (rows, cols), out, prob))
        if interrupted:
            break
    if not tried:
        raise KeyboardInterrupt
    tried.sort(key=lambda t: (t[0], t[1]))
    _, _, (rows, cols), out, prob = tried[0]
    if out.stopped == "converged" and interrupted:
        out.stopped = "interrupted"
    base_keys = {name: keys for name, (_, keys) in textbook[rows, cols].items()}
    reason = _shape_reason(spec, tried)
    pattern = build_pattern(spec, out.assign, rows, cols)
    grade = grade_pattern(pattern, spec)
    routing = estimate_routing(pattern, spec.array.pitch_um, spec.kind == "mos",
                               _nets(spec))
    cands = _candidates(spec, prob, rows, cols, out, n_candidates) if n_candidates else ()
    return Arrangement(
        pattern=pattern, grade=grade, routing=routing, keys=out.keys, method=out.method,
        core_shape=(rows, cols), shape_reason=reason, linear_bound_um=out.linear_bound_um,
        bound_proven=out.bound_proven, stopped=out.stopped,
        elapsed_s=sum(t[3].elapsed_s for t in tried), iterations=sum(t[3].iterations
                                                                     for t in tried),
        baselines=base_keys, candidates=cands,
    )


def _shape_reason(spec: Spec, tried: list) -> str:
    if len(tried) == 1:
        r, c = tried[0][2]
        given = spec.array.rows is not None or spec.array.columns is not None
        return f"core {r} x {c}" + (" as the spec gives" if given else "")
    best = tried[0]
    others = ", ".join(f"{r}x{c}: linear {o.keys.linear_um:.3g} um, quad "
                       f"{o.keys.quadratic_ppm:.3g} ppm" for _, _, (r, c), o, _ in tried[1:])
    r, c = best[2]
    o = best[3]
    return (f"tried {len(tried)} shapes near aspect {spec.array.aspect:g}; chose {r} x {c} "
            f"(linear {o.keys.linear_um:.3g} um, quad {o.keys.quadratic_ppm:.3g} ppm) over "
            f"{others}")


def _candidates(spec: Spec, prob: Problem, rows: int, cols: int, out: SearchOutcome,
                k: int) -> tuple[Candidate, ...]:
    """The K best arrangements on the gradient-error / routing front, best first."""
    pool: dict[bytes, IntArray] = {out.assign.tobytes(): out.assign}
    for assign, _ in out.archive:
        pool.setdefault(assign.tobytes(), assign)
    for fn in baselines.BASELINES.values():
        a = fn(prob)
        pool.setdefault(a.tobytes(), a)
    scored = []
    for assign in pool.values():
        keys = evaluate(prob, assign)
        pattern = build_pattern(spec, assign, rows, cols)
        route = estimate_routing(pattern, spec.array.pitch_um, spec.kind == "mos",
                                 _nets(spec))
        scored.append(Candidate(pattern, keys, _systematic(prob, keys), route.total_tree_um))
    front = [c for c in scored
             if not any((o.systematic_ppm <= c.systematic_ppm and o.routing_um <= c.routing_um
                         and (o.systematic_ppm, o.routing_um) != (c.systematic_ppm,
                                                                  c.routing_um))
                        for o in scored)]
    rest = sorted((c for c in scored if c not in front),
                  key=lambda c: (c.systematic_ppm, c.routing_um))
    ordered = sorted(front, key=lambda c: (c.systematic_ppm, c.routing_um)) + rest
    return tuple(ordered[:k])
