"""Independent connectivity checker for GDSII stick layouts.

This module reads a GDSII file and a layer-map file and reports electrical
problems: shorts, opens, stray net labels and (optionally) spacing between
different nets.  It is written from the layout contract alone, apart from the
code that writes the layouts, so that the two can check each other.

The contract checked
--------------------
* The layer map is a TOML file.  Its ``[layers]`` table gives every role a
  GDSII ``[layer, datatype]`` pair.  Its ``[connect]`` table holds three keys:
  ``conductors`` (a list of roles), ``cuts`` (a table: cut role -> list of
  conductor roles it joins) and ``splits`` (a table: splitting role -> list of
  conductor roles it splits).  Other tables and keys are ignored.  Roles that
  are not named in ``[connect]`` carry no connectivity.
* Every boundary and path (turned into its outline with its width) on a
  conductor's (layer, datatype) belongs to that conductor.  Shapes of one
  conductor that overlap or touch (share any boundary point) merge into one
  *piece*.
* ``splits = { gate = ["diffusion"] }``: the gate shapes are removed from the
  diffusion before the diffusion is cut into pieces, so the regions on either
  side of a gate are separate pieces.  The splitting role keeps its own
  meaning (a conductor stays a conductor).
* A cut shape joins every piece of each listed conductor that it overlaps with
  positive area (for a split conductor: the pieces after splitting).
* A TEXT element whose layer equals a conductor's layer and whose texttype
  equals that conductor's datatype is a *net label*; it names the net of the
  piece of that conductor that contains or touches its anchor.  Every other
  text is ignored.
* The layout is flattened from its top cell (the only cell no other cell
  references, or the cell named by the caller), applying reflection,
  magnification, rotation, translation and arrays of every reference.
* An electrical *node* is a set of pieces joined through cuts.  A *short* is
  a node that carries two or more distinct net names; an *open* is a net name
  whose labels lie on two or more nodes; a *stray label* is a net label whose
  anchor lies on no piece of its conductor; a *spacing violation* is a pair of
  pieces of one conductor, on different nodes, closer than a minimum spacing
  given for that conductor.

All geometry is snapped to the database grid (whole database units) before it
is compared, so shapes that touch exactly are seen as touching.  Positions and
distances are reported in micrometres.

Command line::

    python -m tests.extraction LAYOUT.gds --layers MAP.toml [--cell NAME]
        [--spacing ROLE=UM ...]

prints ``shorts N, opens N, stray labels N, spacing violations N`` and then one
line per finding; the exit code is 0 when all four counts are zero, 1 when any
is not, and 2 when the input cannot be read.
"""

from __future__ import annotations

import argparse
import math
import sys
import tomllib
from collections import defaultdict
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from os import PathLike
from pathlib import Path

import gdstk
import numpy as np
import shapely

__all__ = ["LayerMap", "Layout", "Report", "check", "components", "main", "read_layout"]

Key = tuple[int, int]
"""A GDSII (layer, datatype) pair, or (layer, texttype) for a text."""

_MICRON = 1e-6
_UNLABELLED = "?"


# --------------------------------------------------------------------------
# Layer map
# --------------------------------------------------------------------------


