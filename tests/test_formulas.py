"""Budget and model formulas against values worked out here, apart from the code.

Every expected value below is computed in the test from first principles (positions,
centroids, the definitions quoted), never by calling the function under test, so a wrong
factor in a formula fails a test.
"""

import numpy as np
import pytest

from placer.io.pattern import parse_pattern
from placer.jobs.load import parse_spec
from placer.model.budget import budget
from placer.model.grade import grade_pattern

MIRROR = """
[devices]
MREF = 2
MOUT = 4
[array]
pitch_um = [1.0, 1.0]
[unit]
width_um = 2.0
length_um = 1.0
[gradient]
vt_mv_per_mm = 0.5
beta_pct_per_mm = 0.5
[correlated]
sigma_ppm = {corr}
length_um = 4.0
[electrical]
vov_v = 0.2
lambda_per_v = 0.0
a_vt_mv_um = {avt}
a_beta_pct_um = {abeta}
mc_samples = 2
[electrical.vds_v]
MREF = 1.0
MOUT = 1.0
"""


def _mirror(corr=0.0, avt=5.0, abeta=1.0, text="MREF MOUT MOUT MREF MOUT MOUT"):
    spec = parse_spec(MIRROR.format(corr=corr, avt=avt, abeta=abeta), "m.toml")
    pattern = parse_pattern(text).reordered(spec.devices)
    grade = grade_pattern(pattern, spec)
    return budget(pattern, spec, grade), grade, spec


def test_mirror_gradient_term_hand_worked():
    """MREF at x = 0, 3 and MOUT at 1, 2, 4, 5 um: centroids 1.5 and 3 um, 1.5 um apart.
    Drain-current gradient g_beta + (gm/ID) g_VT = 0.5 %/mm + (2 / 0.2 V)(0.5 mV/mm)
    = 0.5 + 0.5 = 1.0 %/mm (square law gm/ID = 2/V_ov; textbook small-signal relation
    dI/I = dbeta/beta - (gm/ID) dVT, worst case). Error 1.5e-3 mm x 1.0 %/mm = 0.0015 %.
    Curvature: second moments about the centre 2.5 um are 3.25 (MREF) and 2.75 um^2
    (MOUT), so the worst Hessian of norm 0.02 ppm/um^2 gives 0.02/2 x 0.5 = 0.005 ppm."""
    b, grade, spec = _mirror()
    (line,) = b.lines
    assert line.gradient_pct == pytest.approx(0.0015, rel=1e-12)
    assert line.quadratic_pct == pytest.approx(0.005e-4, rel=1e-9)
    assert spec.gradient.linear_ppm_per_um == pytest.approx(10.0)
    (pair,) = grade.pairs
    assert pair.linear_ppm == pytest.approx(15.0, rel=1e-12)


def test_mirror_correlated_term_is_the_direct_quadratic_form():
    """With the area-law coefficients near zero the random part is the correlated field
    alone: sigma = sigma_c sqrt(w'Kw) with K_ij = exp(-|x_i - x_j| / 4 um) and w = +1/2 on
    MREF, -1/4 on MOUT (the definition of the variance of a difference of means)."""
    b, _, _ = _mirror(corr=1000.0, avt=1e-9, abeta=1e-9)
    x = np.arange(6.0)
    w = np.array([0.5, -0.25, -0.25, 0.5, -0.25, -0.25])
    k = np.exp(-np.abs(x[:, None] - x[None, :]) / 4.0)
    want = 1000.0 * np.sqrt(w @ k @ w) * 1e-4          # ppm -> %
    (line,) = b.lines
    assert line.random_sigma_pct == pytest.approx(want, rel=1e-9)


def test_mirror_white_term_is_the_area_law_in_current():
    """Area law (Pelgrom et al. 1989): device of area A has sigma(dVT) = A_VT / sqrt(2A)
    as its share; MREF 2 um^2 x 2 units = 4 um^2, MOUT 8 um^2. sigma(dI/I)^2 =
    sigma_beta^2 + (gm/ID)^2 sigma_VT^2 with gm/ID = 10/V."""
    b, _, _ = _mirror(corr=0.0, avt=5.0, abeta=1.0)
    s_vt = 5.0 * np.sqrt((1 / 4 + 1 / 8) / 2) * 1e-3      # V
    s_beta = 1.0 * np.sqrt((1 / 4 + 1 / 8) / 2)           # %
    want = np.hypot(s_beta, 10.0 * s_vt * 100.0)          # %
    (line,) = b.lines
    assert line.random_sigma_pct == pytest.approx(want, rel=1e-12)


def test_mirror_monte_carlo_matches_the_area_law_when_beta_dominates():
    """The budget's Monte Carlo of device-level draws (each device's beta and VT with
    variance A^2 / (2 area)) against the area law (Pelgrom et al. 1989) when the beta
    term carries nearly all of it: A_beta = 2 %um, A_VT = 0.05 mVum."""
    text = MIRROR.format(corr=0.0, avt=0.05, abeta=2.0).replace("mc_samples = 2",
                                                                  "mc_samples = 60000")
    spec = parse_spec(text, "m.toml")
    pattern = parse_pattern("MREF MOUT MOUT MREF MOUT MOUT").reordered(spec.devices)
    (line,) = budget(pattern, spec, grade_pattern(pattern, spec)).lines
    s_beta = 2.0 * np.sqrt((1 / 4 + 1 / 8) / 2)            # %, MREF 4 um^2, MOUT 8 um^2
    s_vt = 0.05 * np.sqrt((1 / 4 + 1 / 8) / 2) * 1e-3      # V
    want = np.hypot(s_beta, 10.0 * s_vt * 100.0)           # gm/ID = 2 / 0.2 V
    assert s_beta / want > 0.99
    assert line.random_sigma_pct == pytest.approx(want, rel=1e-12)
    assert line.mc_std_pct == pytest.approx(want, rel=0.015)


def test_mirror_dominant_term_is_the_curvature_of_a_centred_layout():
    """MOUT at 0, 2, 3, 5 um and MREF at 1, 4 um share the centroid 2.5 um: no linear
    term, a curvature term (second moments 3.25 and 2.25 um^2), and with the area-law
    coefficients and the correlated field near zero the gradient line (linear plus
    curvature) is the largest share of the budget."""
    b, _, _ = _mirror(corr=0.0, avt=1e-9, abeta=1e-9, text="MOUT MREF MOUT MOUT MREF MOUT")
    (line,) = b.lines
    assert line.gradient_pct == pytest.approx(0.0, abs=1e-15)
    assert line.quadratic_pct == pytest.approx(1e-4 * 0.02 / 2 * 1.0, rel=1e-9)
    assert line.dominant == "gradient"


def test_resistor_budget_gradient_hand_worked():
    """Resistors at 20 ppm/um: RA at x = 0, 1, 4 (centroid 5/3), RB at 2, 3 (2.5): 0.8333 um
    apart, so 16.667 ppm = 0.0016667 %."""
    spec = parse_spec('kind = "res"\n[devices]\nRA = 3\nRB = 2\n[array]\n'
                      'pitch_um = [1.0, 1.0]\n[gradient]\nlinear_ppm_per_um = 20.0\n'
                      '[electrical]\nreference = "RB"\n', "r.toml")
    pattern = parse_pattern("RA RA RB RB RA").reordered(spec.devices)
    b = budget(pattern, spec, grade_pattern(pattern, spec))
    (line,) = b.lines
    assert line.gradient_pct == pytest.approx(20.0 * (2.5 - 5 / 3) * 1e-4, rel=1e-12)
    # a resistor has no channel-length modulation: the range is the gradient lines and
    # k sigma either side of zero (the budget's definition)
    assert line.clm_pct == 0.0
    spread = line.gradient_pct + line.quadratic_pct + b.k_sigma * line.random_sigma_pct
    assert line.total_high_pct == pytest.approx(spread, rel=1e-12)
    assert line.total_low_pct == pytest.approx(-spread, rel=1e-12)


