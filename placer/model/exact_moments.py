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

__all__ = ["grid_sums", "pair_linear", "pair_second", "LIMIT_INT64"]

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


def pair_linear(sums: NDArray, pairs: IntArray, pitch_um: tuple[float, float]
                ) -> NDArray[np.float64]:
    """Centroid differences c_a - c_b in um, shape (n_pairs, 2); exact zeros stay zero.

    Examples
    --------
    >>> s = grid_sums(np.array([0, 0, 0, 0]), np.array([0, 3, 1, 2]), np.array([0, 0, 1, 1]), 2)
    >>> pair_linear(s, np.array([[0, 1]]), (2.3, 1.0)).tolist()
    [[0.0, 0.0]]
    """
    a, b = pairs[:, 0], pairs[:, 1]
    na, nb = sums[a, 0], sums[b, 0]
    d1 = (nb[:, None] * sums[a, 1:3] - na[:, None] * sums[b, 1:3])
    den = (na * nb).astype(float)
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
    a, b = pairs[:, 0], pairs[:, 1]
    na, nb = sums[a, 0], sums[b, 0]
    total = sums.sum(axis=0)
    n_all, t = total[0], total[1:3]
    d1 = nb[:, None] * sums[a, 1:3] - na[:, None] * sums[b, 1:3]
    s2 = nb[:, None] * sums[a, 3:6] - na[:, None] * sums[b, 3:6]
    q = np.empty_like(s2)
    q[:, 0] = n_all * s2[:, 0] - 2 * d1[:, 0] * t[0]
    q[:, 1] = n_all * s2[:, 1] - (d1[:, 0] * t[1] + d1[:, 1] * t[0])
    q[:, 2] = n_all * s2[:, 2] - 2 * d1[:, 1] * t[1]
    den = (n_all * na * nb).astype(float)
    px, py = pitch_um
    scale = np.array([px * px, px * py, py * py])
    return q.astype(float) * scale[None, :] / den[:, None]
