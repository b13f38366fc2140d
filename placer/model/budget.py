"""Electrical error budget: from a placement to mirror current error, DAC INL/DNL, ratios.

Three device kinds, one per spec:

* ``mos`` current mirrors: each output against the reference, in % of its ideal ratio;
  systematic gradient part dI/I = dbeta/beta - (gm/ID) dVT in the worst gradient
  direction, systematic channel-length modulation (1 + lambda V_out)/(1 + lambda V_ref) - 1,
  random part sigma^2 = sigma^2(dbeta/beta) + (gm/ID)^2 sigma^2(dVT) [1] plus the
  correlated field of the model (taken as a current-factor variation);
* ``cap`` weighted capacitor arrays (charge-redistribution DAC): each capacitor's relative
  error from the model, the transfer over every code, INL and DNL in LSB [2] against an
  end-point or best-fit line, worst case over gradient direction and the Monte Carlo sigma
  of the worst INL/DNL over the random parts;
* ``res`` resistor ratios: each resistor against the reference, gradient and random parts.

References
----------
[1] M. J. M. Pelgrom, A. C. J. Duinmaijer, A. P. G. Welbers, "Matching properties of MOS
    transistors", IEEE J. Solid-State Circuits 24(5), 1433-1439, 1989.
    doi:10.1109/JSSC.1989.572629
[2] IEEE Std 1658-2011, "IEEE Standard for Terminology and Test Methods of Digital-to-Analog
    Converter Devices" (INL and DNL definitions).
"""

from __future__ import annotations

from dataclasses import dataclass
from math import erf, sqrt
from typing import Any

import numpy as np
from numpy.typing import NDArray

from placer.errors import SpecError
from placer.io.pattern import Pattern, unit_positions
from placer.io.spec import ElectricalSpec, Spec
from placer.kinds import KINDS
from placer.model import variation
from placer.model.grade import Grade
from placer.model.lde import relative_current

__all__ = [
    "MirrorLine",
    "MirrorBudget",
    "DacBudget",
    "clm_error",
    "current_error",
    "current_sigma",
    "dac_levels",
    "dac_inl_dnl",
    "inl_dnl",
    "within_tolerance",
    "budget",
    "check_electrical",
]

FloatArray = NDArray[np.float64]


def clm_error(lam_per_v: float, vds_out: float, vds_ref: float) -> float:
    """Channel-length-modulation ratio error (1 + lambda V_out)/(1 + lambda V_ref) - 1.

    Examples
    --------
    >>> round(1 + clm_error(0.1, 1.5, 0.7), 4)
    1.0748
    """
    return (1.0 + lam_per_v * vds_out) / (1.0 + lam_per_v * vds_ref) - 1.0


def current_error(dbeta_rel: float, dvt_v: float, gm_id_per_v: float) -> float:
    """Relative drain-current change dI/I = dbeta/beta - (gm/ID) dVT (small signal).

    Examples
    --------
    >>> round(current_error(0.0, 1e-3, 2 / 0.2), 6)   # square law, V_ov = 0.2 V, 1 mV
    -0.01
    """
    return dbeta_rel - gm_id_per_v * dvt_v


def current_sigma(sigma_beta_rel: float, sigma_vt_v: float, gm_id_per_v: float) -> float:
    """sigma(dI/I) = sqrt(sigma^2(dbeta/beta) + (gm/ID)^2 sigma^2(dVT)) [1]."""
    return sqrt(sigma_beta_rel ** 2 + (gm_id_per_v * sigma_vt_v) ** 2)


def within_tolerance(offset: float, sigma: float, tolerance: float) -> float:
    """Fraction of parts with |offset + N(0, sigma)| <= tolerance.

    Examples
    --------
    >>> round(within_tolerance(0.0, 1.0, 1.96), 3)
    0.95
    """
    if sigma <= 0:
        return 1.0 if abs(offset) <= tolerance else 0.0

    def phi(z: float) -> float:
        return 0.5 * (1.0 + erf(z / sqrt(2.0)))

    return phi((tolerance - offset) / sigma) - phi((-tolerance - offset) / sigma)


