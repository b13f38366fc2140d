"""A pattern turned into its layout: unit cell, routing, GDSII and preview pictures.

:func:`prepare` does everything that can fail (the cell at the spec's sizes, the routing
of every net) without writing anything; :func:`write` then stages the GDSII and the
previews in an output set.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, cast

from placer.errors import LimitError
from placer.io.pattern import EMPTY, Pattern
from placer.io.spec import ElectricalSpec, Spec
from placer.kinds import KINDS
from placer.layout.cells import Rules, UnitCell, load_rules, unit_cell
from placer.layout.guard import Guard, body_net, guard_ring, mixed_guard, with_guard
from placer.layout.layers import LayerMap, load_layers
from placer.layout.parasitics import NetFigures, Parasitics, extract
from placer.layout.pitch import check_pitch, estimated, fitted, for_cell
from placer.layout.ring import ring_strips
from placer.layout.router import NetSummary, Wiring, route
from placer.layout.wiring_error import wiring_effect
from placer.limits import MAX_EXTENT_UM
from placer.model.budget import WiringEffect
from placer.model.grade import Grade, lde_of
from placer.model.lde import FingerGeometry

__all__ = ["Area", "area_of", "Block", "Tools", "load_tools", "prepare", "library",
           "finger_geometry", "graded_with_lde",
           "layout_of", "wiring_of"]


@dataclass(frozen=True)
class Tools:
    """What drawing needs besides the spec: the template's rules, the layer map and, when
    the user brings one, their unit cell."""

    rules: Rules
    layers: LayerMap
    user: Any = None
    #: the specs this fit gave, by pattern: a spec fitted to a pattern is its own fit, so
    #: the block is drawn at the very pitch the arrangement was scored at (and the router's
    #: plan is not run twice)
    _given: list[tuple[Pattern, Spec]] = field(default_factory=list, compare=False,
                                               repr=False)

    def fit(self, pattern: Pattern, spec: Spec) -> Spec:
        """``spec`` at the pitch the routing of ``pattern`` needs with these tools."""
        for p, s in self._given:
            if p is pattern and s is spec:
                return spec
        out = fitted(pattern, spec, self.rules, user=self.user)
        self._given[:] = [*self._given[-7:], (pattern, out)]
        return out

    def cell(self, spec: Spec) -> UnitCell:
        """The unit cell drawn at the spec's pitch: the user's, else placer's generic."""
        if self.user is not None:
            return cast(UnitCell, self.user.cell)
        return unit_cell(spec.kind, spec.unit.width_um, spec.unit.length_um,
                         spec.array.pitch_um[0], self.rules)

    def weigh(self, pattern: Pattern, spec: Spec) -> tuple[float, float]:
        """The routed block of ``pattern`` (at the pitch its routing needs): its worst-pair
        wiring error in ppm (:mod:`placer.layout.wiring_error`; the spec's [electrical] figures,
        else their defaults) and its area in um2."""
        block = prepare(pattern, spec, self)
        rel = list(wiring_of(block, spec.electrical).relative.values())
        ppm = 1e6 * (max(rel) - min(rel)) if rel else 0.0
        return ppm, area_of(block).block_um2


@dataclass(frozen=True)
class Block:
    """A routed pattern, ready to write."""

    pattern: Pattern
    spec: Spec
    cell: UnitCell
    wiring: Wiring
    tools: Tools
    parasitics: Parasitics
    guard: Guard | None = None


def load_tools(spec: Spec, template: Path | None = None, layers: Path | None = None,
               user_gds: Path | None = None, user_cell: str | None = None
               ) -> tuple[Spec, Tools]:
    """Read the template, the layer map and the user's unit cell; give the spec the pitch
    they need when it gives none, and refuse a pitch too small for the cell."""
    rules = load_rules(spec.kind, template)
    layer_map = load_layers(layers)
    user = None
    if user_gds is not None:
        from placer.layout.usercell import load_user_cell

        user = load_user_cell(user_gds, user_cell, spec, rules, layer_map)
        spec = for_cell(spec, user.cell, user.rules, user.source)
    else:
        spec = estimated(spec, rules)
        check_pitch(spec, rules)
    return spec, Tools(rules, layer_map, user)


