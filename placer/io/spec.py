"""Read a spec file (TOML) into plain dataclasses, validating every key once."""

from __future__ import annotations

import difflib
import re
import tomllib
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from placer.errors import LimitError, SpecError, shown
from placer.io.files import read_text, toml_depth
from placer.kinds import JOINS, default_dummy_net, default_nets
from placer.kinds import KINDS as KIND_RECORDS
from placer.limits import (
    MAX_BANDED_DEVICES,
    MAX_DAC_BITS,
    MAX_DAC_WORK,
    MAX_DEVICES,
    MAX_MC_UNITS,
    MAX_MC_WORK,
    MAX_NAME,
    MAX_NET,
    MAX_SIDE,
    MAX_SLOT_DEVICES,
    MAX_SLOTS,
    MAX_TOML_DEPTH,
    MAX_UNITS,
)

__all__ = [
    "NAME_RE",
    "DUMMY_STYLES",
    "KERNELS",
    "ArraySpec",
    "UnitSpec",
    "LdeSpec",
    "DIFFUSION_STYLES",
    "GradientSpec",
    "CorrelatedSpec",
    "MismatchSpec",
    "MonteCarloSpec",
    "SearchSpec",
    "OBJECTIVES",
    "ElectricalSpec",
    "HotSpot",
    "RoutingSpec",
    "GroupSpec",
    "Placement",
    "SYMMETRY_CHOICES",
    "MASK_CHARS",
    "FITS",
    "Spec",
    "bare_spec",
    "read_spec",
    "toml_data",
    "read_spec_text",
    "check_name",
]

NAME_RE = re.compile(r"[A-Za-z][A-Za-z0-9_]*\Z")
DUMMY_STYLES = ("none", "ends", "ring")
KERNELS = ("exponential", "gaussian")

_RESERVED = {"con", "prn", "aux", "nul", *(f"com{i}" for i in range(10)),
             *(f"lpt{i}" for i in range(10))}


@dataclass(frozen=True)
class ArraySpec:
    """Shape of the unit array: core rows and columns, dummies and slot pitch.

    ``pitch_um`` is the slot pitch: in x one unit cell, in y one row of cells with the
    routing channel below it. ``pitch_given`` is False when placer computed it (the
    smallest pitch that holds the unit cell and the channel).
    """

    rows: int | None = None
    columns: int | None = None
    dummies: str = "ends"
    pitch_um: tuple[float, float] = (1.0, 1.0)
    aspect: float = 1.0
    pitch_given: bool = True
    holes: bool = True
    # a capacitor array's ring of dummies drawn as strips this deep (um, from the side
    # that faces the array) instead of whole unit cells; None: whole cells
    ring_depth_um: float | None = None
    #: MOS: a ring of tap diffusion around the routed block on the body net (with the
    #: well of a PMOS block around it)
    guard_ring: bool = False
    #: the ring's own net (None: the body net: the devices' bulk, else their source)
    guard_net: str | None = None


#: Symmetry a result must obey: none; mirror about a vertical axis (x: left-right), about
#: a horizontal axis (y: top-bottom); through the centre (point).
SYMMETRY_CHOICES = ("none", "x", "y", "point")
#: Mask text: a usable slot, a keep-out slot (stays empty, no dummy), outside the
#: footprint (may take an outline dummy).
MASK_CHARS = {".": "usable", "#": "keep-out", "-": "outside"}


@dataclass(frozen=True)
class GroupSpec:
    """Devices matched with each other; optionally confined to some core rows."""

    name: str
    devices: tuple[str, ...]
    rows: tuple[int, ...] | None = None
    #: MOS: the group's polarity ("n" or "p"; None: the spec's [unit] polarity)
    polarity: str | None = None


@dataclass(frozen=True)
class Placement:
    """Constraints of the core: footprint mask, pinned units, symmetry, groups, matches.

    ``mask`` holds one string per core row ('.', '#', '-'); ``pins`` (device, row,
    column) fixes one unit each; ``groups`` partitions the devices (empty: one group of
    all); ``match`` adds device pairs across groups whose ratio also counts.
    """

    mask: tuple[str, ...] | None = None
    pins: tuple[tuple[str, int, int], ...] = ()
    symmetry: str = "none"
    groups: tuple[GroupSpec, ...] = ()
    match: tuple[tuple[str, str], ...] = ()
    match_nets: tuple[tuple[str, ...], ...] = ()


@dataclass(frozen=True)
class UnitSpec:
    """Drawn size of one unit finger or unit cell (its area sets random mismatch)."""

    width_um: float = 1.0
    length_um: float = 1.0
    #: MOS fingers: "pairs" (every finger shares diffusion with one neighbour, a finger
    #: of its own or of another device, or an end dummy, so that every finger of every
    #: device sees the same diffusion on its two sides) or "shared" (neighbours share
    #: diffusion wherever their facing terminals are one net)
    diffusion: str = "pairs"
    #: MOS: "n" (in the substrate) or "p" (in a well the guard ring ties)
    polarity: str = "n"

    @property
    def area_um2(self) -> float:
        """Gate (or plate, or body) area of one unit in um^2."""
        return self.width_um * self.length_um


@dataclass(frozen=True)
class HotSpot:
    """A known local disturbance: peak ppm at (x, y), falling off as exp(-d / fall-off)."""

    x_um: float
    y_um: float
    ppm: float
    fall_off_um: float


@dataclass(frozen=True)
class GradientSpec:
    """The one description of the systematic (deterministic) part of the field.

    ``linear_ppm_per_um`` is the gradient of the matched quantity (capacitance density,
    sheet resistance, or a MOS finger's drain current), whatever the spec gave: for MOS
    it may come from ``vt_mv_per_mm`` and ``beta_pct_per_mm`` through gm/ID, combined in
    the worst case (their effects add). ``direction_deg`` and ``hot_spot`` describe a
    known field besides the worst direction.
    """

    linear_ppm_per_um: float = 10.0
    quadratic_ppm_per_um2: float = 0.02
    order: int = 3
    vt_mv_per_mm: float | None = None
    beta_pct_per_mm: float | None = None
    direction_deg: float | None = None
    hot_spot: HotSpot | None = None
    described: str = "10 ppm/um (the default)"


@dataclass(frozen=True)
class CorrelatedSpec:
    """Spatially correlated random part: standard deviation, length, kernel."""

    sigma_ppm: float = 100.0
    length_um: float = 10.0
    kernel: str = "exponential"


@dataclass(frozen=True)
class MismatchSpec:
    """White random part from the area law (Pelgrom)."""

    a_param_pct_um: float = 1.0
    a_vt_mv_um: float | None = None


@dataclass(frozen=True)
class MonteCarloSpec:
    """Optional sampled check of the exact figures."""

    samples: int = 0
    seed: int = 0


OBJECTIVES = ("lexicographic", "weighted")


@dataclass(frozen=True)
class SearchSpec:
    """How ``arrange`` ranks arrangements: the objective, the moment orders it cancels and
    the relative tie below which two values of a key count as equal."""

    objective: str = "lexicographic"
    cancel_order: int = 2
    relative_tie: float = 1e-9
    #: the drawn wiring's error joins the objective: among the arrangements the search
    #: kept, the least gradient + wiring error wins (each one routed and extracted)
    wiring: bool = False
    #: a core with spare slots inside is chosen over a full one only when its systematic
    #: error is lower by at least this fraction of the worst pair's random sigma
    hole_gain: float = 0.01


FITS = ("endpoint", "best")


@dataclass(frozen=True)
class RoutingSpec:
    """Wire figures of the parasitic extraction from the drawn geometry (illustrative
    defaults): sheet resistance of each metal, resistance of one via1 cut, capacitance of
    a wire to ground per micrometre of its length, between two wires side by side per
    micrometre they face each other at minimum spacing (falling as min spacing / spacing,
    counted out to three times the minimum), and per square micrometre where metal2
    overlaps metal1."""

    metal1_ohm_per_sq: float = 0.1
    metal2_ohm_per_sq: float = 0.07
    via_ohm: float = 5.0
    wire_ff_per_um: float = 0.2
    coupling_ff_per_um: float = 0.1
    overlap_ff_per_um2: float = 0.05


