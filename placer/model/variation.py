"""Gradient-error model: pure numpy functions of unit positions and device ids.

A process parameter varies over the die as

    P(r) = P0 * (1 + g.r + 1/2 r^T H r + higher orders) + correlated part + white part

and a device's value is the mean of P over its units. The ratio error of a pair of
devices (a, b) is (P_a - P_b) / P0. Positions are taken about the centre of all device
units, so the quadratic and higher terms are those of a field expanded about the array.

Worst cases over direction use the Frobenius norm of the order-k coefficient tensor:
the term of order k is (1/k!) T[r, ..., r], and over all T with ||T||_F = G_k the largest
error is (G_k / k!) * ||M_k(a) - M_k(b)||_F, where M_k is the mean of the k-fold outer
product r (x) ... (x) r over a device's units. For k = 1 this is G * centroid distance.

References
----------
[1] M. J. M. Pelgrom, A. C. J. Duinmaijer, A. P. G. Welbers, "Matching properties of MOS
    transistors", IEEE J. Solid-State Circuits 24(5), 1433-1439, 1989.
    doi:10.1109/JSSC.1989.572629
"""

from __future__ import annotations

from math import comb

import numpy as np
from numpy.typing import NDArray

__all__ = [
    "centroids",
    "array_centre",
    "power_moments",
    "moment_norm",
    "second_moments",
    "linear_worst",
    "quadratic_worst",
    "bowl_error",
    "correlation",
    "device_covariance",
    "grid_device_covariance",
    "pair_variance",
    "pelgrom_sigma",
    "edge_units",
    "monte_carlo_errors",
    "exact_pair_terms",
    "pair_weights",
    "field_errors",
]

FloatArray = NDArray[np.float64]
IntArray = NDArray[np.int_]


def centroids(xy: FloatArray, dev: IntArray, n_dev: int) -> FloatArray:
    """Centroid of each device's units, shape (n_dev, 2).

    Examples
    --------
    >>> centroids(np.array([[0.0, 0.0], [2.0, 0.0], [1.0, 1.0]]), np.array([0, 0, 1]), 2)
    array([[1., 0.],
           [1., 1.]])
    """
    n = np.bincount(dev, minlength=n_dev).astype(float)
    sx = np.bincount(dev, weights=xy[:, 0], minlength=n_dev)
    sy = np.bincount(dev, weights=xy[:, 1], minlength=n_dev)
    return np.column_stack([sx / n, sy / n])


def array_centre(xy: FloatArray) -> FloatArray:
    """Centre of all device units (the mean position), shape (2,)."""
    return np.asarray(xy.mean(axis=0), dtype=float)


def power_moments(xy_c: FloatArray, dev: IntArray, n_dev: int, order: int) -> FloatArray:
    """Mean of x^(k-j) y^j over each device's units, shape (n_dev, k+1), for k = ``order``.

    ``xy_c`` holds positions about the array centre.

    Examples
    --------
    >>> power_moments(np.array([[-1.0, 0.0], [1.0, 0.0]]), np.array([0, 0]), 1, 2)
    array([[1., 0., 0.]])
    """
    n = np.bincount(dev, minlength=n_dev).astype(float)
    x, y = xy_c[:, 0], xy_c[:, 1]
    cols = [np.bincount(dev, weights=x ** (order - j) * y ** j, minlength=n_dev) / n
            for j in range(order + 1)]
    return np.column_stack(cols)


def moment_norm(delta: FloatArray) -> FloatArray:
    """Frobenius norm of the symmetric order-k tensor given by its k+1 distinct entries.

    The entry x^(k-j) y^j occurs C(k, j) times in the full tensor, so the norm is
    sqrt(sum_j C(k, j) delta_j^2); it is unchanged by rotating the coordinates.

    Examples
    --------
    >>> float(moment_norm(np.array([3.0, 4.0])))
    5.0
    """
    k = delta.shape[-1] - 1
    w = np.array([comb(k, j) for j in range(k + 1)], dtype=float)
    return np.asarray(np.sqrt(np.sum(w * delta ** 2, axis=-1)), dtype=float)


def second_moments(xy_c: FloatArray, dev: IntArray, n_dev: int) -> FloatArray:
    """Second-moment tensor (mean r r^T about the array centre) per device, (n_dev, 2, 2)."""
    m = power_moments(xy_c, dev, n_dev, 2)
    out = np.empty((n_dev, 2, 2))
    out[:, 0, 0] = m[:, 0]
    out[:, 0, 1] = out[:, 1, 0] = m[:, 1]
    out[:, 1, 1] = m[:, 2]
    return out


