"""Seeded, deterministic search for gradient-cancelling assignments of units to core slots.

The core is a rows x columns grid of slots; an assignment gives each slot a device id or
``-1`` (a dummy). Positions are kept as integers -- twice the offset from the core centre
in pitches -- so every moment sum is an exact integer and "zero linear error" means
exactly zero, not merely small.

The optimiser works in stages, each on the key the objective ranks first:

1. linear: a point-symmetric construction (each device on pairs of slots mirrored through
   a centre, an odd device on the centre slot) cancels every odd moment by construction;
   where no such construction fits, exhaustive enumeration (small cores) or annealing on
   single swaps minimises the worst pair's centroid distance;
2. quadratic (and higher even orders when asked): annealing with moves that swap whole
   symmetric orbits, so the linear key cannot move, and single swaps checked against it;
3. balance and dispersion: annealing on the edge-share imbalance, the correlated-field
   sigma (exact, updated per swap from the covariance of the device means) and row
   tracks, without giving back the keys fixed before.

Moves are evaluated in batches with numpy; each accepted swap updates the moment sums
in O(1) per component. The iteration budget depends only on the problem size, so the same
seed always gives the same result; the time limit is only a safety cap, and a result cut
by it is reported as such.

References
----------
[1] S. Kirkpatrick, C. D. Gelatt, M. P. Vecchi, "Optimization by simulated annealing",
    Science 220(4598), 671-680, 1983. doi:10.1126/science.220.4598.671
"""

from __future__ import annotations

import os
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from itertools import combinations
from math import comb, factorial, prod
from typing import Any

import numpy as np
from numpy.typing import NDArray

from placer import model

__all__ = [
    "Problem",
    "Keys",
    "SearchOutcome",
    "core_coords",
    "symmetric_assignment",
    "near_symmetric_assignments",
    "evaluate",
    "search",
    "EXHAUSTIVE_LIMIT",
]

IntArray = NDArray[np.int64]
FloatArray = NDArray[np.float64]

#: Cores with at most this many distinct assignments are searched exhaustively.
EXHAUSTIVE_LIMIT = 60_000
_BATCH = 48


@dataclass(frozen=True)
class Problem:
    """What the search needs: counts, core shape, pitch and the objective's magnitudes."""

    counts: tuple[int, ...]
    rows: int
    cols: int
    pitch_um: tuple[float, float] = (1.0, 1.0)
    linear_ppm_per_um: float = 10.0
    quadratic_ppm_per_um2: float = 0.02
    corr_sigma_ppm: float = 100.0
    corr_length_um: float = 10.0
    kernel: str = "exponential"
    cancel_order: int = 2
    objective: str = "lexicographic"
    tie_ppm: float = 0.01
    open_edge: tuple[bool, ...] | None = None
    finger_nets: tuple[tuple[int, int], ...] | None = None

    @property
    def n_slots(self) -> int:
        """Slots in the core."""
        return self.rows * self.cols

    @property
    def n_dev(self) -> int:
        """Devices."""
        return len(self.counts)


@dataclass(frozen=True)
class Keys:
    """Scores the search ranks by: worst pair of each term (um, ppm), routing tracks."""

    linear_um: float
    quadratic_ppm: float
    higher: tuple[float, ...]
    edge_imbalance: float
    sigma_ppm: float
    tracks: int
    breaks: int = 0

    def ranked(self, prob: Problem) -> tuple[float, ...]:
        """The key the objective sorts by (smaller is better).

        Lexicographic: exact linear, quadratic to the tie size, the higher orders asked for
        (exactly), edge balance, sigma to the tie size, routing effort (row tracks plus, for
        MOS rows, diffusion breaks). Weighted: the worst linear
        plus quadratic error in ppm (spec magnitudes) to the tie size, then the same tail.
        """
        tie_ppm = prob.tie_ppm

        def q(v: float) -> float:
            return float(np.round(v / tie_ppm)) if tie_ppm > 0 else v

        if prob.objective == "weighted":
            return (q(self.linear_um * prob.linear_ppm_per_um + self.quadratic_ppm),
                    *(float(np.round(h, 12)) for h in self.higher),
                    float(np.round(self.edge_imbalance, 6)), q(self.sigma_ppm),
                    float(self.tracks + self.breaks))
        return (float(np.round(self.linear_um, 9)), q(self.quadratic_ppm),
                *(float(np.round(h, 12)) for h in self.higher),
                float(np.round(self.edge_imbalance, 6)),
                q(self.sigma_ppm), float(self.tracks + self.breaks))


@dataclass
class SearchOutcome:
    """The best assignment found, its keys, the linear bound and how the search ended."""

    assign: IntArray
    keys: Keys
    linear_bound_um: float
    bound_proven: bool
    method: str
    stopped: str = "converged"
    elapsed_s: float = 0.0
    iterations: int = 0
    archive: list[tuple[IntArray, Keys]] = field(default_factory=list)


def core_coords(rows: int, cols: int) -> tuple[IntArray, IntArray]:
    """Doubled integer offsets (u, v) of each slot from the core centre, y pointing up.

    Slot s = r * cols + c has u = 2c - (cols - 1), v = (rows - 1) - 2r.

    Examples
    --------
    >>> core_coords(1, 4)[0].tolist()
    [-3, -1, 1, 3]
    """
    r, c = np.divmod(np.arange(rows * cols), cols)
    return (2 * c - (cols - 1)).astype(np.int64), ((rows - 1) - 2 * r).astype(np.int64)


# ---------------------------------------------------------------- moments and keys

