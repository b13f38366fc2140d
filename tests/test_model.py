"""Gradient-error model against identities, closed forms and published laws."""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from placer.io.pattern import format_pattern, parse_pattern, unit_positions
from placer.jobs.load import parse_spec
from placer.model import variation
from placer.model.grade import grade_pattern


def _spec(devices: dict[str, int], extra: str = "") -> object:
    body = "\n".join(f"{k} = {v}" for k, v in devices.items())
    return parse_spec(f"[devices]\n{body}\n{extra}")


def _grade(text: str, extra: str = ""):
    p = parse_pattern(text)
    return grade_pattern(p, _spec(dict(zip(p.devices, p.counts(), strict=True)), extra))


def _thue_morse_row(k: int) -> str:
    n = 2 ** (k + 1)
    return " ".join("A" if bin(i).count("1") % 2 == 0 else "B" for i in range(n))


@pytest.mark.parametrize("k", [1, 2, 3])
def test_thue_morse_split_cancels_to_degree_k_prouhet_1851(k):
    """Prouhet (1851), the Prouhet-Tarry-Escott problem: splitting 0..2^(k+1)-1 by the parity
    of the binary digit sum gives two sets with equal power sums of degree 1..k, and not k+1.
    The model must report zero moment differences to order k and non-zero at order k+1."""
    g = _grade(_thue_morse_row(k), "[gradient]\norder = 5\n")
    (pair,) = g.pairs
    scale = (2 ** (k + 1)) ** np.arange(1, 6)  # moments grow like length^order
    rel = np.array(pair.moment_norms) / scale
    assert np.all(rel[:k] < 1e-12)
    assert rel[k] > 1e-6


def test_abba_has_zero_linear_error_common_practice():
    """Common practice (no source): one row A B B A cancels a linear gradient."""
    (pair,) = _grade("A B B A").pairs
    assert pair.linear_ppm == pytest.approx(0.0, abs=1e-12)


def test_abab_centroid_offset_is_one_pitch_common_practice():
    """Common practice (no source): A B A B leaves the centroids exactly one pitch apart."""
    g = _grade("A B A B", "[array]\npitch_um = [2.5, 1.0]\n")
    (pair,) = g.pairs
    assert pair.centroid_distance_um == pytest.approx(2.5, abs=1e-12)
    assert pair.linear_ppm == pytest.approx(10.0 * 2.5)
    assert pair.linear_worst_angle_deg == pytest.approx(180.0)  # A lies left of B


def test_cross_quad_cancels_linear_in_x_and_y_common_practice():
    """Common practice (no source): the 2x2 cross A B / B A cancels linear gradients."""
    (pair,) = _grade("A B\nB A").pairs
    assert pair.linear_ppm == pytest.approx(0.0, abs=1e-12)


def test_pelgrom_area_law_check_value():
    """Pelgrom, Duinmaijer, Welbers, "Matching properties of MOS transistors", IEEE JSSC 24(5)
    1989, doi:10.1109/JSSC.1989.572629: sigma(dVT) = A_VT / sqrt(WL). A_VT = 5 mV um is a
    typical figure (from memory); WL = 4 um^2 gives 2.5 mV, four units in parallel half that."""
    extra = "[unit]\nwidth_um = 2.0\nlength_um = 2.0\n[mismatch]\na_vt_mv_um = 5.0\n"
    (one,) = _grade("A B", extra).pairs
    assert one.vt_sigma_mv == pytest.approx(2.5)
    (four,) = _grade("A B B A A B B A", extra).pairs
    assert four.vt_sigma_mv == pytest.approx(1.25)


@pytest.mark.parametrize("d, length", [(1.0, 1.0), (3.0, 2.0), (0.5, 4.0)])
def test_exponential_covariance_two_units_closed_form(d, length):
    """Closed form: two unit points a distance d apart under covariance exp(-d/L) have
    var(difference) = 2 (1 - exp(-d/L))."""
    xy = np.array([[0.0, 0.0], [d, 0.0]])
    cov = variation.device_covariance(xy, np.array([0, 1]), 2, length, "exponential")
    var = variation.pair_variance(cov, np.array([[0, 1]]))[0]
    assert var == pytest.approx(2.0 * (1.0 - np.exp(-d / length)), rel=1e-12)


