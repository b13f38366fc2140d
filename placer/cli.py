"""Command line: thin click commands over the library."""

from __future__ import annotations

import errno
import os
import signal
import sys
import time
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from functools import wraps
from pathlib import Path
from typing import TYPE_CHECKING, Any, NoReturn, TypeVar

import click

# only what the help texts and the wrapper need is imported here: the commands import
# the library (numpy and the rest) in their bodies, so --help and --version start quickly
from placer import __version__
from placer.errors import LayoutError, PlacerError
from placer.io.staging import FileSet, OutputSet
from placer.jobs import METHODS

if TYPE_CHECKING:
    from placer.io.handlayout import Recognised
    from placer.io.pattern import Pattern
    from placer.io.spec import Spec
    from placer.jobs.arrange import Arrangement
    from placer.jobs.repair import RepairResult
    from placer.model.grade import Grade
    from placer.search import Keys

__all__ = ["cli"]

F = TypeVar("F", bound=Callable[..., Any])

_FILE = click.Path(exists=True, dir_okay=False, path_type=Path)
_STREAM_ERRORS = {errno.EPIPE, errno.ENOSPC, errno.EIO, errno.EBADF}


class _Folder(click.Path):
    """An output folder: not empty text (which would mean the current folder unasked)."""

    def __init__(self) -> None:
        super().__init__(file_okay=False, path_type=Path)

    def convert(self, value: Any, param: Any, ctx: Any) -> Any:
        if isinstance(value, str) and not value.strip():
            self.fail("is empty: name a folder (use . for the current one)", param, ctx)
        return super().convert(value, param, ctx)


_OUT = _Folder()
MAX_TIME_LIMIT_S = 86_400.0       # a day: any real search ends far sooner


class _Seconds(click.ParamType):
    """A time limit: a finite number of seconds, more than 0 and at most a day."""

    name = "seconds"

    def convert(self, value: Any, param: Any, ctx: Any) -> float:
        try:
            v = float(value)
        except (TypeError, ValueError):
            self.fail(f"{str(value)[:40]!r} is not a number of seconds", param, ctx)
        if not (0.0 < v <= MAX_TIME_LIMIT_S):        # also refuses nan
            self.fail(f"{str(value)[:40]} is not in 0 < seconds <= {MAX_TIME_LIMIT_S:g}",
                      param, ctx)
        return v


_TIME = _Seconds()
_SEED = click.IntRange(min=0, max=2**63 - 1)


#: arrange draws its previews in a second process (while it routes and extracts) from
#: this many units on, or when it draws a budget too: below, that work is shorter than
#: the child's start (measured: 4 and 64 units ran 0.05 s slower, 1024 and 4096 0.3 and
#: 0.5 s faster)
ASIDE_MIN_UNITS = 512


def run_arrange(spec: Spec, **options: Any) -> Arrangement:
    """The search of arrange, compare and lesson (:func:`placer.jobs.arrange.arrange`).

    The commands call it by this module's name, so a test can put another in its place;
    the search and numpy load on the first call.
    """
    from placer.jobs.arrange import arrange as search_arrangement

    return search_arrangement(spec, **options)


def run_repair(pattern: Pattern, spec: Spec, pitch_um: tuple[float, float], max_swaps: int,
               **options: Any) -> RepairResult:
    """The swap search of repair (:func:`placer.jobs.repair.repair`), loaded on first call."""
    from placer.jobs.repair import repair as search_swaps

    return search_swaps(pattern, spec, pitch_um, max_swaps, **options)


def _user_errors(func: F) -> F:
    """Turn input problems into click's one-line ``Error:`` and exit code 1."""

    @wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        import warnings

        # numpy loads here, before the handlers below, so an interrupt while it loads ends
        # quietly; the rest of the library loads in the command's body, under them
        import numpy as np

        # until here (imports, argument parsing) Ctrl-C ends the process quietly with 130;
        # from here it is a KeyboardInterrupt the command handles (Python runs a pending
        # handler before it installs a new one, so none falls between the two)
        # the handlers before the command, put back after it: a command run in-process
        # (the API, a test runner) leaves the caller's handlers as they were
        before = {sig: signal.getsignal(sig) for sig in (signal.SIGINT, signal.SIGTERM)}
        signal.signal(signal.SIGINT, signal.default_int_handler)
        _sigterm_as_interrupt()        # SIGTERM ends every command as Ctrl-C does
        OutputSet.last_committed = None
        try:
            # overflow and 0/0 inside a model are handled where they matter (figures are
            # checked finite before they are written); numpy's warnings are not for users
            with np.errstate(all="ignore"), warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                return func(*args, **kwargs)
        except PlacerError as err:
            raise click.ClickException(str(err)) from None
        except OSError as err:
            # a write to standard output that failed (full device, closed pipe): files
            # are written through OutputSet, which turns its own failures into a
            # PlacerError above, so only the terminal's stream gets here
            if err.filename is not None or err.errno not in _STREAM_ERRORS:
                raise
            try:
                sys.stdout = open(os.devnull, "w")   # nothing more to flush at exit
            except OSError:
                pass
            if err.errno != errno.EPIPE:           # a reader that stopped: be quiet
                done = OutputSet.last_committed
                kept = (f" (the files in {done} are complete)" if done is not None else "")
                click.echo(f"Error: cannot write the output: {err.strerror or err}{kept}",
                           err=True)
            sys.exit(1)
        except KeyboardInterrupt:
            _interrupted()
        except Exception as err:
            # Ctrl-C inside an import can surface as another error (a class body's
            # __set_name__ wraps it in a RuntimeError): it is still an interrupt
            cause: BaseException | None = err
            while cause is not None and not isinstance(cause, KeyboardInterrupt):
                cause = cause.__cause__ or cause.__context__
            if cause is None:
                raise
            _interrupted()
        finally:
            for sig, handler in before.items():
                # None: a handler not installed from Python (left as the process had it)
                signal.signal(sig, handler if handler is not None else signal.SIG_DFL)

    return wrapper  # type: ignore[return-value]