def dac_levels(caps: FloatArray, termination: float | FloatArray) -> FloatArray:
    """Output of a charge-redistribution DAC for every code, as a fraction of the reference.

    ``caps`` holds the switched capacitors from the least significant bit up (shape
    (..., n_bits)); ``termination`` the unswitched one. Code k connects bit b to the
    reference when (k >> b) & 1, so V(k) = sum_b bit_b C_b / (sum C + C_term).
    """
    n_bits = caps.shape[-1]
    codes = np.arange(2 ** n_bits)
    bits = ((codes[:, None] >> np.arange(n_bits)) & 1).astype(float)   # (codes, bits)
    total = caps.sum(-1) + np.asarray(termination, dtype=float)
    return np.asarray((caps @ bits.T) / total[..., None])


def inl_dnl(levels: FloatArray, fit: str, ideal: FloatArray | None = None
            ) -> tuple[FloatArray, FloatArray]:
    """INL and DNL in LSB of a transfer over codes (last axis), per IEEE Std 1658 [2].

    ``fit`` "endpoint": the LSB and the line run through the first and last level;
    "best": a least-squares line through all levels (gain and offset). ``ideal`` gives
    each code's ideal weight (default: the code itself); DNL(k) is the step from k to
    k + 1 in LSB minus its ideal step.
    """
    n = levels.shape[-1]
    ideal = np.arange(n, dtype=float) if ideal is None else ideal
    if fit == "endpoint":
        lsb = (levels[..., -1:] - levels[..., :1]) / (ideal[-1] - ideal[0])
        line = levels[..., :1] + (ideal - ideal[0]) * lsb
    elif fit == "best":
        a = np.column_stack([ideal, np.ones(n)])
        coef = np.linalg.lstsq(a, np.moveaxis(levels, -1, 0).reshape(n, -1), rcond=None)[0]
        lsb = coef[0].reshape(levels.shape[:-1] + (1,))
        line = (a @ coef).T.reshape(levels.shape)
    else:
        raise ValueError(f"unknown fit {fit!r}")
    inl = (levels - line) / lsb
    dnl = np.diff(levels, axis=-1) / lsb - np.diff(ideal)
    return inl, dnl


def dac_inl_dnl(weights: FloatArray, term_weight: float, err: FloatArray,
                err_term: FloatArray | float, fit: str) -> tuple[FloatArray, FloatArray]:
    """INL and DNL (LSB) of a capacitor DAC whose capacitors deviate by ``err`` (relative,
    shape (..., n_bits); ``err_term`` the termination's): the same figures as
    :func:`inl_dnl` of :func:`dac_levels`, computed from each level's deviation from the
    ideal so that tiny errors keep their digits.

    With I(k) the ideal weight of code k, W the ideal total, E(k) = sum over the code's
    bits of w e and E_T = sum w e + w_T e_T, the level is (I + E) / (W + E_T), off the
    ideal I / W by d = (E W - I E_T) / (W (W + E_T)). A line fitted to the levels is the
    ideal line plus the line fitted to d (slope s), so the LSB is 1/W + s, the INL the
    residual of d over the LSB, and the DNL (diff d - s diff I) / LSB.

    Examples
    --------
    >>> w = np.array([1.0, 2.0, 4.0]); e = np.array([0.0, 0.0, 0.01])
    >>> a = dac_inl_dnl(w, 1.0, e, 0.0, "endpoint")
    >>> b = inl_dnl(dac_levels(w * (1 + e), 1.0), "endpoint")
    >>> bool(np.allclose(a[0], b[0], atol=1e-12) and np.allclose(a[1], b[1], atol=1e-12))
    True
    """
    n_bits = weights.shape[-1]
    codes = np.arange(2 ** n_bits)
    bits = ((codes[:, None] >> np.arange(n_bits)) & 1).astype(float)     # (codes, bits)
    ideal = bits @ weights
    total = float(weights.sum() + term_weight)
    we = np.asarray(err, dtype=float) * weights
    e_codes = we @ bits.T                                                 # (..., codes)
    e_total = we.sum(-1) + term_weight * np.asarray(err_term, dtype=float)
    dev = (e_codes * total - ideal * e_total[..., None]) / (
        total * (total + e_total))[..., None]
    if fit == "endpoint":
        slope = (dev[..., -1:] - dev[..., :1]) / (ideal[-1] - ideal[0])
        resid = dev - dev[..., :1] - (ideal - ideal[0]) * slope
    elif fit == "best":
        ci = ideal - ideal.mean()
        cd = dev - dev.mean(-1, keepdims=True)
        slope = (cd @ ci / (ci @ ci))[..., None]
        resid = cd - ci * slope
    else:
        raise ValueError(f"unknown fit {fit!r}")
    lsb = 1.0 / total + slope
    return resid / lsb, (np.diff(dev, axis=-1) - slope * np.diff(ideal)) / lsb


