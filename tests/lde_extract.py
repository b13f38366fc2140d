"""Independent checker of the diffusion-length stress term of every device in a GDSII layout.

It reads a GDSII file and a layer-map file and, for every labelled transistor finger,
measures how far its diffusion island reaches to the left and to the right of the
channel (SA and SB), then evaluates the stress term of the finger and averages it
per device.  It is written from the layout contract alone and never imports the
code that writes the layouts, so that the two can check each other.

The contract checked
--------------------
* A GDSII library with one top cell (the cell no other cell references).  Unit
  cells are placed by references; a reference may carry rotation pi together with
  x_reflection, whose net effect is a left-right mirror about the reference's
  origin.  Everything is flattened (``tests.extraction.read_layout`` applies
  reflection, magnification, rotation, translation and arrays of every reference,
  to texts as well as shapes).
* The layer map is a TOML file whose ``[layers]`` table maps a role to
  ``[layer, datatype]``.  The roles used here are ``diffusion``, ``gate`` and
  ``label`` (texts); every other role and table is ignored.
* A transistor finger is one connected region of (gate AND diffusion): its
  channel.  Gates run vertically, so the channel's x extent is the gate length L
  and its y extent the width W, in micrometres (the file's units give the size of
  a database unit).
* A diffusion island is the union of all diffusion shapes after flattening;
  shapes that touch or overlap form one island.
* SA of a finger is the distance along x from the channel's left edge to the left
  end of its island, measured on the horizontal line through the channel's
  centre; SB is the distance from the channel's right edge to the island's right
  end on the same line.  Left and right are as drawn in the top cell.
* The device of a finger is named by a text on the label role whose anchor lies
  inside (or on the boundary of) the channel; the writer puts each active unit's
  name at the unit's centre, the centre of its channel.  A channel with no label
  is a dummy finger: it takes part in the islands but is not reported.  A
  label-role text on no channel is listed as stray; texts on other layers are
  ignored.

The stress term
---------------
For one finger the term is ``Inv_sa + Inv_sb`` of the BSIM4 layout-dependent
stress-effect model (BSIM4 manual, UC Berkeley, "Layout-dependent stress
effect"), in the form the model code evaluates for a single-finger instance
(for instance ngspice's ``b4temp.c``)::

    Inv_sa = 1 / (SA + 0.5 L)
    Inv_sb = 1 / (SB + 0.5 L)
    term   = Inv_sa + Inv_sb          [1/um, with SA, SB and L in um]

BSIM4 averages Inv_sa and Inv_sb over the fingers of a multi-finger device, so a
device's term here is the mean of its fingers' terms.  SA = 0 gets no special
treatment.

Findings that are reported rather than raised
---------------------------------------------
* ``stray``: label texts on no channel.
* ``irregular``: fingers whose island, within the channel's y range, is not one
  full-height rectangle spanning the channel's width (so the left and right ends
  would differ from one horizontal line to the next), or whose channel is not a
  rectangle.  These fingers are still measured on the centre line and reported
  under their device, unless the centre line misses the island altogether.
* ``conflicts``: channels carrying two or more different label names; such a
  finger belongs to no device.

Command line::

    python tests/lde_extract.py LAYOUT.gds --layers MAP.toml [--cell NAME]

prints one line per device (name, fingers, SA min..max, SB min..max, mean term in
1/um to 4 significant figures) and the other findings on standard error; the exit
code is 0 when there are no stray labels, irregular fingers or conflicts, 1 when
there are, and 2 when the input cannot be read.
"""

from __future__ import annotations

import argparse
import sys
import tomllib
from collections import defaultdict
from collections.abc import Sequence
from dataclasses import dataclass, field
from os import PathLike
from pathlib import Path
from typing import NamedTuple

import numpy as np
import shapely

try:
    from tests.extraction import Layout, components, read_layout
except ModuleNotFoundError:  # run as a script: python tests/lde_extract.py
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    from tests.extraction import Layout, components, read_layout

