"""The slot pitch: one unit cell across, one row of cells and its routing channel down.

A spec may give its pitch (``[array] pitch_um``); otherwise placer works it out. Before
any arrangement exists the pitch is *estimated* from the unit cell and the tracks the
spec's nets are expected to need (:func:`estimated`); the search runs at it. Once an
arrangement exists its routing says how many tracks the fullest channel really holds,
and the pitch is *fitted* to that (:func:`fitted`): search, grade, budget, pictures and
the GDSII of that arrangement all use the fitted pitch.
"""

from __future__ import annotations

import math
from dataclasses import replace
from typing import Any

from placer.errors import LimitError
from placer.io.pattern import Pattern
from placer.io.spec import Spec
from placer.kinds import KINDS
from placer.layout.cells import Rules, TemplateError, UnitCell, load_rules, min_pitch, unit_cell
from placer.layout.router import RouteError, plan_tracks
from placer.limits import MAX_EXTENT_UM

__all__ = ["estimated", "fitted", "with_pitch", "given", "track_estimate", "pitch_needed",
           "check_pitch", "check_extent", "for_cell"]


def with_pitch(spec: Spec, pitch: tuple[float, float]) -> Spec:
    """``spec`` with ``pitch`` as a computed (not given) pitch."""
    return replace(spec, array=replace(spec.array, pitch_um=(float(pitch[0]),
                                                             float(pitch[1]))))


def given(spec: Spec, pitch: tuple[float, float] | None = None) -> Spec:
    """``spec`` with ``pitch`` (default: its own) taken as given: nothing refits it (a hand
    layout's pitch, or the pitch a run already settled)."""
    px, py = spec.array.pitch_um if pitch is None else pitch
    return replace(spec, array=replace(spec.array, pitch_um=(float(px), float(py)),
                                       pitch_given=True))


def estimated(spec: Spec, rules: Rules | None = None) -> Spec:
    """``spec`` with the pitch its unit cell needs and a channel of the tracks its nets
    are expected to need, unless the spec gives a pitch."""
    if spec.array.pitch_given:
        return spec
    return with_pitch(spec, pitch_needed(spec, rules))


def check_extent(spec: Spec) -> None:
    """Refuse an array whose span at its pitch a GDSII coordinate cannot hold."""
    rows, cols = spec.array.rows, spec.array.columns
    px, py = spec.array.pitch_um
    if rows is not None and cols is not None and max((cols + 2) * px,
                                                      (rows + 2) * py) > MAX_EXTENT_UM:
        raise LimitError(f"{spec.source}: [array] {rows} x {cols} slots at pitch [{px:g}, "
                         f"{py:g}] um would span {(cols + 2) * px:.4g} x {(rows + 2) * py:.4g} "
                         f"um, more than the {MAX_EXTENT_UM:g} um a GDSII coordinate holds at "
                         "1 nm")


def fitted(pattern: Pattern, spec: Spec, rules: Rules | None = None,
           cell: UnitCell | None = None, user: Any = None) -> Spec:
    """``spec`` with the pitch the routing of ``pattern`` needs: the unit cell (or the
    user's cell) and the fullest channel of that routing, unless the spec gives a pitch.

    ``pattern`` is in the spec's device order.
    """
    if spec.array.pitch_given:
        return spec
    rules = rules if rules is not None else load_rules(spec.kind)
    if cell is None:
        cell = (user.cell if user is not None else
                unit_cell(spec.kind, spec.unit.width_um, spec.unit.length_um, None, rules))
    px = min_pitch(cell, rules, 1)[0]
    probe = with_pitch(spec, (px, spec.array.pitch_um[1]))
    tracks = plan_tracks(pattern, probe, rules, cell, user=user is not None)
    return with_pitch(spec, min_pitch(cell, rules, tracks))


def track_estimate(spec: Spec) -> int:
    """Tracks the fullest channel is expected to need, before any arrangement exists.

    The search runs at the pitch this gives; the pitch of the result then follows from
    the tracks its routing really uses (:func:`fitted`). MOS rows usually hold every
    net of the block; a capacitor array's bottom plates split over the channels above
    and below each row; a resistor's chains need about one link track per device.
    """
    used = {n for m in spec.nets for n in m.values()}
    nets = set(spec.net_names()) - ({spec.dummy_net} - used)
    routing = KINDS[spec.kind].routing
    if routing == "rows":
        return max(1, len(nets))
    if routing == "plates":
        tops = {n["top"] for n in spec.nets}
        bottoms = {n["bottom"] for n in spec.nets}
        extra = 0 if len(tops) == 1 else len(tops)
        return max(1, math.ceil(len(bottoms) / 2) + extra)
    ends = {n for m in spec.nets for n in m.values()}
    return max(1, len(ends) + 1)


def pitch_needed(spec: Spec, rules: Rules | None = None, tracks: int | None = None
                 ) -> tuple[float, float]:
    """Smallest pitch for the spec's unit cell with a channel of ``tracks`` tracks
    (default: :func:`track_estimate`)."""
    r = rules if rules is not None else load_rules(spec.kind)
    cell = unit_cell(spec.kind, spec.unit.width_um, spec.unit.length_um, None, r)
    return min_pitch(cell, r, track_estimate(spec) if tracks is None else tracks)


def check_pitch(spec: Spec, rules: Rules | None = None) -> None:
    """Refuse, before any work, a pitch too small for the unit cell or for one track.

    The full check (the channels hold every track the arrangement needs) is made by
    :func:`placer.layout.router.route`; this one needs no arrangement.
    """
    r = rules if rules is not None else load_rules(spec.kind)
    px, py = spec.array.pitch_um
    need_x, need_y = pitch_needed(spec, r, tracks=1)
    if px + 1e-9 < need_x or py + 1e-9 < need_y:
        full = pitch_needed(spec, r)
        raise RouteError(
            f"{spec.source}: [array] pitch_um = [{px:g}, {py:g}] leaves no room for the unit "
            f"cell (W {spec.unit.width_um:g} um, L {spec.unit.length_um:g} um, rules of "
            f"{r.source}) and its routing channel: it needs at least [{need_x:g}, {need_y:g}] "
            f"um (one track per channel), and about [{full[0]:g}, {full[1]:g}] um for a "
            "typical arrangement; omit pitch_um to get the pitch the routing needs")


def for_cell(spec: Spec, cell: UnitCell, rules: Rules, source: str) -> Spec:
    """``spec`` with the pitch the user's unit ``cell`` (from ``source``) needs, or its own
    pitch, checked to hold the cell and one routing track."""
    need = min_pitch(cell, rules, track_estimate(spec))
    if not spec.array.pitch_given:
        return with_pitch(spec, need)
    px, py = spec.array.pitch_um
    one = min_pitch(cell, rules, 1)
    if px + 1e-9 < one[0] or py + 1e-9 < one[1]:
        raise TemplateError(
            f"{spec.source}: [array] pitch_um = [{px:g}, {py:g}] is smaller than the unit "
            f"cell {source} with one routing track needs: at least [{one[0]:g}, "
            f"{one[1]:g}] um ([{need[0]:g}, {need[1]:g}] for any arrangement)")
    return spec