def prepare(pattern: Pattern, spec: Spec, tools: Tools) -> Block:
    """Draw and route ``pattern``; raises before anything is written. Unless the spec
    gives a pitch, the block's spec carries the pitch this routing needs
    (:func:`placer.layout.pitch.fitted`): grade the pattern with ``block.spec``."""
    spec = tools.fit(pattern, spec)
    cell = tools.cell(spec)
    rows, cols = pattern.shape
    px, py = spec.array.pitch_um
    if max((cols + 2) * px, (rows + 2) * py) > MAX_EXTENT_UM:
        raise LimitError(f"{spec.source}: the drawn array would span "
                         f"{(cols + 2) * px:.4g} x {(rows + 2) * py:.4g} um, more than the "
                         f"{MAX_EXTENT_UM:g} um a GDSII coordinate holds at 1 nm (int32)")
    wiring = route(pattern, spec, tools.rules, cell, user=tools.user is not None)
    parasitics = extract(wiring, spec.routing, tools.rules)
    wiring.nets = [_with_figures(n, parasitics.nets.get(n.name)) for n in wiring.nets]
    guard = None
    if spec.array.guard_ring:
        if spec.mixed:
            guard = mixed_guard(pattern, spec, cell, wiring, tools.rules)
        else:
            net, note = ((spec.array.guard_net, "") if spec.array.guard_net is not None
                         else body_net(spec))
            guard = guard_ring(wiring, tools.rules, net, spec.unit.polarity == "p")
            if note:
                wiring.notes.append(note)
        for role in {s.role for s in guard.shapes}:
            tools.layers[role]              # a map without the ring's roles: one line now
        with_guard(wiring, guard)
    return Block(pattern, spec, cell, wiring, tools, parasitics, guard)


def finger_geometry(cell: UnitCell, spec: Spec,
                    wells: tuple[tuple[float, float, float, float], ...] = ()
                    ) -> FingerGeometry | None:
    """What the layout-dependent terms need of ``cell``'s MOS finger at ``spec``'s pitch,
    with the drawn ``well`` (None: another kind, or a user's cell, whose diffusion placer
    does not read)."""
    if cell.diffusion is None or not KINDS[spec.kind].fingers:
        return None
    px, py = spec.array.pitch_um
    return FingerGeometry(px, py, cell.diffusion[2], spec.unit.length_um, spec.unit.width_um,
                          wells)


def graded_with_lde(grade: Grade, block: Block) -> Grade:
    """``grade`` with the layout-dependent figures of the drawn ``block`` (its own well's
    edges, when it draws one)."""
    geom = finger_geometry(block.cell, block.spec,
                           block.guard.wells if block.guard is not None else ())
    if geom is None:
        return grade
    lde = lde_of(block.pattern, block.spec, geom)
    if lde is not None and geom.wells and block.spec.lde.well_margin_um is not None:
        lde = replace(lde, note="[lde] well_margin_um not used: the block's drawn well "
                                "gives the well edges")
    return replace(grade, lde=lde)


def wiring_of(block: Block, electrical: ElectricalSpec | None = None) -> WiringEffect:
    """The wiring term of each device of ``block`` (:mod:`placer.layout.wiring_error`) with
    ``electrical``'s figures (default: the block spec's, else their defaults)."""
    e = electrical or block.spec.electrical or ElectricalSpec()
    return wiring_effect(block.spec, block.parasitics, e)


def _with_figures(net: NetSummary, fig: NetFigures | None) -> NetSummary:
    """A net's summary with its extracted resistance (its worst terminal to the pin) and
    capacitance (to ground and to every other net)."""
    if fig is None:
        return net
    return replace(net, resistance_ohm=fig.r_max_ohm or 0.0,
                   capacitance_ff=fig.ground_ff + fig.coupling_ff,
                   coupling_ff=fig.coupling_ff)


@dataclass(frozen=True)
class Area:
    """How much of the block the devices fill."""

    block_um2: float          # the routed block's bounding box
    units_um2: float          # every unit's W x L (dummies not counted)
    array_um2: float          # every slot of the array, pitch x pitch (dummies included)
    unit_fraction: float      # units_um2 / block_um2: the area efficiency
    # array_um2 / block_um2: what the routing beside the array costs (above 1 where the
    # last row's pitch holds a channel the block does not draw)
    array_fraction: float


def area_of(block: Block) -> Area:
    """The block's area efficiency: unit area over block area (and the array's share)."""
    w, h = block.wiring.size_um
    px, py = block.spec.array.pitch_um
    units = block.spec.n_units * block.spec.unit.width_um * block.spec.unit.length_um
    strips = (ring_strips(block.pattern, block.spec, block.cell, block.tools.rules)
              if block.tools.user is None else {})
    cells = int((block.pattern.ids != EMPTY).sum()) - len(strips)
    # a ring's strip counts its own area, not a whole slot's
    slots = cells * px * py + sum((st.keep.x1 - st.keep.x0) * (st.keep.y1 - st.keep.y0)
                                  for st in strips.values())
    whole = w * h
    return Area(whole, units, slots, units / whole if whole > 0 else 0.0,
                slots / whole if whole > 0 else 0.0)


def library(block: Block) -> Any:
    """The gdstk library of a routed block."""
    from placer.layout.gdswrite import build_library

    user = block.tools.user
    return build_library(block.pattern, block.spec, block.cell, block.wiring,
                         block.tools.layers, block.tools.rules,
                         user.gds_cell if user is not None else None)


def layout_of(pattern: Pattern, spec: Spec, template: Path | None = None,
              layers: Path | None = None) -> tuple[Any, Block]:
    """Library and block of ``pattern`` with the shipped (or given) template and layers:
    the short way for scripts and tests."""
    spec, tools = load_tools(spec, template, layers)
    block = prepare(pattern, spec, tools)
    return library(block), block