def test_gaussian_covariance_blocks_match_direct_quadratic_form():
    """Identity: E^T K E built in row blocks equals the direct w^T K w with K assembled whole."""
    rng = np.random.default_rng(4358764578823597324)
    xy = rng.uniform(0, 10, (50, 2))
    dev = rng.integers(0, 3, 50)
    cov = variation.device_covariance(xy, dev, 3, 2.0, "gaussian", block=7)
    d = np.linalg.norm(xy[:, None] - xy[None], axis=-1)
    k = np.exp(-((d / 2.0) ** 2))
    w = variation.pair_weights(dev, 3, np.array([[0, 2]]))[:, 0]
    assert variation.pair_variance(cov, np.array([[0, 2]]))[0] == pytest.approx(w @ k @ w)


def test_linear_worst_case_equals_maximum_over_directions():
    """Cauchy-Schwarz: max over unit g of g.dc is |dc|, reached along dc; checked by sampling
    the actual field g.r at the units over 3600 directions."""
    p = parse_pattern("A B C A\nC B A B")
    xy, dev = unit_positions(p, (1.0, 2.0))
    pairs = np.array([[0, 1], [0, 2], [1, 2]])
    cen = variation.centroids(xy, dev, 3)
    worst, angle = variation.linear_worst(cen[pairs[:, 0]] - cen[pairs[:, 1]], 7.0)
    theta = np.radians(np.arange(3600) / 10.0)
    g = 7.0 * np.column_stack([np.cos(theta), np.sin(theta)])
    errs = variation.field_errors(g @ xy.T, dev, 3, pairs)  # (3600, 3)
    assert np.allclose(errs.max(axis=0), worst, rtol=1e-5)
    assert np.allclose(np.degrees(theta[errs.argmax(axis=0)]), angle, atol=0.1)


def test_quadratic_worst_case_equals_maximum_over_hessians():
    """Cauchy-Schwarz on symmetric matrices: max over ||H||_F = h of tr(H D)/2 is h ||D||_F / 2;
    checked by evaluating the field r^T H r / 2 at the units for random unit-norm Hessians."""
    p = parse_pattern("A B B\nB A B\nB B A")
    xy, dev = unit_positions(p, (1.0, 1.5))
    xy_c = xy - xy.mean(axis=0)
    pairs = np.array([[0, 1]])
    m2 = variation.power_moments(xy_c, dev, 2, 2)
    worst = variation.quadratic_worst(m2[[0]] - m2[[1]], 3.0)[0]
    rng = np.random.default_rng(1)
    best = 0.0
    for _ in range(20000):
        h = rng.normal(size=(2, 2))
        h = (h + h.T) / 2
        h *= 3.0 / np.linalg.norm(h)
        field = 0.5 * np.einsum("ni,ij,nj->n", xy_c, h, xy_c)
        best = max(best, float(variation.field_errors(field, dev, 2, pairs)[0]))
    assert best <= worst + 1e-12
    assert best == pytest.approx(worst, rel=1e-2)


_rows = st.integers(1, 4)
_cols = st.integers(2, 6)


@st.composite
def patterns(draw):
    r, c = draw(_rows), draw(_cols)
    cells = draw(st.lists(st.sampled_from(["A", "B", "C", ".", "-"]), min_size=r * c,
                          max_size=r * c))
    if not ({"A", "B"} <= set(cells)):
        cells[0], cells[-1] = "A", "B"
    return "\n".join(" ".join(cells[i * c:(i + 1) * c]) for i in range(r))


