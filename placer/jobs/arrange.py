"""From a spec to a finished arrangement: shapes, search, dummies, orientations, scores."""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from placer.errors import InfeasibleError, SpecError
from placer.io.pattern import Pattern
from placer.io.spec import Spec
from placer.jobs import METHODS, workload
from placer.kinds import KINDS
from placer.limits import MAX_SIDE, MAX_SLOT_DEVICES, MAX_SLOTS
from placer.model.grade import Grade, grade_pattern
from placer.model.routing_estimate import (
    FingerNets,
    Routing,
    dummy_net_id,
    estimate_routing,
    finger_terminals,
    mos_finger_nets,
    orient_row,
    pair_row,
    unpaired_in_row,
)
from placer.search import (
    Keys,
    Problem,
    SearchResult,
    baselines,
    compare,
    keys_of,
    n_restarts,
    quadratic_bound,
    rank_key,
    search,
)

__all__ = ["METHODS", "Arrangement", "Candidate", "candidate_shapes", "build_pattern",
           "problem_for", "arrange", "baseline_pattern", "HOLE_MARGIN", "DEFAULT_TIME_LIMIT_S"]

IntArray = NDArray[np.int64]
#: A core with spare (empty) slots beats one without them only when its worst-pair
#: linear + quadratic error is below this fraction of the full core's.
HOLE_MARGIN = 0.9
#: The search's time limit when none is given (the command line's default too).
DEFAULT_TIME_LIMIT_S = 60.0


@dataclass(frozen=True)
class Candidate:
    """One arrangement on the trade-off between gradient error and routing effort."""

    pattern: Pattern
    keys: Keys
    systematic_ppm: float
    routing_um: float
    source: str = ""
    #: with the wiring weighed (``arrange(weigh=...)``): the routed block's worst-pair
    #: wiring error (ppm) and its area (um2)
    wiring_ppm: float | None = None
    block_um2: float | None = None


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
    proven: str
    stopped: str
    elapsed_s: float
    moves: int
    nodes: int
    baselines: dict[str, Keys]
    candidates: tuple[Candidate, ...] = field(default=())
    solver: dict[str, Any] | None = None
    front_reference: str = ""
    #: the spec at the pitch the arrangement was scored at (and is drawn at)
    spec: Spec | None = None
    #: the time limit the search was given (seconds; 0 when not recorded)
    time_limit_s: float = 0.0
    #: no arrangement whose linear error is at most this one's has a smaller worst-pair
    #: quadratic error (ppm; nan where no bound is claimed)
    quadratic_bound_ppm: float = float("nan")

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
            "quadratic_bound_ppm": (None if self.quadratic_bound_ppm != self.quadratic_bound_ppm
                                    else self.quadratic_bound_ppm),
            "proven_optimal": self.proven,
            "stopped": self.stopped,
            "moves": self.moves,
            "nodes": self.nodes,
            "solver": self.solver,
            "baselines": {k: asdict(v) for k, v in self.baselines.items()},
            "routing": asdict(self.routing),
            "grade": self.grade.to_dict(),
            "candidates": [{"systematic_ppm": c.systematic_ppm, "routing_um": c.routing_um,
                            "wiring_ppm": c.wiring_ppm, "block_um2": c.block_um2,
                            "keys": asdict(c.keys), "source": c.source}
                           for c in self.candidates],
            "candidates_against": self.front_reference or None,
            "pitch_um": list(self.spec.array.pitch_um) if self.spec is not None else None,
        }