@dataclass(frozen=True)
class LdeSpec:
    """Layout-dependent effects of MOS fingers (table [lde]): the BSIM4 stress-effect form
    in SA, SB and L and its well-proximity form in the distance to the well edge, with
    coefficients of the process. The defaults are illustrative, of placer's own (a few %
    of mobility and a few mV at a diffusion a quarter micrometre long), no process's.
    ``well_margin_um``: the well edge stands this far beyond the array's outermost
    diffusion on every side (None: no well edge near the array, no proximity term)."""

    ku0_um: float = -0.01
    kvth0_mv_um: float = 2.0
    saref_um: float = 1.0
    sbref_um: float = 1.0
    well_margin_um: float | None = None
    scref_um: float = 1.0
    web: float = 0.0
    wec: float = 0.0
    kvth0we_mv: float = 30.0
    ku0we: float = -0.05



DIFFUSION_STYLES = ("pairs", "shared")


@dataclass(frozen=True)
class ElectricalSpec:
    """Electrical parameters for the error budget (table [electrical])."""

    reference: str | None = None
    gm_id_per_v: float = 10.0
    lambda_per_v: float = 0.0
    vds_v: dict[str, float] = field(default_factory=dict)
    a_vt_mv_um: float = 5.0
    a_beta_pct_um: float = 1.0
    k_sigma: float = 3.0
    tolerance_pct: float = 1.0
    termination: str | None = None
    fit: str = "endpoint"
    mc_samples: int = 2000
    mc_seed: int = 0
    unit_current_ua: float = 10.0
    unit_cap_ff: float | None = None
    unit_ohm: float | None = None


@dataclass(frozen=True)
class Spec:
    """Everything a spec file says: devices, array shape and model assumptions."""

    name: str
    devices: tuple[str, ...]
    counts: tuple[int, ...]
    kind: str = "mos"
    array: ArraySpec = field(default_factory=ArraySpec)
    unit: UnitSpec = field(default_factory=UnitSpec)
    gradient: GradientSpec = field(default_factory=GradientSpec)
    correlated: CorrelatedSpec = field(default_factory=CorrelatedSpec)
    mismatch: MismatchSpec = field(default_factory=MismatchSpec)
    monte_carlo: MonteCarloSpec = field(default_factory=MonteCarloSpec)
    search: SearchSpec = field(default_factory=SearchSpec)
    electrical: ElectricalSpec | None = None
    source: str = "<spec>"
    nets: tuple[dict[str, str], ...] = ()
    joins: tuple[str, ...] = ()
    dummy_net: str = "VSS"
    routing: RoutingSpec = field(default_factory=RoutingSpec)
    placement: Placement = field(default_factory=Placement)
    lde: LdeSpec = field(default_factory=LdeSpec)

    @property
    def n_units(self) -> int:
        """Total number of device units."""
        return sum(self.counts)

    def ranked_pairs(self) -> list[tuple[int, int]]:
        """Device pairs whose ratio errors count: every pair inside a group (all devices
        form one group when the spec names none), then the spec's matches."""
        index = {n: i for i, n in enumerate(self.devices)}
        groups = ([[index[d] for d in g.devices] for g in self.placement.groups]
                  or [list(range(len(self.devices)))])
        out: list[tuple[int, int]] = []
        for g in groups:
            out += [(a, b) for i, a in enumerate(sorted(g)) for b in sorted(g)[i + 1:]]
        for a, b in self.placement.match:
            pair = (min(index[a], index[b]), max(index[a], index[b]))
            if pair not in out:
                out.append(pair)
        return out

    def budget_devices(self) -> list[str]:
        """The devices the electrical budget covers: all of them, or with groups the
        group holding the reference (mirrors, resistors) or the termination (capacitor
        arrays)."""
        e = self.electrical
        if not self.placement.groups or e is None:
            return list(self.devices)
        anchor = getattr(e, KIND_RECORDS[self.kind].anchor) or self.devices[0]
        for g in self.placement.groups:
            if anchor in g.devices:
                return [d for d in self.devices if d in g.devices]
        return list(self.devices)

    def matched_sets(self) -> list[Any]:
        """The net sets whose wiring must match (``[match] nets``, else each kind's
        defaults per group; see :func:`placer.kinds.default_matched_sets`)."""
        from placer.kinds import MatchedSet, default_matched_sets

        if self.placement.match_nets:
            return [MatchedSet(tuple(s)) for s in self.placement.match_nets]
        groups = ([list(g.devices) for g in self.placement.groups]
                  or [list(self.devices)])
        return default_matched_sets(self.kind, groups, dict(zip(self.devices, self.nets,
                                                                strict=True)), self.dummy_net)

    def polarity_of(self, device: str) -> str:
        """A MOS device's polarity: its group's, else the spec's [unit] polarity."""
        for g in self.placement.groups:
            if device in g.devices and g.polarity is not None:
                return g.polarity
        return self.unit.polarity

    @property
    def mixed(self) -> bool:
        """Whether the block holds devices of both polarities."""
        return len({self.polarity_of(d) for d in self.devices}) > 1

    def core_row_polarity(self, rows: int) -> list[str]:
        """The polarity of each core row: its groups' (a mixed block gives each group of a
        polarity its rows), else the spec's [unit] polarity."""
        out = [self.unit.polarity] * rows
        for g in self.placement.groups:
            for r in g.rows or ():
                if r < rows:
                    out[r] = self.polarity_of(g.devices[0])
        return out

    def group_of(self) -> dict[str, str]:
        """Group name of every device ('' when the spec names no groups)."""
        return {d: g.name for g in self.placement.groups for d in g.devices}

    def net_names(self) -> list[str]:
        """Every net of the block: terminal nets in device order, the dummy net, then the
        inner nodes of series resistors."""
        from placer.kinds import series_node

        out: dict[str, None] = {}
        for nets in self.nets:
            for net in nets.values():
                out.setdefault(net)
        out.setdefault(self.dummy_net)
        for name, count, join in zip(self.devices, self.counts, self.joins, strict=True):
            if join == "series":
                for i in range(1, count):
                    out.setdefault(series_node(name, i))
        return list(out)


def bare_spec(name: str, devices: tuple[str, ...], counts: tuple[int, ...],
                 kind: str = "mos") -> Spec:
    """Spec with every assumption at its documented default, for a bare pattern (its pitch
    not yet worked out: :func:`placer.jobs.load.default_spec` gives it)."""
    nets = tuple(default_nets(kind, d) for d in devices)
    spec = Spec(name=name, devices=devices, counts=counts, kind=kind, source="<defaults>",
                nets=nets, joins=tuple(KIND_RECORDS[kind].joins[0] for _ in devices),
                dummy_net=default_dummy_net(kind, list(nets)),
                array=ArraySpec(pitch_given=False))
    return spec


def check_name(name: str, what: str) -> str:
    """Return ``name`` if it is safe as a device, cell or file name, else raise.

    Examples
    --------
    >>> check_name("IOUT_2", "device name")
    'IOUT_2'
    """
    if not NAME_RE.match(name):
        raise SpecError(f"{what} {shown(name)} is invalid: use a letter, then letters, digits or _")
    if len(name) > MAX_NAME:
        raise SpecError(f"{what} {shown(name)} is longer than {MAX_NAME} characters")
    if name.lower() in _RESERVED:
        raise SpecError(f"{what} {shown(name)} is a reserved file name on some systems")
    return name


# Every table and key a spec may hold; anything else is refused with a suggestion.
_SCHEMA: dict[str, tuple[str, ...]] = {
    "": ("name", "kind", "devices", "array", "unit", "gradient", "correlated", "mismatch",
         "monte_carlo", "search", "electrical", "terminals", "routing", "pins", "groups",
         "match", "lde"),
    "array": ("rows", "columns", "dummies", "pitch_um", "aspect", "dummy_net", "holes", "mask",
              "keep_out", "symmetry", "ring_depth_um", "guard_ring", "guard_net"),
    "match": ("pairs", "nets"),
    "unit": ("width_um", "length_um", "diffusion", "polarity"),
    "lde": ("ku0_um", "kvth0_mv_um", "saref_um", "sbref_um", "well_margin_um", "scref_um",
            "web", "wec", "kvth0we_mv", "ku0we"),
    "gradient": ("linear_ppm_per_um", "linear_pct_per_mm", "quadratic_ppm_per_um2", "order",
                 "vt_mv_per_mm", "beta_pct_per_mm", "direction_deg", "hot_spot"),
    "gradient.hot_spot": ("x_um", "y_um", "ppm", "fall_off_um"),
    "correlated": ("sigma_ppm", "length_um", "kernel"),
    "mismatch": ("a_param_pct_um", "a_vt_mv_um"),
    "monte_carlo": ("samples", "seed"),
    "search": ("objective", "cancel_order", "relative_tie", "wiring", "hole_gain"),
    "routing": ("metal1_ohm_per_sq", "metal2_ohm_per_sq", "via_ohm", "wire_ff_per_um",
                "coupling_ff_per_um", "overlap_ff_per_um2"),
    "electrical": ("reference", "vov_v", "gm_id_per_v", "lambda_per_v", "vds_v",
                   "a_vt_mv_um",
                   "a_beta_pct_um", "k_sigma", "tolerance_pct", "termination", "weights",
                   "fit", "mc_samples", "mc_seed", "unit_current_ua", "unit_cap_ff",
                   "unit_ohm"),
}


