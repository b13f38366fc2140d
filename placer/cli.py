"""Command line: thin click commands over the library."""

from __future__ import annotations

import json
import signal
import sys
import time
from collections.abc import Callable
from dataclasses import asdict
from functools import wraps
from pathlib import Path
from typing import Any, TypeVar

import click
import numpy as np

from placer import __version__
from placer.arrange import METHODS
from placer.arrange import arrange as run_arrange
from placer.errors import PlacerError
from placer.output import atomic_write, prepare_out_dir
from placer.pattern import Pattern, check_against_spec, format_pattern, read_pattern
from placer.report import format_arrangement, format_budget, format_grade, format_table
from placer.score import Grade, grade_pattern
from placer.search import Keys
from placer.spec import NAME_RE, Spec, default_spec, load_spec

__all__ = ["cli"]

F = TypeVar("F", bound=Callable[..., Any])

_FILE = click.Path(exists=True, dir_okay=False, path_type=Path)


def _user_errors(func: F) -> F:
    """Turn input problems into click's one-line ``Error:`` and exit code 1."""

    @wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return func(*args, **kwargs)
        except PlacerError as err:
            raise click.ClickException(str(err)) from None
        except KeyboardInterrupt:
            click.echo("Interrupted; nothing written.", err=True)
            sys.exit(130)

    return wrapper  # type: ignore[return-value]


@click.group()
@click.version_option(__version__, prog_name="placer")
def cli() -> None:
    """Arrange matched devices as unit arrays that cancel process gradients, and grade them.

    Exit codes: 0 success, 1 a problem with the input, 2 a usage error.
    """


def _budget(pattern: Pattern, spec: Spec, grade: Grade, required: bool) -> Any:
    """The electrical budget when the spec asks for one (or ``required``), else None."""
    from placer.budget import budget, check_electrical

    if spec.electrical is None and not required:
        return None
    check_electrical(spec)
    return budget(pattern, spec, grade)


def _load_graded(pattern_path: Path, spec_path: Path | None) -> tuple[Any, Spec]:
    pattern = read_pattern(pattern_path)
    if spec_path is None:
        stem = pattern_path.stem
        spec = default_spec(stem if stem.isidentifier() else "pattern", pattern.devices,
                            pattern.counts())
        return pattern, spec
    spec = load_spec(spec_path)
    return check_against_spec(pattern, spec, str(pattern_path)), spec


@cli.command()
@click.argument("pattern", type=_FILE)
@click.option("--spec", "spec_path", type=_FILE, default=None,
              help="Spec file with pitch and model assumptions (defaults apply without it).")
@click.option("--json", "as_json", is_flag=True, help="Print the figures as JSON on stdout.")
@click.option("--budget-plot", type=click.Path(dir_okay=False, path_type=Path), default=None,
              help="Write the electrical budget picture (.png, .svg or .pdf); needs "
                   "[electrical] in the spec.")
@_user_errors
def grade(pattern: Path, spec_path: Path | None, as_json: bool,
          budget_plot: Path | None) -> None:
    """Grade the arrangement in PATTERN: centroids, gradient errors and random sigmas.

    With an [electrical] table in the spec, also the electrical budget: mirror current
    error, capacitor-array INL/DNL or resistor ratio error.
    """
    pat, spec = _load_graded(pattern, spec_path)
    if budget_plot is not None and budget_plot.suffix not in (".png", ".svg", ".pdf"):
        raise PlacerError(f"{budget_plot}: the picture must end in .png, .svg or .pdf")
    result = grade_pattern(pat, spec)
    bud = _budget(pat, spec, result, required=budget_plot is not None)
    if budget_plot is not None and bud is not None:
        from placer.plot import save_budget

        save_budget(bud, spec.name, [budget_plot])
    if as_json:
        out = result.to_dict()
        out["budget"] = asdict(bud) if bud is not None else None
        click.echo(json.dumps(out, indent=2))
    else:
        click.echo(format_grade(result))
        if bud is not None:
            click.echo("")
            click.echo(format_budget(bud))


def _sigterm_as_interrupt() -> None:
    """Let SIGTERM stop a search the way Ctrl-C does, so the best result is kept."""
    def handler(signum: int, frame: object) -> None:
        raise KeyboardInterrupt

    signal.signal(signal.SIGTERM, handler)


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


@cli.command()
@click.argument("spec_path", metavar="SPEC", type=_FILE)
@click.option("--out", "out_dir", type=click.Path(file_okay=False, path_type=Path),
              required=True, help="Folder for pattern.txt, report.json and candidates.")
