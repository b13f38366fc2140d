"""The fixed work of a run, estimated from the spec's sizes before any of it starts.

``--time-limit`` caps the search; around it comes work that grows with the block, not
with the limit: scoring the baselines and the result (a covariance field per device),
routing and extracting the wiring (every net's tracks, and every crossing of two nets'
wires), the Monte Carlo tables and the pictures. :func:`estimate` puts a number on it
from the sizes alone, and :func:`check` refuses, in one line and before any work, a run
whose fixed work would go far past the limit it was given (it names the limit that would
do) or whose memory would go past :data:`MAX_PEAK_MB` at any limit.

The coefficients were fitted to whole runs on the reference machine (two cores; see
``tests/bench/bench_workload.py``, which prints the estimate beside the measured time of
every case, for anyone to refit on their own machine); a faster machine finishes sooner,
a slower one later. They are deliberately simple: a term per unit (pictures, GDSII, the
netlist), one per unit and net to the power 1.5 (the routing's tracks and the
extraction's crossings of the nets that span the array), one per series link of a
resistor chain (a net local to two neighbouring units), one per device and slot (the
covariance fields), the cube of the units sampled by ``[monte_carlo]`` (factorising
their correlation) and the capacitor budget's code samples.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from placer.errors import LimitError
from placer.io.spec import Spec
from placer.kinds import KINDS, series_node

__all__ = ["MAX_PEAK_MB", "Workload", "after_search", "allowed_seconds", "check", "estimate",
           "search_seconds"]

#: start-up, reading, the report and the smallest pictures (seconds)
_BASE_S = 2.0
#: per unit: pictures, GDSII, netlist, the block's geometry (seconds)
_PER_UNIT_S = 1.2e-3
#: per unit x nets^1.5: routing tracks and the extraction's crossings (seconds)
_PER_UNIT_NET_S = 3.6e-6
#: per series link (a net local to two neighbouring units of a resistor chain): its short
#: link and its small network, apart from the block-wide nets (measured: a 1024-unit
#: ladder's 1021 links routed and extracted in 2.9 s on the reference machine)
_PER_LINK_S = 3.0e-3
_PER_LINK_MB = 0.05
#: per device x slot: each device's covariance field for every scored arrangement
_PER_DEVICE_SLOT_S = 3.0e-6
#: per sampled unit cubed: factorising the units' correlation for [monte_carlo]
_PER_MC_UNIT3_S = 5.5e-10
#: per capacitor-budget code sample (mc_samples x 2^bits)
_PER_CODE_SAMPLE_S = 6e-7
#: memory: the interpreter and libraries, per unit, per unit x nets^1.5, per device x
#: slot, per sampled unit squared, per code sample (MB)
_BASE_MB = 100.0
_PER_UNIT_MB = 0.026
_PER_UNIT_NET_MB = 1.17e-4
_PER_DEVICE_SLOT_MB = 1.8e-3
_PER_MC_UNIT2_MB = 3.5e-5
_PER_CODE_SAMPLE_MB = 4e-5

#: a run estimated to need more memory than this is refused at any time limit (MB)
MAX_PEAK_MB = 8192.0
#: the fixed work may take three times the time limit plus this (seconds)
MARGIN_S = 5.0


@dataclass(frozen=True)
class Workload:
    """Estimated fixed work of one run: seconds and peak memory on the reference
    machine, and the seconds of each part (largest first)."""

    seconds: float
    peak_mb: float
    parts: tuple[tuple[str, float], ...]


def _slots(spec: Spec) -> int:
    rows, cols = spec.array.rows, spec.array.columns
    if rows is not None and cols is not None:
        return rows * cols
    return spec.n_units


def _code_samples(spec: Spec) -> int:
    e = spec.electrical
    if e is None or KINDS[spec.kind].budget != "dac":     # a budget over every code
        return 0
    return e.mc_samples * 2 ** min(max(len(spec.devices) - 1, 0), 16)


def _nets(spec: Spec, routed: bool) -> tuple[int, int]:
    """The block's nets that the routing spans across the array, and its series links
    (the inner nodes of resistor chains, each joining two neighbouring units)."""
    if not routed:
        return 0, 0
    links = {series_node(d, i) for d, n, j in zip(spec.devices, spec.counts, spec.joins,
                                                   strict=True) if j == "series"
             for i in range(1, n)}
    names = spec.net_names()
    return len([n for n in names if n not in links]), len([n for n in names if n in links])


def estimate(spec: Spec, routed: bool = True) -> Workload:
    """The fixed work of arranging (or drawing) ``spec``; ``routed``: the run routes and
    extracts the block's wiring.

    >>> from placer.jobs.load import parse_spec
    >>> small = estimate(parse_spec('[devices]\\nA = 2\\nB = 2\\n', "s.toml"))
    >>> big = estimate(parse_spec('[devices]\\nA = 2048\\nB = 2048\\n', "s.toml"))
    >>> small.seconds < big.seconds and small.peak_mb < big.peak_mb
    True
    """
    units = spec.n_units
    nets, links = _nets(spec, routed)
    parts = {
        "start-up and report": _BASE_S,
        f"pictures and geometry of {units} units": _PER_UNIT_S * units,
        f"routing and extracting {nets + links} nets": (_PER_UNIT_NET_S * units * nets ** 1.5
                                                        + _PER_LINK_S * links),
        f"covariance fields of {len(spec.devices)} devices": (
            _PER_DEVICE_SLOT_S * len(spec.devices) * _slots(spec)),
    }
    peak = (_BASE_MB + _PER_UNIT_MB * units + _PER_UNIT_NET_MB * units * nets ** 1.5
            + _PER_LINK_MB * links + _PER_DEVICE_SLOT_MB * len(spec.devices) * _slots(spec))
    if spec.monte_carlo.samples > 0:
        parts["[monte_carlo] correlation"] = _PER_MC_UNIT3_S * units ** 3
        peak += _PER_MC_UNIT2_MB * units ** 2
    codes = _code_samples(spec)
    if codes:
        parts["capacitor budget codes"] = _PER_CODE_SAMPLE_S * codes
        peak += _PER_CODE_SAMPLE_MB * codes
    ordered = tuple(sorted(parts.items(), key=lambda kv: -kv[1]))
    return Workload(sum(parts.values()), peak, ordered)


#: The work after the search, for ``arrange``'s share of its limit: the result's grade
#: and routing (the pitch refit, the router, the extraction), the budget, the GDSII, the
#: netlist, the pictures and the report. Terms as in :func:`estimate` and one for the
#: electrical budget (its picture), fitted to the time from the search's end to the
#: process's end (``tests/bench/bench_workload.py --fit``); a candidate's grade and picture
#: are assumed, not fitted.
#: (refitted when MOS fingers went two to a diffusion island and the layout-dependent
#: figures joined the grade: the orientation and pairing passes, the guard ring's check)
_AFTER_BASE_S = 0.549
_AFTER_PER_UNIT_S = 5.13e-4
_AFTER_PER_UNIT_NET_S = 1.99e-6
_AFTER_PER_DEVICE_SLOT_S = 1.81e-5     # the pairing and balance passes per device and slot
_AFTER_PER_MC_UNIT3_S = 1.54e-10
_AFTER_BUDGET_S = 0.0433
#: a capacitor budget's code samples (mc_samples x 2^bits), measured apart: samples/
#: sar_cdac.toml at 2000, 20 000 and 100 000 samples (the fit's cases hold too few)
_AFTER_PER_CODE_SAMPLE_S = 7.5e-8
_AFTER_CANDIDATE_S = 0.25
#: the estimate is raised by this share before the search's time is set (a slower start
#: on a busy machine)
AFTER_SAFETY = 1.15
#: the search keeps at least this share of the limit, however much work comes after it
MIN_SEARCH_SHARE = 0.2
#: start-up and the work before the search (imports, reading, the tools, the pitch fit)
#: as the share counts it: a fixed figure, not a clock reading, so that the share (and
#: the number of restarts it sets) is the same on every run of a spec, seed and limit
BEFORE_SEARCH_S = 0.4


def after_search(spec: Spec, routed: bool = True, candidates: int = 0) -> float:
    """Seconds of ``arrange``'s work after its search (reference machine), with
    ``candidates`` more arrangements graded and drawn.

    >>> from placer.jobs.load import parse_spec
    >>> small = after_search(parse_spec('[devices]\\nA = 2\\nB = 2\\n', "s.toml"))
    >>> big = after_search(parse_spec('[devices]\\nA = 2048\\nB = 2048\\n', "s.toml"))
    >>> 0 < small < big
    True
    """
    units = spec.n_units
    nets, links = _nets(spec, routed)
    secs = (_AFTER_BASE_S + _AFTER_PER_UNIT_S * units
            + _AFTER_PER_UNIT_NET_S * units * nets ** 1.5 + _PER_LINK_S * links
            + _AFTER_PER_DEVICE_SLOT_S * len(spec.devices) * _slots(spec))
    if spec.electrical is not None:
        secs += _AFTER_BUDGET_S + _AFTER_PER_CODE_SAMPLE_S * _code_samples(spec)
    if spec.monte_carlo.samples > 0:
        secs += _AFTER_PER_MC_UNIT3_S * units ** 3
    # each candidate: its grade and picture
    secs += candidates * (_AFTER_CANDIDATE_S + _AFTER_PER_UNIT_S * units
                          + _AFTER_PER_DEVICE_SLOT_S * len(spec.devices) * _slots(spec))
    return secs


#: Each core shape ``arrange`` tries costs fixed work before its search moves (the pitch
#: fitted to a textbook arrangement of it, the baselines scored, the starts built):
#: measured 0.05, 0.07 and 0.27 s for mirrors of 256, 1024 and 4096 units and 0.11 and
#: 0.41 s for capacitor arrays of 1024 and 4096 (this machine).
_SHAPE_BASE_S = 0.02
_SHAPE_PER_UNIT_S = 1.0e-4
#: a shape is tried only when its fixed work is at most this share of its part of the
#: search's limit: at a short limit the search's time goes to moves on fewer shapes
SHAPE_WORK_SHARE = 1 / 3


def shapes_affordable(spec: Spec, search_s: float) -> int:
    """How many core shapes a search of ``search_s`` seconds tries (at least one).

    >>> from placer.jobs.load import parse_spec
    >>> big = parse_spec('[devices]\\nA = 2048\\nB = 2048\\n', "s.toml")
    >>> shapes_affordable(big, 0.5), shapes_affordable(big, 10.0)
    (1, 7)
    """
    per_shape = _SHAPE_BASE_S + _SHAPE_PER_UNIT_S * spec.n_units
    return max(1, int(SHAPE_WORK_SHARE * search_s / per_shape))


def search_seconds(time_limit_s: float, after_s: float,
                   before_s: float = BEFORE_SEARCH_S) -> float:
    """The search's share of a whole-run limit: what is left of ``time_limit_s`` after the
    work before the search (``before_s``) and after it (``after_s``, raised by
    :data:`AFTER_SAFETY`), but never less than :data:`MIN_SEARCH_SHARE` of the limit.

    >>> search_seconds(10.0, 2.0, before_s=0.5)
    7.2
    >>> search_seconds(0.5, 1.0)
    0.1
    """
    left = time_limit_s - before_s - AFTER_SAFETY * after_s
    return round(max(left, MIN_SEARCH_SHARE * time_limit_s), 6)


def allowed_seconds(time_limit_s: float) -> float:
    """The most fixed work a run with this time limit takes on (seconds).

    >>> allowed_seconds(0.3), allowed_seconds(60.0)
    (5.9, 185.0)
    """
    return round(3 * time_limit_s + MARGIN_S, 6)


def check(spec: Spec, source: str, time_limit_s: float | None, routed: bool = True) -> Workload:
    """Refuse (:class:`LimitError`) a run whose fixed work is out of proportion: memory
    past :data:`MAX_PEAK_MB`, or (with a time limit) seconds past
    :func:`allowed_seconds`. Returns the estimate otherwise."""
    work = estimate(spec, routed)
    what, secs = work.parts[0]
    if work.peak_mb > MAX_PEAK_MB:
        raise LimitError(
            f"{source}: {what} over {spec.n_units} units would need about "
            f"{work.peak_mb / 1024:.0f} GB (estimate; the limit is {MAX_PEAK_MB / 1024:.0f} "
            "GB); split the block into smaller ones or join terminals onto fewer nets")
    if time_limit_s is not None and work.seconds > allowed_seconds(time_limit_s):
        need = max(1, math.ceil((work.seconds - MARGIN_S) / 3))
        while allowed_seconds(need) < work.seconds:      # rounding: the named limit passes
            need += 1
        raise LimitError(
            f"{source}: the work around the search ({what}: about {secs:.0f} s of "
            f"{work.seconds:.0f} s, estimated) is far past --time-limit {time_limit_s:g}; "
            f"give --time-limit {need} or more")
    return work