def _interrupted() -> NoReturn:
    """End an interrupted command: the message and exit code 130 (the command's own
    clean-up has run by now: its outputs are complete or removed, never half)."""
    done = OutputSet.last_committed
    click.echo(f"Interrupted; the outputs in {done} are complete." if done is not None
               else "Interrupted; nothing written.", err=True)
    sys.exit(130)


@click.group()
@click.version_option(__version__, prog_name="placer")
def cli() -> None:
    """Arrange matched devices as unit arrays that cancel process gradients, and grade them.

    Exit codes: 0 success, 1 a problem with the input, 2 a usage error, 130
    interrupted before the outputs were complete.
    """


def _budget(pattern: Pattern, spec: Spec, grade: Grade, required: bool,
            block: Any = None) -> Any:
    """The electrical budget when the spec asks for one (or ``required``), else None; with
    the wiring term of the routed ``block`` when there is one."""
    from placer.layout.block import wiring_of
    from placer.model.budget import budget, check_electrical

    if spec.electrical is None and not required:
        return None
    e = check_electrical(spec)
    return budget(pattern, spec, grade, wiring_of(block, e) if block is not None else None)


def _layout_options(func: F) -> F:
    """Options for reading a GDSII or CSV hand layout (shared by grade and repair)."""
    opts = [
        click.option("--cell", default=None,
                     help="GDSII: the cell holding the array (default: the one top cell)."),
        click.option("--map", "mapping", multiple=True, metavar="CELL=DEVICE",
                     help="GDSII: unlabelled units of CELL belong to DEVICE (repeatable)."),
        click.option("--dummy-cell", "dummy_cells", multiple=True, metavar="CELL",
                     help="GDSII: unlabelled units of CELL are dummies (cells named *DUMMY* "
                          "always are)."),
        click.option("--layers", "layers_path", type=_FILE, default=None,
                     help="Layer map (TOML); its label layer is where device labels are "
                          "read (repair also draws its result with it)."),
    ]
    for opt in reversed(opts):
        func = opt(func)
    return func


def _drawing_options(func: F) -> F:
    """Options for the drawn layout (arrange, draw, repair)."""
    opts = [
        click.option("--template", "template_path", type=_FILE, default=None,
                     help="Unit-cell rules (TOML) instead of the kind's shipped template."),
        click.option("--unit-gds", "unit_gds", type=_FILE, default=None,
                     help="Place your own unit cell from this GDSII library; its terminals "
                          "are text labels named after them (see the README)."),
        click.option("--unit-cell", "unit_cell", default=None, metavar="NAME",
                     help="The cell of --unit-gds to place (default: its one top cell)."),
    ]
    for opt in reversed(opts):
        func = opt(func)
    return func


def _parse_map(items: tuple[str, ...]) -> dict[str, str]:
    from placer.io.spec import NAME_RE

    out = {}
    for item in items:
        cell, sep, device = item.partition("=")
        if not sep or not cell or not NAME_RE.match(device):
            raise PlacerError(f"--map {item[:80]!r}: use CELL=DEVICE with a device name")
        out[cell] = device
    return out


def _load_graded(path: Path, spec_path: Path | None, *, cell: str | None = None,
                 mapping: tuple[str, ...] = (), dummy_cells: tuple[str, ...] = (),
                 layers_path: Path | None = None, echo_notes: bool = False
                 ) -> tuple[Pattern, Spec, Recognised]:
    """Read a pattern, CSV or GDSII layout and the spec that grades it."""
    from placer.io.handlayout import hot_spot_in_pattern_frame, read_layout
    from placer.io.pattern import check_against_spec
    from placer.io.spec import NAME_RE
    from placer.jobs.load import default_spec, load_spec
    from placer.layout import pitch
    from placer.layout.layers import load_layers

    spec = load_spec(spec_path) if spec_path is not None else None
    label = load_layers(layers_path)["label"]
    rec = read_layout(path, spec=spec, cell=cell, mapping=_parse_map(mapping),
                      label_layer=label, dummy_cells=set(dummy_cells))
    if echo_notes and rec.fmt != "pattern":
        click.echo(f"Recognised ({rec.fmt}): " + "; ".join(rec.notes), err=True)
    if spec is None:
        stem = path.stem
        spec = default_spec(stem if NAME_RE.match(stem) else "layout", rec.pattern.devices,
                            rec.pattern.counts())
        if rec.fmt != "pattern":
            spec = pitch.given(spec, rec.pitch_um)
        return rec.pattern, spec, rec
    spec = hot_spot_in_pattern_frame(spec, rec)
    if rec.fmt != "pattern" and tuple(rec.pitch_um) != tuple(spec.array.pitch_um):
        if spec.array.pitch_given:      # a spec without pitch_um has only an estimate
            click.echo(f"Note: {path} has pitch {rec.pitch_um[0]:g} x {rec.pitch_um[1]:g} "
                       f"um; grading with it, not the spec's {spec.array.pitch_um[0]:g} x "
                       f"{spec.array.pitch_um[1]:g} um", err=True)
        spec = pitch.given(spec, rec.pitch_um)
    pattern = check_against_spec(rec.pattern, spec, str(path))
    if not spec.array.pitch_given:
        spec = pitch.fitted(pattern, spec)       # the pitch arrange and draw give it
    return pattern, spec, rec


def _picture_path(path: Path | None) -> None:
    if path is not None and path.suffix not in (".png", ".svg", ".pdf"):
        raise PlacerError(f"{path}: the picture must end in .png, .svg or .pdf")


@cli.command()
@click.argument("layout", type=_FILE)
@click.option("--spec", "spec_path", type=_FILE, default=None,
              help="Spec file with pitch and model assumptions (defaults apply without it).")
@click.option("--json", "as_json", is_flag=True, help="Print the figures as JSON on stdout.")
@click.option("--budget-plot", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="Write the electrical budget picture (.png, .svg or .pdf); needs "
                   "[electrical] in the spec.")
@click.option("--sensitivity-plot", type=click.Path(dir_okay=False, path_type=Path),
              default=None, help="Write a picture shading each unit by how much it adds to "
                                 "the worst pair's linear error.")