def _endpoint_inl(levels):
    """IEEE Std 1658 end-point INL: deviation from the line through the end levels, in
    units of that line's step."""
    n = len(levels)
    lsb = (levels[-1] - levels[0]) / (n - 1)
    return (levels - (levels[0] + lsb * np.arange(n))) / lsb


def test_dac_linear_gradient_inl_hand_worked():
    """Two-bit DAC (C0 = 1, C1 = 2 units, termination CT = 1) in one row at 5 ppm/um:
    each capacitor's relative error is g (c_d - C) along x (the worst direction for one
    row); the levels V(k) = sum bits C_b / sum C over k = 0..3 and the end-point INL are
    computed here directly."""
    spec = parse_spec('kind = "cap"\n[devices]\nCT = 1\nC0 = 1\nC1 = 2\n[array]\n'
                      'pitch_um = [1.0, 1.0]\n[gradient]\nlinear_ppm_per_um = 5.0\n'
                      'quadratic_ppm_per_um2 = 0.0\n[correlated]\nsigma_ppm = 0.0\n'
                      '[electrical]\ntermination = "CT"\nmc_samples = 2\n', "c.toml")
    pattern = parse_pattern("C1 C0 CT C1").reordered(spec.devices)
    b = budget(pattern, spec, grade_pattern(pattern, spec))
    x = {"C1": (0 + 3) / 2, "C0": 1.0, "CT": 2.0}
    centre = 1.5
    best = 0.0
    for sign in (1, -1):                      # along +x or -x
        err = {d: sign * 5e-6 * (x[d] - centre) for d in x}
        c0, c1, ct = 1 * (1 + err["C0"]), 2 * (1 + err["C1"]), 1 * (1 + err["CT"])
        total = c0 + c1 + ct
        levels = np.array([0, c0, c1, c0 + c1]) / total
        best = max(best, float(np.abs(_endpoint_inl(levels)).max()))
    assert b.worst_gradient_inl_lsb == pytest.approx(best, rel=1e-6)
    assert b.quadratic_inl_lsb == pytest.approx(0.0, abs=1e-15)


def test_dac_white_noise_against_a_direct_simulation():
    """Random DNL of a two-bit DAC with white unit noise only: per unit N(0, s) with
    s = A / sqrt(2 * unit area) (area law), averaged per capacitor; the worst |DNL|'s
    mean over 40 000 draws, simulated here unit by unit, matches the budget's within its
    statistical spread."""
    spec = parse_spec('kind = "cap"\n[devices]\nCT = 1\nC0 = 1\nC1 = 2\n[array]\n'
                      'pitch_um = [1.0, 1.0]\n[unit]\nwidth_um = 2.0\nlength_um = 1.5\n'
                      '[correlated]\nsigma_ppm = 0.0\n[mismatch]\na_param_pct_um = 2.0\n'
                      '[electrical]\ntermination = "CT"\nmc_samples = 40000\n', "c.toml")
    pattern = parse_pattern("C1 C0 CT C1").reordered(spec.devices)
    b = budget(pattern, spec, grade_pattern(pattern, spec))
    rng = np.random.default_rng(7)
    s = 2.0e-2 / np.sqrt(2.0 * 3.0)                    # unit area 2 x 1.5 um^2
    units = rng.normal(0.0, s, (40000, 4))             # C1, C0, CT, C1
    c1 = 2 * (1 + units[:, [0, 3]].mean(1))
    c0 = 1 + units[:, 1]
    ct = 1 + units[:, 2]
    total = c0 + c1 + ct
    levels = np.stack([np.zeros_like(c0), c0, c1, c0 + c1], 1) / total[:, None]
    lsb = (levels[:, -1] - levels[:, 0]) / 3
    dnl = np.diff(levels, axis=1) / lsb[:, None] - 1
    worst = np.abs(dnl).max(1)
    assert b.mc_dnl_mean_lsb == pytest.approx(worst.mean(), rel=0.03)


def test_grade_monte_carlo_exact_figure_keeps_gradient_and_hessian_terms():
    """The exact standard deviation of a pair's error under random gradients: a Gaussian
    gradient vector with E|g|^2 = G^2 contributes (G |dc|)^2 / 2, a Gaussian symmetric
    Hessian with E||H||_F^2 = h^2 contributes (h ||dM|| / 2)^2 / 3 (isotropy: the variance
    of a projection); with the random parts near zero these two must make the figure."""
    spec = parse_spec("[devices]\nA = 4\nB = 2\n[array]\npitch_um = [1.0, 1.0]\n"
                      "[gradient]\nlinear_ppm_per_um = 10.0\nquadratic_ppm_per_um2 = 4.0\n"
                      "[correlated]\nsigma_ppm = 0.0\n[mismatch]\na_param_pct_um = 1e-9\n"
                      "[monte_carlo]\nsamples = 20000\nseed = 3\n", "s.toml")
    pattern = parse_pattern("A A A B B A").reordered(spec.devices)
    g = grade_pattern(pattern, spec)
    dc = 3.5 - 2.0                     # A at 0, 1, 2, 5 um; B at 3, 4 um
    # second moments about the centre of all units, 2.5 um
    dm = np.mean(np.array([-2.5, -1.5, -0.5, 2.5]) ** 2) - np.mean(np.array([0.5, 1.5]) ** 2)
    want = np.sqrt((10.0 * dc) ** 2 / 2 + (0.5 * 4.0 * dm) ** 2 / 3)
    assert dm == pytest.approx(2.5)
    assert g.monte_carlo is not None
    assert g.monte_carlo.exact_std_ppm[0] == pytest.approx(want, rel=1e-6)
    # and the sampled figure agrees within its standard error (about 1/sqrt(2n))
    assert g.monte_carlo.std_ppm[0] == pytest.approx(want, rel=4 / np.sqrt(2 * 20000))


def test_grade_monte_carlo_exact_figure_with_every_random_term():
    """With every term on, the exact standard deviation adds the variances: the
    gradient's (G |dc|)^2 / 2 and (h ||dM|| / 2)^2 / 3, the correlated sigma (grade's own
    figure, checked against the direct quadratic form elsewhere) squared, and the area law
    per unit, s = A / sqrt(2 W L) (Pelgrom et al. 1989), averaged over each device's units:
    s^2 (1/n_A + 1/n_B). The sampled errors are normal, so the 99th percentile of |error|
    is 2.5758 standard deviations (normal quantile, from memory of the standard table)."""
    spec = parse_spec("[devices]\nA = 4\nB = 2\n[array]\npitch_um = [1.0, 1.0]\n"
                      "[unit]\nwidth_um = 2.0\nlength_um = 1.5\n"
                      "[gradient]\nlinear_ppm_per_um = 10.0\nquadratic_ppm_per_um2 = 4.0\n"
                      "[correlated]\nsigma_ppm = 40.0\nlength_um = 3.0\n"
                      "[mismatch]\na_param_pct_um = 0.5\n"
                      "[monte_carlo]\nsamples = 40000\nseed = 5\n", "s.toml")
    pattern = parse_pattern("A A A B B A").reordered(spec.devices)
    g = grade_pattern(pattern, spec)
    dc, dm = 3.5 - 2.0, 2.5                # as in the test above
    s_unit = 1e4 * 0.5 / np.sqrt(2.0 * 3.0)                 # ppm, unit area 3 um^2
    white = s_unit ** 2 * (1 / 4 + 1 / 2)
    corr = g.pairs[0].correlated_sigma_ppm
    assert corr > 1.0
    want = np.sqrt((10.0 * dc) ** 2 / 2 + (0.5 * 4.0 * dm) ** 2 / 3 + corr ** 2 + white)
    mc = g.monte_carlo
    assert mc is not None
    assert mc.exact_std_ppm[0] == pytest.approx(want, rel=1e-9)
    assert mc.std_ppm[0] == pytest.approx(want, rel=4 / np.sqrt(2 * 40000))
    assert len(mc.abs_p99_ppm) == 1
    assert mc.abs_p99_ppm[0] == pytest.approx(2.5758 * want, rel=0.04)


