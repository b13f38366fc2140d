"""Unary arrays: the INL model (placer/model/unary.py) against a routine written apart
from it, a textbook closed form, Monte Carlo, and the sequence search against the
baselines (placer/search/switching.py)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from placer.model.unary import (
    UnaryFields,
    UnaryLayout,
    cell_errors,
    code_inl,
    correlated_inl_sigma,
    inl,
    random_inl_sigma,
    worst_inl,
)
from placer.search.switching import BASELINES, row_by_row, switching_sequence


def _transfer_inl(values: list[float]) -> list[float]:
    """End-point INL (LSB) straight from the definition: the output at each code is the
    sum of the cells switched on; the line through the outputs at codes 0 and N is the
    ideal; INL is the distance from it in that line's LSB (IEEE Std 1658, from memory).
    Written with plain loops, apart from the model."""
    n = len(values)
    out = [0.0]
    for v in values:
        out.append(out[-1] + v)
    lsb = (out[n] - out[0]) / n
    return [(out[c] - out[0]) / lsb - c for c in range(n + 1)]


def _field(x: float, y: float, theta: float, g_ppm: float, h_ppm: float) -> float:
    """The fields at one point, as a fraction: linear along theta plus the radial bowl of
    Hessian (h / sqrt 2) I (the grade's bowl)."""
    lin = g_ppm * (x * math.cos(theta) + y * math.sin(theta))
    bowl = 0.5 * (h_ppm / math.sqrt(2.0)) * (x * x + y * y)
    return 1e-6 * (lin + bowl)


def _values(lay: UnaryLayout, theta: float, g: float, h: float) -> list[float]:
    vals = []
    for slots in lay.cells:
        pts = []
        for s in slots:
            r, c = divmod(int(s), lay.cols)
            pts.append(((c - (lay.cols - 1) / 2) * lay.pitch_um[0],
                        -(r - (lay.rows - 1) / 2) * lay.pitch_um[1]))
        vals.append(1.0 + sum(_field(x, y, theta, g, h) for x, y in pts) / len(pts))
    return vals


def _random_layout(rng, rows, cols, n, m, pitch=(10.0, 8.0)) -> UnaryLayout:
    slots = rng.permutation(rows * cols)[:n * m]
    return UnaryLayout(rows, cols, pitch, slots.reshape(n, m).astype(np.int64))


@pytest.mark.parametrize("m", [1, 2])
def test_inl_agrees_with_the_transfer_curve_computed_apart(m):
    """The model's first-order INL against the exact end-point INL of the summed cell
    values (the difference is second order in the errors, ~1e-4 of them here)."""
    rng = np.random.default_rng(m)
    g, h = 10.0, 0.02
    for _ in range(5):
        lay = _random_layout(rng, 6, 8, 15, m)
        theta = float(rng.uniform(0, 2 * np.pi))
        model = inl(cell_errors(lay, UnaryFields(g, h), theta))
        exact = np.array(_transfer_inl(_values(lay, theta, g, h)))
        assert model == pytest.approx(exact, abs=1e-3 * np.abs(exact).max() + 1e-12)


def test_worst_inl_is_the_worst_over_every_direction_and_code():
    """The closed form max_c (g |D_c| + |Q_c|) against a scan of 3600 gradient directions
    of the exact transfer-curve INL."""
    rng = np.random.default_rng(7)
    g, h = 10.0, 0.05
    for _ in range(3):
        lay = _random_layout(rng, 5, 6, 15, 2)
        scan = max(max(abs(v) for v in _transfer_inl(_values(lay, t, g, h)))
                   for t in np.linspace(0, 2 * np.pi, 3600, endpoint=False))
        assert worst_inl(lay, UnaryFields(g, h)) == pytest.approx(scan, rel=2e-3)


def test_sequential_switching_of_a_row_has_the_textbook_n_squared_over_8():
    """A row of N cells switched in order under a gradient g along it: INL_c =
    g p c (c - N) / 2, at most g p N^2 / 8 at mid-scale (the sum of an arithmetic
    series; the quadratic growth of row-by-row switching is textbook, from memory)."""
    n, p, g = 64, 10.0, 10.0
    lay = row_by_row(1, n, (p, p), n)
    worst = worst_inl(lay, UnaryFields(g, 0.0))
    assert worst == pytest.approx(1e-6 * g * p * n * n / 8, rel=1e-12)


def test_random_inl_sigma_agrees_with_monte_carlo():
    """Independent cells of relative sigma s: the end-point INL's sigma at each code
    against 20 000 sampled arrays (a Brownian bridge, s sqrt(c (N - c) / N))."""
    rng = np.random.default_rng(0)
    n, s = 31, 1e-3
    e = rng.normal(0.0, s, size=(20000, n))
    sampled = np.cumsum(e - e.mean(axis=1, keepdims=True), axis=1).std(axis=0)
    model = random_inl_sigma(n, s)[1:]
    assert sampled == pytest.approx(model, rel=0.03, abs=1e-6)


def test_correlated_inl_sigma_agrees_with_a_direct_quadratic_form():
    """The correlated part as w' K w (w = 1[i <= c] - c/N), by plain loops over the
    sub-units' covariance."""
    rng = np.random.default_rng(3)
    lay = _random_layout(rng, 4, 5, 9, 2)
    sig, length = 50.0, 20.0
    model = correlated_inl_sigma(lay, sig, length)
    pts = []
    for slots in lay.cells:
        pts.append([((int(s) % lay.cols - (lay.cols - 1) / 2) * lay.pitch_um[0],
                     -(int(s) // lay.cols - (lay.rows - 1) / 2) * lay.pitch_um[1])
                    for s in slots])
    n = len(pts)

    def cov(i: int, j: int) -> float:
        tot = 0.0
        for a in pts[i]:
            for b in pts[j]:
                tot += math.exp(-math.dist(a, b) / length)
        return (1e-6 * sig) ** 2 * tot / (len(pts[i]) * len(pts[j]))

    for c in range(n + 1):
        w = [(1.0 if i < c else 0.0) - c / n for i in range(n)]
        var = sum(w[i] * w[j] * cov(i, j) for i in range(n) for j in range(n))
        assert model[c] == pytest.approx(math.sqrt(max(var, 0.0)), rel=1e-9, abs=1e-15)


def test_the_search_beats_every_baseline_and_row_by_row_tenfold():
    f = UnaryFields(10.0, 0.02)
    res = switching_sequence(8, 8, (10.0, 10.0), 63, f, moves=20000, seed=1)
    for name, fn in BASELINES.items():
        try:
            base = fn(8, 8, (10.0, 10.0), 63, 1)
        except ValueError:
            continue
        assert res.worst_inl_lsb <= worst_inl(base, f) * (1 + 1e-12), name
    assert res.worst_inl_lsb <= 0.1 * worst_inl(row_by_row(8, 8, (10.0, 10.0), 63), f)
    # every cell once, on distinct slots
    assert len(set(res.layout.cells.reshape(-1).tolist())) == 63


def test_quadrant_split_cells_cancel_the_linear_gradient():
    """Four sub-units mirrored about both axes: every cell's mean position is the centre,
    so a linear gradient alone leaves no INL at all."""
    lay = BASELINES["quadrant split"](8, 8, (10.0, 10.0), 15, 4)
    assert worst_inl(lay, UnaryFields(10.0, 0.0)) == pytest.approx(0.0, abs=1e-15)
    assert sorted(lay.cells.reshape(-1).tolist()) == sorted(set(lay.cells.reshape(-1).tolist()))


# -- segmented arrays: unary MSB cells and binary LSB cells on one core ------------------

def _segmented_transfer_inl(lay: UnaryLayout, theta: float, g: float, h: float) -> list[float]:
    """End-point INL (LSB) of a segmented array straight from the definition: every slot
    a unit source of value 1 + its field; code C = U 2^b + L turns on the first U unary
    cells and the binary cells of L's bits (bit j weighs 2^j LSB); INL is the distance of
    the output from the line through codes 0 and full scale, in that line's LSB (IEEE Std
    1658, from memory). Plain loops, apart from the model."""
    def unit(s: int) -> float:
        r, c = divmod(s, lay.cols)
        return 1.0 + _field((c - (lay.cols - 1) / 2) * lay.pitch_um[0],
                            -(r - (lay.rows - 1) / 2) * lay.pitch_um[1], theta, g, h)

    n_bits = len(lay.bits)
    outs = []
    for code in range((lay.n_cells + 1) * 2 ** n_bits):
        u, low = divmod(code, 2 ** n_bits)
        total = sum(unit(int(s)) for cell in lay.cells[:u] for s in cell)
        for j in range(n_bits):
            if low >> j & 1:
                total += sum(unit(int(s)) for s in lay.bits[j])
        outs.append(total)
    fs = len(outs) - 1
    lsb = (outs[fs] - outs[0]) / fs
    return [(outs[c] - outs[0]) / lsb - c for c in range(fs + 1)]


def _random_segmented(rng, rows, cols, n, n_bits, k=1, pitch=(7.0, 9.0)) -> UnaryLayout:
    m = k << n_bits
    slots = rng.permutation(rows * cols)
    cells = slots[:n * m].reshape(n, m).astype(np.int64)
    bits, at = [], n * m
    for j in range(n_bits):
        bits.append(slots[at:at + (k << j)].astype(np.int64))
        at += k << j
    return UnaryLayout(rows, cols, pitch, cells, tuple(bits))


@pytest.mark.parametrize("n_bits,k", [(2, 1), (3, 1), (2, 2)])
def test_segmented_inl_agrees_with_the_transfer_curve_computed_apart(n_bits, k):
    rng = np.random.default_rng(10 * n_bits + k)
    g, h = 10.0, 0.03
    for _ in range(3):
        lay = _random_segmented(rng, 6, 7, 3, n_bits, k)
        theta = float(rng.uniform(0, 2 * np.pi))
        model = code_inl(lay, UnaryFields(g, h), theta)
        exact = np.array(_segmented_transfer_inl(lay, theta, g, h))
        assert len(model) == lay.full_scale + 1 == (3 + 1) * 2 ** n_bits
        assert model == pytest.approx(exact, abs=1e-3 * np.abs(exact).max() + 1e-12)


def test_segmented_worst_inl_is_the_worst_over_every_direction_and_code():
    rng = np.random.default_rng(11)
    g, h = 10.0, 0.05
    for _ in range(2):
        lay = _random_segmented(rng, 6, 6, 3, 3)
        scan = max(max(abs(v) for v in _segmented_transfer_inl(lay, t, g, h))
                   for t in np.linspace(0, 2 * np.pi, 1440, endpoint=False))
        assert worst_inl(lay, UnaryFields(g, h)) == pytest.approx(scan, rel=5e-3)


def test_a_segmented_array_without_bits_is_the_unary_model():
    """No binary bits: code sums reduce to the unary cells' INL (k = m)."""
    rng = np.random.default_rng(12)
    lay = _random_layout(rng, 5, 6, 7, 3)
    f = UnaryFields(10.0, 0.02)
    assert code_inl(lay, f, 0.7) == pytest.approx(inl(cell_errors(lay, f, 0.7)), abs=1e-15)


def test_segmented_random_inl_sigma_agrees_with_monte_carlo():
    """Independent unit sources of relative sigma s, 2 unary cells of 8 units and bits of
    1, 2, 4 units: the end-point INL's sigma at each code against 20 000 sampled arrays,
    beside the bridge s sqrt(C (C_fs - C) / C_fs) of one LSB's sigma (k = 1)."""
    rng = np.random.default_rng(1)
    s = 1e-3
    n_bits, n = 3, 2
    units = n * 8 + 7
    e = rng.normal(0.0, s, size=(20000, units))
    # unit order: unary cell 0's 8, cell 1's 8, then bit 0 (1), bit 1 (2), bit 2 (4)
    owner = [("u", 0)] * 8 + [("u", 1)] * 8 + [("b", 0)] + [("b", 1)] * 2 + [("b", 2)] * 4
    codes = (n + 1) * 2 ** n_bits
    on = np.zeros((codes, units))
    for c in range(codes):
        u, low = divmod(c, 2 ** n_bits)
        for i, (kind, j) in enumerate(owner):
            on[c, i] = (j < u) if kind == "u" else (low >> j & 1)
    out = e @ on.T                                   # (samples, codes): sum of errors on
    fs = codes - 1
    inl_mc = out - np.arange(codes) / fs * out[:, -1:]
    model = random_inl_sigma(fs, s)
    assert inl_mc.std(axis=0)[1:-1] == pytest.approx(model[1:-1], rel=0.03)


def test_segmented_correlated_sigma_agrees_with_a_direct_quadratic_form():
    """The correlated part as w' K w over the unit sources, with
    w_s = (1[s on at C] - C / C_fs) / k, by plain loops over every pair."""
    rng = np.random.default_rng(4)
    lay = _random_segmented(rng, 5, 5, 2, 2, k=2)
    sig, length = 40.0, 15.0
    model = correlated_inl_sigma(lay, sig, length)
    groups = [list(map(int, c)) for c in lay.cells] + [list(map(int, b)) for b in lay.bits]
    units = [s for g in groups for s in g]

    def pos(s: int) -> tuple[float, float]:
        return ((s % lay.cols - (lay.cols - 1) / 2) * lay.pitch_um[0],
                -(s // lay.cols - (lay.rows - 1) / 2) * lay.pitch_um[1])

    fs = lay.full_scale
    for c in range(fs + 1):
        u, low = divmod(c, 4)
        on = set(s for g in groups[:u] for s in g)
        for j in range(2):
            if low >> j & 1:
                on |= set(groups[len(lay.cells) + j])
        w = {s: ((s in on) - c / fs) / 2 for s in units}
        var = sum(w[a] * w[b] * (1e-6 * sig) ** 2 * math.exp(-math.dist(pos(a), pos(b))
                                                               / length)
                  for a in units for b in units)
        assert model[c] == pytest.approx(math.sqrt(max(var, 0.0)), rel=1e-9, abs=1e-15)


def test_segmented_search_beats_its_baselines_and_keeps_every_unit_once():
    f = UnaryFields(10.0, 0.02)
    res = switching_sequence(8, 8, (10.0, 10.0), 7, f, sub_units=8, binary_bits=3,
                             moves=6000, seed=2)
    lay = res.layout
    for name, fn in BASELINES.items():
        try:
            base = fn(8, 8, (10.0, 10.0), 7, 8, 3)
        except ValueError:
            continue
        assert res.worst_inl_lsb <= worst_inl(base, f) * (1 + 1e-12), name
    assert [len(b) for b in lay.bits] == [1, 2, 4]
    used = lay.active().tolist()
    assert len(used) == 7 * 8 + 7 == len(set(used))
    assert res.worst_inl_lsb == pytest.approx(worst_inl(lay, f), rel=1e-12)


def test_segmented_repair_lowers_the_worst_inl_and_moves_whole_sub_units():
    from placer.search.switching import repair_sequence

    f = UnaryFields(10.0, 0.02)
    lay = row_by_row(6, 6, (10.0, 10.0), 3, 8, 3)
    fix = repair_sequence(lay, f, max_swaps=2)
    assert len(fix.swaps) == 2
    assert fix.after_lsb < fix.before_lsb == pytest.approx(worst_inl(lay, f), rel=1e-12)
    assert fix.after_lsb == pytest.approx(worst_inl(fix.layout, f), rel=1e-12)
    assert [len(b) for b in fix.layout.bits] == [1, 2, 4]


def test_the_quad_quadrant_walk_cancels_the_linear_gradient_with_sixteen_sub_units():
    """One sub-unit in each of the sixteen sub-quadrants, mirrored at both levels: every
    cell's centroid is the core's centre (a linear gradient leaves no INL), each slot
    holds at most one sub-unit, and each cell has one sub-unit in each sub-quadrant."""
    from placer.search.switching import quad_quadrant_walk

    lay = quad_quadrant_walk(16, 12, (10.0, 7.0), 12, 16)
    assert worst_inl(lay, UnaryFields(10.0, 0.0)) == pytest.approx(0.0, abs=1e-15)
    flat = lay.cells.reshape(-1).tolist()
    assert len(flat) == len(set(flat)) == 12 * 16
    for cell in lay.cells:
        regions = {(int(s) // 12 // 4, int(s) % 12 // 3) for s in cell}
        assert len(regions) == 16
    with pytest.raises(ValueError):
        quad_quadrant_walk(16, 12, (10.0, 7.0), 13, 16)      # 13 > 4 x 3 slots a region


def test_a_known_hot_spot_joins_the_bowl_in_every_figure():
    """A hot spot (peak ppm at a point given from the centre of the top-left slot, y up,
    falling off as exp(-d / fall-off)) added to every unit source's value: the model's INL
    at a direction and its worst over directions against the transfer curve computed
    apart with the spot in each unit's value."""
    from placer.io.spec import HotSpot

    rng = np.random.default_rng(21)
    g, h = 10.0, 0.03
    hs = HotSpot(x_um=12.0, y_um=-20.0, ppm=300.0, fall_off_um=15.0)
    lay = _random_segmented(rng, 6, 6, 3, 2, k=2)
    fields = UnaryFields(g, h, None, hs)

    def spot(s: int) -> float:
        r, c = divmod(s, lay.cols)
        d = math.hypot(c * lay.pitch_um[0] - hs.x_um, -r * lay.pitch_um[1] - hs.y_um)
        return 1e-6 * hs.ppm * math.exp(-d / hs.fall_off_um)

    def exact(theta: float) -> list[float]:
        outs = []
        nb = len(lay.bits)
        for code in range(lay.full_scale + 1):
            u, low = divmod(code, 2 ** nb)
            on = [int(s) for cell in lay.cells[:u] for s in cell]
            on += [int(s) for j in range(nb) if low >> j & 1 for s in lay.bits[j]]
            total = 0.0
            for s in on:
                r, c = divmod(s, lay.cols)
                total += 1.0 + _field((c - (lay.cols - 1) / 2) * lay.pitch_um[0],
                                      -(r - (lay.rows - 1) / 2) * lay.pitch_um[1], theta, g,
                                      h) + spot(s)
            outs.append(total)
        fs = len(outs) - 1
        lsb = (outs[fs] - outs[0]) / fs
        return [(outs[c] - outs[0]) / lsb - c for c in range(fs + 1)]

    theta = 0.9
    want = np.array(exact(theta))
    assert code_inl(lay, fields, theta) == pytest.approx(want, abs=2e-3 * np.abs(want).max())
    scan = max(max(abs(v) for v in exact(t)) for t in np.linspace(0, 2 * np.pi, 720,
                                                                   endpoint=False))
    assert worst_inl(lay, fields) == pytest.approx(scan, rel=5e-3)
    # the spot matters here: without it the worst differs
    assert abs(worst_inl(lay, UnaryFields(g, h)) - worst_inl(lay, fields)) > 0.1 * scan