class _Geometry:
    """Per-slot monomials and the scales that turn integer sums into physical figures."""

    def __init__(self, prob: Problem):
        self.prob = prob
        u, v = core_coords(prob.rows, prob.cols)
        self.u, self.v = u, v
        self.order = max(2, prob.cancel_order)
        cols, scale, weight, orders = [], [], [], []
        hx, hy = prob.pitch_um[0] / 2.0, prob.pitch_um[1] / 2.0
        for k in range(1, self.order + 1):
            for j in range(k + 1):
                cols.append(u ** (k - j) * v ** j)
                scale.append(hx ** (k - j) * hy ** j)
                weight.append(comb(k, j))
                orders.append(k)
        self.mono = np.column_stack(cols).astype(np.float64)        # (S, C), exact integers
        self.scale = np.array(scale)
        self.weight = np.array(weight, dtype=float)
        self.orders = np.array(orders)
        self.n = np.array(prob.counts, dtype=np.int64)
        n_dev = prob.n_dev
        pairs = np.array(list(combinations(range(n_dev), 2)), dtype=np.int64).reshape(-1, 2)
        self.pa: IntArray = pairs[:, 0]
        self.pb: IntArray = pairs[:, 1]
        radius = max(prob.rows * prob.pitch_um[1], prob.cols * prob.pitch_um[0]) / 2.0
        self.radius = max(radius, 1e-9)
        # precomputed factors of the pair differences (see terms)
        n = self.n.astype(float)
        self._na = n[self.pa, None]
        self._nb = n[self.pb, None]
        self._coef = (self.scale * np.sqrt(self.weight))[None, :] / (self._na * self._nb)
        self._q = np.zeros((len(self.pa), n_dev))
        self._q[np.arange(len(self.pa)), self.pa] = n[self.pb]
        self._q[np.arange(len(self.pa)), self.pb] = -n[self.pa]
        self._hq = 0.5 * prob.quadratic_ppm_per_um2
        self._slices = {k: slice(int(np.argmax(self.orders == k)),
                                 int(np.argmax(self.orders == k)) + k + 1)
                        for k in range(1, self.order + 1)}
        self._hk = {k: prob.quadratic_ppm_per_um2 / factorial(k) / self.radius ** (k - 2)
                    for k in range(1, self.order + 1)}

    def sums(self, assign: IntArray) -> FloatArray:
        """Moment sums per device, with the dummies in an extra last row."""
        out = np.zeros((self.prob.n_dev + 1, self.mono.shape[1]))
        np.add.at(out, assign, self.mono)   # assign == -1 lands in the last row
        return out

    def pair_terms(self, sums: FloatArray) -> tuple[FloatArray, FloatArray, list[FloatArray]]:
        """Per-pair linear (um), quadratic (ppm) and higher-order terms, shape (..., pairs).

        ``sums`` has shape (..., n_dev + 1, C). Sums hold integers below 2**53, so the
        differences n_b S_a - n_a S_b that make a term zero are exact.
        """
        # Q holds n_b at a and -n_a at b: integer weights, so the matmul stays exact
        num = np.matmul(self._q, sums[..., :-1, :])
        delta = num * self._coef
        sq = delta * delta
        lin = np.sqrt(sq[..., 0] + sq[..., 1])
        quad = self._hq * np.sqrt(sq[..., 2] + sq[..., 3] + sq[..., 4])
        hi = [self._hk[k] * np.sqrt(sq[..., sl].sum(-1))
              for k, sl in self._slices.items() if k >= 3]
        return lin, quad, hi

    def terms(self, sums: FloatArray) -> tuple[FloatArray, FloatArray, FloatArray]:
        """Smoothed worst-pair keys: the worst pair plus 5 % of the mean pair.

        The smoothing lets the search improve pairs that are not yet the worst.
        """
        if len(self.pa) == 0:
            lead = sums.shape[:-2]
            return np.zeros(lead), np.zeros(lead), np.zeros(lead + (self.order - 2,))
        lin, quad, hi = self.pair_terms(sums)
        mean = 0.05 / len(self.pa)
        lin_key = lin.max(-1) + mean * lin.sum(-1)
        quad_key = quad.max(-1) + mean * quad.sum(-1)
        higher = (np.stack([h.max(-1) for h in hi], -1) if hi
                  else np.zeros(lin_key.shape + (0,)))
        return lin_key, quad_key, higher

    def worst_batch(self, sums: FloatArray) -> tuple[FloatArray, FloatArray]:
        """Unsmoothed worst-pair linear (um) and quadratic (ppm) over leading axes."""
        if len(self.pa) == 0:
            lead = sums.shape[:-2]
            return np.zeros(lead), np.zeros(lead)
        lin, quad, _ = self.pair_terms(sums)
        return lin.max(-1), quad.max(-1)

    def worst(self, sums: FloatArray) -> tuple[float, float, tuple[float, ...]]:
        """Worst-pair linear (um), quadratic (ppm) and higher-order figures, no smoothing."""
        if len(self.pa) == 0:
            return 0.0, 0.0, tuple(0.0 for _ in range(3, self.order + 1))
        lin, quad, hi = self.pair_terms(sums)
        return float(lin.max()), float(quad.max()), tuple(float(h.max()) for h in hi)


