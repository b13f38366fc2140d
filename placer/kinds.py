"""One record per device kind: its terminals, their default nets and the dummy tie net.

A MOS finger has a gate, a source and a drain (and optionally a bulk, which the generic
cell does not draw); a capacitor unit a top and a bottom plate; a resistor unit two ends,
``a`` (top head) and ``b`` (bottom head), the units of one resistor joined in series
(the default) or in parallel.
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["KindInfo", "KINDS_INFO", "JOINS", "default_nets", "default_dummy_net",
           "series_node"]


@dataclass(frozen=True)
class KindInfo:
    """Terminals of one kind of unit: all of them, and those the unit cell draws."""

    name: str
    terminals: tuple[str, ...]
    drawn: tuple[str, ...]
    shared: tuple[str, ...]
    template: str


KINDS_INFO = {
    "mos": KindInfo("mos", ("gate", "source", "drain", "bulk"), ("gate", "source", "drain"),
                    ("gate", "source"), "mos_finger.toml"),
    "cap": KindInfo("cap", ("top", "bottom"), ("top", "bottom"), ("top",), "cap_unit.toml"),
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
    """Net of every dummy terminal when the spec names none.

    The source shared by every MOS device, else the top plate shared by every capacitor,
    else a net named ``TIE``.

    Examples
    --------
    >>> default_dummy_net("mos", [{"source": "VSS"}, {"source": "VSS"}])
    'VSS'
    >>> default_dummy_net("mos", [{"source": "VSS"}, {"source": "SA"}])
    'TIE'
    """
    key = {"mos": "source", "cap": "top"}.get(kind)
    if key is not None:
        found = {n.get(key) for n in nets}
        if len(found) == 1 and None not in found:
            return str(found.pop())
    return "TIE"


def series_node(device: str, i: int) -> str:
    """Name of the node between a series resistor's units i and i + 1 (from 1).

    Examples
    --------
    >>> series_node("RTOP", 1)
    'RTOP_N1'
    """
    return f"{device}_N{i}"