def _exact_inl_dnl(weights, term, err, err_term, fit):
    """INL and DNL in exact rational arithmetic from the definitions (IEEE Std 1658:
    levels V(k) = sum of the code's capacitors over the total; endpoint line through the
    first and last level, or the least-squares line), rounded only at the end."""
    from fractions import Fraction as F

    caps = [F(w) * (1 + F(e)) for w, e in zip(weights, err, strict=True)]
    total = sum(caps) + F(term) * (1 + F(err_term))
    n_bits = len(caps)
    codes = range(2 ** n_bits)
    ideal = [sum(F(weights[b]) for b in range(n_bits) if k >> b & 1) for k in codes]
    level = [sum(caps[b] for b in range(n_bits) if k >> b & 1) / total for k in codes]
    if fit == "endpoint":
        lsb = (level[-1] - level[0]) / (ideal[-1] - ideal[0])
        off = level[0] - ideal[0] * lsb
    else:
        n = len(level)
        mi, ml = sum(ideal) / n, sum(level) / n
        lsb = (sum((i - mi) * (v - ml) for i, v in zip(ideal, level, strict=True))
               / sum((i - mi) ** 2 for i in ideal))
        off = ml - mi * lsb
    inl = [float((v - (off + i * lsb)) / lsb) for i, v in zip(ideal, level, strict=True)]
    dnl = [float((level[k + 1] - level[k]) / lsb - (ideal[k + 1] - ideal[k]))
           for k in range(len(level) - 1)]
    return np.array(inl), np.array(dnl)


@pytest.mark.parametrize("fit", ["endpoint", "best"])
@pytest.mark.parametrize("size", [1e-2, 1e-6, 1e-9])
@pytest.mark.parametrize("weights", [(1, 2, 4, 8, 16), (1, 2, 3, 6, 11)])
def test_dac_inl_dnl_keeps_tiny_errors_exact(fit, size, weights):
    """Exact rational arithmetic (Python's fractions) as the reference: the budget's INL
    and DNL hold 1e-10 relative even when the capacitors deviate by 1e-9, where levels
    computed in floating point would have lost most digits; binary weights and
    sub-binary (redundant) ones, whose ideal steps are not all one LSB."""
    from placer.model.budget import dac_inl_dnl

    rng = np.random.default_rng(7)
    w = np.array(weights, dtype=float)
    err = rng.normal(0.0, size, len(w))
    e_t = float(rng.normal(0.0, size))
    inl, dnl = dac_inl_dnl(w, 1.0, err, e_t, fit)
    want_i, want_d = _exact_inl_dnl(w.tolist(), 1.0, err.tolist(), e_t, fit)
    scale_i, scale_d = np.abs(want_i).max(), np.abs(want_d).max()
    assert np.abs(inl - want_i).max() <= 1e-10 * scale_i
    assert np.abs(dnl - want_d).max() <= 1e-10 * scale_d


@pytest.mark.parametrize("fit", ["endpoint", "best"])
def test_dac_functions_take_a_batch_of_draws_row_by_row(fit):
    """The Monte Carlo passes many draws at once (leading axis): every batched result
    must equal the same function applied to each draw alone (identity)."""
    from placer.model.budget import dac_inl_dnl, dac_levels, inl_dnl

    rng = np.random.default_rng(5)
    w = np.array([1.0, 2.0, 4.0, 8.0])
    err = rng.normal(0.0, 1e-3, (6, 4))
    e_t = rng.normal(0.0, 1e-3, 6)
    inl, dnl = dac_inl_dnl(w, 1.0, err, e_t, fit)
    caps = w * (1 + err)
    levels = dac_levels(caps, 1.0 + e_t)
    inl2, dnl2 = inl_dnl(levels, fit)
    assert inl.shape == (6, 16) and dnl.shape == (6, 15) and levels.shape == (6, 16)
    for i in range(6):
        one_i, one_d = dac_inl_dnl(w, 1.0, err[i], float(e_t[i]), fit)
        assert np.allclose(inl[i], one_i, rtol=1e-12, atol=1e-15)
        assert np.allclose(dnl[i], one_d, rtol=1e-12, atol=1e-15)
        assert np.allclose(levels[i], dac_levels(caps[i], 1.0 + float(e_t[i])), rtol=1e-15)
        alone_i, alone_d = inl_dnl(levels[i], fit)
        assert np.allclose(inl2[i], alone_i, rtol=1e-9, atol=1e-12)
        assert np.allclose(dnl2[i], alone_d, rtol=1e-9, atol=1e-12)


# ----------------------------------------------------------------- model, by hand
def test_second_moment_tensor_by_hand():
    """Mean r r^T about the centre per device, written out: device 0 at (1, 2) and
    (-1, 0), device 1 at (3, -1)."""
    from placer.model import variation
    xy = np.array([[1.0, 2.0], [-1.0, 0.0], [3.0, -1.0]])
    m = variation.second_moments(xy, np.array([0, 0, 1]), 2)
    want0 = np.mean([np.outer(p, p) for p in xy[:2]], axis=0)      # [[1, 1], [1, 2]]
    want1 = np.outer(xy[2], xy[2])
    assert np.array_equal(m[0], want0) and np.array_equal(m[1], want1)


@pytest.mark.parametrize("dc, err, angle", [
    ((0.0, -2.0), 20.0, 270.0), ((-1.0, 0.0), 10.0, 180.0), ((0.0, 0.0), 0.0, 0.0),
    ((3.0, 4.0), 50.0, float(np.degrees(np.arctan2(4, 3)))),
])
def test_worst_linear_error_and_its_direction(dc, err, angle):
    """|g . dc| is largest for g along dc: G |dc| at the angle of dc, in [0, 360)."""
    from placer.model import variation
    e, a = variation.linear_worst(np.array([dc]), 10.0)
    assert e[0] == pytest.approx(err) and a[0] == pytest.approx(angle)


def test_bowl_error_by_hand():
    """H = (h / sqrt 2) I has Frobenius norm h; the error 0.5 tr(H dM) = (h / (2 sqrt 2))
    (dMxx + dMyy): with h = 4, dM = (3, 7, 5) that is sqrt 2 x 8 = 11.31."""
    from placer.model import variation
    assert variation.bowl_error(np.array([[3.0, 7.0, 5.0]]), 4.0)[0] == pytest.approx(
        4.0 / (2 * np.sqrt(2.0)) * 8.0, rel=1e-15)


