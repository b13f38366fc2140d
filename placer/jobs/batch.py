"""A chip's worth of matched blocks in one run: ``arrange`` on every spec, several at a
time, each in its own process and its own output folder.

Each block is an ordinary ``arrange`` run (its own set-or-nothing output, lock and
interrupt handling), started as ``python -m placer arrange``; this module only chooses
the specs, runs them ``jobs`` at a time and reads back what each wrote.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path

from placer.errors import PlacerError, SpecError
from placer.io.files import regular
from placer.io.spec import NAME_RE

__all__ = ["BlockRun", "find_specs", "run_batch", "finished_whole", "MAX_SPECS"]

#: Specs one batch runs at most (a chip has dozens of matched blocks, not thousands).
MAX_SPECS = 1000


@dataclass(frozen=True)
class BlockRun:
    """One block of a batch: where its outputs went and what its report says."""

    name: str
    spec: str
    exit_code: int
    wall_s: float
    error: str = ""
    core: tuple[int, int] | None = None
    units: int = 0
    devices: int = 0
    linear_ppm: float | None = None
    quadratic_ppm: float | None = None
    random_sigma_ppm: float | None = None
    block_um2: float | None = None
    stopped: str = ""


def find_specs(paths: list[Path]) -> list[Path]:
    """The spec files named, a folder standing for its ``*.toml`` files (sorted).

    Raises
    ------
    PlacerError
        When a path names no spec, two specs share a name (their output folders would
        collide) or there are more than ``MAX_SPECS``.
    """
    found: list[Path] = []
    for p in paths:
        if p.is_dir():
            inside = sorted(q for q in p.glob("*.toml") if q.is_file())
            if not inside:
                raise PlacerError(f"{p}: a folder with no .toml spec in it")
            found += inside
        else:
            regular(p, "spec", SpecError)     # a pipe or a device: refused, not run
            found.append(p)
    if len(found) > MAX_SPECS:
        raise PlacerError(f"{len(found)} specs; a batch runs at most {MAX_SPECS}")
    seen: dict[str, Path] = {}
    for p in found:
        if not NAME_RE.match(p.stem):
            raise PlacerError(f"{p}: a spec's file name names its output folder; use letters, "
                              "digits and _ (starting with a letter)")
        if p.stem in seen:
            raise PlacerError(f"{p} and {seen[p.stem]} would both write {p.stem}/; rename one")
        seen[p.stem] = p
    return found


def finished_whole(code: int, err: str, folder: Path, started: float) -> bool:
    """Whether a block's run left its whole set: it ended well, or the interrupt ended it
    after its files moved in -- saying so (exit 130), or killed by the batch's SIGTERM in
    the moment between its command's end and its process's end, after a move-in of this
    run (its report.json is newer than its start; a move-in holds the signals, so a
    report moved in means the whole set did)."""
    if code == 0 or (code == 130 and "are complete" in err):
        return True
    if code != -signal.SIGTERM:
        return False
    try:
        return (folder / "report.json").stat().st_mtime >= started - 1.0
    except OSError:
        return False


def _read(name: str, spec: Path, code: int, wall: float, err: str, folder: Path) -> BlockRun:
    if code != 0:
        lines = [ln for ln in err.splitlines() if ln.strip()]
        return BlockRun(name, str(spec), code, wall, lines[-1] if lines else f"exit {code}")
    r = json.loads((folder / "report.json").read_text())
    pairs = r["grade"]["pairs"]

    def worst(key: str) -> float:
        return max((abs(p[key]) for p in pairs), default=0.0)

    area = (r.get("layout") or {}).get("area") or {}
    devices = r["grade"]["devices"]
    return BlockRun(name, str(spec), 0, wall, core=(r["core_shape"][0], r["core_shape"][1]),
                    units=sum(d["units"] for d in devices), devices=len(devices),
                    linear_ppm=worst("linear_ppm"), quadratic_ppm=worst("quadratic_ppm"),
                    random_sigma_ppm=worst("random_sigma_ppm"),
                    block_um2=area.get("block_um2"), stopped=r["stopped"])


def run_batch(specs: list[Path], out: Path, *, time_limit_s: float, seed: int, jobs: int,
              force: bool, progress: bool = False,
              finished: list[BlockRun] | None = None) -> list[BlockRun]:
    """Arrange every spec into ``out/<spec name>/``, ``jobs`` at a time.

    Parameters
    ----------
    specs : list of Path
        The spec files (:func:`find_specs`).
    out : Path
        The batch's folder; each block writes its own folder inside it.
    time_limit_s : float
        Each block's search time limit.
    seed : int
        Each block's seed.
    jobs : int
        Blocks run at once (each in its own process).
    force : bool
        Replace a previous run's files in each block's folder.
    progress : bool
        Print a line to standard error as each block ends.
    finished : list of BlockRun, optional
        Each block that completes is appended here as it ends, so that a caller whose
        batch is interrupted knows which blocks' folders are whole.

    Returns
    -------
    list of BlockRun
        In the order of ``specs``; a block that failed carries its exit code and its
        last error line, and its folder holds nothing of the run.
    """
    # each block imports the very package this run does: -P keeps the working folder
    # (a source checkout, say) off the front of its path, and the package's own root
    # goes first
    root = str(Path(__file__).resolve().parents[2])      # holds placer/ itself
    env = {**os.environ,
           "PYTHONPATH": os.pathsep.join(p for p in (root, os.environ.get("PYTHONPATH"))
                                         if p)}
    running: set[subprocess.Popen[str]] = set()
    lock = threading.Lock()
    stop = threading.Event()

    def one(spec: Path) -> BlockRun:
        folder = out / spec.stem
        args = [sys.executable, "-P", "-m", "placer", "arrange", str(spec), "--out", str(folder),
                "--time-limit", f"{time_limit_s:g}", "--seed", str(seed), "--quiet",
                *(["--force"] if force else [])]
        if stop.is_set():
            return BlockRun(spec.stem, str(spec), 130, 0.0, "not started: interrupted")
        t0 = time.monotonic()
        started = time.time()
        proc = subprocess.Popen(args, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE,
                                text=True, start_new_session=True, env=env)
        with lock:
            running.add(proc)
        try:
            _, err = proc.communicate()
        finally:
            with lock:
                running.discard(proc)
        run = _read(spec.stem, spec, proc.returncode, time.monotonic() - t0, err, folder)
        whole = finished_whole(proc.returncode, err, folder, started)
        if finished is not None and whole:
            with lock:
                finished.append(run)
        if progress:
            sys.stderr.write(f"{spec.stem}: {'done' if run.exit_code == 0 else run.error}\n")
        return run

    pool = ThreadPoolExecutor(max_workers=max(1, jobs))
    try:
        futures = [pool.submit(one, s) for s in specs]
        return [f.result() for f in futures]
    except KeyboardInterrupt:
        # each block was started in a session of its own (a terminal's Ctrl-C reaches
        # this process only): end them as SIGTERM ends an arrange run, set or nothing
        stop.set()
        with lock:
            for proc in running:
                try:
                    os.killpg(proc.pid, 15)
                except OSError:
                    pass
        raise
    finally:
        pool.shutdown(wait=True, cancel_futures=True)