def candidate_shapes(spec: Spec, limit: int = 4) -> list[tuple[int, int]]:
    """Core shapes to try: the spec's own, or those that fit the units with little slack.

    A shape's physical aspect (core width / height at the spec's pitch) is compared with
    the preferred ``aspect``; up to ``limit`` shapes with the least slack and the closest
    aspect are returned.

    Examples
    --------
    >>> from placer.jobs.load import parse_spec
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
    slack = 0 if not spec.array.holes else max(1, n // 8)
    options = []
    for r in range(1, min(n, MAX_SIDE) + 1):
        for c in {math.ceil(n / r), math.ceil(n / r) + 1}:
            spare = r * c - n
            if (spare > slack or r * c > MAX_SLOTS or c > MAX_SIDE
                    or r * c * len(spec.devices) > MAX_SLOT_DEVICES):
                continue
            aspect = (c * px) / (r * py)
            options.append((abs(math.log(aspect / spec.array.aspect)), spare, r, c))
    options.sort()
    chosen = [(r, c) for _, _, r, c in options[:limit]]
    full = [(r, c) for _, spare, r, c in options if spare == 0]
    if full and not any(r * c == n for r, c in chosen):
        chosen[-1] = full[0]           # a full rectangle is always among the tries
    return chosen


def problem_for(spec: Spec, rows: int, cols: int,
                usable: NDArray[np.bool_] | None = None) -> Problem:
    """The search problem of ``spec`` on a core of ``rows`` x ``cols`` slots: the mask's
    usable slots (or ``usable``), pins, groups' row bands, symmetry and ranked pairs.
    ``arrange`` and ``repair`` both build their problem here."""
    from placer.model import grid
    use = usable if usable is not None else grid.usable(spec, rows, cols)
    n_use = rows * cols if use is None else int(np.sum(use))
    if n_use < spec.n_units:
        raise SpecError(f"{spec.source}: {rows} x {cols} slots ({n_use} usable) cannot hold "
                        f"{spec.n_units} units")
    return Problem(
        counts=spec.counts, rows=rows, cols=cols, pitch_um=spec.array.pitch_um,
        linear_ppm_per_um=spec.gradient.linear_ppm_per_um,
        quadratic_ppm_per_um2=spec.gradient.quadratic_ppm_per_um2,
        corr_sigma_ppm=spec.correlated.sigma_ppm, corr_length_um=spec.correlated.length_um,
        kernel=spec.correlated.kernel, cancel_order=spec.search.cancel_order,
        objective=spec.search.objective, relative_tie=spec.search.relative_tie,
        open_edge=grid.open_edge(spec, rows, cols, use),
        finger_nets=mos_finger_nets(spec) if KINDS[spec.kind].fingers else None,
        pair_dummy=_pair_dummy(spec),
        usable=None if use is None else tuple(bool(x) for x in use),
        pinned=grid.pinned_slots(spec, cols) if usable is None else (),
        pairs=tuple(spec.ranked_pairs()),
        symmetry=spec.placement.symmetry if usable is None else "none",
        device_rows=grid.device_rows(spec) if usable is None else None,
    )


def build_pattern(spec: Spec, assign: IntArray, rows: int, cols: int) -> Pattern:
    """The full pattern: core assignment (-1 a spare slot, -2 an unused one), dummies as
    the spec asks around the footprint, MOS orientations."""
    from placer.model import grid
    ids = grid.full_pattern_ids(spec, np.asarray(assign), rows, cols)
    orient = np.zeros(ids.shape, dtype=np.int8)
    if KINDS[spec.kind].fingers:
        nets = mos_finger_nets(spec)
        tally: dict[int, int] = {}
        pairs = spec.unit.diffusion == "pairs"
        dummy = dummy_net_id(spec)
        for r in range(ids.shape[0]):
            if pairs:
                marks, _ = pair_row(ids[r], tally, nets, dummy)
            else:
                marks, _ = orient_row(ids[r], tally, nets)
            orient[r] = marks
        orient = balance_orientations(ids, orient, nets, dummy if pairs else None)
    return Pattern(spec.devices, ids, orient)


def balance_orientations(ids: NDArray[np.int_], orient: NDArray[np.int8],
                         nets: FingerNets = None, pairs_dummy: int | None = None
                         ) -> NDArray[np.int8]:
    """Flip single fingers, or neighbouring pairs, to even out each device's > and < counts.

    A flip is kept only if it adds no diffusion break (with ``pairs_dummy``, the dummy
    net of a spec whose diffusion goes in pairs: if it leaves as many fingers paired) and
    lowers the total imbalance sum_d |#> - #<|, so the row stays as drawable as the DP
    left it.
    """
    if not np.any(ids >= 0):
        return orient.copy()
    n_dev = int(ids.max()) + 1
    tally = [int(t) for t in np.bincount(ids[ids >= 0], weights=orient[ids >= 0],
                                         minlength=n_dev)]
    grid = ids.tolist()
    marks = orient.astype(int).tolist()
    n_cols = ids.shape[1]

    def edge_breaks(row: list[int], mk: list[int], lo: int, hi: int) -> int:
        """Breaks between neighbours (c-1, c) for c in lo..hi of one row (with
        ``pairs_dummy``: fingers left unpaired in the whole row)."""
        if pairs_dummy is not None:
            return unpaired_in_row(row, mk, nets, pairs_dummy)
        out = 0
        for c in range(max(lo, 1), min(hi, n_cols - 1) + 1):
            a, b = row[c - 1], row[c]
            if a >= 0 and b >= 0 and (finger_terminals(a, mk[c - 1], nets)[1]
                                      != finger_terminals(b, mk[c], nets)[0]):
                out += 1
        return out

    # a flip changes only its devices' tallies and the breaks next to it: O(1) a try
    improved = True
    while improved:
        improved = False
        for row, mk in zip(grid, marks, strict=True):
            for c in range(n_cols):
                for width in (1, 2):
                    if c + width > n_cols or any(row[x] < 0 for x in range(c, c + width)):
                        continue
                    change: dict[int, int] = {}
                    for x in range(c, c + width):
                        change[row[x]] = change.get(row[x], 0) - 2 * mk[x]
                    if (sum(abs(tally[d] + dt) for d, dt in change.items())
                            >= sum(abs(tally[d]) for d in change)):
                        continue
                    before = edge_breaks(row, mk, c, c + width)
                    for x in range(c, c + width):
                        mk[x] = -mk[x]
                    if edge_breaks(row, mk, c, c + width) <= before:
                        for d, dt in change.items():
                            tally[d] += dt
                        improved = True
                    else:
                        for x in range(c, c + width):
                            mk[x] = -mk[x]
    return np.array(marks, dtype=np.int8).reshape(orient.shape)


def baseline_patterns(spec: Spec, rows: int, cols: int) -> list[tuple[str, Pattern]]:
    """The textbook arrangements (clustered, interdigitated, mirrored) on one core, as
    full patterns: what ``compare`` and the lesson page set beside the search's result."""
    return [(m, build_pattern(spec, baseline_pattern(spec, m, rows, cols), rows, cols))
            for m in ("clustered", "interdigitated", "mirrored")]