@pytest.mark.parametrize("fft", [True, False])
@pytest.mark.parametrize("kernel", ["exponential", "gaussian"])
def test_grid_covariance_on_an_uneven_pitch_with_an_absent_device(kernel, fft, monkeypatch):
    """The grid covariance -- by FFTs, and by K E directly as small grids take it --
    equals the direct double sum over unit pairs (the definition) on a 3 x 4 grid at
    pitch 2 x 3 um with dummies; a device with no unit gets zeros."""
    from placer.model import variation
    monkeypatch.setattr(variation, "DIRECT_SLOTS", 0 if fft else 10_000)
    ids = np.array([[0, 1, -1, 0], [1, 0, 0, -1], [-1, 1, 0, 1]])
    r, c = np.nonzero(ids >= 0)
    xy = np.column_stack([c * 2.0, -r * 3.0])
    dev = ids[r, c]
    k = variation.correlation(np.hypot(*(xy[:, None, :] - xy[None, :, :]).transpose(2, 0, 1)),
                          5.0, kernel)
    want = np.zeros((3, 3))
    for a in range(2):
        for b in range(2):
            want[a, b] = k[np.ix_(dev == a, dev == b)].mean()
    got = variation.grid_device_covariance(ids, (2.0, 3.0), 3, 5.0, kernel)
    assert np.allclose(got, want, rtol=1e-12, atol=1e-15)


def test_edge_units_by_hand():
    """A unit is on an edge when a side faces the outside or an empty slot ('-'); a side
    facing a dummy is shielded (common practice)."""
    from placer.model import variation
    ids = np.array([[-1, -1, -1, -1],
                     [-1, 0, 1, -1],
                     [-1, 1, 0, -2],
                     [-1, -1, -1, -1]])
    assert variation.edge_units(ids, 2).tolist() == [1, 0]      # the unit beside '-' only


@pytest.mark.parametrize("scale", [1.0, 0.004])
@pytest.mark.parametrize("term", ["linear", "hessian", "correlated", "white"])
def test_monte_carlo_field_terms_one_at_a_time(term, scale):
    """Sampled pair errors against the exact variance of each term alone (each term's
    law in monte_carlo_errors' docstring): a Gaussian gradient with E|g|^2 = G^2 gives
    (G |dc|)^2 / 2; a Hessian with E||H||^2 = h^2 (diagonal variance h^2/3, off-diagonal
    h^2/6) gives Var(0.5 tr(H dM)); the correlated field sigma_c^2 w'Kw; white noise
    s^2 w'w. 40 000 samples: the standard deviation agrees within 2 %, the mean is near
    zero (the centroid gap has both components), and sigmas below 1 ppm still count."""
    from placer.model import variation
    xy = np.array([[-1.5, 0.5], [-0.5, -0.5], [0.5, 0.5], [1.5, -0.5], [0.4, 1.5]])
    dev = np.array([0, 1, 1, 0, 0])
    pairs = np.array([[0, 1]])
    kw = {"g_rms_ppm_per_um": 0.0, "h_rms_ppm_per_um2": 0.0, "corr_sigma_ppm": 0.0,
          "corr_length_um": 2.0, "kernel": "exponential", "white_unit_sigma_ppm": 0.0}
    w = np.where(dev == 0, 1 / 3, -1 / 2)
    if term == "linear":
        g = 10.0 * scale
        kw["g_rms_ppm_per_um"] = g
        dc = (w[:, None] * xy).sum(0)
        assert abs(dc[0]) > 0.1 and abs(dc[1]) > 0.1
        var = (g * np.hypot(*dc)) ** 2 / 2
    elif term == "hessian":
        h = 3.0 * scale
        kw["h_rms_ppm_per_um2"] = h
        dxx, dxy, dyy = (w * xy[:, 0] ** 2).sum(), (w * xy[:, 0] * xy[:, 1]).sum(), \
            (w * xy[:, 1] ** 2).sum()
        # error = 0.5 (Hxx dxx + 2 Hxy dxy + Hyy dyy), independent normal entries
        var = 0.25 * (h * h / 3 * dxx ** 2 + 4 * h * h / 6 * dxy ** 2 + h * h / 3 * dyy ** 2)
    elif term == "correlated":
        sc = 100.0 * scale
        kw["corr_sigma_ppm"] = sc
        d = np.hypot(*(xy[:, None, :] - xy[None, :, :]).transpose(2, 0, 1))
        var = sc ** 2 * w @ np.exp(-d / 2.0) @ w
    else:
        sw = 50.0 * scale
        kw["white_unit_sigma_ppm"] = sw
        var = sw ** 2 * (w @ w)
    out = variation.monte_carlo_errors(xy, dev, 2, pairs, samples=40000,
                                   rng=np.random.default_rng(11), batch=300, **kw)
    assert out[:, 0].std() == pytest.approx(np.sqrt(var), rel=0.02)
    assert abs(out[:, 0].mean()) < 0.03 * np.sqrt(var)
    assert np.all(out != 0.0)                # every sample drawn (a zero has probability 0)


def test_exact_moment_sums_survive_int64_overflow():
    """65 536 units in one row, the inner half one device and the outer half another:
    the integer second-moment difference n * na * nb * dM (what pair_second forms before
    its one division) passes 2^63, so the sums must be kept in Python integers; compared
    with float moments (numpy), which are accurate to 1e-9 here."""
    from placer.model import variation
    from placer.model.exact_moments import grid_sums, pair_second

    c = np.arange(65536)
    r = np.zeros_like(c)
    dev = (np.abs(c - 32767.5) > 16384).astype(int)
    sums = grid_sums(r, c, dev, 2)
    got = pair_second(sums, np.array([[0, 1]]), (1.0, 1.0))
    xy = np.column_stack([c, -r]).astype(float)
    m = variation.power_moments(xy - xy.mean(axis=0), dev, 2, 2)
    want = (m[0] - m[1])[None, :]
    assert abs(65536 * 32768 * 32768 * want[0, 0]) > 2 ** 63
    assert np.allclose(got, want, rtol=1e-9, atol=1e-6)


# ----------------------------------------------------------------- budget, by hand
def test_within_tolerance_against_the_normal_distribution():
    """P(|offset + N(0, s)| <= t) from scipy's normal distribution (a reference library),
    and the degenerate s = 0 cases."""
    from scipy.stats import norm

    from placer.model.budget import within_tolerance

    for off, s, t in ((0.3, 0.5, 1.0), (-0.8, 0.2, 0.5), (2.0, 1.0, 1.0)):
        want = norm.cdf((t - off) / s) - norm.cdf((-t - off) / s)
        assert within_tolerance(off, s, t) == pytest.approx(want, rel=1e-12)
    assert within_tolerance(0.5, 0.0, 1.0) == 1.0
    assert within_tolerance(1.0, 0.0, 1.0) == 1.0       # |offset| <= tolerance: inside
    assert within_tolerance(1.5, 0.0, 1.0) == 0.0


def test_dac_levels_and_inl_dnl_by_hand():
    """Levels of a 2-bit DAC with termination: V(k) = sum of the code's caps / total
    (1, 2.1, termination 1: total 4.1). INL and DNL of levels with an offset and of an
    ideal that starts above zero, end-point and least-squares lines (numpy.polyfit as
    the reference fit)."""
    from placer.model.budget import dac_levels, inl_dnl

    v = dac_levels(np.array([1.0, 2.1]), 1.0)
    assert np.allclose(v, [0.0, 1 / 4.1, 2.1 / 4.1, 3.1 / 4.1], rtol=1e-15)
    levels = np.array([0.2, 1.25, 2.2, 3.35, 4.2])
    ideal = np.arange(5.0) + 3.0
    inl, dnl = inl_dnl(levels, "endpoint", ideal)
    lsb = (4.2 - 0.2) / 4
    assert np.allclose(inl, (levels - (0.2 + lsb * np.arange(5))) / lsb, rtol=1e-13)
    assert np.allclose(dnl, np.diff(levels) / lsb - 1, rtol=1e-13)
    slope, icpt = np.polyfit(ideal, levels, 1)
    inl_b, _ = inl_dnl(levels, "best", ideal)
    assert np.allclose(inl_b, (levels - (icpt + slope * ideal)) / slope, atol=1e-12)


