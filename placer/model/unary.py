"""Unary (thermometer-coded) arrays: what a placement and a switching sequence do to the
transfer curve.

A unary array holds ``N`` identical cells (15, 63, 255 for 4, 6, 8 thermometer bits),
each of ``m`` sub-units on slots of a grid; input code ``c`` turns on the first ``c``
cells of the switching sequence. A cell's value is ``1 + e_i`` unit steps, ``e_i`` the
mean of the gradient field over its sub-units (a fraction; the field is in ppm). With
the end points fitted (a straight line from code 0 to code N, the convention of
IEEE Std 1658 for DAC linearity [1]), the integral non-linearity at code c in LSB is

    INL_c = sum_{i <= c} (e_i - e_bar)

and the differential one at step c is ``DNL_c = e_c - e_bar``. Under a linear gradient of
``g`` ppm/um in the direction u, ``e_i - e_bar = g u . (p_i - p_bar)`` (p the cell's mean
position): INL_c = g u . D_c with D_c the partial sum of centred positions, so the worst
direction at code c gives ``g |D_c|``, and with a field Q added the worst direction over
every code gives ``max_c (g |D_c| + |Q_c|)`` exactly (the maximum over direction and code
commute). The quadratic field is the radial bowl of the grade's ``bowl`` column: Hessian
``(h / sqrt 2) I`` about the core's centre, of Frobenius norm h ppm/um^2; a known hot
spot, when given, joins it (Q_c then sums both).

A segmented array adds b binary cells (:class:`placer.io.unaryspec.UnaryLayout`): code
C = U 2^b + L turns on the first U unary cells and the binary cells of L's bits. Every
slot is a sub-unit of equal value, k of them one LSB, so with the end points fitted

    INL_C = (1 / k) sum_{s active at C} (e_s - e_bar)

(e_bar the mean over every sub-unit of every cell; with no binary bits k = m and this is
the sum above), and the closed form holds with D_C and Q_C the partial sums of the
active sub-units' centred positions and bowl values over k.

Random parts per code: independent cells of relative sigma s give
``sigma(INL_c) = s sqrt(c (N - c) / N)`` (a bridge: the end points are fitted; for a
segmented array s is one LSB's sigma and N the full-scale code); a correlated field of
covariance K over the sub-units gives ``w' K w`` with ``w_s = (1[s active] - C / C_fs) / k``.

References
----------
[1] IEEE Std 1658-2011, Standard for Terminology and Test Methods of Digital-to-Analog
    Converter Devices (end-point INL and DNL) -- cited from memory.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from placer.io.unaryspec import UnaryFields, UnaryLayout

__all__ = ["UnaryLayout", "UnaryFields", "slot_xy", "slot_bowl", "slot_field", "cell_errors",
           "inl", "dnl",
           "code_sums", "code_inl", "worst_inl", "worst_inl_parts", "random_inl_sigma",
           "correlated_inl_sigma"]

FloatArray = NDArray[np.float64]
IntArray = NDArray[np.int64]


def slot_xy(rows: int, cols: int, pitch_um: tuple[float, float]) -> FloatArray:
    """Slot centres (um) about the core's centre, reading order, shape (rows * cols, 2)."""
    r, c = np.divmod(np.arange(rows * cols), cols)
    return np.stack([(c - (cols - 1) / 2) * pitch_um[0],
                     -(r - (rows - 1) / 2) * pitch_um[1]], axis=1).astype(float)


def _cell_xy(lay: UnaryLayout) -> FloatArray:
    xy = slot_xy(lay.rows, lay.cols, lay.pitch_um)
    return xy[lay.cells].mean(axis=1)


def slot_bowl(xy: FloatArray, h: float) -> FloatArray:
    """The bowl's value (ppm) at each slot centre ``xy`` (um, about the core's centre):
    h / (2 sqrt 2) |p|^2, the Hessian (h / sqrt 2) I of Frobenius norm h."""
    return (h / (2.0 * np.sqrt(2.0))) * (xy * xy).sum(axis=1)