def baseline_pattern(spec: Spec, method: str, rows: int, cols: int,
                     time_limit_s: float = DEFAULT_TIME_LIMIT_S) -> IntArray:
    """Core assignment of one baseline method on the given core."""
    prob = problem_for(spec, rows, cols)
    if method == "milp":
        return baselines.milp(prob, time_limit_s)[0]
    return baselines.BASELINES[method](prob)


def _nets(spec: Spec) -> FingerNets:
    return mos_finger_nets(spec) if KINDS[spec.kind].fingers else None


def _pair_dummy(spec: Spec) -> int | None:
    """The dummy net's number when the spec's fingers go two to a diffusion island."""
    return (dummy_net_id(spec) if KINDS[spec.kind].fingers and spec.unit.diffusion == "pairs"
            else None)


def _systematic(prob: Problem, keys: Keys) -> float:
    return keys.linear_um * prob.linear_ppm_per_um + keys.quadratic_ppm


@dataclass
class _Tried:
    """One core shape: its problem, the result there and the baselines on it."""

    shape: tuple[int, int]
    prob: Problem
    result: SearchResult | None
    assign: IntArray
    keys: Keys
    method: str
    baselines: dict[str, tuple[IntArray, Keys]]
    solver: dict[str, Any] | None = None
    spec: Spec | None = None