def test_budget_percentile_streams_like_numpy():
    """The budget keeps each code's largest 1 % of samples; its 99th percentile equals
    numpy.percentile of all the samples, for sizes where the kept share is 1, 2 and many
    rows."""
    from placer.model.budget import UpperPercentile

    rng = np.random.default_rng(3)
    for n in (1, 2, 3, 150, 2001):
        x = rng.random((n, 4))
        up = UpperPercentile(n, 4)
        for k in range(0, n, 97):
            up.add(x[k:k + 97])
        assert np.allclose(up.value(), np.percentile(x, 99, axis=0), rtol=1e-14)
    assert UpperPercentile(0, 4).value().tolist() == [0.0] * 4      # no samples: zeros


def test_mirror_budget_range_and_share_with_channel_length_modulation():
    """Worst-case range of one output (the budget's definition): clm - grad - quad - k
    sigma .. clm + grad + quad + k sigma, with clm = (1 + lambda V_out)/(1 + lambda V_ref)
    - 1 (the square law's output conductance) and the share within tolerance
    P(|offset + N(0, sigma)| <= tol), offset = |clm| + grad + quad; the Monte Carlo of
    the device-level draws matches the analytic random sigma."""
    from scipy.stats import norm

    text = MIRROR.format(corr=30.0, avt=5.0, abeta=1.0).replace(
        "lambda_per_v = 0.0", "lambda_per_v = 0.08").replace(
        "MOUT = 1.0", "MOUT = 1.6").replace("mc_samples = 2", "mc_samples = 60000")
    text = text.replace("[electrical]\n", "[electrical]\nk_sigma = 2.5\ntolerance_pct = 2.0\n")
    spec = parse_spec(text, "m.toml")
    pattern = parse_pattern("MREF MOUT MOUT MOUT MREF MOUT").reordered(spec.devices)
    grade = grade_pattern(pattern, spec)
    (line,) = budget(pattern, spec, grade).lines
    (pair,) = grade.pairs
    clm = 100.0 * ((1 + 0.08 * 1.6) / (1 + 0.08 * 1.0) - 1)
    grad, quad = 1e-4 * pair.linear_ppm, 1e-4 * pair.quadratic_ppm
    s_vt = 5.0 * np.sqrt((1 / 4 + 1 / 8) / 2) * 1e-3
    s_beta = 1.0 * np.sqrt((1 / 4 + 1 / 8) / 2)
    white = np.hypot(s_beta, 10.0 * s_vt * 100.0)
    sigma = np.hypot(white, 1e-4 * pair.correlated_sigma_ppm)
    assert line.clm_pct == pytest.approx(clm, rel=1e-12)
    assert grad > 0 and quad > 0
    assert line.total_low_pct == pytest.approx(clm - grad - quad - 2.5 * sigma, rel=1e-12)
    assert line.total_high_pct == pytest.approx(clm + grad + quad + 2.5 * sigma, rel=1e-12)
    off = abs(clm) + grad + quad
    want = norm.cdf((2.0 - off) / sigma) - norm.cdf((-2.0 - off) / sigma)
    assert line.within_tolerance == pytest.approx(want, rel=1e-9)
    assert line.ideal_ratio == pytest.approx(2.0)
    assert line.mc_std_pct == pytest.approx(white, rel=0.02)


def test_resistor_budget_white_term_is_the_area_law():
    """Resistors: sigma of the ratio = A sqrt((1/area_a + 1/area_b) / 2) (area law);
    RA 3 units, RB 2 units of 1 um^2, A = 1 %um."""
    spec = parse_spec('kind = "res"\n[devices]\nRA = 3\nRB = 2\n[array]\n'
                      'pitch_um = [1.0, 1.0]\n[correlated]\nsigma_ppm = 0.0\n'
                      '[mismatch]\na_param_pct_um = 1.0\n[electrical]\nreference = "RB"\n',
                      "r.toml")
    pattern = parse_pattern("RA RA RB RB RA").reordered(spec.devices)
    grade = grade_pattern(pattern, spec)
    (line,) = budget(pattern, spec, grade).lines
    want = 1.0 * np.sqrt((1 / 3 + 1 / 2) / 2)
    assert line.random_sigma_pct == pytest.approx(want, rel=1e-12)
    assert grade.pairs[0].white_sigma_ppm == pytest.approx(1e4 * want, rel=1e-12)


def _dac_spec(extra: str) -> str:
    return ('kind = "cap"\n[devices]\nCT = 1\nC0 = 1\nC1 = 2\n[array]\n'
            'pitch_um = [1.0, 1.0]\n' + extra + '[electrical]\ntermination = "CT"\n')


def test_dac_curvature_inl_by_hand():
    """The worst Hessian of norm h on a row of units (y = 0): only its xx part acts, so
    the worst field is H = diag(h, 0) and each capacitor is off by h/2 x its mean x^2
    about the centre of all units (relative); end-point INL and DNL in LSB by hand, in
    exact fractions."""
    from fractions import Fraction as F

    spec = parse_spec(_dac_spec("[gradient]\nlinear_ppm_per_um = 0.0\n"
                                "quadratic_ppm_per_um2 = 2.0\n[correlated]\nsigma_ppm = 0.0\n")
                      + "mc_samples = 2\n", "c.toml")
    pattern = parse_pattern("C1 C0 CT C1").reordered(spec.devices)   # x = 0, 1, 2, 3 um
    b = budget(pattern, spec, grade_pattern(pattern, spec))
    h = 2.0e-6
    r2 = {"C1": (1.5 ** 2 + 1.5 ** 2) / 2, "C0": 0.5 ** 2, "CT": 0.5 ** 2}
    err = {d: 0.5 * h * r2[d] for d in r2}
    caps = [F(1) * (1 + F(err["C0"])), F(2) * (1 + F(err["C1"]))]
    total = sum(caps) + (1 + F(err["CT"]))
    levels = [F(0), caps[0] / total, caps[1] / total, (caps[0] + caps[1]) / total]
    lsb = (levels[3] - levels[0]) / 3
    inl = max(abs(float((v - (levels[0] + k * lsb)) / lsb)) for k, v in enumerate(levels))
    dnl = max(abs(float((levels[k + 1] - levels[k]) / lsb - 1)) for k in range(3))
    assert b.quadratic_inl_lsb == pytest.approx(inl, rel=1e-9)
    assert b.quadratic_dnl_lsb == pytest.approx(dnl, rel=1e-9)


DAC_2D = ("C2 C1 C2\n"
          "C0 CT C2\n"
          "C1 C2 .\n")


def _levels_inl(err, weights=(("C0", 1), ("C1", 2), ("C2", 4)), term="CT"):
    """Endpoint INL of a 3-bit DAC whose capacitors have the given relative errors."""
    caps = [w * (1 + err[name]) for name, w in weights]
    total = sum(caps) + 1 * (1 + err[term])
    levels = np.array([sum(c for b, c in enumerate(caps) if k >> b & 1)
                       for k in range(8)]) / total
    return _endpoint_inl(levels)


def _levels_dnl(err, weights=(("C0", 1), ("C1", 2), ("C2", 4)), term="CT"):
    """End-point DNL of the same 3-bit DAC: each step over the end-point LSB, less one."""
    caps = [w * (1 + err[name]) for name, w in weights]
    total = sum(caps) + 1 * (1 + err[term])
    levels = np.array([sum(c for b, c in enumerate(caps) if k >> b & 1)
                       for k in range(8)]) / total
    lsb = (levels[-1] - levels[0]) / 7
    return np.diff(levels) / lsb - 1


