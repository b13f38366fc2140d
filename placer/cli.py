"""Command line: thin click commands over the library."""

from __future__ import annotations

import json
import sys
from collections.abc import Callable
from functools import wraps
from pathlib import Path
from typing import Any, TypeVar

import click

from placer import __version__
from placer.errors import PlacerError
from placer.pattern import check_against_spec, read_pattern
from placer.report import format_grade
from placer.score import grade_pattern
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
            click.echo("Interrupted.", err=True)
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
