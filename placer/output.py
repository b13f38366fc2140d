"""Safe output: every file of a run staged in a hidden folder, moved in together at the end.

A command opens an :class:`OutputSet` on its ``--out`` folder before any work. The set
takes a lock (a second run on the same folder is refused while the first holds it),
refuses to overwrite a previous set without ``force``, and hands out paths inside a
private staging folder. :meth:`OutputSet.commit` moves the staged files into place (with
``force``, the previous run's files of the same command go first, so nothing stale is
left); on any error, a full disk or an interrupt, the staging folder is removed and the
output folder is left as it was. Files get the permissions the user's umask gives.
"""

from __future__ import annotations

import fnmatch
import os
import shutil
import tempfile
from collections.abc import Iterable
from pathlib import Path
from types import TracebackType

from placer.errors import PlacerError

__all__ = ["OutputError", "OutputSet", "atomic_write", "file_mode"]

_LOCK = ".placer.lock"
_STAGE_PREFIX = ".placer-staging-"


class OutputError(PlacerError):
    """An output folder or file cannot be written as asked."""


def file_mode() -> int:
    """Mode for new files: 0666 less the process's umask."""
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def atomic_write(path: Path, data: str | bytes) -> None:
    """Write ``data`` to ``path`` so that readers see the old file or the whole new one."""
    raw = data.encode("utf-8") if isinstance(data, str) else data
    try:
        fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    except OSError as err:
        raise OutputError(f"{path}: cannot write: {err.strerror or err}") from err
    try:
        os.fchmod(fd, file_mode())
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


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


class OutputSet:
    """The files one run writes to ``out``, staged and committed together.

    ``names`` are the files this run will write; ``family`` are glob patterns of every
    file the command can write (``--force`` removes those of a previous run that this one
    does not rewrite).
    """

    def __init__(self, out: Path, names: Iterable[str], force: bool,
                 family: Iterable[str] = ()):
        self.out = out
        self.names = list(names)
        self.force = force
        self.family = list(family) or self.names
        self.stage: Path | None = None
        self.lock: Path | None = None
        self.written: list[str] = []
        self.created: list[Path] = []
        self.committed = False

    def __enter__(self) -> OutputSet:
        try:
            return self._enter()
        except BaseException as err:
            # nothing of this run may stay: its lock, staging folder, created folders
            self.__exit__(type(err), err, None)
            if isinstance(err, OSError):      # e.g. a name too long for the file system
                raise OutputError(f"{str(self.out)[:80]}: cannot write: "
                                  f"{err.strerror or err}") from err
            raise

    def _enter(self) -> OutputSet:
        out = self.out
        if out.exists() and not out.is_dir():
            raise OutputError(f"{out}: exists and is not a folder; choose another --out")
        existing = [n for n in self.names if (out / n).exists()]
        if existing and not self.force:
            more = f" (and {len(existing) - 1} more)" if len(existing) > 1 else ""
            raise OutputError(f"{out}: {existing[0]} already exists{more}; use --force to "
                              "overwrite or choose another --out")
        self.created = [p for p in (out, *out.parents) if not p.exists()]
        try:
            out.mkdir(parents=True, exist_ok=True)
        except OSError as err:
            raise OutputError(f"{out}: cannot create the folder: {err.strerror or err}"
                              ) from err
        if not os.access(out, os.W_OK):
            raise OutputError(f"{out}: folder is not writable")
        self._take_lock()
        try:
            self.stage = Path(tempfile.mkdtemp(prefix=_STAGE_PREFIX, dir=out))
        except OSError as err:
            self._drop_lock()
            raise OutputError(f"{out}: cannot write: {err.strerror or err}") from err
        return self

    def _take_lock(self) -> None:
        lock = self.out / _LOCK
        for _ in range(2):
            try:
                fd = os.open(lock, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o644)
            except FileExistsError:
                try:
                    pid = int(lock.read_text().strip() or "0")
                except (OSError, ValueError):
                    pid = 0
                if pid > 0 and _alive(pid):
                    raise OutputError(f"{self.out}: another placer run (process {pid}) is "
                                      "writing here; wait for it or choose another --out"
                                      ) from None
                try:                                 # left by a run that was killed
                    lock.unlink()
                except OSError:
                    pass
                continue
            except OSError as err:
                raise OutputError(f"{self.out}: cannot write: {err.strerror or err}") from err
            self.lock = lock                  # ours now: __exit__ removes it
            try:
                with os.fdopen(fd, "w") as fh:
                    fh.write(str(os.getpid()))
            except OSError as err:              # a full disk
                raise OutputError(f"{self.out}: cannot write: {err.strerror or err}"
                                  ) from err
            return
        raise OutputError(f"{self.out}: cannot take the folder's lock {lock}")

    def _drop_lock(self) -> None:
        if self.lock is not None:
            try:
                self.lock.unlink()
            except OSError:
                pass
            self.lock = None

    def path(self, name: str) -> Path:
        """Where to write ``name`` now (inside the staging folder)."""
        assert self.stage is not None
        if name not in self.written:
            self.written.append(name)
        return self.stage / name

    def write(self, name: str, data: str | bytes) -> None:
        """Stage one file."""
        atomic_write(self.path(name), data)

    def commit(self) -> list[Path]:
        """Move every staged file into the output folder; return the final paths."""
        assert self.stage is not None
        missing = [n for n in self.written if not (self.stage / n).is_file()]
        if missing:
            raise OutputError(f"{self.out}: {missing[0]} was not written")
        if self.force:
            for entry in self.out.iterdir():
                if (entry.is_file() and entry.name not in self.written
                        and any(fnmatch.fnmatch(entry.name, pat) for pat in self.family)):
                    entry.unlink()
        final = []
        for name in self.written:
            os.replace(self.stage / name, self.out / name)
            final.append(self.out / name)
        self.committed = True
        return final

    def __exit__(self, exc_type: type[BaseException] | None, exc: BaseException | None,
                 tb: TracebackType | None) -> None:
        if self.stage is not None:
            shutil.rmtree(self.stage, ignore_errors=True)
            self.stage = None
        self._drop_lock()
        if not self.committed:
            for folder in self.created:          # made by this run: leave no empty folder
                try:
                    folder.rmdir()
                except OSError:
                    break
        if exc_type is None or tb is None or self.committed:
            return                   # after the commit a failure is not about these files
        if isinstance(exc, OSError):
            raise OutputError(f"{self.out}: cannot write: {exc.strerror or exc}") from exc
