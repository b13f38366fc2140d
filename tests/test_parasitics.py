"""Wiring parasitics and matched routing, checked apart.

placer's own extraction (:mod:`placer.layout.parasitics`, what ``report.json`` and the net table
print) is compared with :mod:`tests.parasitics`, a checker written from the layout
contract alone that reads only the GDSII placer wrote. The matched-routing goals are then
measured with that checker, never with the router's own data:

* matched nets (the two sides of a differential pair) carry equal wire length (within
  2 %), equal via counts, and the gate of each side faces its own drain at minimum space
  over lengths within 5 % of each other (the Miller side: common practice, an unequal
  gate-drain coupling turns into an offset of the pair);
* a capacitor array's top plate couples to each bit's bottom plate in proportion to the
  bit's units (per unit within 5 % across bits), so the coupling scales every bit's
  weight alike (common practice: an unequal parasitic per bit is a DNL error of the DAC).
"""

from __future__ import annotations

import math
from collections import defaultdict
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from placer.io.pattern import Pattern
from placer.jobs.arrange import arrange
from placer.jobs.load import load_spec, parse_spec
from placer.layout.block import area_of, layout_of, wiring_of
from placer.layout.gdswrite import write_gds
from tests import parasitics as checker

LAYERS = Path("templates/layers.toml")


def _figures(block) -> dict[str, float]:
    r, rules = block.spec.routing, block.tools.rules
    return {"metal1_ohm_per_sq": r.metal1_ohm_per_sq, "metal2_ohm_per_sq": r.metal2_ohm_per_sq,
            "via_ohm": r.via_ohm, "wire_ff_per_um": r.wire_ff_per_um,
            "coupling_ff_per_um": r.coupling_ff_per_um,
            "overlap_ff_per_um2": r.overlap_ff_per_um2,
            "metal1_space": rules.metal1_space, "metal2_space": rules.metal2_space}


def _drawn(tmp_path: Path, pattern: Pattern, spec, name: str = "t"):
    """The block placer routes for ``pattern`` and the checker's reading of its GDSII."""
    lib, block = layout_of(pattern.reordered(spec.devices), spec)
    path = tmp_path / f"{name}.gds"
    write_gds(lib, path)
    return block, checker.measure(path, LAYERS, _figures(block))


def _arranged(tmp_path: Path, sample: str):
    spec = load_spec(Path("samples") / f"{sample}.toml")
    result = arrange(spec, seed=1, time_limit_s=2.0)
    return _drawn(tmp_path, result.pattern, result.spec, sample)


def _coupling(measured: dict, a: str, b: str) -> dict:
    for c in measured["couplings"]:
        if {c["a"], c["b"]} == {a, b}:
            return c
    return {"a": a, "b": b, "c_ff": 0.0, "facing_um": 0.0, "facing_min_um": 0.0,
            "overlap_um2": 0.0}


# ------------------------------------------------------- placer's figures against the checker

@pytest.mark.parametrize("sample", ["input_pair", "fc_amp", "bias_mirror", "sar_cdac",
                                    "ref_ladder"])
def test_reported_parasitics_agree_with_the_independent_checker(tmp_path, sample):
    """Per net: wire length, vias and ground capacitance; per unit terminal: resistance to
    the pin (a sparse network solve on both sides); per net pair: coupling and the facing
    length at minimum space. Both read the same geometry, so they agree to rounding."""
    block, measured = _arranged(tmp_path, sample)
    par = block.parasitics
    assert set(measured["nets"]) == set(par.nets)
    for name, fig in par.nets.items():
        m = measured["nets"][name]
        assert fig.wire_um == pytest.approx(m["wire_um"], abs=1e-6), name
        assert fig.vias == m["vias"], name
        assert fig.ground_ff == pytest.approx(m["ground_ff"], rel=1e-9, abs=1e-9), name
    px, py = block.spec.array.pitch_um
    mine: dict[tuple, list[float]] = defaultdict(list)
    for t in par.taps:
        if t.r_to_pin_ohm is not None:
            mine[t.net, round(t.slot[1] * px, 3), round(-t.slot[0] * py, 3)].append(
                t.r_to_pin_ohm)
    theirs: dict[tuple, list[float]] = defaultdict(list)
    for t in measured["taps"]:
        if t["r_ohm"] is not None:
            theirs[t["net"], round(t["x"], 3), round(t["y"], 3)].append(t["r_ohm"])
    assert set(mine) == set(theirs)
    for key, rs in mine.items():
        assert sorted(rs) == pytest.approx(sorted(theirs[key]), rel=1e-6, abs=1e-9), key
    assert {frozenset((c.a, c.b)) for c in par.couplings} == \
        {frozenset((c["a"], c["b"])) for c in measured["couplings"]}
    for c in par.couplings:
        m = _coupling(measured, c.a, c.b)
        assert c.c_ff == pytest.approx(m["c_ff"], rel=1e-3, abs=1e-4), (c.a, c.b)
        assert c.facing_min_um == pytest.approx(m["facing_min_um"], abs=2e-3), (c.a, c.b)
        assert c.facing_um == pytest.approx(m["facing_um"], abs=2e-3), (c.a, c.b)