# The range every number of a spec must lie in, by table and key ("*" = any table); the
# bounds are generous for any real process but keep every later product finite. A number
# outside is refused with its key and this range.
_RANGES: dict[tuple[str, str], tuple[float, float, str]] = {
    ("array", "aspect"): (0.01, 100.0, ""),
    ("array", "ring_depth_um"): (0.001, 10_000.0, " um"),
    ("unit", "width_um"): (0.001, 10_000.0, " um"),
    ("unit", "length_um"): (0.001, 10_000.0, " um"),
    ("lde", "ku0_um"): (-10.0, 10.0, " um"),
    ("lde", "kvth0_mv_um"): (-1e4, 1e4, " mV um"),
    ("lde", "saref_um"): (0.001, 1e4, " um"),
    ("lde", "sbref_um"): (0.001, 1e4, " um"),
    ("lde", "well_margin_um"): (0.001, 1e4, " um"),
    ("lde", "scref_um"): (0.001, 1e4, " um"),
    ("lde", "web"): (-1e6, 1e6, ""),
    ("lde", "wec"): (-1e6, 1e6, ""),
    ("lde", "kvth0we_mv"): (-1e4, 1e4, " mV"),
    ("lde", "ku0we"): (-0.99, 1e3, ""),
    ("correlated", "sigma_ppm"): (0.0, 1e6, " ppm"),
    ("correlated", "length_um"): (0.001, 1e6, " um"),
    ("mismatch", "a_param_pct_um"): (0.0, 100.0, " %um"),
    ("mismatch", "a_vt_mv_um"): (0.0, 1000.0, " mV um"),
    ("search", "relative_tie"): (0.0, 0.1, ""),
    ("search", "hole_gain"): (0.0, 1000.0, ""),
    ("routing", "metal1_ohm_per_sq"): (0.0, 1e6, " ohm/sq"),
    ("routing", "metal2_ohm_per_sq"): (0.0, 1e6, " ohm/sq"),
    ("routing", "via_ohm"): (0.0, 1e6, " ohm"),
    ("routing", "wire_ff_per_um"): (0.0, 1e3, " fF/um"),
    ("routing", "coupling_ff_per_um"): (0.0, 1e3, " fF/um"),
    ("routing", "overlap_ff_per_um2"): (0.0, 1e3, " fF/um2"),
    ("electrical", "unit_current_ua"): (1e-6, 1e6, " uA"),
    ("electrical", "unit_cap_ff"): (1e-6, 1e9, " fF"),
    ("electrical", "unit_ohm"): (1e-6, 1e12, " ohm"),
    ("gradient", "linear_ppm_per_um"): (0.0, 1e5, " ppm/um"),
    ("gradient", "linear_pct_per_mm"): (0.0, 1e4, " %/mm"),
    ("gradient", "quadratic_ppm_per_um2"): (0.0, 1e4, " ppm/um2"),
    ("gradient", "vt_mv_per_mm"): (0.0, 1e4, " mV/mm"),
    ("gradient", "beta_pct_per_mm"): (0.0, 1e4, " %/mm"),
    ("gradient", "direction_deg"): (-360.0, 360.0, " degrees"),
    ("gradient.hot_spot", "x_um"): (-1e6, 1e6, " um"),
    ("gradient.hot_spot", "y_um"): (-1e6, 1e6, " um"),
    ("gradient.hot_spot", "ppm"): (-1e6, 1e6, " ppm"),
    ("gradient.hot_spot", "fall_off_um"): (0.001, 1e6, " um"),
    ("electrical", "k_sigma"): (0.1, 10.0, ""),
    ("electrical", "tolerance_pct"): (1e-6, 100.0, " %"),
    ("electrical", "vov_v"): (0.05, 5.0, " V (square law; below 50 mV give gm_id_per_v)"),
    ("electrical", "gm_id_per_v"): (0.1, 40.0, " 1/V (weak inversion limit, about "
                                    "1/(n kT/q))"),
    ("electrical", "lambda_per_v"): (0.0, 10.0, " 1/V"),
    ("electrical", "a_vt_mv_um"): (0.0, 1000.0, " mV um"),
    ("electrical", "a_beta_pct_um"): (0.0, 100.0, " %um"),
    ("electrical.vds_v", "*"): (0.0, 1000.0, " V"),
    ("electrical.weights", "*"): (0.0, 1e9, ""),
}
MAX_SEED = 2**63 - 1
#: A non-zero number smaller than this is no physical value in any unit a spec uses.
MIN_MAGNITUDE = 1e-15


def number_range(table: str, key: str) -> tuple[float, float, str]:
    """The (low, high, unit) a spec number at [table] key must lie in."""
    return _RANGES.get((table, key)) or _RANGES.get((table, "*")) or (-1e12, 1e12, "")


class _Reader:
    """Pull typed, checked values out of one TOML table, remembering where."""

    def __init__(self, src: str, table: str, data: Any):
        self.src = src
        self.table = table
        self.where = f"{src}: [{table}]" if table else f"{src}:"
        if not isinstance(data, dict):
            raise SpecError(f"{self.where} must be a table, got {_typename(data)}")
        self.data = data
        allowed = _SCHEMA.get(table)
        if allowed is not None:
            for key in data:
                if key not in allowed:
                    if table == "" and key == "unary":
                        raise SpecError(f"{self.where} a [unary] table makes this a unary "
                                        "array spec: run placer sequence on it")
                    near = difflib.get_close_matches(key, allowed, n=1)
                    hint = f" (did you mean {shown(near[0])}?)" if near else \
                        f" (allowed: {', '.join(allowed)})"
                    raise SpecError(f"{self.where} unknown key {shown(key)}{hint}")

    def fail(self, key: str, problem: str) -> SpecError:
        return SpecError(f"{self.where} {key} {problem}")

    def number(self, key: str, default: float | None, *, positive: bool = True,
               allow_zero: bool = False) -> float | None:
        if key not in self.data:
            return default
        value = self.data[key]
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.fail(key, f"must be a number, got {_typename(value)}")
        if isinstance(value, float) and (value != value or abs(value) == float("inf")):
            raise self.fail(key, "must be finite")
        low, high, unit = number_range(self.table, key)
        if not low <= value <= high:        # exact for any int: no float overflow here
            raise self.fail(key, f"must be between {low:g} and {high:g}{unit}, got "
                                 f"{shown(value)}")
        if value != 0 and abs(value) < MIN_MAGNITUDE:
            raise self.fail(key, f"= {shown(value)} is too small to mean anything: give 0 or "
                                 f"at least {MIN_MAGNITUDE:g}")
        value = float(value)
        if positive and (value < 0 or (value == 0 and not allow_zero)):
            raise self.fail(key, f"must be {'>= 0' if allow_zero else '> 0'}, got {value:g}")
        return value

    def integer(self, key: str, default: int | None, *, low: int = 1,
                high: int | None = None) -> int | None:
        if key not in self.data:
            return default
        value = self.data[key]
        if isinstance(value, bool) or not isinstance(value, int):
            raise self.fail(key, f"must be a whole number, got {shown(value)}")
        if value < low:
            raise self.fail(key, f"must be >= {low}, got {shown(value)}")
        if high is None and key in ("seed", "mc_seed"):
            high = MAX_SEED
        if high is not None and value > high:
            raise LimitError(f"{self.where} {key} = {shown(value)} exceeds the limit of {high}")
        return value

    def flag(self, key: str, default: bool) -> bool:
        if key not in self.data:
            return default
        value = self.data[key]
        if not isinstance(value, bool):
            raise self.fail(key, f"must be true or false, got {_typename(value)}")
        return value

    def choice(self, key: str, default: str, options: tuple[str, ...]) -> str:
        if key not in self.data:
            return default
        value = self.data[key]
        if value not in options:
            allowed = ", ".join(repr(o) for o in options)
            raise self.fail(key, f"must be one of {allowed}, got {shown(value)}")
        return str(value)