def _positions_2d():
    """Unit centres of DAC_2D: column c at x = c um, row r at y = -r um."""
    pos: dict[str, list[tuple[float, float]]] = {}
    for r, row in enumerate(DAC_2D.split("\n")[:3]):
        for c, tok in enumerate(row.split()):
            if tok != ".":
                pos.setdefault(tok, []).append((float(c), -float(r)))
    return {k: np.array(v) for k, v in pos.items()}


def _budget_2d(linear, quadratic):
    """The budget of DAC_2D (3-bit, termination CT) under the given gradient alone."""
    spec = parse_spec('kind = "cap"\n[devices]\nCT = 1\nC0 = 1\nC1 = 2\nC2 = 4\n'
                      f'[array]\npitch_um = [1.0, 1.0]\n[gradient]\nlinear_ppm_per_um = {linear}\n'
                      f'quadratic_ppm_per_um2 = {quadratic}\n[correlated]\nsigma_ppm = 0.0\n'
                      '[electrical]\ntermination = "CT"\nmc_samples = 2\n', "c.toml")
    pattern = parse_pattern(DAC_2D).reordered(spec.devices)
    return budget(pattern, spec, grade_pattern(pattern, spec))


def test_dac_gradient_inl_in_the_reported_direction_on_a_two_dimensional_array():
    """Eight units and a dummy on a 3 x 3 grid, centroids off both axes: a linear
    gradient g along direction theta gives each capacitor the relative error
    g (cos theta, sin theta) . c_d; the budget's worst direction must carry the
    largest end-point INL over all directions, and the INL it reports there (errors
    measured from the centre of the units, as a field's constant part is a common scale
    only to first order)."""
    b = _budget_2d(linear=5.0, quadratic=0.0)
    pos = _positions_2d()
    centre = np.concatenate(list(pos.values())).mean(0)        # of the eight units
    cen = {k: v.mean(0) - centre for k, v in pos.items()}

    def worst(theta):
        u = np.array([np.cos(theta), np.sin(theta)])
        return float(np.abs(_levels_inl({d: 5e-6 * u @ c for d, c in cen.items()})).max())

    every = [worst(t) for t in np.radians(np.arange(0.0, 360.0, 1.0))]
    assert b.worst_gradient_inl_lsb == pytest.approx(max(every), rel=1e-6)
    assert worst(np.radians(b.worst_direction_deg)) == pytest.approx(max(every), rel=1e-6)
    # the reported direction is not one that a mirror image of the array would share
    assert abs(np.sin(2 * np.radians(b.worst_direction_deg))) > 0.05


def _hessian_lattice(n: int = 4000):
    """Second-moment samples of each capacitor of the 3 x 3 grid about the centre of
    its eight units, and ``n`` unit vectors spread evenly on the sphere (a Fibonacci
    lattice) that scale to Hessians of a given norm."""
    pos = _positions_2d()
    centre = np.concatenate(list(pos.values())).mean(0)
    moments = {d: ((p - centre)[:, 0] ** 2, (p - centre)[:, 0] * (p - centre)[:, 1],
                   (p - centre)[:, 1] ** 2) for d, p in pos.items()}
    k = np.arange(n) + 0.5
    z = 1 - 2 * k / n
    phi = np.pi * (1 + 5 ** 0.5) * k
    u = np.column_stack([np.sqrt(1 - z * z) * np.cos(phi), np.sqrt(1 - z * z) * np.sin(phi), z])
    return moments, u


def test_dac_curvature_inl_on_a_two_dimensional_array():
    """The worst Hessian of norm h on a 3 x 3 grid, by brute force: fields
    1/2 r^T H r over 4000 Hessians spread evenly on the sphere a^2 + 2 b^2 + c^2 = h^2
    (a Fibonacci lattice), each capacitor off by its units' mean field about the centre
    of all eight units, end-point INL and DNL of the levels. The budget's worst must lie
    at or above every sample, and within the lattice's spacing of the largest."""
    b = _budget_2d(linear=0.0, quadratic=2.0)
    moments, u = _hessian_lattice()
    h = 2.0e-6
    inl_max = dnl_max = 0.0
    for ua, ub, uc in u:
        a, bb, c = h * ua, h * ub / np.sqrt(2.0), h * uc
        err = {d: float(np.mean(0.5 * (a * xx + 2 * bb * xy + c * yy)))
               for d, (xx, xy, yy) in moments.items()}
        inl_max = max(inl_max, float(np.abs(_levels_inl(err)).max()))
        dnl_max = max(dnl_max, float(np.abs(_levels_dnl(err)).max()))
    assert inl_max * (1 - 1e-6) <= b.quadratic_inl_lsb <= inl_max * 1.005
    assert dnl_max * (1 - 1e-6) <= b.quadratic_dnl_lsb <= dnl_max * 1.005


def test_dac_curvature_curve_is_the_worst_hessians_inl_by_code():
    """The budget picture's curvature curve (it showed none): the INL by code under one
    Hessian of the spec's norm, the one worst for |INL|. By brute force as above: the
    lattice Hessian with the largest |INL| gives, code by code, the same curve (up to the
    sign of H, within the lattice's spacing), and the curve's largest |INL| is the
    budget's quadratic INL."""
    b = _budget_2d(linear=0.0, quadratic=2.0)
    moments, u = _hessian_lattice()
    h = 2.0e-6
    best, best_curve = -1.0, None
    for ua, ub, uc in u:
        a, bb, c = h * ua, h * ub / np.sqrt(2.0), h * uc
        err = {d: float(np.mean(0.5 * (a * xx + 2 * bb * xy + c * yy)))
               for d, (xx, xy, yy) in moments.items()}
        curve = _levels_inl(err)
        if np.abs(curve).max() > best:
            best, best_curve = float(np.abs(curve).max()), curve
    got = np.array(b.quadratic_inl_curve_lsb)
    assert np.abs(got).max() == pytest.approx(b.quadratic_inl_lsb, rel=1e-12)
    sign = np.sign(got @ best_curve)
    assert np.abs(sign * got - best_curve).max() <= 0.03 * best
    assert len(b.quadratic_dnl_curve_lsb) == len(got) - 1


def test_dac_worst_gradient_dnl_is_the_worst_over_every_direction():
    """The DNL line is the largest |DNL| of any direction (it was the DNL in the worst
    INL's direction): brute force over directions, 1 degree apart as the budget scans."""
    b = _budget_2d(linear=5.0, quadratic=0.0)
    pos = _positions_2d()
    centre = np.concatenate(list(pos.values())).mean(0)
    cen = {k: v.mean(0) - centre for k, v in pos.items()}
    every = []
    for t in np.radians(np.arange(0.0, 360.0, 1.0)):
        u = np.array([np.cos(t), np.sin(t)])
        every.append(float(np.abs(_levels_dnl({d: 5e-6 * u @ c for d, c in cen.items()})).max()))
    assert b.worst_gradient_dnl_lsb == pytest.approx(max(every), rel=1e-6)


