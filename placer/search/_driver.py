"""The search driver: starts, staged local-search chains, the exact search, workers.

A *chain* runs the stages in the objective's order -- linear, quadratic, the higher
orders asked for, edge balance, correlated sigma (or, weighted, the ppm sum then sigma)
-- each stage minimising its key while the keys before it keep their values. Chains run
with budgets doubling from one to the next, each from the best state so far, until two
chains in a row bring nothing better (or every key sits at its bound, or the time limit
comes). Budgets are counts of moves, never seconds, so a run that ends before its time
limit gives the same result for the same spec, seed and limit on any machine (the
limit sets the number of restarts, below).

On small cores too large for the exact search to finish, the chains are preceded by
restarts: the linear and quadratic stages from random states. Once the linear term sits
at zero, the moves that keep every centroid fixed connect only a family of
arrangements, and an annealing stays in the family its linear stage reached; fresh
starts reach other families, and the best of them seeds the chains.

Cores small enough are then searched exactly from the local search's result: branch and
bound proves the linear optimum and then the quadratic optimum at that linear value.
"""

from __future__ import annotations

import itertools
import os
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from placer.search._compiled import (
    Compiled,
    compile_problem,
    evaluate,
    slot_assignment,
)
from placer.search._construct import random_start, starts
from placer.search._exact import branch_and_bound, linear_bound, n_assignments
from placer.search._local import (
    RESTART_SMOOTHING,
    RESTART_THREE_SHARE,
    STAGE,
    caps_none,
    run_stage,
)
from placer.search._problem import LINEAR_REL, Keys, Problem, best_of, compare, progressed

__all__ = ["SearchResult", "search", "n_restarts", "MOVES_PER_ORBIT", "QUIET_CHAINS",
           "MAX_CHAINS", "EXACT_MAX_ORBITS", "EXACT_MAX_ASSIGNMENTS"]

IntArray = NDArray[np.int64]

#: Moves per stage of the first chain, per free orbit (within the two limits below).
MOVES_PER_ORBIT = 300
MIN_MOVES = 20_000
MAX_FIRST_MOVES = 3_000_000
#: Chains stop after this many in a row bring no progress: a result better than the best
#: by more than PROGRESS (relative, at the first key that differs). Small cores (up to
#: SMALL_ORBITS free orbits) are cheap and get more patience.
QUIET_CHAINS = 2
QUIET_CHAINS_SMALL = 4
SMALL_ORBITS = 80
PROGRESS = 1e-3
MAX_CHAINS = 12
#: Restarts per worker on small cores (at most SMALL_ORBITS free orbits, more than
#: EXACT_ALWAYS assignments, a zero linear term not ruled out): RESTARTS_PER_S per second
#: of the time limit (a count fixed by the limit, never by the clock), between one and
#: MAX_RESTARTS; each of RESTART_MOVES_PER_ORBIT moves per free orbit in the quadratic
#: stage and a tenth of that in the linear stage.
RESTARTS_PER_S = 5
MAX_RESTARTS = 40
RESTART_MOVES_PER_ORBIT = 16_000
_RESTART_STAGES = ("linear", "quadratic", "order3", "order4")
#: Branch and bound runs on cores with at most this many free orbits and assignments;
#: up to EXACT_ALWAYS assignments it runs to the end (or the time limit), beyond that
#: within a budget of nodes, so that whether it finishes does not depend on the machine.
EXACT_MAX_ORBITS = 80
EXACT_MAX_ASSIGNMENTS = 10 ** 15
EXACT_ALWAYS = 10 ** 8
#: At most this many assignments, the search is branch and bound alone (it proves the
#: optimum in a few milliseconds; local search first would only spend time).
TINY_ASSIGNMENTS = 5_000
EXACT_NODE_BUDGET = 1_000_000
#: A second worker process runs its own chains on cores at least this large.
PARALLEL_MIN_ORBITS = 96
#: Two values of a key closer than this (absolute) are equal, whatever the relative tie.
ABS_EPS = 1e-15


