"""The layer map: each role's GDSII layer and datatype, and how the roles conduct.

A role is placer's word for what a layer does in its cells (diffusion, gate, metal1 ...).
The ``[connect]`` table states which roles conduct, which cut roles join which
conductors, and which role splits another under it; it is the part of the layout
contract that lets any checker extract connectivity from the GDSII and this file alone.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from placer.errors import shown
from placer.layout.cells import TemplateError, read_toml

__all__ = ["ROLES", "OPTIONAL_ROLES", "LayerMap", "load_layers", "MAX_LAYER"]

ROLES = ("diffusion", "gate", "contact", "metal1", "metal2", "via1", "label", "outline",
         "dummy", "marker", "resistor")
#: Roles a map may leave out when no block it draws uses them: the guard ring's tap
#: implant and a PMOS block's well (a map written before they existed stays valid).
OPTIONAL_ROLES = ("well", "tap")
MAX_LAYER = 32767          # layer and datatype are 2-byte signed integers in the stream
_CONDUCTORS = ("diffusion", "gate", "metal1", "metal2")
_CUTS = {"contact": ("diffusion", "gate", "metal1"), "via1": ("metal1", "metal2")}
_SPLITS = {"gate": ("diffusion",)}
#: With the optional roles: the well conducts, and the tap implant joins the diffusion
#: under it to the well (a tie); a device's diffusion in the well, without it, does not.
_WELL_CONDUCTORS = _CONDUCTORS + ("well",)
_WELL_CUTS = {**_CUTS, "tap": ("diffusion", "well")}


@dataclass(frozen=True)
class LayerMap:
    """Role -> (layer, datatype), with the connectivity of the roles."""

    layers: dict[str, tuple[int, int]]
    source: str
    conductors: tuple[str, ...] = _CONDUCTORS

    def __getitem__(self, role: str) -> tuple[int, int]:
        try:
            return self.layers[role]
        except KeyError:
            raise TemplateError(f"{self.source}: [layers] has no {role} role, which this "
                                f"block draws; add {role} = [layer, datatype] and the "
                                "[connect] entries of the generic layers.toml") from None

    def has(self, role: str) -> bool:
        """Whether the map gives ``role`` a layer."""
        return role in self.layers


def load_layers(path: Path | None = None) -> LayerMap:
    """Read a layer map; without a path, placer's generic one.

    The file holds ``[layers]`` (role = [layer, datatype]) and ``[connect]``. placer's
    cells conduct as the generic ``[connect]`` says, so a map may change the numbers
    but not the connectivity: a different ``[connect]`` is refused.
    """
    data, src = read_toml(path, "layers.toml")
    for key in data:
        if key not in ("layers", "connect"):
            raise TemplateError(f"{src}: unknown table {shown(key)} (allowed: layers, connect)")
    raw = data.get("layers")
    if not isinstance(raw, dict):
        raise TemplateError(f"{src}: needs a [layers] table (role = [layer, datatype])")
    layers: dict[str, tuple[int, int]] = {}
    for key, value in raw.items():
        if key not in ROLES + OPTIONAL_ROLES:
            raise TemplateError(f"{src}: [layers] unknown role {shown(key)} (allowed: "
                                f"{', '.join(ROLES + OPTIONAL_ROLES)})")
        if (not isinstance(value, list) or len(value) != 2
                or any(isinstance(v, bool) or not isinstance(v, int) for v in value)):
            raise TemplateError(f"{src}: [layers] {key} must be [layer, datatype] (two whole "
                                f"numbers), got {str(value)[:60]}")
        if not all(0 <= v <= MAX_LAYER for v in value):
            raise TemplateError(f"{src}: [layers] {key} = {value} is outside 0..{MAX_LAYER}, "
                                "the range a GDSII stream stores unchanged")
        layers[key] = (value[0], value[1])
    missing = [p for p in ROLES if p not in layers]
    if missing:
        raise TemplateError(f"{src}: [layers] missing role(s) {', '.join(missing)}")
    optional = [p for p in OPTIONAL_ROLES if p in layers]
    if optional and len(optional) != len(OPTIONAL_ROLES):
        raise TemplateError(f"{src}: [layers] gives {optional[0]} but not "
                            f"{', '.join(p for p in OPTIONAL_ROLES if p not in layers)}: "
                            "the well and the tap implant come together")
    wells = bool(optional)
    conductors = _WELL_CONDUCTORS if wells else _CONDUCTORS
    cuts = _WELL_CUTS if wells else _CUTS
    seen: dict[tuple[int, int], str] = {}
    for role, ld in layers.items():
        if ld in seen and (role in conductors or role in cuts or seen[ld] in conductors
                           or seen[ld] in cuts):
            raise TemplateError(f"{src}: [layers] {role} and {seen[ld]} share {ld[0]}/{ld[1]}; "
                                "a conducting or cut role needs a layer of its own")
        seen.setdefault(ld, role)
    conn = data.get("connect")
    if conn is not None:
        want = {"conductors": list(conductors),
                "cuts": {k: list(v) for k, v in cuts.items()},
                "splits": {k: list(v) for k, v in _SPLITS.items()}}
        if not isinstance(conn, dict) or conn != want:
            raise TemplateError(f"{src}: [connect] must state placer's connectivity as the "
                                "generic layers.toml does (conductors, cuts, splits); a map "
                                "changes layer numbers, not how the cells conduct")
    return LayerMap(layers, src, conductors)
