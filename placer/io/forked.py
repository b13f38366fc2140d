"""Work in a forked child process, under the signal rules every child of placer keeps.

A child ignores Ctrl-C (its parent handles it), takes SIGTERM's default action (its
parent stops it so) and ends when its parent ends, however the parent ends (on Linux the
kernel sends it SIGTERM). SIGINT and SIGTERM are held back across the fork and let
through only once the child's own handlers are set: a handler inherited from the parent
(one that raises) must never run in the child, where it would unwind into the parent's
copied stack.

The search's second worker (:mod:`placer.search._driver`) and the pictures ``arrange``
draws while it routes (:func:`aside`) start here.
"""

from __future__ import annotations

import os
import signal
import sys
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any

__all__ = ["HELD", "held", "blocked", "child_start", "end_with_parent", "Aside", "aside"]

#: Signals held back across a fork.
HELD = ("SIGINT", "SIGTERM")


def held() -> set[Any]:
    """The signals of :data:`HELD`."""
    return {getattr(signal, name) for name in HELD}


@contextmanager
def blocked() -> Iterator[None]:
    """:data:`HELD` blocked for the block's duration (around a fork)."""
    if not hasattr(signal, "pthread_sigmask"):
        yield
        return
    before = signal.pthread_sigmask(signal.SIG_BLOCK, held())
    try:
        yield
    finally:
        signal.pthread_sigmask(signal.SIG_SETMASK, before)


def end_with_parent(parent: int) -> None:
    """Have the kernel send this process SIGTERM when its parent ends, however the parent
    ends (killed outright too), so no child works on alone (Linux; elsewhere the parent's
    clean-up stops it). If the parent is already gone, end now."""
    if sys.platform.startswith("linux"):
        import ctypes

        try:
            libc = ctypes.CDLL(None, use_errno=True)
            libc.prctl(1, int(signal.SIGTERM), 0, 0, 0)      # PR_SET_PDEATHSIG = 1
        except (OSError, AttributeError):
            pass
    if os.getppid() != parent:
        os._exit(0)


def child_start(parent: int) -> None:
    """A child's first step: Ctrl-C ignored, SIGTERM the system's default, tied to its
    parent, and only then the held signals let through."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    signal.signal(signal.SIGTERM, signal.SIG_DFL)
    end_with_parent(parent)
    if hasattr(signal, "pthread_sigmask"):
        signal.pthread_sigmask(signal.SIG_UNBLOCK, held())


class Aside:
    """A function running in a forked child (or not at all, where there is no fork)."""

    def __init__(self, pid: int | None) -> None:
        self.pid = pid
        self.ok: bool | None = None if pid is not None else False

    def wait(self) -> bool:
        """Whether the function ran to its end without an error (waits for it)."""
        if self.ok is None:
            assert self.pid is not None
            try:
                _, status = os.waitpid(self.pid, 0)
                self.ok = os.waitstatus_to_exitcode(status) == 0
            except ChildProcessError:
                self.ok = False
        return self.ok

    def stop(self) -> None:
        """End the child if it still runs, and reap it."""
        if self.ok is None and self.pid is not None:
            try:
                os.kill(self.pid, signal.SIGTERM)
            except ProcessLookupError:
                pass
            self.wait()


@contextmanager
def aside(work: Callable[[], None] | None) -> Iterator[Aside]:
    """Run ``work`` in a forked child while the block runs; on leaving the block the
    child has ended (stopped if the block raised, so that nothing it writes outlives
    the parent's clean-up). ``Aside.wait`` tells whether it succeeded: on failure (or
    with no fork on this system, or no ``work``) the caller does the work itself."""
    if work is None or not hasattr(os, "fork"):
        yield Aside(None)
        return
    parent = os.getpid()
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()                  # else the child holds a copy of the buffer
        except (OSError, ValueError):
            pass
    with blocked():
        pid = os.fork()
        if pid == 0:                        # the child
            code = 1
            try:
                child_start(parent)
                work()
                code = 0
            except BaseException:           # noqa: BLE001 - the parent redoes the work
                code = 1
            finally:
                os._exit(code)
    job = Aside(pid)
    try:
        yield job
    except BaseException:
        job.stop()
        raise
    job.wait()