@_layout_options
@_user_errors
def grade(layout: Path, spec_path: Path | None, as_json: bool, budget_plot: Path | None,
          sensitivity_plot: Path | None, cell: str | None, mapping: tuple[str, ...],
          dummy_cells: tuple[str, ...], layers_path: Path | None) -> None:
    """Grade the arrangement in LAYOUT: centroids, gradient errors and random sigmas.

    LAYOUT is a pattern file, a GDSII layout or a CSV of unit centres
    (x_um,y_um,device[,orientation]), told apart by content. With an [electrical] table
    in the spec, also the electrical budget: mirror current error, capacitor-array
    INL/DNL or resistor ratio error.
    """
    from dataclasses import replace

    from placer.jobs.repair import sensitivity
    from placer.model.grade import grade_pattern
    from placer.present.report import (
        file_frame,
        format_budget,
        format_grade,
        format_sensitivity,
        grade_report,
        json_text,
    )

    _picture_path(budget_plot)
    _picture_path(sensitivity_plot)
    if (budget_plot is not None and sensitivity_plot is not None
            and os.path.abspath(budget_plot) == os.path.abspath(sensitivity_plot)):
        raise PlacerError(f"{budget_plot}: named for both --budget-plot and "
                          "--sensitivity-plot; give each picture a file of its own")
    pat, spec, rec = _load_graded(layout, spec_path, cell=cell, mapping=mapping,
                                  dummy_cells=dummy_cells, layers_path=layers_path,
                                  echo_notes=not as_json)
    from placer.jobs.load import drawn_geometry

    # a pattern file is measured as placer draws it; a hand layout's own diffusion is not
    # read, so it has no layout-dependent figures
    result = grade_pattern(pat, spec, drawn_geometry(spec) if rec.fmt == "pattern" else None)
    if result.lde is not None and spec.array.guard_ring and (
            spec.mixed or spec.unit.polarity == "p"):
        result = replace(result, lde=replace(result.lde, note=(
            "the well a guard ring draws is not measured here (grade draws no ring): "
            "the well term comes from [lde] well_margin_um only; arrange and draw "
            "measure the drawn well")))
    worst_pair, sens = sensitivity(pat, spec.array.pitch_um, result,
                                   spec.gradient.linear_ppm_per_um, spec.gradient)
    bud = _budget(pat, spec, result, required=budget_plot is not None)
    pictures = [p for p in (sensitivity_plot, budget_plot if bud is not None else None) if p]
    with FileSet(pictures) as files:      # both pictures, or neither
        if sensitivity_plot is not None:
            from placer.present.plot import save_sensitivity

            save_sensitivity(pat, spec.array.pitch_um, sens, worst_pair, spec.name,
                             [files.path(sensitivity_plot)])
        if budget_plot is not None and bud is not None:
            from placer.present.plot import save_budget

            save_budget(bud, spec.name, [files.path(budget_plot)], devices=spec.devices)
        files.commit()
    if as_json:
        click.echo(json_text(grade_report(result, bud, rec, spec, worst_pair, sens)))
    else:
        click.echo(format_grade(result, origin_um=rec.origin_um, frame=file_frame(rec)))
        if sens:
            click.echo(format_sensitivity(sens, worst_pair, rec))
        if bud is not None:
            click.echo("")
            click.echo(format_budget(bud))


def _sigterm_as_interrupt() -> None:
    """Let SIGTERM stop a command the way Ctrl-C does (arrange keeps the best result so
    far; the others write nothing), until the command ends: :func:`_user_errors` puts
    the handler before it back."""
    def handler(signum: int, frame: object) -> None:
        raise KeyboardInterrupt

    signal.signal(signal.SIGTERM, handler)


@contextmanager
def _deferred_signals() -> Iterator[list[int]]:
    """Hold SIGINT and SIGTERM until the block ends; yields the signals that came."""
    caught: list[int] = []

    def hold(signum: int, frame: object) -> None:
        caught.append(signum)

    old = {sig: signal.signal(sig, hold) for sig in (signal.SIGINT, signal.SIGTERM)}
    try:
        yield caught
    finally:
        for sig, handler in old.items():
            signal.signal(sig, handler)


class _Progress:
    """One self-overwriting stderr line with the best keys so far (terminals only)."""

    def __init__(self, enabled: bool):
        self.enabled = enabled
        self.t0 = time.monotonic()
        self.last = 0.0

    def __call__(self, stage: str, keys: Keys) -> None:
        now = time.monotonic()
        if not self.enabled or now - self.last < 0.1:
            return
        self.last = now
        click.echo(f"\r  {now - self.t0:6.1f} s  {stage:<9} linear {keys.linear_um:.3g} um  "
                   f"quad {keys.quadratic_ppm:.3g} ppm   ", err=True, nl=False)

    def done(self) -> None:
        if self.enabled:
            click.echo("\r" + " " * 72 + "\r", err=True, nl=False)


def no_drawing_note(spec: Spec) -> str:
    """Why an arrangement at the spec's pitch has no GDSII, and the ways to get one."""
    from placer.layout import pitch

    need = pitch.pitch_needed(spec, tracks=1)
    px, py = spec.array.pitch_um
    return (f"No GDSII written: the spec's pitch_um = [{px:g}, {py:g}] is smaller than "
            f"placer's generic unit cell with one routing track needs ([{need[0]:g}, "
            f"{need[1]:g}] um); the pattern, figures and pictures hold at this pitch. Give "
            "your own cell with --unit-gds, rules with --template, or omit pitch_um for "
            "placer's drawing.")


def _tools(spec: Spec, template_path: Path | None, layers_path: Path | None,
           unit_gds: Path | None, unit_cell: str | None) -> tuple[Spec, Any]:
    from placer.layout.block import load_tools

    if unit_cell is not None and unit_gds is None:
        raise PlacerError("--unit-cell names a cell of --unit-gds; give --unit-gds too")
    return load_tools(spec, template_path, layers_path, unit_gds, unit_cell)


