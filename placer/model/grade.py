"""Score a pattern under a spec's assumptions: per-device and per-pair figures."""

from __future__ import annotations

from dataclasses import asdict, dataclass
from itertools import combinations
from typing import Any

import numpy as np

from placer.io.pattern import Pattern, unit_positions
from placer.io.spec import Spec
from placer.model import variation
from placer.model.exact_moments import grid_sums, pair_linear, pair_second
from placer.model.lde import FingerGeometry, LdeFigures

__all__ = ["DeviceScore", "PairScore", "MonteCarloSummary", "Grade", "grade_pattern", "lde_of",
           "assumptions"]


@dataclass(frozen=True)
class DeviceScore:
    """Placement figures of one device."""

    name: str
    units: int
    centroid_um: tuple[float, float]
    offset_um: float
    second_moment_um2: tuple[float, float, float]
    edge_units: int
    orientation: tuple[int, int, int]


@dataclass(frozen=True)
class PairScore:
    """Ratio-error figures of one pair of devices (first minus second), ppm of P0.

    ``group`` names the group both devices belong to ('' with no groups), or is
    "match" for a pair the spec matches across groups.
    """

    a: str
    b: str
    centroid_distance_um: float
    linear_ppm: float
    linear_worst_angle_deg: float
    quadratic_ppm: float
    bowl_ppm: float
    moment_norms: tuple[float, ...]
    correlated_sigma_ppm: float
    white_sigma_ppm: float
    random_sigma_ppm: float
    vt_sigma_mv: float | None
    group: str = ""
    known_direction_ppm: float | None = None
    hot_spot_ppm: float | None = None


@dataclass(frozen=True)
class MonteCarloSummary:
    """Sampled ratio error of each pair beside the exact sigma it must match."""

    samples: int
    seed: int
    std_ppm: tuple[float, ...]
    exact_std_ppm: tuple[float, ...]
    abs_p99_ppm: tuple[float, ...]