#: Maps an arrangement and a spec to the spec at the pitch that arrangement's routing needs.
PitchFit = Callable[[Pattern, Spec], Spec]
#: Maps an arrangement and a spec to its routed block's worst-pair wiring error (ppm) and
#: area (um2) (:meth:`placer.layout.block.Tools.weigh`).
Weigh = Callable[[Pattern, Spec], tuple[float, float]]
#: With [search] wiring, this many of the kept arrangements (least gradient error first)
#: are routed and weighed.
WIRING_POOL = 12


def default_fit(pattern: Pattern, spec: Spec) -> Spec:
    """The pitch placer's generic cells and routing need for ``pattern``."""
    from placer.layout.pitch import fitted

    return fitted(pattern, spec)


def _shape_spec(spec: Spec, rows: int, cols: int, fit: PitchFit | None) -> Spec:
    """The spec at the pitch a shape's routing is expected to need: fitted to the routing
    of a textbook arrangement of the shape (the tracks a channel needs depend little on
    the arrangement), unless the spec gives its pitch."""
    if fit is None or spec.array.pitch_given:
        return spec
    prob = problem_for(spec, rows, cols)
    probe = build_pattern(spec, baselines.BASELINES["mirrored"](prob), rows, cols)
    return fit(probe, spec)


def _run_shape(spec: Spec, rows: int, cols: int, method: str, seed: int, deadline: float,
               share_s: float, progress: Callable[[str, Keys], None] | None,
               fit: PitchFit | None = None) -> _Tried:
    import time
    from dataclasses import replace

    spec = _shape_spec(spec, rows, cols, fit)
    prob = problem_for(spec, rows, cols)
    base = {name: (a, keys_of(prob, a)) for name, fn in baselines.BASELINES.items()
            for a in [fn(prob)]}
    time_limit_s = max(deadline - time.monotonic(), 1e-3)
    if method == "milp":
        assign, facts = baselines.milp(prob, time_limit_s)
        return _Tried((rows, cols), prob, None, assign, keys_of(prob, assign),
                      "MILP (scipy HiGHS, moment matching)", base, facts, spec)
    if method != "auto":
        assign, keys = base[method]
        return _Tried((rows, cols), prob, None, assign, keys, method, base, spec=spec)
    # the deadline is a clock reading; the restart count comes from the shape's fixed share
    out = search(prob, seed=seed, time_limit_s=time_limit_s, progress=progress,
                 restarts=n_restarts(share_s))
    assign, keys, label = out.assign, out.keys, out.method
    for name, (a, k) in base.items():            # never worse than a textbook arrangement
        if compare(prob, k, keys) < 0:
            assign, keys, label = a, k, f"{name} (better than the search here)"
    return replace(_Tried((rows, cols), prob, out, assign, keys, label, base), spec=spec)


def _holes(t: _Tried) -> bool:
    return t.prob.n_spare() > 0


def _pick(tried: list[_Tried], spec: Spec) -> _Tried:
    """The best shape; one with spare slots inside must beat the best full one by
    HOLE_MARGIN and by ``[search] hole_gain`` of the worst pair's random sigma: a full,
    regular core is the default, and holes must buy a gain that matters beside the random
    error (not a fraction of a ppm beside thousands)."""
    order = sorted(range(len(tried)), key=lambda i: (rank_key(tried[i].prob)(tried[i].keys), i))
    best = tried[order[0]]
    full = [tried[i] for i in order if not _holes(tried[i])]
    if _holes(best) and full:
        f = full[0]
        gain = _systematic(f.prob, f.keys) - _systematic(best.prob, best.keys)
        sigma = float(np.hypot(f.keys.sigma_ppm, _white_sigma_ppm(spec)))
        if (_systematic(best.prob, best.keys) > HOLE_MARGIN * _systematic(f.prob, f.keys)
                or gain < spec.search.hole_gain * sigma):
            return f
    return best


def _white_sigma_ppm(spec: Spec) -> float:
    """The area law's sigma of the worst ranked pair (the two smallest devices), ppm."""
    from placer.model.variation import pelgrom_sigma

    area = {n: c * spec.unit.area_um2 for n, c in zip(spec.devices, spec.counts, strict=True)}
    pairs = spec.ranked_pairs()
    if not pairs:
        return 0.0
    return max(1e4 * float(pelgrom_sigma(spec.mismatch.a_param_pct_um,
                                         area[spec.devices[a]], area[spec.devices[b]]))
               for a, b in pairs)