class _Field:
    """Covariance of device means of the correlated field, kept up to date per swap.

    The slots' correlation matrix K is never stored: G = K E (slots x devices) is built
    in row blocks, single entries and columns of K are computed when needed, so memory
    grows linearly with the number of slots.
    """

    def __init__(self, prob: Problem, geo: _Geometry, assign: IntArray):
        self.xy = np.column_stack([geo.u * prob.pitch_um[0] / 2.0,
                                   geo.v * prob.pitch_um[1] / 2.0])
        self.length, self.kernel = prob.corr_length_um, prob.kernel
        n_dummy = int(np.sum(assign < 0))
        self.n = np.array([*prob.counts, max(n_dummy, 1)], dtype=float)
        self.sigma = prob.corr_sigma_ppm
        self.pa, self.pb = geo.pa, geo.pb
        self.reset(assign)

    def k_at(self, i: IntArray, j: IntArray) -> FloatArray:
        """Correlation of slot pairs (i, j), elementwise."""
        d = self.xy[i] - self.xy[j]
        return model.correlation(np.sqrt((d * d).sum(-1)), self.length, self.kernel)

    def k_col(self, j: int) -> FloatArray:
        """Column j of the slots' correlation matrix."""
        d = self.xy - self.xy[j]
        return model.correlation(np.sqrt((d * d).sum(-1)), self.length, self.kernel)

    def reset(self, assign: IntArray) -> None:
        e = np.zeros((len(assign), len(self.n)))
        e[np.arange(len(assign)), assign] = 1.0 / self.n[assign]
        self.g = np.empty_like(e)               # (S, D+1) = K E, in row blocks
        for start in range(0, len(assign), 512):
            stop = min(start + 512, len(assign))
            d = self.xy[start:stop, None, :] - self.xy[None, :, :]
            k = model.correlation(np.sqrt((d * d).sum(-1)), self.length, self.kernel)
            self.g[start:stop] = k @ e
        self.cov = e.T @ self.g                  # (D+1, D+1)

    def worst(self, cov: FloatArray) -> FloatArray:
        """Largest pair sigma (ppm) for covariance matrices of shape (..., D+1, D+1)."""
        if len(self.pa) == 0:
            return np.zeros(cov.shape[:-2])
        var = (cov[..., self.pa, self.pa] + cov[..., self.pb, self.pb]
               - 2.0 * cov[..., self.pa, self.pb])
        return np.asarray(self.sigma * np.sqrt(np.maximum(var, 0.0)).max(-1))

    def propose(self, a: IntArray, b: IntArray, s: IntArray, t: IntArray, s2: IntArray,
                t2: IntArray) -> FloatArray:
        """Covariance after device a gives slots (s, s2) to b for (t, t2), batched.

        With d the signed indicator of the moved slots, e_a' = e_a + d/n_a and
        e_b' = e_b - d/n_b, so only rows and columns a and b change: by g = d^T K E
        and by q = d^T K d.
        """
        m = len(a)
        idx = np.arange(m)
        cov = np.broadcast_to(self.cov, (m, *self.cov.shape)).copy()
        two = s2 >= 0
        s2c, t2c = np.where(two, s2, s), np.where(two, t2, t)
        w = two.astype(float)
        k = self.k_at
        g = self.g[t] - self.g[s] + w[:, None] * (self.g[t2c] - self.g[s2c])
        q = (2.0 - 2.0 * k(s, t)) + w * (2.0 - 2.0 * k(s2c, t2c)
                                         + 2.0 * k(t, t2c) + 2.0 * k(s, s2c)
                                         - 2.0 * k(t, s2c) - 2.0 * k(s, t2c))
        na, nb = self.n[a], self.n[b]
        cov[idx, a, :] += g / na[:, None]
        cov[idx, :, a] += g / na[:, None]
        cov[idx, b, :] -= g / nb[:, None]
        cov[idx, :, b] -= g / nb[:, None]
        cov[idx, a, a] += q / na ** 2
        cov[idx, b, b] += q / nb ** 2
        cov[idx, a, b] -= q / (na * nb)
        cov[idx, b, a] -= q / (na * nb)
        return cov

    def accept(self, a: int, b: int, s: int, t: int, s2: int, t2: int,
               cov: FloatArray) -> None:
        d = self.k_col(t) - self.k_col(s)
        if s2 >= 0:
            d = d + self.k_col(t2) - self.k_col(s2)
        self.g[:, a] += d / self.n[a]
        self.g[:, b] -= d / self.n[b]
        self.cov = cov


def _edge_imbalance(prob: Problem, assign: IntArray) -> float:
    """Largest gap between a device's share of open-edge units and the overall share."""
    if prob.open_edge is None or not any(prob.open_edge):
        return 0.0
    edge = np.array(prob.open_edge, dtype=bool)
    dev = assign[assign >= 0]
    n = np.bincount(dev, minlength=prob.n_dev)
    e = np.bincount(assign[edge & (assign >= 0)], minlength=prob.n_dev)
    return float(np.max(np.abs(e / n - e.sum() / n.sum())))


def _tracks(prob: Problem, assign: IntArray) -> int:
    grid = assign.reshape(prob.rows, prob.cols)
    present = np.zeros((prob.rows, prob.n_dev + 1), dtype=bool)
    present[np.repeat(np.arange(prob.rows), prob.cols), grid.ravel()] = True
    return int(present[:, :prob.n_dev].sum())


def _breaks(prob: Problem, assign: IntArray) -> int:
    """Fewest diffusion breaks the MOS rows need (0 for other kinds)."""
    if prob.finger_nets is None:
        return 0
    from placer.routing import orient_row

    grid = assign.reshape(prob.rows, prob.cols)
    return sum(orient_row(row, None, prob.finger_nets)[1] for row in grid)


def evaluate(prob: Problem, assign: IntArray) -> Keys:
    """All keys of one assignment (the search's own view; ``grade`` is the reference)."""
    geo = _Geometry(prob)
    lin, quad, hi = geo.worst(geo.sums(assign))
    fld = _Field(prob, geo, assign) if prob.corr_sigma_ppm > 0 else None
    sigma = float(fld.worst(fld.cov)) if fld is not None else 0.0
    return Keys(lin, quad, hi, _edge_imbalance(prob, assign), sigma, _tracks(prob, assign),
                _breaks(prob, assign))