@pytest.mark.parametrize("devices, text", [
    ("CT = 1\nC0 = 1\nC1 = 2\n", "C1 C0 CT C1"),
    ("C0 = 1\nC1 = 2\nCT = 1\n", ". . C1 C0 CT C1 . ."),  # a bit first, dummies at the ends
])
def test_dac_correlated_noise_against_a_direct_simulation(devices, text):
    """Random INL of a 2-bit DAC from the correlated field alone (area-law part ~0):
    device means drawn here from the unit correlation matrix K_ij = exp(-d/L) (its
    Cholesky factor), sigma_c = 2000 ppm; the mean worst |INL| over 20 000 draws agrees
    with the budget's within 3 %. Dummies carry no device; only the distances between
    the four units matter."""
    spec = parse_spec(_dac_spec("[correlated]\nsigma_ppm = 2000.0\nlength_um = 1.5\n"
                                "[mismatch]\na_param_pct_um = 1e-9\n")
                      .replace("CT = 1\nC0 = 1\nC1 = 2\n", devices)
                      + "mc_samples = 20000\n", "c.toml")
    pattern = parse_pattern(text).reordered(spec.devices)
    b = budget(pattern, spec, grade_pattern(pattern, spec))
    x = np.arange(4.0)
    k = np.exp(-np.abs(x[:, None] - x[None, :]) / 1.5)
    draws = np.random.default_rng(17).standard_normal((20000, 4)) @ np.linalg.cholesky(k).T
    u = 2000e-6 * draws                                   # C1, C0, CT, C1
    c1, c0, ct = 2 * (1 + u[:, [0, 3]].mean(1)), 1 + u[:, 1], 1 + u[:, 2]
    levels = np.stack([np.zeros_like(c0), c0, c1, c0 + c1], 1) / (c0 + c1 + ct)[:, None]
    lsb = (levels[:, -1] - levels[:, 0]) / 3
    inl = (levels - (levels[:, :1] + lsb[:, None] * np.arange(4))) / lsb[:, None]
    assert b.mc_inl_mean_lsb == pytest.approx(np.abs(inl).max(1).mean(), rel=0.03)


# ----------------------------------------------------------------- grade, by hand
def test_grade_device_figures_by_hand():
    """A at (0, 0) and (3, -2) um, B at (1, 0) and (2, -2) um (pitch 1 x 2, rows 0 and 1):
    centroids (1.5, -1) for both, centre (1.5, -1), offsets 0; second moments about the
    centre: A (2.25, 1.5, 1), B (0.25, -0.5, 1) as (xx, xy, yy); orientation counts."""
    spec = parse_spec("[devices]\nA = 2\nB = 2\n[array]\npitch_um = [1.0, 2.0]\n", "s.toml")
    pattern = parse_pattern("A> B< . .\n. . B A>").reordered(spec.devices)
    g = grade_pattern(pattern, spec)
    a, b = g.devices
    assert a.centroid_um == pytest.approx((1.5, -1.0)) and b.centroid_um == pytest.approx(
        (1.5, -1.0))
    assert g.centre_um == pytest.approx((1.5, -1.0))
    assert a.offset_um == pytest.approx(0.0, abs=1e-12)
    assert a.second_moment_um2 == pytest.approx((2.25, -1.5, 1.0))
    assert b.second_moment_um2 == pytest.approx((0.25, -0.5, 1.0))
    assert a.orientation == (2, 0, 0) and b.orientation == (0, 1, 1)


def test_grade_ranks_every_pair_of_a_pattern_in_its_own_device_order():
    """A pattern whose devices come in another order than the spec's (not reordered) is
    graded on every pair of its own devices: three devices, three pairs."""
    spec = parse_spec("[devices]\nA = 2\nB = 2\nC = 2\n", "s.toml")
    pattern = parse_pattern("C B A A B C")
    assert pattern.devices != tuple(spec.devices)
    g = grade_pattern(pattern, spec)
    assert len(g.pairs) == 3
    assert {frozenset((p.a, p.b)) for p in g.pairs} == {frozenset("AB"), frozenset("AC"),
                                                         frozenset("BC")}


def test_grade_offset_of_a_displaced_device():
    """A at x = 0, 1 and B at 2: centre of units 1, A's centroid 0.5: offset 0.5 um."""
    spec = parse_spec("[devices]\nA = 2\nB = 1\n[array]\npitch_um = [1.0, 1.0]\n", "s.toml")
    g = grade_pattern(parse_pattern("A A B").reordered(spec.devices), spec)
    assert g.devices[0].offset_um == pytest.approx(0.5, rel=1e-12)
    assert g.devices[1].offset_um == pytest.approx(1.0, rel=1e-12)


def test_grade_random_figures_by_hand():
    """Area law for the pair (A = 1 %um, unit 2 um^2: A 4 um^2, B 2 um^2) and for VT
    (A_VT = 4 mV um); the correlated sigma from the direct quadratic form over the device
    units only (the dummies at the ends carry no device)."""
    spec = parse_spec("[devices]\nA = 2\nB = 1\n[array]\npitch_um = [1.0, 1.0]\n"
                      "[unit]\nwidth_um = 2.0\nlength_um = 1.0\n[mismatch]\n"
                      "a_param_pct_um = 1.0\na_vt_mv_um = 4.0\n[correlated]\n"
                      "sigma_ppm = 100.0\nlength_um = 2.0\n", "s.toml")
    g = grade_pattern(parse_pattern(". A B A .").reordered(spec.devices), spec)
    (p,) = g.pairs
    assert p.white_sigma_ppm == pytest.approx(1e4 * np.sqrt((1 / 4 + 1 / 2) / 2), rel=1e-12)
    assert p.vt_sigma_mv == pytest.approx(4.0 * np.sqrt((1 / 4 + 1 / 2) / 2), rel=1e-12)
    x = np.array([1.0, 2.0, 3.0])
    w = np.array([0.5, -1.0, 0.5])
    k = np.exp(-np.abs(x[:, None] - x[None, :]) / 2.0)
    assert p.correlated_sigma_ppm == pytest.approx(100.0 * np.sqrt(w @ k @ w), rel=1e-9)


def test_grade_known_direction_and_hot_spot_by_hand():
    """A gradient given at 90 degrees: error g (c_a - c_b) . (0, 1); a hot spot's error is
    the mean of its field over A's units minus over B's (field = p exp(-r / L))."""
    spec = parse_spec("[devices]\nA = 2\nB = 2\n[array]\npitch_um = [1.0, 3.0]\n"
                      "[gradient]\nlinear_ppm_per_um = 5.0\ndirection_deg = 90.0\n"
                      "[gradient.hot_spot]\nx_um = 4.0\ny_um = 1.0\nppm = 200.0\n"
                      "fall_off_um = 2.5\n", "s.toml")
    g = grade_pattern(parse_pattern("A B\nA B").reordered(spec.devices), spec)
    (p,) = g.pairs
    ya = yb = -1.5      # both devices span the two rows: no gap along y
    assert p.known_direction_ppm == pytest.approx(5.0 * (ya - yb), abs=1e-12)

    def field(x, y):
        return 200.0 * np.exp(-np.hypot(x - 4.0, y - 1.0) / 2.5)

    want = (field(0, 0) + field(0, -3)) / 2 - (field(1, 0) + field(1, -3)) / 2
    assert p.hot_spot_ppm == pytest.approx(want, rel=1e-12)


def test_grade_known_direction_along_the_centroid_gap():
    """A at y = 0, B at y = -3 um: at 90 degrees the error is 5 ppm/um x 3 um = 15 ppm;
    at 0 degrees it is zero."""
    for deg, want in ((90.0, 15.0), (0.0, 0.0), (270.0, -15.0)):
        spec = parse_spec("[devices]\nA = 2\nB = 2\n[array]\npitch_um = [1.0, 3.0]\n"
                          f"[gradient]\nlinear_ppm_per_um = 5.0\ndirection_deg = {deg}\n",
                          "s.toml")
        g = grade_pattern(parse_pattern("A A\nB B").reordered(spec.devices), spec)
        assert g.pairs[0].known_direction_ppm == pytest.approx(want, abs=1e-12)


# ------------------------------------------- formula lines each with a test that fails
def _pair_spec(extra: str) -> str:
    return ("[devices]\nMR = 2\nMA = 2\n[array]\nrows = 1\n[unit]\nwidth_um = 2.0\n"
            "length_um = 1.0\n" + extra)


