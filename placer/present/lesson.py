"""The lesson page: one self-contained HTML file in which a trainee swaps units of an
arrangement and watches every figure of the model change.

:func:`lesson_data` gathers what the page needs (the spec's magnitudes, the ranked pairs,
the arrangements its buttons load, and the arrangement-independent parts of the budget)
as plain JSON; :func:`render_page` puts it, the page's script (``web/lesson.js``: the
same formulas as ``grade``) and its style sheet into one file with nothing to fetch.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from importlib import resources
from typing import Any

from placer.errors import LimitError
from placer.io.exercise import FIGURES, Exercise
from placer.io.pattern import Pattern
from placer.io.spec import Spec
from placer.kinds import KINDS

__all__ = ["LessonArrangement", "lesson_data", "render_page", "spec_title", "MAX_LESSON_UNITS",
           "sequence_lesson_data", "render_sequence_page", "MAX_SEQUENCE_SLOTS"]

#: The page builds the correlated sums over every pair of units when it loads an
#: arrangement (N^2 kernel values; a swap then costs N): beyond this size loading lags.
MAX_LESSON_UNITS = 1024
#: The sequence page draws every slot: beyond this many the board stops being readable.
MAX_SEQUENCE_SLOTS = 4096


@dataclass(frozen=True)
class LessonArrangement:
    """One arrangement a button of the page loads: its label, a line on what it is, and
    the full pattern (in the spec's device order)."""

    label: str
    note: str
    pattern: Pattern


def lesson_data(spec: Spec, arrangements: list[LessonArrangement],
                exercise: Exercise | None = None) -> dict[str, Any]:
    """Everything the page computes from, as JSON-ready values; the first arrangement is
    the one the page opens with, unless an ``exercise`` names its start (then the page
    opens on that, and its reveal loads the arrangement labelled "optimised")."""
    from placer.present.plot import DUMMY_COLOUR, device_colours

    if spec.n_units > MAX_LESSON_UNITS:
        raise LimitError(f"{spec.source}: {spec.n_units} units; the lesson page recomputes "
                         f"every figure on each swap and handles at most {MAX_LESSON_UNITS}")
    g = spec.gradient
    c = spec.correlated
    area = spec.unit.area_um2
    data: dict[str, Any] = {
        "name": spec.name,
        "kind": spec.kind,
        "devices": list(spec.devices),
        "counts": list(spec.counts),
        "colours": [list(ch) for ch in device_colours(len(spec.devices))],
        "dummy_colour": DUMMY_COLOUR,
        "pitch_um": list(spec.array.pitch_um),
        "linear_ppm_per_um": g.linear_ppm_per_um,
        "quadratic_ppm_per_um2": g.quadratic_ppm_per_um2,
        "gradient_described": g.described,
        # the page's field controls start from the spec's direction (else +x)
        "direction_deg": g.direction_deg,
        "correlated": {"sigma_ppm": c.sigma_ppm, "length_um": c.length_um,
                       "kernel": c.kernel},
        "white": {"a_param_pct_um": spec.mismatch.a_param_pct_um, "unit_area_um2": area},
        "pairs": [list(p) for p in spec.ranked_pairs()],
        "arrangements": [{"label": a.label, "note": a.note,
                          "ids": a.pattern.ids.tolist(),
                          "orient": a.pattern.orient.tolist()} for a in arrangements],
        "budget": _budget_data(spec),
        "routing": _routing_data(spec),
        "exercise": None if exercise is None else _exercise_data(exercise, arrangements),
        "editor": _editor_data(spec, arrangements, exercise),
    }
    return data


def _editor_data(spec: Spec, arrangements: list[LessonArrangement],
                 exercise: Exercise | None) -> dict[str, Any]:
    """What the page's new-board controls need: the core the page opened on and its
    dummy style, the limit, the budget's count-independent parts, or why the page
    cannot build a board itself (it repeats only the baselines' deal on a core without
    constraints)."""
    from placer.model.grid import PAD

    why = None
    p = spec.placement
    if exercise is not None:
        why = "an exercise keeps its own board"
    elif p.mask is not None or p.pins or p.symmetry != "none" or any(
            g.rows is not None for g in p.groups):
        why = ("this spec constrains the core (mask, keep-outs, pins, symmetry or row "
               "bands): run placer lesson on a spec with the counts and shape you want")
    pr, pc = PAD[spec.array.dummies]
    # the core of placer's clustered board (the first one may be the user's own pattern,
    # of any shape)
    first = next((a for a in arrangements if a.label == "clustered"), arrangements[0])
    shape = first.pattern.ids.shape
    names = list(spec.devices)
    budget: dict[str, Any] | None = None
    e = spec.electrical
    if e is not None:
        covered = [names.index(n) for n in spec.budget_devices()]
        if KINDS[spec.kind].budget == "dac":
            term = e.termination
            budget = {"kind": "dac", "switched": [d for d in covered if names[d] != term]}
        else:
            current = None
            if KINDS[spec.kind].quantity == "current":
                current = {"a_beta_pct_um": e.a_beta_pct_um, "a_vt_mv_um": e.a_vt_mv_um,
                           "gm_id_per_v": e.gm_id_per_v}
            budget = {"kind": "ratio", "reference": names.index(e.reference or names[0]),
                      "devices": covered, "current": current}
    return {"why": why, "rows": max(1, int(shape[0]) - 2 * pr),
            "cols": max(1, int(shape[1]) - 2 * pc),
            "dummies": spec.array.dummies, "max_units": MAX_LESSON_UNITS,
            "budget": budget}


def _exercise_data(ex: Exercise, arrangements: list[LessonArrangement]) -> dict[str, Any]:
    """The exercise as the page shows and scores it: the arrangements it starts from and
    reveals by their index among the page's."""
    labels = [a.label for a in arrangements]
    return {"title": ex.title, "task": ex.task, "start": labels.index(ex.start),
            "best": labels.index("optimised"), "max_swaps": ex.max_swaps,
            "goals": [{"figure": g.figure, "at_most": g.at_most, "label": FIGURES[g.figure][0],
                       "unit": FIGURES[g.figure][1]} for g in ex.goals],
            "hints": list(ex.hints)}


def _routing_data(spec: Spec) -> dict[str, Any]:
    """What the page's routing cost needs beyond the board: for MOS fingers the
    (source, drain) net numbers of each device, the dummy net's, and whether fingers go
    two to a diffusion island (as ``estimate_routing`` is called for an arrangement)."""
    from placer.model.routing_estimate import dummy_net_id, mos_finger_nets

    if not KINDS[spec.kind].fingers:
        return {"fingers": False, "nets": None, "dummy_net": None, "pairs": False}
    nets = mos_finger_nets(spec)
    return {"fingers": True, "nets": [list(n) for n in nets] if nets else None,
            "dummy_net": dummy_net_id(spec), "pairs": spec.unit.diffusion == "pairs"}


def _budget_data(spec: Spec) -> dict[str, Any] | None:
    """The budget's parts that no arrangement changes; the page adds the rest."""
    from placer.model import variation
    from placer.model.budget import clm_error, current_sigma

    e = spec.electrical
    if e is None:
        return None
    names = list(spec.devices)
    count = dict(zip(names, spec.counts, strict=True))
    if KINDS[spec.kind].budget == "dac":
        term = e.termination
        switched = [n for n in spec.budget_devices() if n != term]
        bits = sorted(switched, key=lambda n: (count[n], names.index(n)))
        return {"kind": "dac", "fit": e.fit, "bits": bits,
                "index": [names.index(n) for n in bits],
                "weights": [float(count[n]) for n in bits],
                "termination": None if term is None else names.index(term),
                "termination_weight": float(count[term]) if term else 0.0}
    ref = e.reference or names[0]
    area = {n: c * spec.unit.area_um2 for n, c in count.items()}
    lines = []
    for name in spec.budget_devices():
        if name == ref:
            continue
        line: dict[str, Any] = {"device": name, "pair": [names.index(name), names.index(ref)]}
        if KINDS[spec.kind].quantity == "current":
            s_beta = float(variation.pelgrom_sigma(e.a_beta_pct_um, area[name], area[ref]))
            s_vt = float(variation.pelgrom_sigma(e.a_vt_mv_um, area[name], area[ref]))
            line["clm_pct"] = 100.0 * clm_error(e.lambda_per_v, e.vds_v[name], e.vds_v[ref])
            line["white_pct"] = current_sigma(s_beta, 0.1 * s_vt, e.gm_id_per_v)
        else:
            white_ppm = 1e4 * float(variation.pelgrom_sigma(spec.mismatch.a_param_pct_um,
                                                        area[name], area[ref]))
            line["clm_pct"] = 0.0
            line["white_pct"] = 1e-4 * white_ppm
        lines.append(line)
    return {"kind": "ratio", "reference": ref, "k_sigma": e.k_sigma,
            "tolerance_pct": e.tolerance_pct, "lines": lines}


def _asset(name: str) -> str:
    return resources.files("placer.present.web").joinpath(name).read_text(encoding="utf-8")


def render_page(data: dict[str, Any]) -> str:
    """The page: the template with the style sheet, the script and the data inlined.

    The data is JSON inside a ``<script type="application/json">`` element; every ``<``
    in it is escaped, so no name can close the element early or open a comment.
    """
    # "<" occurs in JSON only inside strings, where \u003c reads the same: no name can
    # close the element ("</script>") or open a comment ("<!--") in the page
    blob = json.dumps(data, allow_nan=False, separators=(",", ":")).replace("<", "\\u003c")
    page = _asset("lesson.html")
    for key, value in (("/*STYLE*/", _asset("lesson.css")), ("/*DATA*/", blob),
                       ("/*SCRIPT*/", _asset("lesson.js")),
                       ("{{TITLE}}", f"{spec_title(data)} - placer lesson")):
        page = page.replace(key, value)
    return page


def sequence_lesson_data(spec: Any, orders: list[tuple[str, str, Any]]) -> dict[str, Any]:
    """What the sequence page computes from: a unary spec's core and fields, and the
    orders its buttons load (label, a line on it, :class:`placer.io.unaryspec.UnaryLayout`),
    the first the one it opens with."""
    from placer.model.unary import slot_field

    if spec.rows * spec.cols > MAX_SEQUENCE_SLOTS:
        raise LimitError(f"{spec.source}: {spec.rows} x {spec.cols} slots; the sequence "
                         f"page draws every slot and handles at most {MAX_SEQUENCE_SLOTS}")
    return {
        "name": spec.name, "rows": spec.rows, "cols": spec.cols,
        "pitch_um": list(spec.pitch_um), "cells": spec.cells, "sub_units": spec.sub_units,
        "binary_bits": spec.binary_bits, "lsb_units": spec.lsb_units,
        "linear_ppm_per_um": spec.fields.linear_ppm_per_um,
        "quadratic_ppm_per_um2": spec.fields.quadratic_ppm_per_um2,
        # every slot's field but the linear gradient (the bowl, and a hot spot when
        # given), ppm: the page sums it as it sums positions
        "field_ppm": slot_field(spec.rows, spec.cols, spec.pitch_um, spec.fields).tolist(),
        "arrangements": [{"label": label, "note": note, "grid": lay.grid().tolist()}
                         for label, note, lay in orders],
    }


def render_sequence_page(data: dict[str, Any]) -> str:
    """The sequence page: its template with the lesson's style sheet, its script and the
    data inlined (escaped as :func:`render_page` does)."""
    blob = json.dumps(data, allow_nan=False, separators=(",", ":")).replace("<", "\\u003c")
    page = _asset("sequence.html")
    for key, value in (("/*STYLE*/", _asset("lesson.css")), ("/*DATA*/", blob),
                       ("/*SCRIPT*/", _asset("sequence.js")),
                       ("{{TITLE}}", f"{data['name']} ({data['cells']} unary cells) - placer "
                                     "lesson")):
        page = page.replace(key, value)
    return page


def spec_title(data: dict[str, Any]) -> str:
    """The block's name and devices, as the page's title says them."""
    units = ", ".join(f"{n} = {c}" for n, c in zip(data["devices"], data["counts"],
                                                    strict=True))
    return f"{data['name']} ({units})"

