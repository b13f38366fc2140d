"""GDSII layouts: unit cells by reference, device and net labels, routed wiring, outline.

This is the only module that imports gdstk. Coordinates are snapped to whole database
units (1 nm) before gdstk sees them, layer numbers come validated from the layer map,
cell names are made safe and unique, and the timestamp is fixed so the same input gives
the same bytes. The library holds the unit cell, the dummy cell when a dummy is placed,
and one top cell.
"""

from __future__ import annotations

import datetime as dt
import os
import re
from pathlib import Path
from typing import Any

import numpy as np

from placer.errors import PlacerError
from placer.io.pattern import DUMMY, EMPTY, Pattern
from placer.io.spec import Spec
from placer.kinds import KINDS
from placer.layout.cells import DB_UNIT_UM, Rect, Rules, UnitCell, snap
from placer.layout.layers import LayerMap
from placer.layout.router import Wiring

__all__ = ["cell_name", "build_library", "build_sequence_library", "write_gds",
           "gds_timestamp", "DB_UNIT_UM"]


def cell_name(base: str, suffix: str, taken: set[str]) -> str:
    """A GDSII-safe, unique cell name: letters, digits, underscore, at most 32 characters.

    Examples
    --------
    >>> cell_name("bias-mirror", "TOP", set())
    'bias_mirror_TOP'
    """
    clean = re.sub(r"[^A-Za-z0-9_]", "_", base) or "placer"
    if not clean[0].isalpha():
        clean = "P" + clean
    tail = "_" + suffix
    name = clean[:32 - len(tail)] + tail
    n = 1
    while name in taken:
        extra = f"{tail}{n}"
        name = clean[:32 - len(extra)] + extra
        n += 1
    taken.add(name)
    return name


def gds_timestamp() -> dt.datetime:
    """SOURCE_DATE_EPOCH if set to a usable time, else a fixed date: the same input gives
    the same bytes."""
    epoch = os.environ.get("SOURCE_DATE_EPOCH", "").strip()
    if epoch.isdigit() and len(epoch) <= 12:
        try:
            stamp = dt.datetime.fromtimestamp(int(epoch), tz=dt.UTC).replace(tzinfo=None)
        except (OverflowError, OSError, ValueError):
            return dt.datetime(2000, 1, 1)
        if 1970 <= stamp.year <= 9999:
            return stamp
    return dt.datetime(2000, 1, 1)


def _add_rect(cell: Any, rect: Rect, layers: LayerMap) -> None:
    import gdstk

    layer, dtype = layers[rect.role]
    cell.add(gdstk.rectangle((snap(rect.x0), snap(rect.y0)), (snap(rect.x1), snap(rect.y1)),
                             layer=layer, datatype=dtype))


def build_library(pattern: Pattern, spec: Spec, cell: UnitCell, wiring: Wiring,
                  layers: LayerMap, rules: Rules | None = None,
                  user_cell: Any = None) -> Any:
    """The gdstk library of a routed pattern.

    ``cell`` is the unit cell drawn for every unit and dummy; with ``user_cell`` (a gdstk
    cell from the user's library, with its own sub-cells) that cell is placed instead and
    ``cell`` only describes its terminals.
    """
    import gdstk

    px, py = spec.array.pitch_um
    lib = gdstk.Library(name=spec.name[:32] or "placer", unit=1e-6, precision=1e-9)
    taken: set[str] = set()
    if user_cell is not None:
        unit = user_cell.copy(cell_name(user_cell.name, "UNIT", taken))
        for dep in user_cell.dependencies(True):
            lib.add(dep)
            taken.add(dep.name)
        lib.add(unit)
    else:
        unit = lib.new_cell(cell_name(spec.name, cell.kind.upper(), taken))
        for s in cell.shapes:
            _add_rect(unit, s, layers)
    # a ring of strips: one cell per side and corner of the ring
    from placer.layout.cells import load_rules
    from placer.layout.ring import ring_strips

    strips = {} if user_cell is not None else ring_strips(
        pattern, spec, cell, rules if rules is not None else load_rules(spec.kind))
    strip_cells: dict[str, Any] = {}
    for st in strips.values():
        if st.side not in strip_cells:
            sc = lib.new_cell(cell_name(spec.name, "DUMMY_" + st.side.upper().replace("-", "_"),
                                        taken))
            for sh in st.shapes:
                _add_rect(sc, sh, layers)
            _add_rect(sc, st.keep, layers)
            strip_cells[st.side] = sc
    dummy = None
    whole = [(r, c) for r, c in zip(*np.nonzero(pattern.ids == DUMMY), strict=True)
             if (int(r), int(c)) not in strips]
    if whole:
        dummy = lib.new_cell(cell_name(spec.name, "DUMMY", taken))
        if user_cell is not None:
            dummy.add(gdstk.Reference(unit, (0, 0)))
        else:
            for s in (cell.dummy_shapes if cell.dummy_shapes is not None else cell.shapes):
                _add_rect(dummy, s, layers)
        x0, y0, x1, y1 = cell.extent
        _add_rect(dummy, Rect("dummy", x0, y0, x1, y1), layers)
    top = lib.new_cell(cell_name(spec.name, "TOP", taken))

    lab_layer, lab_type = layers["label"]
    rows, cols = pattern.shape
    for r in range(rows):
        for c in range(cols):
            d = int(pattern.ids[r, c])
            if d == EMPTY:
                continue
            x, y = snap(c * px), snap(-r * py)
            mirrored = KINDS[spec.kind].fingers and int(pattern.orient[r, c]) < 0
            target = unit if d != DUMMY or dummy is None else dummy
            if (r, c) in strips:
                target = strip_cells[strips[r, c].side]
            top.add(gdstk.Reference(target, (x, y), rotation=np.pi if mirrored else 0.0,
                                    x_reflection=mirrored))
            if d >= 0:
                top.add(gdstk.Label(pattern.devices[d], (x, y), layer=lab_layer,
                                    texttype=lab_type))
    for s in wiring.shapes:
        _add_rect(top, s, layers)
    for lab in wiring.labels:
        layer, dtype = layers[lab.role]
        top.add(gdstk.Label(lab.text, (snap(lab.x), snap(lab.y)), layer=layer,
                            texttype=dtype))
    x0, y0, x1, y1 = wiring.bbox
    margin = snap(0.5 * min(px, py) * 0.1 + 0.1)
    _add_rect(top, Rect("outline", x0 - margin, y0 - margin, x1 + margin, y1 + margin), layers)
    return lib