def test_random_sigma_is_the_root_sum_square_of_the_correlated_and_white_parts():
    """Independent random parts add in variance (root-sum-square), not in sigma. Hand
    calculation: A B at 2 um (pitch [2, 2]); the correlated field gives each unit variance
    1 and the pair covariance exp(-2/6), so sigma = 300 sqrt(2 - 2 exp(-1/3)) ppm; the
    area law, A = 1 %um over 2 um2 each, gives 1e4 x 1 / sqrt(2) ppm."""
    from math import exp, hypot, sqrt

    spec = parse_spec("[devices]\nA = 1\nB = 1\n[array]\nrows = 1\npitch_um = [2.0, 2.0]\n"
                      "[unit]\nwidth_um = 2.0\nlength_um = 1.0\n[mismatch]\n"
                      "a_param_pct_um = 1.0\n[correlated]\nsigma_ppm = 300.0\nlength_um = 6.0\n"
                      'kernel = "exponential"\n')
    pair = grade_pattern(parse_pattern("A B"), spec).pairs[0]
    corr = 300.0 * sqrt(2.0 - 2.0 * exp(-2.0 / 6.0))
    white = 1e4 * 1.0 / sqrt(2.0)
    assert pair.correlated_sigma_ppm == pytest.approx(corr, rel=1e-9)
    assert pair.white_sigma_ppm == pytest.approx(white, rel=1e-12)
    assert pair.random_sigma_ppm == pytest.approx(hypot(corr, white), rel=1e-9)


@pytest.mark.parametrize("vov", [0.1, 0.4])
def test_mirror_random_part_weighs_the_threshold_by_gm_over_id(vov):
    """sigma(dI/I) = sqrt(sigma(dbeta/beta)^2 + (gm/ID sigma(dVT))^2) with gm/ID = 2/V_ov
    (square law; Pelgrom et al. 1989 for the area law). Two devices of 4 um2, A_VT = 5 mV um,
    A_beta = 1 %um: sigma(dVT) = 2.5 mV, sigma(dbeta/beta) = 0.5 %; at V_ov = 0.1 V the
    threshold term is 20 x 2.5 mV = 5 %, at 0.4 V it is 1.25 % -- two operating points,
    so A_VT and A_beta cannot stand in for each other unnoticed."""
    from math import hypot

    spec = parse_spec(_pair_spec(f'[electrical]\nreference = "MR"\nvov_v = {vov}\n'
                                 "lambda_per_v = 0.0\na_vt_mv_um = 5.0\na_beta_pct_um = 1.0\n"
                                 "[electrical.vds_v]\nMR = 0.5\nMA = 0.5\n"
                                 "[correlated]\nsigma_ppm = 0.0\n"))
    pattern = parse_pattern("MR MA MA MR")
    (line,) = budget(pattern, spec, grade_pattern(pattern, spec)).lines
    expected = hypot(0.5, (2.0 / vov) * 2.5e-3 * 100.0)          # in %
    assert line.random_sigma_pct == pytest.approx(expected, rel=1e-9)


def test_channel_length_modulation_keeps_its_sign_when_the_output_sits_lower():
    """(1 + lambda V_out)/(1 + lambda V_ref) - 1 is negative for V_out < V_ref: 0.1/V,
    0.5 V against 0.9 V gives 1.05/1.09 - 1 = -3.6697 %."""
    spec = parse_spec(_pair_spec('[electrical]\nreference = "MR"\nvov_v = 0.2\n'
                                 "lambda_per_v = 0.1\n[electrical.vds_v]\nMR = 0.9\nMA = 0.5\n"))
    pattern = parse_pattern("MR MA MA MR")
    (line,) = budget(pattern, spec, grade_pattern(pattern, spec)).lines
    assert line.clm_pct == pytest.approx(100.0 * (1.05 / 1.09 - 1.0), rel=1e-12)
    assert line.clm_pct < 0


def test_mirror_monte_carlo_at_a_larger_overdrive_where_vt_dominates():
    """The same Monte Carlo at V_ov = 0.5 V (gm/ID = 2 / 0.5 V = 4 /V, square law) with
    the VT term carrying nearly all of it: each device's VT draw counts gm/ID x dVT in
    the current. At V_ov = 0.2 V gm/ID x 1 mV is exactly 1 %, which hides a dropped
    gm/ID; here it is 0.4 %."""
    text = (MIRROR.format(corr=0.0, avt=5.0, abeta=0.01)
            .replace("vov_v = 0.2", "vov_v = 0.5").replace("mc_samples = 2",
                                                          "mc_samples = 60000"))
    spec = parse_spec(text, "m.toml")
    pattern = parse_pattern("MREF MOUT MOUT MREF MOUT MOUT").reordered(spec.devices)
    (line,) = budget(pattern, spec, grade_pattern(pattern, spec)).lines
    s_beta = 0.01 * np.sqrt((1 / 4 + 1 / 8) / 2)           # %
    s_vt = 5.0 * np.sqrt((1 / 4 + 1 / 8) / 2) * 1e-3       # V
    want = np.hypot(s_beta, 4.0 * s_vt * 100.0)            # %
    assert 4.0 * s_vt * 100.0 / want > 0.99
    assert line.random_sigma_pct == pytest.approx(want, rel=1e-12)
    assert line.mc_std_pct == pytest.approx(want, rel=0.015)


def test_mirror_dominant_term_weighs_the_random_part_at_k_sigma():
    """The budget names as dominant the largest of its terms, the random one taken at
    k sigma (k = 3 by default): gradient 0.0015 % (as hand-worked above) against a
    random sigma of 0.001 % -- three sigma (0.003 %) dominates, one sigma would not."""
    abeta = 0.001 / np.sqrt((1 / 4 + 1 / 8) / 2)            # s_beta = 0.001 %
    b, _, spec = _mirror(corr=0.0, avt=1e-9, abeta=abeta)
    (line,) = b.lines
    assert spec.electrical.k_sigma == 3
    assert line.gradient_pct == pytest.approx(0.0015, rel=1e-12)
    assert line.random_sigma_pct == pytest.approx(0.001, rel=1e-6)
    assert line.dominant == "random"


def test_monte_carlo_hessian_keeps_its_off_diagonal_term():
    """A at (0, 0) and (1, -1) um, B at (1, 0) and (0, -1): the same centroid and the same
    Mxx and Myy, second moments differing only in Mxy (+0.25 against -0.25 um^2), so
    ||dM||_F^2 = 2 x 0.5^2 = 0.5 um^4. A symmetric Hessian with E||H||_F^2 = h^2 gives the
    pair a variance h^2 ||dM||_F^2 / 12 (isotropy, as above): h = 4 ppm/um^2 makes the
    standard deviation 4 sqrt(0.5 / 12) = 0.8165 ppm, all of it from the xy term."""
    spec = parse_spec("[devices]\nA = 2\nB = 2\n[array]\npitch_um = [1.0, 1.0]\n"
                      "[gradient]\nlinear_ppm_per_um = 0.0\nquadratic_ppm_per_um2 = 4.0\n"
                      "[correlated]\nsigma_ppm = 0.0\n[mismatch]\na_param_pct_um = 1e-9\n"
                      "[monte_carlo]\nsamples = 20000\nseed = 5\n", "s.toml")
    pattern = parse_pattern("A B\nB A\n").reordered(spec.devices)
    g = grade_pattern(pattern, spec)
    want = 4.0 * np.sqrt(0.5 / 12.0)
    assert g.monte_carlo is not None
    assert g.monte_carlo.exact_std_ppm[0] == pytest.approx(want, rel=1e-6)
    assert g.monte_carlo.std_ppm[0] == pytest.approx(want, rel=4 / np.sqrt(2 * 20000))
