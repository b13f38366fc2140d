"""Parasitics of the drawn wiring: each net's resistor network, its capacitance to ground
and the coupling between nets, all from the geometry the router drew.

The rules (also stated in the README's layout contract, so that a checker can redo them
from the GDSII alone):

* a unit terminal's metal in its cell is one ideal node (zero resistance); so are a net's
  pins (all of them: a net's pins are taken as joined outside the block);
* a wire (a metal1 or metal2 rectangle of the top cell) is a strip along its longer side
  (along x when square) of resistance sheet x length / width; it connects where a via1
  cut lies on it, where it overlaps another wire of its net on its layer (at the centre
  of the overlap), where it overlaps a terminal's metal on its layer (the overlap is part
  of that terminal's node) and at a pin label on it; the strip between two neighbouring
  connection points is one resistor, and a wire's ends beyond its last connection carry
  no current;
* a via1 cut is a resistor of ``via_ohm`` between what it joins on metal1 and on metal2;
* capacitance to ground is ``wire_ff_per_um`` per micrometre of wire (the longer side);
* two shapes of different nets on the same metal (wires or terminal metal, but not two
  shapes of one unit: that is the device itself) couple where they face each other: over
  the length their projections share, at a gap s up to three times the layer's minimum
  spacing s_min, with ``coupling_ff_per_um`` x length x s_min / s; metal2 over metal1 of
  another net couples with ``overlap_ff_per_um2`` per square micrometre of overlap.
"""

from __future__ import annotations

import math
from collections import defaultdict
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import NDArray

from placer.layout.cells import REACH, Rect

if TYPE_CHECKING:
    from placer.io.spec import RoutingSpec
    from placer.layout.cells import Rules
    from placer.layout.router import Tap, Wiring

__all__ = ["Network", "TapFigure", "Coupling", "NetFigures", "Parasitics", "extract",
           "effective_resistances", "node_voltages", "REACH"]

#: Nets of at most this many terminal nodes get every terminal's resistance solved...
EXACT_TAPS = 1024
#: ... larger ones those of the terminals farthest from the pin by path resistance.
FARTHEST_TAPS = 256
_EPS = 1e-9


@dataclass(frozen=True)
class Network:
    """One net's resistor network: ``n_nodes`` nodes, resistors between ``edges`` (i, j)
    of ``ohms``; the pin's node (None for a net without pin), the node of each of the
    net's taps (in the order of ``tap_index``, indices into the wiring's taps) and each
    node's position (for the netlist's capacitors)."""

    net: str
    n_nodes: int
    edges: NDArray[np.int64]
    ohms: NDArray[np.float64]
    vias: NDArray[np.bool_]
    pin: int | None
    tap_index: tuple[int, ...]
    tap_nodes: tuple[int, ...]
    xy: NDArray[np.float64]


@dataclass(frozen=True)
class TapFigure:
    """A unit terminal's wiring resistance to its net's pin (None: the net has no pin)."""

    net: str
    slot: tuple[int, int]
    device: str
    terminal: str
    r_to_pin_ohm: float | None


@dataclass(frozen=True)
class Coupling:
    """Capacitance between two nets, and the geometry it comes from."""

    a: str
    b: str
    c_ff: float
    facing_um: float
    facing_min_um: float
    overlap_um2: float


@dataclass(frozen=True)
class NetFigures:
    """A net's wiring in numbers. ``r_max_ohm``: the largest resistance from one of its
    terminals to its pin; for a net without a pin (a link inside the block), from its
    first terminal to the farthest other; None when neither applies."""

    name: str
    wire_um: float
    vias: int
    r_max_ohm: float | None
    r_mean_ohm: float | None
    ground_ff: float
    coupling_ff: float


@dataclass
class Parasitics:
    """Everything extracted from one routed block."""

    nets: dict[str, NetFigures]
    taps: list[TapFigure]
    couplings: list[Coupling]
    networks: dict[str, Network]
    #: (net a, node a, net b, node b, fF): coupling lumped onto node pairs (netlist)
    node_couplings: list[tuple[str, int, str, int, float]] = field(default_factory=list)
    #: (net, node, fF): capacitance to ground lumped onto nodes (netlist)
    node_ground: list[tuple[str, int, float]] = field(default_factory=list)

    def coupling(self, a: str, b: str) -> Coupling:
        """The coupling between nets a and b (zero when they never face)."""
        for c in self.couplings:
            if {c.a, c.b} == {a, b}:
                return c
        return Coupling(a, b, 0.0, 0.0, 0.0, 0.0)


class _Union:
    def __init__(self) -> None:
        self.parent: list[int] = []

    def make(self) -> int:
        self.parent.append(len(self.parent))
        return len(self.parent) - 1

    def find(self, i: int) -> int:
        p = self.parent
        while p[i] != i:
            p[i] = p[p[i]]
            i = p[i]
        return i

    def join(self, a: int, b: int) -> None:
        ra, rb = self.find(a), self.find(b)
        if ra != rb:
            self.parent[max(ra, rb)] = min(ra, rb)


def _axis(r: Rect) -> int:
    """0: the strip runs along x (also when square); 1: along y."""
    return 0 if (r.x1 - r.x0) >= (r.y1 - r.y0) else 1