__all__ = [
    "Conflict",
    "DeviceLod",
    "Finger",
    "Irregular",
    "LodReport",
    "Stray",
    "finger_term",
    "lod_by_device",
    "main",
]

Key = tuple[int, int]

_ROLES = ("diffusion", "gate", "label")
_REL_TOL = 1e-9  # relative tolerance of the rectangle tests (areas in squared db units)


# --------------------------------------------------------------------------
# Records
# --------------------------------------------------------------------------


class Finger(NamedTuple):
    """One measured finger; lengths in micrometres, the term in 1/um."""

    x: float
    y: float
    sa_um: float
    sb_um: float
    l_um: float
    w_um: float
    term_per_um: float


class Stray(NamedTuple):
    """A label-role text whose anchor lies on no channel (position in micrometres)."""

    text: str
    x: float
    y: float


class Irregular(NamedTuple):
    """A finger whose SA/SB depend on where they are measured.

    ``device`` is None for a dummy finger; ``x`` and ``y`` are the channel's centre
    in micrometres.
    """

    device: str | None
    x: float
    y: float
    reason: str


class Conflict(NamedTuple):
    """A channel carrying more than one label name (centre in micrometres)."""

    names: tuple[str, ...]
    x: float
    y: float


@dataclass
class DeviceLod:
    """The fingers of one device and the summary of their stress terms.

    Attributes
    ----------
    fingers : list of Finger
        Sorted by position (y, then x).
    mean_term : float
        Mean of the fingers' terms, 1/um.
    sa_range, sb_range : (float, float)
        Smallest and largest SA and SB over the fingers, um.
    """

    fingers: list[Finger]
    mean_term: float
    sa_range: tuple[float, float]
    sb_range: tuple[float, float]

    @classmethod
    def of(cls, fingers: list[Finger]) -> DeviceLod:
        """Summarise a non-empty list of fingers."""
        ordered = sorted(fingers, key=lambda f: (f.y, f.x))
        sa = [f.sa_um for f in ordered]
        sb = [f.sb_um for f in ordered]
        mean = sum(f.term_per_um for f in ordered) / len(ordered)
        return cls(ordered, mean, (min(sa), max(sa)), (min(sb), max(sb)))


@dataclass
class LodReport:
    """What the checker measured and found.

    Attributes
    ----------
    devices : dict of str to DeviceLod
        Every labelled device, by name (sorted).
    dummies : int
        Channels without a label.
    stray : list of Stray
        Label texts on no channel.
    islands : int
        Number of diffusion islands.
    irregular : list of Irregular
        Fingers whose island is not a full-height rectangle across their width.
    conflicts : list of Conflict
        Channels with two or more different label names.
    """

    devices: dict[str, DeviceLod]
    dummies: int
    stray: list[Stray]
    islands: int
    irregular: list[Irregular] = field(default_factory=list)
    conflicts: list[Conflict] = field(default_factory=list)

    def ok(self) -> bool:
        """True when nothing is stray, irregular or conflicting."""
        return not (self.stray or self.irregular or self.conflicts)

    def device_lines(self) -> list[str]:
        """One line per device: name, fingers, SA and SB ranges, mean term."""
        width = max((len(name) for name in self.devices), default=0)
        return [
            f"{name:<{width}}  fingers {len(d.fingers)}  "
            f"SA {d.sa_range[0]:g}..{d.sa_range[1]:g} um  "
            f"SB {d.sb_range[0]:g}..{d.sb_range[1]:g} um  "
            f"term {d.mean_term:#.4g} /um"
            for name, d in self.devices.items()
        ]

    def finding_lines(self) -> list[str]:
        """A count line, then one line per stray label, irregular finger and conflict."""
        lines = [
            f"islands {self.islands}, dummies {self.dummies}, stray labels {len(self.stray)}, "
            f"irregular fingers {len(self.irregular)}, conflicts {len(self.conflicts)}"
        ]
        lines += [f"stray label: {s.text!r} at ({s.x:g}, {s.y:g}) um" for s in self.stray]
        lines += [
            f"irregular: {i.device or '(dummy)'} at ({i.x:g}, {i.y:g}) um: {i.reason}"
            for i in self.irregular
        ]
        lines += [
            f"conflict: {', '.join(c.names)} at ({c.x:g}, {c.y:g}) um" for c in self.conflicts
        ]
        return lines


