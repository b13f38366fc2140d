"""Readable terminal tables for a grade."""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

from placer.io.pattern import format_pattern
from placer.kinds import KINDS
from placer.model.grade import Grade

if TYPE_CHECKING:
    from placer.io.spec import Spec
    from placer.jobs.arrange import Arrangement

__all__ = ["format_grade", "format_table", "format_arrangement", "format_budget",
           "format_nets", "grade_report", "format_sensitivity", "format_batch",
           "format_sequence", "CAUTION"]

CAUTION = ("Figures are model estimates under the assumptions above; confirm with the "
           "foundry's matching guidelines, extraction and the process's mismatch data.")


def json_text(obj: Any) -> str:
    """``obj`` as indented JSON; a NaN (a figure not computed, e.g. no bound without a
    search) becomes null, and an infinite number is an internal error, never written.

    Examples
    --------
    >>> print(json_text({"bound": float("nan"), "n": 2.5}))
    {
      "bound": null,
      "n": 2.5
    }
    """
    import json
    import math

    def clean(x: Any, where: str) -> Any:
        if isinstance(x, float):
            if math.isnan(x):
                return None
            if math.isinf(x):
                raise ValueError(f"internal error: {where} is infinite")
            return x
        if isinstance(x, dict):
            return {k: clean(v, f"{where}.{k}") for k, v in x.items()}
        if isinstance(x, list | tuple):
            return [clean(v, f"{where}[{i}]") for i, v in enumerate(x)]
        return x

    return json.dumps(clean(obj, "report"), indent=2, allow_nan=False)


def format_table(header: list[str], rows: list[list[str]]) -> str:
    """Left-align the first column, right-align the rest.

    Examples
    --------
    >>> print(format_table(["a", "bb"], [["x", "1"]]))
    a  bb
    x   1
    """
    widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]
    lines = []
    for r in [header, *rows]:
        cells = [r[0].ljust(widths[0])] + [c.rjust(w) for c, w in zip(r[1:], widths[1:],
                                                                     strict=True)]
        lines.append("  ".join(cells).rstrip())
    return "\n".join(lines)


def _floor(value: float, digits: int) -> str:
    """A positive bound to ``digits`` significant digits, rounded down (never above it)."""
    step = 10.0 ** (math.floor(math.log10(value)) - digits + 1)
    return f"{math.floor(value / step) * step:.{digits}g}"


def _f(value: float, digits: int = 3) -> str:
    if value == 0 or abs(value) < 1e-9:
        return "0"
    if abs(value) >= 10 ** digits:
        return f"{value:.0f}"
    return f"{value:.{digits}g}"