def slot_field(rows: int, cols: int, pitch_um: tuple[float, float],
               fields: UnaryFields) -> FloatArray:
    """The field at each slot (ppm) but the linear gradient: the bowl, plus the hot spot
    when given (peak ppm at its point, falling off as exp(-d / fall-off); its x and y from
    the centre of the top-left slot, y up)."""
    xy = slot_xy(rows, cols, pitch_um)
    out = slot_bowl(xy, fields.quadratic_ppm_per_um2)
    hs = fields.hot_spot
    if hs is not None:
        x = xy[:, 0] + 0.5 * (cols - 1) * pitch_um[0]
        y = xy[:, 1] - 0.5 * (rows - 1) * pitch_um[1]
        out = out + hs.ppm * np.exp(-np.hypot(x - hs.x_um, y - hs.y_um) / hs.fall_off_um)
    return out


def _bowl(lay: UnaryLayout, fields: UnaryFields) -> FloatArray:
    """Each cell's bowl (and hot-spot) value (ppm), averaged over its sub-units."""
    return slot_field(lay.rows, lay.cols, lay.pitch_um, fields)[lay.cells].mean(axis=1)


def cell_errors(lay: UnaryLayout, fields: UnaryFields, theta: float) -> FloatArray:
    """Each cell's relative error (fraction) under the linear gradient pointing at angle
    ``theta`` (radians) and the bowl, in switching order."""
    p = _cell_xy(lay)
    u = np.array([np.cos(theta), np.sin(theta)])
    return 1e-6 * (fields.linear_ppm_per_um * (p @ u) + _bowl(lay, fields))


def inl(errors: FloatArray) -> FloatArray:
    """End-point INL (LSB) at codes 0 .. N from the cells' errors in switching order."""
    e = np.asarray(errors, dtype=float)
    return np.concatenate([[0.0], np.cumsum(e - e.mean())])


def dnl(errors: FloatArray) -> FloatArray:
    """DNL (LSB) of steps 1 .. N."""
    e = np.asarray(errors, dtype=float)
    return e - e.mean()


def _bit_table(n_bits: int) -> FloatArray:
    """Row L: the bits of L (LSB first), shape (2^b, b)."""
    low = np.arange(1 << n_bits)
    return ((low[:, None] >> np.arange(n_bits)) & 1).astype(float)


def code_sums(lay: UnaryLayout, values: FloatArray) -> FloatArray:
    """Per code 0 .. full scale: the sum over the sub-units the code turns on of
    ``values`` (one per slot, shape (S,) or (S, d)) less their mean over every cell's
    sub-units, over k (the sub-units of an LSB) -- the end-point INL in LSB when
    ``values`` are the sub-units' errors."""
    v = np.asarray(values, dtype=float)
    v = v - v[lay.active()].mean(axis=0)
    pre = np.cumsum(v[lay.cells].sum(axis=1), axis=0)
    pre = np.concatenate([np.zeros((1, *v.shape[1:])), pre])        # (N + 1, ...)
    if lay.bits:
        bit = np.stack([v[slots].sum(axis=0) for slots in lay.bits])  # (b, ...)
        low = np.tensordot(_bit_table(len(lay.bits)), bit, axes=1)    # (2^b, ...)
        pre = (pre[:, None] + low[None]).reshape(-1, *v.shape[1:])
    return pre / lay.lsb_units


def slot_errors(lay: UnaryLayout, fields: UnaryFields, theta: float) -> FloatArray:
    """Each slot's relative error (fraction) under the linear gradient pointing at angle
    ``theta`` (radians) and the bowl."""
    xy = slot_xy(lay.rows, lay.cols, lay.pitch_um)
    u = np.array([np.cos(theta), np.sin(theta)])
    return 1e-6 * (fields.linear_ppm_per_um * (xy @ u)
                   + slot_field(lay.rows, lay.cols, lay.pitch_um, fields))


def code_inl(lay: UnaryLayout, fields: UnaryFields, theta: float) -> FloatArray:
    """End-point INL (LSB) at codes 0 .. full scale under the linear gradient at angle
    ``theta`` and the bowl (first order in the errors)."""
    return code_sums(lay, slot_errors(lay, fields, theta))