def linear_worst(dc: FloatArray, g_ppm_per_um: float) -> tuple[FloatArray, FloatArray]:
    """Worst ratio error (ppm) over gradient direction and that direction (degrees).

    ``dc`` is the centroid difference of each pair, shape (n_pairs, 2). The error under a
    gradient g is g . dc, largest when g points along dc.

    Examples
    --------
    >>> err, ang = linear_worst(np.array([[0.0, 2.0]]), 10.0)
    >>> float(err[0]), float(ang[0])
    (20.0, 90.0)
    """
    dist = np.hypot(dc[:, 0], dc[:, 1])
    angle = np.degrees(np.arctan2(dc[:, 1], dc[:, 0]))
    angle = np.where(dist > 0, np.mod(angle, 360.0), 0.0)
    return g_ppm_per_um * dist, angle


def quadratic_worst(dm2: FloatArray, h_ppm_per_um2: float) -> FloatArray:
    """Worst ratio error (ppm) over Hessians with Frobenius norm ``h``: h/2 ||dM||_F.

    ``dm2`` holds the pairs' second-moment differences as (xx, xy, yy), shape (n_pairs, 3).
    """
    return 0.5 * h_ppm_per_um2 * moment_norm(dm2)


def bowl_error(dm2: FloatArray, h_ppm_per_um2: float) -> FloatArray:
    """Ratio error (ppm) under a radially symmetric bowl H = (h/sqrt 2) I (same norm h).

    The error is (h / (2 sqrt 2)) * (dMxx + dMyy), signed: positive when the first
    device of the pair sits farther out.
    """
    return 0.5 * (h_ppm_per_um2 / np.sqrt(2.0)) * (dm2[:, 0] + dm2[:, 2])


def correlation(d: FloatArray, length_um: float, kernel: str) -> FloatArray:
    """Correlation of the random field at distance ``d``: exp(-d/L) or exp(-(d/L)^2).

    Examples
    --------
    >>> float(correlation(np.array(1.0), 1.0, "exponential")) == float(np.exp(-1.0))
    True
    """
    u = d / length_um
    if kernel == "exponential":
        return np.exp(-u)
    if kernel == "gaussian":
        return np.exp(-(u * u))
    raise ValueError(f"unknown kernel {kernel!r}")


def device_covariance(xy: FloatArray, dev: IntArray, n_dev: int, length_um: float,
                      kernel: str, block: int = 1024) -> FloatArray:
    """Covariance of the device means of a unit-variance correlated field, (n_dev, n_dev).

    Exact: with E the (n_units, n_dev) matrix of 1/n_d indicators, the result is
    E^T K E for the correlation matrix K of the units. K is built in row blocks so the
    memory stays O(block * n_units).
    """
    n = np.bincount(dev, minlength=n_dev).astype(float)
    e = np.zeros((len(dev), n_dev))
    e[np.arange(len(dev)), dev] = 1.0 / n[dev]
    ke = np.empty_like(e)
    for start in range(0, len(dev), block):
        stop = min(start + block, len(dev))
        diff = xy[start:stop, None, :] - xy[None, :, :]
        k = correlation(np.sqrt(np.sum(diff * diff, axis=-1)), length_um, kernel)
        ke[start:stop] = k @ e
    return np.asarray(e.T @ ke, dtype=float)


#: Grids up to this many slots multiply K E directly (S^2 lookups): cheaper than the FFTs
#: there, and a small run need not load the FFT library at all.
DIRECT_SLOTS = 256


def smooth_length(n: int) -> int:
    """The smallest length at least ``n`` whose only prime factors are 2, 3 and 5 (fast
    FFT sizes).

    Examples
    --------
    >>> smooth_length(7), smooth_length(97), smooth_length(1)
    (8, 100, 1)
    """
    best = 1 << max(0, (n - 1).bit_length())
    p5 = 1
    while p5 < best:
        p35 = p5
        while p35 < best:
            m = p35
            while m < n:
                m *= 2
            best = min(best, m)
            p35 *= 3
        p5 *= 5
    return best


