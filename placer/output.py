"""Safe output: check the folder first, write to a temporary name, then rename."""

from __future__ import annotations

import os
import tempfile
from collections.abc import Iterable
from pathlib import Path

from placer.errors import PlacerError

__all__ = ["OutputError", "prepare_out_dir", "atomic_write"]


class OutputError(PlacerError):
    """An output folder or file cannot be written as asked."""


def prepare_out_dir(out: Path, names: Iterable[str], force: bool) -> None:
    """Create ``out`` if needed; refuse to overwrite any of ``names`` unless ``force``."""
    if out.exists() and not out.is_dir():
        raise OutputError(f"{out}: exists and is not a folder; choose another --out")
    existing = [n for n in names if (out / n).exists()]
    if existing and not force:
        raise OutputError(f"{out}: {existing[0]} already exists (and {len(existing) - 1} more);"
                          " use --force to overwrite or choose another --out"
                          if len(existing) > 1 else
                          f"{out}: {existing[0]} already exists; use --force to overwrite or "
                          "choose another --out")
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as err:
        raise OutputError(f"{out}: cannot create the folder: {err.strerror or err}") from err
    if not os.access(out, os.W_OK):
        raise OutputError(f"{out}: folder is not writable")


def atomic_write(path: Path, data: str | bytes) -> None:
    """Write ``data`` to ``path`` so that readers see the old file or the whole new one."""
    raw = data.encode("utf-8") if isinstance(data, str) else data
    try:
        fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    except OSError as err:
        raise OutputError(f"{path}: cannot write: {err.strerror or err}") from err
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(raw)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException as err:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        if isinstance(err, OSError):
            raise OutputError(f"{path}: cannot write: {err.strerror or err}") from err
        raise