def build_sequence_library(layout: Any, name: str, layers: LayerMap) -> Any:
    """The gdstk library of a unary array's order: a placeholder cell (its outline, 0.9 of
    the pitch) referenced at every slot of a cell, a dummy cell at every other slot, and
    at each slot's centre a label with its cell's sequence number (``S<n>``; ``B<j>`` for
    binary bit j of a segmented array; on the label layer): the pattern a layout engineer
    fills with the real current cell (same name)."""
    import gdstk

    px, py = layout.pitch_um
    lib = gdstk.Library(name=name[:32] or "placer", unit=1e-6, precision=1e-9)
    taken: set[str] = set()
    hw, hh = snap(0.45 * px), snap(0.45 * py)
    unit = lib.new_cell(cell_name(name, "CELL", taken))
    _add_rect(unit, Rect("outline", -hw, -hh, hw, hh), layers)
    grid = layout.grid()
    dummy = None
    if np.any(grid == 0):
        dummy = lib.new_cell(cell_name(name, "DUMMY", taken))
        _add_rect(dummy, Rect("outline", -hw, -hh, hw, hh), layers)
        _add_rect(dummy, Rect("dummy", -hw, -hh, hw, hh), layers)
    top = lib.new_cell(cell_name(name, "TOP", taken))
    lab_layer, lab_type = layers["label"]
    rows, cols = grid.shape
    for r in range(rows):
        for c in range(cols):
            x, y = snap(c * px), snap(-r * py)
            k = int(grid[r, c])
            top.add(gdstk.Reference(unit if k > 0 or dummy is None else dummy, (x, y)))
            if k:
                top.add(gdstk.Label(f"S{k}" if k > 0 else f"B{-1 - k}", (x, y),
                                    layer=lab_layer, texttype=lab_type))
    m = snap(0.1 * min(px, py))
    _add_rect(top, Rect("outline", snap(-0.5 * px) - m, snap(-(rows - 0.5) * py) - m,
                        snap((cols - 0.5) * px) + m, snap(0.5 * py) + m), layers)
    return lib


#: The last record of every GDSII stream: length 4, ENDLIB (0x04), no data (0x00).
_ENDLIB = b"\x00\x04\x04\x00"


def write_gds(lib: Any, path: Path) -> bytes:
    """Write the library to ``path`` atomically and return the bytes written."""
    import tempfile

    from placer.io.staging import atomic_write

    fd, tmp_name = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    os.close(fd)
    tmp = Path(tmp_name)
    try:
        lib.write_gds(str(tmp), timestamp=gds_timestamp())
        data = tmp.read_bytes()
        # gdstk does not report a short write (a full disk, a file-size limit): a whole
        # stream ends with its ENDLIB record
        if data[-4:] != _ENDLIB:
            raise PlacerError(f"{path}: cannot write: the GDSII stream came out cut short "
                              f"({len(data)} bytes; the disk is full or a file-size limit "
                              "was reached)")
    except OSError as err:
        raise PlacerError(f"{path}: cannot write: {err.strerror or err}") from err
    finally:
        if tmp.exists():
            tmp.unlink()
    atomic_write(path, data)
    return data
