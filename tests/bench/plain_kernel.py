"""A plain compiled Metropolis kernel: a speed yardstick for this project's search.

    python tests/bench/plain_kernel.py            # self-check + moves/s on the 10-bit array

``plain_kernel.c`` (next to this file) is the obvious C implementation of the swap
annealer in the benchmark contract: per-device running sums, recompute only the pairs
of the two swapped devices, plain scans for the max and mean quadratic term.  This
module compiles it with ``cc -O2 -shared -fPIC`` into a temporary directory (cached
by the source's hash), loads it with ctypes and exposes:

* ``run(rows, cols, pitch_um, dev, n_moves, seed, lin_cap, ...)`` -> dict with
  ``tried``, ``accepted``, ``best_quad``, ``seconds`` (kernel loop only) and ``dev``
  (the best state);
* ``terms(rows, cols, pitch_um, dev, n_dev, g2half)`` -> ``(lin, quad)``: every
  pair's terms recomputed with numpy from the raw slot positions, pairs (a, b),
  a < b, in row-major upper-triangle order;
* ``binary_array_start(rows, cols, counts, seed)``: a centrally symmetric start
  state for a binary-weighted array (see its docstring).

``pitch_um`` is one number (square slots) or a pair ``(hx, hy)``.
"""

from __future__ import annotations

import ctypes
import hashlib
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

SOURCE = Path(__file__).resolve().with_name("plain_kernel.c")
CFLAGS = ["-std=c99", "-O2", "-shared", "-fPIC"]

_lib = None


def _build() -> Path:
    """Compile the kernel once per source hash; reuse the shared object after that."""
    text = SOURCE.read_bytes()
    key = hashlib.sha256(text + " ".join(CFLAGS).encode()).hexdigest()[:16]
    out_dir = Path(tempfile.gettempdir()) / f"plain_kernel_{key}"
    so = out_dir / "plain_kernel.so"
    if so.exists():
        return so
    out_dir.mkdir(parents=True, exist_ok=True)
    tmp = out_dir / f"plain_kernel.{os.getpid()}.so"
    cc = os.environ.get("CC", "cc")
    subprocess.run([cc, *CFLAGS, "-o", str(tmp), str(SOURCE), "-lm"], check=True)
    os.replace(tmp, so)  # atomic: concurrent builders never load a half-written file
    return so


def _kernel():
    global _lib
    if _lib is None:
        lib = ctypes.CDLL(str(_build()))
        f = lib.plain_anneal
        i64, dbl = ctypes.c_int64, ctypes.c_double
        f.restype = i64
        f.argtypes = [
            i64, i64, dbl, dbl, i64,            # rows, cols, hx, hy, n_dev
            ctypes.POINTER(i64),                # dev (in/out)
            i64, ctypes.c_uint64,               # n_moves, seed
            dbl, dbl, dbl, dbl, dbl,            # lin_cap, lam, t0, t_end, g2half
            ctypes.POINTER(dbl),                # out[4]
        ]
        _lib = lib
    return _lib


def _pitch(pitch_um) -> tuple[float, float]:
    if np.ndim(pitch_um) == 0:
        return float(pitch_um), float(pitch_um)
    hx, hy = pitch_um
    return float(hx), float(hy)


_ERRORS = {-1: "bad arguments", -2: "start state breaks lin_cap", -3: "out of memory"}


def run(rows, cols, pitch_um, dev, n_moves, seed, lin_cap, lam=0.1, t_end=1e-3,
        g2half=0.01, *, t0=0.0, n_dev=None) -> dict:
    """Anneal ``dev`` (rows*cols device ids) for ``n_moves`` tried swaps.

    ``t0 <= 0`` sets the start temperature from the first 16 uphill steps.
    ``n_dev`` defaults to ``max(dev) + 1``.  Returns the best state found.
    """
    hx, hy = _pitch(pitch_um)
    state = np.ascontiguousarray(np.asarray(dev, dtype=np.int64).reshape(-1)).copy()
    if state.size != rows * cols:
        raise ValueError(f"dev has {state.size} entries, grid has {rows * cols}")
    if n_dev is None:
        n_dev = int(state.max()) + 1
    out = (ctypes.c_double * 4)()
    rc = _kernel().plain_anneal(
        rows, cols, hx, hy, n_dev,
        state.ctypes.data_as(ctypes.POINTER(ctypes.c_int64)),
        int(n_moves), int(seed) & (2**64 - 1),
        float(lin_cap), float(lam), float(t0), float(t_end), float(g2half), out)
    if rc != 0:
        raise ValueError(f"plain_anneal failed ({rc}): {_ERRORS.get(rc, 'unknown')}")
    return {
        "tried": int(out[1]),
        "accepted": int(out[2]),
        "best_quad": float(out[0]),
        "seconds": float(out[3]),
        "dev": state.reshape(np.shape(dev)),
    }