# --------------------------------------------------------------------------
# The formula
# --------------------------------------------------------------------------


def finger_term(sa_um: float, sb_um: float, l_um: float) -> float:
    """Stress term of one finger, 1/um: ``1/(SA + L/2) + 1/(SB + L/2)``.

    The form is BSIM4's single-finger ``Inv_sa + Inv_sb`` (BSIM4 manual,
    "Layout-dependent stress effect"; evaluated so in e.g. ngspice's b4temp.c).

    Parameters
    ----------
    sa_um, sb_um : float
        Distances from the channel's edges to the island's ends, um.
    l_um : float
        Drawn gate length, um.

    Returns
    -------
    float
        The term in 1/um.

    Examples
    --------
    >>> round(finger_term(0.6, 1.2, 0.2), 6)  # 1/0.7 + 1/1.3 = 2/0.91
    2.197802
    """
    inv_sa = 1.0 / (sa_um + 0.5 * l_um)
    inv_sb = 1.0 / (sb_um + 0.5 * l_um)
    return inv_sa + inv_sb


# --------------------------------------------------------------------------
# Geometry
# --------------------------------------------------------------------------


def _layer_keys(layers_path: str | PathLike[str]) -> dict[str, Key]:
    """(layer, datatype) of the diffusion, gate and label roles from a layer-map file."""
    with open(layers_path, "rb") as handle:
        data = tomllib.load(handle)
    table = data.get("layers")
    if not isinstance(table, dict):
        raise ValueError(f"{layers_path}: no [layers] table")
    keys: dict[str, Key] = {}
    for role in _ROLES:
        pair = table.get(role)
        if (
            not isinstance(pair, list)
            or len(pair) != 2
            or not all(isinstance(v, int) and not isinstance(v, bool) for v in pair)
        ):
            raise ValueError(f"{layers_path}: role {role!r} must be [layer, datatype]")
        keys[role] = (pair[0], pair[1])
    if keys["diffusion"] == keys["gate"]:
        raise ValueError(f"{layers_path}: diffusion and gate share one layer")
    return keys


def _polygons(geometry: shapely.Geometry) -> np.ndarray:
    """The polygons with positive area among a geometry's parts."""
    parts = shapely.get_parts(geometry)
    keep = (shapely.get_type_id(parts) == shapely.GeometryType.POLYGON) & (
        shapely.area(parts) > 0
    )
    return parts[keep]