def format_grade(grade: Grade, max_pairs: int = 40, origin_um: tuple[float, float] = (0.0, 0.0),
                 frame: str = "") -> str:
    """The grade as text: devices, pairs, worst pairs, assumptions, caution.

    ``origin_um`` and ``frame`` (e.g. "the CSV's coordinates") put the positions in the
    input file's own frame, the one the rest of the report uses for that file.
    """
    a = grade.assumptions
    rows, cols = grade.shape
    ox, oy = origin_um
    where = f" ({frame})" if frame else ""
    out = [f"{grade.name}: {grade.kind} array of {rows} x {cols} slots, pitch "
           f"{grade.pitch_um[0]:g} x {grade.pitch_um[1]:g} um, centre of device units at "
           f"({grade.centre_um[0] + ox:.4g}, {grade.centre_um[1] + oy:.4g}) um{where}", ""]
    dev_rows = []
    for d in grade.devices:
        right, left, _ = d.orientation
        dev_rows.append([
            d.name, str(d.units), f"{d.centroid_um[0] + ox:.4g}", f"{d.centroid_um[1] + oy:.4g}",
            _f(d.offset_um), _f(d.second_moment_um2[0]), _f(d.second_moment_um2[1]),
            _f(d.second_moment_um2[2]), str(d.edge_units),
            f"{right}/{left}" if right + left else "-",
        ])
    out.append(f"Devices (centroid in um{', in ' + frame if frame else ''}; offset from centre "
               "in um; second moments about the centre in um^2)")
    out.append(format_table(["device", "units", "x", "y", "offset", "Mxx", "Mxy", "Myy",
                             "edge", ">/<"], dev_rows))
    out.append("")
    if not grade.pairs:
        out.append("No pair of devices is ranked (one device, or groups of one device each "
                   "with no [match]): no ratio to grade.")
    else:
        order = len(grade.pairs[0].moment_norms)
        vt = grade.pairs[0].vt_sigma_mv is not None
        known = grade.pairs[0].known_direction_ppm is not None
        spot = grade.pairs[0].hot_spot_ppm is not None
        head = ["pair", "linear", "dir", *(["known"] if known else []),
                *(["spot"] if spot else []), "quad", "bowl",
                *[f"|dM{k}|" for k in range(3, order + 1)], "s_corr", "s_white", "s_rand"]
        if vt:
            head.append("s_dVT")
        shown = sorted(grade.pairs, key=lambda p: -p.linear_ppm - p.quadratic_ppm)
        pair_rows = []
        for p in shown[:max_pairs]:
            row = [f"{p.a}/{p.b}", _f(p.linear_ppm), f"{p.linear_worst_angle_deg:.0f}"
                   if p.linear_ppm > 1e-9 else "-",
                   *([_f(p.known_direction_ppm or 0.0)] if known else []),
                   *([_f(p.hot_spot_ppm or 0.0)] if spot else []),
                   _f(p.quadratic_ppm), _f(p.bowl_ppm),
                   *[_f(v) for v in p.moment_norms[2:]], _f(p.correlated_sigma_ppm),
                   _f(p.white_sigma_ppm), _f(p.random_sigma_ppm)]
            if vt:
                row.append(_f(p.vt_sigma_mv or 0.0))
            pair_rows.append(row)
        out.append("Pairs (ratio error of first/second in ppm; dir = worst gradient direction "
                   "in degrees; " + ("known = along the spec's direction; " if known else "")
                   + ("spot = the spec's hot spot; " if spot else "")
                   + "|dMk| = order-k moment difference in um^k; sigmas in ppm"
                   + ("; s_dVT in mV" if vt else "") + ")")
        out.append(format_table(head, pair_rows))
        if len(shown) > max_pairs:
            out.append(f"... {len(shown) - max_pairs} more pairs in the JSON output (--json)")
        out.append("")
        for label, field in (("linear", "linear_ppm"), ("quadratic", "quadratic_ppm"),
                             ("random", "random_sigma_ppm")):
            w = grade.worst(field)
            assert w is not None
            out.append(f"Worst {label:<9} {w.a}/{w.b}: {_f(getattr(w, field))} ppm")
        groups = grade.groups()
        if groups != [""]:
            for g in groups:
                wl, wq, wr = (grade.worst(f, g) for f in ("linear_ppm", "quadratic_ppm",
                                                         "random_sigma_ppm"))
                assert wl is not None and wq is not None and wr is not None
                name = "across groups (matched pairs)" if g == "match" else f"group {g}"
                out.append(f"  {name}: linear {wl.a}/{wl.b} {_f(wl.linear_ppm)} ppm, "
                           f"quadratic {wq.a}/{wq.b} {_f(wq.quadratic_ppm)} ppm, random "
                           f"{wr.a}/{wr.b} {_f(wr.random_sigma_ppm)} ppm")
        if grade.monte_carlo is not None:
            mc = grade.monte_carlo
            worst = max(range(len(mc.std_ppm)), key=lambda i: mc.exact_std_ppm[i])
            p = grade.pairs[worst]
            out.append(f"Monte Carlo ({mc.samples} samples, seed {mc.seed}), {p.a}/{p.b}: "
                       f"std {_f(mc.std_ppm[worst])} ppm (exact {_f(mc.exact_std_ppm[worst])}),"
                       f" |error| 99th percentile {_f(mc.abs_p99_ppm[worst])} ppm")
    out += format_lde(grade.lde)
    out.append("")
    out.append(
        "Assumptions: linear gradient {desc} (worst direction); Hessian norm {q:g} "
        "ppm/um^2 (Frobenius; bowl = same norm, radial); correlated field sigma {cs:g} ppm, "
        "{kern} kernel, length {cl:g} um; area coefficient {ap:g} %um{vt}; unit area "
        "{ua:g} um^2; from {src}.".format(
            desc=a["gradient"], q=a["quadratic_hessian_norm_ppm_per_um2"],
            cs=a["correlated_sigma_ppm"], kern=a["correlated_kernel"],
            cl=a["correlated_length_um"], ap=a["area_coefficient_pct_um"],
            vt="" if a["a_vt_mv_um"] is None else f", A_VT {a['a_vt_mv_um']:g} mV um",
            ua=a["unit_area_um2"], src=a["spec"]))
    out.append(CAUTION)
    return "\n".join(out)


