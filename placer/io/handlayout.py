"""Read a hand layout -- GDSII, a CSV of unit centres, or a pattern -- into a Pattern.

The format is chosen by content: a GDSII HEADER record, a CSV header ``x_um,y_um,device``,
or else the pattern text format. GDSII and CSV give unit centres; the grid and pitch are
inferred from them, and what was recognised (and skipped, and why) is reported.
"""

from __future__ import annotations

import math
import re
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np

from placer.errors import LimitError, shown
from placer.io.files import mapped
from placer.io.gdsread import LayoutError, StreamLibrary, Structure, is_gdsii, parse_stream
from placer.io.pattern import DUMMY, EMPTY, Pattern, parse_pattern
from placer.io.spec import NAME_RE, Spec
from placer.kinds import KINDS
from placer.limits import MAX_DEVICES, MAX_FILE_BYTES, MAX_NAME, MAX_SLOTS, MAX_UNITS

__all__ = ["Unit", "Recognised", "read_layout", "units_to_pattern", "read_csv_units",
           "hot_spot_in_pattern_frame",
           "gds_units", "top_cell", "full_boxes", "apply_transform", "detect_format", "lattice",
           "MAX_LAYOUT_BYTES"]


MAX_LAYOUT_BYTES = 256 * 1024 * 1024


@dataclass(frozen=True)
class Unit:
    """One unit found in a layout: centre (um), device name or None for a dummy, mark."""

    x: float
    y: float
    device: str | None
    mark: int = 0
    cell: str = ""


@dataclass
class Recognised:
    """A layout turned into a pattern, with the facts the importer found on the way."""

    pattern: Pattern
    pitch_um: tuple[float, float]
    origin_um: tuple[float, float]
    fmt: str
    notes: list[str] = field(default_factory=list)


_X = ("x_um", "x", "xum", "x(um)", "x [um]", "x (um)")
_Y = ("y_um", "y", "yum", "y(um)", "y [um]", "y (um)")
_DEV = ("device", "name", "dev", "unit")
_ORI = ("orientation", "orient", "dir", "direction")


def _split(line: str) -> list[str]:
    """Fields of one CSV line, whichever of ',', ';' or tab separates them."""
    for sep in (",", ";", "\t"):
        if sep in line:
            return [c.strip() for c in line.split(sep)]
    return [line.strip()]


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def detect_format(head: bytes) -> str:
    """'gds', 'csv' or 'pattern' from a file's first bytes.

    A CSV has three or more fields separated by ',', ';' or a tab, and either a header
    naming x and y or two numbers first.

    Examples
    --------
    >>> detect_format(b"x_um,y_um,device\\n0,0,A\\n")
    'csv'
    >>> detect_format(b"1.0;2.0;A\\n")
    'csv'
    >>> detect_format(b"A B B A\\n")
    'pattern'
    """
    if is_gdsii(head):
        return "gds"
    text = head.decode("utf-8", errors="replace").removeprefix("\ufeff")
    for line in text.splitlines():
        s = line.strip()
        if not s or s.startswith("#"):
            continue
        cells = [c.lower() for c in _split(s)]
        if len(cells) < 3:
            return "pattern"
        header = any(c in _X for c in cells) and any(c in _Y for c in cells)
        return "csv" if header or (_is_number(cells[0]) and _is_number(cells[1])) else "pattern"
    return "pattern"


