"""Layout-dependent effects of MOS fingers: diffusion length (stress) and well proximity.

Both are the published BSIM4 forms (BSIM4 manual, UC Berkeley, "Layout-dependent stress
effect" and "Well proximity effect"; as implemented in the model's temperature and
instance set-up, e.g. ngspice's ``b4temp.c``):

- stress: for a finger whose gate edges stand SA and SB from the two ends of its
  diffusion island, ``inv_od = 1/(SA + L/2) + 1/(SB + L/2)``; the mobility is scaled by
  ``(1 + rho) / (1 + rho_ref)`` with ``rho = KU0 * inv_od`` and the threshold moves by
  ``KVTH0 * (inv_od - inv_od_ref)``, the reference being SAref, SBref. placer folds the
  model's length and width factors (Kstress) into KU0 and KVTH0: every unit of an array
  has one W and one L.
- well proximity: the well's dopant scattered from the edge of its mask falls off with
  distance x as ``f_A = SCref^2 / x^2``, ``f_B = (x / SCref) e^(-10 x / SCref)``,
  ``f_C = (x / SCref) e^(-20 x / SCref)``; SCA, SCB and SCC are their means over the
  channel, and with a single edge at SC from the channel, across its width W, BSIM4's
  closed forms follow (:func:`edge_integrals`). The threshold moves by
  ``KVTH0WE * (SCA + WEB SCB + WEC SCC)`` and the mobility is scaled by
  ``1 + KU0WE * (SCA + WEB SCB + WEC SCC)``. placer adds the four edges of a rectangular
  well: an edge along the fingers' length (above or below) is averaged across W, as
  BSIM4 does; an edge along their width (left or right) across L, by the same integral.

Each finger's current changes by ``dI/I = mu'/mu - 1 - (gm/ID) dVT``; a device of n
fingers carries the sum, so its relative change is the mean over its fingers.
"""

from __future__ import annotations

from dataclasses import dataclass
from math import exp
from typing import Any

import numpy as np
from numpy.typing import NDArray

__all__ = ["FingerGeometry", "LdeDevice", "LdeFigures", "island_spans", "sa_sb",
           "inv_od", "edge_integrals", "lde_figures", "relative_current"]


@dataclass(frozen=True)
class FingerGeometry:
    """What the stress and well terms need of the drawn finger: the slot pitch, how far
    its diffusion reaches either side of the gate's centre, the gate length L and the
    width W (micrometres)."""

    pitch_x_um: float
    pitch_y_um: float
    diffusion_half_um: float
    gate_um: float
    width_um: float
    #: the drawn wells (x0, y0, x1, y1) in the slot frame (slot (r, c) at c px, -r py): a
    #: finger takes the one around it (none: no well edge near it); with none drawn, the
    #: spec's well_margin_um, if any, around the whole array
    wells: tuple[tuple[float, float, float, float], ...] = ()


@dataclass(frozen=True)
class LdeDevice:
    """One device's layout-dependent figures (means over its fingers)."""

    device: str
    fingers: int
    sa_um: tuple[float, float]          # least, largest SA
    sb_um: tuple[float, float]
    inv_od_per_um: float                # mean 1/(SA + L/2) + 1/(SB + L/2)
    inv_od_range: tuple[float, float]   # least, largest over its fingers
    sca: float                          # mean SCA (0 without a well edge)
    dvt_mv: float                       # mean threshold shift, stress + well
    dmu_rel: float                      # mean relative mobility change, stress + well
    polarity: str = "n"                 # the shift is to the signed threshold (BSIM4)


@dataclass(frozen=True)
class LdeFigures:
    """Every device's figures, the diffusion style they were drawn with and the spec's
    coefficients (for the report's assumptions)."""

    style: str
    devices: tuple[LdeDevice, ...]
    coefficients: dict[str, Any]
    #: "n", "p" or "mixed": BSIM4 adds the shifts to the signed threshold, so a positive
    #: dVT raises an NMOS finger's |VT| and lowers a PMOS finger's
    polarity: str = "n"
    #: what the figures leave out, for the report ("" when nothing)
    note: str = ""

    def device(self, name: str) -> LdeDevice:
        """The figures of ``name``."""
        return next(d for d in self.devices if d.device == name)