def format_lde(lde: Any) -> list[str]:
    """The layout-dependent figures of MOS fingers: each device's SA/SB spread and its
    stress and well terms (no lines without them)."""
    if lde is None:
        return []
    well = (lde.coefficients.get("well_margin_um") is not None
            or lde.coefficients.get("well_box_um") is not None)
    rows = [[d.device, str(d.fingers), f"{d.sa_um[0]:.4g}..{d.sa_um[1]:.4g}",
             f"{d.sb_um[0]:.4g}..{d.sb_um[1]:.4g}", f"{d.inv_od_per_um:.5g}",
             f"{d.inv_od_range[0]:.4g}..{d.inv_od_range[1]:.4g}",
             *([f"{d.sca:.4g}"] if well else []), _f(d.dvt_mv, 4), _f(100 * d.dmu_rel, 4)]
            for d in lde.devices]
    terms = [d.inv_od_per_um for d in lde.devices]
    spread = (max(terms) - min(terms)) / max(terms) if terms and max(terms) > 0 else 0.0
    how = {"pairs": "two fingers to a diffusion island",
           "alone": "every finger its own diffusion island, since not every finger could "
                    "share with a neighbour",
           "shared": "diffusion shared wherever facing terminals are one net"}[lde.style]
    pmos = lde.polarity != "n"
    return ["", f"Diffusion and well (MOS fingers as drawn, {how}; SA/SB = gate edge to each "
            "end of its diffusion in um; inv_od = mean of 1/(SA+L/2) + 1/(SB+L/2) per um, "
            "BSIM4 stress form" + ("; SCA = mean well-proximity integral" if well else "")
            + "; dVT in mV (added to the signed threshold" + (", so it lowers a PMOS |VT|"
                                                                 if pmos else "")
            + ") and dmu in % from the [lde] coefficients)",
            format_table(["device", "fingers", "SA", "SB", "inv_od", "range",
                          *(["SCA"] if well else []), "dVT", "dmu %"], rows),
            f"Stress term spread between devices: {_f(100 * spread)} %",
            *([f"  Note: {lde.note}."] if lde.note else [])]


