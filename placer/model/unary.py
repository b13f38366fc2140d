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
``(h / sqrt 2) I`` about the core's centre, of Frobenius norm h ppm/um^2.

Random parts per code: independent cells of relative sigma s give
``sigma(INL_c) = s sqrt(c (N - c) / N)`` (a bridge: the end points are fitted); a
correlated field of covariance K gives ``w' K w`` with ``w = 1[i <= c] - c / N``.

References
----------
[1] IEEE Std 1658-2011, Standard for Terminology and Test Methods of Digital-to-Analog
    Converter Devices (end-point INL and DNL) -- cited from memory.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from placer.io.unaryspec import UnaryFields, UnaryLayout

__all__ = ["UnaryLayout", "UnaryFields", "slot_xy", "slot_bowl", "cell_errors", "inl", "dnl",
           "worst_inl", "worst_inl_parts", "random_inl_sigma", "correlated_inl_sigma"]

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


def _bowl(lay: UnaryLayout, h: float) -> FloatArray:
    """Each cell's bowl value (ppm), averaged over its sub-units."""
    return slot_bowl(slot_xy(lay.rows, lay.cols, lay.pitch_um), h)[lay.cells].mean(axis=1)


def cell_errors(lay: UnaryLayout, fields: UnaryFields, theta: float) -> FloatArray:
    """Each cell's relative error (fraction) under the linear gradient pointing at angle
    ``theta`` (radians) and the bowl, in switching order."""
    p = _cell_xy(lay)
    u = np.array([np.cos(theta), np.sin(theta)])
    return 1e-6 * (fields.linear_ppm_per_um * (p @ u) + _bowl(lay, fields.quadratic_ppm_per_um2))


def inl(errors: FloatArray) -> FloatArray:
    """End-point INL (LSB) at codes 0 .. N from the cells' errors in switching order."""
    e = np.asarray(errors, dtype=float)
    return np.concatenate([[0.0], np.cumsum(e - e.mean())])


def dnl(errors: FloatArray) -> FloatArray:
    """DNL (LSB) of steps 1 .. N."""
    e = np.asarray(errors, dtype=float)
    return e - e.mean()


def worst_inl_parts(lay: UnaryLayout, fields: UnaryFields) -> tuple[FloatArray, FloatArray]:
    """Per code 0 .. N: the linear part in its worst direction (LSB, ``g |D_c|``) and the
    bowl's part (signed LSB)."""
    p = _cell_xy(lay)
    d = np.concatenate([np.zeros((1, 2)), np.cumsum(p - p.mean(axis=0), axis=0)])
    lin = 1e-6 * fields.linear_ppm_per_um * np.hypot(d[:, 0], d[:, 1])
    return lin, inl(1e-6 * _bowl(lay, fields.quadratic_ppm_per_um2))


def worst_inl(lay: UnaryLayout, fields: UnaryFields) -> float:
    """The worst |INL| (LSB) over every code under the linear gradient in its worst
    direction plus the bowl."""
    lin, quad = worst_inl_parts(lay, fields)
    return float((lin + np.abs(quad)).max())


def random_inl_sigma(n_cells: int, cell_sigma: float) -> FloatArray:
    """Sigma of INL (LSB) at codes 0 .. N for independent cells of relative sigma
    ``cell_sigma``: ``s sqrt(c (N - c) / N)``."""
    c = np.arange(n_cells + 1, dtype=float)
    return cell_sigma * np.sqrt(c * (n_cells - c) / n_cells)


def correlated_inl_sigma(lay: UnaryLayout, sigma_ppm: float, length_um: float,
                         kernel: str = "exponential") -> FloatArray:
    """Sigma of INL (LSB) at codes 0 .. N under a correlated field of ``sigma_ppm`` and
    correlation length ``length_um`` (``w' K w`` with K the cells' covariance)."""
    from placer.model.variation import correlation

    xy = slot_xy(lay.rows, lay.cols, lay.pitch_um)
    sub = xy[lay.cells]                                      # (N, m, 2)
    n, m = lay.cells.shape
    flat = sub.reshape(-1, 2)
    dist = np.hypot(*(flat[:, None, :] - flat[None, :, :]).transpose(2, 0, 1))
    k = correlation(dist, length_um, kernel).reshape(n, m, n, m).mean(axis=(1, 3))
    k *= (1e-6 * sigma_ppm) ** 2
    cum = np.cumsum(np.cumsum(k, axis=0), axis=1)            # S_c = sum_{i, j <= c} K
    s_c = np.concatenate([[0.0], np.diag(cum)])
    row = np.concatenate([[0.0], np.cumsum(k.sum(axis=1))])  # R_c = sum_{i <= c} sum_j K
    total = k.sum()
    c = np.arange(n + 1) / n
    var = s_c - 2 * c * row + c * c * total
    return np.sqrt(np.maximum(var, 0.0))
