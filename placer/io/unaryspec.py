"""The spec of a unary array, its layout (each cell's slots in switching order: what the
model scores, as :class:`placer.io.pattern.Pattern` is for arrangements), and the sequence
grid: placer's own text of a switching order.

A unary spec (TOML) names the array and takes the model's tables as an arrangement spec
does::

    name = "heron_msb"
    [unary]
    cells = 63            # unary cells (2^k - 1 for k thermometer bits)
    sub_units = 1         # slots a cell is split over
    rows = 8              # the core (default: the squarest that holds every sub-unit)
    columns = 8
    pitch_um = [10.0, 10.0]
    [unit]                # one sub-unit's area, for the area law
    width_um = 4.0
    length_um = 4.0
    [gradient]            # linear_ppm_per_um (or linear_pct_per_mm), quadratic_ppm_per_um2
    [correlated]          # sigma_ppm, length_um, kernel
    [mismatch]            # a_param_pct_um

The sequence grid is the core, one row of text a row of slots: each slot holds the
number of the cell it belongs to (1 is the first cell the code turns on), ``.`` a dummy;
the sub-units of a cell share its number. Lines starting with ``#`` are comments.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from numpy.typing import NDArray

from placer.errors import LimitError, SpecError, shown
from placer.io.files import read_text
from placer.io.spec import _pitch, _Reader, _safe_default_name, check_name, toml_data
from placer.limits import MAX_EXTENT_UM

__all__ = ["UnaryLayout", "UnaryFields", "UnarySpec", "read_unary_spec", "read_sequence_grid",
           "format_sequence_grid", "MAX_CELLS", "MAX_SUB_UNITS"]

#: The largest unary array a spec may hold (12 thermometer bits), sub-units a cell, all
#: sub-units together (the correlated field's covariance is their square: 134 MB at the
#: limit) and the core's slots.
MAX_CELLS = 4095
MAX_SUB_UNITS = 16
MAX_SUB_UNITS_ALL = 4096
MAX_CORE_SLOTS = 16384
_TABLES = ("name", "unary", "unit", "gradient", "correlated", "mismatch")
_UNARY_KEYS = ("cells", "sub_units", "rows", "columns", "pitch_um")


@dataclass(frozen=True)
class UnaryLayout:
    """Where each cell's sub-units sit, in switching order.

    ``cells[k]`` lists the slots (reading order over ``rows`` x ``cols``) of the cell that
    code k + 1 turns on; slots in no cell are dummies.
    """

    rows: int
    cols: int
    pitch_um: tuple[float, float]
    cells: NDArray[np.int64]                      # (N, m) slot indices

    @property
    def n_cells(self) -> int:
        """N, the unary cells."""
        return int(self.cells.shape[0])

    def grid(self) -> NDArray[np.int64]:
        """Each slot's sequence number (1 .. N), 0 for a dummy: the order as a grid."""
        out = np.zeros(self.rows * self.cols, dtype=np.int64)
        for k, slots in enumerate(self.cells):
            out[slots] = k + 1
        return out.reshape(self.rows, self.cols)


@dataclass(frozen=True)
class UnaryFields:
    """The systematic fields: a linear gradient (ppm/um, its worst direction) and the
    radial bowl of Frobenius norm ``quadratic_ppm_per_um2``."""

    linear_ppm_per_um: float = 10.0
    quadratic_ppm_per_um2: float = 0.02


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

    @property
    def cell_sigma(self) -> float:
        """A cell's relative random sigma by the area law (a cell of m sub-units)."""
        return 1e-2 * self.a_param_pct_um / math.sqrt(2.0 * self.unit_area_um2
                                                        * self.sub_units)


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
    m = un.integer("sub_units", 1, low=1, high=MAX_SUB_UNITS)
    assert m is not None
    rows = un.integer("rows", None, low=1, high=1024)
    cols = un.integer("columns", None, low=1, high=1024)
    need = cells * m
    if need > MAX_SUB_UNITS_ALL:
        raise LimitError(f"{src}: [unary] {cells} cells of {m} sub-units are {need} sub-units, "
                         f"more than the limit of {MAX_SUB_UNITS_ALL}")
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
        raise SpecError(f"{src}: [unary] {cells} cells of {m} sub-units need {need} slots; "
                        f"{rows} x {cols} holds {rows * cols} (give more rows or columns)")
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
        if key not in ("linear_ppm_per_um", "linear_pct_per_mm", "quadratic_ppm_per_um2"):
            raise SpecError(f"{src}: [gradient] {key} is not used by a unary array (it "
                            "takes linear_ppm_per_um or linear_pct_per_mm and "
                            "quadratic_ppm_per_um2)")
    quad = gr.number("quadratic_ppm_per_um2", 0.02, allow_zero=True)
    co = _Reader(src, "correlated", data.get("correlated", {}))
    mi = _Reader(src, "mismatch", data.get("mismatch", {}))
    if "a_vt_mv_um" in mi.data:
        raise SpecError(f"{src}: [mismatch] a unary cell takes a_param_pct_um (its value's "
                        "relative mismatch coefficient)")
    ut = _Reader(src, "unit", data.get("unit", {}))
    w = ut.number("width_um", 1.0)
    h = ut.number("length_um", 1.0)
    sig = co.number("sigma_ppm", 100.0, allow_zero=True)
    length = co.number("length_um", 10.0)
    a = mi.number("a_param_pct_um", 1.0, allow_zero=True)
    assert quad is not None and w is not None and h is not None and sig is not None
    assert length is not None and a is not None
    return UnarySpec(name, src, cells, m, rows, cols, _pitch(un), UnaryFields(lin, quad),
                     sig, length, co.choice("kernel", "exponential",
                                            ("exponential", "gaussian")), a, w * h)


def read_sequence_grid(path: str | Path, spec: UnarySpec) -> UnaryLayout:
    """A sequence grid (see the module's text) for ``spec``'s core."""
    src = str(path)
    text = read_text(Path(path), "sequence grid", SpecError)
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
            else:
                raise SpecError(f"{src}:{n}: {shown(tok)} is no cell number (1 to "
                                f"{spec.cells}) or . (a dummy)")
        rows.append(row)
    if len(rows) != spec.rows or any(len(r) != spec.cols for r in rows):
        widths = sorted({len(r) for r in rows})
        raise SpecError(f"{src}: the grid is {len(rows)} rows of {widths} slots; the spec's "
                        f"core is {spec.rows} x {spec.cols}")
    grid = np.array(rows, dtype=np.int64).reshape(-1)
    counts = np.bincount(grid, minlength=spec.cells + 1)[1:]
    bad = np.nonzero(counts != spec.sub_units)[0]
    if len(bad):
        k = int(bad[0])
        raise SpecError(f"{src}: cell {k + 1} is on {int(counts[k])} slots; every cell takes "
                        f"{spec.sub_units} (the spec's sub_units)")
    cells = np.array([np.nonzero(grid == k)[0] for k in range(1, spec.cells + 1)],
                     dtype=np.int64).reshape(spec.cells, spec.sub_units)
    return UnaryLayout(spec.rows, spec.cols, spec.pitch_um, cells)


def format_sequence_grid(layout: UnaryLayout, header: list[str] | None = None) -> str:
    """The sequence grid text of ``layout`` (numbers right-aligned in columns)."""
    grid = layout.grid()
    width = len(str(layout.n_cells))
    lines = [f"# {h}" for h in (header or [])]
    for row in grid:
        lines.append(" ".join(("." if v == 0 else str(v)).rjust(width) for v in row))
    return "\n".join(lines) + "\n"
