"""Read a hand layout -- GDSII, a CSV of unit centres, or a pattern -- into a Pattern.

The format is chosen by content: a GDSII HEADER record, a CSV header ``x_um,y_um,device``,
or else the pattern text format. GDSII and CSV give unit centres; the grid and pitch are
inferred from them, and what was recognised (and skipped, and why) is reported.
"""

from __future__ import annotations

import csv
import io
import math
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from placer.errors import LimitError
from placer.pattern import DUMMY, EMPTY, Pattern, parse_pattern
from placer.spec import MAX_FILE_BYTES, MAX_SLOTS, NAME_RE, Spec
from placer.stream import LayoutError, StreamLibrary, is_gdsii, parse_stream

__all__ = ["Unit", "Recognised", "read_layout", "units_to_pattern", "read_csv_units",
           "gds_units", "detect_format", "MAX_LAYOUT_BYTES"]

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


def detect_format(head: bytes) -> str:
    """'gds', 'csv' or 'pattern' from a file's first bytes.

    Examples
    --------
    >>> detect_format(b"x_um,y_um,device\\n0,0,A\\n")
    'csv'
    >>> detect_format(b"A B B A\\n")
    'pattern'
    """
    if is_gdsii(head):
        return "gds"
    text = head.decode("utf-8", errors="replace").lstrip("\ufeff")
    for line in text.splitlines():
        s = line.strip()
        if not s or s.startswith("#"):
            continue
        cells = [c.strip().lower() for c in s.split(",")]
        return "csv" if cells[:2] == ["x_um", "y_um"] else "pattern"
    return "pattern"


def _read_bytes(path: Path, limit: int) -> bytes:
    try:
        size = path.stat().st_size
        if size > limit:
            raise LimitError(f"{path}: file is {size} bytes, the limit is {limit}")
        return path.read_bytes()
    except OSError as err:
        raise LayoutError(f"{path}: cannot read: {err.strerror or err}") from err


def read_csv_units(text: str, source: str) -> list[Unit]:
    """Units from CSV rows ``x_um,y_um,device[,orientation]``; device '.' is a dummy."""
    try:
        rows = list(csv.reader(io.StringIO(text.lstrip("\ufeff"), newline="")))
    except csv.Error as err:
        raise LayoutError(f"{source}: not a readable CSV: {err}") from err
    units: list[Unit] = []
    header_seen = False
    for lineno, row in enumerate(rows, start=1):
        cells = [c.strip() for c in row]
        if not cells or not any(cells) or cells[0].startswith("#"):
            continue
        if not header_seen:
            if [c.lower() for c in cells[:3]] != ["x_um", "y_um", "device"]:
                raise LayoutError(f"{source}:{lineno}: the first row must be the header "
                                  "x_um,y_um,device[,orientation]")
            header_seen = True
            continue
        if len(cells) not in (3, 4):
            raise LayoutError(f"{source}:{lineno}: expected 3 or 4 fields "
                              f"(x_um,y_um,device[,orientation]), got {len(cells)}")
        try:
            x, y = float(cells[0]), float(cells[1])
        except ValueError:
            raise LayoutError(f"{source}:{lineno}: x_um and y_um must be numbers, got "
                              f"{cells[0]!r}, {cells[1]!r}") from None
        if not (math.isfinite(x) and math.isfinite(y)) or max(abs(x), abs(y)) > 1e6:
            raise LayoutError(f"{source}:{lineno}: coordinates must be finite and within "
                              "1 m, got {x}, {y}")
        name = cells[2]
        if name != "." and not NAME_RE.match(name):
            raise LayoutError(f"{source}:{lineno}: device {name!r} is not a name (letter, then "
                              "letters, digits, _) or '.' for a dummy")
        mark_text = cells[3] if len(cells) == 4 else ""
        if mark_text not in ("", ">", "<"):
            raise LayoutError(f"{source}:{lineno}: orientation must be '>', '<' or empty, got "
                              f"{mark_text!r}")
        units.append(Unit(x, y, None if name == "." else name,
                          {"": 0, ">": 1, "<": -1}[mark_text]))
        if len(units) > MAX_SLOTS:
            raise LimitError(f"{source}: more than {MAX_SLOTS} units, the limit")
    if not header_seen:
        raise LayoutError(f"{source}: empty CSV: give the header x_um,y_um,device and a row "
                          "per unit")
    return units