def _islands(diffusion: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Diffusion islands.

    Returns the polygons of the diffusion's union, the island of each polygon, and
    one (multi)polygon per island.  Polygons that touch only at a point are parts of
    one island too.
    """
    parts = _polygons(shapely.union_all(diffusion))
    if len(parts) == 0:
        return parts, np.empty(0, dtype=np.intp), np.empty(0, dtype=object)
    a, b = shapely.STRtree(parts).query(parts, predicate="intersects")
    keep = a < b
    n_islands, island = components(len(parts), a[keep], b[keep])
    shapes = shapely.multipolygons(parts, indices=island)
    assert len(shapes) == n_islands
    return parts, island, shapes


def _first_hit(n: int, query: np.ndarray, hit: np.ndarray) -> np.ndarray:
    """For each of n queries, the first hit index (-1 when none)."""
    out = np.full(n, -1, dtype=np.intp)
    if len(query):
        firsts, where = np.unique(query, return_index=True)
        out[firsts] = hit[where]
    return out


def _centre_line_ends(
    islands: np.ndarray, cx: np.ndarray, cy: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Left and right ends of each island's stretch through (cx, cy) along y = cy.

    NaN where the horizontal line misses the island at cx.
    """
    n = len(islands)
    bounds = shapely.bounds(islands)
    ends = np.stack(
        [
            np.stack([bounds[:, 0] - 1.0, cy], axis=1),
            np.stack([bounds[:, 2] + 1.0, cy], axis=1),
        ],
        axis=1,
    )
    lines = shapely.linestrings(ends)
    # line_merge joins pieces that GEOS may have cut at island vertices on the line.
    cut = shapely.line_merge(shapely.intersection(islands, lines))
    pieces, owner = shapely.get_parts(cut, return_index=True)
    is_line = shapely.get_type_id(pieces) == shapely.GeometryType.LINESTRING
    pieces, owner = pieces[is_line], owner[is_line]
    b = shapely.bounds(pieces)
    covers = (b[:, 0] <= cx[owner]) & (b[:, 2] >= cx[owner])
    left = np.full(n, np.inf)
    right = np.full(n, -np.inf)
    np.minimum.at(left, owner[covers], b[covers, 0])
    np.maximum.at(right, owner[covers], b[covers, 2])
    missed = ~np.isfinite(left)
    left[missed] = np.nan
    right[missed] = np.nan
    return left, right


def _band_is_rectangle(
    islands: np.ndarray, channels: np.ndarray, inside: np.ndarray
) -> np.ndarray:
    """Whether each island, cut to its channel's y range, is a rectangle there.

    The piece of the island within the channel's y band that holds the channel
    must equal its own bounding box; then every horizontal line across the
    channel meets the same left and right ends.
    """
    n = len(islands)
    ib = shapely.bounds(islands)
    cb = shapely.bounds(channels)
    bands = shapely.box(ib[:, 0], cb[:, 1], ib[:, 2], cb[:, 3])
    pieces, owner = shapely.get_parts(shapely.intersection(islands, bands), return_index=True)
    mine = (shapely.get_type_id(pieces) == shapely.GeometryType.POLYGON) & shapely.intersects(
        pieces, inside[owner]
    )
    pieces, owner = pieces[mine], owner[mine]
    area = shapely.area(pieces)
    box_area = shapely.area(shapely.envelope(pieces))
    square = np.abs(box_area - area) <= _REL_TOL * box_area
    ok = np.zeros(n, dtype=bool)
    first = _first_hit(n, owner, np.arange(len(owner)))
    has = first >= 0
    ok[has] = square[first[has]]
    return ok


# --------------------------------------------------------------------------
# The measurement
# --------------------------------------------------------------------------


def lod_by_device(
    gds_path: str | PathLike[str],
    layers_path: str | PathLike[str],
    *,
    cell: str | None = None,
) -> LodReport:
    """Measure SA, SB and the stress term of every labelled finger of a layout.

    Parameters
    ----------
    gds_path : path-like
        The GDSII file.
    layers_path : path-like
        The layer-map TOML file (roles ``diffusion``, ``gate`` and ``label``).
    cell : str, optional
        Top cell to flatten; needed only when several cells are unreferenced.

    Returns
    -------
    LodReport

    Raises
    ------
    ValueError
        When the layer map lacks a role, or the layout's top cell is ambiguous or a
        reference cannot be resolved.
    """
    keys = _layer_keys(layers_path)
    layout = read_layout(
        gds_path, {keys["diffusion"], keys["gate"]}, {keys["label"]}, cell=cell
    )
    return _measure(layout, keys)


def _measure(layout: Layout, keys: dict[str, Key]) -> LodReport:
    """Measure a flattened layout (coordinates in database units)."""
    empty = np.empty(0, dtype=object)
    diffusion = layout.polygons.get(keys["diffusion"], empty)
    gate = layout.polygons.get(keys["gate"], empty)
    texts = layout.labels.get(keys["label"], [])
    um = layout.to_um

    parts, island_of_part, island_shapes = _islands(diffusion)
    if len(parts) and len(gate):
        diffusion_union = shapely.union_all(parts)
        channels = _polygons(shapely.intersection(shapely.union_all(gate), diffusion_union))
    else:
        channels = empty
    n = len(channels)

    # Labels: every label-role text names each channel its anchor lies on.
    names: dict[int, set[str]] = defaultdict(set)
    stray: list[Stray] = []
    if texts:
        points = shapely.points(np.array([(x, y) for _, x, y in texts], dtype=float))
        if n:
            ti, ci = shapely.STRtree(channels).query(points, predicate="intersects")
        else:
            ti = ci = np.empty(0, dtype=np.intp)
        for t, c in zip(ti.tolist(), ci.tolist(), strict=True):
            names[c].add(texts[t][0])
        hit = set(ti.tolist())
        stray = sorted(
            Stray(text, um(x), um(y)) for k, (text, x, y) in enumerate(texts) if k not in hit
        )

    devices: dict[str, list[Finger]] = defaultdict(list)
    irregular: list[Irregular] = []
    conflicts: list[Conflict] = []
    dummies = 0
    if n:
        cb = shapely.bounds(channels)
        cx, cy = (cb[:, 0] + cb[:, 2]) / 2, (cb[:, 1] + cb[:, 3]) / 2
        inside = shapely.point_on_surface(channels)
        ci, pj = shapely.STRtree(parts).query(inside, predicate="intersects")
        part = _first_hit(n, ci, pj)
        assert (part >= 0).all(), "a channel lies outside the diffusion it was cut from"
        islands = island_shapes[island_of_part[part]]
        left, right = _centre_line_ends(islands, cx, cy)
        banded = _band_is_rectangle(islands, channels, inside)
        box_area = (cb[:, 2] - cb[:, 0]) * (cb[:, 3] - cb[:, 1])
        square = np.abs(box_area - shapely.area(channels)) <= _REL_TOL * box_area

        for k in range(n):
            labels = sorted(names.get(k, ()))
            device = labels[0] if len(labels) == 1 else None
            x, y = um(cx[k]), um(cy[k])
            if len(labels) > 1:
                conflicts.append(Conflict(tuple(labels), x, y))
            elif not labels:
                dummies += 1
            reason = None
            if np.isnan(left[k]):
                reason = "the centre line misses the island at the channel's centre"
            elif not square[k]:
                reason = "the channel is not a rectangle"
            elif not banded[k]:
                reason = "the island is not a full-height rectangle across the channel"
            if reason is not None:
                irregular.append(Irregular(device, x, y, reason))
            if device is None or np.isnan(left[k]):
                continue
            l_um = um(cb[k, 2] - cb[k, 0])
            sa, sb = um(cb[k, 0] - left[k]), um(right[k] - cb[k, 2])
            devices[device].append(
                Finger(x, y, sa, sb, l_um, um(cb[k, 3] - cb[k, 1]), finger_term(sa, sb, l_um))
            )

    return LodReport(
        devices={name: DeviceLod.of(devices[name]) for name in sorted(devices)},
        dummies=dummies,
        stray=stray,
        islands=len(island_shapes),
        irregular=sorted(irregular, key=lambda i: (i.y, i.x)),
        conflicts=sorted(conflicts, key=lambda c: (c.y, c.x)),
    )


# --------------------------------------------------------------------------
# Command line
# --------------------------------------------------------------------------


def main(argv: Sequence[str] | None = None) -> int:
    """Run the checker from the command line; return the exit code."""
    parser = argparse.ArgumentParser(
        prog="python tests/lde_extract.py",
        description="Measure SA, SB and the BSIM4 stress term of every device of a layout.",
    )
    parser.add_argument("layout", type=Path, help="GDSII file")
    parser.add_argument("--layers", type=Path, required=True, help="layer-map TOML file")
    parser.add_argument("--cell", help="top cell (when several cells are unreferenced)")
    args = parser.parse_args(argv)
    try:
        report = lod_by_device(args.layout, args.layers, cell=args.cell)
    except (OSError, ValueError, tomllib.TOMLDecodeError) as error:
        print(f"error: {args.layout}: {error}", file=sys.stderr)
        return 2
    for line in report.device_lines():
        print(line)
    for line in report.finding_lines():
        print(line, file=sys.stderr)
    return 0 if report.ok() else 1


if __name__ == "__main__":
    sys.exit(main())
