"""The output set of each command, declared once: the files' names and how each is
written into a staged set (:class:`placer.io.staging.OutputSet`), and the JSON reports.

The command line only opens the set with these names, calls the writer and prints.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import asdict, dataclass
from pathlib import Path
from typing import TYPE_CHECKING, Any

from placer.io.pattern import Pattern, format_pattern
from placer.io.staging import OutputSet
from placer.layout.block import Block, area_of, library
from placer.layout.gdswrite import write_gds
from placer.model.grade import Grade, grade_pattern
from placer.present.plot import save_budget, save_preview
from placer.present.report import json_text

if TYPE_CHECKING:
    from placer.io.handlayout import Recognised
    from placer.io.spec import Spec
    from placer.jobs.arrange import Arrangement
    from placer.jobs.repair import RepairResult

__all__ = ["write_block", "Previews", "arrangement_previews", "ARRANGE_FILES",
           "arrange_names", "write_arrangement", "draw_names", "compare_names", "lesson_name",
           "repair_names", "write_repair",
           "layout_report", "swap_lines", "BATCH_FILES", "write_batch", "SEQUENCE_FILES",
           "write_sequence"]

#: Every file an arrange run may write (a --force run replaces them all, and only them).
ARRANGE_FILES = ("pattern.txt", "report.json", "pattern.gds", "pattern.sp", "pattern.png",
                 "pattern.svg", "budget.png", "candidate-[0-9]*.txt", "candidate-[0-9]*.png")


def write_block(block: Block, grade: Grade, out: OutputSet, stem: str,
                gradient: tuple[float, float] | None = None,
                moved: tuple[tuple[int, int], ...] = (), pictures: bool = True) -> list[str]:
    """Stage ``<stem>.gds``, ``.png`` and ``.svg`` (the pictures unless ``pictures`` is
    false: drawn already); return the names written. ``moved`` slots are outlined in the
    pictures."""
    lib = library(block)
    names = draw_names(stem)
    write_gds(lib, out.path(names[0]))
    if pictures:
        save_preview(block.pattern, block.spec.array.pitch_um, grade, block.spec.name,
                     [out.path(names[1]), out.path(names[2])], gradient=gradient,
                     cell_extent=block.cell.extent, moved=moved)
    return names


@dataclass(frozen=True, eq=False)
class Previews:
    """What an arrangement's preview pictures are drawn from: drawn by :meth:`draw`
    (``arrange`` does so in a forked child while the block routes, see
    :func:`placer.io.forked.aside`)."""

    pattern: Pattern
    grade: Grade
    name: str
    pitch_um: tuple[float, float]
    cell_extent: tuple[float, float, float, float] | None
    paths: tuple[Path, ...]
    #: for previews drawn elsewhere: waits for that work, and tells whether it succeeded
    done: Callable[[], bool] | None = None

    def same(self, other: Previews | None) -> bool:
        """Whether ``other`` drew the very same pictures into the same files (waiting for
        its work to end first, so that nothing else writes them meanwhile)."""
        if other is None or not (other.done is None or other.done()):
            return False
        return (other.pattern is self.pattern
                and other.grade is self.grade and other.name == self.name
                and other.pitch_um == self.pitch_um and other.cell_extent == self.cell_extent
                and other.paths == self.paths)

    def draw(self) -> None:
        """Write both pictures."""
        save_preview(self.pattern, self.pitch_um, self.grade, self.name, list(self.paths),
                     cell_extent=self.cell_extent)


def arrangement_previews(out: OutputSet, result: Arrangement, spec: Spec,
                         cell_extent: tuple[float, float, float, float] | None,
                         done: Callable[[], bool] | None = None) -> Previews:
    """The previews of ``result`` at ``spec``'s pitch (the block's when it is drawn)."""
    return Previews(result.pattern, result.grade, spec.name, spec.array.pitch_um,
                    cell_extent, (out.path("pattern.png"), out.path("pattern.svg")), done)


# ----------------------------------------------------------------------------- arrange

def arrange_names(spec: Spec, n_candidates: int, drawn: bool = True) -> list[str]:
    """The files of an arrange run of ``spec`` with ``n_candidates`` candidates
    (``drawn``: with the routed GDSII and its netlist)."""
    return ["pattern.txt", "report.json", *(["pattern.gds", "pattern.sp"] if drawn else []),
            "pattern.png", "pattern.svg",
            *(["budget.png"] if spec.electrical is not None else []),
            *(f"candidate-{i}.{x}" for i in range(1, n_candidates + 1) for x in ("txt", "png"))]


def write_arrangement(out: OutputSet, result: Arrangement, block: Block | None, budget: Any,
                      *, spec_path: Path, seed: int, time_limit_s: float, spec: Spec,
                      note: str | None = None, search_limit_s: float | None = None,
                      drawn: Previews | None = None) -> None:
    """Stage every file of :func:`arrange_names` for ``result`` and its routed ``block``
    (the block's spec is at the pitch its routing needs); with no block (a pitch placer's
    cell cannot be drawn at), no GDSII or netlist, and ``note`` in the report says why.
    ``drawn``: the previews are written already, from these facts (drawn again if the
    block's differ)."""
    from placer.layout.netlist import netlist

    spec = block.spec if block is not None else spec
    extent = block.cell.extent if block is not None else None
    header = [f"{spec.name}: {result.method}, core {result.core_shape[0]} x "
              f"{result.core_shape[1]}, seed {seed}",
              f"linear {result.keys.linear_um:.6g} um, quadratic "
              f"{result.keys.quadratic_ppm:.6g} ppm, sigma "
              f"{result.keys.sigma_ppm:.6g} ppm"]
    out.write("pattern.txt", format_pattern(result.pattern, header))
    for i, cand in enumerate(result.candidates, start=1):
        out.write(f"candidate-{i}.txt", format_pattern(cand.pattern, [
            f"{spec.name} candidate {i} ({cand.source}): systematic "
            f"{cand.systematic_ppm:.6g} ppm, routing {cand.routing_um:.6g} um"
            + (f", wiring {cand.wiring_ppm:.6g} ppm, block {cand.block_um2:.6g} um2"
               if cand.wiring_ppm is not None else ""),
            result.front_reference]))
        save_preview(cand.pattern, spec.array.pitch_um, grade_pattern(cand.pattern, spec),
                     f"{spec.name} candidate {i} ({cand.source}): routing "
                     f"{cand.routing_um:.4g} um", [out.path(f"candidate-{i}.png")],
                     cell_extent=extent)
    report = {"spec": str(spec_path), "name": spec.name, "seed": seed,
              "time_limit_s": time_limit_s,
              "search_limit_s": time_limit_s if search_limit_s is None else search_limit_s,
              **result.to_dict(),
              "pattern": format_pattern(result.pattern),
              "layout": layout_report(block) if block is not None else None,
              **({"layout_note": note} if note is not None else {}),
              "budget": asdict(budget) if budget is not None else None}
    out.write("report.json", json_text(report) + "\n")
    if block is not None:
        out.write("pattern.sp", netlist(spec, block.parasitics))
        write_block(block, result.grade, out, "pattern", pictures=False)
    here = arrangement_previews(out, result, spec,
                                block.cell.extent if block is not None else None)
    if budget is not None:             # before the wait: while the previews are drawn aside
        save_budget(budget, spec.name, [out.path("budget.png")], devices=spec.devices)
    if not here.same(drawn):
        here.draw()


def layout_report(block: Block) -> dict[str, Any]:
    """The routed block in the JSON reports: size, pitch, tracks, area, nets, parasitics."""
    w = block.wiring
    par = block.parasitics
    return {"size_um": list(w.size_um), "pitch_um": list(block.spec.array.pitch_um),
            "pitch_given": block.spec.array.pitch_given,
            "channel_tracks": w.channel_tracks, "tracks_per_row": list(w.tracks_per_row),
            "area": asdict(area_of(block)), "notes": list(w.notes),
            "nets": [asdict(n) for n in w.nets],
            "parasitics": {
                "taps": [{"net": t.net, "slot": list(t.slot), "device": t.device,
                          "terminal": t.terminal, "r_to_pin_ohm": t.r_to_pin_ohm}
                         for t in par.taps],
                "couplings": [asdict(c) for c in par.couplings]}}


# ----------------------------------------------------------------------------- the others

def draw_names(stem: str) -> list[str]:
    """The files of a drawing named ``stem``: GDSII and the two previews."""
    return [f"{stem}.gds", f"{stem}.png", f"{stem}.svg"]


def compare_names(spec: Spec) -> list[str]:
    """The comparison sheet of ``spec``: PNG and PDF."""
    return [f"{spec.name}-compare.png", f"{spec.name}-compare.pdf"]


def lesson_name(spec: Spec) -> str:
    """The lesson page of ``spec``."""
    return f"{spec.name}-lesson.html"


#: The user's own GDSII with a repair's swaps applied in place.
OWN_REPAIRED = "repaired-own.gds"


def repair_names(drawn: bool, own: bool = False) -> list[str]:
    """The files of a repair (``drawn``: the repaired GDSII too; ``own``: the user's GDSII
    with the swaps applied)."""
    return ["repaired.txt", *(["repaired.gds"] if drawn else []),
            *([OWN_REPAIRED] if own else []), "repaired.png", "repaired.svg", "repair.json"]


def unit_move_centres(result: RepairResult, spec: Spec, rec: Recognised
                      ) -> list[tuple[tuple[float, float], tuple[float, float]]]:
    """Each moved unit's slot centre and the centre of the slot it ends in, after all
    the swaps in order (um, in the file's own frame)."""
    from placer.io.gdsswap import unit_moves

    px, py = spec.array.pitch_um
    ox, oy = rec.origin_um

    def at(slot: tuple[int, int]) -> tuple[float, float]:
        return ox + slot[1] * px, oy - slot[0] * py

    moves = unit_moves([(sw.first, sw.second) for sw in result.swaps])
    return [(at(a), at(b)) for a, b in sorted(moves.items())]


def swap_lines(result: RepairResult, spec: Spec, rec: Recognised) -> list[str]:
    """One line per swap, each unit by row, column and its position in the file's frame."""
    px, py = spec.array.pitch_um
    ox, oy = rec.origin_um

    def where(slot: tuple[int, int]) -> str:
        r, c = slot
        return f"row {r}, col {c} ({ox + c * px:.4g}, {oy - r * py:.4g} um)"

    return [f"  {i}. swap {sw.first_device} at {where(sw.first)} with "
            f"{sw.second_device} at {where(sw.second)}"
            for i, sw in enumerate(result.swaps, start=1)]


def write_repair(out: OutputSet, result: RepairResult, spec: Spec, block: Block | None,
                 layout: Path, rec: Recognised) -> None:
    """Stage every file of :func:`repair_names`: the repaired pattern (its swaps in the
    header), its drawing (GDSII when ``block`` is given, else the previews alone) and
    repair.json."""
    grade = grade_pattern(result.pattern, spec)
    header = [f"{spec.name} repaired from {layout.name} with {len(result.swaps)} swap(s)",
              *(ln.strip() for ln in swap_lines(result, spec, rec))]
    out.write("repaired.txt", format_pattern(result.pattern, header))
    moved = tuple(sorted({s for sw in result.swaps for s in (sw.first, sw.second)}))
    if block is not None:
        write_block(block, grade, out, "repaired", moved=moved)
    else:
        save_preview(result.pattern, spec.array.pitch_um, grade, spec.name,
                     [out.path("repaired.png"), out.path("repaired.svg")], moved=moved)
    report = {"layout": str(layout), "recognised": rec.notes,
              "swaps": [asdict(sw) for sw in result.swaps], "before": asdict(result.before),
              "after": asdict(result.after), "target_linear_um": result.target_linear_um,
              "limited": result.limited or None,
              "reached_target": result.reached_target, "grade": grade.to_dict(),
              "layout_nets": layout_report(block) if block is not None else None}
    out.write("repair.json", json_text(report) + "\n")


# ----------------------------------------------------------------------------- batch

#: The batch's own files, beside the blocks' folders.
BATCH_FILES = ["summary.json", "index.html"]


def write_batch(out: OutputSet, runs: list[Any], *, wall_s: float, jobs: int,
                time_limit_s: float, seed: int) -> None:
    """Stage the batch's summary.json and index.html (a page of every block: its figures,
    its preview and links to its files, relative to the batch folder)."""
    import html

    out.write("summary.json", json_text({
        "blocks": [asdict(r) for r in runs], "wall_s": wall_s, "jobs": jobs,
        "time_limit_s": time_limit_s, "seed": seed}) + "\n")

    def num(v: float | None, digits: int = 4) -> str:
        return "-" if v is None else f"{v:.{digits}g}"

    rows = []
    for r in runs:
        name = html.escape(r.name)
        if r.exit_code == 0:
            cells = [f'<a href="{name}/pattern.png"><img src="{name}/pattern.png" alt="{name}" '
                     'width="160"></a>',
                     f"{r.devices}", f"{r.units}", f"{r.core[0]} x {r.core[1]}" if r.core else "",
                     num(r.linear_ppm), num(r.quadratic_ppm), num(r.random_sigma_ppm),
                     num(r.block_um2, 4),
                     f'<a href="{name}/report.json">report</a> '
                     f'<a href="{name}/pattern.txt">pattern</a> '
                     f'<a href="{name}/pattern.gds">GDSII</a>']
        else:
            cells = ["", "", "", "", "", "", "", "", html.escape(r.error)]
        rows.append(f"<tr><th>{name}</th>" + "".join(f"<td>{c}</td>" for c in cells) + "</tr>")
    head = "".join(f"<th>{h}</th>" for h in ("block", "preview", "devices", "units", "core",
                                              "linear ppm", "quad ppm", "sigma ppm",
                                              "block um2", "files"))
    page = f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>placer batch: {len(runs)} blocks</title>
<style>body {{ font-family: sans-serif; margin: 1.5em; }} table {{ border-collapse: collapse; }}
th, td {{ border: 1px solid #bbb; padding: 0.3em 0.6em; text-align: right; }}
th:first-child {{ text-align: left; }}</style></head><body>
<h1>{len(runs)} matched blocks</h1>
<p>Each block arranged with a {time_limit_s:g} s time limit and seed {seed}, {jobs} at a time,
in {wall_s:.1f} s. Figures are the worst pair's, in ppm: model estimates; confirm with the
foundry's matching guidelines, extraction and the process's mismatch data.</p>
<table><tr>{head}</tr>
{chr(10).join(rows)}
</table></body></html>
"""
    out.write("index.html", page)


# ----------------------------------------------------------------------------- sequence

#: The files of a ``sequence`` run.
SEQUENCE_FILES = ("sequence.txt", "report.json", "sequence.png", "sequence.gds")


def write_sequence(out: OutputSet, rep: Any, layers: Any = None) -> None:
    """Stage a unary array's sequence grid, its JSON report, its picture and its GDSII
    (every slot's cell labelled with its sequence number)."""
    from placer.io.unaryspec import format_sequence_grid
    from placer.present.plot import save_sequence

    out.write("sequence.txt", format_sequence_grid(rep.layout, [
        f"{rep.spec.name}: switching order ({rep.method}); each slot's cell number "
        "(1 switches on first), " + ("b<j> binary bit j, " if rep.layout.bits else "")
        + ". a dummy",
        f"worst |INL| {rep.worst_inl_lsb:.6g} LSB (linear gradient in its worst direction "
        "plus the bowl" + (" and the hot spot" if rep.spec.fields.hot_spot is not None else "")
        + ")"]))
    out.write("report.json", json_text(rep.to_dict()) + "\n")
    save_sequence(rep, [out.path("sequence.png")])
    from placer.layout.gdswrite import build_sequence_library
    from placer.layout.layers import load_layers

    write_gds(build_sequence_library(rep.layout, rep.spec.name,
                                     layers if layers is not None else load_layers(None)),
              out.path("sequence.gds"))
