"""Command line: thin click commands over the library."""

from __future__ import annotations

import json
import signal
import sys
import time
from collections.abc import Callable
from functools import wraps
from pathlib import Path
from typing import Any, TypeVar

import click

from placer import __version__
from placer.arrange import METHODS
from placer.arrange import arrange as run_arrange
from placer.errors import PlacerError
from placer.output import atomic_write, prepare_out_dir
from placer.pattern import check_against_spec, format_pattern, read_pattern
from placer.report import format_arrangement, format_grade
from placer.score import grade_pattern
from placer.search import Keys
from placer.spec import Spec, default_spec, load_spec

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
@_user_errors
def grade(pattern: Path, spec_path: Path | None, as_json: bool) -> None:
    """Grade the arrangement in PATTERN: centroids, gradient errors and random sigmas."""
    pat, spec = _load_graded(pattern, spec_path)
    result = grade_pattern(pat, spec)
    if as_json:
        click.echo(json.dumps(result.to_dict(), indent=2))
    else:
        click.echo(format_grade(result))


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
    names = ["pattern.txt", "report.json",
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
    atomic_write(out_dir / "report.json", json.dumps(report, indent=2) + "\n")
    click.echo(format_arrangement(result, spec))
    click.echo(f"\nWrote {out_dir / 'pattern.txt'}, {out_dir / 'report.json'}"
               + (f" and {len(result.candidates)} candidates" if result.candidates else ""))