# ------------------------------------------------------------------------- matched routing

def _pair_checks(measured: dict, pairs: list[tuple[str, str]],
                 miller: tuple[tuple[str, str], tuple[str, str]]) -> None:
    nets = measured["nets"]
    for a, b in pairs:
        la, lb = nets[a]["wire_um"], nets[b]["wire_um"]
        assert abs(la - lb) <= 0.02 * max(la, lb), (a, la, b, lb)
        assert nets[a]["vias"] == nets[b]["vias"], (a, b)
    fa = _coupling(measured, *miller[0])["facing_min_um"]
    fb = _coupling(measured, *miller[1])["facing_min_um"]
    assert abs(fa - fb) <= 0.05 * max(fa, fb, 1e-9), (miller, fa, fb)


@pytest.mark.parametrize("sample,pairs,miller", [
    ("input_pair", [("INP", "INN"), ("OUTN", "OUTP")], (("INP", "OUTN"), ("INN", "OUTP"))),
    ("fc_amp", [("INP", "INN"), ("FN", "FP")], (("INP", "FN"), ("INN", "FP"))),
])
def test_a_differential_pair_routes_both_sides_alike(tmp_path, sample, pairs, miller):
    _, measured = _arranged(tmp_path, sample)
    _pair_checks(measured, pairs, miller)


def test_a_1024_unit_pair_routes_both_sides_alike(tmp_path):
    """32 x 32 units in a checkerboard (common centroid), a dummy column at each end."""
    text = Path("samples/input_pair.toml").read_text()
    text = text.replace("MINP = 4", "MINP = 512").replace("MINN = 4", "MINN = 512")
    text = text.replace("rows = 2", "rows = 32")
    spec = parse_spec(text, "pair1024.toml")
    r, c = np.indices((32, 32))
    ids = np.full((32, 34), -1)
    ids[:, 1:33] = (r + c) % 2
    orient = np.zeros_like(ids, dtype=np.int8)
    orient[:, 1:33] = np.where(c % 2 == 0, 1, -1)        # fingers mirrored in pairs
    _, measured = _drawn(tmp_path, Pattern(("MINP", "MINN"), ids, orient), spec, "pair1024")
    _pair_checks(measured, [("INP", "INN"), ("OUTN", "OUTP")],
                 (("INP", "OUTN"), ("INN", "OUTP")))


def _per_unit_top_coupling(measured: dict, counts: dict[str, int]) -> dict[str, float]:
    out = {}
    for dev, n in counts.items():
        c = _coupling(measured, "TOP", f"{dev}_BOT")
        out[dev] = (c["c_ff"] / n, c["facing_min_um"] / n)
    return out


def _top_coupling_is_even(per_unit: dict, spread: float) -> None:
    """Facing at minimum space per unit within 5 % across bits (or none at all), and the
    whole coupling per unit within ``spread``."""
    at_min = [f for _, f in per_unit.values()]
    if max(at_min) > 0.0:
        assert max(at_min) <= 1.05 * min(at_min), per_unit
    cs = [c for c, _ in per_unit.values()]
    assert max(cs) <= (1 + spread) * min(cs), per_unit


