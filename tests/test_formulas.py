"""Budget and model formulas against values worked out here, apart from the code.

Every expected value below is computed in the test from first principles (positions,
centroids, the definitions quoted), never by calling the function under test, so a wrong
factor in a formula fails a test.
"""

import numpy as np
import pytest

from placer.budget import budget
from placer.pattern import parse_pattern
from placer.score import grade_pattern
from placer.spec import parse_spec

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
                      'pitch_um = [1.0, 1.0]\n[unit]\nwidth_um = 1.0\nlength_um = 1.0\n'
                      '[correlated]\nsigma_ppm = 0.0\n[mismatch]\na_param_pct_um = 2.0\n'
                      '[electrical]\ntermination = "CT"\nmc_samples = 40000\n', "c.toml")
    pattern = parse_pattern("C1 C0 CT C1").reordered(spec.devices)
    b = budget(pattern, spec, grade_pattern(pattern, spec))
    rng = np.random.default_rng(7)
    s = 2.0e-2 / np.sqrt(2.0 * 1.0)
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
def test_dac_inl_dnl_keeps_tiny_errors_exact(fit, size):
    """Exact rational arithmetic (Python's fractions) as the reference: the budget's INL
    and DNL hold 1e-10 relative even when the capacitors deviate by 1e-9, where levels
    computed in floating point would have lost most digits."""
    from placer.budget import dac_inl_dnl

    rng = np.random.default_rng(7)
    w = np.array([1.0, 1.0, 2.0, 4.0, 8.0, 16.0])[1:]
    err = rng.normal(0.0, size, len(w))
    e_t = float(rng.normal(0.0, size))
    inl, dnl = dac_inl_dnl(w, 1.0, err, e_t, fit)
    want_i, want_d = _exact_inl_dnl(w.tolist(), 1.0, err.tolist(), e_t, fit)
    scale_i, scale_d = np.abs(want_i).max(), np.abs(want_d).max()
    assert np.abs(inl - want_i).max() <= 1e-10 * scale_i
    assert np.abs(dnl - want_d).max() <= 1e-10 * scale_d
