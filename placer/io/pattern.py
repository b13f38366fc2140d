"""Pattern text format: one line per row, a token per slot; reader and writer."""

from __future__ import annotations

import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from placer.errors import LimitError, PatternError, shown
from placer.io.files import read_text
from placer.io.spec import Spec
from placer.limits import MAX_DEVICES, MAX_NAME, MAX_SLOTS, MAX_UNITS

__all__ = [
    "DUMMY",
    "EMPTY",
    "Pattern",
    "parse_pattern",
    "format_pattern",
    "read_pattern",
    "check_against_spec",
    "unit_positions",
]

#: Slot codes below zero; device ids are 0, 1, 2, ...
DUMMY = -1
EMPTY = -2

_TOKEN = re.compile(r"([A-Za-z][A-Za-z0-9_]*)([<>]?)\Z")
_MARK = {"": 0, ">": 1, "<": -1}
_MARK_TEXT = {0: "", 1: ">", -1: "<"}


@dataclass(frozen=True, eq=False)
class Pattern:
    """An arrangement of device units on a grid of slots.

    Attributes
    ----------
    devices : tuple of str
        Device names; ``ids`` refers to them by index.
    ids : ndarray of int, shape (rows, columns)
        Device index per slot, or ``DUMMY`` / ``EMPTY``.
    orient : ndarray of int8, shape (rows, columns)
        +1 for ``>``, -1 for ``<`` (source-to-drain direction of a MOS finger), 0 for none.
    """

    devices: tuple[str, ...]
    ids: NDArray[np.int_]
    orient: NDArray[np.int8]

    @property
    def shape(self) -> tuple[int, int]:
        """(rows, columns) of the whole pattern, dummies included."""
        return (int(self.ids.shape[0]), int(self.ids.shape[1]))

    def counts(self) -> tuple[int, ...]:
        """Units of each device, in device order."""
        flat = self.ids[self.ids >= 0]
        return tuple(int(c) for c in np.bincount(flat, minlength=len(self.devices)))

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Pattern):
            return NotImplemented
        return (self.devices == other.devices and np.array_equal(self.ids, other.ids)
                and np.array_equal(self.orient, other.orient))

    def __hash__(self) -> int:
        return hash((self.devices, self.ids.tobytes(), self.orient.tobytes()))

    def reordered(self, devices: Sequence[str]) -> Pattern:
        """The same pattern with device indices following ``devices``."""
        index = {name: i for i, name in enumerate(devices)}
        remap = np.array([index[name] for name in self.devices], dtype=int)
        ids = np.where(self.ids >= 0, remap[np.maximum(self.ids, 0)], self.ids)
        return Pattern(tuple(devices), ids, self.orient.copy())


def parse_pattern(text: str, source: str = "<pattern>") -> Pattern:
    """Parse pattern text; errors name ``source`` and the line.

    Parameters
    ----------
    text : str
        Rows of device names (``.`` a dummy, ``-`` empty, ``>``/``<`` an orientation).
    source : str
        What error messages call the text (a file name).

    Returns
    -------
    Pattern
        The grid of device ids and orientations, devices in order of appearance.

    Raises
    ------
    PatternError
        With one line naming ``source``, the line and the problem.

    Examples
    --------
    >>> p = parse_pattern("A B B A\\n")
    >>> p.devices, p.ids.tolist()
    (('A', 'B'), [[0, 1, 1, 0]])
    """
    rows: list[list[int]] = []
    marks: list[list[int]] = []
    names: dict[str, int] = {}
    width = None
    first_line = 0
    units = 0
    for lineno, line in enumerate(text.removeprefix("\ufeff").splitlines(), start=1):
        stripped = line.strip()
        if not stripped or stripped.startswith("#"):
            continue
        tokens = stripped.split()
        if width is None:
            width, first_line = len(tokens), lineno
            if width * 1 > MAX_SLOTS:
                raise LimitError(f"{source}:{lineno}: {width} slots in a row exceed the limit "
                                 f"of {MAX_SLOTS}")
        elif len(tokens) != width:
            raise PatternError(f"{source}:{lineno}: row has {len(tokens)} tokens, expected "
                               f"{width} like the first row (line {first_line})")
        if (len(rows) + 1) * width > MAX_SLOTS:
            raise LimitError(f"{source}:{lineno}: more than {MAX_SLOTS} slots, the limit")
        row: list[int] = []
        mark: list[int] = []
        for col, token in enumerate(tokens, start=1):
            if token == ".":
                row.append(DUMMY)
                mark.append(0)
                continue
            if token == "-":
                row.append(EMPTY)
                mark.append(0)
                continue
            m = _TOKEN.match(token)
            if not m:
                raise PatternError(
                    f"{source}:{lineno}: token {col} {shown(token)} is not a device name (letter, "
                    "then letters, digits, _; optionally > or <), '.' (dummy) or '-' (empty)")
            name = m.group(1)
            if name not in names:
                if len(name) > MAX_NAME:
                    raise PatternError(f"{source}:{lineno}: device name {shown(name)} is longer "
                                       f"than {MAX_NAME} characters")
                if len(names) == MAX_DEVICES:
                    raise LimitError(f"{source}:{lineno}: more than {MAX_DEVICES} devices, "
                                     "the limit")
            row.append(names.setdefault(name, len(names)))
            mark.append(_MARK[m.group(2)])
            units += 1
            if units > MAX_UNITS:
                raise LimitError(f"{source}:{lineno}: more than {MAX_UNITS} device units, the "
                                 "limit")
        rows.append(row)
        marks.append(mark)
    if not rows:
        raise PatternError(f"{source}: no rows: the pattern is empty")
    if not names:
        raise PatternError(f"{source}: no device units, only dummies or empty slots")
    lowered: dict[str, str] = {}
    for name in names:
        if name.lower() in lowered:
            raise PatternError(f"{source}: device names {shown(lowered[name.lower()])} and "
                               f"{shown(name)} differ only by case; names must stay distinct")
        lowered[name.lower()] = name
    return Pattern(tuple(names), np.array(rows, dtype=int), np.array(marks, dtype=np.int8))


