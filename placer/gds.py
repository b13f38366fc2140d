"""GDSII stick patterns: unit cells by reference, labels, shared diffusion, stick wiring.

This is the only module that imports gdstk. Coordinates are snapped to whole database
units (1 nm) before gdstk sees them, layer numbers are validated, cell names are made
safe and unique, and the timestamp is fixed so the same input gives the same bytes.
"""

from __future__ import annotations

import datetime as dt
import os
import re
import tomllib
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from typing import Any

import numpy as np

from placer.errors import PlacerError
from placer.pattern import DUMMY, Pattern
from placer.routing import finger_terminals
from placer.spec import Spec

__all__ = [
    "TemplateError",
    "LayerMap",
    "Template",
    "Shape",
    "PURPOSES",
    "load_layers",
    "load_template",
    "cell_name",
    "build_library",
    "write_gds",
    "gds_timestamp",
]

PURPOSES = ("diffusion", "gate", "contact", "metal1", "metal2", "via1", "label", "outline",
            "dummy")
MAX_LAYER = 32767          # layer and datatype are 2-byte signed integers in the stream
DB_UNIT_UM = 1e-3          # 1 nm database unit, micrometre user unit
_SIZE_OF = ("width", "length")
_TEMPLATE_FILES = {"mos": "mos_finger.toml", "cap": "cap_unit.toml", "res": "res_unit.toml"}


class TemplateError(PlacerError):
    """A template or layer map is malformed."""


@dataclass(frozen=True)
class LayerMap:
    """Purpose -> (layer, datatype)."""

    layers: dict[str, tuple[int, int]]
    source: str

    def __getitem__(self, purpose: str) -> tuple[int, int]:
        return self.layers[purpose]


@dataclass(frozen=True)
class Shape:
    """A rectangle of a unit cell, in micrometres about the slot centre."""

    purpose: str
    x0: float
    y0: float
    x1: float
    y1: float


@dataclass(frozen=True)
class Template:
    """A unit cell's shapes, resolved for one spec's pitch and unit size."""

    kind: str
    shapes: tuple[Shape, ...]
    source: str


def _read_toml(path: Path | None, fallback: str) -> tuple[dict[str, Any], str]:
    if path is None:
        return tomllib.loads(_shipped(fallback)), f"templates/{fallback}"
    try:
        text = Path(path).read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as err:
        raise TemplateError(f"{path}: cannot read: {getattr(err, 'strerror', None) or err}"
                            ) from err
    try:
        return tomllib.loads(text), str(path)
    except tomllib.TOMLDecodeError as err:
        raise TemplateError(f"{path}: invalid TOML: {err}") from err


def _shipped(name: str) -> str:
    """A shipped template: from the source tree's templates/ when running from a checkout,
    else from the installed package data (placer.templates)."""
    checkout = Path(__file__).resolve().parent.parent
    local = checkout / "templates" / name
    if (checkout / "pyproject.toml").is_file() and local.is_file():
        return local.read_text(encoding="utf-8")
    return resources.files("placer.templates").joinpath(name).read_text(encoding="utf-8")


def load_layers(path: Path | None = None) -> LayerMap:
    """Read a layer map (purpose = [layer, datatype]); without a path, the generic one."""
    data, src = _read_toml(path, "layers.toml")
    layers: dict[str, tuple[int, int]] = {}
    for key, value in data.items():
        if key not in PURPOSES:
            raise TemplateError(f"{src}: unknown purpose {key!r} (allowed: "
                                f"{', '.join(PURPOSES)})")
        if (not isinstance(value, list) or len(value) != 2
                or any(isinstance(v, bool) or not isinstance(v, int) for v in value)):
            raise TemplateError(f"{src}: {key} must be [layer, datatype] (two whole numbers), "
                                f"got {value!r}")
        if not all(0 <= v <= MAX_LAYER for v in value):
            raise TemplateError(f"{src}: {key} = {value} is outside 0..{MAX_LAYER}, the range "
                                "a GDSII stream stores unchanged")
        layers[key] = (value[0], value[1])
    missing = [p for p in PURPOSES if p not in layers]
    if missing:
        raise TemplateError(f"{src}: missing purpose(s) {', '.join(missing)}")
    return LayerMap(layers, src)


def _size(shape: dict[str, Any], axis: str, pitch: float, spec: Spec, where: str) -> float:
    keys = [k for k in (f"{axis}_frac", f"{axis}_um", f"{axis}_of") if k in shape]
    if len(keys) != 1:
        raise TemplateError(f"{where}: give exactly one of {axis}_frac, {axis}_um, {axis}_of")
    key = keys[0]
    value = shape[key]
    if key.endswith("_of"):
        if value not in _SIZE_OF:
            raise TemplateError(f"{where}: {key} must be 'width' or 'length', got {value!r}")
        return spec.unit.width_um if value == "width" else spec.unit.length_um
    if isinstance(value, bool) or not isinstance(value, int | float) or value <= 0:
        raise TemplateError(f"{where}: {key} must be a number > 0, got {value!r}")
    return float(value) * (pitch if key.endswith("_frac") else 1.0)