def _gradient_field(spec: Spec, grade: Grade) -> tuple[float, float] | None:
    import numpy as np

    w = grade.worst("linear_ppm")
    if w is None:
        return None
    g = spec.gradient.linear_ppm_per_um
    angle = np.radians(w.linear_worst_angle_deg)
    return (g * float(np.cos(angle)), g * float(np.sin(angle)))


@cli.command()
@click.argument("paths", metavar="SPEC_OR_FOLDER...", nargs=-1, required=True,
                type=click.Path(exists=True, path_type=Path))
@click.option("--out", "out_dir", type=_OUT, required=True,
              help="Folder for the batch: one folder per block, summary.json, index.html.")
@click.option("--time-limit", "time_limit", type=_TIME, default=10.0, show_default=True,
              help="Each block's time limit in seconds (its whole arrange run).")
@click.option("--seed", type=_SEED, default=0, show_default=True, help="Each block's seed.")
@click.option("--jobs", type=click.IntRange(min=1, max=64), default=None,
              help="Blocks at once [default: the machine's cores].")
@click.option("--quiet", is_flag=True, help="No line per finished block.")
@click.option("--force", is_flag=True, help="Replace a previous batch's files.")
@_user_errors
def batch(paths: tuple[Path, ...], out_dir: Path, time_limit: float, seed: int,
          jobs: int | None, quiet: bool, force: bool) -> None:
    """Arrange every spec (a folder: its *.toml files), several at a time.

    Each block is an arrange run into OUT/<spec name>/ with its own outputs; the batch
    adds summary.json and index.html (every block's figures and preview). Exit 1 when a
    block failed (the summary says which and why).
    """
    from placer.jobs.batch import find_specs, run_batch
    from placer.present import outputs
    from placer.present.report import format_batch

    specs = find_specs(list(paths))
    n_jobs = jobs or (len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity")
                      else (os.cpu_count() or 1))
    t0 = time.monotonic()
    finished: list[Any] = []
    with OutputSet(out_dir, outputs.BATCH_FILES, force) as out:
        try:
            runs = run_batch(specs, out_dir, time_limit_s=time_limit, seed=seed, jobs=n_jobs,
                             force=force, progress=not quiet, finished=finished)
            wall = time.monotonic() - t0
            outputs.write_batch(out, runs, wall_s=wall, jobs=n_jobs, time_limit_s=time_limit,
                                seed=seed)
            out.commit()
        except KeyboardInterrupt:
            # each block is a set of its own: the ones that finished stay whole (after the
            # summary's move-in, the usual message says the whole set is complete)
            if not finished or out.committed:
                raise
            names = ", ".join(r.name for r in finished[:5]) + (" ..." if len(finished) > 5
                                                                else "")
            click.echo(f"Interrupted; the {len(finished)} block(s) that finished are complete "
                       f"in {out_dir} ({names}); no summary written.", err=True)
            sys.exit(130)
    click.echo(format_batch(runs, wall, n_jobs))
    click.echo(f"Wrote {out_dir}/index.html, summary.json and a folder per block.")
    failed = [r for r in runs if r.exit_code != 0]
    if failed:
        # one line for scripts and logs; the table above and summary.json say why
        more = f" and {len(failed) - 1} more" if len(failed) > 1 else ""
        click.echo(f"Error: {len(failed)} of {len(runs)} blocks failed ({failed[0].name}"
                   f"{more}); {out_dir}/summary.json gives each one's reason", err=True)
        sys.exit(1)


@cli.command()
@click.argument("spec_path", metavar="SPEC", type=_FILE)
@click.option("--out", "out_dir", type=_OUT,
              required=True,
              help="Folder for pattern.txt, report.json, pattern.gds, pattern.sp, "
                   "pattern.png, pattern.svg, budget.png (with [electrical]) and "
                   "candidate-K.txt/.png.")
@click.option("--time-limit", "time_limit", type=_TIME,
              default=60.0, show_default=True,
              help="Limit on the whole run in seconds: the search gets what start-up and "
                   "the estimated work after it (scoring, routing, files) leave, at least "
                   "a fifth of it, and usually ends sooner. A block whose other work is "
                   "estimated at more than 3 x this + 5 s is refused at once, naming the "
                   "limit it needs.")
@click.option("--seed", type=_SEED, default=0, show_default=True,
              help="Random seed; the same spec, seed and time limit give the same "
                   "result.")
@click.option("--candidates", "n_candidates", type=click.IntRange(min=0, max=50), default=0,
              show_default=True,
              help="Also write the K best arrangements on the error/routing trade-off.")
@click.option("--method", type=click.Choice(METHODS), default="auto", show_default=True,
              help="auto is the optimiser; the others are baselines for comparison.")
@click.option("--layers", "layers_path", type=_FILE, default=None,
              help="Layer map (TOML: [layers] role = [layer, datatype]) for the GDSII.")