def grid_kernel_products(ids: IntArray, pitch_um: tuple[float, float], n_groups: int,
                         length_um: float, kernel: str) -> FloatArray:
    """K E on a slot grid: for every slot, the sum of its correlation with each group's
    slots divided by the group's size, shape (rows * cols, n_groups).

    ``ids`` (rows, cols) holds each slot's group (negative: none). On a grid the
    correlation of two slots depends only on their offset, so each column of K E is the
    2-D linear convolution of the kernel with the group's map of 1/n, done with
    zero-padded FFTs in O(n_groups S log S) time instead of O(S^2) (on grids of at most
    :data:`DIRECT_SLOTS` slots, K E directly).
    """
    rows, cols = ids.shape
    dr = np.arange(-(rows - 1), rows)[:, None] * pitch_um[1]
    dc = np.arange(-(cols - 1), cols)[None, :] * pitch_um[0]
    kern = correlation(np.sqrt(dr * dr + dc * dc), length_um, kernel)   # (2R-1, 2C-1)
    counts = np.bincount(ids[ids >= 0], minlength=n_groups).astype(float)
    if rows * cols <= DIRECT_SLOTS:
        # a small grid: K itself (S x S, looked up by offset) times E, no FFT needed
        r, c = np.divmod(np.arange(rows * cols), cols)
        k_full = kern[r[:, None] - r[None, :] + rows - 1, c[:, None] - c[None, :] + cols - 1]
        flat = ids.ravel()
        have = np.nonzero(flat >= 0)[0]
        e = np.zeros((rows * cols, n_groups))
        e[have, flat[have]] = 1.0 / counts[flat[have]]
        return np.asarray(k_full @ e, dtype=float)
    # numpy's own FFT (loaded with numpy; scipy's would cost a fresh process 0.15 s to
    # import), on 5-smooth sizes
    sfft = np.fft
    shape = (smooth_length(3 * rows - 2), smooth_length(3 * cols - 2))
    fk = sfft.rfft2(kern, shape)
    out = np.zeros((rows * cols, n_groups))
    present = np.nonzero(counts)[0]
    # several groups per FFT call, in chunks of about 4 M grid points (32 MB a chunk)
    chunk = max(1, (1 << 22) // (shape[0] * shape[1]))
    for start in range(0, len(present), chunk):
        groups = present[start:start + chunk]
        imgs = (ids[None, :, :] == groups[:, None, None]) / counts[groups][:, None, None]
        conv = sfft.irfft2(sfft.rfft2(imgs, shape) * fk, shape)
        out[:, groups] = conv[:, rows - 1:2 * rows - 1, cols - 1:2 * cols - 1].reshape(
            len(groups), -1).T
    return out


def grid_device_covariance(ids: IntArray, pitch_um: tuple[float, float], n_dev: int,
                           length_um: float, kernel: str) -> FloatArray:
    """:func:`device_covariance` of units on a slot grid (``ids`` (rows, cols), negative:
    no unit), from :func:`grid_kernel_products`: E^T (K E).

    Examples
    --------
    >>> ids = np.array([[0, 1, 1, 0]])
    >>> xy = np.array([[0.0, 0.0], [1.0, 0.0], [2.0, 0.0], [3.0, 0.0]])
    >>> a = grid_device_covariance(ids, (1.0, 1.0), 2, 2.0, "exponential")
    >>> b = device_covariance(xy, ids.ravel(), 2, 2.0, "exponential")
    >>> bool(np.allclose(a, b, rtol=1e-12, atol=1e-15))
    True
    """
    g = grid_kernel_products(ids, pitch_um, n_dev, length_um, kernel)
    flat = ids.ravel()
    have = flat >= 0
    counts = np.bincount(flat[have], minlength=n_dev).astype(float)
    cov = np.zeros((n_dev, n_dev))
    np.add.at(cov, flat[have], g[have])
    cov = cov / np.where(counts > 0, counts, 1.0)[:, None]
    return np.asarray(0.5 * (cov + cov.T), dtype=float)


def pair_variance(cov: FloatArray, pairs: IntArray) -> FloatArray:
    """Variance of (value_a - value_b) for each pair from a device covariance matrix."""
    a, b = pairs[:, 0], pairs[:, 1]
    return np.maximum(cov[a, a] + cov[b, b] - 2.0 * cov[a, b], 0.0)


def pelgrom_sigma(coefficient: float, area_a_um2: FloatArray | float,
                  area_b_um2: FloatArray | float) -> FloatArray:
    """Sigma of the difference of two devices by the area law [1].

    For two equal devices of area WL the law gives sigma = A / sqrt(WL); each device then
    carries A^2 / (2 WL) of variance, so for unequal areas
    sigma = A * sqrt((1/area_a + 1/area_b) / 2). Units in parallel add area.

    Examples
    --------
    >>> float(pelgrom_sigma(5.0, 4.0, 4.0))   # 5 mV um, WL = 4 um^2  ->  2.5 mV
    2.5
    """
    a = np.asarray(area_a_um2, dtype=float)
    b = np.asarray(area_b_um2, dtype=float)
    return np.asarray(coefficient * np.sqrt((1.0 / a + 1.0 / b) / 2.0), dtype=float)


def edge_units(ids: IntArray, n_dev: int) -> IntArray:
    """Units of each device with a side open to the outside or to an empty slot.

    A unit beside a dummy is shielded; one on the array boundary or next to an empty
    slot sees a different neighbourhood (etch, stress) than its siblings.
    """
    filled = np.pad(ids != -2, 1, constant_values=False)
    open_side = ~(filled[:-2, 1:-1] & filled[2:, 1:-1] & filled[1:-1, :-2] & filled[1:-1, 2:])
    hit = ids[(ids >= 0) & open_side]
    return np.bincount(hit, minlength=n_dev).astype(int)


def monte_carlo_errors(xy_c: FloatArray, dev: IntArray, n_dev: int, pairs: IntArray, *,
                       g_rms_ppm_per_um: float, h_rms_ppm_per_um2: float,
                       corr_sigma_ppm: float, corr_length_um: float, kernel: str,
                       white_unit_sigma_ppm: float, samples: int,
                       rng: np.random.Generator, batch: int = 256) -> FloatArray:
    """Sampled ratio errors (ppm) of each pair, shape (samples, n_pairs).

    Each sample draws the whole field at every unit and averages it per device:
    a gradient vector with isotropic normal components (E|g|^2 = g_rms^2), a symmetric
    Hessian with E||H||_F^2 = h_rms^2 (diagonal variance h^2/3, off-diagonal h^2/6), a
    correlated field from the Cholesky factor of the unit correlation matrix, and white
    noise per unit. The exact figures have variance (g dc)^2/2 + h^2 ||dM||_F^2/12
    + sigma_c^2 w^T K w + sigma_w^2 w^T w, which the tests compare against.
    """
    n_units = len(dev)
    w = pair_weights(dev, n_dev, pairs)
    x, y = xy_c[:, 0], xy_c[:, 1]
    basis = np.column_stack([x, y, 0.5 * x * x, x * y, 0.5 * y * y])   # field terms
    if corr_sigma_ppm > 0:
        diff = xy_c[:, None, :] - xy_c[None, :, :]
        k = correlation(np.sqrt(np.sum(diff * diff, axis=-1)), corr_length_um, kernel)
        vals, vecs = np.linalg.eigh(k)
        factor = vecs * np.sqrt(np.clip(vals, 0.0, None))
    out = np.zeros((samples, pairs.shape[0]))
    s_g = g_rms_ppm_per_um / np.sqrt(2.0)
    s_d = h_rms_ppm_per_um2 / np.sqrt(3.0)
    s_o = h_rms_ppm_per_um2 / np.sqrt(6.0)
    for start in range(0, samples, batch):
        m = min(batch, samples - start)
        coef = np.column_stack([
            rng.normal(0.0, s_g, m), rng.normal(0.0, s_g, m),
            rng.normal(0.0, s_d, m), rng.normal(0.0, s_o, m), rng.normal(0.0, s_d, m),
        ])
        field = coef @ basis.T                              # (m, n_units)
        if corr_sigma_ppm > 0:
            field += corr_sigma_ppm * (rng.standard_normal((m, n_units)) @ factor.T)
        if white_unit_sigma_ppm > 0:
            field += white_unit_sigma_ppm * rng.standard_normal((m, n_units))
        out[start:start + m] = field @ w
    return out


def pair_weights(dev: IntArray, n_dev: int, pairs: IntArray) -> FloatArray:
    """Weights w (n_units, n_pairs) with field @ w = mean over a minus mean over b.

    Each column sums to zero, so a constant added to the field changes no ratio error.
    """
    counts = np.bincount(dev, minlength=n_dev).astype(float)
    e = np.zeros((len(dev), n_dev))
    e[np.arange(len(dev)), dev] = 1.0 / counts[dev]
    return e[:, pairs[:, 0]] - e[:, pairs[:, 1]]


def field_errors(values: FloatArray, dev: IntArray, n_dev: int, pairs: IntArray) -> FloatArray:
    """Ratio errors of each pair for field ``values`` sampled at the units (any shape (..., n)).

    Examples
    --------
    >>> field_errors(np.array([1.0, 2.0, 4.0]), np.array([0, 1, 1]), 2, np.array([[1, 0]]))
    array([2.])
    """
    return np.asarray(values @ pair_weights(dev, n_dev, pairs), dtype=float)


def exact_pair_terms(xy_c: FloatArray, dev: IntArray, n_dev: int, pairs: IntArray,
                     order: int) -> dict[int, FloatArray]:
    """Moment-difference norms ||M_k(a) - M_k(b)||_F of each pair for k = 1..order."""
    out = {}
    for k in range(1, order + 1):
        m = power_moments(xy_c, dev, n_dev, k)
        out[k] = moment_norm(m[pairs[:, 0]] - m[pairs[:, 1]])
    return out