def arrange(spec: Spec, *, method: str = "auto", seed: int = 0,
            time_limit_s: float = DEFAULT_TIME_LIMIT_S, n_candidates: int = 0,
            progress: Callable[[str, Keys], None] | None = None,
            fit: PitchFit | None = default_fit, weigh: Weigh | None = None) -> Arrangement:
    """Search the spec's shapes for the best arrangement and score it in full.

    Parameters
    ----------
    spec : Spec
        What to arrange (``load_spec``).
    method : str
        ``auto`` (the search) or a baseline: ``clustered``, ``interdigitated``,
        ``mirrored``, ``milp``.
    seed : int
        The same spec, seed and time limit give the same result (when the limit
        does not cut the search).
    time_limit_s : float
        Shared by the core shapes tried.
    n_candidates : int
        Also return up to this many arrangements on the error / routing front.
    progress : callable, optional
        Called with a stage name and the best keys so far as the search goes.
    fit : callable, optional
        Gives the spec at the pitch an arrangement's routing needs (default: placer's
        generic cells, :func:`placer.layout.pitch.fitted`); None keeps the spec's pitch.
        Unless the spec gives a pitch, each core shape is searched at the pitch fitted to
        a textbook arrangement of it, and the result is scored at the pitch fitted to its
        own routing (``Arrangement.spec``), the pitch it is drawn at.
    weigh : callable, optional
        With ``[search] wiring``, routes the kept arrangements and gives each its
        wiring error (ppm) and block area (um2) (:meth:`placer.layout.block.Tools.weigh`).

    Returns
    -------
    Arrangement
        The best arrangement, its keys, grade, baselines, candidates and what the
        search did (method, core shape, time, whether the optimum is proven).

    Examples
    --------
    >>> from placer.jobs.load import parse_spec
    >>> res = arrange(parse_spec("[devices]\\nA = 2\\nB = 2\\n[array]\\nrows = 1\\n"))
    >>> res.keys.linear_um, res.proven
    (0.0, 'linear and quadratic')
    """
    import time
    from dataclasses import replace

    shapes = candidate_shapes(spec)
    if not shapes:
        raise SpecError(f"{spec.source}: no core shape holds {spec.n_units} units within "
                        f"{MAX_SLOTS} slots")
    # a short limit goes to moves on fewer shapes (each costs fixed work before its
    # search moves); the count comes from the spec and the limit, never from a clock
    afford = workload.shapes_affordable(spec, time_limit_s)
    unafforded = max(0, len(shapes) - afford)
    shapes = _keep_shapes(shapes, afford, spec.n_units)
    t0 = time.monotonic()
    share = time_limit_s / len(shapes)
    tried: list[_Tried] = []
    interrupted = False
    for i, (rows, cols) in enumerate(shapes):
        if tried and time.monotonic() >= t0 + time_limit_s:
            break                     # the time is spent: the shapes left are not tried
        try:
            t = _run_shape(spec, rows, cols, method, seed, t0 + (i + 1) * share, share,
                           progress, fit)
        except KeyboardInterrupt:
            interrupted = True
            break
        except InfeasibleError as err:
            # the search knows no file: the message names the spec and the core
            raise InfeasibleError(f"{spec.source}: on the {rows} x {cols} core, {err}") from None
        tried.append(t)
        if t.result is not None and t.result.stopped == "interrupted":
            interrupted = True
            break
    if not tried:
        raise KeyboardInterrupt
    best = _pick(tried, spec)
    rows, cols = best.shape
    out = best.result
    # a shape whose share of the time ran out makes the whole run "time limit", even
    # when the shape chosen converged: with more time the choice could change
    cut = any(t.result is not None and t.result.stopped == "time limit" for t in tried)
    stopped = ("interrupted" if interrupted else "time limit" if cut
               else out.stopped if out else "converged")
    searched = best.spec if best.spec is not None else spec
    if weigh is not None and spec.search.wiring and not interrupted:
        chosen = _weighed_choice(searched, best, weigh)
        if chosen is not best.assign:
            best = replace(best, assign=chosen, keys=keys_of(best.prob, chosen),
                           method=best.method + ", then the least gradient + wiring error")
            out = None                  # the search's proof and bound were for another
    pattern = build_pattern(searched, best.assign, rows, cols)
    final = fit(pattern, searched) if fit is not None else searched
    proven = out.proven if out is not None and best.method == out.method else ""
    lin_bound = out.linear_bound_um if out is not None else float("nan")
    if final.array.pitch_um != searched.array.pitch_um:
        # its own routing needs another pitch than the probe's: score it at that one; a
        # proof or bound at the searched pitch need not hold at it
        prob = problem_for(final, rows, cols)
        best = replace(best, prob=prob, keys=keys_of(prob, best.assign), spec=final,
                       baselines={n: (a, keys_of(prob, a))
                                  for n, (a, _) in best.baselines.items()})
        lin_bound = float("nan")
        # a zero stays the least possible at any pitch
        if best.keys.linear_um != 0:
            proven = ""
        elif proven.startswith("linear and quadratic") and best.keys.quadratic_ppm != 0:
            proven = "linear"
    spec = final
    grade = grade_pattern(pattern, spec)
    routing = estimate_routing(pattern, spec.array.pitch_um, KINDS[spec.kind].fingers,
                               _nets(spec), _pair_dummy(spec))
    cands, against = (_candidates(spec, best, n_candidates, weigh) if n_candidates
                      else ((), ""))
    return Arrangement(
        pattern=pattern, grade=grade, routing=routing, keys=best.keys, method=best.method,
        core_shape=(rows, cols),
        shape_reason=_shape_reason(spec, tried, best, len(shapes) - len(tried),
                                   interrupted, unafforded),
        linear_bound_um=lin_bound,
        quadratic_bound_ppm=quadratic_bound(best.prob, best.keys.linear_um),
        proven=proven,
        stopped=stopped, elapsed_s=time.monotonic() - t0,
        moves=sum(t.result.moves for t in tried if t.result),
        nodes=sum(t.result.nodes for t in tried if t.result),
        baselines={name: k for name, (_, k) in best.baselines.items()},
        candidates=cands, solver=best.solver, front_reference=against, spec=spec,
        time_limit_s=time_limit_s,
    )