@_drawing_options
@click.option("--quiet", is_flag=True, help="No progress display.")
@click.option("--force", is_flag=True, help="Replace a previous run's files in --out.")
@_user_errors
def arrange(spec_path: Path, out_dir: Path, time_limit: float, seed: int, n_candidates: int,
            method: str, layers_path: Path | None, template_path: Path | None,
            unit_gds: Path | None, unit_cell: str | None, quiet: bool, force: bool) -> None:
    """Search for the arrangement of SPEC's devices with the least gradient error.

    Writes the arrangement (pattern.txt), every figure (report.json), the routed GDSII
    layout (pattern.gds), its SPICE netlist with the wiring (pattern.sp), preview pictures
    (pattern.png, pattern.svg) and, with an [electrical] table, the budget picture
    (budget.png).
    """
    from dataclasses import replace

    from placer.io import forked
    from placer.jobs import workload
    from placer.jobs.load import load_spec
    from placer.layout import block as drawing
    from placer.layout.router import RouteError
    from placer.present import outputs
    from placer.present.report import format_arrangement, format_budget, format_nets

    spec = load_spec(spec_path)
    workload.check(spec, str(spec_path), time_limit)
    note = None
    try:
        spec, tools = _tools(spec, template_path, layers_path, unit_gds, unit_cell)
    except RouteError:
        # a given pitch too fine for placer's generic cell: the pattern, the scores, the
        # budget and the pictures hold at any pitch; only the drawing needs a cell
        if unit_gds is not None or template_path is not None or not spec.array.pitch_given:
            raise
        tools, note = None, no_drawing_note(spec)
    names = outputs.arrange_names(spec, n_candidates, drawn=tools is not None)
    with OutputSet(out_dir, names, force, outputs.ARRANGE_FILES) as out:
        progress = _Progress(not quiet and sys.stderr.isatty())
        # the limit is the whole run's: the search gets what the work before and after it
        # leave (never less than a fifth of it), from the spec alone (see search_seconds)
        search_limit = workload.search_seconds(
            time_limit,
            workload.after_search(spec, routed=tools is not None, candidates=n_candidates))
        try:
            result = run_arrange(spec, method=method, seed=seed, time_limit_s=search_limit,
                                 n_candidates=n_candidates, progress=progress,
                                 fit=tools.fit if tools is not None else None,
                                 weigh=tools.weigh if tools is not None else None)
        finally:
            progress.done()
        spec = result.spec or spec           # at the pitch its routing needs
        # the search is over: finish the outputs as one set before honouring a signal
        with _deferred_signals() as caught:
            # the previews need only the arrangement and the cell: a child process draws
            # them while this one routes, extracts and draws the budget, where that work
            # is worth a process (see ASIDE_MIN_UNITS)
            previews = outputs.arrangement_previews(
                out, result, spec, tools.cell(spec).extent if tools is not None else None)
            worth = spec.n_units >= ASIDE_MIN_UNITS or spec.electrical is not None
            with forked.aside(previews.draw if worth else None) as pictures:
                block = (drawing.prepare(result.pattern, spec, tools) if tools is not None
                         else None)
                if block is not None:
                    result = replace(result, grade=drawing.graded_with_lde(result.grade, block))
                bud = _budget(result.pattern, spec, result.grade, required=False,
                              block=block)
                outputs.write_arrangement(out, result, block, bud, spec_path=spec_path,
                                          seed=seed, time_limit_s=time_limit, spec=spec,
                                          note=note, search_limit_s=search_limit,
                                          drawn=replace(previews, done=pictures.wait))
            written = out.commit()
            # the set is complete: a signal now only shortens the exit, never the report
            click.echo(format_arrangement(result, spec))
            click.echo("")
            if block is not None:
                click.echo(format_nets(block.wiring, area=drawing.area_of(block)))
            else:
                click.echo(note)
            if bud is not None:
                click.echo("")
                click.echo(format_budget(bud))
            click.echo(f"\nWrote {out_dir}/" + ", ".join(p.name for p in written))
    if caught:
        click.echo("Interrupted after the search; the outputs above are complete.", err=True)
        sys.exit(130)


@cli.command()
@click.argument("pattern_path", metavar="PATTERN", type=_FILE)
@click.option("--spec", "spec_path", type=_FILE, default=None,
              help="Spec with pitch, unit size, kind, nets and model assumptions.")
@click.option("--out", "out_dir", type=_OUT,
              required=True, help="Folder for <name>.gds, <name>.png and <name>.svg.")
@click.option("--layers", "layers_path", type=_FILE, default=None,
              help="Layer map (TOML: [layers] role = [layer, datatype]) for the GDSII.")
@_drawing_options
@click.option("--gradient", "overlay", is_flag=True,
              help="Shade the preview with the worst pair's worst linear gradient.")
@click.option("--force", is_flag=True, help="Overwrite files already in --out.")
@_user_errors
def draw(pattern_path: Path, spec_path: Path | None, out_dir: Path, layers_path: Path | None,
         template_path: Path | None, unit_gds: Path | None, unit_cell: str | None,
         overlay: bool, force: bool) -> None:
    """Write the routed GDSII layout and preview pictures of PATTERN."""
    from placer.io.spec import NAME_RE
    from placer.jobs import workload
    from placer.layout import block as drawing
    from placer.model.grade import grade_pattern
    from placer.present import outputs
    from placer.present.report import format_lde, format_nets

    pattern, spec, _ = _load_graded(pattern_path, spec_path)
    workload.check(spec, str(pattern_path), None)     # memory only: draw has no limit
    spec, tools = _tools(spec, template_path, layers_path, unit_gds, unit_cell)
    stem = pattern_path.stem if NAME_RE.match(pattern_path.stem) else spec.name
    block = drawing.prepare(pattern, spec, tools)
    spec = block.spec                        # at the pitch its routing needs
    grade_ = drawing.graded_with_lde(grade_pattern(pattern, spec), block)
    with OutputSet(out_dir, outputs.draw_names(stem), force) as out:
        outputs.write_block(block, grade_, out, stem,
                            _gradient_field(spec, grade_) if overlay else None)
        written = out.commit()
    click.echo(format_nets(block.wiring, area=drawing.area_of(block)))
    for line in format_lde(grade_.lde):
        click.echo(line)
    click.echo("Wrote " + ", ".join(str(p) for p in written))
    click.echo("The GDSII is a starting pattern, not a design-rule-clean layout.")


@cli.command()
@click.argument("spec_path", metavar="SPEC", type=_FILE)
@click.option("--out", "out_dir", type=_OUT,
              required=True, help="Folder for <name>-compare.png and .pdf.")
@click.option("--seed", type=_SEED, default=0, show_default=True,
              help="Seed of the optimised arrangement.")
@click.option("--time-limit", "time_limit", type=_TIME,
              default=60.0, show_default=True,
              help="Safety cap on the search in seconds (work estimated far past it is "
                   "refused at once, as for arrange).")
@click.option("--paper", type=click.Choice(["a4", "letter"]), default="a4", show_default=True,
              help="Page size of the sheet (landscape).")
