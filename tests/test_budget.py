"""Electrical budget against textbook formulas, IEEE 1658 definitions and Monte Carlo."""

import numpy as np
import pytest

from placer.errors import SpecError
from placer.io.pattern import parse_pattern
from placer.jobs.load import parse_spec
from placer.layout.block import wiring_of
from placer.model.budget import (
    budget,
    clm_error,
    current_error,
    current_sigma,
    dac_levels,
    inl_dnl,
    within_tolerance,
)
from placer.model.grade import grade_pattern
from tests.specs import tiny_mirror

MIRROR = """
[devices]
MREF = 2
MOUT = 4
[unit]
width_um = 2.0
length_um = 1.0
[electrical]
vov_v = 0.2
lambda_per_v = {lam}
a_vt_mv_um = 5.0
a_beta_pct_um = 1.0
mc_samples = 40000
[electrical.vds_v]
MREF = 0.7
MOUT = 1.5
"""


def _mirror(lam=0.1):
    spec = parse_spec(MIRROR.format(lam=lam), "m.toml")
    pattern = parse_pattern("MOUT MREF MOUT MOUT MREF MOUT").reordered(spec.devices)
    return budget(pattern, spec, grade_pattern(pattern, spec))


def test_clm_check_value_razavi():
    """Square-law mirror with channel-length modulation (Razavi, Design of Analog CMOS
    Integrated Circuits, current-mirror chapter): I_out/I_ref = (1 + lambda V_out) /
    (1 + lambda V_ref) for equal W/L; lambda 0.1 /V, 1.5 V against 0.7 V gives 1.0748
    (computed from the formula)."""
    assert 1 + clm_error(0.1, 1.5, 0.7) == pytest.approx(1.0748, abs=5e-5)
    (line,) = _mirror().lines
    assert line.clm_pct == pytest.approx(7.4766, abs=1e-3)


def test_square_law_current_error_check_value():
    """Square law (textbook): gm/ID = 2 / V_ov, so dI/I = -2 dVT / V_ov; V_ov = 0.2 V and
    dVT = 1 mV give -1 %."""
    assert current_error(0.0, 1e-3, 2 / 0.2) == pytest.approx(-0.01)


def test_longer_channel_lowers_the_clm_term_common_practice():
    """Common practice (no source): a longer channel lowers lambda and so the mirror error."""
    assert abs(_mirror(0.05).lines[0].clm_pct) < abs(_mirror(0.1).lines[0].clm_pct)
    assert _mirror(0.0).lines[0].clm_pct == 0.0


def test_random_part_follows_pelgrom_for_the_current():
    """Pelgrom et al., IEEE JSSC 1989 (doi:10.1109/JSSC.1989.572629), for the current:
    sigma^2(dI/I) = sigma^2(dbeta/beta) + (gm/ID)^2 sigma^2(dVT); A_VT 5 mV um and A_beta
    1 % um are typical figures (from memory); areas 4 and 8 um^2."""
    (line,) = _mirror(lam=0.0).lines
    s_vt = 5.0 * np.sqrt((1 / 4 + 1 / 8) / 2)      # mV
    s_b = 1.0 * np.sqrt((1 / 4 + 1 / 8) / 2)       # %
    white = current_sigma(s_b, 0.1 * s_vt, 10.0)   # gm/ID = 10 /V; mV x /V = 0.1 %
    corr = line.random_sigma_pct ** 2 - white ** 2
    assert corr >= 0 and corr < 0.01 * white ** 2   # the correlated field is a small add-on
    assert line.random_sigma_pct == pytest.approx(white, rel=0.01)


def test_monte_carlo_sigma_agrees_with_exact():
    """Statistics: a sample std of N normal draws has standard error sigma / sqrt(2N); the
    device-level Monte Carlo must land within 5 of them of the pair formula."""
    spec = parse_spec(MIRROR.format(lam=0.0), "m.toml")
    pattern = parse_pattern("MOUT MREF MOUT MOUT MREF MOUT").reordered(spec.devices)
    (line,) = budget(pattern, spec, grade_pattern(pattern, spec)).lines
    s_vt = 5.0 * np.sqrt((1 / 4 + 1 / 8) / 2)
    s_b = 1.0 * np.sqrt((1 / 4 + 1 / 8) / 2)
    exact = current_sigma(s_b, 0.1 * s_vt, 10.0)
    assert abs(line.mc_std_pct - exact) < 5 * exact / np.sqrt(2 * 40000)