def format_arrangement(result: Arrangement, spec: Spec) -> str:
    """The arrangement, how it was found, its scores beside the baselines, and its grade."""
    k = result.keys
    g = spec.gradient.linear_ppm_per_um
    out = [format_pattern(result.pattern).rstrip(), ""]
    searched = result.moves > 0 or result.nodes > 0 or bool(result.proven)
    out.append(f"Method {result.method}; {result.shape_reason}.")
    if result.solver is not None:
        sv = result.solver
        gap = "n/a" if sv.get("gap") is None else f"{100 * sv['gap']:.3g} %"
        out.append(f"MILP: solver {sv['solver_s']:.2f} s, status {sv['status']}, gap {gap}; "
                   "no bound is claimed.")
    elif searched:
        stopped = result.stopped
        if result.proven and stopped == "time limit":
            # beside "(proven optimal)" on the linear line: what the limit cut was the
            # rest (the later keys, or another core shape), not the proof
            stopped = "time limit, after the linear optimum was proven"
        given = (f" of its {result.time_limit_s:.3g} s" if result.time_limit_s > 0 else "")
        out.append(f"Search: {result.elapsed_s:.2f} s{given}, {result.moves} moves, "
                   f"{result.nodes} branch-and-bound nodes, stopped: {stopped}.")
    else:
        out.append("A baseline arrangement: no search, no bound.")
    if result.proven:
        bound = "proven optimal"
    elif result.linear_bound_um == result.linear_bound_um and searched:
        bound = f"lower bound {result.linear_bound_um:.4g} um"
    else:
        bound = "no bound"
    out.append(f"Linear: worst pair centroid distance {_f(k.linear_um, 4)} um = "
               f"{_f(k.linear_um * g)} ppm ({bound}).")
    qb = result.quadratic_bound_ppm
    if result.proven == "linear and quadratic":
        quad_note = " (proven optimal at that linear error)"
    elif searched and qb == qb and qb > 0:
        quad_note = (f" (lower bound {_floor(qb, 4)} ppm for any arrangement with that "
                     f"linear error)")
    else:
        quad_note = ""
    out.append(f"Quadratic: worst pair {_f(k.quadratic_ppm, 4)} ppm{quad_note}.")
    r = result.routing
    breaks = "" if r.diffusion_breaks is None else f", {r.diffusion_breaks} diffusion breaks"
    out.append(f"Routing: {r.total_tracks} row tracks, spanning trees {r.total_tree_um:.4g} um"
               f"{breaks}.")
    out.append("")
    mos = KINDS[spec.kind].fingers                   # diffusion breaks are counted
    rows = []
    label = "this result" if result.method not in result.baselines else result.method
    for name, b in [(label, k), *((n, v) for n, v in result.baselines.items()
                                  if n != result.method)]:
        rows.append([name, _f(b.linear_um, 4), _f(b.quadratic_ppm), _f(b.sigma_ppm),
                     f"{b.edge_imbalance:.2f}", str(b.tracks), *([str(b.breaks)] if mos else [])])
    paired = spec.unit.diffusion == "pairs"
    out.append("Worst pair on the same core (linear um, quadratic ppm, correlated sigma ppm, "
               "edge-share gap, row tracks"
               + ((", fingers the core alone leaves without a diffusion partner: end "
                   "dummies may pair them)" if paired
                   else ", diffusion breaks)") if mos else ")"))
    out.append(format_table(["arrangement", "linear", "quad", "sigma", "edge", "tracks",
                             *([("unpaired" if paired else "breaks")] if mos else [])], rows))
    out.append("")
    out.append(format_grade(result.grade))
    out.append("The pattern is a starting point, not a design-rule-clean layout.")
    return "\n".join(out)


def _dac_wiring(b: Any) -> list[str]:
    missing = b.assumptions.get("wiring_missing")
    if b.wiring_inl_lsb is None:
        return []
    if missing:
        return [f"  wiring: not counted; give {missing}"]
    return [f"  wiring (the top plate's coupling to each bit, from the drawn layout): |INL| "
            f"{_f(b.wiring_inl_lsb)} LSB, |DNL| {_f(b.wiring_dnl_lsb)} LSB"]