def read_csv_units(text: str, source: str) -> list[Unit]:
    """Units from CSV rows of x (um), y (um), device and an optional orientation.

    The first row may be a header naming the columns in any case and order (x_um or x,
    y_um or y, device or name, orientation); without one the columns are taken in that
    order. Fields are separated by ',', ';' or a tab; device '.' (or DUMMY, any case) is a
    dummy; two device names that differ only by case are refused, as in pattern text.
    """
    units: list[Unit] = []
    cols: dict[str, int] | None = None
    seen: dict[str, str] = {}                   # device names by their lower case
    for lineno, line in enumerate(text.removeprefix("\ufeff").splitlines(), start=1):
        s = line.strip()
        if not s or s.startswith("#"):
            continue
        cells = _split(s)
        if cols is None:
            low = [c.lower() for c in cells]
            if _is_number(cells[0]) and len(cells) > 1 and _is_number(cells[1]):
                cols = {"x": 0, "y": 1, "device": 2, "orientation": 3}
            else:
                cols = {}
                for key, names in (("x", _X), ("y", _Y), ("device", _DEV),
                                   ("orientation", _ORI)):
                    hit = [i for i, c in enumerate(low) if c in names]
                    if hit:
                        cols[key] = hit[0]
                missing = [k for k in ("x", "y", "device") if k not in cols]
                if missing:
                    raise LayoutError(f"{source}:{lineno}: the header names no {missing[0]} "
                                      "column (use x_um, y_um, device[, orientation])")
                continue
        need = max(cols["x"], cols["y"], cols["device"]) + 1
        if len(cells) < need:
            raise LayoutError(f"{source}:{lineno}: expected at least {need} fields (x, y, "
                              f"device[, orientation]), got {len(cells)}")
        xs, ys = cells[cols["x"]], cells[cols["y"]]
        try:
            x, y = float(xs), float(ys)
        except ValueError:
            raise LayoutError(f"{source}:{lineno}: x and y must be numbers, got "
                              f"{shown(xs, 20)}, {shown(ys, 20)}") from None
        if not (math.isfinite(x) and math.isfinite(y)) or max(abs(x), abs(y)) > 1e6:
            raise LayoutError(f"{source}:{lineno}: coordinates must be finite and within "
                              f"1 m, got {x:g}, {y:g}")
        name = cells[cols["device"]]
        if name.lower() == "dummy":
            name = "."                          # a dummy by name, as a GDSII cell may be
        if name != "." and not NAME_RE.match(name):
            raise LayoutError(f"{source}:{lineno}: device {shown(name)} is not a name "
                              "(letter, then letters, digits, _) or '.' for a dummy")
        o = cols.get("orientation")
        mark_text = cells[o] if o is not None and o < len(cells) else ""
        if mark_text not in ("", ">", "<"):
            raise LayoutError(f"{source}:{lineno}: orientation must be '>', '<' or empty, got "
                              f"{shown(mark_text[:10])}")
        if name != ".":
            other = seen.setdefault(name.lower(), name)
            if other != name:
                raise LayoutError(f"{source}:{lineno}: device {shown(name)} differs from "
                                  f"{shown(other)} only by case; name a device one way")
        units.append(Unit(x, y, None if name == "." else name,
                          {"": 0, ">": 1, "<": -1}[mark_text]))
        if len(units) > MAX_SLOTS:
            raise LimitError(f"{source}: more than {MAX_SLOTS} units, the limit")
    if not units:
        raise LayoutError(f"{source}: empty CSV: give a row per unit (x_um, y_um, device"
                          "[, orientation])")
    return units


def top_cell(lib: StreamLibrary, cell: str | None, source: str) -> str:
    """The cell holding the array: ``cell`` when given, else the one top cell that places
    others (a library with one cell: that one)."""
    cells = lib.structures
    if cell is not None:
        if cell not in cells:
            raise LayoutError(f"{source}: no cell {shown(cell[:64])} (cells: "
                              f"{', '.join(sorted(cells)[:10])[:300]})")
        return cell
    referenced = {r.cell for s in cells.values() for r in s.refs}
    tops = [n for n in cells if n not in referenced]
    with_refs = [n for n in tops if cells[n].refs]
    if not with_refs and len(tops) == 1:
        with_refs = tops
    if len(with_refs) != 1:
        found = ", ".join(with_refs or tops)[:300] or "none"
        raise LayoutError(f"{source}: cannot tell the top cell (candidates: {found}); "
                          "name it with --cell")
    return with_refs[0]


