"""A strict, bounds-checked GDSII stream reader for importing hand layouts.

Only the records an importer needs are interpreted (structures, SREF, AREF, TEXT and the
library units); every record is checked for a sane length and data type, so a truncated
or damaged file gives one clear message instead of a crash. Record layout per the GDSII
Stream Format (Calma GDSII Stream Format Manual, release 6.0): a 2-byte length including
the 4-byte header, a record type byte and a data type byte; reals are 8-byte excess-64.
"""

from __future__ import annotations

import mmap
import struct
from collections.abc import Iterator
from dataclasses import dataclass, field, replace

from placer.errors import LayoutError, LimitError

__all__ = ["LayoutError", "Ref", "Text", "Structure", "StreamLibrary", "parse_stream",
           "is_gdsii"]

_HEADER, _BGNLIB, _LIBNAME, _UNITS, _ENDLIB = 0x00, 0x01, 0x02, 0x03, 0x04
_BGNSTR, _STRNAME, _ENDSTR = 0x05, 0x06, 0x07
_BOUNDARY, _PATH, _SREF, _AREF, _TEXT = 0x08, 0x09, 0x0A, 0x0B, 0x0C
_LAYER, _DATATYPE, _WIDTH, _XY, _ENDEL, _SNAME, _COLROW = 0x0D, 0x0E, 0x0F, 0x10, 0x11, 0x12, 0x13
_NODE, _TEXTTYPE, _PRESENTATION, _STRING, _STRANS, _MAG, _ANGLE = (0x15, 0x16, 0x17, 0x19, 0x1A,
                                                                 0x1B, 0x1C)
_PATHTYPE, _BOX, _ELFLAGS, _PLEX, _PROPATTR, _PROPVALUE = 0x21, 0x2D, 0x26, 0x2F, 0x2B, 0x2C
_ELEMENTS = {_BOUNDARY, _PATH, _SREF, _AREF, _TEXT, _BOX, _NODE}
_MAX_STRUCTURES = 100_000
_MAX_ELEMENTS = 5_000_000
#: References after expanding arrays, over the whole file.
MAX_REFS = 400_000
#: Text elements over the whole file: twice the unit limit (a device label per unit, and
#: as many others).
MAX_TEXTS = 131_072
#: Sane database units: 1 pm to 1 mm per database unit, user unit 1 pm to 1 m.
_DB_M = (1e-12, 1e-3)
_USER_M = (1e-12, 1.0)



@dataclass(frozen=True)
class Ref:
    """A structure reference: one instance, or an AREF's ``cols`` x ``rows`` of them kept
    whole (``instances`` places them; counts are checked before anything is placed)."""

    cell: str
    x: float
    y: float
    reflect: bool
    angle_deg: float
    mag: float
    cols: int = 1
    rows: int = 1
    col_step: tuple[float, float] = (0.0, 0.0)
    row_step: tuple[float, float] = (0.0, 0.0)
    #: byte offset of the element's XY record in the stream (to edit a copy in place)
    xy_at: int = -1

    @property
    def count(self) -> int:
        """Instances this reference places."""
        return self.cols * self.rows

    def instances(self) -> Iterator[Ref]:
        """Every instance, rows then columns in each row, as single references."""
        if self.count == 1:
            yield self
            return
        for r in range(self.rows):
            for c in range(self.cols):
                yield replace(self, x=self.x + c * self.col_step[0] + r * self.row_step[0],
                              y=self.y + c * self.col_step[1] + r * self.row_step[1],
                              cols=1, rows=1, col_step=(0.0, 0.0), row_step=(0.0, 0.0))

    def corners(self) -> Iterator[Ref]:
        """The instances at the array's corners: together they span every instance's
        bounding box (the instances are translations of one another)."""
        if self.count == 1:
            yield self
            return
        seen = set()
        for r in (0, self.rows - 1):
            for c in (0, self.cols - 1):
                if (r, c) not in seen:
                    seen.add((r, c))
                    yield replace(self, x=self.x + c * self.col_step[0] + r * self.row_step[0],
                                  y=self.y + c * self.col_step[1] + r * self.row_step[1],
                                  cols=1, rows=1, col_step=(0.0, 0.0), row_step=(0.0, 0.0))


@dataclass(frozen=True)
class Text:
    """A text label."""

    text: str
    layer: int
    texttype: int
    x: float
    y: float
    xy_at: int = -1          # byte offset of its XY record


@dataclass
class Structure:
    """One cell: its references, labels, how many shapes it holds and their bounding box
    (user units; None without shapes)."""

    name: str
    refs: list[Ref] = field(default_factory=list)
    texts: list[Text] = field(default_factory=list)
    shapes: int = 0
    bbox: tuple[float, float, float, float] | None = None


@dataclass
class StreamLibrary:
    """The parsed library: user unit in metres per user unit, db unit in user units."""

    name: str
    db_in_user: float
    user_in_m: float
    structures: dict[str, Structure]