# ---------------------------------------------------------------- constructions

def symmetric_assignment(prob: Problem) -> tuple[IntArray, IntArray] | None:
    """A point-symmetric assignment and its partner map, or None if none fits.

    Every device takes pairs of slots mirrored through a centre; a device with an odd count
    takes the centre slot. Centres are tried from the core centre outward (half a pitch at
    a time), slots whose mirror falls outside the core becoming dummies. Orbits are dealt
    to devices by radius in proportion to their counts, a good start for the second moment.
    """
    u, v = core_coords(prob.rows, prob.cols)
    odd = [d for d, n in enumerate(prob.counts) if n % 2]
    if len(odd) > 1:
        return None
    spare = prob.n_slots - sum(prob.counts)
    shifts = sorted(((du, dv) for du in range(-3, 4) for dv in range(-3, 4)),
                    key=lambda s: (abs(s[0]) + abs(s[1]), abs(s[1]), s))
    index = {(int(a), int(b)): i for i, (a, b) in enumerate(zip(u, v, strict=True))}
    for du, dv in shifts:
        partner = np.array([index.get((int(2 * du - a), int(2 * dv - b)), -1)
                            for a, b in zip(u, v, strict=True)], dtype=np.int64)
        fixed = np.nonzero(partner == np.arange(prob.n_slots))[0]
        unpaired = int(np.sum(partner < 0))
        if unpaired > spare or len(odd) > len(fixed):
            continue
        assign = np.full(prob.n_slots, -1, dtype=np.int64)
        if odd:
            assign[fixed[0]] = odd[0]
        orbits = _orbits(u, v, partner, du, dv)
        need = [n // 2 for n in prob.counts]
        if sum(need) > len(orbits):
            continue
        _deal(assign, orbits, need)
        return assign, partner
    return None


def _orbits(u: IntArray, v: IntArray, partner: IntArray, du: int = 0, dv: int = 0
            ) -> list[tuple[int, int, int]]:
    """Pairs of mirrored slots (r^2, s, partner) about (du, dv), nearest the centre first."""
    orbits = []
    for s in range(len(u)):
        p = int(partner[s])
        if p > s:
            orbits.append((int((u[s] - du) ** 2 + (v[s] - dv) ** 2), s, p))
    orbits.sort()
    return orbits


def _deal(assign: IntArray, orbits: list[tuple[int, int, int]], need: list[int]) -> None:
    """Deal orbits to devices by radius in proportion to ``need`` (largest remainder).

    Each device so samples every radius, a good start for the second moment; orbits left
    over (the outermost) stay dummies.
    """
    total = sum(need)
    given = [0] * len(need)
    for i in range(total):
        d = max(range(len(need)), key=lambda d: ((i + 1) * need[d] / total - given[d]
                                                 if given[d] < need[d] else -1e9, -d))
        given[d] += 1
        _, s, p = orbits[i]
        assign[s] = assign[p] = d


def near_symmetric_assignments(prob: Problem) -> list[tuple[IntArray, IntArray]]:
    """Point-symmetric starts for exactly two odd devices on a core without a centre slot.

    Each odd device keeps one unit off its orbits, on a slot next to the centre; every
    other unit sits on mirrored pairs, so only those two slots (and, in the second variant,
    their mirrors) move any centroid. Variant 1 puts the two odd units on one orbit;
    variant 2 puts them side by side and gives their mirrors to the largest even device.
    With two single-unit devices variant 2 reaches the bound of one pitch exactly.
    """
    odd = [d for d, n in enumerate(prob.counts) if n % 2]
    if len(odd) != 2:
        return []
    u, v = core_coords(prob.rows, prob.cols)
    index = {(int(a), int(b)): i for i, (a, b) in enumerate(zip(u, v, strict=True))}
    partner = np.array([index.get((int(-a), int(-b)), -1) for a, b in zip(u, v, strict=True)],
                       dtype=np.int64)
    fixed = np.nonzero(partner == np.arange(prob.n_slots))[0]
    spare = prob.n_slots - sum(prob.counts)
    if spare < len(fixed) + int(np.sum(partner < 0)):
        return []
    orbits = _orbits(u, v, partner)
    a, b = odd
    need = [n // 2 for n in prob.counts]
    out = []
    # variant 1: the odd units share the innermost orbit
    assign = np.full(prob.n_slots, -1, dtype=np.int64)
    _, s, p = orbits[0]
    assign[s], assign[p] = a, b
    if sum(need) <= len(orbits) - 1:
        _deal(assign, orbits[1:], need)
        out.append((assign, partner))
    # variant 2: side by side, their mirrors to the largest even device
    even = [d for d, n in enumerate(prob.counts) if n % 2 == 0 and n >= 2]
    if even and len(orbits) >= 2:
        c = max(even, key=lambda d: (prob.counts[d], -d))
        hx, hy = prob.pitch_um[0] / 2, prob.pitch_um[1] / 2
        _, s, p = orbits[0]

        def phys(i: int, j: int) -> float:
            return float(np.hypot((u[i] - u[j]) * hx, (v[i] - v[j]) * hy))

        # the partner for s: the slot (either end of an orbit) that keeps the pair tight
        # and close to the centre, where every other device's centroid sits
        choices = []
        for k, (_, t0, q0) in enumerate(orbits[1:], start=1):
            for t, q in ((t0, q0), (q0, t0)):
                choices.append((max(phys(s, t), phys(s, p) / 2, phys(t, q) / 2), k, t, q))
        _, k, t, q = min(choices)
        rest = [o for i, o in enumerate(orbits) if i not in (0, k)]
        need2 = list(need)
        need2[c] -= 1
        if sum(need2) <= len(rest):
            assign = np.full(prob.n_slots, -1, dtype=np.int64)
            assign[s], assign[t] = a, b
            assign[p] = assign[q] = c
            _deal(assign, rest, need2)
            out.append((assign, partner))
    return out


def _multiset_assignments(counts: list[int], n_slots: int) -> IntArray:
    """Every distinct assignment of the counts (dummies last) to n_slots slots."""
    out = np.full((1, n_slots), -2, dtype=np.int64)
    for d, n in enumerate(counts):
        rows = []
        for row in out:
            free = np.nonzero(row == -2)[0]
            for pos in combinations(free, n):
                r = row.copy()
                r[list(pos)] = d
                rows.append(r)
        out = np.array(rows)
    out[out == -2] = -1
    return out


def _n_assignments(counts: list[int], n_slots: int) -> int:
    rest = n_slots - sum(counts)
    return factorial(n_slots) // (prod(factorial(c) for c in counts) * factorial(rest))


def _exhaustive(prob: Problem, geo: _Geometry
                ) -> tuple[IntArray, Keys, list[tuple[IntArray, Keys]]]:
    """Best assignment of all, ranked lexicographically by (linear, quadratic, ..., tracks)."""
    counts = list(prob.counts)
    every = _multiset_assignments(counts, prob.n_slots)
    sums = np.zeros((len(every), prob.n_dev + 1, geo.mono.shape[1]))
    for d in range(prob.n_dev + 1):
        mask = (every == (d if d < prob.n_dev else -1)).astype(np.float64)
        sums[:, d] = mask @ geo.mono
    if len(geo.pa):
        lin_p, quad_p, hi_p = geo.pair_terms(sums)
        norms = [lin_p.max(-1), quad_p.max(-1), *(h.max(-1) for h in hi_p)]
    else:
        norms = [np.zeros(len(every)) for _ in range(geo.order)]
    lin = norms[0]
    if prob.objective == "weighted":
        order = np.argsort(lin * prob.linear_ppm_per_um + norms[1], kind="stable")
        short = list(order[:400])
    else:
        # rank by linear, then quadratic, then the higher orders asked for (exact zeros
        # first); among the linear optimum's best, rank the rest fully
        order = np.lexsort(tuple(np.round(x, 9) for x in reversed(norms)))
        best_lin = np.round(lin[order[0]], 9)
        short = [i for i in order[:400] if np.round(lin[i], 9) == best_lin]
    ranked = sorted(((evaluate(prob, every[i]), i) for i in short),
                    key=lambda ki: (ki[0].ranked(prob), ki[1]))
    keys, i = ranked[0]
    archive = [(every[j], k) for k, j in ranked[:50]]
    return every[i], keys, archive


def _linear_bound(prob: Problem) -> float:
    """A bound no assignment can beat, from the devices of a single unit.

    Each one-unit device's centroid is its slot, so the worst pair among m such devices is
    at least the smallest diameter of m distinct slots; it is found by enumerating m-slot
    subsets of an m x m window (m capped at 5; more singles cannot lower it).

    Examples
    --------
    >>> _linear_bound(Problem((1, 1, 4), 4, 4, pitch_um=(2.0, 3.0)))
    2.0
    >>> round(_linear_bound(Problem((1, 1, 1, 8), 4, 4)), 6)
    1.414214
    """
    m = min(sum(1 for n in prob.counts if n == 1), 5)
    if m < 2:
        return 0.0
    rows, cols = min(prob.rows, m), min(prob.cols, m)
    pts = np.array([(c * prob.pitch_um[0], r * prob.pitch_um[1])
                    for r in range(rows) for c in range(cols)])
    best = np.inf
    for subset in combinations(range(len(pts)), m):
        p = pts[list(subset)]
        diff = p[:, None, :] - p[None, :, :]
        best = min(best, float(np.sqrt((diff * diff).sum(-1)).max()))
    return best


# ---------------------------------------------------------------- annealing

class _Anneal:
    """Batched annealing over swap moves with exact integer moment updates."""

    def __init__(self, prob: Problem, geo: _Geometry, assign: IntArray,
                 rng: np.random.Generator, deadline: float,
                 progress: Callable[[str, Keys], None] | None, stop: object = None):
        self.prob, self.geo, self.rng = prob, geo, rng
        self.assign = assign.copy()
        self.sums = geo.sums(self.assign)
        self.deadline = deadline
        self.progress = progress
        self.iterations = 0
        self.stopped = "converged"
        self.stop = stop

    def _moves(self, partner: IntArray | None, orbit_share: float
               ) -> tuple[IntArray, IntArray, IntArray, IntArray, IntArray, IntArray]:
        """Random moves: device a gives slots (s, s2) to b and takes (t, t2); s2 = -1: none."""
        rng, asg, n = self.rng, self.assign, self.prob.n_slots
        s = rng.integers(0, n, _BATCH)
        t = rng.integers(0, n, _BATCH)
        s2 = np.full(_BATCH, -1, dtype=np.int64)
        t2 = np.full(_BATCH, -1, dtype=np.int64)
        if partner is not None and orbit_share > 0:
            use = rng.random(_BATCH) < orbit_share
            ps, pt = partner[s], partner[t]
            ok = (use & (ps >= 0) & (pt >= 0) & (ps != s) & (pt != t) & (ps != t)
                  & (asg[np.maximum(ps, 0)] == asg[s]) & (asg[np.maximum(pt, 0)] == asg[t]))
            s2 = np.where(ok, ps, -1)
            t2 = np.where(ok, pt, -1)
        a, b = asg[s], asg[t]
        valid = a != b
        return s[valid], t[valid], s2[valid], t2[valid], a[valid], b[valid]

    def _delta(self, s: IntArray, t: IntArray, s2: IntArray, t2: IntArray) -> FloatArray:
        mono = self.geo.mono
        d = mono[t] - mono[s]
        two = s2 >= 0
        d[two] += mono[t2[two]] - mono[s2[two]]
        return d

    def _apply(self, s: int, t: int, s2: int, t2: int, a: int, b: int, d: FloatArray) -> None:
        self.assign[s], self.assign[t] = b, a
        if s2 >= 0:
            self.assign[s2], self.assign[t2] = b, a
        self.sums[a] += d
        self.sums[b] -= d

    def _stop(self) -> bool:
        if self.stop is not None and self.stop.is_set():  # type: ignore[attr-defined]
            self.stopped = "interrupted"
            return True
        if time.monotonic() > self.deadline:
            self.stopped = "time limit"
            return True
        return False

    def _propose(self, partner: IntArray | None, orbit_share: float) -> _Batch | None:
        """A batch of random moves with the moment sums each would give."""
        s, t, s2, t2, a, b = self._moves(partner, orbit_share)
        if len(s) == 0:
            return None
        d = self._delta(s, t, s2, t2)
        m = len(s)
        trial = np.broadcast_to(self.sums, (m, *self.sums.shape)).copy()
        idx = np.arange(m)
        trial[idx, a] += d
        trial[idx, b] -= d
        return _Batch(s, t, s2, t2, a, b, d, trial)

    def _anneal(self, budget: int, partner: IntArray | None, orbit_share: float,
                current: float, score: Callable[[_Batch], FloatArray],
                commit: Callable[[_Batch, int], None],
                on_best: Callable[[], bool] | None = None) -> None:
        """The annealing loop both stages share [1].

        Each step draws a batch, scores it (inf = not allowed), takes the best move if it
        improves or with the Metropolis probability at a temperature falling geometrically
        from the first batch's median uphill step to 1e-4 of it. Stops at the budget, after
        ``patience`` steps without a new best once 30 % of the budget is spent, at a zero
        energy, when ``on_best`` (called at each new best) says the floor is reached, at the
        time limit or on Ctrl-C; leaves the best state found.
        """
        cur = best = current
        best_assign, best_sums = self.assign.copy(), self.sums.copy()
        if best == 0.0:
            return
        temp0 = None
        stale = 0
        patience = max(400, 3 * self.prob.n_slots)
        try:
            for it in range(budget):
                self.iterations += 1
                if it % 64 == 0 and self._stop():
                    break
                batch = self._propose(partner, orbit_share)
                if batch is None:
                    continue
                e = score(batch)
                i = int(np.argmin(e))
                if not np.isfinite(e[i]):
                    continue
                de = float(e[i]) - cur
                if temp0 is None:
                    pos = e[np.isfinite(e)] - cur
                    pos = pos[pos > 0]
                    temp0 = float(np.median(pos)) if len(pos) else max(abs(cur), 1e-12)
                frac = it / max(budget - 1, 1)
                temp = temp0 * (1e-4 ** frac)
                if de <= 0 or self.rng.random() < np.exp(-de / max(temp, 1e-300)):
                    commit(batch, i)
                    self._apply(int(batch.s[i]), int(batch.t[i]), int(batch.s2[i]),
                                int(batch.t2[i]), int(batch.a[i]), int(batch.b[i]), batch.d[i])
                    cur = float(e[i])
                if cur < best - 1e-12 * max(1.0, abs(best)):
                    best, best_assign, best_sums = cur, self.assign.copy(), self.sums.copy()
                    stale = 0
                    if (on_best is not None and on_best()) or best == 0.0:
                        break
                else:
                    stale += 1
                    if stale > patience and frac > 0.3:
                        break
        except KeyboardInterrupt:
            self.stopped = "interrupted"
        self.assign, self.sums = best_assign, best_sums

    def run_moments(self, stage: str, budget: int, partner: IntArray | None,
                    lin_cap: float | None, orbit_share: float = 0.0,
                    lin_floor: float = 0.0) -> None:
        """Anneal the linear key (lin_cap None) or the quadratic keys under a linear cap.

        The linear stage ends as soon as its worst pair reaches ``lin_floor``, a bound no
        assignment beats: only the worst pair counts in the ranking.
        """
        geo = self.geo
        weighted = self.prob.objective == "weighted"
        g_lin = self.prob.linear_ppm_per_um

        def energy(sums: FloatArray) -> FloatArray:
            lin, quad, hi = geo.terms(sums)
            higher = (hi * (1e-3 ** np.arange(1, hi.shape[-1] + 1))).sum(-1)
            if weighted:
                return np.asarray(lin * g_lin + quad + higher)
            if lin_cap is None:
                return lin
            return np.where(lin <= lin_cap * (1 + 1e-12) + 1e-15, quad + higher, np.inf)

        def report() -> bool:
            if self.progress:
                self.progress(stage, evaluate_light(self.prob, geo, self.assign, self.sums))
            if lin_cap is None and lin_floor > 0 and not weighted:
                return float(geo.worst_batch(self.sums)[0]) <= lin_floor * (1 + 1e-9)
            return False

        self._anneal(budget, partner, orbit_share, float(energy(self.sums)),
                     lambda batch: energy(batch.trial), lambda batch, i: None, report)

    def run_balance(self, budget: int, lin_cap: float, quad_cap: float,
                    partner: IntArray | None, orbit_share: float) -> None:
        """Anneal edge balance, correlated sigma and tracks without losing the moment keys."""
        prob, geo = self.prob, self.geo
        fld = _Field(prob, geo, self.assign)
        edge = (np.array(prob.open_edge, dtype=float) if any(prob.open_edge or ())
                else None)
        rows = np.arange(prob.n_slots) // prob.cols
        n_dev = prob.n_dev
        counts = np.array(prob.counts, dtype=float)
        sig_scale = max(float(fld.worst(fld.cov)), 1e-9)
        state: dict[str, Any] = {"rc": np.zeros((prob.rows, n_dev + 1), dtype=np.int64),
                                 "ec": np.zeros(n_dev + 1)}
        np.add.at(state["rc"], (rows, self.assign), 1)
        if edge is not None:
            np.add.at(state["ec"], self.assign, edge)
        pending: dict[int, tuple[FloatArray, IntArray, FloatArray]] = {}

        def scores(cov: FloatArray, rc: Any, ec: Any) -> FloatArray:
            e = fld.worst(cov)
            if edge is not None:
                share = ec[..., :n_dev] / counts
                total = ec[..., :n_dev].sum(-1, keepdims=True) / counts.sum()
                e = e + 10.0 * sig_scale * np.abs(share - total).max(-1)
            tracks = (rc[..., :n_dev] > 0).sum((-1, -2))
            return np.asarray(e + prob.tie_ppm * tracks / max(prob.rows, 1))

        def score(batch: _Batch) -> FloatArray:
            lin, quad, _ = geo.terms(batch.trial)
            if prob.objective == "weighted":
                ok = lin * prob.linear_ppm_per_um + quad <= quad_cap
            else:
                ok = (lin <= lin_cap * (1 + 1e-12) + 1e-15) & (quad <= quad_cap)
            out = np.full(len(ok), np.inf)
            sel = np.nonzero(ok)[0]
            pending.clear()
            if len(sel) == 0:
                return out
            a, b = batch.a[sel], batch.b[sel]
            cov = fld.propose(a, b, batch.s[sel], batch.t[sel], batch.s2[sel], batch.t2[sel])
            m = len(sel)
            idx = np.arange(m)
            rc = np.broadcast_to(state["rc"], (m, *state["rc"].shape)).copy()
            ec = np.broadcast_to(state["ec"], (m, n_dev + 1)).copy()
            for slots, sign in ((batch.s[sel], -1), (batch.t[sel], 1), (batch.s2[sel], -1),
                                (batch.t2[sel], 1)):
                use = slots >= 0
                r = rows[slots[use]]
                np.add.at(rc, (idx[use], r, a[use]), sign)
                np.add.at(rc, (idx[use], r, b[use]), -sign)
                if edge is not None:
                    w = edge[slots[use]]
                    np.add.at(ec, (idx[use], a[use]), sign * w)
                    np.add.at(ec, (idx[use], b[use]), -sign * w)
            out[sel] = scores(cov, rc, ec)
            for k, j in enumerate(sel):
                pending[int(j)] = (cov[k], rc[k], ec[k])
            return out

        def commit(batch: _Batch, i: int) -> None:
            cov, rc, ec = pending[i]
            fld.accept(int(batch.a[i]), int(batch.b[i]), int(batch.s[i]), int(batch.t[i]),
                       int(batch.s2[i]), int(batch.t2[i]), cov)
            state["rc"], state["ec"] = rc, ec

        current = float(scores(fld.cov, state["rc"], state["ec"]))
        self._anneal(budget, partner, orbit_share, current, score, commit)


@dataclass
class _Batch:
    """Moves of one annealing step: device a gives slots (s, s2) to b for (t, t2)."""

    s: IntArray
    t: IntArray
    s2: IntArray
    t2: IntArray
    a: IntArray
    b: IntArray
    d: FloatArray
    trial: FloatArray


def evaluate_light(prob: Problem, geo: _Geometry, assign: IntArray, sums: FloatArray) -> Keys:
    """Moment keys only (for progress reports during the moment stages)."""
    lin, quad, hi = geo.worst(sums)
    return Keys(lin, quad, hi, 0.0, float("nan"), _tracks(prob, assign))


# ---------------------------------------------------------------- driver

def _one_start(prob: Problem, sym: tuple[IntArray, IntArray] | None, start: int,
               seed: int, deadline: float, progress: Callable[[str, Keys], None] | None,
               bound: float, stop: object = None) -> tuple[IntArray, Keys, int, str]:
    """One annealing run from its own start: (assignment, keys, batches, how it stopped)."""
    geo = _Geometry(prob)
    sub = np.random.default_rng(seed)
    budget = int(np.clip(30 * prob.n_slots, 3000, 30000))
    if sym is not None:
        assign, partner = sym
        if start:
            assign = _shuffle_orbits(assign, partner, sub)
    else:
        partner = None
        assign = _greedy_start(prob, sub)
    ann = _Anneal(prob, geo, assign, sub, deadline, progress, stop)
    weighted = prob.objective == "weighted"
    exact = sym is not None and float(geo.worst_batch(ann.sums)[0]) <= bound * (1 + 1e-9)
    if not exact and not weighted:
        ann.run_moments("linear", budget, None, None, lin_floor=bound)
    lin_cap = float(geo.terms(ann.sums)[0])
    share = 0.5 if weighted and sym is not None else (1.0 if exact else 0.0)
    if ann.stopped == "converged":
        ann.run_moments("weighted" if weighted else "quadratic", budget, partner, lin_cap,
                        share)
    lin_key, quad_key = (float(x) for x in geo.terms(ann.sums)[:2])
    quad_cap = (lin_key * prob.linear_ppm_per_um if weighted else 0.0) + quad_key \
        + prob.tie_ppm
    if ann.stopped == "converged" and (prob.corr_sigma_ppm > 0 or any(prob.open_edge or ())):
        ann.run_balance(budget // 2, lin_cap, quad_cap, partner, share)
    return ann.assign, evaluate(prob, ann.assign), ann.iterations, ann.stopped


def _child(send: Any, prob: Problem, sym: tuple[IntArray, IntArray] | None, start: int,
           seed: int, deadline: float, bound: float, stop: object) -> None:
    """Worker process body: one start, result sent back through the pipe."""
    import signal

    # the parent turns Ctrl-C into a stop request; the worker must not die of it
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    send.send(_one_start(prob, sym, start, seed, deadline, None, bound, stop))
    send.close()


def search(prob: Problem, *, seed: int = 0, time_limit_s: float = 30.0, starts: int = 2,
           progress: Callable[[str, Keys], None] | None = None,
           parallel: bool | None = None) -> SearchOutcome:
    """Find the best assignment of ``prob`` under its objective.

    Small cores are enumerated. Otherwise ``starts`` annealing runs with seeds drawn from
    ``seed`` run across the CPU cores (``parallel`` None: when the core is large enough to
    pay for a worker process) and the best by the ranked keys wins, ties to the lower start;
    the result does not depend on how the starts were spread. Stops when every stage has
    converged or spent its deterministic budget, at the time limit, or on Ctrl-C; the best
    assignment so far is returned each time.
    """
    t0 = time.monotonic()
    deadline = t0 + time_limit_s
    geo = _Geometry(prob)
    rng = np.random.default_rng(seed)
    bound = _linear_bound(prob)

    if _n_assignments(list(prob.counts), prob.n_slots) <= EXHAUSTIVE_LIMIT:
        assign, keys, found = _exhaustive(prob, geo)
        return SearchOutcome(assign, keys, keys.linear_um, True, "exhaustive",
                             elapsed_s=time.monotonic() - t0, archive=found)

    sym = symmetric_assignment(prob)
    method = "symmetric orbits + annealing"
    if sym is None:
        near = near_symmetric_assignments(prob)
        if near:
            sym = min(near, key=lambda ap: evaluate(prob, ap[0]).ranked(prob))
            method = "near-symmetric orbits + annealing"
        else:
            method = "annealing"
    seeds = [int(rng.integers(1 << 62)) for _ in range(starts)]
    cpus = len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else 1
    if parallel is None:
        parallel = prob.n_slots >= 96 and starts > 1 and cpus > 1
    results: list[tuple[IntArray, Keys, int, str] | None] = [None] * starts
    stopped = "converged"
    if parallel:
        import multiprocessing as mp

        ctx = mp.get_context("fork")
        stop_event = ctx.Event()
        children = []
        for i in range(1, starts):
            recv, send = ctx.Pipe(duplex=False)
            proc = ctx.Process(target=_child, args=(send, prob, sym, i, seeds[i], deadline,
                                                    bound, stop_event), daemon=True)
            proc.start()
            send.close()
            children.append((i, proc, recv))
        try:
            first = _one_start(prob, sym, 0, seeds[0], deadline, progress, bound)
            results[0] = first
            if first[3] == "interrupted":
                stop_event.set()
        except KeyboardInterrupt:
            stop_event.set()
            stopped = "interrupted"
        for i, proc, recv in children:
            while True:
                try:
                    results[i] = recv.recv() if proc.is_alive() or recv.poll() else None
                    break
                except KeyboardInterrupt:
                    stop_event.set()
                except EOFError:
                    break
            proc.join()
    else:
        for i in range(starts):
            results[i] = _one_start(prob, sym, i, seeds[i], deadline, progress, bound)
            res = results[i]
            if res is not None and res[3] != "converged":
                break
    done = [r for r in results if r is not None]
    if not done:
        assign = sym[0] if sym is not None else _greedy_start(prob, rng)
        done = [(assign, evaluate(prob, assign), 0, "interrupted")]
    for r in done:
        if r[3] != "converged":
            stopped = r[3] if stopped == "converged" else stopped
    best_i = min(range(len(done)), key=lambda i: (done[i][1].ranked(prob), i))
    assign, keys = done[best_i][0], done[best_i][1]
    proven = keys.linear_um <= bound + 1e-9 * max(1.0, bound)
    return SearchOutcome(assign, keys, bound if not proven else keys.linear_um, proven, method,
                         stopped=stopped, elapsed_s=time.monotonic() - t0,
                         iterations=sum(r[2] for r in done),
                         archive=[(r[0], r[1]) for r in done])


def _shuffle_orbits(assign: IntArray, partner: IntArray, rng: np.random.Generator) -> IntArray:
    """Another symmetric start: the same whole orbits dealt to devices in a random order
    (slots whose mirror holds another device stay where they are)."""
    out = assign.copy()
    orbits = [s for s in range(len(assign)) if partner[s] > s and assign[partner[s]] == assign[s]]
    labels = [assign[s] for s in orbits]
    rng.shuffle(labels)
    for s, d in zip(orbits, labels, strict=True):
        out[s] = out[partner[s]] = d
    return out


def _greedy_start(prob: Problem, rng: np.random.Generator) -> IntArray:
    """Units dealt over slots from the centre outward in proportion to counts."""
    u, v = core_coords(prob.rows, prob.cols)
    order = np.lexsort((rng.random(prob.n_slots), u * u + v * v))
    total = sum(prob.counts)
    given = [0] * prob.n_dev
    assign = np.full(prob.n_slots, -1, dtype=np.int64)
    for i in range(total):
        d = max(range(prob.n_dev), key=lambda d: ((i + 1) * prob.counts[d] / total - given[d]
                                                  if given[d] < prob.counts[d] else -1e9, -d))
        given[d] += 1
        assign[order[i]] = d
    return assign
