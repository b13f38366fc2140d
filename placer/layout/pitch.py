"""The slot pitch: one unit cell across, one row of cells and its routing channel down.

A spec may give its pitch (``[array] pitch_um``); otherwise placer works it out. Before
any arrangement exists the pitch is *estimated* from the unit cell and the tracks the
spec's nets are expected to need (:func:`estimated`); the search runs at it. Once an
arrangement exists its routing says how many tracks the fullest channel really holds,
and the pitch is *fitted* to that (:func:`fitted`): search, grade, budget, pictures and
the GDSII of that arrangement all use the fitted pitch.
"""

from __future__ import annotations

from dataclasses import replace
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from placer.io.pattern import Pattern
    from placer.io.spec import Spec
    from placer.layout.cells import Rules, UnitCell

__all__ = ["estimated", "fitted", "with_pitch"]


def with_pitch(spec: Spec, pitch: tuple[float, float]) -> Spec:
    """``spec`` with ``pitch`` as a computed (not given) pitch."""
    return replace(spec, array=replace(spec.array, pitch_um=(float(pitch[0]),
                                                             float(pitch[1]))))


def estimated(spec: Spec, rules: Rules | None = None) -> Spec:
    """``spec`` with the pitch its unit cell needs and a channel of the tracks its nets
    are expected to need, unless the spec gives a pitch."""
    if spec.array.pitch_given:
        return spec
    from placer.layout.router import pitch_needed

    return with_pitch(spec, pitch_needed(spec, rules))


def fitted(pattern: Pattern, spec: Spec, rules: Rules | None = None,
           cell: UnitCell | None = None, user: Any = None) -> Spec:
    """``spec`` with the pitch the routing of ``pattern`` needs: the unit cell (or the
    user's cell) and the fullest channel of that routing, unless the spec gives a pitch.

    ``pattern`` is in the spec's device order.
    """
    if spec.array.pitch_given:
        return spec
    from placer.layout.cells import load_rules, min_pitch, unit_cell
    from placer.layout.router import plan_tracks

    rules = rules if rules is not None else load_rules(spec.kind)
    if cell is None:
        cell = (user.cell if user is not None else
                unit_cell(spec.kind, spec.unit.width_um, spec.unit.length_um, None, rules))
    px = min_pitch(cell, rules, 1)[0]
    probe = with_pitch(spec, (px, spec.array.pitch_um[1]))
    tracks = plan_tracks(pattern, probe, rules, cell, user=user is not None)
    return with_pitch(spec, min_pitch(cell, rules, tracks))
