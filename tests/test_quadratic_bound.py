"""The quadratic lower bound (placer/search/_bounds.py) against exhaustive enumeration.

The reference quadratic and linear terms are computed here from their definition (the
model section of the README: the worst pair's second-moment difference about the centre
of all device units, g2/2 times its Frobenius norm; the linear term is the centroid
distance), apart from the search's compiled arithmetic.
"""

from __future__ import annotations

import json
from itertools import combinations
from pathlib import Path

import numpy as np
import pytest

from placer.jobs.load import parse_spec
from placer.search import Problem, quadratic_bound
from placer.search._bounds import spread_bound

ROOT = Path(__file__).resolve().parents[1]


def _arrangements(counts: tuple[int, ...], n: int):
    """Every assignment of the counts' units to n slots (distinct multiset orders)."""
    def rec(left: list[int], prefix: list[int]):
        if len(prefix) == n:
            yield list(prefix)
            return
        for d, k in enumerate(left):
            if k:
                left[d] -= 1
                prefix.append(d)
                yield from rec(left, prefix)
                prefix.pop()
                left[d] += 1
    yield from rec(list(counts), [])


def _terms(prob: Problem, assign: list[int]) -> tuple[float, float]:
    """Worst ranked pair's linear (um) and quadratic (ppm) terms, from the definition."""
    r, c = np.divmod(np.arange(prob.rows * prob.cols), prob.cols)
    p = np.stack([c * prob.pitch_um[0], r * prob.pitch_um[1]], axis=1).astype(float)
    a = np.array(assign)
    p = p - p[a >= 0].mean(axis=0)
    pairs = prob.pairs if prob.pairs is not None else combinations(range(prob.n_dev), 2)
    lin = quad = 0.0
    for i, j in pairs:
        pi, pj = p[a == i], p[a == j]
        lin = max(lin, float(np.linalg.norm(pi.mean(0) - pj.mean(0))))
        mi = np.einsum("ka,kb->ab", pi, pi) / len(pi)
        mj = np.einsum("ka,kb->ab", pj, pj) / len(pj)
        quad = max(quad, 0.5 * prob.quadratic_ppm_per_um2 * float(np.linalg.norm(mi - mj)))
    return lin, quad


CASES = [
    Problem((1, 1, 2), 1, 4),
    Problem((1, 1, 4), 2, 3),
    Problem((1, 1, 2, 4), 2, 4),
    Problem((1, 1, 3, 3), 2, 4, pitch_um=(1.5, 1.0)),
    Problem((1, 1, 1, 2, 4), 3, 3),
    Problem((1, 2, 2, 3), 2, 4, pairs=((0, 1), (1, 2), (2, 3))),   # a chain: the LP
]


@pytest.mark.parametrize("prob", CASES, ids=lambda p: f"{p.counts}-{p.rows}x{p.cols}")
def test_bound_holds_for_every_arrangement(prob: Problem) -> None:
    """Mathematical identity: no arrangement whose linear term is at most L has a
    quadratic term below the bound at L, for every L an arrangement reaches."""
    terms = [_terms(prob, a) for a in _arrangements(prob.counts, prob.n_slots)]
    for cap in sorted({round(lin, 12) for lin, _ in terms}):
        best = min(q for lin, q in terms if lin <= cap + 1e-12)
        bound = quadratic_bound(prob, cap)
        assert bound == bound, cap
        assert bound <= best * (1 + 1e-9) + 1e-15, (cap, bound, best)


def test_bound_is_tight_where_the_singles_are_forced_to_the_centre() -> None:
    """Worked by hand: 1 x 4 at 1 um, devices of 1, 1, 2 units, linear at most 1 um.
    Each single must sit within 3/4 um of the centre (x = +-0.5), so the pair of two
    units takes x = +-1.5: second moments 0.25 against 2.25, quadratic error
    0.02 / 2 * 2 = 0.02 ppm -- which the arrangement (C A B C) reaches."""
    prob = Problem((1, 1, 2), 1, 4)
    assert quadratic_bound(prob, 1.0) == pytest.approx(0.02, rel=1e-8)
    assert _terms(prob, [2, 0, 1, 2]) == pytest.approx((1.0, 0.02))


def test_closed_form_agrees_with_the_linear_programme() -> None:
    """The all-pairs closed form against scipy's HiGHS on the same programme (a
    general-purpose solver as the reference), on random intervals and sums."""
    rng = np.random.default_rng(3)
    for _ in range(200):
        n = int(rng.integers(2, 9))
        lo = rng.uniform(0, 10, n)
        hi = lo + rng.uniform(0, 10, n) * (rng.random(n) < 0.8)
        w = rng.integers(1, 9, n).astype(float)
        total = float(w @ (lo + rng.random(n) * (hi - lo)))
        every = np.array(list(combinations(range(n), 2)), dtype=np.int64)
        assert spread_bound(lo, hi, w, total) == pytest.approx(
            spread_bound(lo, hi, w, total, every), abs=1e-7)


def test_large_capacitor_arrays_are_bounded_close_to_their_best_known() -> None:
    """The bound never exceeds an arrangement's value (the best known, from long
    searches: tests/bench/optima.json), and on binary-weighted arrays it is close:
    within 2 % at 64 units and 0.3 % from 128 units on."""
    from tests.bench.cases import CASES as BENCH

    optima = json.loads((ROOT / "tests" / "bench" / "optima.json").read_text())
    from placer.jobs.arrange import problem_for

    for label, text, _ in BENCH:
        if "cap array" not in label:
            continue
        spec = parse_spec(text)
        prob = problem_for(spec, spec.array.rows, spec.array.columns)
        known = optima[label]
        bound = quadratic_bound(prob, known["linear_um"])
        assert bound <= known["quadratic_ppm"], label
        assert bound >= (0.98 if prob.n_slots < 100 else 0.997) * known["quadratic_ppm"], \
            label


def test_no_claim_where_the_centre_moves_or_the_objective_weighs() -> None:
    """A spare slot moves the centre, and the weighted objective does not put the
    linear term first: no bound is claimed (nan)."""
    assert quadratic_bound(Problem((1, 1, 2), 1, 5), 1.0) != quadratic_bound(
        Problem((1, 1, 2), 1, 5), 1.0)
    assert np.isnan(quadratic_bound(Problem((1, 1, 2), 1, 4, objective="weighted"), 1.0))


def test_report_prints_the_bound_rounded_down() -> None:
    """The report and JSON of arrange carry the bound; the text never rounds it above the
    value it bounds."""
    from placer.jobs.arrange import arrange
    from placer.present.report import format_arrangement
    from tests.bench.cases import CASES as BENCH

    text = next(t for label, t, _ in BENCH if label.startswith("8-bit cap array"))
    spec = parse_spec(text)
    result = arrange(spec, time_limit_s=1.0, fit=None)
    bound = result.to_dict()["quadratic_bound_ppm"]
    assert 0 < bound <= result.keys.quadratic_ppm
    line = next(ln for ln in format_arrangement(result, spec).splitlines()
                if ln.startswith("Quadratic:"))
    printed = float(line.split("lower bound ")[1].split()[0])
    assert printed <= bound < printed * 1.001