def _keep_shapes(shapes: list[tuple[int, int]], n: int, units: int) -> list[tuple[int, int]]:
    """The first ``n`` shapes, a full rectangle among them when the list holds one."""
    if n >= len(shapes):
        return shapes
    kept = shapes[:n]
    full = [s for s in shapes if s[0] * s[1] == units]
    if full and not any(r * c == units for r, c in kept):
        kept[-1] = full[0]
    return kept


def _shape_reason(spec: Spec, tried: list[_Tried], best: _Tried, untried: int = 0,
                  interrupted: bool = False, unafforded: int = 0) -> str:
    why = "the run was interrupted" if interrupted else "the time limit was spent"
    late = (f"; {untried} more shape{'s' if untried > 1 else ''} not tried: {why}"
            if untried else "")
    if unafforded:
        late += (f"; {unafforded} more shape{'s' if unafforded > 1 else ''} not tried: the "
                 f"time limit affords {len(tried) + untried} (each costs fixed work before "
                 f"its search)")
    if len(tried) == 1:
        r, c = tried[0].shape
        given = spec.array.rows is not None or spec.array.columns is not None
        return f"core {r} x {c}" + (" as the spec gives" if given else "") + late
    others = ", ".join(f"{t.shape[0]}x{t.shape[1]}: linear {t.keys.linear_um:.3g} um, quad "
                       f"{t.keys.quadratic_ppm:.3g} ppm" + (" (spare slots)" if _holes(t) else "")
                       for t in tried if t is not best)
    r, c = best.shape
    return (f"tried {len(tried)} shapes near aspect {spec.array.aspect:g}; chose {r} x {c} "
            f"(linear {best.keys.linear_um:.3g} um, quad {best.keys.quadratic_ppm:.3g} ppm) "
            f"over {others}{late}")


