"""The spec of a unary array, its layout (each cell's slots in switching order: what the
model scores, as :class:`placer.io.pattern.Pattern` is for arrangements), and the sequence
grid: placer's own text of a switching order.

A unary spec (TOML) names the array and takes the model's tables as an arrangement spec
does::

    name = "heron_msb"
    [unary]
    cells = 63            # unary cells (2^k - 1 for k thermometer bits)
    sub_units = 1         # slots a cell is split over
    binary_bits = 0       # binary-weighted LSB cells among them (a segmented DAC)
    rows = 8              # the core (default: the squarest that holds every sub-unit)
    columns = 8
    pitch_um = [10.0, 10.0]
    [unit]                # one sub-unit's area, for the area law
    width_um = 4.0
    length_um = 4.0
    [gradient]            # linear_ppm_per_um (or linear_pct_per_mm), quadratic_ppm_per_um2,
                          # and a known field: direction_deg, hot_spot
    [correlated]          # sigma_ppm, length_um, kernel
    [mismatch]            # a_param_pct_um

A segmented array (``binary_bits = b``) adds b binary cells for the code's low bits:
every slot is one sub-unit of equal value, a unary cell holds ``sub_units`` of them (it
weighs 2^b LSB, so ``sub_units`` is a multiple of 2^b, by default 2^b) and binary bit j
(j = 0 the LSB) holds ``2^j sub_units / 2^b``. Code C = U 2^b + L turns on the first U
unary cells and the binary cells of L's set bits.

The sequence grid is the core, one row of text a row of slots: each slot holds the
number of the cell it belongs to (1 is the first cell the code turns on), ``b0`` ..
``b<b-1>`` a binary cell's bit, ``.`` a dummy; the sub-units of a cell share its number.
Lines starting with ``#`` are comments.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from placer.errors import LimitError, PlacerError, SpecError, shown
from placer.io.files import read_text
from placer.io.spec import (
    HotSpot,
    _hot_spot,
    _pitch,
    _Reader,
    _safe_default_name,
    check_name,
    toml_data,
)
from placer.limits import MAX_EXTENT_UM

__all__ = ["UnaryLayout", "UnaryFields", "UnarySpec", "read_unary_spec", "read_sequence_grid",
           "read_sequence_layout", "is_unary_spec",
           "format_sequence_grid", "grid_token", "MAX_CELLS", "MAX_SUB_UNITS",
           "MAX_BINARY_BITS"]

#: The largest unary array a spec may hold (12 thermometer bits), sub-units a cell, binary
#: bits, all sub-units together (the correlated field's covariance is their square: 134 MB
#: at the limit) and the core's slots.
MAX_CELLS = 4095
MAX_SUB_UNITS = 64
MAX_BINARY_BITS = 6
MAX_SUB_UNITS_ALL = 4096
MAX_CORE_SLOTS = 16384
_TABLES = ("name", "unary", "unit", "gradient", "correlated", "mismatch")
_UNARY_KEYS = ("cells", "sub_units", "binary_bits", "rows", "columns", "pitch_um")


@dataclass(frozen=True)
class UnaryLayout:
    """Where each cell's sub-units sit, in switching order.

    ``cells[k]`` lists the slots (reading order over ``rows`` x ``cols``) of the unary cell
    that turns on k + 1-th; ``bits[j]`` the slots of binary bit j (LSB first; a segmented
    array, see the module's text); slots in no cell are dummies.
    """

    rows: int
    cols: int
    pitch_um: tuple[float, float]
    cells: NDArray[np.int64]                      # (N, m) slot indices
    bits: tuple[NDArray[np.int64], ...] = ()      # binary bit j: 2^j k slot indices

    def __post_init__(self) -> None:
        k = len(self.bits[0]) if self.bits else 1
        if self.bits and (any(len(b) != k << j for j, b in enumerate(self.bits))
                          or self.cells.shape[1] != k << len(self.bits)):
            raise ValueError(f"binary cells of {[len(b) for b in self.bits]} slots do not "
                             f"weigh 1, 2, 4 .. LSB beside unary cells of "
                             f"{self.cells.shape[1]}")

    @property
    def n_cells(self) -> int:
        """N, the unary cells."""
        return int(self.cells.shape[0])

    @property
    def sub_units(self) -> int:
        """m, the sub-units of a unary cell."""
        return int(self.cells.shape[1])

    @property
    def lsb_units(self) -> int:
        """k, the sub-units of one LSB (a unary cell's m when there are no binary bits)."""
        return len(self.bits[0]) if self.bits else self.sub_units

    @property
    def full_scale(self) -> int:
        """The largest code, N 2^b + 2^b - 1: codes run 0 .. full_scale."""
        return (self.n_cells + 1) * (1 << len(self.bits)) - 1

    def active(self) -> NDArray[np.int64]:
        """Every slot of a cell: the unary cells' in order, then the binary bits'."""
        return np.concatenate([self.cells.reshape(-1), *self.bits]).astype(np.int64)

    def grid(self) -> NDArray[np.int64]:
        """Each slot's sequence number (1 .. N), -(j + 1) for binary bit j, 0 for a dummy:
        the order as a grid."""
        out = np.zeros(self.rows * self.cols, dtype=np.int64)
        for k, slots in enumerate(self.cells):
            out[slots] = k + 1
        for j, slots in enumerate(self.bits):
            out[slots] = -(j + 1)
        return out.reshape(self.rows, self.cols)


@dataclass(frozen=True)
class UnaryFields:
    """The systematic fields: a linear gradient (ppm/um, its worst direction) and the
    radial bowl of Frobenius norm ``quadratic_ppm_per_um2``; a known field when given: a
    gradient direction graded beside the worst one, and a hot spot (its x and y in um
    from the centre of the top-left slot, y up, as for patterns) added to the bowl."""

    linear_ppm_per_um: float = 10.0
    quadratic_ppm_per_um2: float = 0.02
    direction_deg: float | None = None
    hot_spot: HotSpot | None = None


@dataclass(frozen=True)
class UnarySpec:
    """A unary array and the model's figures."""

    name: str
    source: str
    cells: int
    sub_units: int
    rows: int
    cols: int
    pitch_um: tuple[float, float]
    fields: UnaryFields
    corr_sigma_ppm: float = 100.0
    corr_length_um: float = 10.0
    kernel: str = "exponential"
    a_param_pct_um: float = 1.0
    unit_area_um2: float = 1.0
    binary_bits: int = 0

    @property
    def cell_sigma(self) -> float:
        """A unary cell's relative random sigma by the area law (m sub-units)."""
        return 1e-2 * self.a_param_pct_um / math.sqrt(2.0 * self.unit_area_um2
                                                        * self.sub_units)

    @property
    def lsb_units(self) -> int:
        """k, the sub-units of one LSB."""
        return self.sub_units >> self.binary_bits

    @property
    def lsb_sigma(self) -> float:
        """The random sigma (LSB) of one LSB's worth of sub-units (area law)."""
        return 1e-2 * self.a_param_pct_um / math.sqrt(2.0 * self.unit_area_um2
                                                        * self.lsb_units)

    @property
    def full_scale(self) -> int:
        """The largest code."""
        return (self.cells + 1) * (1 << self.binary_bits) - 1

    @property
    def sub_units_all(self) -> int:
        """Every sub-unit of every cell, unary and binary."""
        return self.cells * self.sub_units + ((1 << self.binary_bits) - 1) * self.lsb_units


def is_unary_spec(path: str | Path) -> bool:
    """Whether ``path`` reads as TOML with a ``[unary]`` table (a file that does not read
    is left to the arrangement spec's reader to report)."""
    try:
        data = toml_data(read_text(Path(path), "spec", SpecError), str(path))
    except PlacerError:
        return False
    return isinstance(data, dict) and "unary" in data


def read_unary_spec(path: str | Path) -> UnarySpec:
    """Read and check a unary spec; one :class:`SpecError` line names what is wrong."""
    path = Path(path)
    src = str(path)
    data = toml_data(read_text(path, "spec", SpecError), src)
    if "unary" not in data:
        what = (" (this is an arrangement spec, for arrange)" if "devices" in data else "")
        raise SpecError(f"{src}: needs a [unary] table (cells = the number of unary "
                        f"cells){what}")
    for key in data:
        if key not in _TABLES:
            raise SpecError(f"{src}: unknown key {shown(key)} (a unary spec holds: "
                            f"{', '.join(_TABLES)})")
    un = _Reader(src, "unary", data["unary"])
    for key in un.data:
        if key not in _UNARY_KEYS:
            raise SpecError(f"{src}: [unary] unknown key {shown(key)} (allowed: "
                            f"{', '.join(_UNARY_KEYS)})")
    cells = un.integer("cells", None, low=1, high=MAX_CELLS)
    if cells is None:
        raise SpecError(f"{src}: [unary] needs cells (the number of unary cells, e.g. 63)")
    b = un.integer("binary_bits", 0, low=0, high=MAX_BINARY_BITS)
    assert b is not None
    m = un.integer("sub_units", 1 << b, low=1, high=MAX_SUB_UNITS)
    assert m is not None
    if m % (1 << b):
        raise SpecError(f"{src}: [unary] sub_units = {m} is no multiple of 2^binary_bits = "
                        f"{1 << b}: a unary cell weighs 2^{b} LSB and each binary cell "
                        f"takes whole sub-units (give sub_units = {1 << b} or a multiple)")
    rows = un.integer("rows", None, low=1, high=1024)
    cols = un.integer("columns", None, low=1, high=1024)
    need = cells * m + ((1 << b) - 1) * (m >> b)
    if need > MAX_SUB_UNITS_ALL:
        what = f" and {b} binary bits" if b else ""
        raise LimitError(f"{src}: [unary] {cells} cells of {m} sub-units{what} are {need} "
                         f"sub-units, more than the limit of {MAX_SUB_UNITS_ALL}")
    if rows is None and cols is None:
        rows = math.isqrt(need)
        rows += rows * rows < need
        cols = -(-need // rows)
    elif rows is None:
        assert cols is not None
        rows = -(-need // cols)
    elif cols is None:
        cols = -(-need // rows)
    assert rows is not None and cols is not None
    if rows * cols > MAX_CORE_SLOTS:
        raise LimitError(f"{src}: [unary] a core of {rows} x {cols} slots is more than the "
                         f"limit of {MAX_CORE_SLOTS}")
    px, py = _pitch(un)
    if max((cols + 2) * px, (rows + 2) * py) > MAX_EXTENT_UM:
        raise LimitError(f"{src}: [unary] {rows} x {cols} slots at pitch [{px:g}, {py:g}] um "
                         f"would span {(cols + 2) * px:.4g} x {(rows + 2) * py:.4g} um, more "
                         f"than the {MAX_EXTENT_UM:g} um a GDSII coordinate holds at 1 nm")
    if rows * cols < need:
        what = f" and {b} binary bits" if b else ""
        raise SpecError(f"{src}: [unary] {cells} cells of {m} sub-units{what} need {need} "
                        f"slots; {rows} x {cols} holds {rows * cols} (give more rows or columns)")
    if "pitch_um" not in un.data:
        raise SpecError(f"{src}: [unary] pitch_um is missing: give the slots' pitch [x, y] in "
                        "um (a cell's size plus its spacing; the gradient's INL scales with "
                        "it)")
    name = data.get("name", _safe_default_name(path.stem))
    if not isinstance(name, str):
        raise SpecError(f"{src}: name must be a string")
    try:
        check_name(name, "name")
    except SpecError as err:
        raise SpecError(f"{src}: {err}") from None
    gr = _Reader(src, "gradient", data.get("gradient", {}))
    if "linear_ppm_per_um" in gr.data and "linear_pct_per_mm" in gr.data:
        raise SpecError(f"{src}: [gradient] give linear_ppm_per_um or linear_pct_per_mm, "
                        "not both")
    lin = gr.number("linear_ppm_per_um", None, allow_zero=True)
    if lin is None:
        pct = gr.number("linear_pct_per_mm", 1.0, allow_zero=True)
        assert pct is not None
        lin = 10.0 * pct                                  # 1 %/mm = 10 ppm/um
    for key in gr.data:
        if key not in ("linear_ppm_per_um", "linear_pct_per_mm", "quadratic_ppm_per_um2",
                       "direction_deg", "hot_spot"):
            raise SpecError(f"{src}: [gradient] {key} is not used by a unary array (it "
                            "takes linear_ppm_per_um or linear_pct_per_mm, "
                            "quadratic_ppm_per_um2, direction_deg and hot_spot)")
    quad = gr.number("quadratic_ppm_per_um2", 0.02, allow_zero=True)
    co = _Reader(src, "correlated", data.get("correlated", {}))
    mi = _Reader(src, "mismatch", data.get("mismatch", {}))
    if "a_vt_mv_um" in mi.data:
        raise SpecError(f"{src}: [mismatch] a unary cell takes a_param_pct_um (its value's "
                        "relative mismatch coefficient)")
    ut = _Reader(src, "unit", data.get("unit", {}))
    w = ut.number("width_um", 1.0)
    h = ut.number("length_um", 1.0)
    assert w is not None and h is not None
    if w > px + 1e-9 or h > py + 1e-9:
        raise SpecError(f"{src}: [unit] a sub-unit of {w:g} x {h:g} um does not fit its slot "
                        f"at pitch_um = [{px:g}, {py:g}] (one sub-unit a slot: make the pitch "
                        "at least the unit's size)")
    sig = co.number("sigma_ppm", 100.0, allow_zero=True)
    length = co.number("length_um", 10.0)
    a = mi.number("a_param_pct_um", 1.0, allow_zero=True)
    assert quad is not None and w is not None and h is not None and sig is not None
    assert length is not None and a is not None
    direction = gr.number("direction_deg", None, positive=False)
    fields = UnaryFields(lin, quad, None if direction is None else float(direction) % 360.0,
                         _hot_spot(gr, src))
    return UnarySpec(name, src, cells, m, rows, cols, _pitch(un), fields,
                     sig, length, co.choice("kernel", "exponential",
                                            ("exponential", "gaussian")), a, w * h, b)


def read_sequence_grid(path: str | Path, spec: UnarySpec) -> UnaryLayout:
    """A sequence grid (see the module's text) for ``spec``'s core."""
    src = str(path)
    text = read_text(Path(path), "sequence grid", SpecError)
    nb = spec.binary_bits
    bits = f", b0 to b{nb - 1} (a binary cell)" if nb else ""
    rows: list[list[int]] = []
    for n, line in enumerate(text.splitlines(), start=1):
        if not line.strip() or line.lstrip().startswith("#"):
            continue
        row = []
        for tok in line.split():
            if tok == ".":
                row.append(0)
            elif (tok.isascii() and tok.isdecimal() and len(tok) <= 6
                  and 1 <= int(tok) <= spec.cells):
                row.append(int(tok))
            elif (nb and tok[:1] in "bB" and tok[1:].isascii() and tok[1:].isdecimal()
                  and len(tok) <= 3 and int(tok[1:]) < nb):
                row.append(-1 - int(tok[1:]))
            else:
                raise SpecError(f"{src}:{n}: {shown(tok)} is no cell number (1 to "
                                f"{spec.cells}){bits} or . (a dummy)")
        rows.append(row)
    if len(rows) != spec.rows or any(len(r) != spec.cols for r in rows):
        widths = sorted({len(r) for r in rows})
        raise SpecError(f"{src}: the grid is {len(rows)} rows of {widths} slots; the spec's "
                        f"core is {spec.rows} x {spec.cols}")
    return _grid_layout(np.array(rows, dtype=np.int64).reshape(-1), spec, src)


def _grid_layout(grid: NDArray[np.int64], spec: UnarySpec, src: str) -> UnaryLayout:
    """The layout of a grid of cell numbers (``-(j + 1)`` binary bit j, 0 a dummy), each
    cell checked to hold its sub-units."""
    nb = spec.binary_bits
    counts = np.bincount(grid[grid > 0], minlength=spec.cells + 1)[1:]
    bad = np.nonzero(counts != spec.sub_units)[0]
    if len(bad):
        k = int(bad[0])
        raise SpecError(f"{src}: cell {k + 1} is on {int(counts[k])} slots; every cell takes "
                        f"{spec.sub_units} (the spec's sub_units)")
    for j in range(nb):
        have, want = int((grid == -1 - j).sum()), spec.lsb_units << j
        if have != want:
            raise SpecError(f"{src}: binary cell b{j} is on {have} slots; it takes {want} "
                            f"(2^{j} x {spec.lsb_units} sub-units an LSB)")
    cells = np.array([np.nonzero(grid == k)[0] for k in range(1, spec.cells + 1)],
                     dtype=np.int64).reshape(spec.cells, spec.sub_units)
    return UnaryLayout(spec.rows, spec.cols, spec.pitch_um, cells,
                       tuple(np.nonzero(grid == -1 - j)[0].astype(np.int64)
                             for j in range(nb)))


def read_sequence_layout(path: str | Path, spec: UnarySpec, *,
                         label_layer: tuple[int, int] = (10, 0), cell: str | None = None,
                         notes: list[str] | None = None) -> UnaryLayout:
    """A given order, by content: a sequence grid (text), or a GDSII layout whose unit
    cells carry labels ``S<n>`` (unary cell n) and ``B<j>`` (binary bit j) on the label
    layer, unlabelled cells named ...DUMMY... being dummies -- what ``sequence.gds``
    holds. The units' lattice must be the spec's core at its pitch (within 1 %); what was
    read is appended to ``notes``."""
    from placer.io.files import mapped
    from placer.io.gdsread import LayoutError, is_gdsii, parse_stream
    from placer.io.handlayout import MAX_LAYOUT_BYTES, SNAP_TOLERANCE, gds_units, lattice

    src = str(path)
    # a GDSII stream by its content, or by its name (so that a damaged one is reported as
    # a damaged layout, not read as a grid)
    named = Path(path).suffix.lower() in (".gds", ".gds2", ".gdsii", ".strm")
    with mapped(Path(path), MAX_LAYOUT_BYTES, "layout", LayoutError) as view:
        if not (named or is_gdsii(bytes(view[:4]))):
            lib = None
        else:
            lib = parse_stream(view, src)
    if lib is None:
        return read_sequence_grid(path, spec)
    found: list[str] = [] if notes is None else notes
    layer = f"{label_layer[0]}/{label_layer[1]}"
    units = gds_units(lib, src, cell=cell, mapping={}, label_layer=label_layer,
                      dummy_cells=set(), mos=False, notes=found,
                      unlabelled=(f"carry no S<n> or B<j> label on the label layer {layer} "
                                  "and no DUMMY in their cell name (--layers gives another "
                                  "label layer)"))
    scale = lib.user_in_m / 1e-6
    xy = np.array([(u.x, u.y) for u in units]) * scale
    (px, gx), (py, gy) = lattice(xy[:, 0]), lattice(xy[:, 1])
    px, py = px or spec.pitch_um[0], py or spec.pitch_um[1]
    if abs(px - spec.pitch_um[0]) > 0.01 * spec.pitch_um[0] or \
            abs(py - spec.pitch_um[1]) > 0.01 * spec.pitch_um[1]:
        raise SpecError(f"{src}: the layout's pitch is {px:.6g} x {py:.6g} um, the spec's "
                        f"{spec.pitch_um[0]:g} x {spec.pitch_um[1]:g} (set pitch_um = "
                        f"[{px:.6g}, {py:.6g}] in {spec.source})")
    fx, fy = (xy[:, 0] - gx) / px, (gy - xy[:, 1]) / py
    off = np.hypot(fx - np.round(fx), fy - np.round(fy))
    if np.any(off > SNAP_TOLERANCE):
        i = int(np.argmax(off))
        raise SpecError(f"{src}: the unit at ({xy[i, 0]:.4g}, {xy[i, 1]:.4g}) um lies "
                        f"{off[i]:.0%} of a pitch off the grid the others share")
    col = np.round(fx).astype(int)
    row = np.round(fy).astype(int)
    col -= col.min()
    row -= row.min()
    if row.max() + 1 != spec.rows or col.max() + 1 != spec.cols:
        raise SpecError(f"{src}: the units span {row.max() + 1} x {col.max() + 1} slots; the "
                        f"spec's core is {spec.rows} x {spec.cols}")
    grid = np.zeros(spec.rows * spec.cols, dtype=np.int64)
    seen = np.zeros(spec.rows * spec.cols, dtype=bool)
    pat = re.compile(r"([SB])([0-9]{1,5})")
    for u, r, c in zip(units, row, col, strict=True):
        slot = int(r) * spec.cols + int(c)
        if seen[slot]:
            raise SpecError(f"{src}: two units at ({u.x * scale:.4g}, {u.y * scale:.4g}) um")
        seen[slot] = True
        if u.device is None:
            continue
        hit = pat.fullmatch(u.device)
        v = int(hit.group(2)) if hit else -1
        if hit and hit.group(1) == "S" and 1 <= v <= spec.cells:
            grid[slot] = v
        elif hit and hit.group(1) == "B" and v < spec.binary_bits:
            grid[slot] = -1 - v
        else:
            bits = f" or B0 to B{spec.binary_bits - 1}" if spec.binary_bits else ""
            raise SpecError(f"{src}: label {shown(u.device)} at ({u.x * scale:.4g}, "
                            f"{u.y * scale:.4g}) um is no sequence label (S1 to "
                            f"S{spec.cells}{bits})")
    if not seen.all():
        found.append(f"{int((~seen).sum())} slots hold no unit (read as dummies)")
    found.append(f"{len(units)} units on {spec.rows} x {spec.cols} slots at {px:.6g} x "
                 f"{py:.6g} um")
    return _grid_layout(grid, spec, src)


def grid_token(value: int) -> str:
    """A grid value's text: the cell number, ``b<j>`` for binary bit j, ``.`` a dummy."""
    return "." if value == 0 else str(value) if value > 0 else f"b{-1 - value}"


def format_sequence_grid(layout: UnaryLayout, header: list[str] | None = None) -> str:
    """The sequence grid text of ``layout`` (numbers right-aligned in columns)."""
    grid = layout.grid()
    width = max(len(str(layout.n_cells)), 2 if layout.bits else 1)
    lines = [f"# {h}" for h in (header or [])]
    for row in grid:
        lines.append(" ".join(grid_token(int(v)).rjust(width) for v in row))
    return "\n".join(lines) + "\n"
