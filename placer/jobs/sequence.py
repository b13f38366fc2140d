"""What ``placer sequence`` computes: a unary array's placement and switching order (found,
or read from a sequence grid) and every figure of its transfer curve."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from numpy.typing import NDArray

from placer.io.unaryspec import UnarySpec
from placer.model.unary import (
    UnaryLayout,
    code_inl,
    code_sums,
    correlated_inl_sigma,
    random_inl_sigma,
    slot_xy,
    worst_inl,
    worst_inl_parts,
)
from placer.search.switching import BASELINES, switching_sequence

__all__ = ["SequenceReport", "score_sequence", "find_sequence", "repair_given"]

FloatArray = NDArray[np.float64]


@dataclass(frozen=True)
class SequenceReport:
    """A placement and order with its figures (LSB unless named otherwise)."""

    spec: UnarySpec
    layout: UnaryLayout
    method: str
    worst_inl_lsb: float
    worst_code: int
    worst_direction_deg: float
    inl_lsb: FloatArray              # codes 0 .. full scale, the gradient in its worst
    #                                  direction
    dnl_lsb: FloatArray              # steps 1 .. full scale, the same field
    linear_part_lsb: FloatArray      # each code in its own worst direction
    bowl_part_lsb: FloatArray
    random_sigma_lsb: FloatArray
    correlated_sigma_lsb: FloatArray
    baselines: dict[str, float] = field(default_factory=dict)
    moves: int = 0
    seconds: float = 0.0
    #: the budget: per code, the systematic envelope plus 3 sigma of the random and
    #: correlated parts together; its worst over every code
    inl_3sigma_lsb: float = 0.0
    #: a repair's exchanges (slot, slot) and the worst |INL| before it
    swaps: tuple[tuple[int, int], ...] = ()
    before_lsb: float | None = None
    repair_cut: bool = False
    #: with [gradient] direction_deg: INL at codes 0 .. full scale, the gradient at it
    given_inl_lsb: FloatArray | None = None

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready figures."""
        return {
            "name": self.spec.name, "cells": self.spec.cells,
            "sub_units": self.spec.sub_units, "binary_bits": self.spec.binary_bits,
            "lsb_sub_units": self.spec.lsb_units, "full_scale_code": self.spec.full_scale,
            "core": [self.spec.rows, self.spec.cols],
            "pitch_um": list(self.spec.pitch_um), "method": self.method,
            "worst_inl_lsb": self.worst_inl_lsb, "worst_code": self.worst_code,
            "worst_direction_deg": self.worst_direction_deg,
            "max_dnl_lsb": float(np.abs(self.dnl_lsb).max()),
            "max_random_inl_sigma_lsb": float(self.random_sigma_lsb.max()),
            "max_correlated_inl_sigma_lsb": float(self.correlated_sigma_lsb.max()),
            "inl_at_3_sigma_lsb": self.inl_3sigma_lsb,
            "inl_lsb": self.inl_lsb.tolist(), "dnl_lsb": self.dnl_lsb.tolist(),
            "linear_part_lsb": self.linear_part_lsb.tolist(),
            "bowl_part_lsb": self.bowl_part_lsb.tolist(),
            "random_sigma_lsb": self.random_sigma_lsb.tolist(),
            "correlated_sigma_lsb": self.correlated_sigma_lsb.tolist(),
            "baselines_worst_inl_lsb": self.baselines,
            "swaps": [[list(divmod(a, self.spec.cols)), list(divmod(b, self.spec.cols))]
                      for a, b in self.swaps],
            "worst_inl_before_repair_lsb": self.before_lsb,
            "repair_cut_by_time_limit": self.repair_cut,
            # each slot's cell number, -(j + 1) for binary bit j, 0 a dummy
            "sequence": self.layout.grid().tolist(),
            "given_direction_deg": self.spec.fields.direction_deg,
            "given_direction_worst_inl_lsb": (None if self.given_inl_lsb is None else
                                              float(np.abs(self.given_inl_lsb).max())),
            "given_direction_worst_code": (None if self.given_inl_lsb is None else
                                           int(np.argmax(np.abs(self.given_inl_lsb)))),
            "given_direction_inl_lsb": (None if self.given_inl_lsb is None else
                                        self.given_inl_lsb.tolist()),
            "assumptions": {
                "linear_ppm_per_um": self.spec.fields.linear_ppm_per_um,
                "quadratic_ppm_per_um2": self.spec.fields.quadratic_ppm_per_um2,
                "hot_spot": (None if self.spec.fields.hot_spot is None else
                             vars(self.spec.fields.hot_spot)),
                "correlated_sigma_ppm": self.spec.corr_sigma_ppm,
                "correlated_length_um": self.spec.corr_length_um,
                "kernel": self.spec.kernel, "a_param_pct_um": self.spec.a_param_pct_um,
                "cell_sigma": self.spec.cell_sigma, "lsb_sigma": self.spec.lsb_sigma},
        }