def is_gdsii(head: bytes) -> bool:
    """True if the bytes start with a GDSII HEADER record.

    Examples
    --------
    >>> is_gdsii(bytes([0, 6, 0, 2, 2, 88]))
    True
    """
    return len(head) >= 4 and head[:4] == b"\x00\x06\x00\x02"


def _real8(raw: bytes) -> float:
    sign = -1.0 if raw[0] & 0x80 else 1.0
    exponent = (raw[0] & 0x7F) - 64
    mantissa = int.from_bytes(raw[1:8], "big")
    return sign * mantissa / 2 ** 56 * 16.0 ** exponent


def _census(data: bytes | mmap.mmap, source: str) -> None:
    """Count the elements and text labels from the record headers alone (a few
    operations a record), so that a file of millions is refused before any is parsed;
    damage is left to the parse, which names it."""
    unpack = struct.unpack_from
    pos, n = 0, len(data)
    elements = texts = 0
    elems = _ELEMENTS
    while pos + 4 <= n:
        length, rtype = unpack(">HB", data, pos)
        if length < 4:
            return
        if rtype in elems:
            elements += 1
            if rtype == _TEXT:
                texts += 1
                if texts > MAX_TEXTS:
                    raise LayoutError(f"{source}: more than {MAX_TEXTS} text labels, the "
                                      "limit (a unit array needs one per unit at most)")
            if elements > _MAX_ELEMENTS:
                raise LayoutError(f"{source}: more than {_MAX_ELEMENTS} elements, the limit")
        elif rtype == _ENDLIB:
            return
        pos += length


def parse_stream(data: bytes | mmap.mmap, source: str) -> StreamLibrary:
    """Parse a whole GDSII stream (bytes, or a read-only map of a file); any damage raises
    LayoutError naming the byte offset."""
    _census(data, source)
    pos = 0
    n = len(data)

    def fail(problem: str, at: int) -> LayoutError:
        return LayoutError(f"{source}: not a readable GDSII stream: {problem} at byte {at}")

    def record() -> tuple[int, int, bytes, int]:
        nonlocal pos
        if pos + 4 > n:
            raise fail("file ends inside a record header (truncated?)", pos)
        length, rtype, dtype = struct.unpack(">HBB", data[pos:pos + 4])
        if length < 4 or length % 2:
            raise fail(f"impossible record length {length}", pos)
        if pos + length > n:
            raise fail(f"record of {length} bytes runs past the end (truncated?)", pos)
        body = data[pos + 4:pos + length]
        at = pos
        pos += length
        return rtype, dtype, body, at

    def ascii_of(body: bytes, at: int) -> str:
        try:
            return body.rstrip(b"\0").decode("ascii")
        except UnicodeDecodeError as err:
            raise fail("non-ASCII name or text", at) from err

    def ints(body: bytes, size: int, at: int) -> tuple[int, ...]:
        if not body or len(body) % size:
            raise fail(f"integer record of {len(body)} bytes", at)
        return struct.unpack(f">{len(body) // size}{'h' if size == 2 else 'i'}", body)

    rtype, _, _, at = record()
    if rtype != _HEADER:
        raise fail("no HEADER record", at)
    rtype, _, _, at = record()
    if rtype != _BGNLIB:
        raise fail("no BGNLIB record", at)
    name = ""
    db_in_user, user_in_m = 1e-3, 1e-6
    structures: dict[str, Structure] = {}
    current: Structure | None = None
    elements = 0
    total_refs = 0
    texts = 0
    while True:
        rtype, dtype, body, at = record()
        if rtype == _LIBNAME:
            name = ascii_of(body, at)
        elif rtype == _UNITS:
            if len(body) != 16:
                raise fail("UNITS record is not two reals", at)
            db_in_user, db_in_m = _real8(body[:8]), _real8(body[8:])
            if not (db_in_user > 0 and db_in_m > 0):
                raise fail("UNITS are not positive", at)
            user_in_m = db_in_m / db_in_user
            if not (_DB_M[0] <= db_in_m <= _DB_M[1] and _USER_M[0] <= user_in_m <= _USER_M[1]):
                raise fail(f"UNITS of {db_in_m:.3g} m per database unit and {user_in_m:.3g} "
                           "m per user unit are outside 1 pm..1 mm and 1 pm..1 m", at)
        elif rtype == _ENDLIB:
            if current is not None:
                raise fail(f"ENDLIB inside structure {current.name}", at)
            break
        elif rtype == _BGNSTR:
            if current is not None:
                raise fail("BGNSTR inside a structure", at)
            rtype, _, body, at2 = record()
            if rtype != _STRNAME:
                raise fail("BGNSTR without STRNAME", at2)
            sname = ascii_of(body, at2)
            if sname in structures:
                raise fail(f"structure {sname!r} defined twice", at2)
            if len(structures) >= _MAX_STRUCTURES:
                raise LayoutError(f"{source}: more than {_MAX_STRUCTURES} structures, the limit")
            current = Structure(sname)
            structures[sname] = current
        elif rtype == _ENDSTR:
            if current is None:
                raise fail("ENDSTR outside a structure", at)
            current = None
        elif rtype in _ELEMENTS:
            if current is None:
                raise fail("element outside a structure", at)
            elements += 1
            if elements > _MAX_ELEMENTS:
                raise LayoutError(f"{source}: more than {_MAX_ELEMENTS} elements, the limit")
            n_before = len(current.refs)
            if rtype == _TEXT:
                texts += 1
                if texts > MAX_TEXTS:
                    raise LayoutError(f"{source}: more than {MAX_TEXTS} text labels, the "
                                      "limit (a unit array needs one per unit at most)")
            _element(rtype, current, record, ascii_of, ints, fail, db_in_user, source)
            if len(current.refs) > n_before:              # a reference: its instances
                total_refs += current.refs[-1].count
            if total_refs > MAX_REFS:
                raise LayoutError(f"{source}: more than {MAX_REFS} references after "
                                  "expanding arrays, the limit")
        elif rtype in (_PROPATTR, _PROPVALUE):
            continue
        else:
            # other library-level records (REFLIBS, FONTS, GENERATIONS, ...) carry nothing
            # an importer needs
            continue
    for s in structures.values():
        for ref in s.refs:
            if ref.cell not in structures:
                raise LayoutError(f"{source}: structure {s.name!r} references {ref.cell!r}, "
                                  "which the file does not define")
    return StreamLibrary(name, db_in_user, user_in_m, structures)


