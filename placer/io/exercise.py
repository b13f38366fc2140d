"""A lesson page's exercise file (TOML): the block it is for, the board it starts from,
its goals, the swaps allowed, its hints; read and validated once, and written back.

An exercise file::

    [exercise]
    block = "wren_pair"             # the spec's name: the file is for that block
    title = "One row: from AB to ABBA"
    task = "Swap units until ..."   # what the trainee is asked
    start = "clustered"             # the board it opens on: clustered, interdigitated, mirrored
    max_swaps = 2                   # the goals count as met within this many swaps
    hints = ["first hint", "second hint"]

    [[goal]]                        # one to eight goals, all to be met
    figure = "linear_ppm"           # see FIGURES
    at_most = 0.5
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from placer.errors import ExerciseError, LimitError, SpecError, shown
from placer.io.files import read_text
from placer.io.spec import Spec, toml_data
from placer.kinds import KINDS

__all__ = ["Goal", "Exercise", "FIGURES", "STARTS", "read_exercise", "parse_exercise",
           "exercise_text", "MAX_SWAPS", "MAX_HINTS", "MAX_GOALS"]

#: The figures a goal may bound: key -> (the goal's short name on the page, unit). Each
#: is a figure the page shows: the worst pair's at the spec's own field (linear in its
#: worst direction, quadratic at its worst curvature), or the routing estimate's (the
#: spanning-tree wire of all devices, the tracks of all rows, the MOS diffusion breaks and
#: the fingers without a partner).
FIGURES: dict[str, tuple[str, str]] = {
    "linear_ppm": ("linear error", "ppm"),
    "quadratic_ppm": ("quadratic error", "ppm"),
    "correlated_sigma_ppm": ("correlated sigma", "ppm"),
    "total_tree_um": ("wire", "um"),
    "row_tracks": ("row tracks", ""),
    "diffusion_breaks": ("diffusion breaks", ""),
    "unpaired_fingers": ("fingers alone", ""),
}
#: The arrangements an exercise may start from (the page's textbook buttons).
STARTS = ("clustered", "interdigitated", "mirrored")
MAX_SWAPS = 1000
MAX_HINTS = 12
MAX_GOALS = 8
_MAX_TEXT = 2000
_KEYS = {"exercise": ("block", "title", "task", "start", "max_swaps", "hints"),
         "goal": ("figure", "at_most")}


@dataclass(frozen=True)
class Goal:
    """One goal: a figure of the board at most a bound."""

    figure: str
    at_most: float


@dataclass(frozen=True)
class Exercise:
    """An exercise of the lesson page (see the module's docstring for the file)."""

    block: str
    title: str
    task: str
    start: str
    max_swaps: int
    goals: tuple[Goal, ...]
    hints: tuple[str, ...]


def read_exercise(path: Path, spec: Spec) -> Exercise:
    """Read and validate the exercise file at ``path`` for ``spec``; every fault is one
    :class:`ExerciseError` line naming the file and key."""
    text = read_text(path, "exercise file", ExerciseError)
    return parse_exercise(text, str(path), spec)


def parse_exercise(text: str, source: str, spec: Spec) -> Exercise:
    """The exercise in TOML ``text`` (``source`` names it in errors), checked against
    ``spec``."""
    try:
        data = toml_data(text, source)
    except (SpecError, LimitError) as err:
        raise ExerciseError(str(err)) from None
    for key in data:
        if key not in _KEYS:
            raise ExerciseError(f"{source}: unknown table or key {shown(key)}; an exercise "
                                "file has [exercise] and [[goal]] tables")
    ex = data.get("exercise")
    if not isinstance(ex, dict):
        raise ExerciseError(f"{source}: no [exercise] table; it names the block, the title, "
                            "the start and the swaps allowed")
    _known(ex, "exercise", source)
    where = f"{source}: [exercise]"
    block = _text(ex, "block", where, 100)
    if block != spec.name:
        raise ExerciseError(f"{where} block is {shown(block)}, but the spec's name is "
                            f"{shown(spec.name)}; give the spec the exercise was written for")
    title = _text(ex, "title", where, 200)
    task = _text(ex, "task", where, _MAX_TEXT)
    start = ex.get("start", "clustered")
    if start not in STARTS:
        raise ExerciseError(f"{where} start must be one of {', '.join(map(repr, STARTS))}, "
                            f"got {shown(start)}")
    swaps = ex.get("max_swaps")
    if isinstance(swaps, bool) or not isinstance(swaps, int) or not 1 <= swaps <= MAX_SWAPS:
        raise ExerciseError(f"{where} max_swaps must be a whole number from 1 to {MAX_SWAPS}, "
                            f"got {shown(swaps) if swaps is not None else 'nothing'}")
    hints = ex.get("hints", [])
    if not isinstance(hints, list) or len(hints) > MAX_HINTS:
        raise ExerciseError(f"{where} hints must be an array of at most {MAX_HINTS} strings, "
                            f"got {shown(hints)}")
    for k, h in enumerate(hints):
        if not isinstance(h, str) or not h.strip() or len(h) > _MAX_TEXT:
            raise ExerciseError(f"{where} hints[{k}] must be a non-empty string of at most "
                                f"{_MAX_TEXT} characters, got {shown(h)}")
    goals = _goals(data.get("goal"), source, spec)
    return Exercise(block, title, task, start, swaps, goals, tuple(h.strip() for h in hints))


def _known(table: dict[str, Any], name: str, source: str, where: str | None = None) -> None:
    for key in table:
        if key not in _KEYS[name]:
            raise ExerciseError(f"{source}: {where or f'[{name}]'} unknown key {shown(key)}; "
                                f"allowed: {', '.join(_KEYS[name])}")


def _text(table: dict[str, Any], key: str, where: str, limit: int) -> str:
    value = table.get(key)
    if not isinstance(value, str) or not value.strip() or len(value) > limit:
        got = "nothing" if value is None else shown(value)
        raise ExerciseError(f"{where} {key} must be a non-empty string of at most {limit} "
                            f"characters, got {got}")
    return value.strip()


def _goals(goals: Any, source: str, spec: Spec) -> tuple[Goal, ...]:
    if not isinstance(goals, list) or not 1 <= len(goals) <= MAX_GOALS:
        raise ExerciseError(f"{source}: give 1 to {MAX_GOALS} [[goal]] tables (figure and "
                            "at_most), got " + ("none" if goals is None else shown(goals)))
    fingers = KINDS[spec.kind].fingers
    out: list[Goal] = []
    for k, g in enumerate(goals):
        where = f"[[goal]] {k + 1}"
        if not isinstance(g, dict):
            raise ExerciseError(f"{source}: {where} must be a table, got {shown(g)}")
        _known(g, "goal", source, where)
        fig = g.get("figure")
        if fig not in FIGURES:
            raise ExerciseError(f"{source}: {where} figure must be one of "
                                f"{', '.join(FIGURES)}, got "
                                f"{'nothing' if fig is None else shown(fig)}")
        if fig in ("diffusion_breaks", "unpaired_fingers") and not fingers:
            raise ExerciseError(f"{source}: {where} figure {fig} counts MOS fingers, and "
                                f"the spec's kind is {shown(spec.kind)}")
        if fig == "unpaired_fingers" and spec.unit.diffusion != "pairs":
            raise ExerciseError(f"{source}: {where} figure unpaired_fingers needs fingers two "
                                "to an island ([unit] diffusion = \"pairs\")")
        if any(o.figure == fig for o in out):
            raise ExerciseError(f"{source}: {where} bounds {fig} a second time; give each "
                                "figure one goal")
        bound = g.get("at_most")
        if (isinstance(bound, bool) or not isinstance(bound, int | float)
                or not math.isfinite(bound) or bound < 0):
            raise ExerciseError(f"{source}: {where} at_most must be a number of at least 0, "
                                f"got {'nothing' if bound is None else shown(bound)}")
        out.append(Goal(fig, float(bound)))
    return tuple(out)


def _quoted(text: str) -> str:
    """A TOML basic string of ``text``."""
    out = text.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n")
    out = "".join(ch if ch >= " " or ch == "\t" else f"\\u{ord(ch):04x}" for ch in out)
    return f'"{out}"'


def exercise_text(ex: Exercise, comment: str = "") -> str:
    """The exercise as the TOML :func:`parse_exercise` reads (``comment``: lines put
    first, each after ``#``)."""
    lines = [f"# {ln}".rstrip() for ln in comment.splitlines()]
    lines += ["[exercise]", f"block = {_quoted(ex.block)}", f"title = {_quoted(ex.title)}",
              f"task = {_quoted(ex.task)}", f"start = {_quoted(ex.start)}",
              f"max_swaps = {ex.max_swaps}", "hints = ["]
    lines += [f"  {_quoted(h)}," for h in ex.hints]
    lines.append("]")
    for g in ex.goals:
        name, unit = FIGURES[g.figure]
        lines += ["", "[[goal]]", f"figure = {_quoted(g.figure)}    # {name}"
                  + (f", {unit}" if unit else ""), f"at_most = {g.at_most!r}"]
    return "\n".join(lines) + "\n"