def test_dominant_term_and_cure():
    (line,) = _mirror(0.1).lines
    assert line.dominant == "clm" and "cascode" in line.cure
    (line,) = _mirror(0.0).lines
    assert line.dominant == "random" and "area" in line.cure


def test_within_tolerance_is_the_normal_probability():
    """Normal distribution: P(|N(0,1)| <= 1.96) = 0.95 (standard table)."""
    assert within_tolerance(0.0, 1.0, 1.96) == pytest.approx(0.95, abs=5e-4)
    assert within_tolerance(5.0, 0.0, 1.0) == 0.0


def test_three_bit_dac_hand_worked_ieee_1658():
    """IEEE Std 1658-2011 (DAC terminology; definitions cited from memory): INL(k) is the
    deviation of level k from the end-point line in LSB, DNL(k) the step k -> k+1 in LSB
    minus 1.

    Hand-worked: units 1, 2, 4 plus a termination unit of 1, the 4-unit capacitor 1 % large:
    C = 1, 2, 4.04, total 8.04. V(k) = sum of switched C / 8.04; end-point LSB
    = V(7)/7 = 7.04 / (8.04 * 7).
      step 3 -> 4: (4.04 - 3) / 8.04 / LSB = 1.04 * 7 / 7.04 = 1.034091  -> DNL +0.034091
      other steps: 1 * 7 / 7.04 = 0.994318                              -> DNL -0.005682
      INL(3) = 3 * 7 / 7.04 - 3 = -0.017045, INL(4) = 4.04 * 7 / 7.04 - 4 = +0.017045,
      INL(0) = INL(7) = 0.
    """
    levels = dac_levels(np.array([1.0, 2.0, 4.04]), 1.0)
    inl, dnl = inl_dnl(levels, "endpoint")
    assert dnl[3] == pytest.approx(1.04 * 7 / 7.04 - 1, abs=1e-9)
    assert dnl[0] == pytest.approx(7 / 7.04 - 1, abs=1e-9)
    assert inl[3] == pytest.approx(3 * 7 / 7.04 - 3, abs=1e-9)
    assert inl[4] == pytest.approx(4.04 * 7 / 7.04 - 4, abs=1e-9)
    assert inl[0] == 0.0 and inl[7] == pytest.approx(0.0, abs=1e-12)
    assert np.max(np.abs(inl)) == pytest.approx(0.017045, abs=1e-6)
    assert np.max(np.abs(dnl)) == pytest.approx(0.034091, abs=1e-6)


def test_best_fit_inl_has_zero_mean_and_slope():
    """Least squares (identity): residuals of a best-fit line are orthogonal to 1 and k."""
    inl, _ = inl_dnl(dac_levels(np.array([1.0, 2.0, 4.04]), 1.0), "best")
    k = np.arange(8)
    assert abs(inl.sum()) < 1e-9 and abs((inl * k).sum()) < 1e-9


def test_cap_array_budget_runs_on_a_common_centroid_array():
    spec = parse_spec('kind = "cap"\n[devices]\nCT = 1\nC0 = 1\nC1 = 2\nC2 = 4\n'
                      '[electrical]\ntermination = "CT"\nmc_samples = 500\n', "c.toml")
    pattern = parse_pattern("C2 C1 C2\nCT . C0\nC2 C1 C2").reordered(spec.devices)
    b = budget(pattern, spec, grade_pattern(pattern, spec))
    assert b.bits == ("C0", "C1", "C2") and len(b.gradient_inl_lsb) == 8
    assert b.mc_inl_sigma_lsb > 0 and b.worst_gradient_inl_lsb >= 0


@pytest.mark.parametrize("text, match", [
    ("[devices]\nA = 1\nB = 1\n[electrical]\nlambda_per_v = 0.1\n",
     r"missing vov_v \(overdrive, V\) or gm_id_per_v \(1/V\); \[electrical.vds_v\]"),
    ("[devices]\nA = 1\n[electrical]\nvov_v = 0\nlambda_per_v = 0\n[electrical.vds_v]\nA = 1\n",
     "vov_v must be between 0.05 and 5 V"),
    ("[devices]\nA = 1\nB = 1\n[electrical]\nvov_v = 0.2\nlambda_per_v = 0\n"
     "[electrical.vds_v]\nA = 1\n", r"\[electrical.vds_v\] missing B"),
    ('kind = "cap"\n[devices]\nA = 1\nB = 2\n[electrical]\n', "missing termination"),
    ('kind = "cap"\n[devices]\nA = 1\nB = 2\n[electrical]\ntermination = "A"\n'
     "weights = { B = 3 }\n", "weight 3 does not match its 2 unit cells"),
    ("[devices]\nA = 1\n[unit]\nlength_um = -1\n",
     "length_um must be between 0.001 and 10000 um"),
])
def test_meaningless_or_missing_electrical_values_are_refused(text, match):
    with pytest.raises(SpecError, match=match):
        parse_spec(text, "e.toml")