@dataclass(frozen=True, eq=False)
class SearchResult:
    """The best arrangement found and how it was found.

    ``assign`` holds each grid slot's device, -1 for a spare slot (a dummy), -2 for a
    slot the core does not use. ``proven`` names the keys proven optimal ("linear and
    quadratic", "linear", or ""). ``stopped`` is "converged", "time limit" or
    "interrupted".
    """

    assign: IntArray
    keys: Keys
    linear_bound_um: float
    proven: str
    method: str
    stopped: str
    elapsed_s: float
    moves: int
    nodes: int
    chains: int
    archive: tuple[tuple[IntArray, Keys], ...] = field(default=())


@dataclass
class _Run:
    """Work done and how it ended, accumulated across stages and chains."""

    moves: int = 0
    status: int = 0           # 0 fine, 1 deadline, 2 interrupted

    def note(self, status: int) -> None:
        self.status = max(self.status, status)


def _cap(value: float, rel: float) -> float:
    return value * (1 + rel) + ABS_EPS


def _stage_plan(prob: Problem) -> list[str]:
    plan = []
    if prob.objective == "weighted":
        plan.append("weighted")
    else:
        plan += ["linear", "quadratic"]
        plan += [f"order{k}" for k in range(3, min(prob.cancel_order, 4) + 1)]
    if prob.open_edge is not None and any(prob.open_edge):
        plan.append("edge")
    if prob.corr_sigma_ppm > 0:
        plan.append("sigma")
    return plan


def _stages(comp: Compiled, dev: IntArray, stages: list[str], moves: Callable[[str], int],
            rng: np.random.Generator, deadline: float, floor: float, run: _Run,
            caps: NDArray[np.float64], **anneal: Any) -> None:
    """Run ``stages`` in order in place on ``dev``, each capping the key it minimised for
    the stages after it; a stage given 0 moves only measures its key."""
    prob = comp.prob
    for stage in stages:
        n = moves(stage)
        if n == 0:
            res = run_stage(comp, dev, stage, 0, 0, deadline, caps)
        else:
            res = run_stage(comp, dev, stage, n, int(rng.integers(1 << 62)), deadline, caps,
                            floor=floor if stage == "linear" else -1.0,
                            field=stage == "sigma", **anneal)
        run.moves += res.tried
        run.note(res.status)
        rel = LINEAR_REL if stage == "linear" else prob.relative_tie
        caps[STAGE[stage]] = _cap(res.keys[STAGE[stage]], rel)
        if res.status:
            break


def _chain(comp: Compiled, dev_of: IntArray, moves: int, seed: int, deadline: float,
           floor: float, run: _Run, skip_linear: bool = False,
           fixed: dict[str, float] | None = None) -> IntArray:
    """One pass of the stages on a copy of ``dev_of``; returns the result. ``fixed``
    stages are not run, their keys capped at the values given."""
    dev = dev_of.copy()
    caps = caps_none()
    for name, value in (fixed or {}).items():
        caps[STAGE[name]] = value
    plan = [st for st in _stage_plan(comp.prob) if st not in (fixed or {})]
    _stages(comp, dev, plan, lambda st: 0 if st == "linear" and skip_linear else moves,
            np.random.default_rng(seed), deadline, floor, run, caps)
    return dev