@dataclass(frozen=True)
class MirrorLine:
    """Error budget of one output (or one resistor) against the reference, in %."""

    device: str
    ideal_ratio: float
    gradient_pct: float
    quadratic_pct: float
    clm_pct: float
    random_sigma_pct: float
    total_low_pct: float
    total_high_pct: float
    within_tolerance: float
    dominant: str
    cure: str
    mc_std_pct: float | None = None
    wiring_pct: float | None = None     # None: not routed (grade of a pattern alone)
    #: layout-dependent effects (diffusion length, well proximity) of MOS fingers
    #: (None: no drawn geometry, or another kind)
    lde_pct: float | None = None


@dataclass(frozen=True)
class MirrorBudget:
    """Mirror or resistor-ratio budget."""

    kind: str
    reference: str
    k_sigma: float
    tolerance_pct: float
    lines: tuple[MirrorLine, ...]
    assumptions: dict[str, Any]


@dataclass(frozen=True)
class DacBudget:
    """Capacitor-array budget: INL/DNL in LSB."""

    bits: tuple[str, ...]
    termination: str | None
    fit: str
    worst_gradient_inl_lsb: float
    worst_gradient_dnl_lsb: float
    quadratic_inl_lsb: float
    quadratic_dnl_lsb: float
    worst_direction_deg: float
    mc_samples: int
    mc_inl_sigma_lsb: float
    mc_dnl_sigma_lsb: float
    mc_inl_mean_lsb: float
    mc_dnl_mean_lsb: float
    gradient_inl_lsb: tuple[float, ...]
    gradient_dnl_lsb: tuple[float, ...]
    mc_inl_p99_lsb: tuple[float, ...]
    mc_dnl_p99_lsb: tuple[float, ...]
    assumptions: dict[str, Any]
    #: INL and DNL by code under the one Hessian (of the spec's norm) that gives the worst
    #: |INL| (its largest value is ``quadratic_inl_lsb``)
    quadratic_inl_curve_lsb: tuple[float, ...] = ()
    quadratic_dnl_curve_lsb: tuple[float, ...] = ()
    wiring_inl_lsb: float | None = None     # None: not routed
    wiring_dnl_lsb: float | None = None


_CURES = {
    "wiring": "wider or doubled shared lines, or equal paths to the pins (layout.parasitics "
              "in report.json shows each terminal's resistance)",
    "gradient": "a better arrangement (common centroid, finer interdigitation)",
    "clm": "a longer channel (lower lambda) or a cascode that equalises the drain voltages",
    "random": "more area (larger W x L per unit, or more units in parallel)",
    "lde": "the same diffusion on both sides of every finger ([unit] diffusion = \"pairs\", "
           "end dummies) and fingers farther from the well edge",
}


@dataclass(frozen=True)
class WiringEffect:
    """Each device's relative error from its wiring (a fraction, not %): its current
    (``mos``), resistance (``res``) or capacitance (``cap``); ``counted`` says what was
    taken in, ``missing`` what the spec must give for a term that is left at zero."""

    relative: dict[str, float]
    counted: str
    missing: str = ""
    #: more the budget prints beside the term (a pair's gate-drain coupling)
    notes: tuple[str, ...] = ()


def check_electrical(spec: Spec) -> ElectricalSpec:
    """The spec's [electrical] table, or a one-line error naming what is missing."""
    e = spec.electrical
    if e is None:
        raise SpecError(f"{spec.source}: an electrical budget needs an [electrical] table with "
                        f"{KINDS[spec.kind].electrical_needs}")
    return e