def test_sar_cdac_top_plate_couples_to_every_bit_alike_per_unit(tmp_path):
    block, measured = _arranged(tmp_path, "sar_cdac")
    counts = dict(zip(block.spec.devices, block.spec.counts, strict=True))
    _top_coupling_is_even(_per_unit_top_coupling(measured, counts), 0.05)
    # in its ring of 1 um dummy strips the 6-bit sample's plates fill at least 45 % of
    # the block (common practice: roughly half for a routed capacitor DAC); the same
    # array in a ring of whole dummy cells cannot, its 36 dummy slots being most of it
    assert block.spec.array.ring_depth_um == 1.0
    area = area_of(block)
    w, h = block.wiring.size_um
    assert area.unit_fraction == pytest.approx(64 * 25.0 / (w * h))
    assert area.unit_fraction >= 0.45, area
    whole = replace(block.spec, array=replace(block.spec.array, ring_depth_um=None))
    _, full = layout_of(block.pattern, whole)
    assert w * h < 0.8 * full.wiring.size_um[0] * full.wiring.size_um[1]


@pytest.mark.parametrize("seed, ring", [(3, "strips"), (4, "whole"), (5, "none"),
                                        (6, "none")])
def test_any_order_of_the_sar_cdac_couples_every_bit_alike(tmp_path, seed, ring):
    """Whatever the order (here seeded random ones, in the sample's ring of dummy strips,
    in a ring of whole dummy cells or with none), the one-unit bits included, whose stubs
    may land on any track of a channel: the checker finds the same coupling per unit for
    every bit, since each stub faces its own top plate only, a stub crossing a channel
    ends over the far row's notch, and the bottom plates' trunks stand beyond the reach
    of the last column's top plates."""
    spec = load_spec(Path("samples/sar_cdac.toml"))
    if ring != "strips":
        spec = replace(spec, array=replace(spec.array, ring_depth_um=None))
    units = np.repeat(np.arange(len(spec.devices)), spec.counts)
    np.random.default_rng(seed).shuffle(units)
    if ring != "none":
        ids = np.full((10, 10), -1)
        ids[1:9, 1:9] = units.reshape(8, 8)
    else:
        ids = units.reshape(8, 8)
    orient = np.where(ids >= 0, 1, 0).astype(np.int8)
    _, measured = _drawn(tmp_path, Pattern(spec.devices, ids, orient), spec, "cdac6")
    per_unit = _per_unit_top_coupling(measured, dict(zip(spec.devices, spec.counts,
                                                         strict=True)))
    cs = [c for c, _ in per_unit.values()]
    assert max(cs) == pytest.approx(min(cs), rel=1e-6), per_unit   # the checker rounds


def _ten_bit(tmp_path: Path):
    """A 10-bit array (1 + 1 + 2 + ... + 512 units) on 32 x 32 slots in a seeded random
    order inside a ring of dummies: the wiring's evenness must not depend on the
    arrangement."""
    names = ["CT"] + [f"C{i}" for i in range(10)]
    counts = [1] + [2 ** i for i in range(10)]
    text = ('name = "cdac10"\nkind = "cap"\n[devices]\n'
            + "".join(f"{n} = {k}\n" for n, k in zip(names, counts, strict=True))
            + '[array]\ndummies = "ring"\n[unit]\nwidth_um = 5.0\nlength_um = 5.0\n')
    spec = parse_spec(text, "cdac10.toml")
    units = np.repeat(np.arange(len(names)), counts)
    np.random.default_rng(7).shuffle(units)
    ids = np.full((34, 34), -1)
    ids[1:33, 1:33] = units.reshape(32, 32)
    orient = np.where(ids >= 0, 1, 0).astype(np.int8)
    block, measured = _drawn(tmp_path, Pattern(tuple(names), ids, orient), spec, "cdac10")
    return block, measured, dict(zip(names, counts, strict=True))


def test_a_ten_bit_array_couples_its_top_plate_to_every_bit_alike(tmp_path):
    block, measured, counts = _ten_bit(tmp_path)
    _top_coupling_is_even(_per_unit_top_coupling(measured, counts), 0.05)
    cs = [c for c, _ in _per_unit_top_coupling(measured, counts).values()]
    assert max(cs) == pytest.approx(min(cs), rel=1e-6)    # alike by construction
    # the area the block takes: common practice puts a routed capacitor DAC's plates at
    # roughly half of its area; the shipped template's stick pattern reaches it
    area = area_of(block)
    w, h = block.wiring.size_um
    assert area.block_um2 == pytest.approx(w * h)
    assert area.unit_fraction == pytest.approx(1024 * 25.0 / (w * h))
    assert area.unit_fraction >= 0.45, area