def worst_inl_parts(lay: UnaryLayout, fields: UnaryFields) -> tuple[FloatArray, FloatArray]:
    """Per code 0 .. full scale: the linear part in its worst direction (LSB,
    ``g |D_c|``) and the bowl's part, with the hot spot's when given (signed LSB)."""
    xy = slot_xy(lay.rows, lay.cols, lay.pitch_um)
    d = code_sums(lay, xy)
    lin = 1e-6 * fields.linear_ppm_per_um * np.hypot(d[:, 0], d[:, 1])
    return lin, 1e-6 * code_sums(lay, slot_field(lay.rows, lay.cols, lay.pitch_um, fields))


def worst_inl(lay: UnaryLayout, fields: UnaryFields) -> float:
    """The worst |INL| (LSB) over every code under the linear gradient in its worst
    direction plus the bowl."""
    lin, quad = worst_inl_parts(lay, fields)
    return float((lin + np.abs(quad)).max())


def random_inl_sigma(n_cells: int, cell_sigma: float) -> FloatArray:
    """Sigma of INL (LSB) at codes 0 .. N for independent cells of relative sigma
    ``cell_sigma``: ``s sqrt(c (N - c) / N)``. For a segmented array N is the full-scale
    code and s one LSB's sigma (independent sub-units)."""
    c = np.arange(n_cells + 1, dtype=float)
    return cell_sigma * np.sqrt(c * (n_cells - c) / n_cells)


def correlated_inl_sigma(lay: UnaryLayout, sigma_ppm: float, length_um: float,
                         kernel: str = "exponential") -> FloatArray:
    """Sigma of INL (LSB) at codes 0 .. full scale under a correlated field of
    ``sigma_ppm`` and correlation length ``length_um`` (``w' K w`` over the sub-units,
    summed cell by cell first)."""
    from placer.model.variation import correlation

    xy = slot_xy(lay.rows, lay.cols, lay.pitch_um)
    groups = [*lay.cells, *lay.bits]                  # unary cells, then binary bits
    flat = np.concatenate(groups)
    owner = np.repeat(np.arange(len(groups)), [len(g) for g in groups])
    p = xy[flat]
    dist = np.hypot(*(p[:, None, :] - p[None, :, :]).transpose(2, 0, 1))
    k = correlation(dist, length_um, kernel) * (1e-6 * sigma_ppm) ** 2
    # G: the covariance of the groups' sums (sub-unit covariance summed both ways)
    g_count = len(groups)
    half = np.zeros((g_count, len(flat)))
    np.add.at(half, owner, k)
    gg = np.zeros((g_count, g_count))
    np.add.at(gg.T, owner, half.T)
    n = lay.n_cells
    row = gg.sum(axis=1)
    total = row.sum()
    # x' G x over the active groups, x' G 1 and the active sub-units, per code
    gu = gg[:n, :n]
    cum = np.cumsum(np.cumsum(gu, axis=0), axis=1)
    quad = np.concatenate([[0.0], np.diag(cum)])[:, None]          # (N + 1, 1)
    lin = np.concatenate([[0.0], np.cumsum(row[:n])])[:, None]
    act = (np.arange(n + 1) * lay.sub_units)[:, None].astype(float)
    if lay.bits:
        t = _bit_table(len(lay.bits))                              # (2^b, b)
        cross = np.concatenate([np.zeros((1, len(lay.bits))),
                                np.cumsum(gg[:n, n:], axis=0)]) @ t.T      # (N + 1, 2^b)
        low = np.einsum("li,ij,lj->l", t, gg[n:, n:], t)
        quad = quad + 2.0 * cross + low[None, :]
        lin = lin + (t @ row[n:])[None, :]
        act = act + (t @ np.array([len(b) for b in lay.bits], dtype=float))[None, :]
    frac = act / len(flat)
    var = (quad - 2.0 * frac * lin + frac * frac * total).reshape(-1)
    return np.sqrt(np.maximum(var, 0.0)) / lay.lsb_units