def budget(pattern: Pattern, spec: Spec, grade: Grade, wiring: WiringEffect | None = None
           ) -> MirrorBudget | DacBudget:
    """The electrical budget of ``pattern`` (in the spec's device order) for its kind;
    with the ``wiring`` term of its routed block (:func:`placer.layout.block.wiring_of`),
    that term too."""
    e = check_electrical(spec)
    if KINDS[spec.kind].budget == "dac":
        return _dac_budget(pattern, spec, e, wiring)
    return _ratio_budget(pattern, spec, grade, e, wiring)


def _pair(grade: Grade, a: str, b: str) -> Any:
    for p in grade.pairs:
        if {p.a, p.b} == {a, b}:
            return p
    raise KeyError((a, b))


def _ratio_budget(pattern: Pattern, spec: Spec, grade: Grade, e: ElectricalSpec,
                  wiring: Any = None) -> MirrorBudget:
    ref = e.reference or spec.devices[0]
    mos = KINDS[spec.kind].quantity == "current"      # a current: gm/ID, V_T and CLM terms
    area = {n: c * spec.unit.area_um2 for n, c in zip(spec.devices, spec.counts, strict=True)}
    count = dict(zip(spec.devices, spec.counts, strict=True))
    rng = np.random.default_rng(e.mc_seed)
    lines = []
    for name in spec.budget_devices():
        if name == ref:
            continue
        p = _pair(grade, name, ref)
        # the one gradient of [gradient]: grade's worst-direction linear error and worst
        # curvature error of the pair, ppm -> %
        grad = 1e-4 * p.linear_ppm
        quad = 1e-4 * p.quadratic_ppm
        if mos:
            gm_id = e.gm_id_per_v
            clm = 100.0 * clm_error(e.lambda_per_v, e.vds_v[name], e.vds_v[ref])
            s_beta = float(variation.pelgrom_sigma(e.a_beta_pct_um, area[name], area[ref]))
            s_vt = float(variation.pelgrom_sigma(e.a_vt_mv_um, area[name], area[ref]))
            white = current_sigma(s_beta, 0.1 * s_vt, gm_id)
            # Monte Carlo of the random part: device-level VT and beta, each device's
            # variance A^2 / (2 area), then the output's current error against the ref
            n_mc = e.mc_samples
            sig_dev_vt = e.a_vt_mv_um / np.sqrt(2.0 * np.array([area[name], area[ref]]))
            sig_dev_b = e.a_beta_pct_um / np.sqrt(2.0 * np.array([area[name], area[ref]]))
            vt = rng.normal(0.0, 1.0, (n_mc, 2)) * sig_dev_vt
            beta = rng.normal(0.0, 1.0, (n_mc, 2)) * sig_dev_b
            mc = (beta[:, 0] - beta[:, 1]) - 0.1 * gm_id * (vt[:, 0] - vt[:, 1])
            mc_std = float(mc.std()) if n_mc > 1 else None
        else:
            clm = 0.0
            white = 1e-4 * p.white_sigma_ppm
            mc_std = None
        corr = 1e-4 * p.correlated_sigma_ppm
        sigma = sqrt(white ** 2 + corr ** 2)
        k = e.k_sigma
        wire = None
        if wiring is not None:
            # the output's error against the reference. mos: first order, the difference
            # (the reference's own shift moves the shared gate, which every output
            # follows); res: resistances add, so the ratio is exact
            a, b = wiring.relative[name], wiring.relative[ref]
            wire = 100.0 * ((a - b) if mos else (1.0 + a) / (1.0 + b) - 1.0)
        lde = None
        if mos and grade.lde is not None:
            # each device's current is the sum over its fingers: the ratio is exact
            ea = relative_current(grade.lde.device(name), e.gm_id_per_v)
            eb = relative_current(grade.lde.device(ref), e.gm_id_per_v)
            lde = 100.0 * ((1.0 + ea) / (1.0 + eb) - 1.0)
        fixed = clm + (wire or 0.0) + (lde or 0.0)        # signed systematic parts
        low = fixed - grad - quad - k * sigma
        high = fixed + grad + quad + k * sigma
        offset = abs(fixed) + grad + quad
        terms = {"gradient": grad + quad, "clm": abs(clm), "random": k * sigma,
                 "wiring": abs(wire or 0.0), "lde": abs(lde or 0.0)}
        dominant = max(terms, key=lambda t: terms[t])
        lines.append(MirrorLine(
            device=name, ideal_ratio=count[name] / count[ref], gradient_pct=grad,
            quadratic_pct=quad, clm_pct=clm,
            random_sigma_pct=sigma, total_low_pct=low, total_high_pct=high,
            within_tolerance=within_tolerance(offset, sigma, e.tolerance_pct),
            dominant=dominant, cure=_CURES[dominant], mc_std_pct=mc_std, wiring_pct=wire,
            lde_pct=lde,
        ))
    assumptions: dict[str, Any] = {"k_sigma": e.k_sigma, "tolerance_pct": e.tolerance_pct,
                                   "gradient": spec.gradient.described,
                                   "gradient_ppm_per_um": spec.gradient.linear_ppm_per_um,
                                   "hessian_norm_ppm_per_um2":
                                       spec.gradient.quadratic_ppm_per_um2}
    if mos:
        assumptions.update({
            "gm_id_per_v": e.gm_id_per_v, "lambda_per_v": e.lambda_per_v,
            "a_vt_mv_um": e.a_vt_mv_um, "a_beta_pct_um": e.a_beta_pct_um,
            "vds_v": dict(e.vds_v), "unit_w_um": spec.unit.width_um,
            "unit_l_um": spec.unit.length_um,
        })
    else:
        assumptions.update({"a_param_pct_um": spec.mismatch.a_param_pct_um})
    if mos and grade.lde is not None:
        assumptions.update({"lde": dict(grade.lde.coefficients),
                            "diffusion": grade.lde.style})
    if wiring is not None:
        assumptions.update({"wiring": wiring.counted, "wiring_missing": wiring.missing,
                            "wiring_notes": list(wiring.notes),
                            "unit_current_ua": e.unit_current_ua, "unit_ohm": e.unit_ohm})
    return MirrorBudget(spec.kind, ref, e.k_sigma, e.tolerance_pct, tuple(lines), assumptions)