def _typename(value: Any) -> str:
    return {bool: "a boolean", int: "an integer", float: "a number", str: "a string",
            list: "an array", dict: "a table"}.get(type(value), type(value).__name__)


def toml_data(text: str, source: str) -> dict[str, Any]:
    """The TOML ``text`` of a spec (``source`` names it in errors), its nesting measured
    before it is parsed."""
    if toml_depth(text) > MAX_TOML_DEPTH:
        raise LimitError(f"{source}: tables, arrays or dotted keys nest deeper than "
                         f"{MAX_TOML_DEPTH} levels; a spec needs at most 4")
    try:
        return tomllib.loads(text.removeprefix("\ufeff"))
    except tomllib.TOMLDecodeError as err:
        raise SpecError(f"{source}: invalid TOML: {err}") from err
    except RecursionError:
        raise SpecError(f"{source}: invalid TOML: nested too deeply (a spec needs at most "
                        "3 levels)") from None


def read_spec(path: str | Path) -> Spec:
    """Read and validate the spec file at ``path`` (its pitch, unless given, not yet worked
    out: :func:`placer.jobs.load.load_spec` gives it).

    Raises
    ------
    SpecError
        With a one-line message naming the file and the problem.
    """
    path = Path(path)
    text = read_text(path, "spec", SpecError)
    return read_spec_text(text, source=str(path), default_name=path.stem)


