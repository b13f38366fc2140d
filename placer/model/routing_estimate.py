"""Routing-effort and diffusion estimates of a pattern (no geometry beyond the slot grid)."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from numpy.typing import NDArray

from placer.io.pattern import Pattern, unit_positions

__all__ = ["Routing", "estimate_routing", "row_tracks", "diffusion_breaks", "orient_row",
           "finger_terminals", "FingerNets", "mos_finger_nets", "dummy_net_id", "facing",
           "diffusion_joins", "pair_row", "NO_NET", "all_paired",
           "unpaired_in_row"]

#: (source net, drain net) of each MOS device as integers; None: a mirror's nets (shared
#: source, own drain).
FingerNets = tuple[tuple[int, int], ...] | None


@dataclass(frozen=True)
class Routing:
    """Routing effort: tracks per row, and per device its half-perimeter and tree length."""

    row_tracks: tuple[int, ...]
    total_tracks: int
    half_perimeter_um: dict[str, float]
    tree_length_um: dict[str, float]
    total_tree_um: float
    diffusion_breaks: int | None


def row_tracks(ids: NDArray[np.int_]) -> NDArray[np.int_]:
    """Distinct device nets in each row: one horizontal track per net.

    Examples
    --------
    >>> row_tracks(np.array([[0, 1, 1, -1], [2, 2, 2, 2]])).tolist()
    [2, 1]
    """
    n_dev = int(ids.max()) + 1 if ids.max() >= 0 else 0
    present = np.zeros((ids.shape[0], max(n_dev, 1)), dtype=bool)
    r, c = np.nonzero(ids >= 0)
    present[r, ids[r, c]] = True
    return present.sum(axis=1).astype(int)


def mos_finger_nets(spec: Any) -> FingerNets:
    """The spec's (source, drain) nets of each MOS device, numbered by first appearance.

    Examples
    --------
    >>> from placer.jobs.load import parse_spec
    >>> mos_finger_nets(parse_spec("[devices]\\nA = 2\\nB = 2\\n"))
    ((0, 1), (0, 2))
    """
    ids: dict[str, int] = {}
    return tuple((ids.setdefault(n["source"], len(ids)), ids.setdefault(n["drain"], len(ids)))
                 for n in spec.nets)


def dummy_net_id(spec: Any) -> int:
    """The dummy net's number among :func:`mos_finger_nets`' (a new one when no device
    terminal's diffusion is on it).

    Examples
    --------
    >>> from placer.jobs.load import parse_spec
    >>> dummy_net_id(parse_spec("[devices]\\nA = 2\\nB = 2\\n"))
    0
    """
    ids: dict[str, int] = {}
    for n in spec.nets:
        ids.setdefault(n["source"], len(ids))
        ids.setdefault(n["drain"], len(ids))
    return ids.get(spec.dummy_net, len(ids))


#: The net of an empty slot's sides: equal to no net, not even its own kind.
NO_NET = -(10**9)


def facing(ids: NDArray[np.int_], orient: NDArray[np.int8], nets: FingerNets,
           dummy: int) -> tuple[NDArray[np.int_], NDArray[np.int_]]:
    """(left, right) diffusion net of every slot: a finger's by its orientation, a dummy's
    ``dummy`` on both sides (every terminal of a dummy is on the dummy net), an empty
    slot's ``NO_NET`` (and a second, different one on its right) so that it joins nothing.

    Examples
    --------
    >>> left, right = facing(np.array([[-1, 0, 1, -2]]), np.array([[0, -1, 1, 0]]), None, -1)
    >>> left.tolist(), right[0, :3].tolist()
    ([[-1, 0, -1, -1000000000]], [-1, -1, 1])
    """
    left = np.full(ids.shape, NO_NET, dtype=np.int64)
    right = np.full(ids.shape, NO_NET - 1, dtype=np.int64)
    for (r, c), d in np.ndenumerate(ids):
        if d >= 0:
            left[r, c], right[r, c] = finger_terminals(int(d), int(orient[r, c]), nets)
        elif d == -1:                                   # DUMMY
            left[r, c] = right[r, c] = dummy
    return left, right


def _edge_weight(a: int, b: int) -> tuple[int, int]:
    """(active fingers covered, active pairs) of joining neighbours with ids a and b."""
    n = (a >= 0) + (b >= 0)
    return (n, 1) if n == 2 else (n, 0)


def diffusion_joins(ids: NDArray[np.int_], orient: NDArray[np.int8], nets: FingerNets,
                    dummy: int, style: str) -> NDArray[np.bool_]:
    """Which neighbours (c, c+1) of each row share diffusion: ``joins[r, c]``.

    ``"shared"``: wherever their facing terminals are one net (two dummies too).
    ``"pairs"``: every diffusion island holds two fingers, so that each finger sees the
    same diffusion on its two sides as every other (its partner's the mirror image): of
    the neighbours that may share, the most active fingers are paired (with a finger or
    an end dummy), then the most active pairs. When some finger finds no partner (a
    device whose source and drain no neighbour shares, a row of odd length without an
    end dummy on the dummy net), no finger shares: each stands alone in an island of
    its own, which keeps them all alike too.

    Examples
    --------
    >>> ids = np.array([[-1, 1, 0, 0, 1, -1]])
    >>> orient = np.array([[0, -1, 1, -1, 1, 0]])
    >>> diffusion_joins(ids, orient, None, -1, "shared").astype(int).tolist()
    [[0, 1, 1, 1, 0]]
    >>> diffusion_joins(ids, orient, None, -1, "pairs").astype(int).tolist()
    [[0, 1, 0, 1, 0]]
    """
    left, right = facing(ids, orient, nets, dummy)
    can = right[:, :-1] == left[:, 1:]
    if style == "shared":
        return can
    out = np.zeros(can.shape, dtype=bool)
    for r in range(ids.shape[0]):
        out[r] = _row_pairs([int(v) for v in ids[r]], can[r])
    if not all_paired(ids, out):
        return np.zeros(can.shape, dtype=bool)      # every finger alone: all alike
    return out


def _row_pairs(row: list[int], can: NDArray[np.bool_]) -> NDArray[np.bool_]:
    """The joins of one row that pair the most active fingers, then the most active
    pairs (a DP over the row: the neighbours ``can`` share)."""
    n = len(row)
    out = np.zeros(max(n - 1, 0), dtype=bool)
    # best[c]: (covered, pairs) over slots 0..c-1; took[c]: edge (c-2, c-1) taken
    best: list[tuple[int, int]] = [(0, 0)] * (n + 1)
    took = [False] * (n + 1)
    for c in range(2, n + 1):
        best[c], took[c] = best[c - 1], False
        if can[c - 2] and (row[c - 2] >= 0 or row[c - 1] >= 0):
            w = _edge_weight(row[c - 2], row[c - 1])
            cand = (best[c - 2][0] + w[0], best[c - 2][1] + w[1])
            if cand > best[c]:
                best[c], took[c] = cand, True
    c = n
    while c >= 2:
        if took[c]:
            out[c - 2] = True
            c -= 2
        else:
            c -= 1
    return out


def unpaired_in_row(row: list[int], marks: list[int], nets: FingerNets, dummy: int) -> int:
    """Active fingers of one row (orientations ``marks``) that find no partner."""
    ids = np.array([row])
    left, right = facing(ids, np.array([marks], dtype=np.int8), nets, dummy)
    joins = _row_pairs(row, (right[0, :-1] == left[0, 1:]))
    paired = np.zeros(len(row), dtype=bool)
    paired[:-1] |= joins
    paired[1:] |= joins
    return int(sum(1 for x, d in enumerate(row) if d >= 0 and not paired[x]))


def all_paired(ids: NDArray[np.int_], joins: NDArray[np.bool_]) -> bool:
    """Whether every device finger shares its diffusion with a neighbour."""
    paired = np.zeros(ids.shape, dtype=bool)
    paired[:, :-1] |= joins
    paired[:, 1:] |= joins
    return bool(np.all(paired[ids >= 0]))


def pair_row(row: NDArray[np.int_], balance: dict[int, int] | None = None,
             nets: FingerNets = None, dummy: int = -1) -> tuple[list[int], int]:
    """Orientations (+1 '>', -1 '<') for one MOS row that let the most fingers share
    diffusion with exactly one neighbour (:func:`diffusion_joins` with ``"pairs"``), and
    the number of active fingers left alone.

    A dummy pairs with a finger whose facing terminal is on the dummy net. Among equally
    good choices the one that evens out each device's count of '>' and '<' (running tally
    in ``balance``) wins.

    Examples
    --------
    >>> pair_row(np.array([0, 1, 1, 0]))
    ([-1, 1, -1, 1], 0)
    >>> pair_row(np.array([-1, 0, 0, 0, -1]))[1]
    0
    """
    balance = {} if balance is None else balance
    ids = [int(v) for v in row]
    n = len(ids)

    def sides(i: int, o: int) -> tuple[int, int]:
        d = ids[i]
        if d >= 0:
            return finger_terminals(d, 1 if o else -1, nets)
        return (dummy, dummy) if d == -1 else (NO_NET, NO_NET - 1)

    opts = [(0, 1) if d >= 0 else (1,) for d in ids]
    Score = tuple[int, int]
    # val[i][(o, m)]: best (covered, pairs) over slots 0..i with slot i in orientation o
    # (0 '<', 1 '>') joined to slot i-1 (m = 1) or not (m = 0)
    val: list[dict[tuple[int, int], Score]] = []
    back: list[dict[tuple[int, int], tuple[int, int] | None]] = []
    for i in range(n):
        v: dict[tuple[int, int], Score] = {}
        b: dict[tuple[int, int], tuple[int, int] | None] = {}
        for o in opts[i]:
            if i == 0:
                v[o, 0], b[o, 0] = (0, 0), None
                continue
            prev = val[i - 1]
            key = max(prev, key=lambda k: prev[k])
            v[o, 0], b[o, 0] = prev[key], key
            left = sides(i, o)[0]
            w = _edge_weight(ids[i - 1], ids[i])
            if w[0] == 0:
                continue
            for (po, pm), pv in prev.items():
                if pm == 0 and sides(i - 1, po)[1] == left:
                    cand = (pv[0] + w[0], pv[1] + w[1])
                    if (o, 1) not in v or cand > v[o, 1]:
                        v[o, 1], b[o, 1] = cand, (po, pm)
        val.append(v)
        back.append(b)
    # trace back; at a tie, the orientation that evens out the device's tally
    last = val[-1]
    top = max(last.values())

    def pick(cands: list[tuple[int, int]], i: int) -> tuple[int, int]:
        d = ids[i]
        if d < 0 or len(cands) == 1:
            return cands[0]
        want = 1 if balance.get(d, 0) <= 0 else 0
        return next((k for k in cands if k[0] == want), cands[0])

    state = pick([k for k, s in last.items() if s == top], n - 1)
    marks = [0] * n
    for i in range(n - 1, -1, -1):
        if ids[i] >= 0:
            marks[i] = 1 if state[0] else -1
            balance[ids[i]] = balance.get(ids[i], 0) + marks[i]
        prev_state = back[i][state]
        if prev_state is None:
            break
        if i >= 1 and state[1] == 0:
            # not joined: any best state of the slot before will do; even out its tally
            before = val[i - 1]
            good = max(before.values())
            prev_state = pick([k for k, s in before.items() if s == good], i - 1)
        state = prev_state
    n_active = sum(d >= 0 for d in ids)
    return marks, n_active - top[0]


def finger_terminals(device: int, mark: int, nets: FingerNets = None) -> tuple[int, int]:
    """(left, right) diffusion net of a finger: source then drain for '>', reversed for '<'.

    Without ``nets``, -1 is a shared source and d the drain of device d.
    """
    s, d = (-1, device) if nets is None else nets[device]
    return (s, d) if mark >= 0 else (d, s)


def orient_row(row: NDArray[np.int_], balance: dict[int, int] | None = None,
               nets: FingerNets = None) -> tuple[list[int], int]:
    """Orientations (+1 '>', -1 '<') for one MOS row that need the fewest diffusion breaks.

    Neighbouring fingers share diffusion where their facing terminals are the same net
    (``nets``; by default a mirror's common source, or the drain of the same device). Dummies and
    empty slots break the diffusion on their own and constrain nothing. Among equally
    good choices the one that evens out each device's count of '>' and '<' (running tally
    in ``balance``) wins.

    Examples
    --------
    >>> orient_row(np.array([0, 1, 1, 0]))
    ([-1, 1, -1, 1], 0)
    """
    balance = {} if balance is None else balance
    ids = [int(v) for v in row]
    n = len(ids)
    # (left, right) net of each device's finger: [device][0] for '<', [device][1] for '>'
    ends = {d: (finger_terminals(d, -1, nets), finger_terminals(d, 1, nets))
            for d in set(ids) if d >= 0}
    # cost[i][o]: fewest breaks up to finger i with orientation o (index 0: '<', 1: '>')
    cost = [[0, 0] for _ in range(n)]
    back = [[-1, -1] for _ in range(n)]
    for i in range(n):
        d = ids[i]
        if i == 0:
            continue                                   # nothing before: no breaks, no link
        c0, c1 = cost[i - 1]
        arg = 0 if c0 <= c1 else 1
        if d < 0 or ids[i - 1] < 0:
            best = c0 if arg == 0 else c1
            cost[i] = [best, best]
            back[i] = [arg, arg]
            continue
        pe, de = ends[ids[i - 1]], ends[d]
        r0, r1 = pe[0][1], pe[1][1]
        for o in (0, 1):
            left = de[o][0]
            opt0 = c0 + (r0 != left)
            opt1 = c1 + (r1 != left)
            p = 0 if opt0 <= opt1 else 1
            cost[i][o] = opt0 if p == 0 else opt1
            back[i][o] = p
    # trace back, preferring the orientation that evens out the tally at each tie
    marks = [0] * n
    o = 0 if cost[-1][0] <= cost[-1][1] else 1
    if cost[-1][0] == cost[-1][1] and ids[-1] >= 0:
        o = 1 if balance.get(ids[-1], 0) <= 0 else 0
    for i in range(n - 1, -1, -1):
        if ids[i] >= 0:
            marks[i] = 1 if o else -1
            balance[ids[i]] = balance.get(ids[i], 0) + marks[i]
        o = back[i][o] if back[i][o] >= 0 else 0
    return marks, int(min(cost[-1]))


def diffusion_breaks(ids: NDArray[np.int_], orient: NDArray[np.int8],
                     nets: FingerNets = None) -> int:
    """Diffusion breaks a MOS pattern needs between neighbouring device fingers."""
    breaks = 0
    for row, marks in zip(ids, orient, strict=True):
        for i in range(1, len(row)):
            a, b = int(row[i - 1]), int(row[i])
            if a < 0 or b < 0:
                continue
            if (finger_terminals(a, int(marks[i - 1]), nets)[1]
                    != finger_terminals(b, int(marks[i]), nets)[0]):
                breaks += 1
    return breaks


#: Up to this many points, Prim's algorithm on the dense distances (no graph library to
#: load: small blocks start faster).
DENSE_PRIM_MAX = 256


def _prim(pts: NDArray[np.float64]) -> float:
    """Minimum spanning tree length by Prim's algorithm on all pairwise distances
    (Cormen et al., Introduction to Algorithms, 3rd ed., sec. 23.2)."""
    n = len(pts)
    best = np.hypot(*(pts - pts[0]).T)
    done = np.zeros(n, dtype=bool)
    done[0] = True
    total = 0.0
    for _ in range(n - 1):
        k = int(np.argmin(np.where(done, np.inf, best)))
        total += float(best[k])
        done[k] = True
        best = np.minimum(best, np.hypot(*(pts - pts[k]).T))
    return total


def spanning_tree_length(pts: NDArray[np.float64]) -> float:
    """Length (um) of the Euclidean minimum spanning tree of ``pts`` (n, 2).

    Examples
    --------
    >>> spanning_tree_length(np.array([[0.0, 0.0], [3.0, 0.0], [3.0, 4.0]]))
    7.0
    """
    n = len(pts)
    if n < 2:
        return 0.0
    if n <= DENSE_PRIM_MAX:
        return _prim(pts)
    from scipy.sparse.csgraph import connected_components, minimum_spanning_tree
    from scipy.spatial import cKDTree

    # the pairs within a radius r: once they connect the points, Kruskal's algorithm on
    # every pair would take only such pairs, so their spanning tree is the whole one.
    # r starts at twice the largest nearest-neighbour distance (no tree is shorter in
    # its longest edge than that) and doubles until the points connect
    tree = cKDTree(pts)
    r = 2.0 * float(tree.query(pts, k=2)[0][:, 1].max())
    while True:
        graph = tree.sparse_distance_matrix(tree, r, output_type="coo_matrix").tocsr()
        if connected_components(graph, directed=False)[0] == 1:
            break
        r *= 2.0
    # distinct slots: no zero-length edge between two points, so a stored 0 (a point's
    # distance to itself) never stands for an edge
    return float(minimum_spanning_tree(graph).sum())


def estimate_routing(pattern: Pattern, pitch_um: tuple[float, float], mos: bool,
                     nets: FingerNets = None, pair_dummy: int | None = None) -> Routing:
    """Tracks per row, half-perimeter and spanning-tree length per device, breaks for MOS
    (with ``pair_dummy``, the dummy net of fingers drawn two to an island: the breaks
    drawn between neighbouring device fingers)."""
    xy, dev = unit_positions(pattern, pitch_um)
    tracks = row_tracks(pattern.ids)
    hp: dict[str, float] = {}
    tree: dict[str, float] = {}
    for d, name in enumerate(pattern.devices):
        pts = xy[dev == d]
        span = pts.max(axis=0) - pts.min(axis=0)
        hp[name] = float(span.sum())
        tree[name] = spanning_tree_length(pts)
    return Routing(
        row_tracks=tuple(int(t) for t in tracks), total_tracks=int(tracks.sum()),
        half_perimeter_um=hp, tree_length_um=tree, total_tree_um=float(sum(tree.values())),
        diffusion_breaks=(None if not mos else
                          diffusion_breaks(pattern.ids, pattern.orient, nets)
                          if pair_dummy is None else
                          _drawn_breaks(pattern, nets, pair_dummy)),
    )


def _drawn_breaks(pattern: Pattern, nets: FingerNets, dummy: int) -> int:
    """Neighbouring device fingers whose diffusion is not joined, fingers two to an island."""
    joins = diffusion_joins(pattern.ids, pattern.orient, nets, dummy, "pairs")
    both = (pattern.ids[:, :-1] >= 0) & (pattern.ids[:, 1:] >= 0)
    return int(np.sum(both & ~joins))