def _overlap(a: Rect, b: Rect) -> tuple[float, float, float, float] | None:
    x0, y0 = max(a.x0, b.x0), max(a.y0, b.y0)
    x1, y1 = min(a.x1, b.x1), min(a.y1, b.y1)
    if x1 < x0 - _EPS or y1 < y0 - _EPS:
        return None
    return x0, y0, x1, y1


def _boxes(rects: list[Rect]) -> NDArray[np.float64]:
    """(x0, y0, x1, y1) of each rectangle, shape (n, 4)."""
    return np.array([(r.x0, r.y0, r.x1, r.y1) for r in rects], dtype=float).reshape(-1, 4)


def _touching(a: list[Rect] | NDArray[np.float64],
              b: list[Rect] | NDArray[np.float64] | None = None) -> list[tuple[int, int]]:
    """Index pairs (i in ``a``, j in ``b``) of rectangles (or their :func:`_boxes`) that
    overlap or touch (within 1 nm); with ``b`` None, pairs i < j within ``a``. A grid
    keeps it near linear."""
    a = a if isinstance(a, np.ndarray) else _boxes(a)
    if b is not None:
        b = b if isinstance(b, np.ndarray) else _boxes(b)
    rects = a if b is None else np.concatenate([a, b])
    if len(rects) < 2:
        return []
    pairs = _candidate_pairs(rects, 1e-3)
    if not len(pairs):
        return []
    i, j = pairs[:, 0], pairs[:, 1]
    ra, rb = rects[i], rects[j]
    ok = ((np.minimum(ra[:, 2], rb[:, 2]) >= np.maximum(ra[:, 0], rb[:, 0]) - _EPS)
          & (np.minimum(ra[:, 3], rb[:, 3]) >= np.maximum(ra[:, 1], rb[:, 1]) - _EPS))
    i, j = i[ok], j[ok]
    if b is None:
        return list(zip(i.tolist(), j.tolist(), strict=True))
    n = len(a)
    cross = (i < n) & (j >= n)
    return list(zip(i[cross].tolist(), (j[cross] - n).tolist(), strict=True))


def _points(xy: list[tuple[float, float]]) -> list[Rect]:
    return [Rect("point", x, y, x, y) for x, y in xy]


def _net_network(net: str, wires: list[Rect], taps: list[tuple[int, Tap]],
                 vias: list[tuple[float, float]], pins: list[tuple[float, float, str]],
                 sheet: dict[str, float], via_ohm: float
                 ) -> tuple[Network, list[tuple[Rect, list[tuple[float, int]]]]]:
    """The resistor network of one net (see the module's rules)."""
    uf = _Union()
    pad_node = [uf.make() for _ in taps]
    pin_node = uf.make() if pins else None
    events: list[list[tuple[float, int]]] = [[] for _ in wires]
    shorted: list[list[tuple[float, float]]] = [[] for _ in wires]
    pos: dict[int, tuple[float, float]] = {}
    for k, (_, t) in enumerate(taps):
        cx = math.fsum(p.centre[0] for p in t.pads) / len(t.pads)
        cy = math.fsum(p.centre[1] for p in t.pads) / len(t.pads)
        pos[pad_node[k]] = (cx, cy)

    def at(i: int, x: float, y: float) -> int:
        node = uf.make()
        events[i].append(((x, y)[_axis(wires[i])], node))
        pos[node] = (x, y)
        return node

    pads = [(k, p) for k, (_, t) in enumerate(taps) for p in t.pads]
    pad_rects = [p for _, p in pads]
    wire_box, pad_box = _boxes(wires), _boxes(pad_rects)      # each converted once
    # wires overlapping terminal metal on their layer: that stretch is the terminal
    for i, q in sorted(_touching(wire_box, pad_box)):
        w = wires[i]
        k, p = pads[q]
        if p.role != w.role:
            continue
        o = _overlap(w, p)
        if o is None:
            continue
        ax = _axis(w)
        lo, hi = (o[0], o[2]) if ax == 0 else (o[1], o[3])
        for s in (lo, hi):
            n = uf.make()
            events[i].append((s, n))
            pos[n] = ((s, (o[1] + o[3]) / 2) if ax == 0 else ((o[0] + o[2]) / 2, s))
            uf.join(n, pad_node[k])
        shorted[i].append((lo, hi))
    # wires overlapping wires of the net on the same layer
    for i, j in sorted(_touching(wire_box)):
        if wires[i].role != wires[j].role:
            continue
        o = _overlap(wires[i], wires[j])
        if o is None:
            continue
        cx, cy = (o[0] + o[2]) / 2, (o[1] + o[3]) / 2
        uf.join(at(i, cx, cy), at(j, cx, cy))
    # pins
    pin_pts = _points([(x, y) for x, y, _ in pins])
    for q, i in sorted(_touching(pin_pts, wire_box)):
        x, y, layer = pins[q]
        if wires[i].role == layer:
            assert pin_node is not None
            uf.join(at(i, x, y), pin_node)
            pos.setdefault(pin_node, (x, y))
    for q, m in sorted(_touching(pin_pts, pad_box)):
        x, y, layer = pins[q]
        k, p = pads[m]
        if p.role == layer:
            assert pin_node is not None
            uf.join(pad_node[k], pin_node)
    if pin_node is not None and pin_node not in pos:
        pos[pin_node] = (pins[0][0], pins[0][1])
    # vias: metal1 side to metal2 side
    via_box = np.array([(x, y, x, y) for x, y in vias], dtype=float).reshape(-1, 4)
    on_wire: dict[int, list[int]] = defaultdict(list)
    for q, i in _touching(via_box, wire_box):
        on_wire[q].append(i)
    on_pad: dict[int, list[int]] = defaultdict(list)
    for q, m in _touching(via_box, pad_box):
        on_pad[q].append(m)
    edges: list[tuple[int, int, float, bool]] = []
    for q, (x, y) in enumerate(vias):
        side: dict[str, list[int]] = {"metal1": [], "metal2": []}
        for i in sorted(on_wire[q]):
            if wires[i].role in side:
                side[wires[i].role].append(at(i, x, y))
        seen_tap: set[tuple[int, str]] = set()
        for m in sorted(on_pad[q]):
            k, p = pads[m]
            if p.role in side and (k, p.role) not in seen_tap:
                seen_tap.add((k, p.role))
                side[p.role].append(pad_node[k])
        if not side["metal1"] or not side["metal2"]:
            continue
        for layer in side:
            for n in side[layer][1:]:
                uf.join(side[layer][0], n)
        edges.append((side["metal1"][0], side["metal2"][0], via_ohm, True))
    # strips between neighbouring connection points
    kept: list[tuple[Rect, list[tuple[float, int]]]] = []
    for i, w in enumerate(wires):
        ev = sorted(events[i])
        kept.append((w, ev))
        if len(ev) < 2:
            continue
        ax = _axis(w)
        width = (w.y1 - w.y0) if ax == 0 else (w.x1 - w.x0)
        for (s0, n0), (s1, n1) in zip(ev, ev[1:], strict=False):
            if s1 - s0 <= _EPS or any(lo - _EPS <= s0 and s1 <= hi + _EPS
                                      for lo, hi in shorted[i]):
                uf.join(n0, n1)
                continue
            edges.append((n0, n1, sheet[w.role] * (s1 - s0) / width, False))
    # compact the nodes: every node to its root (the smallest node of its set: a join
    # keeps the smaller root), the roots numbered in order
    parent = np.array(uf.parent, dtype=np.int64)
    while True:
        up = parent[parent]
        if np.array_equal(up, parent):
            break
        parent = up
    roots, index = np.unique(parent, return_inverse=True)
    index = index.astype(np.int64)
    e_arr = (index[np.array([(a, b) for a, b, _, _ in edges], dtype=np.int64).reshape(-1, 2)]
             if edges else np.zeros((0, 2), dtype=np.int64))
    ohm = np.array([r for _, _, r, _ in edges], dtype=float)
    is_via = np.array([v for _, _, _, v in edges], dtype=bool)
    xy = np.zeros((len(roots), 2))
    if pos:
        nodes = np.fromiter(pos.keys(), dtype=np.int64, count=len(pos))
        xy[index[nodes]] = np.array(list(pos.values()), dtype=float)
    network = Network(net, len(roots), e_arr, ohm, is_via,
                      None if pin_node is None else int(index[pin_node]),
                      tuple(ti for ti, _ in taps),
                      tuple(index[pad_node].tolist()) if pad_node else (), xy)
    named = index.tolist()
    kept = [(w, [(s, named[n]) for s, n in ev]) for w, ev in kept]
    return network, kept


