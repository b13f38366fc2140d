"""An independent GDSII stream reader for the tests (no gdstk).

Written from the published record layout of the GDSII Stream Format (Calma GDSII Stream
Format Manual, release 6.0, 1987): every record is a 2-byte big-endian length (header
included), a 1-byte record type and a 1-byte data type; reals are 8-byte excess-64
base-16 floating point. It checks the record grammar as it reads and can flatten
structure references, so tests can compare what the writer meant with what the file says.
"""

from __future__ import annotations

import math
import struct
from dataclasses import dataclass, field

RECORDS = {
    0x00: "HEADER", 0x01: "BGNLIB", 0x02: "LIBNAME", 0x03: "UNITS", 0x04: "ENDLIB",
    0x05: "BGNSTR", 0x06: "STRNAME", 0x07: "ENDSTR", 0x08: "BOUNDARY", 0x09: "PATH",
    0x0A: "SREF", 0x0B: "AREF", 0x0C: "TEXT", 0x0D: "LAYER", 0x0E: "DATATYPE",
    0x0F: "WIDTH", 0x10: "XY", 0x11: "ENDEL", 0x12: "SNAME", 0x13: "COLROW",
    0x16: "TEXTTYPE", 0x17: "PRESENTATION", 0x19: "STRING", 0x1A: "STRANS", 0x1B: "MAG",
    0x1C: "ANGLE", 0x21: "PATHTYPE", 0x2D: "BOX", 0x2E: "BOXTYPE",
}
# data type expected for each record type (manual, chapter "Record descriptions")
DATATYPES = {
    "HEADER": 2, "BGNLIB": 2, "LIBNAME": 6, "UNITS": 5, "ENDLIB": 0, "BGNSTR": 2,
    "STRNAME": 6, "ENDSTR": 0, "BOUNDARY": 0, "PATH": 0, "SREF": 0, "AREF": 0, "TEXT": 0,
    "LAYER": 2, "DATATYPE": 2, "WIDTH": 3, "XY": 3, "ENDEL": 0, "SNAME": 6, "COLROW": 2,
    "TEXTTYPE": 2, "PRESENTATION": 1, "STRING": 6, "STRANS": 1, "MAG": 5, "ANGLE": 5,
    "PATHTYPE": 2, "BOX": 0, "BOXTYPE": 2,
}


class StreamError(ValueError):
    pass


def real8(raw: bytes) -> float:
    """Excess-64 base-16 real: sign bit, 7-bit exponent, 56-bit fraction."""
    sign = -1.0 if raw[0] & 0x80 else 1.0
    exponent = (raw[0] & 0x7F) - 64
    mantissa = int.from_bytes(raw[1:8], "big")
    return sign * mantissa / 2 ** 56 * 16.0 ** exponent


@dataclass
class Element:
    kind: str
    layer: int | None = None
    datatype: int | None = None
    xy: list[tuple[int, int]] = field(default_factory=list)
    sname: str | None = None
    text: str | None = None
    reflect: bool = False
    angle: float = 0.0
    mag: float = 1.0
    width: int | None = None


@dataclass
class Library:
    name: str
    user_unit: float
    db_unit_m: float
    cells: dict[str, list[Element]]
    order: list[str]


def records(data: bytes):
    pos = 0
    while pos < len(data):
        if pos + 4 > len(data):
            raise StreamError(f"truncated record header at byte {pos}")
        length, rtype, dtype = struct.unpack(">HBB", data[pos:pos + 4])
        if length < 4 or length % 2 or pos + length > len(data):
            raise StreamError(f"bad record length {length} at byte {pos}")
        name = RECORDS.get(rtype)
        if name is None:
            raise StreamError(f"unknown record type {rtype:#x} at byte {pos}")
        if DATATYPES[name] != dtype:
            raise StreamError(f"{name} with data type {dtype} at byte {pos}")
        yield name, data[pos + 4:pos + length]
        pos += length
        if name == "ENDLIB":
            return
    raise StreamError("no ENDLIB")


def _ints(raw: bytes, size: int) -> list[int]:
    fmt = {2: "h", 4: "i"}[size]
    return list(struct.unpack(f">{len(raw) // size}{fmt}", raw))