def _magnitudes(g):
    return np.array([[p.linear_ppm, p.quadratic_ppm, abs(p.bowl_ppm), *p.moment_norms,
                      p.correlated_sigma_ppm, p.white_sigma_ppm] for p in g.pairs])


@given(patterns())
def test_mirror_and_180_rotation_leave_error_magnitudes_unchanged(text):
    """Property (isometry invariance): error magnitudes depend only on relative geometry."""
    base = parse_pattern(text)
    spec = _spec(dict(zip(base.devices, base.counts(), strict=True)))
    ref = _magnitudes(grade_pattern(base, spec))
    rows = [r.split() for r in text.splitlines()]
    variants = [
        [list(reversed(r)) for r in rows],             # mirror left-right
        list(reversed(rows)),                          # mirror top-bottom
        [list(reversed(r)) for r in reversed(rows)],   # rotate 180 degrees
    ]
    for v in variants:
        p = parse_pattern("\n".join(" ".join(r) for r in v)).reordered(base.devices)
        assert np.allclose(_magnitudes(grade_pattern(p, spec)), ref, rtol=1e-9, atol=1e-9)


@given(patterns(), st.floats(-1e6, 1e6))
def test_constant_field_offset_changes_no_ratio_error(text, c):
    """Identity: each pair's weights sum to zero, so P + c gives the same ratio errors."""
    p = parse_pattern(text)
    xy, dev = unit_positions(p, (1.0, 1.0))
    pairs = np.array([[0, 1]])
    field = np.random.default_rng(0).normal(size=len(dev))
    assert np.allclose(variation.field_errors(field + c, dev, len(p.devices), pairs),
                       variation.field_errors(field, dev, len(p.devices), pairs), atol=1e-6)


def test_monte_carlo_agrees_with_exact_sigma_within_statistical_bound():
    """Statistics: the sample standard deviation of N normal draws has standard error about
    sigma / sqrt(2N); every pair's sampled std must lie within 5 of those of the exact one."""
    extra = ("[gradient]\nlinear_ppm_per_um = 20\nquadratic_ppm_per_um2 = 5\n"
             "[correlated]\nsigma_ppm = 50\nlength_um = 3\n"
             "[monte_carlo]\nsamples = 20000\nseed = 7\n")
    g = _grade("A B C A\nC A B B\nA C B C", extra)
    mc = g.monte_carlo
    assert mc is not None
    for std, exact in zip(mc.std_ppm, mc.exact_std_ppm, strict=True):
        assert abs(std - exact) < 5 * exact / np.sqrt(2 * mc.samples)


def test_round_trip_of_graded_pattern_text():
    """The writer's output parses back to the same pattern (format round trip)."""
    p = parse_pattern("A> B<\n. -\n")
    assert parse_pattern(format_pattern(p)) == p


@pytest.mark.parametrize("n", [2, 5, 40, 256, 300, 1800])
@pytest.mark.parametrize("layout", ["scattered", "clusters"])
def test_spanning_tree_length_is_scipys_minimum_spanning_tree(n, layout):
    """The routing estimate's tree length (dense Prim up to DENSE_PRIM_MAX points, the
    pairs within a growing radius above) against scipy's minimum_spanning_tree over every
    pair written here, an independent reference implementation; the clusters lie far
    apart, so the radius must grow to join them."""
    from scipy.sparse.csgraph import minimum_spanning_tree

    from placer.model.routing_estimate import spanning_tree_length

    rng = np.random.default_rng(n)
    pts = rng.uniform(0, 40, size=(n, 2))
    if layout == "clusters":
        pts[: n // 3] += 500.0
        pts[n // 3: n // 2] += [0.0, 2000.0]
    pts = np.unique(np.round(pts, 1), axis=0)
    d = np.hypot(pts[:, None, 0] - pts[None, :, 0], pts[:, None, 1] - pts[None, :, 1])
    want = float(minimum_spanning_tree(np.triu(d)).sum())
    assert spanning_tree_length(pts) == pytest.approx(want, rel=1e-12)
