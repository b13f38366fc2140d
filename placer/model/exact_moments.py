"""Exact first and second moments of devices on a slot grid: the one scorer.

Units sit on slots (row r, column c) at x = c px, y = -r py. Every sum below is a sum of
integers (column and row indices), so "zero linear error" and "zero quadratic error" are
exact, whatever the pitch: the pitch enters only as a final scale. ``grade`` and the
search both rank these quantities.

For a pair (a, b) with n_a and n_b units, N device units in all, S1 the sum of a device's
positions and S2 the sum of their outer products (about any origin), T the sum of all
device units' positions:

* linear: c_a - c_b = D1 / (n_a n_b) with D1 = n_b S1_a - n_a S1_b;
* quadratic: the second-moment difference about the centre C = T / N of all device units,
  M_a - M_b = Q / (N n_a n_b) with
  Q = N (n_b S2_a - n_a S2_b) - (D1 T^T + T D1^T),
  which follows from M_a = S2_a / n_a - c_a C^T - C c_a^T + C C^T.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

__all__ = ["grid_sums", "moment_differences", "pair_linear", "pair_second", "LIMIT_INT64"]

IntArray = NDArray[np.int64]
#: Products of sums stay below this in int64; larger problems use Python integers.
LIMIT_INT64 = 2 ** 62


def grid_sums(rows: IntArray, cols: IntArray, dev: IntArray, n_dev: int) -> NDArray:
    """Per device: n, sum u, sum v, sum u^2, sum u v, sum v^2 with u = column, v = -row.

    Returns an integer array of shape (n_dev, 6) (int64, or Python integers when a later
    product could overflow int64).

    Examples
    --------
    >>> grid_sums(np.array([0, 0, 1]), np.array([0, 2, 1]), np.array([0, 0, 1]), 2).tolist()
    [[2, 2, 0, 4, 0, 0], [1, 1, -1, 1, -1, 1]]
    """
    u = np.asarray(cols, dtype=np.int64)
    v = -np.asarray(rows, dtype=np.int64)
    big = int(max(np.abs(u).max(initial=0), np.abs(v).max(initial=0)))
    n = len(u)
    wide = (n + 1) ** 3 * (big + 1) ** 2 >= LIMIT_INT64
    dtype = object if wide else np.int64
    out = np.zeros((n_dev, 6), dtype=dtype)
    for k, col in enumerate((np.ones_like(u), u, v, u * u, u * v, v * v)):
        vals = col.astype(object) if wide else col
        np.add.at(out[:, k], dev, vals)
    return out


def moment_differences(sums: NDArray, pairs: IntArray, total: NDArray | None = None
                       ) -> tuple[NDArray, NDArray, NDArray, NDArray]:
    """The numerators of every pair's centroid and second-moment differences: the one
    pair-moment kernel (grade, the repair's batches; the search's compiled loops and the
    lesson page repeat it, held to it by tests).

    Parameters
    ----------
    sums : ndarray, shape (..., n_dev, 6)
        Each device's sums of 1, x, y, xx, xy, yy (any leading batch axes; integers stay
        exact, object arrays of Python integers too).
    pairs : ndarray of int, shape (n_pairs, 2)
        Device index pairs (a, b).
    total : ndarray, shape (..., 3), optional
        Sums of 1, x, y over every device unit (default: over ``sums``' devices).

    Returns
    -------
    d1 : ndarray, shape (..., n_pairs, 2)
        D1 = n_b S1_a - n_a S1_b: c_a - c_b = D1 / (n_a n_b).
    q : ndarray, shape (..., n_pairs, 3)
        Q (xx, xy, yy) = N (n_b S2_a - n_a S2_b) - (D1 T^T + T D1^T):
        M_a - M_b = Q / (N n_a n_b), about the centre T / N of the device units.
    nn : ndarray, shape (..., n_pairs)
        n_a n_b.
    n_all : ndarray, shape (...)
        N.
    """
    a, b = pairs[:, 0], pairs[:, 1]
    sa, sb = sums[..., a, :], sums[..., b, :]
    na, nb = sa[..., 0], sb[..., 0]
    tot = sums[..., :, :3].sum(axis=-2) if total is None else total
    n_all, tx, ty = tot[..., 0], tot[..., 1:2], tot[..., 2:3]
    d1 = nb[..., None] * sa[..., 1:3] - na[..., None] * sb[..., 1:3]
    s2 = nb[..., None] * sa[..., 3:6] - na[..., None] * sb[..., 3:6]
    n = n_all[..., None]
    q = np.stack([n * s2[..., 0] - 2 * d1[..., 0] * tx,
                  n * s2[..., 1] - (d1[..., 0] * ty + d1[..., 1] * tx),
                  n * s2[..., 2] - 2 * d1[..., 1] * ty], axis=-1)
    return d1, q, na * nb, n_all


def pair_linear(sums: NDArray, pairs: IntArray, pitch_um: tuple[float, float]
                ) -> NDArray[np.float64]:
    """Centroid differences c_a - c_b in um, shape (n_pairs, 2); exact zeros stay zero.

    Examples
    --------
    >>> s = grid_sums(np.array([0, 0, 0, 0]), np.array([0, 3, 1, 2]), np.array([0, 0, 1, 1]), 2)
    >>> pair_linear(s, np.array([[0, 1]]), (2.3, 1.0)).tolist()
    [[0.0, 0.0]]
    """
    d1, _, nn, _ = moment_differences(sums, pairs)
    den = nn.astype(float)
    return np.column_stack([d1[:, 0].astype(float) * pitch_um[0] / den,
                            d1[:, 1].astype(float) * pitch_um[1] / den])


def pair_second(sums: NDArray, pairs: IntArray, pitch_um: tuple[float, float]
                ) -> NDArray[np.float64]:
    """Second-moment differences (xx, xy, yy) in um^2 about the centre of all device units.

    Examples
    --------
    >>> s = grid_sums(np.zeros(4, int), np.array([0, 3, 1, 2]), np.array([0, 0, 1, 1]), 2)
    >>> pair_second(s, np.array([[0, 1]]), (1.0, 1.0)).tolist()   # A B B A: 2.25 - 0.25
    [[2.0, 0.0, 0.0]]
    """
    _, q, nn, n_all = moment_differences(sums, pairs)
    den = (n_all * nn).astype(float)
    px, py = pitch_um
    scale = np.array([px * px, px * py, py * py])
    return q.astype(float) * scale[None, :] / den[:, None]