@click.option("--force", is_flag=True, help="Overwrite files already in --out.")
@_user_errors
def compare(spec_path: Path, out_dir: Path, seed: int, time_limit: float, paper: str,
            force: bool) -> None:
    """One page comparing clustered, interdigitated, mirrored and optimised arrangements.

    Every arrangement is made on the core the search chose, so the figures differ by
    arrangement alone.
    """
    from placer.jobs import workload
    from placer.jobs.arrange import baseline_patterns
    from placer.jobs.load import load_spec
    from placer.kinds import KINDS
    from placer.model.grade import grade_pattern
    from placer.model.routing_estimate import estimate_routing, mos_finger_nets
    from placer.present import outputs
    from placer.present.plot import save_comparison
    from placer.present.report import format_table

    spec = load_spec(spec_path)
    workload.check(spec, str(spec_path), time_limit, routed=False)
    names = outputs.compare_names(spec)
    with OutputSet(out_dir, names, force) as out:
        best = run_arrange(spec, seed=seed, time_limit_s=time_limit)
        if best.stopped == "interrupted":
            raise KeyboardInterrupt            # a comparison of a cut search: none at all
        spec = best.spec or spec
        rows, cols = best.core_shape
        fingers = KINDS[spec.kind].fingers
        nets = mos_finger_nets(spec) if fingers else None
        entries = []
        for method, pat in baseline_patterns(spec, rows, cols):
            route = estimate_routing(pat, spec.array.pitch_um, fingers, nets)
            entries.append((method, pat, grade_pattern(pat, spec), route.total_tree_um))
        entries.append(("optimised", best.pattern, best.grade, best.routing.total_tree_um))
        units = ", ".join(f"{n}={c}" for n, c in zip(spec.devices, spec.counts, strict=True))
        save_comparison(entries, spec.array.pitch_um, spec.gradient.linear_ppm_per_um,
                        f"{spec.name}: {units} on a {rows} x {cols} core, pitch "
                        f"{spec.array.pitch_um[0]:g} x {spec.array.pitch_um[1]:g} um "
                        "(model estimates)",
                        [out.path(n) for n in names], paper=paper)
        written = out.commit()
    rows_txt = [[label, f"{max((p.linear_ppm for p in g.pairs), default=0):.3g}",
                 f"{max((p.quadratic_ppm for p in g.pairs), default=0):.3g}",
                 f"{max((p.correlated_sigma_ppm for p in g.pairs), default=0):.3g}",
                 f"{r:.4g}"] for label, _, g, r in entries]
    click.echo(f"All four on the {rows} x {cols} core the search chose "
               f"({best.shape_reason}).")
    click.echo(format_table(["arrangement", "linear ppm", "quad ppm", "sigma ppm", "wire um"],
                            rows_txt))
    click.echo("Wrote " + ", ".join(str(p) for p in written))


@cli.command()
@click.argument("spec_path", metavar="SPEC", type=_FILE)
@click.option("--out", "out_dir", type=_OUT,
              required=True, help="Folder for <name>-lesson.html (and "
                                  "<name>-exercise.toml with --write-exercise).")
@click.option("--pattern", "pattern_path", type=_FILE, default=None,
              help="Open the page on this arrangement (a pattern of the spec's devices; "
                   "for a unary spec, a sequence grid or GDSII).")
@click.option("--seed", type=_SEED, default=0, show_default=True,
              help="Seed of the optimised arrangement.")
@click.option("--time-limit", "time_limit", type=_TIME,
              default=60.0, show_default=True,
              help="Safety cap on the search in seconds (work estimated far past it is "
                   "refused at once, as for arrange).")
@click.option("--exercise", "exercise_path", type=_FILE, default=None,
              help="Open the page on this exercise file (TOML: its start, goals, swaps "
                   "allowed and hints); the page scores the board against it.")
@click.option("--write-exercise", "write_exercise", is_flag=True,
              help="Also write <name>-exercise.toml, a starter exercise whose goals come "
                   "from placer's best arrangement, and open the page on it.")
@click.option("--force", is_flag=True, help="Overwrite files already in --out.")
@_user_errors
def lesson(spec_path: Path, out_dir: Path, pattern_path: Path | None, seed: int,
           time_limit: float, exercise_path: Path | None, write_exercise: bool,
           force: bool) -> None:
    """One self-contained HTML page for teaching: swap units and watch every figure.

    The page opens from disk in a browser (nothing to fetch); its buttons load the
    clustered, interdigitated, mirrored and optimised arrangements (and yours, with
    --pattern), and it exports the board as pattern text for grade. A unary spec (a
    [unary] table) gets the sequence page: exchange cells of the textbook orders or
    placer's and watch the INL against code; it exports a sequence grid.

    With --exercise (or --write-exercise for a starter), the page sets the trainee a
    task: a start arrangement, goals on its figures within a number of swaps, hints one
    at a time, a live score, and a reveal of placer's best arrangement.
    """
    from placer.io.pattern import check_against_spec, read_pattern
    from placer.io.unaryspec import is_unary_spec
    from placer.jobs import workload
    from placer.jobs.arrange import baseline_patterns
    from placer.jobs.load import load_spec
    from placer.present import outputs
    from placer.present.lesson import MAX_LESSON_UNITS, LessonArrangement, lesson_data, render_page

    if exercise_path is not None and write_exercise:
        raise click.UsageError("give --exercise or --write-exercise, not both")
    if pattern_path is not None and (exercise_path is not None or write_exercise):
        raise click.UsageError("--pattern cannot go with an exercise: an exercise opens on "
                               "its own start arrangement")
    if is_unary_spec(spec_path):
        if exercise_path is not None or write_exercise:
            raise click.UsageError("exercises are for arrays of devices; a unary spec's "
                                   "page has none")
        _sequence_lesson(spec_path, out_dir, pattern_path, seed, time_limit, force)
        return
    spec = load_spec(spec_path)
    workload.check(spec, str(spec_path), time_limit, routed=False)
    if spec.n_units > MAX_LESSON_UNITS:
        raise PlacerError(f"{spec_path}: {spec.n_units} units; the lesson page recomputes "
                          f"every figure on each swap and handles at most "
                          f"{MAX_LESSON_UNITS}")
    own = None
    if pattern_path is not None:
        own = check_against_spec(read_pattern(pattern_path), spec, str(pattern_path))
    exercise = None
    if exercise_path is not None:           # checked before any search or file
        from placer.io.exercise import read_exercise
        exercise = read_exercise(exercise_path, spec)
    name = outputs.lesson_name(spec)
    ex_name = f"{spec.name}-exercise.toml"
    with OutputSet(out_dir, [name, ex_name] if write_exercise else [name], force) as out:
        best = run_arrange(spec, seed=seed, time_limit_s=time_limit)
        if best.stopped == "interrupted":
            raise KeyboardInterrupt
        spec = best.spec or spec
        rows, cols = best.core_shape
        notes = {"clustered": "each device's units side by side",
                 "interdigitated": "devices alternating along the rows",
                 "mirrored": "each row mirrored about the array's centre"}
        items = [LessonArrangement(m, f"{notes[m]} ({rows} x {cols} core)", p)
                 for m, p in baseline_patterns(spec, rows, cols)]
        items.append(LessonArrangement("optimised", f"placer's search: {best.method}",
                                       best.pattern))
        if own is not None and pattern_path is not None:      # the page opens on it
            items.insert(0, LessonArrangement(pattern_path.stem, f"from {pattern_path.name}",
                                              own))
        if write_exercise:
            from placer.io.exercise import exercise_text
            from placer.jobs.exercise import starter_exercise
            exercise = starter_exercise(spec, "clustered", items[0].pattern, best.pattern)
            out.write(ex_name, exercise_text(
                exercise, f"Exercise for {spec_path.name}, written by placer lesson "
                          f"--write-exercise (seed {seed}).\nEdit the text, goals, swaps "
                          f"and hints, then: placer lesson {spec_path.name} --exercise "
                          f"{ex_name} --out DIR"))
        out.write(name, render_page(lesson_data(spec, items, exercise)))
        written = {p.name: p for p in out.commit()}
    click.echo(f"Wrote {written[name]}: open it in a browser (no network needed).")
    if write_exercise:
        click.echo(f"Wrote {written[ex_name]}: edit its goals and hints, then give it to "
                   "--exercise.")