def read_spec_text(text: str, source: str = "<spec>", default_name: str = "placer") -> Spec:
    """Parse and validate spec text; ``source`` names it in error messages. The pitch,
    unless the spec gives it, is left for :mod:`placer.layout.pitch` to work out."""
    data = toml_data(text, source)
    top = _Reader(source, "", data)

    name = data.get("name", _safe_default_name(default_name))
    if not isinstance(name, str):
        raise top.fail("name", f"must be a string, got {_typename(name)}")
    try:
        check_name(name, "spec name")
    except SpecError as err:
        raise SpecError(f"{source}: {err}") from None
    kind = top.choice("kind", "mos", tuple(KIND_RECORDS))

    if "devices" not in data:
        raise SpecError(f"{source}: missing [devices] table (name = number of units)")
    dev = _Reader(source, "devices", data["devices"])
    if not dev.data:
        raise SpecError(f"{source}: [devices] is empty: give at least one name = units")
    names: list[str] = []
    counts: list[int] = []
    seen: dict[str, str] = {}
    for key in dev.data:
        if not NAME_RE.match(key):
            raise SpecError(f"{source}: [devices] name {shown(key)} is invalid: use a letter, "
                            "then letters, digits or _")
        if len(key) > MAX_NAME:
            raise SpecError(f"{source}: [devices] name {shown(key)} is longer than {MAX_NAME} "
                            "characters")
        if key.lower() in seen:
            raise SpecError(f"{source}: [devices] {shown(key)} and {shown(seen[key.lower()])} "
                            "differ only by case; names must stay distinct in GDSII and file "
                            "names")
        seen[key.lower()] = key
        if len(names) == MAX_DEVICES:
            raise LimitError(f"{source}: [devices] more than {MAX_DEVICES} devices, the limit")
        count = dev.integer(key, None, low=1, high=MAX_UNITS)
        assert count is not None
        names.append(key)
        counts.append(count)
    if sum(counts) > MAX_UNITS:
        raise LimitError(f"{source}: [devices] {sum(counts)} units in all exceed the limit of "
                         f"{MAX_UNITS}")

    arr = _Reader(source, "array", data.get("array", {}))
    rows = arr.integer("rows", None, high=MAX_SIDE)
    columns = arr.integer("columns", None, high=MAX_SIDE)
    mask = _mask(arr, rows, columns)
    if mask is not None:
        rows, columns = len(mask), len(mask[0])
    dummies = arr.choice("dummies", "ends", DUMMY_STYLES)
    pitch_given = "pitch_um" in arr.data
    pitch = _pitch(arr)
    aspect = arr.number("aspect", 1.0)
    assert aspect is not None
    if rows is not None and columns is not None:
        if rows * columns > MAX_SLOTS:
            raise LimitError(f"{source}: [array] {rows} x {columns} slots exceed the limit of "
                             f"{MAX_SLOTS}")
        if rows * columns * len(names) > MAX_SLOT_DEVICES:
            raise LimitError(f"{source}: [array] {rows} x {columns} slots for {len(names)} "
                             f"devices exceed the limit of {MAX_SLOT_DEVICES} slot-devices "
                             "(slots x devices); use fewer devices or a smaller array")
        usable = (rows * columns if mask is None
                  else sum(row.count(".") for row in mask))
        if usable < sum(counts):
            what = f"{rows} x {columns} = {rows * columns} slots" if mask is None else \
                f"the mask's {usable} usable slots"
            raise SpecError(f"{source}: [array] {what} cannot hold {sum(counts)} units; "
                            "enlarge rows or columns" if mask is None else
                            f"{source}: [array] {what} cannot hold {sum(counts)} units; "
                            "free more slots")
    n_units = sum(counts)
    for given, other, what in ((rows, columns, "columns"), (columns, rows, "rows")):
        if given is not None and other is None and -(-n_units // given) > MAX_SIDE:
            raise LimitError(f"{source}: [array] {n_units} units need "
                             f"{-(-n_units // given)} {what}, more than the limit of "
                             f"{MAX_SIDE}; give more {'rows' if what == 'columns' else 'columns'}")
    holes = arr.flag("holes", True)
    symmetry = arr.choice("symmetry", "none", SYMMETRY_CHOICES)
    if not holes and rows is not None and columns is not None and rows * columns > sum(counts):
        raise SpecError(f"{source}: [array] {rows} x {columns} slots leave "
                        f"{rows * columns - sum(counts)} spare, but holes = false; give a "
                        "shape the units fill exactly")
    ring_depth = arr.number("ring_depth_um", None)
    if ring_depth is not None and (dummies != "ring" or KIND_RECORDS[kind].cell != "plate"):
        plated = [k for k, r in KIND_RECORDS.items() if r.cell == "plate"]
        raise arr.fail("ring_depth_um", "draws a capacitor array's ring of dummies as strips: "
                       f'it needs kind = "{plated[0]}" and dummies = "ring"')
    guard = arr.flag("guard_ring", False)
    if guard and not KIND_RECORDS[kind].fingers:
        raise arr.fail("guard_ring", "ties MOS fingers' body (kind = \"mos\")")
    guard_net = None
    if "guard_net" in arr.data:
        if not guard:
            raise arr.fail("guard_net", "names the guard ring's net: give guard_ring = true")
        guard_net = _net_name(f"{source}: [array]", "guard_net", arr.data["guard_net"])
    array = ArraySpec(rows, columns, dummies, pitch, aspect, pitch_given, holes, ring_depth,
                      guard, guard_net)

    un = _Reader(source, "unit", data.get("unit", {}))
    dw, dl = KIND_RECORDS[kind].unit_um
    diffusion = un.choice("diffusion", "pairs", DIFFUSION_STYLES)
    polarity = un.choice("polarity", "n", ("n", "p"))
    for key in ("diffusion", "polarity"):
        if key in un.data and not KIND_RECORDS[kind].fingers:
            raise un.fail(key, "is for MOS fingers (kind = \"mos\")")
    unit = UnitSpec(un.number("width_um", dw) or dw, un.number("length_um", dl) or dl,
                    diffusion, polarity)
    lde = _lde(source, data.get("lde", {}), kind)

    raw_el = data.get("electrical")
    if isinstance(raw_el, dict):
        for old, new in (("vt_gradient_mv_per_mm", "vt_mv_per_mm"),
                         ("beta_gradient_pct_per_mm", "beta_pct_per_mm")):
            if old in raw_el:
                raise SpecError(f"{source}: [electrical] {old} moved to [gradient] {new}: the "
                                "spec describes the systematic field once, in [gradient]")
    gr = _Reader(source, "gradient", data.get("gradient", {}))

    co = _Reader(source, "correlated", data.get("correlated", {}))
    dc = CorrelatedSpec()
    correlated = CorrelatedSpec(
        _num(co, "sigma_ppm", dc.sigma_ppm),
        co.number("length_um", dc.length_um) or dc.length_um,
        co.choice("kernel", dc.kernel, KERNELS),
    )

    mm = _Reader(source, "mismatch", data.get("mismatch", {}))
    mismatch = MismatchSpec(
        _num(mm, "a_param_pct_um", MismatchSpec.a_param_pct_um),
        mm.number("a_vt_mv_um", None, allow_zero=True),
    )

    mc = _Reader(source, "monte_carlo", data.get("monte_carlo", {}))
    monte_carlo = MonteCarloSpec(
        mc.integer("samples", 0, low=0, high=1_000_000) or 0,
        mc.integer("seed", 0, low=0) or 0,
    )

    raw_search = data.get("search", {})
    if isinstance(raw_search, dict) and "tie_ppm" in raw_search:
        raise SpecError(f"{source}: [search] tie_ppm is gone: ties are now relative "
                        "(relative_tie, default 1e-9); for a trade-off between linear and "
                        "quadratic error use objective = \"weighted\"")
    se = _Reader(source, "search", raw_search)
    ds = SearchSpec()
    tie = _num(se, "relative_tie", ds.relative_tie)
    search = SearchSpec(
        se.choice("objective", ds.objective, OBJECTIVES),
        se.integer("cancel_order", ds.cancel_order, low=1, high=4) or ds.cancel_order,
        tie,
        se.flag("wiring", ds.wiring),
        _num(se, "hole_gain", ds.hole_gain),
    )

    electrical = None
    if "electrical" in data:
        electrical = _electrical(source, data["electrical"], kind, names, counts, mismatch)
    gradient = _gradient(source, gr, kind, electrical)

    nets, joins, dummy_net = _terminals(source, data.get("terminals", {}), kind, names,
                                        counts, arr.data.get("dummy_net"))

    raw_ro = data.get("routing", {})
    if isinstance(raw_ro, dict):
        for old, new in (("metal1_ohm_per_um", "metal1_ohm_per_sq"),
                         ("metal2_ohm_per_um", "metal2_ohm_per_sq")):
            if old in raw_ro:
                raise SpecError(f"{source}: [routing] {old} became {new}: the wiring's "
                                "resistance is now solved over the drawn wires, whose widths "
                                "differ; give the sheet resistance (ohm/um times the wire "
                                "width in um)")
    ro = _Reader(source, "routing", raw_ro)
    dr = RoutingSpec()
    routing = RoutingSpec(*(_num(ro, k, getattr(dr, k)) for k in _SCHEMA["routing"]))

    placement = _placement(source, data, names, counts, rows, columns, mask, symmetry)
    known = {n for m in nets for n in m.values()} | {dummy_net}
    for group in placement.match_nets:
        for net in group:
            if net not in known:
                near = difflib.get_close_matches(net, sorted(known), n=1)
                hint = f" (did you mean {shown(near[0])}?)" if near else ""
                raise SpecError(f"{source}: [match] nets names {shown(net)}, which is not a net "
                                f"of any terminal{hint}")

    spec = Spec(name=name, devices=tuple(names), counts=tuple(counts), kind=kind, array=array,
                unit=unit, gradient=gradient, correlated=correlated, mismatch=mismatch,
                monte_carlo=monte_carlo, search=search, electrical=electrical, source=source,
                nets=nets, joins=joins, dummy_net=dummy_net, routing=routing,
                placement=placement, lde=lde)
    if spec.mixed and "dummy_net" not in arr.data:
        # n and p devices: the dummies (every terminal on one net, no current whichever
        # their polarity) go on the n devices' shared bulk, the substrate's net
        n_bulks = {n.get("bulk") for d, n in zip(names, nets, strict=True)
                   if spec.polarity_of(d) == "n"}
        if len(n_bulks) == 1 and None not in n_bulks:
            spec = replace(spec, dummy_net=str(n_bulks.pop()))
    _check_polarity(spec)
    _check_work(spec)
    return spec


def _check_polarity(spec: Spec) -> None:
    """A block of two polarities: every device in a group of its own polarity's rows, no
    row shared by both, a guard ring to tie the substrate and the wells."""
    src = spec.source
    given = [g for g in spec.placement.groups if g.polarity is not None]
    if given and not KIND_RECORDS[spec.kind].fingers:
        raise SpecError(f"{src}: [groups.{given[0].name}] polarity is for MOS fingers "
                        "(kind = \"mos\")")
    if spec.array.guard_ring:
        for pol in ("n", "p"):
            bulks = {n.get("bulk") for d, n in zip(spec.devices, spec.nets, strict=True)
                     if spec.polarity_of(d) == pol}
            if len(bulks) > 1:
                raise SpecError(f"{src}: [array] guard_ring ties one body net per polarity, "
                                f"but the {pol} devices' bulk terminals differ; give them "
                                "the same bulk in [terminals]")
    if not spec.mixed:
        return
    group = {d: g for g in spec.placement.groups for d in g.devices}
    for d in spec.devices:
        if d not in group or group[d].rows is None:
            raise SpecError(f"{src}: the block holds n and p devices, so each must sit in a "
                            f"group with rows (its polarity's band of rows); {shown(d)} has "
                            "none: give [groups.NAME] devices, rows and polarity")
    owner: dict[int, str] = {}
    for g in spec.placement.groups:
        pol = spec.polarity_of(g.devices[0])
        for r in g.rows or ():
            if owner.setdefault(r, pol) != pol:
                raise SpecError(f"{src}: [groups.{g.name}] row {r} also holds devices of the "
                                "other polarity; n and p devices need rows of their own "
                                "(each p band sits in its own well)")
    if not spec.array.guard_ring:
        raise SpecError(f"{src}: the block holds n and p devices: give [array] guard_ring = "
                        "true (the ring ties the substrate, each p band's well gets a tie of "
                        "its own)")


def _check_work(spec: Spec) -> None:
    """Refuse, before any work, budgets and Monte Carlo runs too large to finish."""
    src = spec.source
    e = spec.electrical
    if e is not None and KIND_RECORDS[spec.kind].budget == "dac":
        bits = len([d for d in spec.budget_devices() if d != e.termination])
        if bits > MAX_DAC_BITS:
            raise LimitError(f"{src}: [electrical] {bits} switched capacitors; the budget "
                             f"evaluates every code and handles at most {MAX_DAC_BITS} bits "
                             "(name a termination, or group the devices)")
        if e.mc_samples * 2 ** bits > MAX_DAC_WORK:
            raise LimitError(f"{src}: [electrical] mc_samples = {e.mc_samples} over "
                             f"{2 ** bits} codes exceeds the limit of {MAX_DAC_WORK} "
                             f"code samples; use at most {MAX_DAC_WORK >> bits} samples")
    m = spec.monte_carlo
    if m.samples > 0:
        pairs = max(len(spec.ranked_pairs()), 1)
        if spec.n_units > MAX_MC_UNITS:
            raise LimitError(f"{src}: [monte_carlo] samples the correlation of every unit "
                             f"pair; {spec.n_units} units exceed its limit of {MAX_MC_UNITS} "
                             "(remove [monte_carlo]: the exact figures need no sampling)")
        if m.samples * pairs > MAX_MC_WORK or spec.n_units * pairs > MAX_MC_WORK:
            raise LimitError(f"{src}: [monte_carlo] samples = {m.samples} for {pairs} device "
                             f"pairs and {spec.n_units} units exceed the limit of "
                             f"{MAX_MC_WORK} values; use at most "
                             f"{max(MAX_MC_WORK // pairs, 1)} samples or fewer devices")


def _gradient(source: str, gr: _Reader, kind: str, el: ElectricalSpec | None) -> GradientSpec:
    """[gradient]: one description of the systematic field, in the trade's units."""
    d = GradientSpec()
    order = gr.integer("order", d.order, low=2, high=8) or d.order
    quad = _num(gr, "quadratic_ppm_per_um2", d.quadratic_ppm_per_um2)
    given = [k for k in ("linear_ppm_per_um", "linear_pct_per_mm") if k in gr.data]
    mos_keys = [k for k in ("vt_mv_per_mm", "beta_pct_per_mm") if k in gr.data]
    if len(given) > 1 or (given and mos_keys):
        raise SpecError(f"{source}: [gradient] give the linear gradient once: "
                        f"{' and '.join(given + mos_keys)} both describe it")
    vt = beta = None
    if mos_keys:
        if KIND_RECORDS[kind].quantity != "current":
            raise gr.fail(mos_keys[0], f"applies to {_kinds_with('quantity', 'current')} only "
                                       f"(this spec is {shown(kind)})")
        if el is None:
            raise gr.fail(mos_keys[0], "needs gm/ID to combine the threshold and current-factor "
                                       "gradients: give [electrical] vov_v or gm_id_per_v")
        vt = _num(gr, "vt_mv_per_mm", 0.0)
        beta = _num(gr, "beta_pct_per_mm", 0.0)
        # drain current: dI/I = dbeta/beta - (gm/ID) dVT; worst case, the effects add.
        # 1 %/mm = 10 ppm/um; (gm/ID) [1/V] x VT [mV/mm] = 0.1 x gm/ID x VT %/mm
        pct = beta + 0.1 * el.gm_id_per_v * vt
        linear = 10.0 * pct
        described = (f"{pct:.4g} %/mm of drain current = beta {beta:g} %/mm + gm/ID "
                     f"{el.gm_id_per_v:g}/V x VT {vt:g} mV/mm (effects added: the worst case)")
    elif given == ["linear_pct_per_mm"]:
        pct = _num(gr, "linear_pct_per_mm", 1.0)
        linear = 10.0 * pct
        described = f"{pct:g} %/mm = {linear:g} ppm/um"
    else:
        linear = _num(gr, "linear_ppm_per_um", d.linear_ppm_per_um)
        described = f"{linear:g} ppm/um" + ("" if given else " (the default)")
    direction = gr.number("direction_deg", None, positive=False)
    hot = _hot_spot(gr, source)
    return GradientSpec(linear, quad, order, vt, beta,
                        None if direction is None else float(direction) % 360.0, hot,
                        described)


def _hot_spot(gr: _Reader, source: str) -> HotSpot | None:
    """``[gradient] hot_spot = { x_um, y_um, ppm, fall_off_um }``, or None."""
    if "hot_spot" not in gr.data:
        return None
    hs = _Reader(source, "gradient.hot_spot", gr.data["hot_spot"])
    missing = [k for k in ("x_um", "y_um", "ppm", "fall_off_um") if k not in hs.data]
    if missing:
        raise hs.fail(missing[0], "is missing (x_um, y_um, ppm, fall_off_um)")
    return HotSpot(*(float(hs.number(k, None, positive=k == "fall_off_um") or 0.0)
                     for k in ("x_um", "y_um", "ppm", "fall_off_um")))


def _mask(arr: _Reader, rows: int | None, columns: int | None) -> tuple[str, ...] | None:
    """[array] mask (rows of '.', '#', '-') and keep_out rectangles, as mask rows."""
    raw = arr.data.get("mask")
    keep = arr.data.get("keep_out")
    if raw is None and keep is None:
        return None
    if raw is not None:
        if not isinstance(raw, str):
            raise arr.fail("mask", "must be text: one line per core row of '.' (usable), "
                                   "'#' (keep-out) or '-' (outside the footprint)")
        lines = [ln.strip() for ln in raw.strip("\n").splitlines() if ln.strip()]
        if not lines:
            raise arr.fail("mask", "is empty")
        width = len(lines[0])
        for i, ln in enumerate(lines, start=1):
            bad = sorted(set(ln) - set(MASK_CHARS))
            if bad:
                raise arr.fail("mask", f"line {i} holds {shown(bad[0])}; use '.' (usable), '#' "
                                       "(keep-out) or '-' (outside the footprint)")
            if len(ln) != width:
                raise arr.fail("mask", f"line {i} has {len(ln)} slots, line 1 has {width}")
        if len(lines) * width > MAX_SLOTS or max(len(lines), width) > MAX_SIDE:
            raise LimitError(f"{arr.where} mask has {len(lines)} x {width} slots, the limit "
                             f"is {MAX_SLOTS} slots and {MAX_SIDE} a side")
        if rows is not None and rows != len(lines):
            raise arr.fail("mask", f"has {len(lines)} rows, rows = {rows}")
        if columns is not None and columns != width:
            raise arr.fail("mask", f"has {width} columns, columns = {columns}")
        grid = [list(ln) for ln in lines]
    else:
        if rows is None or columns is None:
            raise arr.fail("keep_out", "needs rows and columns (or a mask)")
        grid = [["."] * columns for _ in range(rows)]
    if keep is not None:
        if not isinstance(keep, list) or not all(
                isinstance(r, list) and len(r) == 4 and all(isinstance(v, int)
                                                            and not isinstance(v, bool)
                                                            for v in r) for r in keep):
            raise arr.fail("keep_out", "must be a list of [row0, col0, row1, col1] "
                                       "rectangles (inclusive, row 0 on top)")
        for r0, c0, r1, c1 in keep:
            if not (0 <= r0 <= r1 < len(grid) and 0 <= c0 <= c1 < len(grid[0])):
                raise arr.fail("keep_out", f"[{r0}, {c0}, {r1}, {c1}] lies outside the "
                                           f"{len(grid)} x {len(grid[0])} core")
            for r in range(r0, r1 + 1):
                for c in range(c0, c1 + 1):
                    grid[r][c] = "#"
    if not any("." in row for row in grid):
        raise arr.fail("mask", "leaves no usable slot")
    return tuple("".join(row) for row in grid)


def _placement(source: str, data: dict[str, Any], names: list[str], counts: list[int],
               rows: int | None, columns: int | None, mask: tuple[str, ...] | None,
               symmetry: str) -> Placement:
    """[pins], [groups] and [match], checked against the core."""
    index = {n: i for i, n in enumerate(names)}
    pins: list[tuple[str, int, int]] = []
    raw_pins = data.get("pins", {})
    if not isinstance(raw_pins, dict):
        raise SpecError(f"{source}: [pins] must be a table: device = [[row, column], ...]")
    taken: dict[tuple[int, int], str] = {}
    for dev, slots in raw_pins.items():
        where = f"{source}: [pins] {dev}"
        if dev not in index:
            raise SpecError(f"{where} is not a device ({', '.join(names)})")
        if (not isinstance(slots, list) or not all(
                isinstance(p, list) and len(p) == 2 and all(isinstance(v, int)
                                                            and not isinstance(v, bool)
                                                            for v in p) for p in slots)):
            raise SpecError(f"{where} must be a list of [row, column] slots of the core "
                            "(row 0 on top)")
        if len(slots) > counts[index[dev]]:
            raise SpecError(f"{where} pins {len(slots)} units, the device has "
                            f"{counts[index[dev]]}")
        if rows is None or columns is None:
            raise SpecError(f"{where}: pins need the core's rows and columns (or a mask)")
        for r, c in slots:
            if not (0 <= r < rows and 0 <= c < columns):
                raise SpecError(f"{where} slot [{r}, {c}] lies outside the {rows} x {columns} "
                                "core")
            if mask is not None and mask[r][c] != ".":
                raise SpecError(f"{where} slot [{r}, {c}] is not usable in the mask")
            if (r, c) in taken:
                raise SpecError(f"{where} slot [{r}, {c}] is already pinned to "
                                f"{shown(taken[r, c])}")
            taken[r, c] = dev
            pins.append((dev, r, c))
    groups: list[GroupSpec] = []
    raw_groups = data.get("groups", {})
    if not isinstance(raw_groups, dict):
        raise SpecError(f"{source}: [groups] must hold tables [groups.NAME] with devices")
    seen: dict[str, str] = {}
    for gname, g in raw_groups.items():
        where = f"{source}: [groups.{gname[:MAX_NAME]}]"
        if not NAME_RE.match(gname) or len(gname) > MAX_NAME:
            raise SpecError(f"{source}: [groups] group name {shown(gname)} must be a name of "
                            f"at most {MAX_NAME} letters, digits or _")
        if not isinstance(g, dict):
            raise SpecError(f"{where} must be a table with devices = [...]")
        for key in g:
            if key not in ("devices", "rows", "polarity"):
                hint = (" (one kind per spec: every group shares the spec's unit cell)"
                        if key == "kind" else "")
                raise SpecError(f"{where} unknown key {shown(key)} (allowed: devices, rows, "
                                f"polarity){hint}")
        gpol = g.get("polarity")
        if gpol is not None and gpol not in ("n", "p"):
            raise SpecError(f"{where} polarity must be \"n\" or \"p\", got {shown(gpol)}")
        devs = g.get("devices")
        if not isinstance(devs, list) or not devs or not all(isinstance(d, str) for d in devs):
            raise SpecError(f"{where} devices must be a list of device names")
        for d in devs:
            if d not in index:
                raise SpecError(f"{where} device {shown(d)} is not in [devices]")
            if d in seen:
                raise SpecError(f"{where} device {shown(d)} is already in group "
                                f"{shown(seen[d])}; a device belongs to one group")
            seen[d] = gname
        grows = g.get("rows")
        if grows is not None:
            if (not isinstance(grows, list) or not grows
                    or not all(isinstance(r, int) and not isinstance(r, bool) for r in grows)):
                raise SpecError(f"{where} rows must be a list of core row numbers (0 on top)")
            if rows is None:
                raise SpecError(f"{where} rows need the core's rows (give rows or a mask)")
            bad = [r for r in grows if not 0 <= r < rows]
            if bad:
                raise SpecError(f"{where} row {bad[0]} is outside the core's rows 0..{rows - 1}")
            cap = sum((mask[r].count(".") if mask is not None else (columns or 0))
                      for r in set(grows))
            need = sum(counts[index[d]] for d in devs)
            if columns is not None and need > cap:
                raise SpecError(f"{where} needs {need} slots, its rows hold {cap}")
            grows = sorted(set(grows))
        groups.append(GroupSpec(gname, tuple(devs), None if grows is None else tuple(grows),
                                gpol))
    banded = [g.name for g in groups if g.rows is not None]
    if banded and len(names) > MAX_BANDED_DEVICES - 1:
        raise LimitError(f"{source}: [groups] row bands (rows = [...] of group "
                         f"{shown(banded[0])}) handle at most {MAX_BANDED_DEVICES - 1} devices "
                         f"in a spec, and this one has {len(names)}; drop the rows or split "
                         "the block")
    for g in groups:
        if g.rows is None:
            continue
        for dev, r, c in pins:
            if dev in g.devices and r not in g.rows:
                raise SpecError(f"{source}: [pins] {dev} at [{r}, {c}] lies outside the rows "
                                f"{list(g.rows)} of its group {shown(g.name)}")
    if groups:
        loose = [n for n in names if n not in seen]
        if loose:
            raise SpecError(f"{source}: [groups] device {shown(loose[0])} is in no group; give "
                            "every device a group")
    match: list[tuple[str, str]] = []
    raw_match = data.get("match", {})
    if not isinstance(raw_match, dict):
        raise SpecError(f"{source}: [match] must be a table with pairs = [[A, B], ...]")
    for key in raw_match:
        if key not in ("pairs", "nets"):
            raise SpecError(f"{source}: [match] unknown key {shown(key)} (allowed: pairs, nets)")
    for p in raw_match.get("pairs", []):
        if (not isinstance(p, list) or len(p) != 2
                or not all(isinstance(d, str) and d in index for d in p) or p[0] == p[1]):
            raise SpecError(f"{source}: [match] pairs must be pairs of two different devices, "
                            f"got {str(p)[:60]}")
        match.append((p[0], p[1]))
    match_nets: list[tuple[str, ...]] = []
    raw_sets = raw_match.get("nets", [])
    if not isinstance(raw_sets, list):
        raise SpecError(f"{source}: [match] nets must be a list of net lists, e.g. "
                        "[[\"INP\", \"INN\"]], got {_typename(raw_sets)}")
    for p in raw_sets:
        if (not isinstance(p, list) or len(p) < 2 or len(p) > MAX_DEVICES
                or not all(isinstance(n, str) for n in p) or len(set(p)) != len(p)):
            raise SpecError(f"{source}: [match] nets must hold lists of two or more different "
                            f"net names, got {str(p)[:60]}")
        match_nets.append(tuple(p))
    placement = Placement(mask, tuple(pins), symmetry, tuple(groups), tuple(match),
                          tuple(match_nets))
    if symmetry != "none":
        _check_symmetry(source, placement, names, counts, rows, columns)
    return placement


def _check_symmetry(source: str, pl: Placement, names: list[str], counts: list[int],
                    rows: int | None, columns: int | None) -> None:
    """The footprint and pins must be their own mirror image, and odd counts fit."""
    if rows is None or columns is None:
        raise SpecError(f"{source}: [array] symmetry needs rows and columns (or a mask)")

    def mirror(r: int, c: int) -> tuple[int, int]:
        if pl.symmetry == "x":
            return r, columns - 1 - c
        if pl.symmetry == "y":
            return rows - 1 - r, c
        return rows - 1 - r, columns - 1 - c

    mask = pl.mask or tuple("." * columns for _ in range(rows))
    for r in range(rows):
        for c in range(columns):
            mr, mc = mirror(r, c)
            if (mask[r][c] == ".") != (mask[mr][mc] == "."):
                raise SpecError(f"{source}: [array] symmetry = {shown(pl.symmetry)}, but slot "
                                f"[{r}, {c}] is usable and its mirror [{mr}, {mc}] is not")
    pinned = {(r, c): d for d, r, c in pl.pins}
    for (r, c), d in pinned.items():
        m = mirror(r, c)
        if m != (r, c) and pinned.get(m) != d:
            raise SpecError(f"{source}: [pins] {d} at [{r}, {c}] under symmetry = "
                            f"{shown(pl.symmetry)} needs its mirror [{m[0]}, {m[1]}] pinned to "
                            f"{d} too")
    centre = sum(1 for r in range(rows) for c in range(columns)
                 if mask[r][c] == "." and mirror(r, c) == (r, c) and (r, c) not in pinned)
    free = [n - sum(1 for d, _, _ in pl.pins if d == name) for name, n in
            zip(names, counts, strict=True)]
    odd = sum(1 for n in free if n % 2)
    if odd > centre:
        raise SpecError(f"{source}: [array] symmetry = {shown(pl.symmetry)} leaves {centre} slots "
                        f"on the axis, but {odd} devices have an odd number of free units: "
                        "each needs one; make the counts even or the core odd across the axis")


def _net_name(where: str, key: str, value: Any) -> str:
    if not isinstance(value, str):
        raise SpecError(f"{where} {key} must be a net name (a string), got "
                        f"{_typename(value)}")
    if not NAME_RE.match(value) or len(value) > MAX_NET:
        raise SpecError(f"{where} {key} net {shown(value[:40])} is invalid: use a letter, then "
                        f"letters, digits or _ (at most {MAX_NET} characters)")
    return value


def _terminals(source: str, raw: Any, kind: str, names: list[str], counts: list[int],
               dummy_raw: Any) -> tuple[tuple[dict[str, str], ...], tuple[str, ...], str]:
    """Validate [terminals] and [array] dummy_net; fill the kind's defaults."""
    from placer.kinds import series_node

    info = KIND_RECORDS[kind]
    if not isinstance(raw, dict):
        raise SpecError(f"{source}: [terminals] must be a table, got {_typename(raw)}")
    for key in raw:
        if key not in names:
            near = difflib.get_close_matches(key, names, n=1)
            hint = (f" (did you mean {shown(near[0])}?)" if near
                    else f" (devices: {', '.join(names)})")
            raise SpecError(f"{source}: [terminals] {shown(key)} is not a device{hint}")
    allowed = info.terminals + (("join",) if len(info.joins) > 1 else ())
    nets: list[dict[str, str]] = []
    joins: list[str] = []
    for name in names:
        given = raw.get(name, {})
        where = f"{source}: [terminals] {name}"
        if not isinstance(given, dict):
            raise SpecError(f"{where} must be a table of terminal = net, e.g. "
                            f"{{ {info.drawn[0]} = \"NET\" }}, got {_typename(given)}")
        for key in given:
            if key not in allowed:
                near = difflib.get_close_matches(key, allowed, n=1)
                hint = f" (did you mean {shown(near[0])}?)" if near else ""
                raise SpecError(f"{where}: unknown terminal {shown(key)} of a {kind} unit{hint} "
                                f"(terminals: {', '.join(allowed)})")
        mine = default_nets(kind, name)
        for t in info.terminals:
            if t in given:
                mine[t] = _net_name(where, t, given[t])
        join = given.get("join", info.joins[0])
        if join not in JOINS:
            raise SpecError(f"{where} join must be 'series' or 'parallel', got {shown(join)}")
        nets.append(mine)
        joins.append(str(join))
    dummy = (default_dummy_net(kind, nets) if dummy_raw is None
             else _net_name(f"{source}: [array]", "dummy_net", dummy_raw))
    lowered = {n.lower(): f"device {shown(n)}" for n in names}
    inner = {series_node(n, i).lower(): n for n, c, j in zip(names, counts, joins, strict=True)
             if j == "series" for i in range(1, c)}
    seen: dict[str, str] = {}
    for net in [*(v for m in nets for v in m.values()), dummy]:
        low = net.lower()
        if low in lowered:
            raise SpecError(f"{source}: net {shown(net)} clashes with the {lowered[low]}: device "
                            "and net names must differ (labels of both are written)")
        if low in inner:
            raise SpecError(f"{source}: net {shown(net)} clashes with an inner node of the series "
                            f"resistor {shown(inner[low])}; choose another net name")
        if low in seen and seen[low] != net:
            raise SpecError(f"{source}: nets {shown(seen[low])} and {shown(net)} differ only by "
                            "case; net names must stay distinct in GDSII")
        seen[low] = net
    return tuple(nets), tuple(joins), dummy


def _electrical(source: str, raw: Any, kind: str, names: list[str], counts: list[int],
                mismatch: MismatchSpec) -> ElectricalSpec:
    """Validate [electrical]; missing keys are named with their units in one line."""
    el = _Reader(source, "electrical", raw)
    d = ElectricalSpec()
    ref = el.data.get("reference")
    if ref is not None and ref not in names:
        raise el.fail("reference", f"must name a device ({', '.join(names)}), got {shown(ref)}")
    common = {
        "reference": ref,
        "k_sigma": el.number("k_sigma", d.k_sigma) or d.k_sigma,
        "tolerance_pct": el.number("tolerance_pct", d.tolerance_pct) or d.tolerance_pct,
        "mc_samples": el.integer("mc_samples", d.mc_samples, low=0, high=200_000),
        "mc_seed": el.integer("mc_seed", d.mc_seed, low=0),
        "fit": el.choice("fit", d.fit, FITS),
    }
    info = KIND_RECORDS[kind]
    if info.quantity == "current":
        missing = []
        if "vov_v" not in el.data and "gm_id_per_v" not in el.data:
            missing.append("vov_v (overdrive, V) or gm_id_per_v (1/V)")
        if "lambda_per_v" not in el.data:
            missing.append("lambda_per_v (channel-length modulation, 1/V)")
        vds_raw = el.data.get("vds_v")
        if vds_raw is None:
            missing.append("[electrical.vds_v] (drain voltage of each device, V)")
        if missing:
            raise SpecError(f"{source}: [electrical] missing {'; '.join(missing)}")
        if "vov_v" in el.data and "gm_id_per_v" in el.data:
            raise SpecError(f"{source}: [electrical] give vov_v or gm_id_per_v, not both")
        if "vov_v" in el.data:
            vov = el.number("vov_v", None)
            assert vov is not None
            gm_id = 2.0 / vov          # square law: gm/ID = 2 / V_ov
        else:
            gm_id = el.number("gm_id_per_v", None) or 0.0
        vr = _Reader(source, "electrical.vds_v", vds_raw)
        vds: dict[str, float] = {}
        for key in vr.data:
            if key not in names:
                raise vr.fail(key, f"is not a device ({', '.join(names)})")
            v = vr.number(key, None, positive=True, allow_zero=True)
            assert v is not None
            vds[key] = v
        absent = [n for n in names if n not in vds]
        if absent:
            raise SpecError(f"{source}: [electrical.vds_v] missing {', '.join(absent)} "
                            "(drain voltage, V)")
        for key in _UNIT_VALUES:
            if key in el.data and key != info.unit_value:
                raise el.fail(key, f"applies to {_kinds_with('unit_value', key)} only (this "
                              f"spec is {shown(kind)})")
        return ElectricalSpec(
            gm_id_per_v=gm_id,
            unit_current_ua=el.number("unit_current_ua", 10.0) or 10.0,
            lambda_per_v=_num(el, "lambda_per_v", 0.0), vds_v=vds,
            a_vt_mv_um=_num(el, "a_vt_mv_um", mismatch.a_vt_mv_um
                            if mismatch.a_vt_mv_um is not None else d.a_vt_mv_um),
            a_beta_pct_um=_num(el, "a_beta_pct_um", mismatch.a_param_pct_um),
            **common,  # type: ignore[arg-type]
        )
    for key in (*_CURRENT_KEYS, *(k for k in _UNIT_VALUES if k != info.unit_value)):
        if key in el.data:
            owner = (_kinds_with("quantity", "current") if key in _CURRENT_KEYS
                     else _kinds_with("unit_value", key))
            raise el.fail(key, f"applies to {owner} only (this spec is {shown(kind)})")
    term = el.data.get("termination")
    if info.anchor == "termination":
        if term is None:
            raise SpecError(f"{source}: [electrical] missing termination (the unswitched "
                            "unit's device name, or \"none\")")
        if term == "none":
            term = None
        elif term not in names:
            raise el.fail("termination", f"must name a device ({', '.join(names)}) or be "
                          f"\"none\", got {shown(term)}")
        if "weights" in el.data:
            wr = _Reader(source, "electrical.weights", el.data["weights"])
            count = dict(zip(names, counts, strict=True))
            for key in wr.data:
                w = wr.number(key, None)
                if key not in count:
                    raise wr.fail(key, f"is not a device ({', '.join(names)})")
                if w != count[key]:
                    raise wr.fail(key, f"weight {w:g} does not match its {count[key]} unit "
                                  "cells: a capacitor's weight is its number of units")
        if len(names) - (term is not None) < 1:
            raise SpecError(f"{source}: [electrical] a capacitor array needs a switched "
                            "capacitor besides the termination")
    elif term is not None or "weights" in el.data:
        raise SpecError(f"{source}: [electrical] termination and weights apply to "
                        f"{_kinds_with('anchor', 'termination')} only")
    value = {info.unit_value: el.number(info.unit_value, None)} if info.unit_value else {}
    return ElectricalSpec(termination=term, **value, **common)  # type: ignore[arg-type]


#: [electrical] keys of a unit carrying a current (a MOS finger's operating point).
_CURRENT_KEYS = ("vov_v", "gm_id_per_v", "lambda_per_v", "vds_v", "unit_current_ua",
                 "a_vt_mv_um", "a_beta_pct_um")
#: [electrical] keys of one unit's value, each kind's own.
_UNIT_VALUES = tuple(dict.fromkeys(k.unit_value for k in KIND_RECORDS.values()
                                   if k.unit_value))


def _kinds_with(attribute: str, value: object) -> str:
    """The kinds whose record has ``attribute`` = ``value``, for a message:
    'kind = "cap"' or 'kind = "cap" or "mim"'."""
    names = [f'"{k.name}"' for k in KIND_RECORDS.values() if getattr(k, attribute) == value]
    return "kind = " + " or ".join(names)


def _lde(source: str, raw: Any, kind: str) -> LdeSpec:
    """The [lde] table: coefficients of the layout-dependent effects (MOS only)."""
    le = _Reader(source, "lde", raw)
    if le.data and not KIND_RECORDS[kind].fingers:
        raise SpecError(f"{source}: [lde] describes MOS fingers' diffusion and well; "
                        f"a {kind} array has none (remove the table)")
    d = LdeSpec()
    out = {k: le.number(k, getattr(d, k), positive=False) for k in _SCHEMA["lde"]}
    for k in ("saref_um", "sbref_um", "scref_um"):
        out[k] = le.number(k, getattr(d, k))
    return LdeSpec(**out)   # type: ignore[arg-type]


def _num(reader: _Reader, key: str, default: float) -> float:
    value = reader.number(key, default, allow_zero=True)
    assert value is not None
    return value


def _pitch(arr: _Reader) -> tuple[float, float]:
    if "pitch_um" not in arr.data:
        return (1.0, 1.0)
    value = arr.data["pitch_um"]
    if isinstance(value, int | float) and not isinstance(value, bool):
        value = [value, value]
    if (not isinstance(value, list) or len(value) != 2
            or any(isinstance(v, bool) or not isinstance(v, int | float) for v in value)):
        raise arr.fail("pitch_um", f"must be [x, y] in um (two numbers), got {shown(value)}")
    if not all(0.001 <= v <= 1e5 for v in value):
        raise arr.fail("pitch_um", "must be two numbers from 0.001 um (the GDSII grid) to "
                       f"100000 um, got [{', '.join(f'{float(v):g}' for v in value)}]")
    return (float(value[0]), float(value[1]))


def _safe_default_name(stem: str) -> str:
    name = re.sub(r"[^A-Za-z0-9_]", "_", stem)[:MAX_NAME]
    if not name or not name[0].isalpha():
        name = ("s" + name)[:MAX_NAME]
    if name.lower() in _RESERVED:
        name = name + "_"
    return name
