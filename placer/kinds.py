"""One record per device kind: everything that differs from one kind of unit to another.

A MOS finger has a gate, a source and a drain (and optionally a bulk, which the generic
cell does not draw); a capacitor unit a top and a bottom plate; a resistor unit two ends,
``a`` (top head) and ``b`` (bottom head), the units of one resistor joined in series
(the default) or in parallel.

The modules that read, search, draw, route, budget and report read a :class:`Kind`'s
fields; none of them tests a kind's name. A new kind whose units behave like one of
these (its cell, routing and budget are among those below) is one record here, its
template under ``templates/`` and its tests (DEVELOPERS.md shows one worked through).
"""

from __future__ import annotations

from dataclasses import dataclass, field

__all__ = ["Kind", "KINDS", "JOINS", "default_nets", "default_dummy_net",
           "series_node", "MatchedSet", "default_matched_sets"]

#: How the units of one device can be joined.
JOINS = ("series", "parallel")


@dataclass(frozen=True)
class Kind:
    """What placer knows of one kind of unit.

    Parameters
    ----------
    name : str
        The spec's ``kind``.
    terminals : tuple of str
        Every terminal a spec may name in ``[terminals]``.
    drawn : tuple of str
        The terminals the unit cell draws (a pad and a net each).
    default_net : dict
        Each drawn terminal's default net: a name every device shares (``"GATE"``), or
        ``"_X"``, the device's own net ``<device>_X``.
    template : str
        The shipped unit-cell template (``templates/``): its rules and layers.
    unit_um : tuple of float
        W x L of a unit when the spec gives none.
    cell : str
        The unit cell's geometry and rule set: ``"finger"`` (a gate over diffusion,
        contacts each side), ``"plate"`` (two plates, the top one notched for its
        contact), ``"strip"`` (a resistor body with a head at each end).
    fingers : bool
        Units are MOS fingers: each is drawn one way or flipped (``>``/``<``), neighbours
        share diffusion where their facing nets agree, rows count diffusion breaks, and a
        device's source and drain nets decide the flips.
    joins : tuple of str
        How a device's units may join (``JOINS``); the first is the default.
    routing : str
        The router's plan: ``"rows"`` (every terminal to its net's track in the channel
        below), ``"plates"`` (a shared top plate by strap or channel, bottom plates in the
        channels above and below), ``"chains"`` (series links between a device's units).
    budget : str
        The electrical budget: ``"ratio"`` (each device's ratio to a reference) or
        ``"dac"`` (a binary-weighted array: INL and DNL over every code).
    anchor : str
        The ``[electrical]`` key naming the device the others are measured against.
    quantity : str
        What a unit contributes, for the budget and the wiring term: ``"current"``,
        ``"capacitance"`` or ``"resistance"``.
    unit_value : str or None
        The ``[electrical]`` key of one unit's value (None: the budget needs none).
    electrical_needs : str
        What an ``[electrical]`` table must give, for the message that asks for it.
    matched : str
        Default matched net sets per group: ``"terminals"`` (terminals whose nets differ
        device to device), ``"bottoms"`` (the bottom plates), ``""`` (none).
    spice_ports : tuple of str
        The unit subcircuit's ports, in order, in the netlist.
    device_label : str
        What a budget table calls one of its devices.
    """

    name: str
    terminals: tuple[str, ...]
    drawn: tuple[str, ...]
    default_net: dict[str, str]
    template: str
    cell: str
    routing: str
    budget: str
    anchor: str
    quantity: str
    electrical_needs: str
    spice_ports: tuple[str, ...]
    device_label: str
    unit_um: tuple[float, float] = (1.0, 1.0)
    fingers: bool = False
    joins: tuple[str, ...] = ("parallel",)
    unit_value: str | None = None
    matched: str = ""
    #: terminals whose default net every device shares (derived from ``default_net``)
    shared: tuple[str, ...] = field(init=False)

    def __post_init__(self) -> None:
        object.__setattr__(self, "shared", tuple(
            t for t, n in self.default_net.items() if not n.startswith("_")))


KINDS: dict[str, Kind] = {k.name: k for k in (
    Kind("mos", terminals=("gate", "source", "drain", "bulk"),
         drawn=("gate", "source", "drain"),
         default_net={"gate": "GATE", "source": "SOURCE", "drain": "_D"},
         template="mos_finger.toml", cell="finger", routing="rows", budget="ratio",
         anchor="reference", quantity="current",
         electrical_needs="vov_v (V) or gm_id_per_v (1/V), lambda_per_v (1/V), "
                          "[electrical.vds_v] (V per device)",
         spice_ports=("drain", "gate", "source"), device_label="output", fingers=True,
         matched="terminals"),
    Kind("cap", terminals=("top", "bottom"), drawn=("top", "bottom"),
         default_net={"top": "TOP", "bottom": "_BOT"}, template="cap_unit.toml",
         cell="plate", routing="plates", budget="dac", anchor="termination",
         quantity="capacitance", electrical_needs="termination (device name or \"none\")",
         spice_ports=("top", "bottom"), device_label="capacitor",
         unit_um=(2.0, 2.0),      # the notched plate of cap_unit.toml needs 1.6 x 1.3
         unit_value="unit_cap_ff", matched="bottoms"),
    Kind("res", terminals=("a", "b"), drawn=("a", "b"),
         default_net={"a": "_A", "b": "_B"}, template="res_unit.toml", cell="strip",
         routing="chains", budget="ratio", anchor="reference", quantity="resistance",
         electrical_needs="reference (device name; optional)", spice_ports=("a", "b"),
         device_label="resistor", joins=("series", "parallel"), unit_value="unit_ohm"),
)}