def _sequence_lesson(spec_path: Path, out_dir: Path, grid_path: Path | None, seed: int,
                     time_limit: float, force: bool) -> None:
    """The lesson page of a unary spec: the textbook orders, placer's and the given one."""
    from placer.io.unaryspec import read_sequence_layout, read_unary_spec
    from placer.jobs.sequence import find_sequence
    from placer.present.lesson import render_sequence_page, sequence_lesson_data
    from placer.search.switching import BASELINES

    spec = read_unary_spec(spec_path)
    given = read_sequence_layout(grid_path, spec) if grid_path is not None else None
    sequence_lesson_data(spec, [])                       # refuses an outsize core first
    notes = {"row-by-row": "cells in reading order",
             "row-column": "rows from the middle out, each row's columns likewise",
             "centre pairs": "consecutive cells on slots mirrored through the centre",
             "quadrant split": "each cell on four slots mirrored about both axes",
             "quad-quadrant walk": "each cell on sixteen slots, one a sub-quadrant"}
    orders = []
    for name, fn in BASELINES.items():
        try:
            orders.append((name, notes[name], fn(spec.rows, spec.cols, spec.pitch_um,
                                                 spec.cells, spec.sub_units,
                                                 spec.binary_bits)))
        except ValueError:
            continue
    name = f"{spec.name}-lesson.html"
    with OutputSet(out_dir, [name], force) as out:
        rep = find_sequence(spec, seed=seed, time_limit_s=time_limit)
        orders.append(("placer", f"placer's search: {rep.method}", rep.layout))
        if given is not None and grid_path is not None:       # the page opens on it
            orders.insert(0, (grid_path.stem, f"from {grid_path.name}", given))
        out.write(name, render_sequence_page(sequence_lesson_data(spec, orders)))
        written = out.commit()
    click.echo(f"Wrote {written[0]}: open it in a browser (no network needed).")


@cli.command()
@click.argument("layout", type=_FILE)
@click.option("--out", "out_dir", type=_OUT,
              required=True,
              help="Folder for repaired.txt, .png, .svg, repair.json, repaired.gds (when "
                   "placer's unit cell fits the layout's pitch) and repaired-own.gds (a "
                   "GDSII layout with the swaps applied).")
@click.option("--spec", "spec_path", type=_FILE, default=None,
              help="Spec with the model assumptions (defaults apply without it).")
@click.option("--max-swaps", type=click.IntRange(min=1, max=64), default=4, show_default=True,
              help="At most this many pairwise unit swaps.")
@click.option("--seed", type=_SEED, default=0, show_default=True,
              help="Seed of the search that sets the target.")
@click.option("--time-limit", "time_limit", type=_TIME,
              default=30.0, show_default=True,
              help="Safety cap on that search in seconds (work estimated far past it is "
                   "refused at once, as for arrange).")