@dataclass(frozen=True)
class LayerMap:
    """Roles and connectivity rules read from a layer-map file.

    Attributes
    ----------
    layers : dict of str to (int, int)
        Role name -> (layer, datatype).
    conductors : tuple of str
        Roles whose shapes conduct.
    cuts : dict of str to tuple of str
        Cut role -> conductor roles it joins.
    splits : dict of str to tuple of str
        Splitting role -> conductor roles its shapes are removed from.
    """

    layers: dict[str, Key]
    conductors: tuple[str, ...]
    cuts: dict[str, tuple[str, ...]]
    splits: dict[str, tuple[str, ...]]

    @classmethod
    def load(cls, path: str | PathLike[str]) -> LayerMap:
        """Read and validate a layer-map TOML file.

        Parameters
        ----------
        path : path-like
            The TOML file.

        Returns
        -------
        LayerMap

        Raises
        ------
        ValueError
            When the file misses ``[layers]`` or ``[connect]``, or names a role
            it does not define, or gives two connectivity roles the same
            (layer, datatype).
        """
        with open(path, "rb") as handle:
            data = tomllib.load(handle)
        return cls.from_dict(data, source=str(path))

    @classmethod
    def from_dict(cls, data: Mapping[str, object], *, source: str = "layer map") -> LayerMap:
        """Build a layer map from already parsed TOML data (see `load`)."""
        raw_layers = data.get("layers")
        if not isinstance(raw_layers, Mapping):
            raise ValueError(f"{source}: no [layers] table")
        layers: dict[str, Key] = {}
        for role, pair in raw_layers.items():
            if (
                not isinstance(pair, list | tuple)
                or len(pair) != 2
                or not all(isinstance(v, int) and not isinstance(v, bool) for v in pair)
            ):
                raise ValueError(f"{source}: layer {role!r} must be [layer, datatype]")
            layers[str(role)] = (int(pair[0]), int(pair[1]))

        connect = data.get("connect")
        if not isinstance(connect, Mapping):
            raise ValueError(f"{source}: no [connect] table")

        def roles(value: object, what: str) -> tuple[str, ...]:
            if not isinstance(value, list | tuple) or not all(isinstance(v, str) for v in value):
                raise ValueError(f"{source}: {what} must be a list of role names")
            for role in value:
                if role not in layers:
                    raise ValueError(f"{source}: {what} names unknown role {role!r}")
            return tuple(dict.fromkeys(value))

        def table(value: object, what: str) -> dict[str, tuple[str, ...]]:
            if not isinstance(value, Mapping):
                raise ValueError(f"{source}: {what} must be a table")
            out: dict[str, tuple[str, ...]] = {}
            for role, targets in value.items():
                if role not in layers:
                    raise ValueError(f"{source}: {what} names unknown role {role!r}")
                out[str(role)] = roles(targets, f"{what}.{role}")
            return out

        conductors = roles(connect.get("conductors", []), "connect.conductors")
        if not conductors:
            raise ValueError(f"{source}: connect.conductors is empty; nothing to check")
        cuts = table(connect.get("cuts", {}), "connect.cuts")
        splits = table(connect.get("splits", {}), "connect.splits")
        for what, rules in (("cuts", cuts), ("splits", splits)):
            for role, targets in rules.items():
                for target in targets:
                    if target not in conductors:
                        raise ValueError(
                            f"{source}: connect.{what}.{role} names {target!r}, "
                            "which is not a conductor"
                        )
        for role in cuts:
            if role in conductors:
                raise ValueError(f"{source}: {role!r} is both a conductor and a cut")
        seen: dict[Key, str] = {}
        for role in (*conductors, *cuts):
            key = layers[role]
            if key in seen:
                raise ValueError(
                    f"{source}: roles {seen[key]!r} and {role!r} share layer {key[0]}/{key[1]}"
                )
            seen[key] = role
        return cls(layers=layers, conductors=conductors, cuts=cuts, splits=splits)

    def splitters_of(self, conductor: str) -> tuple[str, ...]:
        """Roles whose shapes are removed from `conductor` before it is cut into pieces."""
        return tuple(role for role, targets in self.splits.items() if conductor in targets)

    def shape_keys(self) -> set[Key]:
        """Every (layer, datatype) whose shapes take part in connectivity."""
        roles = {*self.conductors, *self.cuts, *self.splits}
        return {self.layers[role] for role in roles}


# --------------------------------------------------------------------------
# Reading and flattening
# --------------------------------------------------------------------------


