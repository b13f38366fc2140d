"""placer: arrange and grade matched analog devices as arrays of unit fingers or cells.

The names below load on first use, so ``import placer`` (and the command's start-up, which
must install its interrupt handler first) costs nothing until they are needed.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

_EXPORTS = {
    "LimitError": "placer.errors", "PatternError": "placer.errors",
    "PlacerError": "placer.errors", "SpecError": "placer.errors",
    "Pattern": "placer.io.pattern", "format_pattern": "placer.io.pattern",
    "parse_pattern": "placer.io.pattern", "read_pattern": "placer.io.pattern",
    "Grade": "placer.model.grade", "grade_pattern": "placer.model.grade",
    "Spec": "placer.io.spec", "load_spec": "placer.jobs.load", "parse_spec": "placer.jobs.load",
}

__all__ = ["__version__", *_EXPORTS]

if TYPE_CHECKING:  # the names as static checkers see them
    from placer.errors import LimitError, PatternError, PlacerError, SpecError  # noqa: F401
    from placer.io.pattern import (  # noqa: F401
        Pattern,
        format_pattern,
        parse_pattern,
        read_pattern,
    )
    from placer.io.spec import Spec  # noqa: F401
    from placer.jobs.load import load_spec, parse_spec  # noqa: F401
    from placer.model.grade import Grade, grade_pattern  # noqa: F401


def __getattr__(name: str) -> Any:
    if name in _EXPORTS:
        value = getattr(importlib.import_module(_EXPORTS[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'placer' has no attribute {name!r}")