class UpperPercentile:
    """The ``q``-th percentile (numpy's linear interpolation) of each column of ``n``
    samples that arrive in batches, keeping only each column's largest
    ``n - floor(q/100 (n - 1)) + 1`` values -- never all samples x columns.

    Examples
    --------
    >>> x = np.random.default_rng(2).random((700, 5))
    >>> up = UpperPercentile(700, 5)
    >>> for k in range(0, 700, 128):
    ...     up.add(x[k:k + 128])
    >>> bool(np.allclose(up.value(), np.percentile(x, 99, axis=0)))
    True
    """

    def __init__(self, n: int, n_cols: int, q: float = 99.0):
        self.n, self.q = n, q
        self.keep = n - int(np.floor(q / 100.0 * (n - 1))) + 1
        self.top = np.zeros((0, n_cols))

    def add(self, batch: FloatArray) -> None:
        """Take a batch of samples (rows)."""
        self.top = np.vstack([self.top, batch])
        if len(self.top) > self.keep:
            self.top = -np.partition(-self.top, self.keep - 1, axis=0)[:self.keep]

    def value(self) -> FloatArray:
        """The percentile of every column (zeros before any sample)."""
        if self.n == 0 or len(self.top) == 0:
            return np.zeros(self.top.shape[1])
        return _upper_percentile(self.top, self.n, self.q)


def _upper_percentile(top: FloatArray, n: int, q: float) -> FloatArray:
    """``np.percentile(all, q, axis=0)`` (linear interpolation) of ``n`` samples per
    column, from ``top``: at least the largest ``n - floor(q/100 (n-1)) + 1`` of each.

    Examples
    --------
    >>> x = np.random.default_rng(1).random((500, 3))
    >>> top = -np.sort(-x, axis=0)[:7]
    >>> bool(np.allclose(_upper_percentile(top, 500, 99.0), np.percentile(x, 99, axis=0)))
    True
    """
    desc = -np.sort(-top, axis=0)                    # largest first: a[j] = desc[n-1-j]
    pos = q / 100.0 * (n - 1)
    lo = int(np.floor(pos))
    hi = min(lo + 1, n - 1)
    a_lo, a_hi = desc[n - 1 - lo], desc[n - 1 - hi]
    return np.asarray(a_lo + (pos - lo) * (a_hi - a_lo), dtype=float)