def gds_units(lib: StreamLibrary, source: str, *, cell: str | None,
              mapping: dict[str, str], label_layer: tuple[int, int],
              dummy_cells: set[str], mos: bool, notes: list[str],
              unlabelled: str = "have no label and no --map CELL=DEVICE") -> list[Unit]:
    """Units of a GDSII library, below its top cell (``unlabelled`` says what units
    without a device lack, in the error that lists them).

    Going down the hierarchy, a placed cell is a unit when one device label lies on it,
    when ``mapping`` or ``dummy_cells`` names it (or its name contains DUMMY), or when it
    places no cell; a cell covering several labels (an array, a row, a wrapper) is
    looked through. So a unit cell may place sub-cells of its own (contacts, say). A
    unit sits at the centre of its bounding box after the hierarchy is flattened (cells
    drawn about a corner land where they are drawn); its device comes from a label on
    the label layer lying on it,
    else from ``mapping`` (cell name -> device); unlabelled units of a dummy cell
    (``dummy_cells``, or any cell whose name contains DUMMY) are dummies. Orientation
    comes from the reference's transform, by the nearest quarter turn: a finger whose x
    axis points left is '<'; one turned by 90 or 270 degrees keeps no orientation (noted).
    """
    cells = lib.structures
    top = top_cell(lib, cell, source)
    if not cells[top].refs:
        raise LayoutError(f"{source}: cell {shown(top[:64])} places no unit cells by reference")
    boxes = full_boxes(lib, source)
    labelled: dict[str, bool] = {}

    def has_label(name: str, depth: int = 0) -> bool:
        if name not in labelled:
            if depth > 64:
                raise LayoutError(f"{source}: references nest deeper than 64 levels (a cycle?)")
            c = cells[name]
            labelled[name] = (any((t.layer, t.texttype) == label_layer for t in c.texts)
                              or any(has_label(r.cell, depth + 1) for r in c.refs))
        return labelled[name]

    _check_work(cells, top, has_label, set(mapping) | set(dummy_cells), boxes, source)
    placed: list[tuple[str, float, float, bool, float]] = []
    texts: list[tuple[str, float, float]] = []
    skipped_texts: Counter[tuple[int, int]] = Counter()
    visits = [0]

    def count(what: str) -> None:
        visits[0] += 1
        if visits[0] > 2 * MAX_SLOTS:
            raise LimitError(f"{source}: the hierarchy places more than {2 * MAX_SLOTS} "
                             f"{what} once flattened, the limit")

    def gather(name: str, tx: float, ty: float, refl: bool, ang: float, mag: float,
               depth: int) -> None:
        """Every device label, flattened (only subtrees that hold one are visited)."""
        s = cells[name]
        for t in s.texts:
            x, y = apply_transform(t.x, t.y, tx, ty, refl, ang, mag)
            if (t.layer, t.texttype) == label_layer:
                texts.append((t.text, x, y))
                if len(texts) > MAX_UNITS:
                    raise LimitError(f"{source}: more than {MAX_UNITS} device labels once "
                                     "flattened; the limit is that many units")
            elif depth == 0:
                skipped_texts[(t.layer, t.texttype)] += 1
        for ref in s.refs:
            if not has_label(ref.cell):
                continue
            for r in ref.instances():
                count("labelled cells")
                x, y = apply_transform(r.x, r.y, tx, ty, refl, ang, mag)
                a = ang + (-r.angle_deg if refl else r.angle_deg)
                gather(r.cell, x, y, refl ^ r.reflect, a, mag * r.mag, depth + 1)

    gather(top, 0.0, 0.0, False, 0.0, 1.0, 0)
    lab_xy = np.array([(x, y) for _, x, y in texts]).reshape(-1, 2)
    order = np.argsort(lab_xy[:, 0], kind="stable")
    lab_sorted = lab_xy[order]

    def labels_in(box: tuple[float, float, float, float]) -> int:
        lo = np.searchsorted(lab_sorted[:, 0], box[0] - 1e-9, side="left")
        hi = np.searchsorted(lab_sorted[:, 0], box[2] + 1e-9, side="right")
        ys = lab_sorted[lo:hi, 1]
        return int(np.sum((ys >= box[1] - 1e-9) & (ys <= box[3] + 1e-9)))

    named = set(mapping) | set(dummy_cells)

    def walk(name: str, tx: float, ty: float, refl: bool, ang: float, mag: float,
             depth: int) -> None:
        if depth > 64:
            raise LayoutError(f"{source}: references nest deeper than 64 levels (a cycle?)")
        for ref in cells[name].refs:
            for r in ref.instances():
                count("cells")
                x, y = apply_transform(r.x, r.y, tx, ty, refl, ang, mag)
                a = ang + (-r.angle_deg if refl else r.angle_deg)
                rf, m = refl ^ r.reflect, mag * r.mag
                child = cells[r.cell]
                box = boxes.get(r.cell)
                if box is None:                          # nothing drawn: not a unit
                    continue
                corners = [apply_transform(cx, cy, x, y, rf, a, m) for cx in (box[0], box[2])
                           for cy in (box[1], box[3])]
                inst = (min(c[0] for c in corners), min(c[1] for c in corners),
                        max(c[0] for c in corners), max(c[1] for c in corners))
                n_labels = labels_in(inst)
                unit = (not child.refs or r.cell in named or "DUMMY" in r.cell.upper()
                        or n_labels == 1)
                if unit:
                    placed.append((r.cell, (inst[0] + inst[2]) / 2, (inst[1] + inst[3]) / 2,
                                   rf, a))
                    if len(placed) > MAX_SLOTS:
                        raise LimitError(f"{source}: more than {MAX_SLOTS} unit cells, the "
                                         "limit")
                else:
                    walk(r.cell, x, y, rf, a, m, depth + 1)

    walk(top, 0.0, 0.0, False, 0.0, 1.0, 0)
    notes.append(f"top cell {shown(top[:64])}: {len(placed)} unit references")
    for (layer, dtype), k in sorted(skipped_texts.items()):
        notes.append(f"skipped {k} labels on layer {layer}/{dtype} (labels are read on "
                     f"{label_layer[0]}/{label_layer[1]})")
    return _label_units(placed, texts, mapping, dummy_cells, mos, source, notes, unlabelled)