def format_budget(b: Any) -> str:
    """The electrical budget section: mirror/resistor lines, or DAC INL/DNL."""
    from placer.model.budget import DacBudget

    if isinstance(b, DacBudget):
        fit = "end-point" if b.fit == "endpoint" else "best-fit"
        return "\n".join([
            f"Electrical budget: capacitor array, bits {', '.join(b.bits)} (LSB first), "
            f"termination {b.termination or 'none'}, INL/DNL in LSB against the {fit} line",
            f"  linear gradient (worst direction {b.worst_direction_deg:.0f} deg): |INL| "
            f"{_f(b.worst_gradient_inl_lsb)} LSB; in the worst direction for it, |DNL| "
            f"{_f(b.worst_gradient_dnl_lsb)} LSB",
            f"  quadratic (the worst Hessian of the spec's norm): |INL| "
            f"{_f(b.quadratic_inl_lsb)} LSB, |DNL| {_f(b.quadratic_dnl_lsb)} LSB",
            f"  random ({b.mc_samples} Monte Carlo samples): worst |INL| mean "
            f"{_f(b.mc_inl_mean_lsb)}, sigma {_f(b.mc_inl_sigma_lsb)} LSB; worst |DNL| mean "
            f"{_f(b.mc_dnl_mean_lsb)}, sigma {_f(b.mc_dnl_sigma_lsb)} LSB",
            *_dac_wiring(b),
        ])
    kind = KINDS[b.kind]
    mos = kind.quantity == "current"                 # gm/ID and channel-length modulation
    if not b.lines:
        return (f"Electrical budget: {b.reference} is the only device it covers, so there is no "
                "ratio to budget.")
    rows = []
    wired = any(ln.wiring_pct is not None for ln in b.lines)
    lde = any(ln.lde_pct is not None for ln in b.lines)
    for ln in b.lines:
        rows.append([ln.device, f"{ln.ideal_ratio:g}", _f(ln.gradient_pct),
                     _f(ln.quadratic_pct), *([_f(ln.clm_pct)] if mos else []),
                     *([_f(ln.wiring_pct or 0.0)] if wired else []),
                     *([_f(ln.lde_pct or 0.0)] if lde else []),
                     _f(ln.random_sigma_pct), f"{ln.total_low_pct:+.3g} .. "
                     f"{ln.total_high_pct:+.3g}", f"{100 * ln.within_tolerance:.1f}%"])
    head = [kind.device_label, "ratio", "grad %", "quad %",
            *(["clm %"] if mos else []), *(["wire %"] if wired else []),
            *(["lde %"] if lde else []),
            "sigma %", f"total at {b.k_sigma:g} sigma %", f"within +-{b.tolerance_pct:g}%"]
    out = [f"Electrical budget against {b.reference} (error of I/I_{b.reference}, % of the "
           "ideal ratio; grad = linear gradient in its worst direction, quad = curvature, "
           f"clm = channel-length modulation; gradient: {b.assumptions['gradient']})"
           if mos else
           f"Electrical budget against {b.reference} (ratio error of R/R_{b.reference}, %; "
           f"gradient: {b.assumptions['gradient']})",
           format_table(head, rows)]
    if wired:
        missing = b.assumptions.get("wiring_missing")
        out.append(f"  wire = the drawn wiring: {b.assumptions.get('wiring', '')}"
                   + (f" (not counted: give {missing})" if missing else ""))
        out += [f"  {note}" for note in b.assumptions.get("wiring_notes", [])]
    if lde:
        out.append("  lde = layout-dependent effects: diffusion length (stress) and well "
                   "proximity of each finger as drawn, BSIM4 forms with the [lde] "
                   "coefficients (illustrative unless the spec gives the process's)")
    for ln in b.lines:
        out.append(f"  {ln.device}: {ln.dominant} dominates; cure: {ln.cure}.")
    return "\n".join(out)


