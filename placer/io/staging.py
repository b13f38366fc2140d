"""Safe output: every file of a run staged in a hidden folder, moved in together at the end.

A command opens an :class:`OutputSet` on its ``--out`` folder before any work. The set
locks the folder (a second run on the same folder is refused while the first holds it),
then refuses to overwrite a previous set without ``force``, and hands out paths inside a
private staging folder. :meth:`OutputSet.commit` moves the staged files into place (with
``force``, the previous run's files of the same command go first, so nothing stale is
left); on any error, a full disk or an interrupt, the staging folder is removed and the
output folder is left as it was. Files get the permissions the user's umask gives.
"""

from __future__ import annotations

import fcntl
import fnmatch
import os
import shutil
import signal
import tempfile
import threading
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from pathlib import Path
from types import TracebackType

from placer.errors import OutputError, PlacerError

__all__ = ["FileSet", "OutputError", "OutputSet", "atomic_write", "file_mode", "signals_held"]

_STAGE_PREFIX = ".placer-staging-"



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


@contextmanager
def signals_held() -> Iterator[None]:
    """Hold SIGINT and SIGTERM for the block: recorded, then delivered again at its end.

    Held at the Python level (any thread may take a process's signal; the handler always
    runs in the main thread, between two bytecodes), so files moved in under it are all
    moved or none: an interrupt lands before the block or after it, never inside.
    """
    caught: list[int] = []
    old = {}
    if threading.current_thread() is threading.main_thread():
        old = {sig: signal.signal(sig, lambda signum, frame: caught.append(signum))
               for sig in (signal.SIGINT, signal.SIGTERM)}
    try:
        yield
    finally:
        for sig, handler in old.items():
            signal.signal(sig, handler)
        if caught:
            signal.raise_signal(caught[0])    # now, with the files whole (or untouched)


class OutputSet:
    """The files one run writes to ``out``, staged and committed together.

    ``names`` are the files this run will write; ``family`` are glob patterns of every
    file the command can write (``--force`` removes those of a previous run that this one
    does not rewrite).
    """

    #: The folder of the set committed last in this process (None: none yet), so that an
    #: interrupt after a commit can say the outputs are complete.
    last_committed: Path | None = None

    def __init__(self, out: Path, names: Iterable[str], force: bool,
                 family: Iterable[str] = ()):
        self.out = out
        self.names = list(names)
        self.force = force
        self.family = list(family) or self.names
        self.stage: Path | None = None
        self.lock: int | None = None       # descriptor of the locked folder
        self.written: list[str] = []
        self.created: list[Path] = []
        self.committed = False
        self.locked_out = False            # refused: another run holds the folder

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
        self.created = [p for p in (out, *out.parents) if not p.exists()]
        try:
            out.mkdir(parents=True, exist_ok=True)
        except OSError as err:
            raise OutputError(f"{out}: cannot create the folder: {err.strerror or err}"
                              ) from err
        if not os.access(out, os.W_OK):
            raise OutputError(f"{out}: folder is not writable")
        self._take_lock()
        # checked under the lock: a run that finished a moment ago has its files in place
        # lexists: a dangling symbolic link under a name is a file of that name too
        existing = [n for n in self.names if os.path.lexists(out / n)]
        if existing and not self.force:
            more = f" (and {len(existing) - 1} more)" if len(existing) > 1 else ""
            raise OutputError(f"{out}: {existing[0]} already exists{more}; use --force to "
                              "overwrite or choose another --out")
        for stale in out.glob(_STAGE_PREFIX + "*"):
            # under the lock every staging folder is a killed run's: nothing of it stays
            shutil.rmtree(stale, ignore_errors=True)
        try:
            self.stage = Path(tempfile.mkdtemp(prefix=_STAGE_PREFIX, dir=out))
        except OSError as err:
            raise OutputError(f"{out}: cannot write: {err.strerror or err}") from err
        return self

    def _take_lock(self) -> None:
        """Lock the output folder itself (an advisory ``flock`` on its descriptor).

        The kernel drops the lock when the process ends, however it ends, so there is no
        lock file to go stale and no window between creating a lock and marking it.
        """
        try:
            fd = os.open(self.out, os.O_RDONLY | getattr(os, "O_DIRECTORY", 0))
        except OSError as err:
            raise OutputError(f"{self.out}: cannot open the folder: {err.strerror or err}"
                              ) from err
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            same = os.fstat(fd).st_ino == os.stat(self.out).st_ino
        except BlockingIOError:
            os.close(fd)
            self.locked_out = True
            raise OutputError(f"{self.out}: another placer run is writing here; wait for it "
                              "or choose another --out") from None
        except OSError as err:
            # the folder went away (a run that failed removed the folder it had made)
            os.close(fd)
            raise OutputError(f"{self.out}: cannot lock the folder: {err.strerror or err}"
                              ) from err
        if not same:
            os.close(fd)
            raise OutputError(f"{self.out}: the folder was replaced while this run started; "
                              "run again")
        self.lock = fd

    def _drop_lock(self) -> None:
        if self.lock is not None:
            os.close(self.lock)
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
        """Move every staged file into the output folder; return the final paths.

        Everything that can refuse is checked before the first file moves (a name taken
        by a folder, a file missing from the stage), and SIGINT and SIGTERM are held
        while the files move in: an interrupt lands before the move-in (nothing changes)
        or after it (the set is whole), never between two files.
        """
        assert self.stage is not None
        missing = [n for n in self.written if not (self.stage / n).is_file()]
        if missing:
            raise OutputError(f"{self.out}: {missing[0]} was not written")
        for name in self.written:
            target = self.out / name
            if target.is_dir() and not target.is_symlink():
                raise OutputError(f"{target}: is a folder, where this run writes a file; "
                                  "move it or choose another --out")
        with signals_held():
            if self.force:
                for entry in self.out.iterdir():
                    if ((entry.is_file() or entry.is_symlink()) and entry.name not in self.written
                            and any(fnmatch.fnmatch(entry.name, pat) for pat in self.family)):
                        entry.unlink()
            final = []
            for name in self.written:
                os.replace(self.stage / name, self.out / name)
                final.append(self.out / name)
            self.committed = True
            OutputSet.last_committed = self.out
        return final

    def __exit__(self, exc_type: type[BaseException] | None, exc: BaseException | None,
                 tb: TracebackType | None) -> None:
        stage = str(self.stage) if self.stage is not None else None
        # the clean-up itself is held too: an interrupt that lands just after the move-in
        # (or during a failure's clean-up) must not leave the staging folder behind
        with signals_held():
            if self.stage is not None:
                shutil.rmtree(self.stage, ignore_errors=True)
                self.stage = None
            if not self.committed and not self.locked_out:
                # folders made by this run go (while its lock is held); a run refused by
                # the lock leaves them to the run that holds it
                for folder in self.created:
                    try:
                        folder.rmdir()
                    except OSError:
                        break
            self._drop_lock()
        if exc_type is None or tb is None or self.committed:
            return                   # after the commit a failure is not about these files
        if isinstance(exc, OSError):
            raise OutputError(f"{self.out}: cannot write: {exc.strerror or exc}") from exc
        if isinstance(exc, PlacerError) and stage is not None and stage in str(exc):
            # a message names the file where the user will look for it, not the staging
            raise type(exc)(str(exc).replace(stage, str(self.out))) from None