def test_a_256_unit_resistor_ladder_takes_a_compact_block(tmp_path):
    """The 1:1:2 ladder of the sample at 256 units (16 x 16 in end dummies, a seeded random
    order, every unit in a series chain): its channels hold only the links they carry, so
    the block stays under a third of the 212.9 x 1185.7 um that a router reserving a track
    for every net in every channel drew for it (the measurement that asked for compact
    channels), and it still extracts clean."""
    text = Path("samples/ref_ladder.toml").read_text()
    text = (text.replace("RTOP = 4", "RTOP = 64").replace("RMID = 4", "RMID = 64")
            .replace("RBOT = 8", "RBOT = 128").replace("rows = 1", "rows = 16"))
    spec = parse_spec(text, "ladder256.toml")
    units = np.repeat(np.arange(3), [64, 64, 128])
    np.random.default_rng(2).shuffle(units)
    ids = np.full((16, 18), -1)
    ids[:, 1:17] = units.reshape(16, 16)
    pattern = Pattern(spec.devices, ids, np.where(ids >= 0, 1, 0).astype(np.int8))
    block, measured = _drawn(tmp_path, pattern, spec, "ladder256")
    w, h = block.wiring.size_um
    assert w * h < (212.9 * 1185.7) / 3, (w, h)
    from placer.layout.cells import load_rules, spacing_rules
    from tests import extraction

    report = extraction.check(tmp_path / "ladder256.gds", LAYERS,
                              spacing_um=spacing_rules(load_rules("res")))
    assert report.ok(), report.summary()


def test_no_facing_means_no_coupling_and_resistance_scales_with_sheet(tmp_path):
    """Two identities on placer's own figures: the resistance of every terminal scales
    exactly with the sheet and via resistances when all are scaled alike (a linear
    network), and zero coupling per um gives zero coupling."""
    from dataclasses import replace

    spec = load_spec(Path("samples/bias_mirror.toml"))
    result = arrange(spec, seed=1, time_limit_s=1.0)
    base = result.spec
    r = base.routing
    tenfold = replace(base, routing=replace(r, metal1_ohm_per_sq=10 * r.metal1_ohm_per_sq,
                                            metal2_ohm_per_sq=10 * r.metal2_ohm_per_sq,
                                            via_ohm=10 * r.via_ohm, coupling_ff_per_um=0.0,
                                            overlap_ff_per_um2=0.0))
    _, b1 = layout_of(result.pattern, base)
    _, b10 = layout_of(result.pattern, tenfold)
    r1 = [t.r_to_pin_ohm for t in b1.parasitics.taps]
    r10 = [t.r_to_pin_ohm for t in b10.parasitics.taps]
    assert any(x for x in r1)
    for x, y in zip(r1, r10, strict=True):
        assert (x is None) == (y is None)
        if x is not None:
            assert y == pytest.approx(10 * x, rel=1e-9)
    assert all(c.c_ff == 0.0 for c in b10.parasitics.couplings)
    assert not math.isnan(sum(n.capacitance_ff for n in b10.wiring.nets))


def test_the_pairs_gate_drain_coupling_note_is_the_checkers(tmp_path):
    """The budget's note on a pair's gate-to-own-drain wiring coupling gives the
    independent checker's coupling of those nets (to the 3 digits it prints)."""
    import re

    from placer.layout.wiring_error import wiring_effect

    block, measured = _arranged(tmp_path, "input_pair")
    notes = wiring_effect(block.spec, block.parasitics, block.spec.electrical).notes
    assert len(notes) == 1
    shown = dict(re.findall(r"(MIN[PN]) ([0-9.e+-]+) fF", notes[0]))
    for dev, (g, d) in {"MINP": ("INP", "OUTN"), "MINN": ("INN", "OUTP")}.items():
        assert float(shown[dev]) == pytest.approx(_coupling(measured, g, d)["c_ff"], rel=2e-3)


