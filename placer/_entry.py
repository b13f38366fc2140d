"""The ``placer`` command's first steps, before any heavy import.

An interrupt (SIGINT or SIGTERM) during start-up ends quietly (nothing has been written
yet), and the environment placer reads is checked here, so a bad value ends in one line
instead of a traceback from a library that reads it while importing.
"""

from __future__ import annotations

import os
import signal
import sys

#: SOURCE_DATE_EPOCH must be whole seconds from 1970 up to the end of year 9999.
MAX_EPOCH = 253_402_300_799


def _quiet_exit(signum: int, frame: object) -> None:
    sys.stderr.write("Interrupted; nothing written.\n")
    os._exit(130)


def check_environment(env: dict[str, str] | os._Environ[str] = os.environ) -> str | None:
    """The one-line problem with the environment placer reads, or None.

    Examples
    --------
    >>> check_environment({"SOURCE_DATE_EPOCH": "1700000000"}) is None
    True
    >>> check_environment({"SOURCE_DATE_EPOCH": "soon"}).split(":")[0]
    "SOURCE_DATE_EPOCH = 'soon' is not a time"
    """
    raw = env.get("SOURCE_DATE_EPOCH")
    if raw is None:
        return None
    text = raw.strip()
    if not (text.isascii() and text.isdigit() and len(text) <= 12
            and int(text) <= MAX_EPOCH):
        shown = raw if len(raw) <= 24 else raw[:24] + "..."
        return (f"SOURCE_DATE_EPOCH = {shown!r} is not a time: give whole seconds since 1970 "
                f"(0 to {MAX_EPOCH}), or unset it")
    return None


def main() -> None:
    """Entry point of the ``placer`` command."""
    signal.signal(signal.SIGINT, _quiet_exit)
    signal.signal(signal.SIGTERM, _quiet_exit)      # SIGTERM ends a start-up as Ctrl-C does
    if sys.argv[1:] == ["--version"]:              # no numpy, no CLI: the answer is here
        from placer import __version__

        sys.stdout.write(f"placer, version {__version__}\n")
        return
    problem = check_environment()
    if problem is not None:
        sys.stderr.write(f"Error: {problem}\n")
        sys.exit(1)
    from placer.cli import cli  # numpy, matplotlib, scipy ...

    # the quiet exit stays through argument parsing; each command takes Ctrl-C over
    # (as KeyboardInterrupt) when its own body starts
    try:
        cli(prog_name="placer")
    except SystemExit as done:
        if done.code == 130:
            # interrupted, and handled: an interrupt that passed through code the
            # interpreter ran for a C extension leaves a mark that makes the interpreter
            # end itself by SIGINT at shut-down, whatever exit code was asked
            signal.signal(signal.SIGINT, signal.SIG_IGN)
            for stream in (sys.stdout, sys.stderr):
                try:
                    stream.flush()
                except (OSError, ValueError):
                    pass
            os._exit(130)
        raise
    finally:
        # the command has finished (its outputs complete or removed): a signal during
        # the interpreter's shutdown must not end the process by the signal instead
        signal.signal(signal.SIGINT, signal.SIG_IGN)
        signal.signal(signal.SIGTERM, signal.SIG_IGN)