def gds_units(lib: StreamLibrary, source: str, *, cell: str | None,
              mapping: dict[str, str], label_layer: tuple[int, int],
              dummy_cells: set[str], mos: bool, notes: list[str]) -> list[Unit]:
    """Units of a GDSII library: leaf cells placed by reference below the top cell.

    A unit is placed where its reference's origin lands after the hierarchy is flattened;
    its device comes from a label on the label layer lying on it, else from ``mapping``
    (cell name -> device); unlabelled units of a dummy cell (``dummy_cells``, or any cell
    whose name contains DUMMY) are dummies. Orientation comes from the reference's
    transform: a finger whose x axis points left is '<'.
    """
    cells = lib.structures
    if cell is not None:
        if cell not in cells:
            raise LayoutError(f"{source}: no cell {cell!r} (cells: "
                              f"{', '.join(sorted(cells)[:10])})")
        top = cell
    else:
        referenced = {r.cell for s in cells.values() for r in s.refs}
        tops = [n for n in cells if n not in referenced]
        with_refs = [n for n in tops if cells[n].refs]
        if not with_refs and len(tops) == 1:
            with_refs = tops
        if len(with_refs) != 1:
            found = ", ".join(with_refs or tops) or "none"
            raise LayoutError(f"{source}: cannot tell the top cell (candidates: {found}); "
                              "name it with --cell")
        top = with_refs[0]
    if not cells[top].refs:
        raise LayoutError(f"{source}: cell {top!r} places no unit cells by reference")

    placed: list[tuple[str, float, float, bool, float]] = []
    texts: list[tuple[str, float, float]] = []
    skipped_texts: Counter[tuple[int, int]] = Counter()

    def walk(name: str, tx: float, ty: float, refl: bool, ang: float, mag: float,
             depth: int) -> None:
        if depth > 64:
            raise LayoutError(f"{source}: references nest deeper than 64 levels (a cycle?)")
        s = cells[name]
        for t in s.texts:
            x, y = _apply(t.x, t.y, tx, ty, refl, ang, mag)
            if (t.layer, t.texttype) == label_layer:
                texts.append((t.text, x, y))
            else:
                skipped_texts[(t.layer, t.texttype)] += 1
        for r in s.refs:
            x, y = _apply(r.x, r.y, tx, ty, refl, ang, mag)
            a = ang + (-r.angle_deg if refl else r.angle_deg)
            if not cells[r.cell].refs:
                placed.append((r.cell, x, y, refl ^ r.reflect, a))
            else:
                walk(r.cell, x, y, refl ^ r.reflect, a, mag * r.mag, depth + 1)

    walk(top, 0.0, 0.0, False, 0.0, 1.0, 0)
    notes.append(f"top cell {top!r}: {len(placed)} unit references")
    for (layer, dtype), k in sorted(skipped_texts.items()):
        notes.append(f"skipped {k} labels on layer {layer}/{dtype} (labels are read on "
                     f"{label_layer[0]}/{label_layer[1]})")
    return _label_units(placed, texts, mapping, dummy_cells, mos, source, notes)


