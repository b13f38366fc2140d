"""What the drawn wiring does to each device: the relative error the budget adds as its
wiring term, from the parasitics extracted from the routed geometry.

Pure functions of the spec and :class:`placer.layout.parasitics.Parasitics`, first order in the
wiring (the drops and parasitic capacitances are small against the device's own figures):

* ``mos``: every finger carries the unit current ``[electrical] unit_current_ua`` from
  drain to source. The current flows through each net's resistor network to its pin,
  and the voltage it leaves at every finger's gate, source and drain (relative to the
  pins, solved over the network) changes the finger's current by
  dI/I = (gm/ID) (dV_G - dV_S) + lambda (dV_D - dV_S)
  (the square-law current's first-order sensitivities: gm = (gm/ID) I and the output
  conductance lambda I [1]). A diode-connected reference carries its current through its
  gate net, so the outputs' gates see the drop along it. A device's error is the mean
  over its fingers.
* ``res``: each device's resistance grows by its wiring: the links between its series
  units (end to end through their network), and its two ends' resistance to their pins;
  parallel units each see their own. Against ``[electrical] unit_ohm`` per unit:
  dR/R = R_wiring / R_device (series resistances add: Ohm's law).
* ``cap``: the top plate's coupling to a bit's bottom-plate net is charged with the bit,
  so it adds to the bit's capacitance: dC/C = C_coupling / (units x ``unit_cap_ff``).
  Coupling between two bottom plates is driven from both sides and left out; the top
  plate's capacitance to ground only scales the output (a gain error).

[1] P. R. Gray, P. J. Hurst, S. H. Lewis, R. G. Meyer, "Analysis and Design of Analog
    Integrated Circuits", 5th ed., Wiley 2009, section 1.5 (square-law MOS model, its
    small-signal gm and output resistance).
"""

from __future__ import annotations

from collections import defaultdict

import numpy as np

from placer.io.spec import ElectricalSpec, Spec
from placer.kinds import KINDS, series_node
from placer.layout.parasitics import Parasitics, effective_resistances, node_voltages
from placer.model.budget import WiringEffect

__all__ = ["WiringEffect", "wiring_effect"]


def wiring_effect(spec: Spec, par: Parasitics, e: ElectricalSpec) -> WiringEffect:
    """The wiring term of every device of ``spec`` (see the module's rules)."""
    term = {"current": _mos, "resistance": _res, "capacitance": _cap}
    return term[KINDS[spec.kind].quantity](spec, par, e)


def _no_resistance(spec: Spec) -> bool:
    r = spec.routing
    return r.metal1_ohm_per_sq == 0.0 and r.metal2_ohm_per_sq == 0.0 and r.via_ohm == 0.0


def _mos(spec: Spec, par: Parasitics, e: ElectricalSpec) -> WiringEffect:
    counted = (f"IR drop of {e.unit_current_ua:g} uA per finger through each net's "
               "drawn wires and vias, into gate, source and drain")
    zero = dict.fromkeys(spec.devices, 0.0)
    if _no_resistance(spec):
        return WiringEffect(zero, counted)
    amps = e.unit_current_ua * 1e-6
    # current into each net's node from every finger: the drain draws it, the source
    # gives it back (sign conventions of an NMOS; a PMOS flips both, and the result)
    inject: dict[str, dict[int, float]] = defaultdict(lambda: defaultdict(float))
    node_of: dict[tuple[tuple[int, int], str], tuple[str, int]] = {}
    for net, nw in par.networks.items():
        for ti, node in zip(nw.tap_index, nw.tap_nodes, strict=True):
            t = par.taps[ti]
            node_of[t.slot, t.terminal] = (net, node)
            if t.device in spec.devices:
                if t.terminal == "drain":
                    inject[net][node] -= amps
                elif t.terminal == "source":
                    inject[net][node] += amps
    volts: dict[str, np.ndarray] = {}
    for net, nw in par.networks.items():
        if nw.pin is None or not inject.get(net):
            volts[net] = np.zeros(nw.n_nodes)
        else:
            volts[net] = node_voltages(nw, dict(inject[net]), nw.pin)
    per_device: dict[str, list[float]] = defaultdict(list)
    slots = {t.slot: t.device for t in par.taps if t.device in spec.devices}
    lam = e.lambda_per_v
    for slot, dev in slots.items():
        v = {}
        for term in ("gate", "source", "drain"):
            net, node = node_of.get((slot, term), ("", -1))
            v[term] = float(volts[net][node]) if net else 0.0
        per_device[dev].append(e.gm_id_per_v * (v["gate"] - v["source"])
                               + lam * (v["drain"] - v["source"]))
    rel = {d: float(np.mean(per_device[d])) if per_device[d] else 0.0 for d in spec.devices}
    return WiringEffect(rel, counted, notes=_miller(spec, par))