@dataclass
class Layout:
    """A flattened layout, in whole database units.

    Attributes
    ----------
    polygons : dict of (int, int) to ndarray of shapely.Polygon
        Flattened shapes per (layer, datatype), coordinates in database units
        (whole numbers).
    labels : dict of (int, int) to list of (str, int, int)
        Flattened texts per (layer, texttype): text and anchor in database units.
    db_um : float
        Size of one database unit in micrometres.
    top : str
        Name of the cell the layout was flattened from.
    """

    polygons: dict[Key, np.ndarray]
    labels: dict[Key, list[tuple[str, int, int]]]
    db_um: float
    top: str

    def to_um(self, value: float) -> float:
        """Convert a length in database units to micrometres (rounded to 1e-9 um)."""
        return round(value * self.db_um, 9)


@dataclass
class _LocalShapes:
    """The shapes and texts a cell holds itself, in database units, untransformed."""

    coords: dict[Key, list[np.ndarray]] = field(default_factory=lambda: defaultdict(list))
    texts: dict[Key, list[tuple[str, float, float]]] = field(
        default_factory=lambda: defaultdict(list)
    )


def _offsets(repetition: gdstk.Repetition | None) -> np.ndarray:
    """Offsets (user units) of an element's repetition; a single zero offset if none."""
    if repetition is None or repetition.size == 0:
        return np.zeros((1, 2))
    return np.asarray(repetition.get_offsets(), dtype=float).reshape(-1, 2)


def _local_shapes(
    cell: gdstk.Cell, keys: set[Key], text_keys: set[Key], scale: float
) -> _LocalShapes:
    """Collect a cell's own polygons, path outlines and texts on the wanted keys."""
    local = _LocalShapes()

    def add_polygon(poly: gdstk.Polygon) -> None:
        key = (poly.layer, poly.datatype)
        if key not in keys:
            return
        points = np.asarray(poly.points, dtype=float)
        if len(points) < 3:
            return
        for offset in _offsets(poly.repetition):
            local.coords[key].append((points + offset) * scale)

    for poly in cell.polygons:
        add_polygon(poly)
    for path in cell.paths:
        if not any((lay, dt) in keys for lay, dt in zip(path.layers, path.datatypes, strict=True)):
            continue
        outlines = path.to_polygons()
        for offset in _offsets(path.repetition):
            for poly in outlines:
                key = (poly.layer, poly.datatype)
                points = np.asarray(poly.points, dtype=float)
                if key in keys and len(points) >= 3:
                    local.coords[key].append((points + offset) * scale)
    for label in cell.labels:
        key = (label.layer, label.texttype)
        if key not in text_keys:
            continue
        # GDSII pads odd-length strings with a NUL byte.
        text = label.text.rstrip("\0")
        for offset in _offsets(label.repetition):
            x, y = (np.asarray(label.origin, dtype=float) + offset) * scale
            local.texts[key].append((text, float(x), float(y)))
    return local


def _reference_matrices(ref: gdstk.Reference, scale: float) -> np.ndarray:
    """Affine matrices (n, 3, 3) placing a referenced cell, one per array element.

    A point p of the child goes to ``origin + offset + R(rotation) @ (mag * F @ p)``
    where F mirrors y when the reference is reflected.  Array offsets are in the
    parent's frame (as stored in the file).
    """
    cos, sin = math.cos(ref.rotation), math.sin(ref.rotation)
    # Exact values for the right angles that layouts use.
    cos, sin = (round(v) if abs(v - round(v)) < 1e-12 else v for v in (cos, sin))
    mag = ref.magnification
    flip = -1.0 if ref.x_reflection else 1.0
    linear = np.array([[cos, -sin], [sin, cos]]) @ np.diag([mag, flip * mag])
    shifts = (np.asarray(ref.origin, dtype=float) + _offsets(ref.repetition)) * scale
    mats = np.zeros((len(shifts), 3, 3))
    mats[:, :2, :2] = linear
    mats[:, :2, 2] = shifts
    mats[:, 2, 2] = 1.0
    return mats


