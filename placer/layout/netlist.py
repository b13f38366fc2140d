"""A SPICE netlist of the routed array: one subcircuit instance per unit and the drawn
wiring as R and C elements, for a designer to simulate what the wiring does.

Every net's resistor network (:mod:`placer.layout.parasitics`) becomes resistors between nodes
``<net>_<k>`` (nodes a zero-ohm wire joins are one); the net's pin node is the net's
own name, so a test bench attaches its sources by net name. Each unit's terminal
connects to its node of that network. The capacitance of each wire piece to ground and
the coupling between nets are lumped onto the nearest nodes. Dummies are left out (they
carry no current).

The devices are illustrative, from the spec alone: a level-1 (square-law) MOS whose
transconductance factor gives each finger ``[electrical] unit_current_ua`` at the
overdrive 2 / (gm/ID) and whose lambda is the spec's; a capacitor of ``unit_cap_ff``; a
resistor of ``unit_ohm``. They stand in for the process's models, which a designer puts in
their place.
"""

from __future__ import annotations

import re

from placer.io.spec import Spec
from placer.kinds import KINDS
from placer.layout.parasitics import Parasitics

__all__ = ["netlist", "subckt_name", "VTO_V"]

#: Threshold of the illustrative MOS model (V).
VTO_V = 0.5
_SAFE = re.compile(r"[^A-Za-z0-9_]")


def subckt_name(spec: Spec) -> str:
    """The array's subcircuit name."""
    return _SAFE.sub("_", spec.name).upper() + "_ARRAY"


def _value(v: float, unit: str) -> str:
    return f"{v:.6g}{unit}"


def _merged(par: Parasitics) -> dict[str, dict[int, str]]:
    """Each network node's SPICE name, nodes joined by zero-ohm wires merged into one
    (a resistor of nothing would only make the circuit matrix ill-conditioned)."""
    names: dict[str, dict[int, str]] = {}
    for net, nw in par.networks.items():
        parent = list(range(nw.n_nodes))

        def find(k: int, parent: list[int] = parent) -> int:
            while parent[k] != k:
                parent[k] = parent[parent[k]]
                k = parent[k]
            return k

        for (i, j), ohm in zip(nw.edges.tolist(), nw.ohms.tolist(), strict=True):
            if ohm <= 0.0:
                ri, rj = find(i), find(j)
                if ri != rj:
                    parent[max(ri, rj)] = min(ri, rj)
        pin_root = find(nw.pin) if nw.pin is not None else None
        names[net] = {k: (net if find(k) == pin_root else f"{net}_{find(k)}")
                      for k in range(nw.n_nodes)}
    return names


def netlist(spec: Spec, par: Parasitics) -> str:
    """The netlist text: models, the unit subcircuit, and the array subcircuit whose ports
    are the block's pinned nets (in net order)."""
    e = spec.electrical
    kind = KINDS[spec.kind]
    sub = f"placer_{kind.name}"
    w, length = spec.unit.width_um, spec.unit.length_um
    lines = [f"* {spec.name}: placer's routed array, units and drawn wiring",
             "* model estimates with illustrative devices; use the process's models and "
             "confirm with extraction"]
    if kind.quantity == "current":
        gm_id = e.gm_id_per_v if e is not None else 10.0
        amps = (e.unit_current_ua if e is not None else 10.0) * 1e-6
        lam = e.lambda_per_v if e is not None else 0.0
        vov = 2.0 / gm_id
        kp = 2.0 * amps * length / (w * vov * vov)
        # a PMOS unit: the same square law, threshold and currents negative; a block of
        # both polarities has a unit of each
        for pol in sorted({spec.polarity_of(d) for d in spec.devices}):
            ptype = pol == "p"
            name, model = (f"{sub}_p", "placer_unit_p") if ptype and spec.mixed else (
                sub, "placer_unit")
            lines += [f".model {model} {'pmos' if ptype else 'nmos'} (level=1 "
                      f"vto={-VTO_V if ptype else VTO_V:g} kp={kp:.6g} lambda={lam:.6g})",
                      f".subckt {name} d g s",
                      f"M1 d g s s {model} W={_value(w, 'u')} L={_value(length, 'u')}",
                      f".ends {name}"]
    elif kind.quantity == "capacitance":
        cu = e.unit_cap_ff if e is not None and e.unit_cap_ff is not None else 1.0
        lines += [f".subckt {sub} top bottom", f"C1 top bottom {_value(cu, 'f')}",
                  f".ends {sub}"]
    else:
        ru = e.unit_ohm if e is not None and e.unit_ohm is not None else 1000.0
        lines += [f".subckt {sub} a b", f"R1 a b {_value(ru, '')}", f".ends {sub}"]
    ports = [n for n, nw in par.networks.items() if nw.pin is not None]
    lines.append(f".subckt {subckt_name(spec)} " + " ".join(ports))
    # units
    named = _merged(par)
    term_node: dict[tuple[tuple[int, int], str], str] = {}
    for net, nw in par.networks.items():
        for ti, node in zip(nw.tap_index, nw.tap_nodes, strict=True):
            t = par.taps[ti]
            term_node[t.slot, t.terminal] = named[net][node]
    order = kind.spice_ports
    slots = sorted({(t.slot, t.device) for t in par.taps if t.device in spec.devices})
    for (r, c), dev in slots:
        nodes = [term_node.get(((r, c), t), "0") for t in order]
        own = f"{sub}_p" if spec.mixed and spec.polarity_of(dev) == "p" else sub
        lines.append(f"X{dev}_r{r}c{c} " + " ".join(nodes) + f" {own}")
    # wiring
    k = 0
    for net, nw in par.networks.items():
        for (i, j), ohm in zip(nw.edges.tolist(), nw.ohms.tolist(), strict=True):
            a, b = named[net][i], named[net][j]
            if a == b:
                continue
            k += 1
            lines.append(f"RW{k} {a} {b} {_value(ohm, '')}")
    k = 0
    for net, node, ff in par.node_ground:
        if ff <= 0:
            continue
        k += 1
        lines.append(f"CG{k} {named[net][node]} 0 {_value(ff, 'f')}")
    for a, na, b, nb, ff in par.node_couplings:
        if ff <= 0:
            continue
        k += 1
        lines.append(f"CC{k} {named[a][na]} {named[b][nb]} {_value(ff, 'f')}")
    lines.append(f".ends {subckt_name(spec)}")
    return "\n".join(lines) + "\n"