def terms(rows, cols, pitch_um, dev, n_dev, g2half):
    """Every pair's (lin, quad), recomputed from raw slot positions with numpy."""
    hx, hy = _pitch(pitch_um)
    dev = np.asarray(dev, dtype=np.int64).reshape(-1)
    r, c = np.divmod(np.arange(rows * cols), cols)
    pos = np.stack([(c - (cols - 1) / 2) * hx, (r - (rows - 1) / 2) * hy], axis=1)
    centre = pos.mean(axis=0)  # the origin here, since every slot holds a unit
    mu = np.empty((n_dev, 2))
    mom = np.empty((n_dev, 2, 2))
    for d in range(n_dev):
        p = pos[dev == d]
        if len(p) == 0:
            raise ValueError(f"device {d} has no units")
        mu[d] = p.mean(axis=0)
        q = p - centre
        mom[d] = q.T @ q / len(p)
    a, b = np.triu_indices(n_dev, k=1)
    lin = np.linalg.norm(mu[a] - mu[b], axis=1)
    quad = g2half * np.linalg.norm((mom[a] - mom[b]).reshape(len(a), 4), axis=1)
    return lin, quad


def binary_array_start(rows, cols, counts, seed=0) -> np.ndarray:
    """A centrally symmetric start for counts like 2^k, ..., 2, 1, 1 (last two odd).

    The two odd devices take the two slots side by side just below the centre (their
    centroids are one pitch apart).  The mirror images of those two slots go to the
    largest device, and every other slot pairs with its mirror image; the mirror
    pairs are dealt out at random, so each even device's centroid is the origin and
    the largest device's is within 1/n of it.  At unit pitch max lin is then exactly
    1.0, the distance between the two odd devices.
    """
    counts = list(counts)
    if rows % 2 or cols % 2 or sum(counts) != rows * cols:
        raise ValueError("needs an even x even grid filled exactly")
    odd = [d for d, n in enumerate(counts) if n % 2]
    if len(odd) != 2 or any(counts[d] != 1 for d in odd):
        raise ValueError("needs exactly two single-unit devices, the rest even")
    big = int(np.argmax(counts))
    rng = np.random.default_rng(seed)
    n = rows * cols
    dev = np.full(n, -1, dtype=np.int64)
    def mirror(i: int) -> int:  # (r, c) -> (rows-1-r, cols-1-c)
        return n - 1 - i

    s1 = (rows // 2 - 1) * cols + cols // 2 - 1
    s2 = s1 + 1
    dev[s1], dev[s2] = odd
    dev[mirror(s1)] = dev[mirror(s2)] = big
    left = [counts[d] // 2 for d in range(len(counts))]
    left[big] -= 1
    free = [i for i in range(n // 2) if dev[i] < 0 and dev[mirror(i)] < 0]
    order = rng.permutation(len(free))
    owners = np.repeat(np.arange(len(counts)), left)
    assert len(owners) == len(free)
    for k, d in zip(order, owners, strict=True):
        i = free[k]
        dev[i] = dev[mirror(i)] = d
    assert (dev >= 0).all()
    return dev


# ---------------------------------------------------------------------------
# self-check


def _reference(rows, cols, hx, hy, n_dev, dev, n_moves, seed, lin_cap, lam, t0,
               t_end, g2half):
    """The contract in pure Python, same PRNG and same float order as the C kernel."""
    M = 2**64 - 1

    def rotl(x, k):
        return ((x << k) | (x >> (64 - k))) & M

    x = seed & M
    s = []
    for _ in range(4):
        x = (x + 0x9E3779B97F4A7C15) & M
        z = x
        z = ((z ^ (z >> 30)) * 0xBF58476D1CE4E5B9) & M
        z = ((z ^ (z >> 27)) * 0x94D049BB133111EB) & M
        s.append(z ^ (z >> 31))

    def nxt():
        res = (rotl((s[1] * 5) & M, 7) * 9) & M
        t = (s[1] << 17) & M
        s[2] ^= s[0]
        s[3] ^= s[1]
        s[1] ^= s[2]
        s[0] ^= s[3]
        s[2] ^= t
        s[3] = rotl(s[3], 45)
        return res

    import math

    n = rows * cols
    dev = list(dev)
    U = [2 * (i % cols) - (cols - 1) for i in range(n)]
    V = [2 * (i // cols) - (rows - 1) for i in range(n)]
    S = [[0] * 6 for _ in range(n_dev)]

    def add(d, i, sg):
        u, v = U[i], V[i]
        for k, m in enumerate((1, u, v, u * u, u * v, v * v)):
            S[d][k] += sg * m

    def lin(a, b):
        A, B = S[a], S[b]
        dx = 0.5 * hx * (A[1] / A[0] - B[1] / B[0])
        dy = 0.5 * hy * (A[2] / A[0] - B[2] / B[0])
        return math.sqrt(dx * dx + dy * dy)

    def quad(a, b):
        A, B = S[a], S[b]
        mxx = 0.25 * hx * hx * (A[3] / A[0] - B[3] / B[0])
        mxy = 0.25 * hx * hy * (A[4] / A[0] - B[4] / B[0])
        myy = 0.25 * hy * hy * (A[5] / A[0] - B[5] / B[0])
        return g2half * math.sqrt(mxx * mxx + 2.0 * mxy * mxy + myy * myy)

    for i in range(n):
        add(dev[i], i, 1)
    pairs = [(a, b) for a in range(n_dev) for b in range(a + 1, n_dev)]

    def energy():
        qs = [quad(a, b) for a, b in pairs]
        mx, sm = 0.0, 0.0
        for q in qs:
            mx = q if q > mx else mx
            sm += q
        return mx, mx + lam * sm / len(pairs), max(lin(a, b) for a, b in pairs)

    cur_max, cur_e, _ = energy()
    best = (cur_max, cur_e, list(dev))
    log_step = math.log(t_end) / (n_moves - 1)
    auto, pos = t0 <= 0, []
    tried = accepted = 0
    for it in range(n_moves):
        while True:
            i, j = nxt() % n, nxt() % n
            if dev[i] != dev[j]:
                break
        tried += 1
        a, b = dev[i], dev[j]
        for d, slot, sg in ((a, i, -1), (a, j, 1), (b, j, -1), (b, i, 1)):
            add(d, slot, sg)
        new_max, new_e, mlin = energy()
        acc = False
        if mlin <= lin_cap:
            de = new_e - cur_e
            if de <= 0:
                acc = True
            else:
                if auto:
                    if len(pos) < 16:
                        pos.append(de)
                    if len(pos) >= 16:
                        t0 = sum(pos) / 16.0
                        auto = False
                        temp = t0 * math.exp(log_step * it)
                    else:
                        temp = abs(cur_e)
                else:
                    temp = t0 * math.exp(log_step * it)
                acc = temp > 0 and (nxt() >> 11) * 2.0**-53 < math.exp(-de / temp)
        if acc:
            dev[i], dev[j] = b, a
            accepted += 1
            cur_max, cur_e = new_max, new_e
            if cur_max < best[0] or (cur_max == best[0] and cur_e < best[1]):
                best = (cur_max, cur_e, list(dev))
        else:
            for d, slot, sg in ((a, j, -1), (a, i, 1), (b, i, -1), (b, j, 1)):
                add(d, slot, sg)
    return tried, accepted, best[0], np.array(best[2])


def _check_run(rows, cols, pitch, start, n_dev, res, lin_cap, g2half):
    lin0, quad0 = terms(rows, cols, pitch, start, n_dev, g2half)
    lin1, quad1 = terms(rows, cols, pitch, res["dev"], n_dev, g2half)
    want = quad1.max()
    # 1e-9 relative; plus an absolute floor at the rounding level of the moments, for
    # a perfect state where the kernel's exact sums give 0 and numpy gives ~1e-17
    hx, hy = _pitch(pitch)
    floor = 1e-15 * g2half * max(hx, hy) ** 2 * max(rows, cols) ** 2
    assert abs(res["best_quad"] - want) <= 1e-9 * abs(want) + floor, (res["best_quad"], want)
    assert np.array_equal(np.bincount(np.ravel(start), minlength=n_dev),
                          np.bincount(np.ravel(res["dev"]), minlength=n_dev)), \
        "units per device changed"
    assert lin1.max() <= lin_cap + 1e-12, (lin1.max(), lin_cap)
    assert res["best_quad"] <= quad0.max() * (1 + 1e-12), "best is worse than the start"
    assert 0 <= res["accepted"] <= res["tried"]
    return quad0.max(), want


def self_check() -> None:
    rng = np.random.default_rng(12345)

    # 1. random small cases, square and non-square pitch, fixed and automatic t0
    for case in range(12):
        rows, cols = int(rng.integers(3, 9)), int(rng.integers(3, 9))
        n_dev = int(rng.integers(2, 7))
        n = rows * cols
        start = np.concatenate([np.arange(n_dev), rng.integers(0, n_dev, n - n_dev)])
        rng.shuffle(start)
        pitch = 1.0 if case % 2 == 0 else (float(rng.uniform(0.5, 2)), float(rng.uniform(0.5, 2)))
        g2half = float(rng.choice([0.01, 1.0]))
        lin0, _ = terms(rows, cols, pitch, start, n_dev, g2half)
        # 1 + 1e-12: numpy's centroids round differently from the kernel's exact sums
        lin_cap = float(lin0.max()) * float(rng.choice([1.0 + 1e-12, 1.5]))
        t0 = 0.0 if case % 3 else 0.05
        res = run(rows, cols, pitch, start, 20000, seed=case, lin_cap=lin_cap, g2half=g2half,
                  t0=t0, n_dev=n_dev)
        q0, q1 = _check_run(rows, cols, pitch, start, n_dev, res, lin_cap, g2half)
    print(f"random small cases: 12 ok (last: {rows}x{cols}, {n_dev} devices, "
          f"max quad {q0:.4g} -> {q1:.4g}, {res['accepted']}/{res['tried']} accepted)")

    # 2. move-for-move agreement with a pure-Python rendering of the contract
    for case, (rows, cols, n_dev, pitch, t0) in enumerate(
            [(4, 5, 4, (1.0, 1.0), 0.0), (5, 6, 5, (0.7, 1.3), 0.02), (6, 6, 3, (1.0, 1.0), 0.0)]):
        n = rows * cols
        start = np.concatenate([np.arange(n_dev), rng.integers(0, n_dev, n - n_dev)])
        rng.shuffle(start)
        lin_cap = float(terms(rows, cols, pitch, start, n_dev, 1.0)[0].max()) * 1.2
        args = (rows, cols, pitch[0], pitch[1], n_dev, start, 3000, 77 + case, lin_cap,
                0.1, t0, 1e-3, 1.0)
        ref = _reference(*args)
        res = run(rows, cols, pitch, start, 3000, 77 + case, lin_cap, 0.1, 1e-3, 1.0,
                  t0=t0, n_dev=n_dev)
        got = (res["tried"], res["accepted"], res["best_quad"], res["dev"])
        assert got[:3] == ref[:3] and np.array_equal(got[3], ref[3]), (got[:3], ref[:3])
    print("pure-Python replay: 3 cases identical (tried, accepted, best_quad, state)")

    # 3. the 10-bit binary-weighted capacitor array, 32 x 32, unit pitch
    rows = cols = 32
    counts = [512, 256, 128, 64, 32, 16, 8, 4, 2, 1, 1]
    n_dev, lin_cap, g2half, n_moves = len(counts), 1.0, 0.01, 2_000_000
    rates = []
    for seed in (1, 2, 3):
        start = binary_array_start(rows, cols, counts, seed)
        lin0, quad0 = terms(rows, cols, 1.0, start, n_dev, g2half)
        assert lin0.max() <= lin_cap + 1e-12, lin0.max()
        t = time.perf_counter()
        res = run(rows, cols, 1.0, start, n_moves, seed, lin_cap, g2half=g2half, n_dev=n_dev)
        wall = time.perf_counter() - t
        q0, q1 = _check_run(rows, cols, 1.0, start, n_dev, res, lin_cap, g2half)
        rate = res["tried"] / res["seconds"]
        rates.append(rate)
        print(f"10-bit 32x32 seed {seed}: {res['tried']} moves in {res['seconds']:.3f} s "
              f"(wall {wall:.3f} s) = {rate / 1e6:.2f} M moves/s; "
              f"accepted {res['accepted']}; max quad {q0:.6g} -> {q1:.6g}")
    print(f"10-bit 32x32: median {np.median(rates) / 1e6:.2f} M moves/s "
          f"(best {max(rates) / 1e6:.2f}) ; all checks passed")


if __name__ == "__main__":
    sys.exit(self_check())