def _check_work(cells: dict[str, Structure], top: str, has_label: Callable[[str], bool],
                named: set[str], boxes: dict[str, tuple[float, float, float, float]],
                source: str) -> None:
    """Refuse, from the reference counts alone and before any instance is expanded, a
    hierarchy the walk below would certainly find too large.

    The walk descends into a placed cell unless it may be a unit: a cell that places
    nothing, a named or dummy cell, or one whose subtree holds a label. So it visits at
    least the references reached through cells it must descend into, and at least the
    leaf cells among them are units: lower bounds, computed once per cell (each capped,
    so a nested bomb's product never grows past the limit).
    """
    cap_visits, cap_units = 2 * MAX_SLOTS + 1, MAX_SLOTS + 1
    memo: dict[str, tuple[int, int]] = {}

    def bounds(name: str, depth: int) -> tuple[int, int]:
        if name in memo:
            return memo[name]
        if depth > 64:
            raise LayoutError(f"{source}: references nest deeper than 64 levels (a cycle?)")
        visits = units = 0
        for r in cells[name].refs:
            child = cells[r.cell]
            visits += r.count
            if not child.refs:
                units += r.count if boxes.get(r.cell) is not None else 0
            elif not (r.cell in named or "DUMMY" in r.cell.upper() or has_label(r.cell)):
                v, u = bounds(r.cell, depth + 1)        # certainly descended into
                visits, units = visits + r.count * v, units + r.count * u
            visits, units = min(visits, cap_visits), min(units, cap_units)
            if visits >= cap_visits and units >= cap_units:
                break
        memo[name] = (visits, units)
        return memo[name]

    visits, units = bounds(top, 0)
    if units > MAX_SLOTS:
        raise LimitError(f"{source}: more than {MAX_SLOTS} unit cells, the limit "
                         "(counted from the references before expanding them)")
    if visits > 2 * MAX_SLOTS:
        raise LimitError(f"{source}: the hierarchy places more than {2 * MAX_SLOTS} cells "
                         "once flattened, the limit (counted from the references before "
                         "expanding them)")