def _laplacian(nw: Network) -> tuple[object, NDArray[np.float64]]:
    import scipy.sparse as sp

    n = nw.n_nodes
    g = np.where(nw.ohms > 0, 1.0 / np.maximum(nw.ohms, 1e-300), 1e12)
    i, j = nw.edges[:, 0], nw.edges[:, 1]
    data = np.concatenate([g, g, -g, -g])
    rows = np.concatenate([i, j, i, j])
    cols = np.concatenate([i, j, j, i])
    lap = sp.csc_matrix((data, (rows, cols)), shape=(n, n))
    return lap, g


def _tap_resistances(nw: Network) -> list[float]:
    """Each tap's resistance to the pin: exact for every tap of a net of at most
    EXACT_TAPS terminal nodes; on a larger net for the FARTHEST_TAPS nodes with the largest
    path resistance to the pin (where the net's worst lies), NaN for the rest."""
    assert nw.pin is not None
    uniq = sorted(set(nw.tap_nodes))
    if len(uniq) > EXACT_TAPS:
        from scipy.sparse import coo_matrix
        from scipy.sparse.csgraph import dijkstra

        n = nw.n_nodes
        w = nw.ohms + 1e-9                     # csgraph drops explicit zero weights
        adj = coo_matrix((w, (nw.edges[:, 0], nw.edges[:, 1])), shape=(n, n)).tocsr()
        dist = dijkstra(adj, directed=False, indices=nw.pin)
        far = np.argsort(-dist[uniq], kind="stable")[:FARTHEST_TAPS]
        uniq = sorted(uniq[int(k)] for k in far)
    r_of = dict(zip(uniq, effective_resistances(nw, uniq, nw.pin), strict=True))
    return [r_of.get(node, math.nan) for node in nw.tap_nodes]