def island_spans(joins: NDArray[np.bool_]) -> tuple[NDArray[np.int_], NDArray[np.int_]]:
    """First and last column of the diffusion island each slot belongs to.

    Examples
    --------
    >>> a, b = island_spans(np.array([[True, False, True]]))
    >>> a.tolist(), b.tolist()
    ([[0, 0, 2, 2]], [[1, 1, 3, 3]])
    """
    rows, edges = joins.shape
    cols = edges + 1
    first = np.zeros((rows, cols), dtype=np.int64)
    last = np.zeros((rows, cols), dtype=np.int64)
    for r in range(rows):
        start = 0
        for c in range(cols):
            if c > 0 and not joins[r, c - 1]:
                start = c
            first[r, c] = start
        end = cols - 1
        for c in range(cols - 1, -1, -1):
            if c < cols - 1 and not joins[r, c]:
                end = c
            last[r, c] = end
    return first, last


def sa_sb(ids: NDArray[np.int_], joins: NDArray[np.bool_], geom: FingerGeometry
          ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """SA and SB of every slot's finger (left and right gate edge to its island's ends,
    micrometres; NaN where no device finger stands)."""
    first, last = island_spans(joins)
    cols = np.arange(ids.shape[1])[None, :]
    px, xd, half_l = geom.pitch_x_um, geom.diffusion_half_um, geom.gate_um / 2
    sa = (cols - first) * px + xd - half_l
    sb = (last - cols) * px + xd - half_l
    mask = ids >= 0
    return np.where(mask, sa, np.nan), np.where(mask, sb, np.nan)


def inv_od(sa: Any, sb: Any, gate_um: float) -> Any:
    """BSIM4's ``Inv_sa + Inv_sb`` = 1/(SA + L/2) + 1/(SB + L/2), per micrometre.

    Examples
    --------
    >>> round(inv_od(1.0, 3.0, 1.0), 6)        # 1/1.5 + 1/3.5
    0.952381
    """
    return 1.0 / (sa + gate_um / 2) + 1.0 / (sb + gate_um / 2)


def edge_integrals(sc: float, span: float, scref: float) -> tuple[float, float, float]:
    """(SCA, SCB, SCC) of one well edge at distance ``sc`` from the channel, averaged over
    the channel's ``span`` away from that edge (BSIM4's closed forms with Wdrn = span).

    Examples
    --------
    >>> [round(v, 6) for v in edge_integrals(1.0, 2.0, 1.0)]   # SCA = 1 / (1 * 3)
    [0.333333, 2e-06, 0.0]
    """
    t1 = sc + span
    sca = scref * scref / (sc * t1)
    scb = ((0.1 * sc + 0.01 * scref) * exp(-10.0 * sc / scref)
           - (0.1 * t1 + 0.01 * scref) * exp(-10.0 * t1 / scref)) / span
    scc = ((0.05 * sc + 0.0025 * scref) * exp(-20.0 * sc / scref)
           - (0.05 * t1 + 0.0025 * scref) * exp(-20.0 * t1 / scref)) / span
    return sca, scb, scc


def _well_terms(xy: NDArray[np.float64], geom: FingerGeometry, box: tuple[float, ...],
                scref: float) -> NDArray[np.float64]:
    """(SCA, SCB, SCC) of every finger at ``xy`` (gate centres) in the well ``box``."""
    x0, y0, x1, y1 = box
    half_l, half_w = geom.gate_um / 2, geom.width_um / 2
    out = np.zeros((len(xy), 3))
    for i, (x, y) in enumerate(xy):
        for sc, span in ((y1 - (y + half_w), geom.width_um), ((y - half_w) - y0, geom.width_um),
                         ((x - half_l) - x0, geom.gate_um), (x1 - (x + half_l), geom.gate_um)):
            out[i] += edge_integrals(max(sc, 1e-6), span, scref)
    return out


def lde_figures(ids: NDArray[np.int_], joins: NDArray[np.bool_], devices: tuple[str, ...],
                geom: FingerGeometry, lde: Any, style: str,
                polarity: str | tuple[str, ...] = "n") -> LdeFigures:
    """Every device's stress and well-proximity figures for fingers at ``ids`` (rows of
    slots, row 0 on top) whose diffusion joins as ``joins`` says; ``lde`` is the spec's
    :class:`placer.io.spec.LdeSpec`; ``polarity`` the block's, or each device's. Raises
    SpecError when a coefficient makes a mobility factor zero or negative at the drawn
    geometry."""
    from placer.errors import SpecError

    sa, sb = sa_sb(ids, joins, geom)
    L = geom.gate_um
    inv = inv_od(sa, sb, L)
    inv_ref = float(inv_od(lde.saref_um, lde.sbref_um, L))
    rho_ref = lde.ku0_um * inv_ref
    worst = float(np.nanmin(1.0 + lde.ku0_um * inv)) if np.any(ids >= 0) else 1.0
    if min(worst, 1.0 + rho_ref) <= 0:
        raise SpecError(f"[lde] ku0_um = {lde.ku0_um:g} makes the mobility factor "
                        "1 + KU0/(SA + L/2) + KU0/(SB + L/2) zero or negative at the drawn "
                        f"diffusion (inv_od up to {float(np.nanmax(inv)):.4g} /um, reference "
                        f"{inv_ref:.4g} /um); give |ku0_um| below "
                        f"{1.0 / max(float(np.nanmax(inv)), inv_ref):.3g} um")
    if style == "pairs" and not joins.any():
        style = "alone"                       # not every finger could pair: none does
    dmu = (1.0 + lde.ku0_um * inv) / (1.0 + rho_ref) - 1.0
    dvt = lde.kvth0_mv_um * (inv - inv_ref)
    rows, cols = np.nonzero(ids >= 0)
    sca = np.zeros(ids.shape)
    if lde.well_margin_um is not None or geom.wells:
        drawn = np.argwhere(ids != -2)                   # fingers and dummies: not EMPTY
        px, py = geom.pitch_x_um, geom.pitch_y_um
        boxes = geom.wells
        if not boxes:
            m, xd, hw = lde.well_margin_um, geom.diffusion_half_um, geom.width_um / 2
            boxes = ((drawn[:, 1].min() * px - xd - m, -drawn[:, 0].max() * py - hw - m,
                      drawn[:, 1].max() * px + xd + m, -drawn[:, 0].min() * py + hw + m),)
        xy = np.column_stack([cols * px, -rows * py]).astype(float)
        terms = np.zeros((len(xy), 3))
        for box in boxes:               # each finger in the well around it, if any
            inside = ((xy[:, 0] > box[0]) & (xy[:, 0] < box[2]) & (xy[:, 1] > box[1])
                      & (xy[:, 1] < box[3]))
            if inside.any():
                terms[inside] = _well_terms(xy[inside], geom, box, lde.scref_um)
        eff = terms[:, 0] + lde.web * terms[:, 1] + lde.wec * terms[:, 2]
        if np.any(1.0 + lde.ku0we * eff <= 0):
            raise SpecError(f"[lde] ku0we = {lde.ku0we:g} makes the mobility factor "
                            "1 + KU0WE (SCA + WEB SCB + WEC SCC) zero or negative at the "
                            f"well edge (SCA + ... up to {float(eff.max()):.4g}); give a "
                            "smaller |ku0we| or a larger well margin")
        sca[rows, cols] = terms[:, 0]
        dvt[rows, cols] += lde.kvth0we_mv * eff
        dmu[rows, cols] = (1.0 + dmu[rows, cols]) * (1.0 + lde.ku0we * eff) - 1.0
    pols = (polarity,) * len(devices) if isinstance(polarity, str) else polarity
    out = []
    for d, name in enumerate(devices):
        mine = ids == d
        if not mine.any():
            continue
        out.append(LdeDevice(
            device=name, fingers=int(mine.sum()),
            sa_um=(float(sa[mine].min()), float(sa[mine].max())),
            sb_um=(float(sb[mine].min()), float(sb[mine].max())),
            inv_od_per_um=float(inv[mine].mean()),
            inv_od_range=(float(inv[mine].min()), float(inv[mine].max())),
            sca=float(sca[mine].mean()), dvt_mv=float(dvt[mine].mean()),
            dmu_rel=float(dmu[mine].mean()), polarity=pols[d]))
    coeffs = {k: getattr(lde, k) for k in ("ku0_um", "kvth0_mv_um", "saref_um", "sbref_um",
                                           "well_margin_um", "scref_um", "web", "wec",
                                           "kvth0we_mv", "ku0we")}
    if geom.wells:
        coeffs["well_box_um"] = [list(b) for b in geom.wells]    # drawn, not a margin
    block = pols[0] if len(set(pols)) == 1 else "mixed"
    return LdeFigures(style, tuple(out), coeffs, block)


def relative_current(dev: LdeDevice, gm_id_per_v: float) -> float:
    """A device's relative current change from its layout-dependent figures: the mean of
    its fingers' ``mu'/mu - 1 -+ (gm/ID) dVT`` (their sum is the device's current); the
    shift is to the signed threshold (BSIM4), so it lowers an NMOS finger's current and
    raises a PMOS finger's."""
    sign = 1.0 if dev.polarity == "n" else -1.0
    return dev.dmu_rel - sign * gm_id_per_v * dev.dvt_mv * 1e-3