def full_boxes(lib: StreamLibrary, source: str) -> dict[str, tuple[float, float, float,
                                                                      float]]:
    """Each cell's bounding box with its sub-cells, in its own user units."""
    cells = lib.structures
    out: dict[str, tuple[float, float, float, float] | None] = {}

    def box(name: str, depth: int) -> tuple[float, float, float, float] | None:
        if name in out:
            return out[name]
        if depth > 64:
            raise LayoutError(f"{source}: references nest deeper than 64 levels (a cycle?)")
        s = cells[name]
        b = s.bbox
        for ref in s.refs:
            child = box(ref.cell, depth + 1)
            if child is None:
                continue
            for r in ref.corners():                   # an array's corners span it
                corners = [apply_transform(cx, cy, r.x, r.y, r.reflect, r.angle_deg, r.mag)
                           for cx in (child[0], child[2]) for cy in (child[1], child[3])]
                xs, ys = [c[0] for c in corners], [c[1] for c in corners]
                cb = (min(xs), min(ys), max(xs), max(ys))
                b = cb if b is None else (min(b[0], cb[0]), min(b[1], cb[1]),
                                          max(b[2], cb[2]), max(b[3], cb[3]))
        out[name] = b
        return b

    for name in cells:
        box(name, 0)
    return {k: v for k, v in out.items() if v is not None}


def apply_transform(x: float, y: float, tx: float, ty: float, refl: bool, ang: float,
           mag: float) -> tuple[float, float]:
    """Stream transform: reflect about x, magnify, rotate, translate (Calma manual 6.0)."""
    if refl:
        y = -y
    a = math.radians(ang)
    c, s = math.cos(a), math.sin(a)
    return tx + mag * (x * c - y * s), ty + mag * (x * s + y * c)


def _label_units(placed: list[tuple[str, float, float, bool, float]],
                 texts: list[tuple[str, float, float]], mapping: dict[str, str],
                 dummy_cells: set[str], mos: bool, source: str,
                 notes: list[str], unlabelled: str) -> list[Unit]:
    if not placed:
        raise LayoutError(f"{source}: no unit references found")
    from scipy.spatial import cKDTree

    xy = np.array([(p[1], p[2]) for p in placed])
    px, py = _pitch(xy[:, 0]), _pitch(xy[:, 1])
    half = np.array([px if px > 0 else 1.0, py if py > 0 else 1.0]) / 2.0
    owner: dict[int, list[str]] = {}
    stray = []
    # a label belongs to the nearest unit within half a pitch each way: in coordinates
    # scaled by the half pitch, the units within Chebyshev distance 0.999
    tree = cKDTree(xy / half)
    lab = np.array([(x, y) for _, x, y in texts]).reshape(-1, 2)
    near = tree.query_ball_point(lab / half, r=0.999, p=np.inf, return_sorted=True)
    for (text, x, y), inside in zip(texts, near, strict=True):
        cand = [i for i in inside if np.all(np.abs(xy[i] - (x, y)) < half * 0.999)]
        if not cand:
            stray.append((text, x, y))
            continue
        d = np.hypot(xy[cand, 0] - x, xy[cand, 1] - y)
        i = int(cand[int(np.argmin(d))])
        owner.setdefault(i, []).append(text)
    if stray:
        notes.append(f"skipped {len(stray)} labels lying on no unit, e.g. {shown(stray[0][0])} at "
                     f"({stray[0][1]:.4g}, {stray[0][2]:.4g}) um")
    units = []
    doubles = []
    unknown = []
    turned: list[str] = []
    for i, (cell, x, y, _refl, ang) in enumerate(placed):
        labels = sorted(set(owner.get(i, [])))
        if len(labels) > 1:
            doubles.append(f"({x:.4g}, {y:.4g}) um: {', '.join(labels)}")
            continue
        if labels:
            name = labels[0]
        elif cell in mapping:
            name = mapping[cell]
        elif cell in dummy_cells or "DUMMY" in cell.upper():
            name = None
        else:
            unknown.append(f"({x:.4g}, {y:.4g}) um [{cell}]")
            continue
        if name is not None and not NAME_RE.match(name):
            raise LayoutError(f"{source}: label {shown(name[:40])} at ({x:.4g}, {y:.4g}) um is "
                              "not a device name")
        mark = 0
        turn = round((ang % 360.0) / 90.0) % 4          # nearest quarter turn
        if mos and name is not None:
            if turn in (1, 3):                   # along y: no '>' or '<' to keep
                turned.append(f"({x:.4g}, {y:.4g}) um")
            else:
                mark = -1 if turn == 2 else 1
        units.append(Unit(x, y, name, mark, cell))
    if doubles:
        raise LayoutError(f"{source}: {len(doubles)} units carry two labels: "
                          + "; ".join(doubles[:5]))
    if unknown:
        raise LayoutError(f"{source}: {len(unknown)} unit{'s' if len(unknown) != 1 else ''} "
                          f"{unlabelled}: " + "; ".join(unknown[:5]))
    if turned:
        notes.append(f"{len(turned)} MOS fingers are turned by 90 or 270 degrees (placer's "
                     "patterns hold fingers along x): their orientation is not recorded, e.g. "
                     + "; ".join(turned[:2]))
    lowered: dict[str, str] = {}
    for u in units:
        if u.device is None:
            continue
        low = u.device.lower()
        if low in lowered and lowered[low] != u.device:
            raise LayoutError(f"{source}: device labels {shown(lowered[low])} and "
                              f"{shown(u.device)} differ only by case; name them apart (or "
                              "alike) in the layout")
        lowered[low] = u.device
    return units