def format_pattern(pattern: Pattern, header: Iterable[str] = ()) -> str:
    """Write a pattern as text, columns aligned; ``header`` lines become ``#`` comments.

    Parameters
    ----------
    pattern : Pattern
        The arrangement to write.
    header : iterable of str
        Comment lines put above the grid.

    Returns
    -------
    str
        The pattern text, which :func:`parse_pattern` reads back to the same pattern.

    Examples
    --------
    >>> print(format_pattern(parse_pattern("A> B< . -")), end="")
    A> B< .  -
    """
    out = [f"# {line}".rstrip() for line in header]
    tokens = [[_token(pattern, int(i), int(o)) for i, o in zip(r, m, strict=True)]
              for r, m in zip(pattern.ids, pattern.orient, strict=True)]
    width = max(len(t) for row in tokens for t in row)
    for row in tokens:
        out.append(" ".join(t.ljust(width) for t in row).rstrip())
    return "\n".join(out) + "\n"


def _token(pattern: Pattern, i: int, o: int) -> str:
    if i == DUMMY:
        return "."
    if i == EMPTY:
        return "-"
    return pattern.devices[i] + _MARK_TEXT[o]


def read_pattern(path: str | Path) -> Pattern:
    """Read the pattern file at ``path``.

    Parameters
    ----------
    path : str or Path
        A pattern text file (UTF-8, at most the file-size limit).

    Returns
    -------
    Pattern
        The pattern it holds.

    Raises
    ------
    PatternError
        When the file cannot be read or is not a pattern.
    """
    path = Path(path)
    return parse_pattern(read_text(path, "pattern", PatternError), source=str(path))


def check_against_spec(pattern: Pattern, spec: Spec, source: str) -> Pattern:
    """Check the pattern holds exactly the spec's units; return it in spec device order."""
    unknown = [n for n in pattern.devices if n not in spec.devices]
    if unknown:
        raise PatternError(f"{source}: device {shown(unknown[0])} is not in the spec {spec.source} "
                           f"(devices: {', '.join(spec.devices)})")
    ordered = pattern.reordered(spec.devices)
    for name, want, have in zip(spec.devices, spec.counts, ordered.counts(), strict=True):
        if want != have:
            raise PatternError(f"{source}: device {shown(name)} has {have} units, the spec "
                               f"{spec.source} says {want}")
    return ordered


def unit_positions(pattern: Pattern, pitch_um: tuple[float, float]
                   ) -> tuple[NDArray[np.float64], NDArray[np.int_]]:
    """Centres (um) and device ids of the device units, in reading order.

    Slot (row r, column c) sits at x = c * pitch_x, y = -r * pitch_y.

    Examples
    --------
    >>> xy, dev = unit_positions(parse_pattern("A . B"), (2.0, 1.0))
    >>> xy.tolist(), dev.tolist()
    ([[0.0, 0.0], [4.0, 0.0]], [0, 1])
    """
    r, c = np.nonzero(pattern.ids >= 0)
    xy = np.column_stack([c * pitch_um[0], -r * pitch_um[1]]).astype(float)
    return xy, pattern.ids[r, c].astype(int)
