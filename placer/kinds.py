"""One record per device kind: its terminals, their default nets and the dummy tie net.

A MOS finger has a gate, a source and a drain (and optionally a bulk, which the generic
cell does not draw); a capacitor unit a top and a bottom plate; a resistor unit two ends,
``a`` (top head) and ``b`` (bottom head), the units of one resistor joined in series
(the default) or in parallel.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["KindInfo", "KINDS_INFO", "JOINS", "default_nets", "default_dummy_net",
           "series_node", "MatchedSet", "default_matched_sets"]


@dataclass(frozen=True)
class KindInfo:
    """Terminals of one kind of unit: all of them, and those the unit cell draws."""

    name: str
    terminals: tuple[str, ...]
    drawn: tuple[str, ...]
    shared: tuple[str, ...]
    template: str
    unit_um: tuple[float, float] = (1.0, 1.0)    # W x L when the spec gives none

KINDS_INFO = {
    "mos": KindInfo("mos", ("gate", "source", "drain", "bulk"), ("gate", "source", "drain"),
                    ("gate", "source"), "mos_finger.toml"),
    "cap": KindInfo("cap", ("top", "bottom"), ("top", "bottom"), ("top",), "cap_unit.toml",
                    (2.0, 2.0)),      # the notched plate of cap_unit.toml needs 1.6 x 1.3
    "res": KindInfo("res", ("a", "b"), ("a", "b"), (), "res_unit.toml"),
}

#: How the units of one resistor are joined.
JOINS = ("series", "parallel")

_SHARED_NAMES = {"gate": "GATE", "source": "SOURCE", "top": "TOP"}
_OWN_SUFFIX = {"drain": "D", "bottom": "BOT", "a": "A", "b": "B"}


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
    info = KINDS_INFO[kind]
    return {t: _SHARED_NAMES[t] if t in info.shared else f"{device}_{_OWN_SUFFIX[t]}"
            for t in info.drawn}


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
    if kind == "mos" and nets:
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
        if kind == "cap":
            bottoms = tuple(dict.fromkeys(nets[d]["bottom"] for d in group))
            if len(bottoms) >= 2:
                out.append(MatchedSet(bottoms, tuple(group), "bottom"))
            continue
        if kind != "mos":
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