def _element(kind: int, cell: Structure, record, ascii_of, ints, fail, db: float,
             source: str) -> None:
    """Read one element up to ENDEL into ``cell``."""
    layer = texttype = 0
    xy: tuple[int, ...] = ()
    xy_at = -1
    sname = None
    text = None
    reflect = False
    angle = 0.0
    mag = 1.0
    colrow = (1, 1)
    width = 0
    while True:
        rtype, _, body, at = record()
        if rtype == _ENDEL:
            break
        if rtype in (_BGNSTR, _ENDSTR, _ENDLIB) or rtype in _ELEMENTS:
            raise fail("element without ENDEL", at)
        if rtype == _LAYER:
            layer = ints(body, 2, at)[0]
        elif rtype in (_DATATYPE, _TEXTTYPE):
            texttype = ints(body, 2, at)[0]
        elif rtype == _XY:
            xy = ints(body, 4, at)
            xy_at = at
        elif rtype == _SNAME:
            sname = ascii_of(body, at)
        elif rtype == _STRING:
            # a text on any layer may hold any bytes; only names that match matter
            text = body.rstrip(b"\0").decode("latin-1")
        elif rtype == _WIDTH:
            width = ints(body, 4, at)[0]
        elif rtype == _STRANS:
            if len(body) != 2:
                raise fail("STRANS is not 2 bytes", at)
            reflect = bool(body[0] & 0x80)
        elif rtype == _MAG:
            if len(body) != 8:
                raise fail("MAG is not a real", at)
            mag = _real8(body)
        elif rtype == _ANGLE:
            if len(body) != 8:
                raise fail("ANGLE is not a real", at)
            angle = _real8(body)
        elif rtype == _COLROW:
            cr = ints(body, 2, at)
            if len(cr) != 2 or cr[0] < 1 or cr[1] < 1:
                raise fail("bad COLROW", at)
            colrow = (cr[0], cr[1])
    if kind in (_SREF, _AREF):
        if sname is None:
            raise fail("reference without SNAME", at)
        if kind == _SREF:
            if len(xy) != 2:
                raise fail("SREF needs one XY point", at)
            cell.refs.append(Ref(sname, xy[0] * db, xy[1] * db, reflect, angle, mag,
                                 xy_at=xy_at))
        else:
            if len(xy) != 6:
                raise fail("AREF needs three XY points", at)
            cols, rows = colrow
            if cols * rows > MAX_REFS:
                raise LimitError(f"{source}: an AREF of {cols} x {rows} instances exceeds the "
                                 f"limit of {MAX_REFS} references")
            ox, oy = xy[0], xy[1]
            cx, cy = (xy[2] - ox) / cols, (xy[3] - oy) / cols
            rx, ry = (xy[4] - ox) / rows, (xy[5] - oy) / rows
            cell.refs.append(Ref(sname, ox * db, oy * db, reflect, angle, mag, cols, rows,
                                 (cx * db, cy * db), (rx * db, ry * db), xy_at))
    elif kind == _TEXT:
        if text is None or len(xy) < 2:
            raise fail("TEXT without STRING or XY", at)
        cell.texts.append(Text(text, layer, texttype, xy[0] * db, xy[1] * db, xy_at))
    else:
        cell.shapes += 1
        if len(xy) >= 2:
            xs, ys = xy[0::2], xy[1::2]
            grow = abs(width) / 2 if kind == _PATH else 0
            box = (min(xs) - grow) * db, (min(ys) - grow) * db, (max(xs) + grow) * db, \
                (max(ys) + grow) * db
            b = cell.bbox
            cell.bbox = box if b is None else (min(b[0], box[0]), min(b[1], box[1]),
                                               max(b[2], box[2]), max(b[3], box[3]))