def _apply(x: float, y: float, tx: float, ty: float, refl: bool, ang: float,
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
                 notes: list[str]) -> list[Unit]:
    if not placed:
        raise LayoutError(f"{source}: no unit references found")
    xy = np.array([(p[1], p[2]) for p in placed])
    px, py = _pitch(xy[:, 0]), _pitch(xy[:, 1])
    half = np.array([px if px > 0 else 1.0, py if py > 0 else 1.0]) / 2.0
    owner: dict[int, list[str]] = {}
    stray = []
    for text, x, y in texts:
        d = np.abs(xy - np.array([x, y]))
        inside = np.nonzero(np.all(d < half * 0.999, axis=1))[0]
        if len(inside) == 0:
            stray.append((text, x, y))
            continue
        i = int(inside[np.argmin(np.hypot(*(d[inside].T)))])
        owner.setdefault(i, []).append(text)
    if stray:
        notes.append(f"skipped {len(stray)} labels lying on no unit, e.g. {stray[0][0]!r} at "
                     f"({stray[0][1]:.4g}, {stray[0][2]:.4g}) um")
    units = []
    doubles = []
    unknown = []
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
            raise LayoutError(f"{source}: label {name!r} at ({x:.4g}, {y:.4g}) um is not a "
                              "device name")
        mark = 0
        if mos and name is not None:
            mark = -1 if math.cos(math.radians(ang)) < 0 else 1
        units.append(Unit(x, y, name, mark, cell))
    if doubles:
        raise LayoutError(f"{source}: {len(doubles)} units carry two labels: "
                          + "; ".join(doubles[:5]))
    if unknown:
        raise LayoutError(f"{source}: {len(unknown)} units have no label and no --map "
                          f"CELL=DEVICE: " + "; ".join(unknown[:5]))
    return units


def _pitch(values: np.ndarray) -> float:
    """Smallest spacing (over 1 nm) of the distinct coordinates, 0 if there is only one.

    Examples
    --------
    >>> _pitch(np.array([0.0, 2.5, 5.0, 10.0]))
    2.5
    """
    u = np.unique(np.round(values, 3))
    diffs = np.diff(u)
    diffs = diffs[diffs > 0.001]
    return float(np.round(diffs.min(), 3)) if len(diffs) else 0.0


def units_to_pattern(units: list[Unit], source: str, notes: list[str],
                     spec: Spec | None) -> tuple[Pattern, tuple[float, float],
                                                 tuple[float, float]]:
    """Snap unit centres to the grid they imply; report off-grid and overlapping units."""
    if not units:
        raise LayoutError(f"{source}: no units")
    xy = np.array([(u.x, u.y) for u in units])
    px, py = _pitch(xy[:, 0]), _pitch(xy[:, 1])
    if spec is not None:
        sx, sy = spec.array.pitch_um
        px = px or sx
        py = py or sy
    px, py = px or 1.0, py or 1.0
    x0, y0 = xy[:, 0].min(), xy[:, 1].max()
    col = np.round((xy[:, 0] - x0) / px).astype(int)
    row = np.round((y0 - xy[:, 1]) / py).astype(int)
    tol = 0.01
    off = np.hypot((xy[:, 0] - x0) / px - col, (y0 - xy[:, 1]) / py - row) > tol
    if off.any():
        where = "; ".join(f"({units[i].x:.4g}, {units[i].y:.4g}) um"
                          for i in np.nonzero(off)[0][:5])
        raise LayoutError(f"{source}: {int(off.sum())} units are off the {px:.4g} x "
                          f"{py:.4g} um grid (mixed pitches?): {where}")
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
                raise LayoutError(f"{source}: label {u.device!r} at ({u.x:.4g}, {u.y:.4g}) um "
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
    data = _read_bytes(path, MAX_LAYOUT_BYTES)
    fmt = detect_format(data[:4096])
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
        pattern = parse_pattern(text, source=str(path))
        pitch = spec.array.pitch_um if spec is not None else (0.0, 0.0)   # from the spec
        return Recognised(pattern, pitch, (0.0, 0.0), fmt, notes)
    mos = spec is None or spec.kind == "mos"
    if fmt == "csv":
        try:
            text = data.decode("utf-8")
        except UnicodeDecodeError as err:
            raise LayoutError(f"{path}: CSV is not UTF-8 (byte {err.start})") from err
        units = read_csv_units(text, str(path))
        notes.append(f"{len(units)} units from CSV rows")
    else:
        lib = parse_stream(data, str(path))
        notes.append(f"GDSII library {lib.name!r}, {len(lib.structures)} cells, user unit "
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
    pattern, pitch, origin = units_to_pattern(units, str(path), notes, spec)
    return Recognised(pattern, pitch, origin, fmt, notes)