def _chains(comp: Compiled, start: IntArray, seed: int, deadline: float, floor: float,
            progress: Callable[[str, Keys], None] | None, run: _Run, restarts: int = 0
            ) -> list[tuple[IntArray, Keys]]:
    """Chains with doubling budgets from ``start`` until they stop improving."""
    prob = comp.prob
    rng = np.random.default_rng(seed)
    base = int(np.clip(MOVES_PER_ORBIT * max(comp.n_orb, 1), MIN_MOVES, MAX_FIRST_MOVES))
    best_dev, best_keys = start, evaluate(comp, start)
    found = [(start, best_keys)]
    if _restarting(comp, floor):
        for k in range(restarts):
            dev = _restart(comp, rng, deadline, floor, run)
            keys = evaluate(comp, dev)
            found.append((dev, keys))
            if progress is not None:
                progress(f"restart {k + 1}", keys)
            if compare(prob, keys, best_keys) < 0:
                best_dev, best_keys = dev, keys
            if run.status:
                return found
    quiet = 0
    for k in range(MAX_CHAINS):
        at_floor = best_keys.linear_um <= floor * (1 + LINEAR_REL) + ABS_EPS
        dev = _chain(comp, best_dev, base << k, int(rng.integers(1 << 62)), deadline, floor,
                     run, skip_linear=at_floor and k > 0)
        keys = evaluate(comp, dev)
        found.append((dev, keys))
        if progress is not None:
            progress(f"chain {k + 1}", keys)
        quiet = 0 if progressed(prob, keys, best_keys, PROGRESS) else quiet + 1
        if compare(prob, keys, best_keys) < 0:
            best_dev, best_keys = dev, keys
        if run.status or quiet >= (QUIET_CHAINS_SMALL if comp.n_orb <= SMALL_ORBITS
                                   else QUIET_CHAINS):
            break
        if (best_keys.linear_um <= floor * (1 + LINEAR_REL) + ABS_EPS
                and best_keys.quadratic_ppm <= ABS_EPS and all(h <= ABS_EPS
                                                               for h in best_keys.higher)
                and "sigma" not in _stage_plan(prob) and "edge" not in _stage_plan(prob)):
            break
    return found


def _restarting(comp: Compiled, floor: float) -> bool:
    """True on the small cores whose chains are preceded by restarts: those where a zero
    linear term is not ruled out (when it is, single swaps still move under the linear
    cap and the chains are not confined) and the exact search cannot finish."""
    return (comp.n_orb <= SMALL_ORBITS and comp.prob.objective == "lexicographic"
            and floor <= ABS_EPS and n_assignments(comp) > EXACT_ALWAYS)


def _restart(comp: Compiled, rng: np.random.Generator, deadline: float, floor: float,
             run: _Run) -> IntArray:
    """The linear, quadratic and higher-order stages from a random state, with the
    restart's smoother energy and three-for-three exchanges."""
    dev = random_start(comp, rng)
    plan = list(itertools.takewhile(lambda st: st in _RESTART_STAGES, _stage_plan(comp.prob)))
    moves = RESTART_MOVES_PER_ORBIT * comp.n_orb
    _stages(comp, dev, plan, lambda st: moves // 10 if st == "linear" else moves, rng,
            deadline, floor, run, caps_none(), smoothing=RESTART_SMOOTHING,
            three_share=RESTART_THREE_SHARE)
    return dev


def n_restarts(time_limit_s: float) -> int:
    """Restarts per worker for a time limit (on the cores that get restarts).

    Parameters
    ----------
    time_limit_s : float
        The search's time limit in seconds.

    Returns
    -------
    int
        Restarts from random states each worker makes, from 1 to ``MAX_RESTARTS``.
    """
    return int(np.clip(round(RESTARTS_PER_S * time_limit_s), 1, MAX_RESTARTS))


def _worker_entry(parent: int, *args: Any) -> None:
    """The second process's start: a child's signal rules (:mod:`placer.io.forked`),
    then :func:`_worker` (looked up now, so a test may replace it)."""
    from placer.io.forked import child_start

    child_start(parent)
    _worker(*args)


def _worker(send: Any, comp: Compiled, start: IntArray, seed: int, deadline: float,
            floor: float, restarts: int) -> None:
    """Second process: its own chains, sent back through the pipe."""
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)   # the parent handles Ctrl-C
    run = _Run()
    found = _chains(comp, start, seed, deadline, floor, None, run, restarts)
    send.send((found, run.moves, run.status))
    send.close()