def test_dac_wiring_term_is_the_hand_calculated_transfer_from_the_checkers_couplings(
        tmp_path):
    """The top plate's coupling to each bit, read by the independent checker, added to
    that bit's capacitance (C_b = n_b C_u + C_top,b); the charge-redistribution transfer
    V(k) = sum of the switched C_b / sum of all C; INL and DNL against the end-point line
    in LSB (IEEE Std 1658-2011 definitions), computed here by hand."""
    from placer.model.budget import budget
    from placer.model.grade import grade_pattern

    # plates of 2 um are too narrow for the centred notches: their corner notches let a
    # stub face a neighbour's plate or the far row's, so the coupling per unit differs
    text = Path("samples/sar_cdac.toml").read_text()
    text = text.replace("width_um = 5.0", "width_um = 2.0").replace("length_um = 5.0",
                                                                    "length_um = 2.0")
    result = arrange(parse_spec(text, "sar_cdac_small.toml"), seed=1, time_limit_s=2.0)
    block, measured = _drawn(tmp_path, result.pattern, result.spec, "sar_cdac_small")
    spec = block.spec
    e = spec.electrical
    assert e.fit == "endpoint" and e.unit_cap_ff
    pattern = block.pattern
    bud = budget(pattern, spec, grade_pattern(pattern, spec), wiring_of(block))
    count = dict(zip(spec.devices, spec.counts, strict=True))
    cap = {d: count[d] * e.unit_cap_ff + _coupling(measured, "TOP", f"{d}_BOT")["c_ff"]
           for d in spec.devices}
    bits = sorted((d for d in spec.devices if d != e.termination), key=lambda d: count[d])
    total = sum(cap.values())
    codes = np.arange(2 ** len(bits))
    v = np.array([sum(cap[b] for i, b in enumerate(bits) if k >> i & 1) for k in codes]) / total
    lsb = (v[-1] - v[0]) / (len(codes) - 1)
    inl = (v - (v[0] + codes * lsb)) / lsb
    dnl = np.diff(v) / lsb - 1.0
    assert bud.wiring_inl_lsb == pytest.approx(np.abs(inl).max(), rel=1e-2, abs=1e-7)
    assert bud.wiring_dnl_lsb == pytest.approx(np.abs(dnl).max(), rel=1e-2, abs=1e-7)
    assert bud.wiring_dnl_lsb > 1e-5          # the coupling is not the same per unit


@pytest.mark.parametrize("sample", ["bias_mirror", "input_pair", "ref_ladder"])
def test_the_netlists_lumped_capacitors_add_up_to_the_nets_figures(sample):
    """Conservation: the capacitors the netlist places node by node must add up, per net,
    to the net's ground capacitance, and per pair of nets to their coupling (the lumping
    only decides where each part sits, never how much there is)."""
    from placer.io.pattern import parse_pattern
    from tests.helpers import SAMPLES

    spec = load_spec(SAMPLES / f"{sample}.toml")
    hand = SAMPLES / f"{sample}_hand.txt"
    if hand.exists():
        pattern = parse_pattern(hand.read_text()).reordered(spec.devices)
    else:
        pattern = arrange(spec, seed=0, time_limit_s=1.0).pattern
    _, block = layout_of(pattern, spec)
    par = block.parasitics
    ground: dict[str, float] = defaultdict(float)
    for net, _, c in par.node_ground:
        ground[net] += c
    for net, fig in par.nets.items():
        assert ground[net] == pytest.approx(fig.ground_ff, rel=1e-9, abs=1e-12), net
    pairs: dict[frozenset, float] = defaultdict(float)
    for a, _, b, _, c in par.node_couplings:
        pairs[frozenset((a, b))] += c
    assert pairs
    for c in par.couplings:
        assert pairs[frozenset((c.a, c.b))] == pytest.approx(c.c_ff, rel=1e-9, abs=1e-12)


# ------------------------------------------------------ effective resistance, two solvers

def _random_network(rng: np.random.Generator, n: int, loops: int):
    """A random tree on ``n`` nodes plus ``loops`` extra resistors (some parallel, some of
    zero ohms, one self-loop) and two nodes left unconnected."""
    from placer.layout.parasitics import Network

    edges = [(k, int(rng.integers(0, k))) for k in range(1, n - 2)]
    edges += [tuple(int(v) for v in rng.integers(0, n - 2, size=2)) for _ in range(loops)]
    edges += [edges[0], (3, 3)]
    ohms = rng.uniform(0.1, 50.0, size=len(edges))
    ohms[rng.random(len(edges)) < 0.1] = 0.0
    return Network("N", n, np.array(edges, dtype=np.int64), ohms,
                   np.zeros(len(edges), dtype=bool), 0, (), (), np.zeros((n, 2)))