def format_nets(wiring: Any, max_rows: int = 40, area: Any = None) -> str:
    """The routed nets: terminals, wire length, vias and the wire's R and C; with
    ``area`` (:class:`placer.layout.block.Area`), the block's area efficiency."""
    w, h = wiring.size_um
    rows = []
    for n in wiring.nets[:max_rows]:
        terms = ", ".join(f"{d}.{t}" for d, t in n.terminals)
        rows.append([n.name, terms if len(terms) <= 40 else terms[:37] + "...", str(n.units),
                     f"{n.wire_um:.4g}", str(n.vias), f"{n.resistance_ohm:.3g}",
                     f"{n.capacitance_ff:.3g}"])
    eff = (f"; units fill {100 * area.unit_fraction:.1f}% of it"
           if area is not None else "")
    ringed = any(s.role == "tap" for s in wiring.shapes)
    where = ("the routed array's top edge, inside the guard ring (reach them over the "
             "ring's metal1)" if ringed else "the block's top edge")
    out = [f"Layout: {w:.4g} x {h:.4g} um{eff}; {wiring.channel_tracks} tracks in the "
           f"fullest channel; every net routed to a pin at {where} (R: its "
           "worst terminal to the pin; C: to ground and to the other nets; from the "
           "spec's [routing] figures, illustrative by default)",
           *(f"  Note: {n}." for n in getattr(wiring, "notes", [])),
           format_table(["net", "terminals", "units", "wire um", "vias", "R ohm", "C fF"],
                        rows)]
    if len(wiring.nets) > max_rows:
        out.append(f"... {len(wiring.nets) - max_rows} more nets in report.json")
    return "\n".join(out)


def grade_report(grade: Grade, budget: Any, rec: Any, spec: Spec, worst_pair: str,
                 sens: list[Any]) -> dict[str, Any]:
    """``grade --json``: every figure, the budget, what was recognised in the input and
    each unit's share of the worst pair's linear error."""
    from dataclasses import asdict

    out = grade.to_dict()
    out["budget"] = asdict(budget) if budget is not None else None
    out["recognised"] = {"format": rec.fmt, "notes": rec.notes,
                         "pitch_um": list(spec.array.pitch_um)}
    out["sensitivity"] = {"pair": worst_pair, "units": [asdict(u) for u in sens]}
    return out


def file_frame(rec: Any) -> str:
    """The name of an input file's own coordinate frame ('' for a pattern text)."""
    return {"gds": "the GDSII's coordinates", "csv": "the CSV's coordinates"}.get(rec.fmt, "")


def format_sensitivity(sens: list[Any], worst_pair: str, rec: Any) -> str:
    """The three units adding most to the worst pair, at their positions in the file's own
    frame (to find them in the layout)."""
    frame = f" (x, y in {file_frame(rec)})" if file_frame(rec) else ""
    top = ", ".join(f"{u.device} at row {u.row} col {u.col} "
                    f"({u.x_um + rec.origin_um[0]:.4g}, {u.y_um + rec.origin_um[1]:.4g}"
                    f" um): {u.contribution_ppm:+.3g} ppm" for u in sens[:3])
    return f"Units adding most to {worst_pair}{frame}: {top}"


def format_batch(runs: list[Any], wall_s: float, jobs: int) -> str:
    """The batch's summary table: one line per block, then the totals."""
    def num(v: float | None, digits: int = 3) -> str:
        return "-" if v is None else _f(v, digits)

    rows = [[r.name, str(r.devices or "-"), str(r.units or "-"),
             f"{r.core[0]} x {r.core[1]}" if r.core else "-", num(r.linear_ppm),
             num(r.quadratic_ppm), num(r.random_sigma_ppm), num(r.block_um2, 4),
             f"{r.wall_s:.1f}", "ok" if r.exit_code == 0 else r.error[:70]] for r in runs]
    failed = sum(r.exit_code != 0 for r in runs)
    table = format_table(["block", "devices", "units", "core", "linear ppm", "quad ppm",
                          "sigma ppm", "block um2", "s", "result"], rows)
    return (f"{table}\n{len(runs)} blocks ({failed} failed), {jobs} at a time, in "
            f"{wall_s:.1f} s. Figures are the worst pair's, model estimates.")