def effective_resistances(nw: Network, nodes: list[int], ground: int) -> list[float]:
    """Resistance from each node in ``nodes`` to ``ground`` through the network (inf for a
    node not connected to it).

    Examples
    --------
    >>> nw = Network("N", 3, np.array([[0, 1], [1, 2]]), np.array([2.0, 3.0]),
    ...              np.array([False, False]), 0, (), (), np.zeros((3, 2)))
    >>> effective_resistances(nw, [1, 2], 0)
    [2.0, 5.0]
    """
    if not nodes:
        return []
    fast = _tree_resistances(nw, ground, nodes)
    if fast is not None:
        return [float(v) for v in fast]
    import scipy.sparse.linalg as spl

    comp = _component(nw, ground)
    out = [math.inf] * len(nodes)
    keep = [k for k in range(nw.n_nodes) if comp[k] and k != ground]
    if not keep:
        return [0.0 if n == ground else math.inf for n in nodes]
    pos = {n: k for k, n in enumerate(keep)}
    lap, _ = _laplacian(nw)
    sub = lap[keep][:, keep].tocsc()   # type: ignore[index]
    lu = spl.splu(sub)
    want = [(k, pos[n]) for k, n in enumerate(nodes) if n in pos]
    for k, n in enumerate(nodes):
        if n == ground:
            out[k] = 0.0
    for start in range(0, len(want), 256):
        block = want[start:start + 256]
        rhs = np.zeros((len(keep), len(block)))
        for col, (_, row) in enumerate(block):
            rhs[row, col] = 1.0
        sol = lu.solve(rhs)
        for col, (k, row) in enumerate(block):
            out[k] = float(sol[row, col])
    return out


def _breadth_first(n: int, ei: NDArray[np.int64], ej: NDArray[np.int64], root: int
                   ) -> tuple[NDArray[np.int64], NDArray[np.int64], NDArray[np.int64]]:
    """Nodes reached from ``root`` in breadth-first order, each one's predecessor (-1 for
    the root and the unreached) and depth (edges from the root; 0 when unreached), over
    undirected edges (ei, ej)."""
    a = np.concatenate([ei, ej])
    b = np.concatenate([ej, ei])
    srt = np.argsort(a, kind="stable")
    nbr = b[srt].tolist()
    start = np.searchsorted(a[srt], np.arange(n + 1)).tolist()
    pred = [-1] * n
    depth = [0] * n
    seen = [False] * n
    seen[root] = True
    order = [root]
    for x in order:                    # grows as it goes: a queue
        for y in nbr[start[x]:start[x + 1]]:
            if not seen[y]:
                seen[y] = True
                pred[y] = x
                depth[y] = depth[x] + 1
                order.append(y)
    return (np.array(order, dtype=np.int64), np.array(pred, dtype=np.int64),
            np.array(depth, dtype=np.int64))


#: The spanning-tree solve takes networks of at most this many independent loops.
TREE_LOOPS = 256
#: A resistor of at most this many ohms is a short (its ends one node) for that solve.
SHORT_OHM = 1e-9
#: ... and follows this many loop ends down the tree at a time.
TREE_CHUNK = 32


def _tree_resistances(nw: Network, ground: int, nodes: list[int]
                      ) -> NDArray[np.float64] | None:
    """Each of ``nodes``' resistance to ``ground`` (inf where not connected), exactly,
    for a network that is a tree plus a few loops; None past TREE_LOOPS loops.

    On a spanning tree rooted at ground, the grounded Laplacian's inverse is
    (L_T^-1)[x, y] = d(lca(x, y)), d being the path resistance from the root; the k edges
    off the tree add B G B^T, and the Woodbury identity gives
    R(v) = d(v) - phi(v)^T (G^-1 + B^T L_T^-1 B)^-1 phi(v) with phi(v) = B^T L_T^-1 e_v
    (Golub & Van Loan, Matrix Computations, 4th ed., sec. 2.1.4). A resistor of at most
    SHORT_OHM is a short: its two ends are merged first (a near-zero resistor in a loop
    would leave the correction's matrix singular). None also when that matrix cannot be
    solved: the LU path then takes the network."""
    n = nw.n_nodes
    short = nw.ohms <= SHORT_OHM
    rep = np.arange(n)
    if short.any():
        root = list(range(n))

        def find(x: int) -> int:
            while root[x] != x:
                root[x] = root[root[x]]
                x = root[x]
            return x

        for i, j in nw.edges[short].tolist():
            a, b = find(i), find(j)
            if a != b:
                root[max(a, b)] = min(a, b)
        rep = np.unique([find(x) for x in range(n)], return_inverse=True)[1].reshape(-1)
    keep = ~short
    try:
        return _tree_solve(int(rep.max()) + 1 if n else 0, rep[nw.edges[keep, 0]],
                           rep[nw.edges[keep, 1]], nw.ohms[keep], int(rep[ground]),
                           rep[np.asarray(nodes, dtype=np.int64)])
    except np.linalg.LinAlgError:
        return None