class FileSet:
    """Files at paths the user names (each in a folder of its own choosing), written
    together: each is staged beside its target under a hidden name and all move in at
    :meth:`commit` with signals held; on any failure or interrupt the staged files go
    and the targets stay as they were."""

    def __init__(self, targets: Iterable[Path]):
        self.targets = list(dict.fromkeys(targets))
        self.staged: dict[Path, Path] = {}
        self.committed = False

    def __enter__(self) -> FileSet:
        return self

    def path(self, target: Path) -> Path:
        """Where to write ``target`` now: a hidden sibling with the same suffix."""
        if target not in self.staged:
            token = os.urandom(4).hex()
            self.staged[target] = target.parent / f"{_STAGE_PREFIX}{token}-{target.name}"
        return self.staged[target]

    def commit(self) -> list[Path]:
        """Move every staged file onto its target; return the targets written."""
        missing = [t for t, s in self.staged.items() if not s.is_file()]
        if missing:
            raise OutputError(f"{missing[0]}: was not written")
        for target in self.staged:
            if target.is_dir() and not target.is_symlink():
                raise OutputError(f"{target}: is a folder, where this run writes a file; "
                                  "move it or choose another name")
        with signals_held():
            for target, staged in self.staged.items():
                try:
                    os.replace(staged, target)
                except OSError as err:
                    raise OutputError(f"{target}: cannot write: {err.strerror or err}"
                                      ) from err
            self.committed = True
            if self.staged:
                OutputSet.last_committed = next(iter(self.staged)).parent
        return list(self.staged)

    def __exit__(self, exc_type: type[BaseException] | None, exc: BaseException | None,
                 tb: TracebackType | None) -> None:
        with signals_held():            # an interrupt now must not leave a staged file
            for staged in self.staged.values():
                try:
                    os.unlink(staged)
                except OSError:
                    pass
        if isinstance(exc, PlacerError) and not self.committed:
            text = str(exc)
            for target, staged in self.staged.items():
                text = text.replace(str(staged), str(target))
            if text != str(exc):     # a message names the file the user asked for
                raise type(exc)(text) from None
