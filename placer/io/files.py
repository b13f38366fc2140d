"""Reading input files with bounds: bytes up to a limit (checked before reading), UTF-8
text, and TOML whose nesting is measured before the parser sees it."""

from __future__ import annotations

import mmap
import os
import stat
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

from placer.errors import LimitError, PlacerError
from placer.limits import MAX_FILE_BYTES

__all__ = ["read_limited", "read_text", "mapped", "regular", "toml_depth"]


def regular(path: Path, what: str, error: type[PlacerError]) -> None:
    """Refuse, without opening it, a ``path`` that is missing or not a regular file."""
    try:
        st = os.stat(path)
    except OSError as err:
        raise error(f"{path}: cannot read: {err.strerror or err}") from err
    if not stat.S_ISREG(st.st_mode):
        raise error(f"{path}: not a regular file (a device, pipe or folder); save the "
                    f"{what} to a file and give that")


def _open_regular(path: Path, limit: int, what: str, error: type[PlacerError]
                  ) -> tuple[int, int]:
    """An open descriptor and the size of a regular file of at most ``limit`` bytes.

    Opened without waiting (a pipe with no writer does not hang) and checked before
    anything is read: a device (``/dev/zero``), a pipe or a folder is refused, and so is
    a file over the limit (``LimitError``).
    """
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    except OSError as err:
        raise error(f"{path}: cannot read: {err.strerror or err}") from err
    try:
        st = os.fstat(fd)
        if not stat.S_ISREG(st.st_mode):
            raise error(f"{path}: not a regular file (a device, pipe or folder); save the "
                        f"{what} to a file and give that")
        if st.st_size > limit:
            raise LimitError(f"{path}: file is {st.st_size} bytes, the limit for a {what} is "
                             f"{limit}")
    except BaseException:
        os.close(fd)
        raise
    return fd, st.st_size


def read_limited(path: Path, limit: int, what: str, error: type[PlacerError]) -> bytes:
    """The bytes of a regular file of at most ``limit`` bytes, or one line naming it (the
    checks of :func:`_open_regular`); at most ``limit`` + 1 bytes are ever read (a file
    growing meanwhile).

    Raises
    ------
    LimitError
        Past the limit.
    PlacerError
        ``error`` when the file cannot be read or is not a regular file.
    """
    fd, _ = _open_regular(path, limit, what, error)
    try:
        chunks, got = [], 0
        while got <= limit:
            chunk = os.read(fd, min(1 << 20, limit + 1 - got))
            if not chunk:
                break
            chunks.append(chunk)
            got += len(chunk)
        if got > limit:
            raise LimitError(f"{path}: file is more than {limit} bytes, the limit for a "
                             f"{what}")
        return b"".join(chunks)
    except OSError as err:
        raise error(f"{path}: cannot read: {err.strerror or err}") from err
    finally:
        os.close(fd)


@contextmanager
def mapped(path: Path, limit: int, what: str, error: type[PlacerError]
           ) -> Iterator[bytes | mmap.mmap]:
    """A regular file of at most ``limit`` bytes, mapped read-only: a parser that stops
    early (a limit reached, damage found) touches only the pages it read, so a large
    hostile file costs neither the time nor the memory of reading it whole. The checks
    of :func:`_open_regular`."""
    fd, size = _open_regular(path, limit, what, error)
    try:
        if size == 0:
            yield b""
            return
        try:
            view = mmap.mmap(fd, size, access=mmap.ACCESS_READ)
        except (OSError, ValueError) as err:
            raise error(f"{path}: cannot read: {getattr(err, 'strerror', None) or err}"
                        ) from err
        try:
            yield view
        finally:
            view.close()
    finally:
        os.close(fd)


def read_text(path: Path, what: str, error: type[PlacerError]) -> str:
    """A UTF-8 text file of at most MAX_FILE_BYTES, or ``error`` with one line."""
    raw = read_limited(path, MAX_FILE_BYTES, what, error)
    try:
        return raw.decode("utf-8").removeprefix("\ufeff")   # one byte-order mark: allowed
    except UnicodeDecodeError as err:
        raise error(f"{path}: not a UTF-8 text file (byte {err.start})") from err


def toml_depth(text: str) -> int:
    """How deeply TOML ``text`` nests (brackets plus dotted-key parts), found by one pass
    over the characters outside strings and comments -- before the parser, whose cost
    grows faster than the text on hostile nesting.

    Examples
    --------
    >>> toml_depth('a = 1.5\\n[b.c]\\nd = [[1, 2], {e.f = "x.y"}]\\n')
    3
    """
    depth = 0
    deepest = 0
    dots = 0
    stack: list[str] = []
    in_key = True
    i, n = 0, len(text)
    while i < n:
        ch = text[i]
        if text.startswith('"""', i) or text.startswith("'''", i):
            end = text.find(text[i:i + 3], i + 3)
            i = n if end < 0 else end + 3
            continue
        if ch in "\"'":
            j = i + 1
            while j < n and text[j] != ch and text[j] != "\n":
                j += 2 if (ch == '"' and text[j] == "\\") else 1
            i = j + 1
            continue
        if ch == "#":
            end = text.find("\n", i)
            i = n if end < 0 else end
            continue
        if ch == "\n":
            if not stack:
                in_key, dots = True, 0
        elif ch in "[{":
            stack.append(ch)
            depth += 1
            in_key = ch == "{" or (in_key and len(stack) <= 2)
        elif ch in "]}":
            if stack:
                stack.pop()
            depth = max(depth - 1, 0)
        elif ch == "=":
            in_key = False
        elif ch == "," and stack and stack[-1] == "{":
            in_key, dots = True, 0
        elif ch == "." and in_key:
            dots += 1
        deepest = max(deepest, depth + dots)
        i += 1
    return deepest