def test_budget_without_electrical_table_names_the_keys():
    spec = parse_spec("[devices]\nA = 1\nB = 1\n", "e.toml")
    pattern = parse_pattern("A B")
    with pytest.raises(SpecError, match=r"needs an \[electrical\] table with vov_v"):
        budget(pattern, spec, grade_pattern(pattern, spec))


# ------------------------------------------------------------------ the wiring term

_LADDER = """name = "two_step"
kind = "res"
[devices]
RA = 1
RB = 1
[array]
rows = 1
[unit]
width_um = 1.0
length_um = 8.0
[terminals]
RA = { a = "TOP", b = "MID" }
RB = { a = "MID", b = "BOT" }
[electrical]
reference = "RB"
unit_ohm = 1000.0
"""


def _routed(text, scale=1.0, name="s.toml"):
    """Spec, pattern, budget and block of ``text`` arranged and routed, with the spec's
    wire resistances scaled by ``scale``."""
    from dataclasses import replace

    from placer.jobs.arrange import arrange
    from placer.layout.block import layout_of
    from placer.model.budget import budget

    spec = parse_spec(text, name)
    result = arrange(spec, seed=1, time_limit_s=1.0)
    spec = result.spec
    r = spec.routing
    spec = replace(spec, routing=replace(r, metal1_ohm_per_sq=scale * r.metal1_ohm_per_sq,
                                         metal2_ohm_per_sq=scale * r.metal2_ohm_per_sq,
                                         via_ohm=scale * r.via_ohm))
    _, block = layout_of(result.pattern, spec)
    grade = grade_pattern(result.pattern, block.spec)
    return block.spec, result.pattern, budget(result.pattern, block.spec, grade,
                                              wiring_of(block)), block


def test_resistor_wiring_term_is_the_hand_calculation_from_the_independent_checker(tmp_path):
    """Series resistances add (Ohm's law): each device's resistance is its unit's plus the
    wire from each of its ends to that end's pin, read by the independent checker
    (tests/parasitics.py) from the GDSII; the ratio error is
    (R_u + w_A) / (R_u + w_B) - 1. Tenfold wire resistance moves the budget's total by
    exactly the change of that hand-calculated term."""
    from placer.layout.block import library
    from placer.layout.gdswrite import write_gds
    from tests import parasitics as checker

    out = {}
    for scale in (1.0, 10.0):
        spec, pattern, bud, block = _routed(_LADDER, scale)
        path = tmp_path / f"l{scale:g}.gds"
        write_gds(library(block), path)
        r = spec.routing
        fig = {"metal1_ohm_per_sq": r.metal1_ohm_per_sq, "metal2_ohm_per_sq":
               r.metal2_ohm_per_sq, "via_ohm": r.via_ohm, "wire_ff_per_um": 0.1,
               "coupling_ff_per_um": 0.1, "overlap_ff_per_um2": 0.05,
               "metal1_space": block.tools.rules.metal1_space,
               "metal2_space": block.tools.rules.metal2_space}
        taps = checker.measure(path, "templates/layers.toml", fig)["taps"]
        px = spec.array.pitch_um[0]
        col = {spec.devices[int(d)]: c for c, d in enumerate(pattern.ids[0]) if d >= 0}
        wire = {d: sum(t["r_ohm"] for t in taps
                       if abs(t["x"] - col[d] * px) < 1e-6 and abs(t["y"]) < 1e-6
                       and t["r_ohm"] is not None) for d in ("RA", "RB")}
        assert wire["RA"] > 0 and wire["RB"] > 0
        hand = 100.0 * ((1000.0 + wire["RA"]) / (1000.0 + wire["RB"]) - 1.0)
        line = bud.lines[0]
        assert line.wiring_pct == pytest.approx(hand, rel=1e-6, abs=1e-9)
        out[scale] = (line, hand)
    (one, h1), (ten, h10) = out[1.0], out[10.0]
    assert ten.total_high_pct - one.total_high_pct == pytest.approx(h10 - h1, abs=1e-9)
    assert abs(h10) > 5 * abs(h1)