def _miller(spec: Spec, par: Parasitics) -> tuple[str, ...]:
    """Each device's wiring coupling from its gate to its own drain, where two or more
    devices have gates and drains of their own (a differential pair): an unequal Miller
    capacitance upsets the pair's balance in transients."""
    own = {d: (n["gate"], n["drain"]) for d, n in zip(spec.devices, spec.nets, strict=True)
           if n.get("gate") and n.get("drain") and n["gate"] != n["drain"]}
    gates = [g for g, _ in own.values()]
    drains = [dr for _, dr in own.values()]
    if len(own) < 2 or len(set(gates)) < len(gates) or len(set(drains)) < len(drains):
        return ()
    c = {d: par.coupling(g, dr).c_ff for d, (g, dr) in own.items()}
    hi, lo = max(c.values()), min(c.values())
    spread = f"{100 * (hi - lo) / hi:.3g}% apart" if hi > 0 else "none"
    return ("gate to own drain (wiring): " + ", ".join(f"{d} {v:.3g} fF" for d, v in c.items())
            + f" ({spread})",)


def _res(spec: Spec, par: Parasitics, e: ElectricalSpec) -> WiringEffect:
    counted = "series links and each end's resistance to its pin, against unit_ohm"
    zero = dict.fromkeys(spec.devices, 0.0)
    if e.unit_ohm is None:
        return WiringEffect(zero, counted, "[electrical] unit_ohm (one unit's resistance)")
    if _no_resistance(spec):
        return WiringEffect(zero, counted)
    r_pin: dict[tuple[tuple[int, int], str], float] = {}
    for t in par.taps:
        if t.device in spec.devices:
            r_pin[t.slot, t.terminal] = t.r_to_pin_ohm or 0.0
    link = {name: (f.r_max_ohm or 0.0) for name, f in par.nets.items()}
    dev_of = {t.slot: t.device for t in par.taps}
    rel: dict[str, float] = {}
    for dev, n, join in zip(spec.devices, spec.counts, spec.joins, strict=True):
        mine = [(s, term) for (s, term) in r_pin if dev_of.get(s) == dev]
        if join == "series":
            wiring = sum(link.get(series_node(dev, i), 0.0) for i in range(1, n))
            wiring += _end(par, spec, dev, "a") + _end(par, spec, dev, "b")
            rel[dev] = wiring / (n * e.unit_ohm)
        else:
            by_slot: dict[tuple[int, int], float] = defaultdict(float)
            for s, term in mine:
                by_slot[s] += r_pin[s, term]
            g = sum(1.0 / (e.unit_ohm + w) for w in by_slot.values())
            rel[dev] = (1.0 / g) / (e.unit_ohm / n) - 1.0 if g > 0 else 0.0
    return WiringEffect(rel, counted)


def _end(par: Parasitics, spec: Spec, dev: str, terminal: str) -> float:
    """Resistance from a series device's end (its one tap on the terminal's net) to that
    net's pin."""
    net = spec.nets[spec.devices.index(dev)][terminal]
    nw = par.networks.get(net)
    if nw is None or nw.pin is None:
        return 0.0
    nodes = [node for ti, node in zip(nw.tap_index, nw.tap_nodes, strict=True)
             if par.taps[ti].device == dev]
    if not nodes:
        return 0.0
    rs = effective_resistances(nw, nodes, nw.pin)
    return float(min(rs))


def _cap(spec: Spec, par: Parasitics, e: ElectricalSpec) -> WiringEffect:
    counted = "top plate's coupling to each bit's bottom-plate net, against unit_cap_ff"
    zero = dict.fromkeys(spec.devices, 0.0)
    if e.unit_cap_ff is None:
        return WiringEffect(zero, counted, "[electrical] unit_cap_ff (one unit's capacitance)")
    rel: dict[str, float] = {}
    for dev, n, nets in zip(spec.devices, spec.counts, spec.nets, strict=True):
        c = par.coupling(nets["top"], nets["bottom"]).c_ff
        rel[dev] = c / (n * e.unit_cap_ff)
    return WiringEffect(rel, counted)