def score_sequence(spec: UnarySpec, layout: UnaryLayout, method: str,
                   baselines: bool = True, moves: int = 0,
                   seconds: float = 0.0) -> SequenceReport:
    """Every figure of ``layout`` under ``spec``'s fields."""
    lin, bowl = worst_inl_parts(layout, spec.fields)
    total = lin + np.abs(bowl)
    c = int(np.argmax(total))
    # the direction that makes code c worst: along its partial sum, signed with the bowl
    d = code_sums(layout, slot_xy(layout.rows, layout.cols, layout.pitch_um))[c]
    sign = 1.0 if bowl[c] >= 0 else -1.0
    theta = math.atan2(sign * d[1], sign * d[0]) if np.hypot(*d) > 0 else 0.0
    curve = code_inl(layout, spec.fields, theta)
    base: dict[str, float] = {}
    if baselines:
        for name, fn in BASELINES.items():
            try:
                base[name] = worst_inl(fn(spec.rows, spec.cols, spec.pitch_um, spec.cells,
                                          spec.sub_units, spec.binary_bits), spec.fields)
            except ValueError:
                continue
    rnd = random_inl_sigma(spec.full_scale, spec.lsb_sigma)
    cor = (correlated_inl_sigma(layout, spec.corr_sigma_ppm, spec.corr_length_um,
                                spec.kernel)
           if spec.corr_sigma_ppm > 0 else np.zeros(spec.full_scale + 1))
    budget = float((total + 3.0 * np.hypot(rnd, cor)).max())
    given = (None if spec.fields.direction_deg is None else
             code_inl(layout, spec.fields, math.radians(spec.fields.direction_deg)))
    return SequenceReport(
        spec, layout, method, float(total[c]), c, math.degrees(theta) % 360.0, curve,
        np.diff(curve), lin, bowl, rnd, cor, base, moves, seconds, inl_3sigma_lsb=budget,
        given_inl_lsb=given)


def find_sequence(spec: UnarySpec, *, seed: int = 0, time_limit_s: float = 10.0,
                  moves: int = 200_000) -> SequenceReport:
    """Search placement and order (:func:`placer.search.switching.switching_sequence`)."""
    res = switching_sequence(spec.rows, spec.cols, spec.pitch_um, spec.cells, spec.fields,
                             sub_units=spec.sub_units, binary_bits=spec.binary_bits,
                             seed=seed, moves=moves,
                             time_limit_s=time_limit_s)
    how = f"search from the {res.start} order" + (", cut by the time limit" if res.cut
                                                   else "")
    return score_sequence(spec, res.layout, how, moves=res.moves, seconds=res.seconds)


def repair_given(spec: UnarySpec, layout: UnaryLayout, name: str, max_swaps: int,
                 time_limit_s: float = 60.0) -> SequenceReport:
    """A given order repaired by the fewest exchanges found
    (:func:`placer.search.switching.repair_sequence`), scored in full."""
    from dataclasses import replace

    from placer.search.switching import repair_sequence

    fix = repair_sequence(layout, spec.fields, max_swaps, time_limit_s)
    rep = score_sequence(spec, fix.layout, f"given ({name}), repaired by {len(fix.swaps)} "
                                           f"exchange{'s' if len(fix.swaps) != 1 else ''}"
                                           + (", cut by the time limit" if fix.cut else ""))
    return replace(rep, swaps=fix.swaps, before_lsb=fix.before_lsb, repair_cut=fix.cut)
