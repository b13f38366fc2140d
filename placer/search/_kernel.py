"""The compiled core (``_native.c``), loaded on first use: one clear error, not an
ImportError, when this installation was built without it."""

from __future__ import annotations

import importlib
from types import ModuleType

from placer.errors import CoreMissing

__all__ = ["native"]


def native() -> ModuleType:
    """The compiled module ``placer.search._native``.

    Raises
    ------
    CoreMissing
        When it was not built (the install had no C compiler, or the sources were copied
        without building).
    """
    try:
        return importlib.import_module("placer.search._native")
    except ImportError:
        raise CoreMissing("placer's compiled search core (placer/search/_native.c) is not "
                          "built in this installation, and arrange, compare and repair "
                          "need it: reinstall with pip on a machine with a C compiler "
                          "(grade, draw and lesson work without it)") from None