def _curvature_worst(inl_of: Any, m2: FloatArray, norm: float) -> tuple[float, float]:
    """The largest |INL| and |DNL| over every quadratic field 1/2 r^T H r with
    ||H||_F = ``norm`` (relative per um^2), as grade and the mirror budget take the worst
    Hessian of the spec's norm.

    A device's error is 1/2 H : M_d = a (M_xx / 2) + b M_xy + c (M_yy / 2) with
    H = [[a, b], [b, c]] and M_d its second moments about the centre, and INL and DNL are
    linear in the errors to first order (they are parts per million). So each code's
    value is a I_a + b I_b + c I_c, the I from one field per component at the norm, and
    its largest over a^2 + 2 b^2 + c^2 = norm^2 is sqrt(I_a^2 + I_b^2 / 2 + I_c^2)
    (Cauchy-Schwarz in that norm).
    """
    if norm == 0.0:
        return 0.0, 0.0
    fields = norm * np.stack([0.5 * m2[:, 0, 0], m2[:, 0, 1], 0.5 * m2[:, 1, 1]])
    inl, dnl = inl_of(fields)
    weight = np.array([1.0, 0.5, 1.0])[:, None]
    return (float(np.sqrt((weight * inl ** 2).sum(0)).max()),
            float(np.sqrt((weight * dnl ** 2).sum(0)).max()))


def _curvature_curves(inl_of: Any, m2: FloatArray, norm: float
                      ) -> tuple[FloatArray, FloatArray]:
    """INL and DNL by code under the Hessian of norm ``norm`` that makes the worst |INL|
    (see :func:`_curvature_worst`): at the code k where the bound sqrt(I_a^2 + I_b^2 / 2 +
    I_c^2) is largest, Cauchy-Schwarz is an equality for (a, b, c) proportional to
    (I_a, I_b / 2, I_c) at k; the curves are that one field's INL and DNL at every code."""
    fields = norm * np.stack([0.5 * m2[:, 0, 0], m2[:, 0, 1], 0.5 * m2[:, 1, 1]])
    inl, dnl = inl_of(fields)
    weight = np.array([1.0, 0.5, 1.0])[:, None]
    bound = np.sqrt((weight * inl ** 2).sum(0))
    k = int(np.argmax(bound))
    if norm == 0.0 or bound[k] == 0.0:
        return np.zeros(inl.shape[1]), np.zeros(dnl.shape[1])
    coef = np.array([inl[0, k], 0.5 * inl[1, k], inl[2, k]]) / bound[k]
    return coef @ inl, coef @ dnl