_MIRROR_WIRED = tiny_mirror(lambda_per_v=0.05, unit_current_ua=20.0)


def test_mirror_wiring_term_scales_with_the_wire_resistance_and_enters_the_total():
    """The drops are linear in the wire resistance (Ohm's law over a linear network), so
    tenfold resistance gives a tenfold wiring term, and the total moves by the change."""
    _, _, one, _ = _routed(_MIRROR_WIRED, 1.0)
    _, _, ten, _ = _routed(_MIRROR_WIRED, 10.0)
    a, b = one.lines[0], ten.lines[0]
    assert a.wiring_pct is not None and a.wiring_pct != 0.0
    assert b.wiring_pct == pytest.approx(10.0 * a.wiring_pct, rel=1e-9)
    assert b.total_high_pct - a.total_high_pct == pytest.approx(
        b.wiring_pct - a.wiring_pct, abs=1e-12)


@pytest.mark.parametrize("text", [_MIRROR_WIRED, _LADDER])
def test_no_wire_resistance_means_no_wiring_term(text):
    _, _, bud, _ = _routed(text, 0.0)
    assert all(ln.wiring_pct == 0.0 for ln in bud.lines)


def test_no_coupling_means_no_dac_wiring_term():
    from dataclasses import replace

    from placer.jobs.arrange import arrange
    from placer.layout.block import layout_of
    from placer.model.budget import budget

    text = ('kind = "cap"\n[devices]\nCT = 1\nC0 = 1\nC1 = 2\nC2 = 4\n[electrical]\n'
            'termination = "CT"\nunit_cap_ff = 20.0\nmc_samples = 10\n')
    spec = parse_spec(text, "c.toml")
    result = arrange(spec, seed=1, time_limit_s=1.0)
    grades = []
    for cpl in (0.0, 0.1):
        s = replace(result.spec, routing=replace(result.spec.routing, coupling_ff_per_um=cpl,
                                                 overlap_ff_per_um2=0.0))
        _, block = layout_of(result.pattern, s)
        grades.append(budget(result.pattern, block.spec,
                             grade_pattern(result.pattern, block.spec), wiring_of(block)))
    assert grades[0].wiring_inl_lsb == 0.0 and grades[0].wiring_dnl_lsb == 0.0
    assert grades[1].wiring_dnl_lsb > 0.0


def test_mirror_wiring_term_scales_with_the_finger_current():
    """The wiring network is linear: every IR drop, and so every device's wiring term,
    doubles when the current per finger doubles (superposition), and the drain drops enter
    through channel-length modulation, linearly in lambda -- checked on the
    sample bias mirror, drawn once, at 10 and 20 uA a finger."""
    from dataclasses import replace

    from placer.io.spec import ElectricalSpec
    from placer.layout.block import layout_of
    from tests.helpers import SAMPLES

    spec = parse_spec((SAMPLES / "bias_mirror.toml").read_text(), "bias_mirror.toml")
    pattern = parse_pattern((SAMPLES / "bias_mirror_hand.txt").read_text()).reordered(
        spec.devices)
    _, block = layout_of(pattern, spec)
    e = block.spec.electrical or ElectricalSpec()
    at10 = wiring_of(block, replace(e, unit_current_ua=10.0)).relative
    at20 = wiring_of(block, replace(e, unit_current_ua=20.0)).relative
    assert any(abs(v) > 1e-9 for v in at10.values())
    for d in spec.devices:
        assert at20[d] == pytest.approx(2.0 * at10[d], rel=1e-9, abs=1e-15)
    # the drain's IR drop enters through channel-length modulation, linearly in lambda
    lam = {v: wiring_of(block, replace(e, lambda_per_v=v)).relative for v in (0.0, 0.1, 0.2)}
    step = {d: lam[0.1][d] - lam[0.0][d] for d in spec.devices}
    assert any(abs(v) > 1e-12 for v in step.values())
    for d in spec.devices:
        assert lam[0.2][d] - lam[0.0][d] == pytest.approx(2.0 * step[d], rel=1e-9, abs=1e-15)