#: A unit within this fraction of a pitch of a grid point is snapped to it (and listed
#: when it is off by more than SNAP_NOTE); beyond, it is reported as off the grid.
SNAP_TOLERANCE = 0.25
SNAP_NOTE = 0.01


def lattice(values: np.ndarray) -> tuple[float, float]:
    """Pitch and one grid point of coordinates on a lattice with some units a little off.

    Candidate pitches are the most common spacings between neighbouring coordinates;
    each lattice is placed where most coordinates sit, and scored by the share of
    coordinates within SNAP_NOTE of it; the largest pitch scoring at least 90 % of the
    best wins. So one stray unit neither shrinks the pitch nor moves the grid, and a
    staggered layout gets the finer grid it needs.

    Examples
    --------
    >>> lattice(np.array([0.0, 1.0, 2.0, 3.05, 4.0, 5.0]))
    (1.0, 0.0)
    >>> lattice(np.array([10.0, 12.5, 15.0, 20.0]))[0]
    2.5
    """
    v = np.asarray(values, dtype=float)
    u = np.unique(np.round(v, 4))
    if len(u) < 2:
        return 0.0, float(u[0]) if len(u) else 0.0
    diffs = np.diff(u)
    diffs = diffs[diffs > 1e-3]
    if len(diffs) == 0:
        return 0.0, float(u[0])
    vals, freq = np.unique(np.round(diffs, 3), return_counts=True)
    cands = [float(x) for x in vals[np.argsort(-freq, kind="stable")][:12]]
    scored = []
    for p in cands:
        frac = ((v - v.min()) / p) % 1.0
        bins, counts = np.unique(np.round(frac, 3) % 1.0, return_counts=True)
        shift = float(bins[np.argmax(counts)])             # where most units sit
        resid = ((v - v.min()) / p - shift + 0.5) % 1.0 - 0.5
        scored.append((float(np.mean(np.abs(resid) <= SNAP_NOTE)), p, shift))
    top = max(t for t, _, _ in scored)
    # the largest pitch that fits (almost) as many units as tightly as the best does: a
    # fraction of the true pitch fits just as well, a stray spacing does not
    _, p, shift = max((x for x in scored if x[0] >= 0.9 * top), key=lambda x: x[1])
    origin = v.min() + shift * p
    # refine: a least-squares line through the units the lattice explains
    k = np.round((v - origin) / p)
    inl = np.abs((v - origin) / p - k) <= SNAP_NOTE
    if len(np.unique(k[inl])) >= 2:
        slope, icept = np.polyfit(k[inl], v[inl], 1)
        p, origin = float(slope), float(icept)
    return round(p, 6), round(float(origin), 6) + 0.0


def _pitch(values: np.ndarray) -> float:
    """The lattice pitch of ``values`` (0 if there is only one distinct value)."""
    return lattice(values)[0]