def format_sequence(rep: Any) -> str:
    """The text report of a unary array's placement and switching order."""
    s = rep.spec
    f = s.fields
    nb = s.binary_bits
    hs = f.hot_spot
    hot = (f" and the hot spot of {hs.ppm:g} ppm at ({hs.x_um:g}, {hs.y_um:g}) um, fall-off "
           f"{hs.fall_off_um:g} um" if hs else "")
    bits = (f" + {nb} binary cell{'s' if nb > 1 else ''} of "
            f"{', '.join(str(s.lsb_units << j) for j in range(nb))} sub-unit"
            f"{'s' if s.lsb_units << (nb - 1) > 1 else ''} (codes 0 to {s.full_scale})"
            if nb else "")
    out = [f"{s.name}: {s.cells} unary cells x {s.sub_units} sub-unit"
           f"{'s' if s.sub_units > 1 else ''}{bits} on {s.rows} x {s.cols} slots, pitch "
           f"{s.pitch_um[0]:g} x {s.pitch_um[1]:g} um",
           f"Method: {rep.method}" + (f" ({rep.moves} moves, {rep.seconds:.2f} s)."
                                      if rep.moves else "."),
           f"Worst |INL| (linear gradient {f.linear_ppm_per_um:g} ppm/um in its worst "
           f"direction, {rep.worst_direction_deg:.0f} deg, plus the bowl of "
           f"{f.quadratic_ppm_per_um2:g} ppm/um^2{hot}): {rep.worst_inl_lsb:.4g} LSB at code "
           f"{rep.worst_code}; linear part up to {rep.linear_part_lsb.max():.4g} LSB, "
           f"{'bowl and hot-spot' if hs else 'bowl'} part up to "
           f"{abs(rep.bowl_part_lsb).max():.4g} LSB; |DNL| in that direction up to "
           f"{abs(rep.dnl_lsb).max():.4g} LSB.",
           f"Random: a unary cell's sigma {100 * s.cell_sigma:.3g} % "
           + (f"(an LSB's {100 * s.lsb_sigma:.3g} %) " if nb else "")
           + f"(area law, A = {s.a_param_pct_um:g} %um): INL sigma up to "
           f"{rep.random_sigma_lsb.max():.4g} "
           f"LSB at mid-scale; the correlated field ({s.corr_sigma_ppm:g} ppm, "
           f"{s.corr_length_um:g} um): up to {rep.correlated_sigma_lsb.max():.4g} LSB.",
           f"Budget: |INL| at 3 sigma up to {rep.inl_3sigma_lsb:.4g} LSB (per code, the "
           f"systematic part in its worst direction plus 3 sigma of the random and "
           f"correlated parts together; in steps of one "
           f"{'LSB' if nb else 'unary cell'}); within 0.5 LSB: "
           f"{'yes' if rep.inl_3sigma_lsb <= 0.5 else 'no'}."]
    if rep.given_inl_lsb is not None:
        g = abs(rep.given_inl_lsb)
        out.insert(3, f"At the given direction, {f.direction_deg:g} deg: worst |INL| "
                      f"{g.max():.4g} LSB at code {int(g.argmax())}.")
    if rep.before_lsb is not None:
        tail = (":" if rep.swaps else " (the time limit came first)." if rep.repair_cut
                else " (no exchange helps).")
        out.append(f"Repair: worst |INL| {rep.before_lsb:.4g} -> {rep.worst_inl_lsb:.4g} "
                   f"LSB by {len(rep.swaps)} exchange{'s' if len(rep.swaps) != 1 else ''}"
                   + tail)
        for a, b in rep.swaps:
            (ra, ca), (rb, cb) = divmod(a, s.cols), divmod(b, s.cols)
            out.append(f"  exchange the slots at row {ra}, column {ca} and row {rb}, "
                       f"column {cb} (rows and columns from 0 at the top left)")
        if rep.repair_cut and rep.swaps:
            out.append("  (cut by the time limit: a longer --time-limit may find more)")
    if rep.baselines:
        out += ["", "Textbook orders on the same core (worst |INL|, LSB)"]
        rows = [[k, f"{v:.4g}", f"{v / rep.worst_inl_lsb:.3g} x this"
                 if rep.worst_inl_lsb > 0 else "-"] for k, v in rep.baselines.items()]
        out.append(format_table(["order", "worst |INL|", "against"], rows))
    out += ["", CAUTION]
    return "\n".join(out)