def load_template(spec: Spec, path: Path | None = None) -> Template:
    """Resolve the unit-cell template for ``spec`` (its kind's default, or ``path``)."""
    data, src = _read_toml(path, _TEMPLATE_FILES[spec.kind])
    allowed = {"kind", "shape"}
    for key in data:
        if key not in allowed:
            raise TemplateError(f"{src}: unknown key {key!r} (allowed: kind, shape)")
    kind = data.get("kind", spec.kind)
    if kind not in _TEMPLATE_FILES:
        raise TemplateError(f"{src}: kind must be 'mos', 'cap' or 'res', got {kind!r}")
    raw = data.get("shape")
    if not isinstance(raw, list) or not raw:
        raise TemplateError(f"{src}: needs at least one [[shape]]")
    px, py = spec.array.pitch_um
    shapes = []
    shape_keys = {"layer", "x_frac", "y_frac", "w_frac", "w_um", "w_of", "h_frac", "h_um",
                  "h_of"}
    for i, shape in enumerate(raw, start=1):
        where = f"{src}: shape {i}"
        if not isinstance(shape, dict):
            raise TemplateError(f"{where}: must be a table")
        unknown = sorted(set(shape) - shape_keys)
        if unknown:
            raise TemplateError(f"{where}: unknown key {unknown[0]!r}")
        layer = shape.get("layer")
        if layer not in PURPOSES:
            raise TemplateError(f"{where}: layer must be one of {', '.join(PURPOSES)}, got "
                                f"{layer!r}")
        cx = shape.get("x_frac", 0.0)
        cy = shape.get("y_frac", 0.0)
        if any(isinstance(v, bool) or not isinstance(v, int | float) for v in (cx, cy)):
            raise TemplateError(f"{where}: x_frac and y_frac must be numbers")
        w = _size(shape, "w", px, spec, where)
        h = _size(shape, "h", py, spec, where)
        x, y = cx * px, cy * py
        shapes.append(Shape(str(layer), x - w / 2, y - h / 2, x + w / 2, y + h / 2))
    return Template(str(kind), tuple(shapes), src)


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


def _snap(v: float) -> float:
    """Round to a whole nanometre so gdstk's truncation cannot move it."""
    return round(v / DB_UNIT_UM) * DB_UNIT_UM


def gds_timestamp() -> dt.datetime:
    """SOURCE_DATE_EPOCH if set, else a fixed date: the same input gives the same bytes."""
    epoch = os.environ.get("SOURCE_DATE_EPOCH")
    if epoch and epoch.isdigit():
        return dt.datetime.fromtimestamp(int(epoch), tz=dt.UTC).replace(tzinfo=None)
    return dt.datetime(2000, 1, 1)


def build_library(pattern: Pattern, spec: Spec, template: Template, layers: LayerMap) -> Any:
    """The gdstk library of a pattern: unit cells, dummy cell and the top cell."""
    import gdstk

    px, py = spec.array.pitch_um
    lib = gdstk.Library(name=spec.name[:32] or "placer", unit=1e-6, precision=1e-9)
    taken: set[str] = set()

    def rect(cell: Any, purpose: str, x0: float, y0: float, x1: float, y1: float) -> None:
        layer, dtype = layers[purpose]
        cell.add(gdstk.rectangle((_snap(x0), _snap(y0)), (_snap(x1), _snap(y1)), layer=layer,
                                 datatype=dtype))

    unit = lib.new_cell(cell_name(spec.name, template.kind.upper(), taken))
    for s in template.shapes:
        rect(unit, s.purpose, s.x0, s.y0, s.x1, s.y1)
    dummy = lib.new_cell(cell_name(spec.name, "DUMMY", taken))
    for s in template.shapes:
        rect(dummy, s.purpose, s.x0, s.y0, s.x1, s.y1)
    rect(dummy, "dummy", -px / 2, -py / 2, px / 2, py / 2)
    top = lib.new_cell(cell_name(spec.name, "TOP", taken))

    lab_layer, lab_type = layers["label"]
    rows, cols = pattern.shape
    for r in range(rows):
        for c in range(cols):
            d = int(pattern.ids[r, c])
            if d == -2:
                continue
            x, y = _snap(c * px), _snap(-r * py)
            mirrored = int(pattern.orient[r, c]) < 0
            top.add(gdstk.Reference(dummy if d == DUMMY else unit, (x, y),
                                    rotation=np.pi if mirrored else 0.0,
                                    x_reflection=mirrored))
            if d >= 0:
                top.add(gdstk.Label(pattern.devices[d], (x, y), layer=lab_layer,
                                    texttype=lab_type))
    if template.kind == "mos":
        _shared_diffusion(top, pattern, spec, template, rect)
    _stick_wiring(top, pattern, spec, layers)
    x0, y0 = -px / 2, -(rows - 0.5) * py
    x1, y1 = (cols - 0.5) * px, py / 2
    n_dev = len(pattern.devices)
    trunk_x1 = x1 + (n_dev + 1) * _track_pitch(px)
    rect(top, "outline", x0, y0, trunk_x1, y1)
    return lib