def units_to_pattern(units: list[Unit], source: str, notes: list[str],
                     spec: Spec | None) -> tuple[Pattern, tuple[float, float],
                                                 tuple[float, float]]:
    """Snap unit centres to the grid they imply; report off-grid and overlapping units."""
    if not units:
        raise LayoutError(f"{source}: no units")
    xy = np.array([(u.x, u.y) for u in units])
    # the grid from the devices' units; a dummy only marks its slot, so it may sit anywhere
    # nearer its slot than the next (a ring's dummy drawn as a strip of the cell, say)
    dev = np.array([u.device is not None for u in units])
    base = xy[dev] if dev.any() else xy
    (px, gx), (py, gy) = lattice(base[:, 0]), lattice(base[:, 1])
    if spec is not None:
        sx, sy = spec.array.pitch_um
        px = px or sx
        py = py or sy
    px, py = px or 1.0, py or 1.0
    fx = (xy[:, 0] - gx) / px
    fy = (gy - xy[:, 1]) / py
    col = np.round(fx).astype(int)
    row = np.round(fy).astype(int)
    col -= col.min()
    row -= row.min()
    x0 = float(np.round(gx + (np.round(fx).min()) * px, 6))
    y0 = float(np.round(gy - (np.round(fy).min()) * py, 6))
    off = np.hypot(fx - np.round(fx), fy - np.round(fy))
    far = np.where(dev, off > SNAP_TOLERANCE,
                   np.maximum(abs(fx - np.round(fx)), abs(fy - np.round(fy))) > 0.499)
    off = np.where(dev, off, 0.0)            # dummies snap without a note
    if far.any():
        where = "; ".join(f"({units[i].x:.4g}, {units[i].y:.4g}) um" for i in
                          np.nonzero(far)[0][:5])
        raise LayoutError(f"{source}: {int(far.sum())} units lie more than "
                          f"{SNAP_TOLERANCE:.0%} of a pitch off the {px:.4g} x {py:.4g} um "
                          f"grid the others share: {where}")
    near = np.nonzero(off > SNAP_NOTE)[0]
    if len(near):
        notes.append(f"snapped {len(near)} units onto the grid: " + "; ".join(
            f"({units[i].x:.4g}, {units[i].y:.4g}) um by {off[i]:.1%} of a pitch"
            for i in near[:5]) + (" ..." if len(near) > 5 else ""))
    rows, cols = int(row.max()) + 1, int(col.max()) + 1
    if rows * cols > MAX_SLOTS:
        raise LimitError(f"{source}: the units span {rows} x {cols} slots, more than the "
                         f"limit of {MAX_SLOTS}")
    ids = np.full((rows, cols), EMPTY, dtype=int)
    orient = np.zeros((rows, cols), dtype=np.int8)
    names: dict[str, int] = {}
    if spec is not None:
        names = {n: i for i, n in enumerate(spec.devices)}
    seen: dict[tuple[int, int], int] = {}
    overlaps = []
    for i, u in enumerate(units):
        key = (int(row[i]), int(col[i]))
        if key in seen:
            j = seen[key]
            overlaps.append(f"({u.x:.4g}, {u.y:.4g}) um and ({units[j].x:.4g}, "
                            f"{units[j].y:.4g}) um")
            continue
        seen[key] = i
        if u.device is None:
            ids[key] = DUMMY
            continue
        if u.device not in names:
            if spec is not None:
                raise LayoutError(f"{source}: label {shown(u.device)} at ({u.x:.4g}, {u.y:.4g}) um "
                                  f"matches no device of {spec.source} "
                                  f"({', '.join(spec.devices)})")
            names[u.device] = len(names)
        ids[key] = names[u.device]
        orient[key] = u.mark
    if overlaps:
        raise LayoutError(f"{source}: {len(overlaps)} units overlap: " + "; ".join(overlaps[:5]))
    devices = tuple(names)
    if not np.any(ids >= 0):
        raise LayoutError(f"{source}: no device units, only dummies")
    empties = int(np.sum(ids == EMPTY))
    pattern = Pattern(devices, ids, orient)
    found = ", ".join(f"{n} ({c})" for n, c in zip(devices, pattern.counts(), strict=True))
    notes.append(f"grid {rows} x {cols} slots, pitch {px:.4g} x {py:.4g} um, origin "
                 f"({x0:.4g}, {y0:.4g}) um; {int(np.sum(ids >= 0))} device units: {found}; "
                 f"{int(np.sum(ids == DUMMY))} dummies" + (f", {empties} empty slots"
                                                           if empties else ""))
    return pattern, (px, py), (float(x0), float(y0))