def _ascii(raw: bytes) -> str:
    return raw.rstrip(b"\0").decode("ascii")


def read(data: bytes) -> Library:
    """Parse and grammar-check a whole stream."""
    it = records(data)

    def expect(*names):
        name, raw = next(it)
        if name not in names:
            raise StreamError(f"expected {'/'.join(names)}, got {name}")
        return name, raw

    expect("HEADER")
    expect("BGNLIB")
    _, raw = expect("LIBNAME")
    libname = _ascii(raw)
    _, raw = expect("UNITS")
    user, db = real8(raw[:8]), real8(raw[8:16])
    cells: dict[str, list[Element]] = {}
    order = []
    while True:
        name, raw = expect("BGNSTR", "ENDLIB")
        if name == "ENDLIB":
            break
        _, raw = expect("STRNAME")
        cname = _ascii(raw)
        if cname in cells:
            raise StreamError(f"duplicate structure {cname}")
        elements: list[Element] = []
        cells[cname] = elements
        order.append(cname)
        while True:
            name, raw = expect("BOUNDARY", "PATH", "SREF", "AREF", "TEXT", "BOX", "ENDSTR")
            if name == "ENDSTR":
                break
            el = Element(name)
            while True:
                rec, raw = next(it)
                if rec == "ENDEL":
                    break
                if rec == "LAYER":
                    el.layer = _ints(raw, 2)[0]
                elif rec in ("DATATYPE", "TEXTTYPE", "BOXTYPE"):
                    el.datatype = _ints(raw, 2)[0]
                elif rec == "XY":
                    v = _ints(raw, 4)
                    el.xy = list(zip(v[::2], v[1::2], strict=True))
                elif rec == "SNAME":
                    el.sname = _ascii(raw)
                elif rec == "STRING":
                    el.text = _ascii(raw)
                elif rec == "STRANS":
                    el.reflect = bool(raw[0] & 0x80)
                elif rec == "ANGLE":
                    el.angle = real8(raw)
                elif rec == "MAG":
                    el.mag = real8(raw)
                elif rec == "WIDTH":
                    el.width = _ints(raw, 4)[0]
                elif rec in ("PATHTYPE", "PRESENTATION", "COLROW"):
                    pass
                else:
                    raise StreamError(f"{rec} inside {name}")
            if name in ("BOUNDARY", "PATH", "TEXT") and (el.layer is None or not el.xy):
                raise StreamError(f"{name} without LAYER or XY in {cname}")
            if name == "BOUNDARY" and (len(el.xy) < 4 or el.xy[0] != el.xy[-1]):
                raise StreamError(f"open BOUNDARY in {cname}")
            if name in ("SREF", "AREF") and el.sname is None:
                raise StreamError(f"{name} without SNAME in {cname}")
            elements.append(el)
    for cname, elements in cells.items():
        for el in elements:
            if el.sname is not None and el.sname not in cells:
                raise StreamError(f"{cname} references missing {el.sname}")
    return Library(libname, user, db, cells, order)


def flatten(lib: Library, top: str):
    """Yield (element, transform) for every leaf element below ``top``.

    A transform maps a point of the element's cell to the top cell: reflect about x
    (STRANS bit 0), then rotate by ANGLE degrees, then translate (the manual's order).
    """
    def compose(outer, ref):
        ox, oy, orot, orefl = outer
        (x, y), = ref.xy[:1]
        px, py = apply(outer, (x, y))
        rot = orot + (-ref.angle if orefl else ref.angle)
        return (px, py, rot, orefl ^ ref.reflect)

    def walk(cell, tr):
        for el in lib.cells[cell]:
            if el.kind == "SREF":
                yield from walk(el.sname, compose(tr, el))
            else:
                yield el, tr

    yield from walk(top, (0, 0, 0.0, False))


def apply(tr, point):
    x, y, rot, refl = tr
    px, py = point
    if refl:
        py = -py
    a = math.radians(rot)
    return (x + px * math.cos(a) - py * math.sin(a), y + px * math.sin(a) + py * math.cos(a))