def _dense_resistances(nw, ground: int) -> dict[int, float]:
    """R(v) = (L_g^-1)[v, v] of the grounded Laplacian (Kirchhoff; any circuit-analysis
    text) by numpy's dense inverse, zero-ohm resistors first merged into one node each,
    for every node connected to ``ground``."""
    root = list(range(nw.n_nodes))

    def find(v: int) -> int:
        while root[v] != v:
            v = root[v]
        return v

    for (i, j), r in zip(nw.edges.tolist(), nw.ohms, strict=True):
        if r == 0.0:
            root[find(i)] = find(j)
    lap = np.zeros((nw.n_nodes, nw.n_nodes))
    for (i, j), r in zip(nw.edges.tolist(), nw.ohms, strict=True):
        a, b = find(i), find(j)
        if r > 0.0 and a != b:
            lap[a, a] += 1 / r
            lap[b, b] += 1 / r
            lap[a, b] -= 1 / r
            lap[b, a] -= 1 / r
    g = find(ground)
    reach, todo = {g}, [g]
    while todo:
        v = todo.pop()
        for u in np.flatnonzero(lap[v]).tolist():
            if u not in reach:
                reach.add(u)
                todo.append(u)
    keep = sorted(reach - {g})
    inv = np.linalg.inv(lap[np.ix_(keep, keep)]).diagonal()
    at = dict(zip(keep, inv.tolist(), strict=True))
    return {v: at.get(find(v), 0.0) for v in range(nw.n_nodes) if find(v) in reach}


@pytest.mark.parametrize("loops", [0, 1, 7, 40])
def test_the_spanning_tree_solve_is_the_dense_inverse(monkeypatch, loops):
    """Resistance from each node to the ground node by the tree-plus-loops (Woodbury)
    solve, against the definition by a dense inverse (above); unconnected nodes are inf.
    The sparse LU path the solver falls back to agrees where no resistor is zero (its
    1e12 S for a zero-ohm resistor costs it digits: placer's networks merge those)."""
    from dataclasses import replace

    from placer.layout import parasitics as par

    nw = _random_network(np.random.default_rng(loops), 60, loops)
    want = _dense_resistances(nw, 0)
    assert set(want) == set(range(58))
    nodes = list(range(nw.n_nodes))
    fast = par.effective_resistances(nw, nodes, 0)
    assert fast[:58] == pytest.approx([want[v] for v in range(58)], rel=1e-9, abs=1e-9)
    assert fast[58:] == [math.inf, math.inf]
    positive = replace(nw, ohms=np.where(nw.ohms > 0, nw.ohms, 0.01))
    fast = par.effective_resistances(positive, nodes, 0)
    monkeypatch.setattr(par, "TREE_LOOPS", -1)              # the sparse LU path
    assert par._tree_resistances(positive, 0, nodes) is None
    assert par.effective_resistances(positive, nodes, 0) == pytest.approx(fast, rel=1e-9)


def test_near_zero_resistors_in_loops_are_shorts():
    """Loops of (near) zero-ohm resistors: their ends are one node (Kirchhoff: a short),
    so three parallel paths of which two are shorts give 0, and a triangle of 1e-300 ohm
    joined to ground by three 1-ohm resistors gives three 1-ohm resistors in parallel
    (1/3 ohm). These left the loop correction's matrix singular before."""
    from placer.layout.parasitics import Network, effective_resistances

    def net(n, edges, ohms):
        return Network("N", n, np.array(edges), np.array(ohms, dtype=float),
                       np.zeros(len(edges), dtype=bool), 0, (), (), np.zeros((n, 2)))

    assert effective_resistances(net(2, [(0, 1)] * 3, [1e5, 0.0, 0.0]), [1], 0) == [0.0]
    k4 = net(4, [(0, 1), (0, 2), (0, 3), (1, 2), (2, 3), (1, 3)],
             [1.0, 1.0, 1.0, 1e-300, 1e-300, 1e-300])
    assert effective_resistances(k4, [1, 2, 3], 0) == pytest.approx([1 / 3] * 3)