def _cell_order(top: gdstk.Cell) -> list[gdstk.Cell]:
    """Cells reachable from `top`, every parent before its children."""
    post: list[gdstk.Cell] = []
    state: dict[str, int] = {}  # 1 = on the stack, 2 = done

    def visit(cell: gdstk.Cell, trail: tuple[str, ...]) -> None:
        state[cell.name] = 1
        for ref in cell.references:
            child = ref.cell
            if isinstance(child, str):
                raise ValueError(f"cell {cell.name!r} references missing cell {child!r}")
            if not isinstance(child, gdstk.Cell):
                raise ValueError(f"cell {cell.name!r} references unreadable cell {child.name!r}")
            mark = state.get(child.name)
            if mark == 1:
                raise ValueError(
                    "cell references form a loop: " + " -> ".join((*trail, child.name))
                )
            if mark is None:
                visit(child, (*trail, child.name))
        state[cell.name] = 2
        post.append(cell)

    visit(top, (top.name,))
    return post[::-1]


def _polygons_from_rings(coords: np.ndarray, ring_ids: np.ndarray) -> np.ndarray:
    """Build valid, non-degenerate polygons from snapped ring coordinates."""
    if len(coords) == 0:
        return np.empty(0, dtype=object)
    rings = shapely.linearrings(coords, indices=ring_ids)
    polys = shapely.polygons(rings)
    bad = ~shapely.is_valid(polys)
    if bad.any():
        fixed = shapely.get_parts(shapely.make_valid(polys[bad]))
        fixed = fixed[shapely.get_type_id(fixed) == shapely.GeometryType.POLYGON]
        polys = np.concatenate([polys[~bad], fixed])
    return polys[shapely.area(polys) > 0]


def _choose_top(lib: gdstk.Library, cell: str | None) -> gdstk.Cell:
    """The cell to flatten: the one named, or the only unreferenced one."""
    if cell is not None:
        for candidate in lib.cells:
            if candidate.name == cell:
                if not isinstance(candidate, gdstk.Cell):
                    raise ValueError(f"cell {cell!r} cannot be read")
                return candidate
        raise ValueError(f"no cell named {cell!r}")
    tops = [c for c in lib.top_level() if isinstance(c, gdstk.Cell)]
    if len(tops) != 1:
        names = ", ".join(sorted(c.name for c in tops)) or "none"
        raise ValueError(f"expected one top cell, found {len(tops)} ({names}); name one")
    return tops[0]


