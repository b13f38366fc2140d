"""Local search: the compiled Metropolis loop, one stage at a time, and its schedule.

A stage minimises one key (the smoothed worst pair) while every key fixed by an earlier
stage stays within its cap. Moves swap the devices of two orbits, or (from the
quadratic stage on) exchange two units of a device for two of another whose positions
have the same sum, or three for three, which leaves every centroid exactly where it
was [1]. The three-for-three exchanges matter once the linear term sits at zero: the
two-for-two ones alone then connect only part of the arrangements that keep it there.

References
----------
[1] S. Kirkpatrick, C. D. Gelatt, M. P. Vecchi, "Optimization by simulated annealing",
    Science 220(4598), 671-680, 1983. doi:10.1126/science.220.4598.671
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from placer.search._compiled import Compiled
from placer.search._kernel import native

__all__ = ["STAGE", "StageResult", "run_stage", "caps_none", "SMOOTHING", "RESTART_SMOOTHING",
           "COOLING", "TWO_FOR_TWO_SHARE", "RESTART_THREE_SHARE"]

IntArray = NDArray[np.int64]

#: Key index of each stage (as the compiled loop numbers them).
STAGE = {"linear": 0, "quadratic": 1, "order3": 2, "order4": 3, "edge": 4, "sigma": 5,
         "weighted": 6}
#: The energy is the worst pair plus this share of the mean pair, so that pairs that are
#: not yet the worst still improve. A restart from a random state explores, and on the
#: benchmark's mixed-ratio cores reaches the best-known arrangement several times as
#: often with more of the mean and with three-for-three exchanges; the chains, which
#: refine, keep the sharper energy and the two-for-two exchanges alone.
SMOOTHING = 0.05
RESTART_SMOOTHING = 0.2
#: The temperature falls geometrically from the mean uphill step to this fraction of it.
COOLING = 1e-4
#: Share of proposals, per thousand, that are centroid-keeping exchanges, and (in a
#: restart; none in the chains, which refine) the share of those tried as three-for-three.
TWO_FOR_TWO_SHARE = 500
RESTART_THREE_SHARE = 600
_N_KEYS = 8


@dataclass(frozen=True)
class StageResult:
    """How one stage ended: its best worst-pair value, the work done, the keys."""

    best: float
    tried: int
    accepted: int
    keys: tuple[float, ...]
    status: int          # 0 done, 1 deadline, 2 interrupted


def caps_none() -> NDArray[np.float64]:
    """No key constrained."""
    return np.full(_N_KEYS, np.inf)


def run_stage(comp: Compiled, dev_of: IntArray, stage: str, n_moves: int, seed: int,
              deadline: float, caps: NDArray[np.float64], *, floor: float = -1.0,
              field: bool = False, smoothing: float = SMOOTHING,
              three_share: int = 0) -> StageResult:
    """Run one annealing stage in place on ``dev_of`` (the best state is left there);
    ``three_share`` is the share per thousand of centroid-keeping exchanges tried as
    three-for-three."""
    _native = native()
    from placer.search._compiled import field_products

    prob = comp.prob
    stage_no = STAGE[stage]
    two = TWO_FOR_TWO_SHARE if stage_no != STAGE["linear"] else 0
    fp = np.zeros(16)
    fp[:10] = [comp.hx, comp.hy, comp.g2half, prob.linear_ppm_per_um,
               smoothing, COOLING, deadline, floor,
               prob.corr_length_um, prob.corr_sigma_ppm]
    ip = np.array([comp.n_orb, prob.n_dev, len(comp.pairs), prob.n_slots,
                   max(prob.cancel_order, 2), int(n_moves), seed & ((1 << 63) - 1),
                   stage_no, two, prob.cols, prob.rows, int(field),
                   int(prob.kernel == "gaussian"), comp.n_units, three_share],
                  dtype=np.int64)
    out = np.zeros(3 + _N_KEYS)
    status = _native.anneal(
        np.ascontiguousarray(comp.orb_m), np.ascontiguousarray(comp.orb_h),
        comp.orb_size, np.ascontiguousarray(comp.orb_slot).reshape(-1) if comp.n_orb else
        np.zeros(2, dtype=np.int64),
        np.ascontiguousarray(comp.orb_key).reshape(-1) if comp.n_orb else
        np.zeros(2, dtype=np.int64),
        comp.key_grid, np.ones(max(comp.n_orb, 1), dtype=np.uint8), comp.orb_edge,
        np.ascontiguousarray(comp.slot_xy), comp.counts, np.ascontiguousarray(comp.pairs),
        np.ascontiguousarray(comp.base), np.ascontiguousarray(comp.base_h), dev_of, fp, ip,
        np.ascontiguousarray(caps, dtype=float), out,
        np.ascontiguousarray(field_products(comp, dev_of)) if field else None,
        comp.pinned_slot, comp.orb_allow)
    return StageResult(float(out[0]), int(out[1]), int(out[2]),
                       tuple(float(x) for x in out[3:]), int(status))
