"""Search: exactness, known optima, bounds, determinism, and never worse than a baseline."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from placer import baselines
from placer.arrange import arrange
from placer.search import Problem, evaluate, search, symmetric_assignment
from placer.spec import parse_spec


def _arrange(toml: str, **kw):
    return arrange(parse_spec(toml, "s.toml"), time_limit_s=kw.pop("time_limit_s", 20), **kw)


@pytest.mark.parametrize("k", [1, 2, 3])
def test_search_finds_thue_morse_order_cancellation_prouhet_1851(k):
    """Prouhet (1851) / Prouhet-Tarry-Escott: 2^k + 2^k units in one row can be split with
    equal power sums up to degree k (the Thue-Morse split), so the search, asked for that
    order, must return zero moment differences up to order k."""
    n = 2 ** k
    toml = (f"[devices]\nA = {n}\nB = {n}\n[array]\nrows = 1\ncolumns = {2 * n}\n"
            f'dummies = "none"\n[gradient]\norder = {k + 1}\n[search]\ncancel_order = {k}\n')
    (pair,) = _arrange(toml).grade.pairs
    scale = (2.0 * n) ** np.arange(1, k + 2)
    assert np.all(np.array(pair.moment_norms[:k]) / scale[:k] < 1e-12)


def test_two_by_two_pair_gives_the_cross_common_practice():
    """Common practice (no source): a 2x2 pair is placed as the cross A B / B A."""
    res = _arrange('[devices]\nA = 2\nB = 2\n[array]\nrows = 2\ncolumns = 2\ndummies = "none"')
    ids = res.pattern.ids
    assert ids[0, 0] == ids[1, 1] and ids[0, 1] == ids[1, 0] and ids[0, 0] != ids[0, 1]


def test_one_to_one_in_a_row_of_four_gives_abba_common_practice():
    """Common practice (no source): 1:1 in one row of four is A B B A (or its mirror)."""
    res = _arrange('[devices]\nA = 2\nB = 2\n[array]\nrows = 1\ncolumns = 4\ndummies = "none"')
    assert res.pattern.ids.tolist() in ([[0, 1, 1, 0]], [[1, 0, 0, 1]])


def test_large_even_counts_get_exactly_zero_linear_error():
    """Point symmetry (mathematical identity): mirrored pairs of units share their centroid,
    so all-even counts on a core too big for enumeration cancel linear gradients exactly."""
    prob = Problem((8, 8, 8, 8), 4, 8)
    out = search(prob, seed=3, time_limit_s=20)
    assert out.method.startswith("symmetric")
    assert out.keys.linear_um == 0.0


def test_two_single_units_bound_is_one_pitch_and_is_reached():
    """Two one-unit devices sit on distinct slots, so their centroids are at least one
    (smallest) pitch apart; the binary-weighted 6-bit array reaches that bound."""
    prob = Problem((1, 1, 2, 4, 8, 16, 32), 8, 8, pitch_um=(2.0, 3.0))
    out = search(prob, seed=0, time_limit_s=30)
    assert out.linear_bound_um == pytest.approx(2.0)
    assert out.keys.linear_um == pytest.approx(2.0)
    assert out.bound_proven


def test_impossible_zero_reports_the_exhaustive_optimum_as_bound():
    """1:3:4 on 3 x 3 cannot cancel (enumeration over all 2520 assignments, computed)."""
    res = _arrange('[devices]\nA = 1\nB = 3\nC = 4\n[array]\nrows = 3\ncolumns = 3\n'
                   'dummies = "none"')
    assert res.bound_proven and res.keys.linear_um > 0
    assert res.linear_bound_um == pytest.approx(res.keys.linear_um)


def test_shape_is_chosen_when_omitted_and_explained():
    res = _arrange("[devices]\nA = 1\nB = 3\nC = 4\n")
    assert "chose" in res.shape_reason
    assert res.pattern.counts() == (1, 3, 4)


def test_symmetric_construction_uses_centre_for_one_odd_device():
    assign, partner = symmetric_assignment(Problem((3, 2, 4), 3, 3))
    assert assign[4] == 0  # the centre slot of 3 x 3
    assert np.all(assign[partner[partner >= 0]] == assign[partner >= 0])


def test_interrupt_keeps_the_best_so_far():
    calls = []

    def progress(stage, keys):
        calls.append(stage)
        raise KeyboardInterrupt

    prob = Problem((1, 1, 2, 4, 8, 16, 32), 8, 8)
    out = search(prob, seed=0, time_limit_s=30, progress=progress)
    assert out.stopped == "interrupted" and calls
    assert np.array_equal(np.bincount(out.assign[out.assign >= 0]), prob.counts)


counts_st = st.lists(st.integers(1, 6), min_size=2, max_size=4)


@settings(max_examples=25, deadline=None)
@given(counts_st, st.integers(1, 4), st.integers(0, 3))
def test_properties_counts_names_baselines_and_determinism(counts, rows, extra):
    """Properties: counts preserved, only known names, never worse than any baseline on the
    default objective, the same seed gives the same pattern."""
    n = sum(counts)
    cols = -(-n // rows) + extra
    names = [f"D{i}" for i in range(len(counts))]
    toml = ("[devices]\n" + "".join(f"{a} = {c}\n" for a, c in zip(names, counts, strict=True))
            + f'[array]\nrows = {rows}\ncolumns = {cols}\ndummies = "ring"\n')
    spec = parse_spec(toml, "s.toml")
    first = arrange(spec, seed=5, time_limit_s=20)
    assert first.pattern.counts() == tuple(counts)
    assert set(first.pattern.devices) == set(names)
    prob = Problem(tuple(counts), rows, cols, open_edge=None)
    core = first.pattern.ids[1:-1, 1:-1].ravel()
    mine = evaluate(prob, core.astype(np.int64)).ranked(prob)
    for fn in baselines.BASELINES.values():
        assert mine <= evaluate(prob, fn(prob)).ranked(prob)
    assert arrange(spec, seed=5, time_limit_s=20).pattern == first.pattern


def test_same_seed_same_result_on_annealed_case():
    prob = Problem((1, 1, 2, 4, 8, 16, 32), 8, 8)
    a = search(prob, seed=11, time_limit_s=30)
    b = search(prob, seed=11, time_limit_s=30)
    assert np.array_equal(a.assign, b.assign)


def test_parallel_and_sequential_starts_give_the_same_result():
    """Determinism: spreading the starts over processes changes nothing."""
    prob = Problem((1, 1, 2, 4, 8, 16, 32, 64), 8, 16)
    a = search(prob, seed=2, time_limit_s=60, parallel=True)
    b = search(prob, seed=2, time_limit_s=60, parallel=False)
    assert np.array_equal(a.assign, b.assign)


@pytest.mark.parametrize("devices, shape", [("A = 2\nB = 4\n", (2, 3)),
                                            ("A = 1\nB = 3\nC = 4\n", (3, 3)),
                                            ("A = 3\nB = 5\n", (2, 4))])
def test_weighted_and_lexicographic_each_win_on_their_own_terms(devices, shape):
    """Enumeration is exact for both objectives: the weighted result has the least
    linear + quadratic ppm, the lexicographic one the least linear error."""
    base = (f"[devices]\n{devices}[array]\nrows = {shape[0]}\ncolumns = {shape[1]}\n"
            'dummies = "none"\n[gradient]\nlinear_ppm_per_um = 0.5\n'
            "quadratic_ppm_per_um2 = 20\n")
    lex = _arrange(base).keys
    wtd = _arrange(base + '[search]\nobjective = "weighted"\n').keys

    def total(k):
        return k.linear_um * 0.5 + k.quadratic_ppm

    assert total(wtd) <= total(lex) + 0.01
    assert lex.linear_um <= wtd.linear_um + 1e-12


def test_near_symmetric_construction_reaches_the_single_unit_bound():
    """Two one-unit devices on an even grid: side by side at the centre, mirrors to the
    largest device, everything else on mirrored pairs, gives a worst pair of exactly one
    pitch, the bound (two distinct slots are at least a pitch apart)."""
    from placer.search import near_symmetric_assignments

    counts = (1, 1, *(2 ** b for b in range(1, 10)))
    prob = Problem(counts, 32, 32, pitch_um=(3.0, 2.0), corr_sigma_ppm=0.0)
    starts = near_symmetric_assignments(prob)
    assert len(starts) == 2
    best = min(evaluate(prob, a).linear_um for a, _ in starts)
    assert best == pytest.approx(2.0, abs=1e-12)
    for assign, _ in starts:
        assert np.array_equal(np.bincount(assign[assign >= 0]), counts)