def default_nets(kind: str, device: str) -> dict[str, str]:
    """The nets a device's terminals take when the spec names none.

    A mirror shares its gate and source and keeps its own drain; a capacitor array shares
    the top plate and keeps its own bottom plate; a resistor keeps its own two ends.

    Examples
    --------
    >>> default_nets("mos", "MOUT")
    {'gate': 'GATE', 'source': 'SOURCE', 'drain': 'MOUT_D'}
    >>> default_nets("res", "R1")
    {'a': 'R1_A', 'b': 'R1_B'}
    """
    return {t: f"{device}{n}" if n.startswith("_") else n
            for t, n in KINDS[kind].default_net.items()}


def default_dummy_net(kind: str, nets: list[dict[str, str]]) -> str:
    """Net of every dummy terminal when the spec names none: a rail, never a signal node.

    The bulk net shared by every MOS device; else, for a mirror (every device shares one
    gate and one source), that source; else ``VSS``. A capacitor array's top plate or a
    differential pair's tail is never the default: dummies tied there would load the
    most sensitive node.

    Examples
    --------
    >>> default_dummy_net("mos", [{"gate": "G", "source": "GND"}, {"gate": "G", "source": "GND"}])
    'GND'
    >>> default_dummy_net("mos", [{"gate": "INP", "source": "TAIL"},
    ...                           {"gate": "INN", "source": "TAIL"}])
    'VSS'
    >>> default_dummy_net("cap", [{"top": "TOP", "bottom": "C0_BOT"}])
    'VSS'
    """
    if KINDS[kind].fingers and nets:
        bulks = {n.get("bulk") for n in nets}
        if len(bulks) == 1 and None not in bulks:
            return str(bulks.pop())
        gates, sources = {n.get("gate") for n in nets}, {n.get("source") for n in nets}
        if len(gates) == 1 and len(sources) == 1 and None not in sources:
            return str(sources.pop())
    return "VSS"


def series_node(device: str, i: int) -> str:
    """Name of the node between a series resistor's units i and i + 1 (from 1).

    Examples
    --------
    >>> series_node("RTOP", 1)
    'RTOP_N1'
    """
    return f"{device}_N{i}"


@dataclass(frozen=True)
class MatchedSet:
    """Nets whose wiring must match: the same terminal of devices matched with each other
    (``terminal`` and ``devices`` say which), or a set the spec names (``[match] nets``)."""

    nets: tuple[str, ...]
    devices: tuple[str, ...] = ()
    terminal: str = ""


def default_matched_sets(kind: str, groups: list[list[str]], nets: dict[str, dict[str, str]],
                         rail: str) -> list[MatchedSet]:
    """The matched net sets of each kind's usual circuit, per group of devices.

    For MOS, a terminal whose nets differ from device to device within a group (the two
    gates and the two drains of a differential pair, the outputs of a mirror) forms a set;
    a net that some terminal of the group shares (a mirror's gate, also the reference's
    drain) or the dummy rail is left out. For capacitors, the bottom plates of a group;
    resistors carry no net set (their chains are matched by the link resistance per unit).

    Examples
    --------
    >>> pair = {"MINP": {"gate": "INP", "source": "TAIL", "drain": "OUTN"},
    ...         "MINN": {"gate": "INN", "source": "TAIL", "drain": "OUTP"}}
    >>> [m.nets for m in default_matched_sets("mos", [["MINP", "MINN"]], pair, "VSS")]
    [('INP', 'INN'), ('OUTN', 'OUTP')]
    >>> mirror = {"MR": {"gate": "VB", "source": "VSS", "drain": "VB"},
    ...           "MA": {"gate": "VB", "source": "VSS", "drain": "IA"},
    ...           "MB": {"gate": "VB", "source": "VSS", "drain": "IB"}}
    >>> [m.nets for m in default_matched_sets("mos", [["MR", "MA", "MB"]], mirror, "VSS")]
    [('IA', 'IB')]
    """
    out: list[MatchedSet] = []
    for group in groups:
        if len(group) < 2:
            continue
        rule = KINDS[kind].matched
        if rule == "bottoms":
            bottoms = tuple(dict.fromkeys(nets[d]["bottom"] for d in group))
            if len(bottoms) >= 2:
                out.append(MatchedSet(bottoms, tuple(group), "bottom"))
            continue
        if rule != "terminals":
            continue
        shared = {rail}
        for t in ("gate", "source", "drain"):
            values = [nets[d][t] for d in group]
            if len(set(values)) == 1:
                shared.add(values[0])
        for t in ("gate", "drain", "source"):
            owners = [(nets[d][t], d) for d in group if nets[d][t] not in shared]
            names = [n for n, _ in owners]
            if len(owners) >= 2 and len(set(names)) == len(names):
                out.append(MatchedSet(tuple(names), tuple(d for _, d in owners), t))
    return out