@click.option("--time-limit", "time_limit", type=click.FloatRange(min=0, min_open=True),
              default=60.0, show_default=True,
              help="Safety cap on the search in seconds; the search usually ends sooner.")
@click.option("--seed", type=click.IntRange(min=0), default=0, show_default=True,
              help="Random seed; the same spec and seed give the same result.")
@click.option("--candidates", "n_candidates", type=click.IntRange(min=0, max=50), default=0,
              show_default=True,
              help="Also write the K best arrangements on the error/routing trade-off.")
@click.option("--method", type=click.Choice(METHODS), default="auto", show_default=True,
              help="auto is the optimiser; the others are baselines for comparison.")
@click.option("--quiet", is_flag=True, help="No progress display.")
@click.option("--force", is_flag=True, help="Overwrite files already in --out.")
@_user_errors
def arrange(spec_path: Path, out_dir: Path, time_limit: float, seed: int, n_candidates: int,
            method: str, quiet: bool, force: bool) -> None:
    """Search for the arrangement of SPEC's devices with the least gradient error."""
    spec = load_spec(spec_path)
    names = ["pattern.txt", "report.json", "pattern.gds", "pattern.png", "pattern.svg",
             "budget.png",
             *(f"candidate-{i}.txt" for i in range(1, n_candidates + 1))]
    prepare_out_dir(out_dir, names, force)
    progress = _Progress(not quiet and sys.stderr.isatty())
    _sigterm_as_interrupt()
    try:
        result = run_arrange(spec, method=method, seed=seed, time_limit_s=time_limit,
                             n_candidates=n_candidates, progress=progress)
    finally:
        progress.done()
    header = [f"{spec.name}: {result.method}, core {result.core_shape[0]} x "
              f"{result.core_shape[1]}, seed {seed}",
              f"linear {result.keys.linear_um:.6g} um (bound {result.linear_bound_um:.6g}), "
              f"quadratic {result.keys.quadratic_ppm:.6g} ppm, sigma "
              f"{result.keys.sigma_ppm:.6g} ppm"]
    atomic_write(out_dir / "pattern.txt", format_pattern(result.pattern, header))
    report = {"spec": str(spec_path), "name": spec.name, "seed": seed,
              "time_limit_s": time_limit, **result.to_dict(),
              "pattern": format_pattern(result.pattern)}
    for i, cand in enumerate(result.candidates, start=1):
        atomic_write(out_dir / f"candidate-{i}.txt", format_pattern(cand.pattern, [
            f"{spec.name} candidate {i}: systematic {cand.systematic_ppm:.6g} ppm, "
            f"routing {cand.routing_um:.6g} um"]))
    bud = _budget(result.pattern, spec, result.grade, required=False)
    report["budget"] = asdict(bud) if bud is not None else None
    atomic_write(out_dir / "report.json", json.dumps(report, indent=2) + "\n")
    _draw_outputs(result.pattern, spec, result.grade, out_dir, "pattern", None, None)
    if bud is not None:
        from placer.plot import save_budget

        save_budget(bud, spec.name, [out_dir / "budget.png"])
    click.echo(format_arrangement(result, spec))
    if bud is not None:
        click.echo("")
        click.echo(format_budget(bud))
    click.echo(f"\nWrote {out_dir}/pattern.txt, report.json, pattern.gds, pattern.png, "
               "pattern.svg" + (f" and {len(result.candidates)} candidates"
                                if result.candidates else ""))


def _draw_outputs(pattern: Pattern, spec: Spec, grade: Grade, out_dir: Path, stem: str,
                  template: Path | None, layers: Path | None,
                  gradient: bool = False) -> list[Path]:
    """Write <stem>.gds, .png and .svg; every file atomically."""
    from placer.gds import build_library, load_layers, load_template, write_gds
    from placer.plot import save_preview

    lib = build_library(pattern, spec, load_template(spec, template), load_layers(layers))
    paths = [out_dir / f"{stem}.gds", out_dir / f"{stem}.png", out_dir / f"{stem}.svg"]
    write_gds(lib, paths[0])
    g = spec.gradient.linear_ppm_per_um
    field = None
    if gradient and grade.pairs:
        w = grade.worst("linear_ppm")
        assert w is not None
        angle = np.radians(w.linear_worst_angle_deg)
        field = (g * float(np.cos(angle)), g * float(np.sin(angle)))
    save_preview(pattern, spec.array.pitch_um, grade, spec.name, paths[1:], gradient=field)
    return paths