def _track_pitch(px: float) -> float:
    return max(_snap(px * 0.25), DB_UNIT_UM * 10)


def _shared_diffusion(top: Any, pattern: Pattern, spec: Spec, template: Template,
                      rect: Any) -> None:
    """Draw each run of fingers that share diffusion as one continuous polygon.

    Neighbouring fingers share diffusion where their facing terminals are the same net
    (a common source, or the same device's drain) or one of them is a dummy; elsewhere
    the run breaks. Each run is the union (shapely) of its fingers' diffusion and the
    joins between them.
    """
    from shapely.geometry import box
    from shapely.ops import unary_union

    diff = [s for s in template.shapes if s.purpose == "diffusion"]
    if not diff:
        return
    px, py = spec.array.pitch_um
    d0 = diff[0]
    for r in range(pattern.shape[0]):
        ids, marks = pattern.ids[r], pattern.orient[r]
        y = -r * py
        pieces = []
        for c in range(pattern.shape[1]):
            if ids[c] == -2:
                continue
            pieces.append(box(c * px + d0.x0, y + d0.y0, c * px + d0.x1, y + d0.y1))
            if c == 0:
                continue
            a, b = int(ids[c - 1]), int(ids[c])
            if a == -2:
                continue
            joined = (a < 0 or b < 0 or finger_terminals(a, int(marks[c - 1]))[1]
                      == finger_terminals(b, int(marks[c]))[0])
            if joined:
                pieces.append(box((c - 1) * px, y + d0.y0, c * px, y + d0.y1))
        merged = unary_union(pieces)
        for poly in getattr(merged, "geoms", [merged]):
            if poly.is_empty:
                continue
            x0, y0, x1, y1 = poly.bounds
            rect(top, "diffusion", x0, y0, x1, y1)


def _stick_wiring(top: Any, pattern: Pattern, spec: Spec, layers: LayerMap) -> None:
    """Per row one metal1 track per device net with stubs to its units; metal2 trunks.

    The tracks run in the lower part of each row, one per device present in the row (the
    count the routing estimate uses); each ends at the device's trunk, a vertical metal2
    path beyond the array's right edge.
    """
    import gdstk

    px, py = spec.array.pitch_um
    rows, cols = pattern.shape
    m1, m1t = layers["metal1"]
    m2, m2t = layers["metal2"]
    v1, v1t = layers["via1"]
    pitch_t = _track_pitch(px)
    width = _snap(max(min(px, py) * 0.04, DB_UNIT_UM * 10))
    right = (cols - 0.5) * px
    trunk_x = {d: _snap(right + (d + 1) * pitch_t) for d in range(len(pattern.devices))}
    span: dict[int, list[float]] = {}
    for r in range(rows):
        present = [d for d in range(len(pattern.devices)) if np.any(pattern.ids[r] == d)]
        for j, d in enumerate(present):
            y = _snap(-r * py - 0.5 * py + (j + 1) * (0.4 * py) / (len(present) + 1))
            xs = np.nonzero(pattern.ids[r] == d)[0] * px
            top.add(gdstk.FlexPath([(_snap(float(xs.min())), y), (trunk_x[d], y)], width,
                                   layer=m1, datatype=m1t, simple_path=True))
            for x in xs:
                top.add(gdstk.FlexPath([(_snap(float(x)), _snap(-r * py)),
                                        (_snap(float(x)), y)], width, layer=m1, datatype=m1t,
                                       simple_path=True))
            half = width
            top.add(gdstk.rectangle((trunk_x[d] - half, y - half), (trunk_x[d] + half,
                                                                      y + half),
                                    layer=v1, datatype=v1t))
            span.setdefault(d, []).append(y)
    for d, ys in span.items():
        if len(ys) > 1:
            top.add(gdstk.FlexPath([(trunk_x[d], max(ys)), (trunk_x[d], min(ys))], width,
                                   layer=m2, datatype=m2t, simple_path=True))


def write_gds(lib: Any, path: Path) -> bytes:
    """Write the library to ``path`` atomically and return the bytes written."""
    from placer.output import atomic_write

    tmp = path.with_name(f".{path.name}.gdstk.tmp")
    try:
        lib.write_gds(str(tmp), timestamp=gds_timestamp())
        data = tmp.read_bytes()
    except OSError as err:
        raise PlacerError(f"{path}: cannot write: {err.strerror or err}") from err
    finally:
        if tmp.exists():
            tmp.unlink()
    atomic_write(path, data)
    return data