@click.option("--force", is_flag=True, help="Overwrite files already in --out.")
@_layout_options
@_drawing_options
@_user_errors
def repair(layout: Path, out_dir: Path, spec_path: Path | None, max_swaps: int, seed: int,
           time_limit: float, force: bool, cell: str | None, mapping: tuple[str, ...],
           dummy_cells: tuple[str, ...], layers_path: Path | None, template_path: Path | None,
           unit_gds: Path | None, unit_cell: str | None) -> None:
    """Find the fewest unit swaps that bring LAYOUT's linear error to its best.

    The target is the linear error the search reaches on the same slots; within
    --max-swaps the quadratic error is lowered next. Prints the swaps by slot (row,
    column, coordinates) with the scores before and after, and writes the repaired
    pattern with its routed drawing; for a GDSII layout also repaired-own.gds, the
    layout itself with the swapped units' references exchanged.
    """
    from placer.jobs import workload
    from placer.layout import block as drawing
    from placer.layout import pitch
    from placer.present import outputs

    pat, spec, rec = _load_graded(layout, spec_path, cell=cell, mapping=mapping,
                                  dummy_cells=dummy_cells, layers_path=layers_path,
                                  echo_notes=True)
    workload.check(spec, str(layout), time_limit)
    from placer.layout.router import RouteError

    note = None
    try:
        spec, tools = _tools(pitch.given(spec),
                             template_path, layers_path, unit_gds, unit_cell)
    except RouteError:             # a hand layout's pitch may not hold placer's unit cell
        if unit_gds is not None or template_path is not None:
            raise
        need = pitch.pitch_needed(spec, tracks=1)
        px, py = spec.array.pitch_um
        tools, note = None, (f"repaired.gds not written: {layout.name}'s pitch, {px:g} x "
                             f"{py:g} um, is too small for placer's generic unit cell with "
                             f"one routing track (at least {need[0]:g} x {need[1]:g} um); "
                             "give your own cell with --unit-gds or rules with --template")
    own = rec.fmt == "gds"           # the user's GDSII, its swaps applied in place
    own_note = None
    with OutputSet(out_dir, outputs.repair_names(tools is not None, own), force) as out:
        res = run_repair(pat, spec, spec.array.pitch_um, max_swaps, seed=seed,
                         time_limit_s=time_limit)
        block = drawing.prepare(res.pattern, spec, tools) if tools is not None else None
        outputs.write_repair(out, res, spec, block, layout, rec)
        if own and res.swaps:
            from placer.io.gdsswap import swap_units
            from placer.layout.layers import load_layers

            try:
                edited = swap_units(layout, outputs.unit_move_centres(res, spec, rec),
                                    cell=cell, label_layer=load_layers(layers_path)["label"],
                                    pitch_um=spec.array.pitch_um)
                out.write(outputs.OWN_REPAIRED, edited.data)
            except LayoutError as err:
                own_note = f"{outputs.OWN_REPAIRED} not written: {err}"
        written = out.commit()
    g = spec.gradient.linear_ppm_per_um
    b, a = res.before, res.after
    click.echo(f"{len(res.swaps)} swap(s):" if res.swaps
               else "No swap improves this layout.")
    for ln in outputs.swap_lines(res, spec, rec):
        click.echo(ln)
    click.echo(f"Linear worst pair: {b.linear_um:.4g} um ({b.linear_um * g:.4g} ppm) -> "
               f"{a.linear_um:.4g} um ({a.linear_um * g:.4g} ppm); target "
               f"{res.target_linear_um:.4g} um " + ("reached" if res.reached_target else
                                                   ("not reached (see below)" if res.limited else
                                                    f"not reached in {max_swaps} swaps")))
    click.echo(f"Quadratic worst pair: {b.quadratic_ppm:.4g} ppm -> {a.quadratic_ppm:.4g} ppm")
    if res.limited:
        click.echo(f"Limited: {res.limited}.")
    click.echo("Wrote " + ", ".join(str(p) for p in written))
    if note is not None:
        click.echo(f"Note: {note}", err=True)
    if own_note is not None:
        click.echo(f"Note: {own_note}", err=True)


@cli.command()
@click.argument("spec_path", metavar="SPEC", type=_FILE)
@click.option("--out", "out_dir", type=_OUT, required=True,
              help="Folder for sequence.txt, report.json, sequence.png and sequence.gds.")
@click.option("--layers", "layers_path", type=_FILE, default=None,
              help="Layer map (TOML: [layers] role = [layer, datatype]) for the GDSII.")
@click.option("--grid", "grid_path", type=_FILE, default=None,
              help="Grade this order instead of searching: a sequence grid (each slot's "
                   "cell number, b<j> a binary cell, . a dummy) or a GDSII layout whose "
                   "cells carry S<n> and B<j> labels (as sequence.gds).")
@click.option("--cell", "cell", default=None,
              help="With a GDSII --grid: the cell holding the array (default: the top cell).")
@click.option("--max-swaps", "max_swaps", type=click.IntRange(0, 64), default=0,
              show_default=True,
              help="With --grid: repair the given order by up to this many exchanges of "
                   "two slots (each the one that lowers the worst |INL| most).")
@click.option("--time-limit", "time_limit", type=_TIME, default=10.0, show_default=True,
              help="Cap on the search (or the repair) in seconds (the search's move "
                   "budget usually ends it sooner).")
@click.option("--seed", type=_SEED, default=0, show_default=True,
              help="Random seed; the same spec and seed give the same order when the time "
                   "limit does not cut the search.")
@click.option("--force", is_flag=True, help="Overwrite files already in --out.")
@_user_errors
def sequence(spec_path: Path, out_dir: Path, layers_path: Path | None,
             grid_path: Path | None, cell: str | None, max_swaps: int, time_limit: float,
             seed: int, force: bool) -> None:
    """Place a unary (thermometer-coded) array and order its switching for the least INL,
    or grade a given order (--grid); a SPEC with a [unary] table (see the README)."""
    from placer.io.unaryspec import read_sequence_layout, read_unary_spec
    from placer.jobs.sequence import find_sequence, repair_given, score_sequence
    from placer.layout.layers import load_layers
    from placer.present import outputs
    from placer.present.report import format_sequence

    if max_swaps and grid_path is None:
        raise click.UsageError("--max-swaps repairs a given order: give it with --grid")
    if cell is not None and grid_path is None:
        raise click.UsageError("--cell names the cell of a GDSII --grid: give it with --grid")
    spec = read_unary_spec(spec_path)
    layers = load_layers(layers_path)
    notes: list[str] = []
    given = (read_sequence_layout(grid_path, spec, label_layer=layers["label"], cell=cell,
                                  notes=notes) if grid_path is not None else None)
    if notes:
        click.echo(f"Read {grid_path}: " + "; ".join(notes))
    if given is not None and max_swaps:
        assert grid_path is not None
        rep = repair_given(spec, given, grid_path.name, max_swaps, time_limit)
    elif given is not None:
        assert grid_path is not None
        rep = score_sequence(spec, given, f"given ({grid_path.name})")
    else:
        rep = find_sequence(spec, seed=seed, time_limit_s=time_limit)
    with OutputSet(out_dir, list(outputs.SEQUENCE_FILES), force,
                   outputs.SEQUENCE_FILES) as out:
        outputs.write_sequence(out, rep, layers)
        written = out.commit()
    click.echo(format_sequence(rep))
    click.echo("Wrote " + ", ".join(str(p) for p in written))