def _tree_solve(n: int, ei: NDArray[np.int64], ej: NDArray[np.int64],
                r: NDArray[np.float64], ground: int, nodes: NDArray[np.int64]
                ) -> NDArray[np.float64] | None:
    """:func:`_tree_resistances` on a network without shorts: ``n`` nodes, resistors
    (ei, ej) of ``r`` ohms."""
    order, pred, depth = _breadth_first(n, ei, ej, ground)
    reached = np.zeros(n, dtype=bool)
    reached[order] = True
    # one edge per tree link (the first of parallel ones); the rest close loops
    lo, hi = np.minimum(ei, ej), np.maximum(ei, ej)
    code = lo * n + hi
    by_code = np.argsort(code, kind="stable")
    child = order[1:]
    tcode = np.minimum(child, pred[child]) * n + np.maximum(child, pred[child])
    tree_edge = by_code[np.searchsorted(code[by_code], tcode)]
    off = np.ones(len(ei), dtype=bool)
    off[tree_edge] = False
    off &= (ei != ej) & reached[ei] & reached[ej]
    k = int(off.sum())
    if k > TREE_LOOPS:
        return None
    # depth and path resistance, level by level from the root
    d = np.full(n, np.inf)
    d[ground] = 0.0
    r_up = np.zeros(n)
    r_up[child] = r[tree_edge]
    parent = np.where(reached, pred, -1)
    parent[ground] = ground
    levels = np.argsort(depth[order], kind="stable")
    by_level = order[levels]
    cuts = np.flatnonzero(np.diff(depth[by_level])) + 1
    groups = np.split(by_level, cuts)
    for g in groups[1:]:
        d[g] = d[parent[g]] + r_up[g]
    want = nodes
    if k == 0:
        return d[want]
    a, b = ei[off], ej[off]
    ends, inv = np.unique(np.concatenate([a, b]), return_inverse=True)
    # the columns kept: the nodes asked for, then every loop edge's two ends
    cols = np.concatenate([want, ends])
    # f[p, x] = d(lca(x, end p)): d(x) on the end's root path, else the parent's value;
    # TREE_CHUNK ends at a time, so memory stays TREE_CHUNK x nodes
    f = np.zeros((len(ends), len(cols)))
    for c0 in range(0, len(ends), TREE_CHUNK):
        part = ends[c0:c0 + TREE_CHUNK]
        on_path = np.zeros((len(part), n), dtype=bool)
        walk = part.copy()
        for _ in range(int(depth[part].max()) + 1):
            on_path[np.arange(len(part)), walk] = True
            walk = parent[walk]
        fp = np.zeros((len(part), n))
        for g in groups[1:]:
            fp[:, g] = np.where(on_path[:, g], d[g], fp[:, parent[g]])
        f[c0:c0 + len(part)] = fp[:, cols]
    ia, ib = inv[:k], inv[k:]
    phi = f[ia] - f[ib]                          # k x columns
    at_a = len(want) + ia                        # the column of each loop edge's ends
    at_b = len(want) + ib
    s_mat = np.diag(r[off]) + (phi[:, at_a] - phi[:, at_b])
    ok = reached[want]
    z = np.linalg.solve(s_mat, phi[:, :len(want)][:, ok])
    out = np.full(len(want), np.inf)
    out[ok] = d[want[ok]] - np.einsum("ij,ij->j", phi[:, :len(want)][:, ok], z)
    out[want == ground] = 0.0
    return out


def node_voltages(nw: Network, injections: dict[int, float], ground: int) -> NDArray[np.float64]:
    """Node voltages (V, relative to ``ground``) when ``injections`` (A into each node;
    they leave at ground) flow through the network.

    Examples
    --------
    >>> nw = Network("N", 3, np.array([[0, 1], [1, 2]]), np.array([2.0, 3.0]),
    ...              np.array([False, False]), 0, (), (), np.zeros((3, 2)))
    >>> node_voltages(nw, {2: 1e-3}, 0).round(6).tolist()
    [0.0, 0.002, 0.005]
    """
    import scipy.sparse.linalg as spl

    v = np.zeros(nw.n_nodes)
    comp = _component(nw, ground)
    keep = [k for k in range(nw.n_nodes) if comp[k] and k != ground]
    if not keep:
        return v
    pos = {n: k for k, n in enumerate(keep)}
    rhs = np.zeros(len(keep))
    for node, amps in injections.items():
        if node in pos:
            rhs[pos[node]] += amps
    lap, _ = _laplacian(nw)
    sub = lap[keep][:, keep].tocsc()   # type: ignore[index]
    v[keep] = spl.spsolve(sub, rhs)
    return v


def _component(nw: Network, start: int) -> NDArray[np.bool_]:
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    n = nw.n_nodes
    adj = coo_matrix((np.ones(len(nw.edges)), (nw.edges[:, 0], nw.edges[:, 1])), shape=(n, n))
    _, labels = connected_components(adj, directed=False)
    return np.asarray(labels == labels[start])


def _shapes(wiring: Wiring) -> tuple[NDArray[np.float64], NDArray[np.int64], list[str],
                                     list[str], NDArray[np.int64], NDArray[np.int64],
                                     NDArray[np.int64], NDArray[np.int64]]:
    """Every metal shape for coupling: rectangles, layer (0 metal1, 1 metal2), net names,
    each shape's net, net index, unit instance (-1 for a wire) and source (a wire's index
    in ``wiring.wires``; for a terminal's metal, -1 - the tap's index, with the pad's
    index in the tap's pads beside it; -1 for a wire)."""
    rects: list[tuple[float, float, float, float]] = []
    layer: list[int] = []
    nets: list[str] = []
    inst: list[int] = []
    src: list[int] = []
    pad: list[int] = []
    slot_id: dict[tuple[int, int], int] = {}
    for k, w in enumerate(wiring.wires):
        rects.append((w.x0, w.y0, w.x1, w.y1))
        layer.append(0 if w.layer == "metal1" else 1)
        nets.append(w.net)
        inst.append(-1)
        src.append(k)
        pad.append(-1)
    seen: set[tuple[tuple[int, int], str, Rect]] = set()
    for ti, t in enumerate(wiring.taps):
        sid = slot_id.setdefault(t.slot, len(slot_id))
        for pi, p in enumerate(t.pads):
            if p.role not in ("metal1", "metal2") or (t.slot, t.net, p) in seen:
                continue
            seen.add((t.slot, t.net, p))
            rects.append((p.x0, p.y0, p.x1, p.y1))
            layer.append(0 if p.role == "metal1" else 1)
            nets.append(t.net)
            inst.append(sid)
            src.append(-1 - ti)
            pad.append(pi)
    names = sorted(set(nets))
    idx = {n: i for i, n in enumerate(names)}
    return (np.array(rects, dtype=float).reshape(-1, 4), np.array(layer, dtype=np.int64),
            names, nets, np.array([idx[n] for n in nets], dtype=np.int64),
            np.array(inst, dtype=np.int64), np.array(src, dtype=np.int64),
            np.array(pad, dtype=np.int64))