def search(prob: Problem, *, seed: int = 0, time_limit_s: float = 60.0,
           progress: Callable[[str, Keys], None] | None = None,
           workers: int | None = None, exact_nodes: int | None = None,
           restarts: int | None = None) -> SearchResult:
    """Find the best arrangement of ``prob`` under its objective.

    Parameters
    ----------
    prob : Problem
        Units, core, constraints and objective.
    seed : int
        Seed of every random choice; the same seed gives the same result when the time
        limit is not reached.
    time_limit_s : float
        Wall-clock cap; a result it cut says so in ``stopped``.
    progress : callable, optional
        Called with a stage name and the keys reached so far.
    workers : int, optional
        Processes running chains (default: two on cores of at least 96 free orbits,
        or with restarts, when the machine has two CPUs, else one).
    exact_nodes : int, optional
        Node budget of the branch and bound (0: none, only the time limit); default: none
        up to 10^8 assignments, EXACT_NODE_BUDGET above.
    restarts : int, optional
        Restarts per worker on the cores that get them (default: ``n_restarts`` of the
        time limit). A caller whose limit comes from a clock (what is left of a shared
        budget) passes a count of its own, so that the result does not depend on it.

    Returns
    -------
    SearchResult
        The best assignment found, its keys, the stages that ran and whether the
        optimum is proven.
    """
    t0 = time.monotonic()
    deadline = t0 + time_limit_s
    comp = compile_problem(prob)
    rng = np.random.default_rng(seed)
    floor = linear_bound(prob)
    run = _Run()
    nodes = 0
    proven = ""
    named = starts(comp, rng)
    if not named:
        raise ValueError("no start fits the problem's counts")
    scored = [(name, dev, evaluate(comp, dev)) for name, dev in named]
    name0, start, _ = best_of(prob, scored, lambda x: x[2])
    method = f"{name0} + local search"
    seeds = [int(rng.integers(1 << 62)) for _ in range(2)]
    cpus = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else 1
    if workers is None:
        busy = comp.n_orb >= PARALLEL_MIN_ORBITS or _restarting(comp, floor)
        workers = 2 if busy and cpus > 1 else 1
    restarts = n_restarts(time_limit_s) if restarts is None else restarts
    found: list[tuple[IntArray, Keys]] = []
    child = None
    # so few assignments that branch and bound settles them at once: no local search
    tiny = (prob.objective == "lexicographic" and comp.n_orb <= EXACT_MAX_ORBITS
            and n_assignments(comp) <= TINY_ASSIGNMENTS)
    if tiny:
        workers = 1
    try:
        if tiny:
            found.append((start, evaluate(comp, start)))
        elif workers > 1:
            import multiprocessing as mp

            ctx = mp.get_context("fork")
            recv, send = ctx.Pipe(duplex=False)
            child = (ctx.Process(target=_worker_entry, args=(os.getpid(), send, comp, start,
                                                            seeds[1], deadline, floor,
                                                            restarts),
                                 daemon=True), recv)
            from placer.io.forked import blocked

            with blocked():                 # held until the child sets its handlers
                child[0].start()
            send.close()
        if not tiny:
            found += _chains(comp, start, seeds[0], deadline, floor, progress, run,
                             restarts)
        if run.status == 2:
            # interrupted: the worker ignores Ctrl-C and would run on to its deadline;
            # it is stopped (finally, below) and the parent's best so far is kept
            raise KeyboardInterrupt
        if child is not None:
            proc, recv = child
            try:
                more, moves, status = recv.recv()
                found += more
                run.moves += moves
                run.note(status)
            except EOFError:
                pass
            proc.join()
            child = None
        best_dev, best_keys = best_of(prob, found, lambda x: x[1])
        exact_ok = (comp.n_orb <= EXACT_MAX_ORBITS and prob.objective == "lexicographic"
                    and n_assignments(comp) <= EXACT_MAX_ASSIGNMENTS and run.status == 0)
        if exact_ok:
            budget = (exact_nodes if exact_nodes is not None else
                      0 if n_assignments(comp) <= EXACT_ALWAYS else EXACT_NODE_BUDGET)
            best_dev, best_keys, proven, nodes = _exact(comp, best_dev, best_keys, floor,
                                                        deadline, run, seeds[0], budget)
            found.append((best_dev, best_keys))
            if proven:
                method = "branch and bound (exact)"
    except KeyboardInterrupt:
        run.note(2)
    finally:
        if child is not None:
            child[0].terminate()
            child[0].join()
    if not found:
        found = [(start, evaluate(comp, start))]
    best_dev, best_keys = best_of(prob, found, lambda x: x[1])
    bound = best_keys.linear_um if proven else min(floor, best_keys.linear_um)
    if best_keys.linear_um <= floor * (1 + LINEAR_REL) + ABS_EPS and not proven:
        proven = "linear"
    ranked = sorted(range(len(found)), key=lambda i: (_rank_pos(prob, found, i), i))
    archive = tuple((slot_assignment(comp, found[i][0]), found[i][1]) for i in ranked[:50])
    return SearchResult(
        assign=slot_assignment(comp, best_dev), keys=best_keys, linear_bound_um=bound,
        proven=proven, method=method,
        stopped={0: "converged", 1: "time limit", 2: "interrupted"}[run.status],
        elapsed_s=time.monotonic() - t0, moves=run.moves, nodes=nodes,
        chains=len(found), archive=archive)