def read_layout(
    gds_path: str | PathLike[str],
    shape_keys: Iterable[Key],
    text_keys: Iterable[Key] = (),
    *,
    cell: str | None = None,
) -> Layout:
    """Read a GDSII file and flatten the wanted layers from its top cell.

    Parameters
    ----------
    gds_path : path-like
        The GDSII file.
    shape_keys : iterable of (int, int)
        (layer, datatype) pairs whose boundaries and paths are wanted.
    text_keys : iterable of (int, int)
        (layer, texttype) pairs whose texts are wanted.
    cell : str, optional
        The cell to flatten; by default the only cell no other cell references.

    Returns
    -------
    Layout

    Raises
    ------
    ValueError
        When the top cell is ambiguous or missing, or a reference cannot be
        resolved.
    """
    keys, tkeys = set(shape_keys), set(text_keys)
    lib = gdstk.read_gds(str(gds_path), filter=keys)
    scale = lib.unit / lib.precision  # user units -> database units
    top = _choose_top(lib, cell)

    order = _cell_order(top)
    placements: dict[str, list[np.ndarray]] = defaultdict(list)
    placements[top.name].append(np.eye(3)[None])
    for parent in order:
        mats = np.concatenate(placements[parent.name])
        for ref in parent.references:
            child = _reference_matrices(ref, scale)
            placements[ref.cell.name].append((mats[:, None] @ child[None]).reshape(-1, 3, 3))

    coords: dict[Key, list[np.ndarray]] = defaultdict(list)
    ring_ids: dict[Key, list[np.ndarray]] = defaultdict(list)
    n_rings: dict[Key, int] = defaultdict(int)
    texts: dict[Key, list[tuple[str, int, int]]] = defaultdict(list)
    for c in order:
        local = _local_shapes(c, keys, tkeys, scale)
        mats = np.concatenate(placements[c.name])
        linear, shift = mats[:, :2, :2], mats[:, :2, 2]
        for key, rings in local.coords.items():
            points = np.concatenate(rings)
            sizes = np.array([len(r) for r in rings])
            ids = np.repeat(np.arange(len(rings)), sizes)
            placed = np.einsum("kij,nj->kni", linear, points) + shift[:, None, :]
            coords[key].append(np.rint(placed.reshape(-1, 2)))
            count = len(rings)
            ring_ids[key].append(
                (ids[None, :] + count * np.arange(len(mats))[:, None]).ravel() + n_rings[key]
            )
            n_rings[key] += count * len(mats)
        for key, items in local.texts.items():
            anchors = np.array([(x, y) for _, x, y in items])
            placed = np.rint(np.einsum("kij,nj->kni", linear, anchors) + shift[:, None, :])
            names = [name for name, _, _ in items]
            for per_instance in placed:
                texts[key].extend(
                    (name, int(x), int(y)) for name, (x, y) in zip(names, per_instance, strict=True)
                )

    polygons = {
        key: _polygons_from_rings(np.concatenate(coords[key]), np.concatenate(ring_ids[key]))
        for key in coords
    }
    return Layout(
        polygons=polygons, labels=dict(texts), db_um=lib.precision / _MICRON, top=top.name
    )


# --------------------------------------------------------------------------
# Graph helpers
# --------------------------------------------------------------------------


def components(n: int, a: np.ndarray, b: np.ndarray) -> tuple[int, np.ndarray]:
    """Connected components of an undirected graph.

    Parameters
    ----------
    n : int
        Number of vertices, numbered 0 .. n-1.
    a, b : ndarray of int
        Edge ends; edge k joins ``a[k]`` and ``b[k]``.

    Returns
    -------
    count : int
        Number of components.
    label : ndarray of int
        Component of each vertex, numbered 0 .. count-1 in order of the
        smallest vertex of each component.

    Examples
    --------
    >>> count, label = components(5, np.array([0, 3]), np.array([1, 4]))
    >>> count, label.tolist()
    (3, [0, 0, 1, 2, 2])
    """
    parent = np.arange(n)
    a = np.asarray(a, dtype=np.intp)
    b = np.asarray(b, dtype=np.intp)
    while True:
        ra, rb = parent[a], parent[b]
        differ = ra != rb
        if not differ.any():
            break
        ra, rb = ra[differ], rb[differ]
        # Hook every larger root under the smallest root it meets; roots stay
        # fixed points and parents only decrease, so no loop can form.
        np.minimum.at(parent, np.maximum(ra, rb), np.minimum(ra, rb))
        while True:  # pointer jumping until every vertex points at a root
            grand = parent[parent]
            if np.array_equal(grand, parent):
                break
            parent = grand
    roots, label = np.unique(parent, return_inverse=True)
    return len(roots), label.reshape(-1)


def _touch_groups(geoms: np.ndarray) -> tuple[int, np.ndarray]:
    """Group shapes that overlap or share any boundary point."""
    if len(geoms) == 0:
        return 0, np.empty(0, dtype=np.intp)
    a, b = shapely.STRtree(geoms).query(geoms, predicate="intersects")
    keep = a < b
    return components(len(geoms), a[keep], b[keep])