def _candidate_pairs(rects: NDArray[np.float64], reach: float) -> NDArray[np.int64]:
    """Index pairs (i < j) of rectangles that come within ``reach`` of each other (a
    uniform grid of cells about the reach wide; each pair once)."""
    n = len(rects)
    if n < 2:
        return np.zeros((0, 2), dtype=np.int64)
    span = max(float(np.max(rects[:, 2] - rects[:, 0])), float(np.max(rects[:, 3] - rects[:, 1])))
    cell = max(2.0, 4 * reach, min(span, 20.0) / 4)
    gx0 = np.floor((rects[:, 0] - reach) / cell).astype(np.int64)
    gx1 = np.floor((rects[:, 2] + reach) / cell).astype(np.int64)
    gy0 = np.floor((rects[:, 1] - reach) / cell).astype(np.int64)
    gy1 = np.floor((rects[:, 3] + reach) / cell).astype(np.int64)
    nx = (gx1 - gx0 + 1)
    ny = (gy1 - gy0 + 1)
    count = nx * ny
    owner = np.repeat(np.arange(n), count)
    start = np.repeat(np.cumsum(count) - count, count)
    k = np.arange(int(count.sum())) - start
    cx = gx0[owner] + k % nx[owner]
    cy = gy0[owner] + k // nx[owner]
    key = (cx - cx.min()) * (int(cy.max() - cy.min()) + 1) + (cy - cy.min())
    order = np.lexsort((owner, key))
    key, owner = key[order], owner[order]
    pairs = []
    d = 1
    while d < len(key):
        same = key[d:] == key[:-d]
        if not np.any(same):
            break
        a, b = owner[:-d][same], owner[d:][same]
        # only pairs really within reach (a cell holds many that are not)
        ra, rb = rects[a], rects[b]
        near = ((np.maximum(ra[:, 0], rb[:, 0]) - np.minimum(ra[:, 2], rb[:, 2]) <= reach)
                & (np.maximum(ra[:, 1], rb[:, 1]) - np.minimum(ra[:, 3], rb[:, 3]) <= reach)
                & (a != b))
        a, b = a[near], b[near]
        pairs.append(np.minimum(a, b) * n + np.maximum(a, b))
        d += 1
    if not pairs:
        return np.zeros((0, 2), dtype=np.int64)
    code = np.unique(np.concatenate(pairs))      # one int per pair: a fast unique
    return np.stack([code // n, code % n], axis=1)


def extract(wiring: Wiring, routing: RoutingSpec, rules: Rules) -> Parasitics:
    """The parasitics of a routed block (see the module's rules)."""
    sheet = {"metal1": routing.metal1_ohm_per_sq, "metal2": routing.metal2_ohm_per_sq}
    wires_of: dict[str, list[Rect]] = defaultdict(list)
    for w in wiring.wires:
        wires_of[w.net].append(w.rect)
    taps_of: dict[str, list[tuple[int, Tap]]] = defaultdict(list)
    for k, t in enumerate(wiring.taps):
        taps_of[t.net].append((k, t))
    vias_of: dict[str, list[tuple[float, float]]] = defaultdict(list)
    for net, x, y in wiring.vias:
        vias_of[net].append((x, y))
    networks: dict[str, Network] = {}
    strips: dict[str, list[tuple[Rect, list[tuple[float, int]]]]] = {}
    tap_r: dict[int, float | None] = {}
    link: dict[str, float] = {}
    figures: dict[str, NetFigures] = {}
    order = [n.name for n in wiring.nets]
    for net in order:
        nw, kept = _net_network(net, wires_of[net], taps_of[net], vias_of[net],
                                wiring.pins.get(net, []), sheet, routing.via_ohm)
        networks[net], strips[net] = nw, kept
        if nw.pin is not None:
            rs = _tap_resistances(nw)
        else:
            rs = [math.nan] * len(nw.tap_nodes)
            if len(set(nw.tap_nodes)) > 1:     # a link inside the block: end to end
                far = max(effective_resistances(nw, list(nw.tap_nodes[1:]),
                                                nw.tap_nodes[0]))
                if math.isfinite(far):
                    link[net] = far
        for ti, r in zip(nw.tap_index, rs, strict=True):
            tap_r[ti] = r if math.isfinite(r) else None
    # capacitance
    rects, layer, names, net_names, net_id, inst, src, pad = _shapes(wiring)
    s_min = np.array([rules.metal1_space, rules.metal2_space])
    reach = REACH * float(s_min.max())
    pairs = _candidate_pairs(rects, reach)
    coup: dict[tuple[str, str], list[float]] = defaultdict(lambda: [0.0, 0.0, 0.0, 0.0])
    node_c: dict[tuple[str, int, str, int], float] = defaultdict(float)
    lumps = _Lumps(networks, strips, wiring, src, pad)
    if len(pairs):
        i, j = pairs[:, 0], pairs[:, 1]
        keep = (net_id[i] != net_id[j]) & ~((inst[i] >= 0) & (inst[i] == inst[j]))
        i, j = i[keep], j[keep]
        a, b = rects[i], rects[j]
        ox = np.minimum(a[:, 2], b[:, 2]) - np.maximum(a[:, 0], b[:, 0])
        oy = np.minimum(a[:, 3], b[:, 3]) - np.maximum(a[:, 1], b[:, 1])
        same = layer[i] == layer[j]
        smin = s_min[layer[i]]
        lim = REACH * smin
        gap_y, gap_x = -oy, -ox
        face_h = same & (ox > _EPS) & (gap_y > _EPS) & (gap_y <= lim + _EPS)
        face_v = same & (oy > _EPS) & (gap_x > _EPS) & (gap_x <= lim + _EPS)
        cross = ~same & (ox > _EPS) & (oy > _EPS)
        length = np.where(face_h, ox, np.where(face_v, oy, 0.0))
        gap = np.where(face_h, gap_y, np.where(face_v, gap_x, 1.0))
        c_face = routing.coupling_ff_per_um * length * smin / gap
        area = np.where(cross, ox * oy, 0.0)
        c = np.where(face_h | face_v, c_face, 0.0) + routing.overlap_ff_per_um2 * area
        hit = np.nonzero(face_h | face_v | cross)[0]
        i, j, a, b = i[hit], j[hit], a[hit], b[hit]
        c, length, area = c[hit], length[hit], area[hit]
        facing = (face_h | face_v)[hit]
        at_min = facing & (gap[hit] <= smin[hit] + 1e-6)
        # each net pair once, in the block's net order
        rank = np.array([order_key(n, order)[0] for n in names], dtype=np.int64)
        ra, rb = rank[net_id[i]], rank[net_id[j]]
        first = (ra < rb) | ((ra == rb) & (net_id[i] <= net_id[j]))
        lo_id = np.where(first, net_id[i], net_id[j])
        hi_id = np.where(first, net_id[j], net_id[i])
        code = lo_id * len(names) + hi_id
        uniq, inv = np.unique(code, return_inverse=True)
        sums = [np.bincount(inv, weights=w, minlength=len(uniq))
                for w in (c, np.where(facing, length, 0.0), np.where(at_min, length, 0.0),
                          area)]
        for k, cd in enumerate(uniq.tolist()):
            key = (names[cd // len(names)], names[cd % len(names)])
            coup[key] = [float(v[k]) for v in sums]
        # lumped onto the nearest node of each shape (the netlist's capacitors)
        mx = (np.maximum(a[:, 0], b[:, 0]) + np.minimum(a[:, 2], b[:, 2])) / 2
        my = (np.maximum(a[:, 1], b[:, 1]) + np.minimum(a[:, 3], b[:, 3])) / 2
        n1 = lumps.nodes(i, mx, my)
        n2 = lumps.nodes(j, mx, my)
        g1 = np.where(first, net_id[i], net_id[j])
        m1 = np.where(first, n1, n2)
        g2 = np.where(first, net_id[j], net_id[i])
        m2 = np.where(first, n2, n1)
        srt = np.lexsort((m2, g2, m1, g1))
        cols = np.stack([g1, m1, g2, m2])[:, srt]
        if len(srt):
            starts = np.flatnonzero(np.r_[True, np.any(np.diff(cols, axis=1) != 0, axis=0)])
            summed = np.add.reduceat(c[srt], starts)
            for k, st in enumerate(starts.tolist()):
                node_c[(names[cols[0, st]], int(cols[1, st]), names[cols[2, st]],
                        int(cols[3, st]))] += float(summed[k])
    couplings = [Coupling(a_, b_, v[0], v[1], v[2], v[3]) for (a_, b_), v in coup.items()]
    couplings.sort(key=lambda c_: (order_key(c_.a, order), order_key(c_.b, order)))
    total_c: dict[str, float] = defaultdict(float)
    for cp in couplings:
        total_c[cp.a] += cp.c_ff
        total_c[cp.b] += cp.c_ff
    node_ground: list[tuple[str, int, float]] = []
    for net in order:
        wire_um = sum(max(r.x1 - r.x0, r.y1 - r.y0) for r in wires_of[net])
        rs = [r_ for ti, _ in taps_of[net] if (r_ := tap_r.get(ti)) is not None]
        figures[net] = NetFigures(
            net, wire_um, len(vias_of[net]),
            max(rs) if rs else link.get(net),
            float(np.mean(rs)) if rs else None,
            routing.wire_ff_per_um * wire_um, total_c[net])
        for strip, ev in strips[net]:
            if not ev:
                continue
            ax = _axis(strip)
            lo, hi = (strip.x0, strip.x1) if ax == 0 else (strip.y0, strip.y1)
            cuts = [s for s, _ in ev]
            bounds = [lo] + [(u + v) / 2 for u, v in zip(cuts, cuts[1:], strict=False)] + [hi]
            for (_, node), b0, b1 in zip(ev, bounds, bounds[1:], strict=False):
                if b1 > b0:
                    node_ground.append((net, node, routing.wire_ff_per_um * (b1 - b0)))
    taps = [TapFigure(t.net, t.slot, t.device, t.terminal, tap_r.get(k))
            for k, t in enumerate(wiring.taps)]
    return Parasitics(figures, taps, couplings, networks,
                      [(a_, n1, b_, n2, v) for (a_, n1, b_, n2), v in node_c.items()],
                      node_ground)


def order_key(net: str, order: list[str]) -> tuple[int, str]:
    """Sort key of a net: its place in the block's net order."""
    try:
        return (order.index(net), net)
    except ValueError:
        return (len(order), net)


class _Lumps:
    """Where a coupling on a shape lumps: the node of a unit's metal, or a wire's nearest
    connection point (the netlist's capacitors). A shape is known by its source (see
    :func:`_shapes`); a pad drawn alike for two terminals of one net, or a wire drawn
    twice, lumps on the first."""

    def __init__(self, networks: dict[str, Network],
                 strips: dict[str, list[tuple[Rect, list[tuple[float, int]]]]],
                 wiring: Wiring, src: NDArray[np.int64], pad: NDArray[np.int64]) -> None:
        pad_node: dict[tuple[str, Rect], int] = {}
        for net, nw in networks.items():
            for ti, node in zip(nw.tap_index, nw.tap_nodes, strict=True):
                for p in wiring.taps[ti].pads:
                    pad_node.setdefault((net, p), node)
        # every wire's events, in wiring.wires order (extract keeps each net's in it)
        first: dict[tuple[str, Rect], int] = {}
        kept_of: list[tuple[Rect, list[tuple[float, int]]]] = []
        seen_net: dict[str, int] = defaultdict(int)
        for k, w in enumerate(wiring.wires):
            kept_of.append(strips[w.net][seen_net[w.net]])
            seen_net[w.net] += 1
            if kept_of[-1][1]:
                first.setdefault((w.net, w.rect), k)
        # per shape: a fixed node (a pad), a strip (its events) or neither (-1, -1)
        self.fixed = np.full(len(src), -1, dtype=np.int64)
        self.strip = np.full(len(src), -1, dtype=np.int64)
        starts: list[int] = []
        cuts: list[float] = []
        nodes: list[int] = []
        along: list[int] = []
        strip_of_wire: dict[int, int] = {}
        for s_i, code in enumerate(src.tolist()):
            if code < 0:
                t = wiring.taps[-1 - code]
                self.fixed[s_i] = pad_node.get((t.net, t.pads[int(pad[s_i])]), -1)
                continue
            w = wiring.wires[code]
            k = first.get((w.net, w.rect), -1)
            if k < 0:
                continue
            w0, ev = kept_of[k]
            if k not in strip_of_wire:
                strip_of_wire[k] = len(starts)
                starts.append(len(cuts))
                cuts.extend(e[0] for e in ev)
                nodes.extend(e[1] for e in ev)
                along.append(_axis(w0))
            self.strip[s_i] = strip_of_wire[k]
        self.starts = np.array(starts + [len(cuts)], dtype=np.int64)
        self.cuts = np.array(cuts, dtype=float)
        self.cut_nodes = np.array(nodes, dtype=np.int64)
        self.along = np.array(along, dtype=np.int64)
        self.networks = networks
        self.wiring = wiring
        self.src = src

    def nodes(self, idx: NDArray[np.int64], xs: NDArray[np.float64],
              ys: NDArray[np.float64]) -> NDArray[np.int64]:
        """The node each coupling lumps on: shape ``idx[k]`` at (xs[k], ys[k])."""
        out = np.zeros(len(idx), dtype=np.int64)
        if not len(idx):
            return out
        fixed = self.fixed[idx]
        strip = self.strip[idx]
        out[fixed >= 0] = fixed[fixed >= 0]
        on = np.flatnonzero((fixed < 0) & (strip >= 0))
        if len(on):
            s = strip[on]
            at = np.where(self.along[s] == 0, xs[on], ys[on])
            lo_b, hi_b = self.starts[s], self.starts[s + 1]
            # the first cut at or after ``at`` within each strip's (sorted) cuts
            q = lo_b.copy()
            span = hi_b - lo_b
            while True:
                step = span // 2
                if not np.any(span > 0):
                    break
                mid = q + step
                go = (span > 0) & (self.cuts[np.minimum(mid, len(self.cuts) - 1)] < at)
                q = np.where(go, mid + 1, q)
                span = np.where(go, span - step - 1, step)
            lo = np.clip(q - 1, lo_b, hi_b - 1)
            hi = np.clip(q, lo_b, hi_b - 1)
            pick = np.where(np.abs(self.cuts[lo] - at) <= np.abs(self.cuts[hi] - at), lo, hi)
            out[on] = self.cut_nodes[pick]
        for g in np.flatnonzero((fixed < 0) & (strip < 0)).tolist():
            out[g] = self._nearest(int(idx[g]), float(xs[g]), float(ys[g]))
        return out

    def _nearest(self, shape: int, x: float, y: float) -> int:
        code = int(self.src[shape])
        net = (self.wiring.taps[-1 - code].net if code < 0 else self.wiring.wires[code].net)
        nw = self.networks[net]
        if nw.n_nodes:
            return int(np.argmin(np.hypot(nw.xy[:, 0] - x, nw.xy[:, 1] - y)))
        return 0