def _rank_pos(prob: Problem, found: list[tuple[IntArray, Keys]], i: int) -> int:
    return sum(1 for j in range(len(found)) if compare(prob, found[j][1], found[i][1]) < 0)


def _inc(keys: Keys) -> tuple[float, ...]:
    return (keys.linear_um, keys.quadratic_ppm, *keys.higher)


def _exact(comp: Compiled, dev: IntArray, keys: Keys, floor: float, deadline: float,
           run: _Run, seed: int, budget: int) -> tuple[IntArray, Keys, str, int]:
    """Prove the linear, then the quadratic optimum; polish the later keys under both."""
    prob = comp.prob
    nodes = 0
    if keys.linear_um > floor * (1 + LINEAR_REL) + ABS_EPS:
        res = branch_and_bound(comp, dev, _inc(keys), deadline, mode=1, node_limit=budget)
        nodes += res.nodes
        if res.status in (1, 2):
            run.note(res.status)
        if res.linear_um < keys.linear_um * (1 - LINEAR_REL):
            dev, keys = res.dev_of, evaluate(comp, res.dev_of)
        if not res.proven:
            return dev, keys, "", nodes
    left = max(budget - nodes, 1) if budget else 0
    res = branch_and_bound(comp, dev, _inc(keys), deadline, mode=2, lin_cap=keys.linear_um,
                           node_limit=left)
    nodes += res.nodes
    if res.status in (1, 2):
        run.note(res.status)
    k2 = evaluate(comp, res.dev_of)
    if compare(prob, k2, keys) < 0:
        dev, keys = res.dev_of, k2
    if not res.proven:
        return dev, keys, "linear", nodes
    # the later keys (edge, sigma) under the proven linear, quadratic and higher orders
    fixed = {"linear": _cap(keys.linear_um, LINEAR_REL),
             "quadratic": _cap(keys.quadratic_ppm, prob.relative_tie)}
    for k, h in zip(range(3, 5), keys.higher, strict=False):
        fixed[f"order{k}"] = _cap(h, prob.relative_tie)
    base = int(np.clip(MOVES_PER_ORBIT * max(comp.n_orb, 1), MIN_MOVES, MAX_FIRST_MOVES))
    polished = _chain(comp, dev, base, seed, deadline, floor, run, fixed=fixed)
    k3 = evaluate(comp, polished)
    if compare(prob, k3, keys) < 0:
        dev, keys = polished, k3
    return dev, keys, "linear and quadratic", nodes