def _pool(best: _Tried) -> dict[bytes, tuple[IntArray, str]]:
    """The arrangements a shape's search kept: its result, its chains' results and the
    baselines, each with where it came from."""
    pool: dict[bytes, tuple[IntArray, str]] = {best.assign.tobytes(): (best.assign, "result")}
    if best.result is not None:
        for i, (assign, _) in enumerate(best.result.archive):
            pool.setdefault(assign.tobytes(), (assign, f"search, chain result {i + 1}"))
    for name, (a, _) in best.baselines.items():
        pool.setdefault(a.tobytes(), (a, f"baseline {name}"))
    return pool


def _weighed_choice(spec: Spec, best: _Tried, weigh: Weigh) -> IntArray:
    """Among the WIRING_POOL kept arrangements of least gradient error, the one of least
    gradient + wiring error (worst pair each, ppm); ties keep the search's order."""
    rows, cols = best.shape
    ranked = sorted(_pool(best).values(),
                    key=lambda a: _systematic(best.prob, keys_of(best.prob, a[0])))
    choice, least = best.assign, math.inf
    for assign, _ in ranked[:WIRING_POOL]:
        total = (_systematic(best.prob, keys_of(best.prob, assign))
                 + weigh(build_pattern(spec, assign, rows, cols), spec)[0])
        if total < least - 1e-12:
            choice, least = assign, total
    return choice


def _candidates(spec: Spec, best: _Tried, k: int, weigh: Weigh | None = None
                ) -> tuple[tuple[Candidate, ...], str]:
    """Up to K arrangements on the front of gradient error against routing effort: none
    is worse on both than another. With ``weigh``, the front is of gradient error, the
    routed block's wiring error and its area, over the WIRING_POOL kept arrangements of
    least gradient error and the baselines. Each names where it came from; the text
    returned names the baseline that does best on each axis, the yardstick of the
    front."""
    prob = best.prob
    rows, cols = best.shape
    pool = _pool(best)
    if weigh is not None:
        ranked = sorted(pool.values(), key=lambda a: _systematic(prob, keys_of(prob, a[0])))
        keep = ranked[:WIRING_POOL] + [a for a in ranked[WIRING_POOL:]
                                       if a[1].startswith("baseline ")]
        pool = {a.tobytes(): (a, s) for a, s in keep}
    scored = []
    for assign, source in pool.values():
        keys = keys_of(prob, assign)
        pattern = build_pattern(spec, assign, rows, cols)
        route = estimate_routing(pattern, spec.array.pitch_um, KINDS[spec.kind].fingers,
                                 _nets(spec), _pair_dummy(spec))
        wiring_ppm = block_um2 = None
        if weigh is not None:
            wiring_ppm, block_um2 = weigh(pattern, spec)
        scored.append(Candidate(pattern, keys, _systematic(prob, keys), route.total_tree_um,
                                source, wiring_ppm, block_um2))

    def axes(c: Candidate) -> tuple[float, ...]:
        if c.wiring_ppm is not None and c.block_um2 is not None:
            return (c.systematic_ppm, c.wiring_ppm, c.block_um2)
        return (c.systematic_ppm, c.routing_um)

    front = [c for c in scored
             if not any(all(u <= v for u, v in zip(axes(o), axes(c), strict=True))
                        and axes(o) != axes(c) for o in scored)]
    uniq: dict[tuple[float, ...], Candidate] = {}
    for c in sorted(front, key=axes):
        uniq.setdefault(tuple(round(v, 6) for v in axes(c)), c)
    base = [c for c in scored if c.source.startswith("baseline ")]
    against = ""
    if base:
        err = min(base, key=lambda c: (c.systematic_ppm, c.routing_um))
        wire = min(base, key=lambda c: (c.routing_um, c.systematic_ppm))
        against = (f"best baseline for gradient error: {err.source[9:]} "
                   f"({err.systematic_ppm:.4g} ppm); for routing: {wire.source[9:]} "
                   f"({wire.routing_um:.4g} um)")
    return tuple(list(uniq.values())[:k]), against