def _area_overlaps(
    tree: shapely.STRtree, tree_geoms: np.ndarray, geoms: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Pairs (i into geoms, j into tree_geoms) whose overlap has positive area."""
    if len(geoms) == 0 or len(tree_geoms) == 0:
        empty = np.empty(0, dtype=np.intp)
        return empty, empty
    i, j = tree.query(geoms, predicate="intersects")
    keep = ~shapely.touches(geoms[i], tree_geoms[j])
    return i[keep], j[keep]


# --------------------------------------------------------------------------
# Extraction
# --------------------------------------------------------------------------


@dataclass
class _Conductor:
    """The pieces of one conductor role.

    ``shapes`` are polygons (after splitting); ``piece`` gives each shape's piece
    number within the role; ``region`` gives each shape's group before
    splitting (equal to ``piece`` for conductors that are not split).
    """

    role: str
    shapes: np.ndarray
    piece: np.ndarray
    region: np.ndarray
    n_pieces: int
    tree: shapely.STRtree


def _split(shapes: np.ndarray, cutters: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Remove `cutters` from `shapes`; return the parts and each part's source shape."""
    if len(cutters) == 0 or len(shapes) == 0:
        return shapes, np.arange(len(shapes))
    i, j = _area_overlaps(shapely.STRtree(cutters), cutters, shapes)
    if len(i) == 0:
        return shapes, np.arange(len(shapes))
    results = shapes.copy()
    order = np.argsort(i, kind="stable")
    i, j = i[order], j[order]
    starts = np.flatnonzero(np.r_[True, i[1:] != i[:-1]])
    for start, stop in zip(starts, np.r_[starts[1:], len(i)], strict=True):
        results[i[start]] = shapely.difference(
            shapes[i[start]], shapely.union_all(cutters[j[start:stop]])
        )
    parts, source = shapely.get_parts(results, return_index=True)
    keep = (shapely.get_type_id(parts) == shapely.GeometryType.POLYGON) & (shapely.area(parts) > 0)
    return parts[keep], source[keep]


def _conductor(role: str, shapes: np.ndarray, cutters: np.ndarray | None) -> _Conductor:
    """Cut one conductor's shapes into pieces (after removing splitting shapes)."""
    n_regions, region = _touch_groups(shapes)
    if cutters is not None:
        shapes, source = _split(shapes, cutters)
        region = region[source]
        n_pieces, piece = _touch_groups(shapes)
    else:
        n_pieces, piece = n_regions, region
    return _Conductor(role, shapes, piece, region, n_pieces, shapely.STRtree(shapes))


@dataclass
class Report:
    """What the checker found.

    Attributes
    ----------
    shorts : list of tuple of str
        For each node carrying two or more net names, the sorted names.
    opens : list of str
        Net names whose labels lie on two or more nodes.
    stray_labels : list of (str, float, float)
        Net labels on no piece of their conductor: text, x and y in micrometres.
    spacing_violations : list of (str, str, str, float)
        Conductor role, net of each piece (``"?"`` when unlabelled, names joined
        by ``","`` when shorted) and their distance in micrometres.
    nets : dict of str to int
        Every net name and the number of its labels (stray ones included).
    n_nodes : int
        Number of electrical nodes.
    """

    shorts: list[tuple[str, ...]]
    opens: list[str]
    stray_labels: list[tuple[str, float, float]]
    spacing_violations: list[tuple[str, str, str, float]]
    nets: dict[str, int]
    n_nodes: int

    def ok(self) -> bool:
        """True when there are no shorts, opens, stray labels or spacing violations."""
        return not (self.shorts or self.opens or self.stray_labels or self.spacing_violations)

    def summary(self) -> str:
        """One line with the four counts."""
        return (
            f"shorts {len(self.shorts)}, opens {len(self.opens)}, "
            f"stray labels {len(self.stray_labels)}, "
            f"spacing violations {len(self.spacing_violations)}"
        )

    def details(self) -> list[str]:
        """One line per finding."""
        lines = [f"short: {', '.join(names)}" for names in self.shorts]
        lines += [f"open: {name}" for name in self.opens]
        lines += [f"stray label: {text!r} at ({x:g}, {y:g}) um" for text, x, y in self.stray_labels]
        lines += [
            f"spacing: {role} {a} to {b} at {d:g} um" for role, a, b, d in self.spacing_violations
        ]
        return lines


def check(
    gds_path: str | PathLike[str],
    layers_path: str | PathLike[str],
    *,
    cell: str | None = None,
    spacing_um: Mapping[str, float] | None = None,
) -> Report:
    """Extract the nets of a GDSII layout and report shorts, opens and stray labels.

    Parameters
    ----------
    gds_path : path-like
        The GDSII file.
    layers_path : path-like
        The layer-map TOML file.
    cell : str, optional
        Top cell to flatten; needed only when several cells are unreferenced.
    spacing_um : mapping of str to float, optional
        Minimum spacing in micrometres per conductor role.  Pieces of that
        conductor on different nodes closer than this are reported.  For a
        split conductor, pieces cut from one shape by the split (for instance
        the two sides of a gate) are not compared with each other.

    Returns
    -------
    Report

    Raises
    ------
    ValueError
        When the layer map or the layout is not usable, or a spacing names a
        role that is not a conductor.
    """
    layer_map = LayerMap.load(layers_path)
    spacing = dict(spacing_um or {})
    for role, value in spacing.items():
        if role not in layer_map.conductors:
            raise ValueError(f"spacing given for {role!r}, which is not a conductor")
        if not value >= 0:
            raise ValueError(f"spacing for {role!r} must be a non-negative number")
    conductor_keys = {layer_map.layers[r] for r in layer_map.conductors}
    layout = read_layout(gds_path, layer_map.shape_keys(), conductor_keys, cell=cell)
    empty = np.empty(0, dtype=object)

    def shapes_of(role: str) -> np.ndarray:
        return layout.polygons.get(layer_map.layers[role], empty)

    # Pieces of every conductor, numbered globally.
    conductors: dict[str, _Conductor] = {}
    base: dict[str, int] = {}
    total = 0
    for role in layer_map.conductors:
        splitters = layer_map.splitters_of(role)
        cutters = np.concatenate([shapes_of(s) for s in splitters]) if splitters else None
        conductors[role] = _conductor(role, shapes_of(role), cutters)
        base[role] = total
        total += conductors[role].n_pieces

    # Nodes: pieces joined through cuts.
    cut_ids: list[np.ndarray] = []
    piece_ids: list[np.ndarray] = []
    n_cuts = 0
    for cut_role, targets in layer_map.cuts.items():
        cuts = shapes_of(cut_role)
        for target in targets:
            c = conductors[target]
            i, j = _area_overlaps(c.tree, c.shapes, cuts)
            cut_ids.append(i + n_cuts)
            piece_ids.append(c.piece[j] + base[target])
        n_cuts += len(cuts)
    if cut_ids:
        cut_id, piece_id = np.concatenate(cut_ids), np.concatenate(piece_ids)
        order = np.argsort(cut_id, kind="stable")
        cut_id, piece_id = cut_id[order], piece_id[order]
        same = cut_id[1:] == cut_id[:-1]
        a, b = piece_id[:-1][same], piece_id[1:][same]
    else:
        a = b = np.empty(0, dtype=np.intp)
    n_nodes, node = components(total, a, b)

    # Net labels.
    names_on: dict[int, set[str]] = defaultdict(set)
    nodes_of: dict[str, set[int]] = defaultdict(set)
    counts: dict[str, int] = defaultdict(int)
    stray: list[tuple[str, float, float]] = []
    for role in layer_map.conductors:
        c = conductors[role]
        labels = layout.labels.get(layer_map.layers[role], [])
        if not labels:
            continue
        points = shapely.points([(x, y) for _, x, y in labels])
        if len(c.shapes):
            li, si = c.tree.query(points, predicate="intersects")
        else:
            li = si = np.empty(0, dtype=np.intp)
        hit_nodes: dict[int, set[int]] = defaultdict(set)
        for label_index, shape_index in zip(li.tolist(), si.tolist(), strict=True):
            hit_nodes[label_index].add(int(node[base[role] + c.piece[shape_index]]))
        for k, (name, x, y) in enumerate(labels):
            counts[name] += 1
            if k not in hit_nodes:
                stray.append((name, layout.to_um(x), layout.to_um(y)))
            for n in hit_nodes[k]:
                names_on[n].add(name)
                nodes_of[name].add(n)

    shorts = sorted(tuple(sorted(names)) for names in names_on.values() if len(names) > 1)
    opens = sorted(name for name, nodes in nodes_of.items() if len(nodes) > 1)

    def net_name(n: int) -> str:
        names = names_on.get(n)
        return ",".join(sorted(names)) if names else _UNLABELLED

    # Spacing between pieces of one conductor on different nodes.
    violations: list[tuple[str, str, str, float]] = []
    for role, value in spacing.items():
        c = conductors[role]
        limit = round(value / layout.db_um, 6)
        if limit <= 0 or len(c.shapes) < 2:
            continue
        i, j = c.tree.query(c.shapes, predicate="dwithin", distance=limit)
        keep = i < j
        i, j = i[keep], j[keep]
        ni, nj = node[base[role] + c.piece[i]], node[base[role] + c.piece[j]]
        keep = (ni != nj) & (c.region[i] != c.region[j])
        i, j = i[keep], j[keep]
        dist = shapely.distance(c.shapes[i], c.shapes[j])
        keep = dist < limit * (1 - 1e-12)
        closest: dict[tuple[int, int], float] = {}
        for pi, pj, d in zip(c.piece[i[keep]], c.piece[j[keep]], dist[keep], strict=True):
            pair = (int(min(pi, pj)), int(max(pi, pj)))
            closest[pair] = min(d, closest.get(pair, math.inf))
        for (pi, pj), d in closest.items():
            na, nb = sorted((net_name(node[base[role] + pi]), net_name(node[base[role] + pj])))
            violations.append((role, na, nb, layout.to_um(d)))
    violations.sort()

    return Report(
        shorts=shorts,
        opens=opens,
        stray_labels=sorted(stray),
        spacing_violations=violations,
        nets=dict(sorted(counts.items())),
        n_nodes=n_nodes,
    )


# --------------------------------------------------------------------------
# Command line
# --------------------------------------------------------------------------


def _spacing_arg(text: str) -> tuple[str, float]:
    role, sep, value = text.partition("=")
    try:
        if not sep or not role:
            raise ValueError
        return role, float(value)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected ROLE=UM, got {text!r}") from None


def main(argv: Sequence[str] | None = None) -> int:
    """Run the checker from the command line; return the exit code."""
    parser = argparse.ArgumentParser(
        prog="python -m tests.extraction",
        description="Check the connectivity of a GDSII layout against its net labels.",
    )
    parser.add_argument("layout", type=Path, help="GDSII file")
    parser.add_argument("--layers", type=Path, required=True, help="layer-map TOML file")
    parser.add_argument("--cell", help="top cell (when several cells are unreferenced)")
    parser.add_argument(
        "--spacing",
        type=_spacing_arg,
        nargs="+",
        action="extend",
        default=[],
        metavar="ROLE=UM",
        help="minimum spacing in micrometres for a conductor role (repeatable)",
    )
    args = parser.parse_args(argv)
    try:
        report = check(args.layout, args.layers, cell=args.cell, spacing_um=dict(args.spacing))
    except (OSError, ValueError, tomllib.TOMLDecodeError) as error:
        print(f"error: {error}", file=sys.stderr)
        return 2
    print(report.summary())
    for line in report.details():
        print(line)
    return 0 if report.ok() else 1


if __name__ == "__main__":
    sys.exit(main())