def read_layout(path: Path, *, spec: Spec | None = None, cell: str | None = None,
                mapping: dict[str, str] | None = None, label_layer: tuple[int, int] = (10, 0),
                dummy_cells: set[str] | None = None) -> Recognised:
    """Read a pattern, a CSV of unit centres or a GDSII layout, chosen by content."""
    lib = None
    with mapped(path, MAX_LAYOUT_BYTES, "layout", LayoutError) as view:
        fmt = detect_format(bytes(view[:4096]))
        if fmt == "gds":
            lib = parse_stream(view, str(path))       # reads only as far as it must
            data = b""
        else:
            data = bytes(view)                        # text: a pattern or a CSV
    notes: list[str] = []
    if fmt == "pattern":
        if len(data) > MAX_FILE_BYTES:
            raise LimitError(f"{path}: file is {len(data)} bytes, the limit for a pattern is "
                             f"{MAX_FILE_BYTES}")
        try:
            text = data.decode("utf-8")
        except UnicodeDecodeError as err:
            raise LayoutError(f"{path}: neither GDSII nor UTF-8 text (byte {err.start})"
                              ) from err
        if re.search(r"^\s*\[devices\]\s*(#.*)?$", text, re.M):
            raise LayoutError(f"{path}: this is a spec, not a layout: give a pattern, GDSII "
                              "or CSV layout, and the spec with --spec")
        pattern = parse_pattern(text, source=str(path))
        pitch = spec.array.pitch_um if spec is not None else (0.0, 0.0)   # from the spec
        return Recognised(pattern, pitch, (0.0, 0.0), fmt, notes)
    mos = spec is None or KINDS[spec.kind].fingers      # units that may be flipped
    if fmt == "csv":
        try:
            text = data.decode("utf-8")
        except UnicodeDecodeError as err:
            raise LayoutError(f"{path}: CSV is not UTF-8 (byte {err.start})") from err
        units = read_csv_units(text, str(path))
        notes.append(f"{len(units)} units from CSV rows")
    else:
        assert lib is not None
        notes.append(f"GDSII library {shown(lib.name)}, {len(lib.structures)} cells, user unit "
                     f"{lib.user_in_m:g} m")
        if abs(lib.user_in_m - 1e-6) > 1e-12:
            scale = lib.user_in_m / 1e-6
            notes.append(f"coordinates scaled by {scale:g} to micrometres")
        else:
            scale = 1.0
        units = gds_units(lib, str(path), cell=cell, mapping=mapping or {},
                          label_layer=label_layer, dummy_cells=dummy_cells or set(), mos=mos,
                          notes=notes)
        if scale != 1.0:
            units = [Unit(u.x * scale, u.y * scale, u.device, u.mark, u.cell) for u in units]
    n_dev_units = sum(u.device is not None for u in units)
    if n_dev_units > MAX_UNITS:
        raise LimitError(f"{path}: {n_dev_units} device units, more than the limit of "
                         f"{MAX_UNITS}")
    names = {u.device for u in units if u.device is not None}
    long = [n for n in names if len(n) > MAX_NAME]
    if long:
        raise LayoutError(f"{path}: device name {shown(long[0])} is longer than {MAX_NAME} "
                          "characters")
    if len(names) > MAX_DEVICES:
        raise LimitError(f"{path}: {len(names)} devices, more than the limit of {MAX_DEVICES}")
    pattern, pitch, origin = units_to_pattern(units, str(path), notes, spec)
    return Recognised(pattern, pitch, origin, fmt, notes)


def hot_spot_in_pattern_frame(spec: Spec, rec: Recognised) -> Spec:
    """``spec`` with its ``[gradient] hot_spot`` moved into the pattern's frame.

    A hot spot is given in the frame the report gives positions in: for a CSV or GDSII
    layout, the file's own coordinates; for pattern text (and ``arrange``), micrometres
    from the centre of the top-left slot, y up. The grade works in the pattern's frame,
    whose origin lies at ``rec.origin_um`` in the file.
    """
    hs = spec.gradient.hot_spot
    if hs is None or rec.fmt == "pattern":
        return spec
    ox, oy = rec.origin_um
    moved = replace(hs, x_um=hs.x_um - ox, y_um=hs.y_um - oy)
    return replace(spec, gradient=replace(spec.gradient, hot_spot=moved))