@cli.command()
@click.argument("pattern_path", metavar="PATTERN", type=_FILE)
@click.option("--spec", "spec_path", type=_FILE, default=None,
              help="Spec with pitch, unit size, kind and model assumptions.")
@click.option("--out", "out_dir", type=click.Path(file_okay=False, path_type=Path),
              required=True, help="Folder for <name>.gds, <name>.png and <name>.svg.")
@click.option("--template", type=_FILE, default=None,
              help="Unit-cell template (TOML) instead of the kind's shipped one.")
@click.option("--layers", type=_FILE, default=None,
              help="Layer map (TOML: purpose = [layer, datatype]) instead of the generic one.")
@click.option("--gradient", "overlay", is_flag=True,
              help="Shade the preview with the worst pair's worst linear gradient.")
@click.option("--force", is_flag=True, help="Overwrite files already in --out.")
@_user_errors
def draw(pattern_path: Path, spec_path: Path | None, out_dir: Path, template: Path | None,
         layers: Path | None, overlay: bool, force: bool) -> None:
    """Write a GDSII stick pattern and preview pictures of PATTERN."""
    pattern, spec = _load_graded(pattern_path, spec_path)
    stem = pattern_path.stem if NAME_RE.match(pattern_path.stem) else spec.name
    # read templates and layers before touching the folder: bad ones leave nothing behind
    from placer.gds import load_layers, load_template

    load_template(spec, template)
    load_layers(layers)
    prepare_out_dir(out_dir, [f"{stem}.gds", f"{stem}.png", f"{stem}.svg"], force)
    grade = grade_pattern(pattern, spec)
    paths = _draw_outputs(pattern, spec, grade, out_dir, stem, template, layers, overlay)
    click.echo("Wrote " + ", ".join(str(p) for p in paths))
    click.echo("The GDSII is a starting pattern, not a design-rule-clean layout.")


@cli.command()
@click.argument("spec_path", metavar="SPEC", type=_FILE)
@click.option("--out", "out_dir", type=click.Path(file_okay=False, path_type=Path),
              required=True, help="Folder for <name>-compare.png and .pdf.")
@click.option("--seed", type=click.IntRange(min=0), default=0, show_default=True,
              help="Seed of the optimised arrangement.")
@click.option("--time-limit", "time_limit", type=click.FloatRange(min=0, min_open=True),
              default=60.0, show_default=True, help="Safety cap on the search in seconds.")
@click.option("--force", is_flag=True, help="Overwrite files already in --out.")
@_user_errors
def compare(spec_path: Path, out_dir: Path, seed: int, time_limit: float, force: bool) -> None:
    """One page comparing clustered, interdigitated, mirrored and optimised arrangements."""
    from placer.arrange import baseline_pattern, build_pattern
    from placer.plot import save_comparison
    from placer.routing import estimate_routing

    spec = load_spec(spec_path)
    names = [f"{spec.name}-compare.png", f"{spec.name}-compare.pdf"]
    prepare_out_dir(out_dir, names, force)
    best = run_arrange(spec, seed=seed, time_limit_s=time_limit)
    rows, cols = best.core_shape
    entries = []
    for method in ("clustered", "interdigitated", "mirrored"):
        pat = build_pattern(spec, baseline_pattern(spec, method, rows, cols), rows, cols)
        route = estimate_routing(pat, spec.array.pitch_um, spec.kind == "mos")
        entries.append((method, pat, grade_pattern(pat, spec), route.total_tree_um))
    entries.append(("optimised", best.pattern, best.grade, best.routing.total_tree_um))
    units = ", ".join(f"{n}={c}" for n, c in zip(spec.devices, spec.counts, strict=True))
    save_comparison(entries, spec.array.pitch_um, spec.gradient.linear_ppm_per_um,
                    f"{spec.name}: {units} on a {rows} x {cols} core, pitch "
                    f"{spec.array.pitch_um[0]:g} x {spec.array.pitch_um[1]:g} um "
                    "(model estimates)",
                    [out_dir / n for n in names])
    rows_txt = [[label, f"{max((p.linear_ppm for p in g.pairs), default=0):.3g}",
                 f"{max((p.quadratic_ppm for p in g.pairs), default=0):.3g}",
                 f"{max((p.correlated_sigma_ppm for p in g.pairs), default=0):.3g}",
                 f"{r:.4g}"] for label, _, g, r in entries]
    click.echo(format_table(["arrangement", "linear ppm", "quad ppm", "sigma ppm", "wire um"],
                            rows_txt))
    click.echo("Wrote " + ", ".join(str(out_dir / n) for n in names))