@dataclass(frozen=True)
class Grade:
    """All figures of one pattern; ``pairs`` lists every pair of devices."""

    name: str
    kind: str
    shape: tuple[int, int]
    pitch_um: tuple[float, float]
    centre_um: tuple[float, float]
    devices: tuple[DeviceScore, ...]
    pairs: tuple[PairScore, ...]
    assumptions: dict[str, Any]
    monte_carlo: MonteCarloSummary | None = None
    #: MOS fingers drawn by placer's cell: each device's diffusion-length (SA/SB) and
    #: well-proximity figures (None: another kind, or no drawn geometry to measure)
    lde: LdeFigures | None = None

    def worst(self, field: str, group: str | None = None) -> PairScore | None:
        """The pair with the largest value of ``field`` (absolute), or None; with
        ``group``, among that group's pairs only."""
        pairs = [p for p in self.pairs if group is None or p.group == group]
        if not pairs:
            return None
        return max(pairs, key=lambda p: abs(getattr(p, field)))

    def groups(self) -> list[str]:
        """Group names of the pairs, in order of first appearance."""
        return list(dict.fromkeys(p.group for p in self.pairs))

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON-ready form."""
        out = asdict(self)
        fields = ("linear_ppm", "quadratic_ppm", "random_sigma_ppm")
        out["worst"] = {f: (w.a + "/" + w.b if (w := self.worst(f)) else None)
                        for f in fields}
        out["worst_per_group"] = {g: {f: (w.a + "/" + w.b if (w := self.worst(f, g)) else None)
                                      for f in fields} for g in self.groups()}
        return out


def assumptions(spec: Spec) -> dict[str, Any]:
    """The model assumptions a grade was computed with, for printing beside it."""
    return {
        "spec": spec.source,
        "gradient": spec.gradient.described,
        "linear_gradient_ppm_per_um": spec.gradient.linear_ppm_per_um,
        "known_direction_deg": spec.gradient.direction_deg,
        "hot_spot": (None if spec.gradient.hot_spot is None
                     else asdict(spec.gradient.hot_spot)),
        "quadratic_hessian_norm_ppm_per_um2": spec.gradient.quadratic_ppm_per_um2,
        "moment_order": spec.gradient.order,
        "correlated_sigma_ppm": spec.correlated.sigma_ppm,
        "correlated_length_um": spec.correlated.length_um,
        "correlated_kernel": spec.correlated.kernel,
        "area_coefficient_pct_um": spec.mismatch.a_param_pct_um,
        "a_vt_mv_um": spec.mismatch.a_vt_mv_um,
        "unit_area_um2": spec.unit.area_um2,
        "pitch_um": list(spec.array.pitch_um),
    }


def grade_pattern(pattern: Pattern, spec: Spec, geometry: FingerGeometry | None = None
                  ) -> Grade:
    """Compute every figure of ``pattern``.

    Parameters
    ----------
    pattern : Pattern
        The arrangement, its devices already in the spec's order
        (:func:`placer.io.pattern.check_against_spec`).
    spec : Spec
        Pitch and model assumptions: gradients, correlated field, mismatch.
    geometry : FingerGeometry, optional
        MOS fingers as drawn (placer's cell at the spec's pitch): with it, the
        layout-dependent figures (diffusion length, well proximity) too.

    Returns
    -------
    Grade
        Per device centroid and second moments, per pair the linear, quadratic,
        higher-order, correlated and random errors, and the worst of each.
    """
    n_dev = len(pattern.devices)
    xy, dev = unit_positions(pattern, spec.array.pitch_um)
    centre = variation.array_centre(xy)
    xy_c = xy - centre
    counts = np.bincount(dev, minlength=n_dev)
    cen = variation.centroids(xy, dev, n_dev)
    off = cen - centre
    m2 = variation.power_moments(xy_c, dev, n_dev, 2)
    edges = variation.edge_units(pattern.ids, n_dev)
    marks = pattern.orient[pattern.ids >= 0]
    devices = []
    for d, name in enumerate(pattern.devices):
        mine = marks[dev == d]
        devices.append(DeviceScore(
            name=name, units=int(counts[d]),
            centroid_um=(float(cen[d, 0]), float(cen[d, 1])),
            offset_um=float(np.hypot(*off[d])),
            second_moment_um2=(float(m2[d, 0]), float(m2[d, 1]), float(m2[d, 2])),
            edge_units=int(edges[d]),
            orientation=(int(np.sum(mine > 0)), int(np.sum(mine < 0)), int(np.sum(mine == 0))),
        ))

    pair_list = (spec.ranked_pairs() if tuple(spec.devices) == tuple(pattern.devices)
                 else list(combinations(range(n_dev), 2)))
    pairs: list[PairScore] = []
    mc = None
    if pair_list:
        pr = np.array(pair_list, dtype=int)
        g = spec.gradient
        # exact integer moments on the slot grid (placer.model.exact_moments): zeros are exact zeros
        r_idx, c_idx = np.nonzero(pattern.ids >= 0)
        sums = grid_sums(r_idx, c_idx, dev, n_dev)
        dc = pair_linear(sums, pr, spec.array.pitch_um)
        lin, ang = variation.linear_worst(dc, g.linear_ppm_per_um)
        dm2 = pair_second(sums, pr, spec.array.pitch_um)
        quad = variation.quadratic_worst(dm2, g.quadratic_ppm_per_um2)
        bowl = variation.bowl_error(dm2, g.quadratic_ppm_per_um2)
        norms = variation.exact_pair_terms(xy_c, dev, n_dev, pr, g.order)
        norms[1] = np.hypot(dc[:, 0], dc[:, 1])
        norms[2] = variation.moment_norm(dm2)
        c = spec.correlated
        cov = variation.grid_device_covariance(np.where(pattern.ids >= 0, pattern.ids, -1),
                                           spec.array.pitch_um, n_dev, c.length_um, c.kernel)
        corr = c.sigma_ppm * np.sqrt(variation.pair_variance(cov, pr))
        area = counts * spec.unit.area_um2
        white = 1e4 * variation.pelgrom_sigma(spec.mismatch.a_param_pct_um, area[pr[:, 0]],
                                          area[pr[:, 1]])
        vt = (variation.pelgrom_sigma(spec.mismatch.a_vt_mv_um, area[pr[:, 0]], area[pr[:, 1]])
              if spec.mismatch.a_vt_mv_um is not None else None)
        known = None
        if g.direction_deg is not None:          # the gradient along the given direction
            u = np.array([np.cos(np.radians(g.direction_deg)), np.sin(np.radians(g.direction_deg))])
            known = g.linear_ppm_per_um * (dc @ u)
        spot = None
        if g.hot_spot is not None:               # mean of the spot's field, a minus b
            hs = g.hot_spot
            field = hs.ppm * np.exp(-np.hypot(xy[:, 0] - hs.x_um, xy[:, 1] - hs.y_um)
                                    / hs.fall_off_um)
            spot = variation.field_errors(field, dev, n_dev, pr)
        group_of = spec.group_of()
        for i, (a, b) in enumerate(pair_list):
            ga, gb = group_of.get(pattern.devices[a], ""), group_of.get(pattern.devices[b], "")
            pairs.append(PairScore(
                group=ga if ga == gb else "match",
                a=pattern.devices[a], b=pattern.devices[b],
                centroid_distance_um=float(norms[1][i]),
                linear_ppm=float(lin[i]), linear_worst_angle_deg=float(ang[i]),
                quadratic_ppm=float(quad[i]), bowl_ppm=float(bowl[i]),
                moment_norms=tuple(float(norms[k][i]) for k in range(1, g.order + 1)),
                correlated_sigma_ppm=float(corr[i]), white_sigma_ppm=float(white[i]),
                random_sigma_ppm=float(np.hypot(corr[i], white[i])),
                vt_sigma_mv=None if vt is None else float(vt[i]),
                known_direction_ppm=None if known is None else float(known[i]),
                hot_spot_ppm=None if spot is None else float(spot[i]),
            ))
        if spec.monte_carlo.samples > 0:
            mc = _monte_carlo(spec, xy_c, dev, n_dev, pr, lin, quad, corr)
    return Grade(
        name=spec.name, kind=spec.kind, shape=pattern.shape, pitch_um=spec.array.pitch_um,
        centre_um=(float(centre[0]), float(centre[1])), devices=tuple(devices),
        pairs=tuple(pairs), assumptions=assumptions(spec), monte_carlo=mc,
        lde=lde_of(pattern, spec, geometry) if geometry is not None else None,
    )


def lde_of(pattern: Pattern, spec: Spec, geometry: FingerGeometry) -> LdeFigures | None:
    """The layout-dependent figures of a MOS ``pattern`` drawn with ``geometry`` (its
    diffusion joined as the spec's ``[unit] diffusion`` style joins it), or None for
    another kind."""
    from placer.kinds import KINDS
    from placer.model.lde import lde_figures
    from placer.model.routing_estimate import diffusion_joins, dummy_net_id, mos_finger_nets

    if not KINDS[spec.kind].fingers or pattern.ids.shape[1] < 1:
        return None
    nets = mos_finger_nets(spec) if tuple(spec.devices) == tuple(pattern.devices) else None
    joins = diffusion_joins(pattern.ids, pattern.orient, nets,
                            dummy_net_id(spec) if nets is not None else -1,
                            spec.unit.diffusion)
    from placer.errors import SpecError

    try:
        return lde_figures(pattern.ids, joins, pattern.devices, geometry, spec.lde,
                           spec.unit.diffusion,
                           tuple(spec.polarity_of(d) for d in pattern.devices))
    except SpecError as err:
        raise SpecError(f"{spec.source}: {err}") from None


def _monte_carlo(spec: Spec, xy_c: np.ndarray, dev: np.ndarray, n_dev: int, pr: np.ndarray,
                 lin: np.ndarray, quad: np.ndarray, corr: np.ndarray) -> MonteCarloSummary:
    """Sample the full field; exact std: linear/sqrt2, quadratic/sqrt3, sigmas as they are."""
    m = spec.monte_carlo
    white_unit = 1e4 * spec.mismatch.a_param_pct_um / np.sqrt(2.0 * spec.unit.area_um2)
    errors = variation.monte_carlo_errors(
        xy_c, dev, n_dev, pr,
        g_rms_ppm_per_um=spec.gradient.linear_ppm_per_um,
        h_rms_ppm_per_um2=spec.gradient.quadratic_ppm_per_um2,
        corr_sigma_ppm=spec.correlated.sigma_ppm, corr_length_um=spec.correlated.length_um,
        kernel=spec.correlated.kernel, white_unit_sigma_ppm=float(white_unit),
        samples=m.samples, rng=np.random.default_rng(m.seed))
    counts = np.bincount(dev, minlength=n_dev).astype(float)
    white_var = white_unit ** 2 * (1.0 / counts[pr[:, 0]] + 1.0 / counts[pr[:, 1]])
    exact = np.sqrt(lin ** 2 / 2.0 + quad ** 2 / 3.0 + corr ** 2 + white_var)
    return MonteCarloSummary(
        samples=m.samples, seed=m.seed,
        std_ppm=tuple(float(s) for s in errors.std(axis=0)),
        exact_std_ppm=tuple(float(s) for s in exact),
        abs_p99_ppm=tuple(float(s) for s in np.percentile(np.abs(errors), 99, axis=0)),
    )