def _dac_budget(pattern: Pattern, spec: Spec, e: ElectricalSpec, wiring: Any = None
                ) -> DacBudget:
    names = list(spec.devices)
    covered = spec.budget_devices()
    term = e.termination
    switched = [n for n in covered if n != term]
    weights = {n: c for n, c in zip(names, spec.counts, strict=True)}
    bits = sorted(switched, key=lambda n: (weights[n], names.index(n)))
    n_dev = len(names)
    idx = [names.index(n) for n in bits]
    t_idx = names.index(term) if term else None
    w = np.array([weights[n] for n in bits], dtype=float)
    w_term = float(weights[term]) if term else 0.0
    codes = np.arange(2 ** len(bits))

    xy, dev = unit_positions(pattern, spec.array.pitch_um)
    centre = variation.array_centre(xy)
    xy_c = xy - centre
    cen = variation.centroids(xy_c, dev, n_dev)
    m2 = variation.second_moments(xy_c, dev, n_dev)

    def inl_of(err: FloatArray) -> tuple[FloatArray, FloatArray]:
        e_term = err[..., t_idx] if t_idx is not None else 0.0
        return dac_inl_dnl(w, w_term, err[..., idx], e_term, e.fit)

    # the gradient of [gradient], its two parts apart, in relative units: a linear field
    # in every direction (the worst INL's direction kept; the worst DNL over all of them)
    g = spec.gradient.linear_ppm_per_um * 1e-6
    theta = np.radians(np.arange(0, 360, 1.0))
    lin = g * (np.cos(theta)[:, None] * cen[None, :, 0] + np.sin(theta)[:, None] * cen[None, :, 1])
    inl, dnl = inl_of(lin)
    worst = np.abs(inl).max(-1)
    k = int(np.argmax(worst))
    q_inl, q_dnl = _curvature_worst(inl_of, m2, spec.gradient.quadratic_ppm_per_um2 * 1e-6)
    q_curve, q_dnl_curve = _curvature_curves(inl_of, m2,
                                             spec.gradient.quadratic_ppm_per_um2 * 1e-6)

    # random parts: correlated device means (exact covariance) and white per device
    c = spec.correlated
    cov = (c.sigma_ppm * 1e-6) ** 2 * variation.grid_device_covariance(
        np.where(pattern.ids >= 0, pattern.ids, -1), spec.array.pitch_um, n_dev, c.length_um,
        c.kernel)
    white_unit = spec.mismatch.a_param_pct_um * 1e-2 / np.sqrt(2.0 * spec.unit.area_um2)
    counts = np.bincount(dev, minlength=n_dev)
    cov = cov + np.diag(white_unit ** 2 / counts)
    vals, vecs = np.linalg.eigh(cov)
    factor = vecs * np.sqrt(np.clip(vals, 0.0, None))
    rng = np.random.default_rng(e.mc_seed)
    n = e.mc_samples
    inl_w, dnl_w = [], []
    # the 99th percentile of |INL| and |DNL| per code, from each code's largest 1 %
    top_i = UpperPercentile(n, len(codes))
    top_d = UpperPercentile(n, len(codes) - 1)
    batch = max(1, 2_000_000 // max(len(codes), 1))
    for start in range(0, n, batch):
        m = min(batch, n - start)
        err = rng.standard_normal((m, n_dev)) @ factor.T
        i_mc, d_mc = inl_of(err)
        inl_w.append(np.abs(i_mc).max(-1))
        dnl_w.append(np.abs(d_mc).max(-1))
        top_i.add(np.abs(i_mc))
        top_d.add(np.abs(d_mc))
    w_inl = w_dnl = None
    if wiring is not None:
        werr = np.array([wiring.relative[n] for n in names])
        wi, wd = inl_of(werr[None, :])
        w_inl, w_dnl = float(np.abs(wi).max()), float(np.abs(wd).max())
    iw = np.concatenate(inl_w) if inl_w else np.zeros(0)
    dw = np.concatenate(dnl_w) if dnl_w else np.zeros(0)
    p99, p99_d = top_i.value(), top_d.value()
    return DacBudget(
        bits=tuple(bits), termination=term, fit=e.fit,
        worst_gradient_inl_lsb=float(np.abs(inl[k]).max()),
        worst_gradient_dnl_lsb=float(np.abs(dnl).max()),
        quadratic_inl_lsb=q_inl,
        quadratic_dnl_lsb=q_dnl,
        worst_direction_deg=float(np.degrees(theta[k])),
        mc_samples=n, mc_inl_sigma_lsb=float(iw.std()) if n > 1 else 0.0,
        mc_dnl_sigma_lsb=float(dw.std()) if n > 1 else 0.0,
        mc_inl_mean_lsb=float(iw.mean()) if n else 0.0,
        mc_dnl_mean_lsb=float(dw.mean()) if n else 0.0,
        gradient_inl_lsb=tuple(float(v) for v in inl[k]),
        gradient_dnl_lsb=tuple(float(v) for v in dnl[k]),
        mc_inl_p99_lsb=tuple(float(v) for v in p99),
        mc_dnl_p99_lsb=tuple(float(v) for v in p99_d),
        quadratic_inl_curve_lsb=tuple(float(v) for v in q_curve),
        quadratic_dnl_curve_lsb=tuple(float(v) for v in q_dnl_curve),
        assumptions={"fit": e.fit, "gradient_ppm_per_um": spec.gradient.linear_ppm_per_um,
                     "hessian_norm_ppm_per_um2": spec.gradient.quadratic_ppm_per_um2,
                     "correlated_sigma_ppm": c.sigma_ppm, "a_param_pct_um":
                     spec.mismatch.a_param_pct_um, "unit_area_um2": spec.unit.area_um2,
                     "mc_seed": e.mc_seed,
                     **({"wiring": wiring.counted, "wiring_missing": wiring.missing,
                         "unit_cap_ff": e.unit_cap_ff} if wiring is not None else {})},
        wiring_inl_lsb=w_inl, wiring_dnl_lsb=w_dnl,
    )
