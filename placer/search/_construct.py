"""Starting arrangements: point-symmetric orbits, near-symmetric variants, a fair deal.

A point-symmetric arrangement (each device on pairs of slots mirrored through a centre,
an odd device on the centre slot) cancels every odd moment by construction, so the
linear term starts at zero; the deal gives every device a share of every radius, a good
start for the second moment.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from placer.search._compiled import Compiled, orbit_assignment
from placer.search._problem import Problem

__all__ = ["symmetric_assignment", "near_symmetric_assignments", "deal", "greedy_start",
           "random_start", "starts", "core_coords"]

IntArray = NDArray[np.int64]

#: Centres of symmetry tried, in half pitches from the core centre (each way).
CENTRE_SHIFTS = 3


def core_coords(rows: int, cols: int) -> tuple[IntArray, IntArray]:
    """Doubled integer offsets (u, v) of each slot from the core centre, y pointing up.

    Slot s = r * cols + c has u = 2c - (cols - 1), v = (rows - 1) - 2r.

    Parameters
    ----------
    rows, cols : int
        The core's shape.

    Returns
    -------
    u : ndarray of int64
        Per slot in reading order, twice its x offset in pitches (an exact integer).
    v : ndarray of int64
        The same for y.

    Examples
    --------
    >>> core_coords(1, 4)[0].tolist()
    [-3, -1, 1, 3]
    """
    r, c = np.divmod(np.arange(rows * cols), cols)
    return (2 * c - (cols - 1)).astype(np.int64), ((rows - 1) - 2 * r).astype(np.int64)


def deal(counts: list[int] | tuple[int, ...], total: int | None = None) -> list[int]:
    """Device sequence that spreads each device evenly (largest remainder, ties by index).

    Parameters
    ----------
    counts : sequence of int
        Units of each device.
    total : int, optional
        Length of the sequence (default: every unit).

    Returns
    -------
    list of int
        Device ids; at each position the device furthest behind its share comes next.

    Examples
    --------
    >>> deal([2, 2])
    [0, 1, 0, 1]
    >>> deal([1, 2, 1])
    [1, 0, 2, 1]
    """
    total = sum(counts) if total is None else total
    want = np.array(counts, dtype=np.int64)
    given = np.zeros(len(counts), dtype=np.int64)
    out = []
    for i in range(total):
        # the device furthest behind its share; ties to the lowest index (argmax: first)
        lag = np.where(given < want, (i + 1) * want / total - given, -1e9)
        d = int(np.argmax(lag))
        given[d] += 1
        out.append(d)
    return out


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
    shifts = sorted(((du, dv) for du in range(-CENTRE_SHIFTS, CENTRE_SHIFTS + 1)
                     for dv in range(-CENTRE_SHIFTS, CENTRE_SHIFTS + 1)),
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
    for (_, s, p), d in zip(orbits, deal(need), strict=False):
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


def greedy_start(comp: Compiled, rng: np.random.Generator) -> IntArray:
    """A starting state (per orbit; spare = n_dev) that obeys orbit sizes and row bands.

    First the units are dealt over the orbits from the centre outward in proportion to
    what each device has left; if that strands a device (its allowed orbits taken), the
    devices with the fewest allowed orbits are placed first instead. Raises
    InfeasibleError when no state exists.
    """
    r2 = (comp.orb_m[:, 3] + comp.orb_m[:, 5]) / np.maximum(comp.orb_size, 1)
    order = np.lexsort((rng.random(comp.n_orb), r2))
    dev = _deal_orbits(comp, order)
    if dev is None:
        dev = _tight_first(comp, order)
    if dev is None:
        from placer.errors import InfeasibleError

        raise InfeasibleError("no arrangement fits the pins, row bands, symmetry and counts "
                        "together; loosen one of them")
    return dev


def random_start(comp: Compiled, rng: np.random.Generator) -> IntArray:
    """A state drawn at random: the devices' units shuffled over the orbits when every
    orbit is one slot open to every device; otherwise a deal with random tie-breaks."""
    n_dev = comp.prob.n_dev
    every = (1 << (n_dev + 1)) - 1 if n_dev < 62 else -1
    if (comp.n_orb and np.all(comp.orb_size == 1) and n_dev < 62
            and np.all((comp.orb_allow & every) == every)):
        units = np.repeat(np.arange(n_dev + 1, dtype=np.int64), comp.left)
        return rng.permutation(units)
    return greedy_start(comp, rng)


def _allows(comp: Compiled, o: int, d: int) -> bool:
    return bool((int(comp.orb_allow[o]) >> d) & 1)


def _deal_orbits(comp: Compiled, order: IntArray) -> IntArray | None:
    n_dev = comp.prob.n_dev
    left = comp.left.astype(np.int64).copy()
    share = comp.left[:n_dev].astype(np.int64)
    units = int(share.sum())
    total = max(units, 1)
    given = np.zeros(n_dev, dtype=np.int64)
    bits = np.minimum(np.arange(n_dev, dtype=np.int64), 63)   # masks past 62 devices: all -1
    placed = 0
    dev_of = np.full(comp.n_orb, n_dev, dtype=np.int64)
    for o in order:
        k = int(comp.orb_size[o])
        mine = left[:n_dev]
        ok = ((mine >= k) & (((int(comp.orb_allow[o]) >> bits) & 1) == 1)
              & ((k == 1) | (mine % 2 == 0) | (mine > 2)))
        has = bool(ok.any())
        if not has or placed >= units:
            if left[n_dev] < k or not _allows(comp, int(o), n_dev):
                if not has:
                    return None
            else:
                left[n_dev] -= k
                continue
        # the allowed device furthest behind its share; ties to the lowest index
        lag = np.where(ok, (placed + k) * share / total - given, -np.inf)
        d = int(np.argmax(lag))
        dev_of[o] = d
        left[d] -= k
        given[d] += k
        placed += k
    return dev_of if not left.any() else None


def _tight_first(comp: Compiled, order: IntArray) -> IntArray | None:
    """Devices with the fewest allowed orbits first, each taking (innermost first) one
    single-slot orbit if its count is odd, then mirrored pairs, then single slots."""
    n_dev = comp.prob.n_dev
    left = [int(x) for x in comp.left]
    dev_of = np.full(comp.n_orb, -1, dtype=np.int64)
    room = [sum(1 for o in order if _allows(comp, int(o), d)) for d in range(n_dev)]

    def take(d: int, size: int, most: int) -> int:
        got = 0
        for o in order:
            if got >= most:
                break
            if dev_of[o] < 0 and comp.orb_size[o] == size and _allows(comp, int(o), d):
                dev_of[o] = d
                got += 1
        return got * size

    for d in sorted(range(n_dev), key=lambda d: (room[d], d)):
        if left[d] % 2:
            left[d] -= take(d, 1, 1)
        left[d] -= take(d, 2, left[d] // 2)
        left[d] -= take(d, 1, left[d])
        if left[d]:
            return None
    for o in order:
        if dev_of[o] < 0:
            dev_of[o] = n_dev
            left[n_dev] -= int(comp.orb_size[o])
    return dev_of if left[n_dev] == 0 else None


def starts(comp: Compiled, rng: np.random.Generator) -> list[tuple[str, IntArray]]:
    """Named starting states (per orbit): the constructions that fit, else a deal."""
    prob = comp.prob
    out: list[tuple[str, IntArray]] = []
    plain = (prob.usable is None and not prob.pinned and prob.symmetry == "none"
             and prob.device_rows is None)
    if plain:
        sym = symmetric_assignment(prob)
        if sym is not None:
            out.append(("symmetric orbits", orbit_assignment(comp, sym[0])))
        else:
            for assign, _ in near_symmetric_assignments(prob):
                out.append(("near-symmetric orbits", orbit_assignment(comp, assign)))
    out.append(("deal", greedy_start(comp, rng)))
    return [(name, dev) for name, dev in out if _valid(comp, dev)]


def _valid(comp: Compiled, dev_of: IntArray) -> bool:
    """True if the state gives every device (and the spare) exactly its orbit share."""
    got = np.bincount(dev_of, weights=comp.orb_size, minlength=comp.prob.n_dev + 1)
    return bool(np.array_equal(got.astype(np.int64), comp.left))
