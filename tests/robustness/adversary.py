"""Adversarial robustness run of placer's command line, written from the README alone.

It builds hostile but structurally valid inputs -- TOML specs from a grammar of the
documented tables with hostile values, GDSII libraries written record by record, CSV
files of unit centres, pattern texts, random option values -- and hostile situations
(two runs on one --out, interrupts, a full disk, odd environments), runs the installed
``placer`` console script on each in a folder of its own (per-case timeout, address-space
cap) and classifies every outcome:

ok            exit 0 and the complete set of outputs
clear error   exit 1 or 2 with exactly one ``Error:`` line and no traceback
traceback     a ``Traceback`` in the output, or an exit status outside 0/1/2/130
hang          the case ran past its timeout (or left a process running)
memory error  MemoryError, an allocation failure, or killed by the memory cap
half-written  outputs partly present after a failure or an interrupt, a staging folder
              or an empty --out left behind, stale files after --force
wrong result  a figure that disagrees with another route to it (grade of the written
              pattern or GDSII against report.json, reruns, equivalent inputs), a
              refused run that still wrote files, an invalid input accepted

    python -m tests.robustness.adversary [--cases N] [--seed S] [--update-readme]

Every failing case's inputs and commands are kept under --keep (default
/tmp/adversary-failures/CASE/) so that it can be run again by hand.
"""

from __future__ import annotations

import argparse
import errno
import hashlib
import json
import math
import os
import random
import re
import resource
import shlex
import shutil
import signal
import struct
import subprocess
import sys
import tempfile
import time
import tomllib
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
SAMPLES = ROOT / "samples"
TEMPLATES = ROOT / "templates"
PLACER = shutil.which("placer") or str(Path(sys.executable).parent / "placer")

CLASSES = ["ok", "clear", "traceback", "hang", "memory", "half", "wrong"]
FAILING = ("traceback", "hang", "memory", "half", "wrong")
SEVERITY = {name: i for i, name in enumerate(["ok", "clear", "wrong", "half", "traceback",
                                               "memory", "hang"])}
HEADINGS = ["ok", "clear error", "tracebacks", "hangs", "memory errors", "half-written sets",
            "wrong results"]
FAMILIES = ["spec", "gds", "csv", "pattern", "cli", "concurrency", "interrupt", "disk", "env",
            "movein", "sigterm", "shortwrite", "special", "bomb"]
TITLES = {
    "spec": "spec (TOML grammar, hostile values)",
    "gds": "GDSII (record-level, hostile contents)",
    "csv": "CSV of unit centres",
    "pattern": "pattern text",
    "cli": "command line (option values)",
    "concurrency": "two runs on one --out",
    "interrupt": "SIGINT / SIGTERM during arrange",
    "disk": "full disk (small tmpfs)",
    "env": "environment",
    "movein": "SIGINT / SIGTERM during the move-in, every writing command",
    "sigterm": "SIGTERM / Ctrl-C at any moment, every writing command",
    "shortwrite": "writes cut short (ulimit -f), every writing command",
    "special": "special files as inputs (devices, FIFO, folder)",
    "bomb": "header bombs (refused within 1 s CPU, 200 MB)",
}

MEMORY_CAP = 2 << 30          # address-space cap of every run, bytes
SLOW_REFUSAL_S = 5.0          # a refusal slower than this is listed (the aim is ~1 s)
HEAVY_REFUSAL_MB = 500.0      # ... and one that needed more memory than this
ARRANGE_OUTPUTS = ("pattern.txt", "report.json", "pattern.gds", "pattern.sp", "pattern.png",
                   "pattern.svg")
REPAIR_OUTPUTS = ("repaired.txt", "repaired.gds", "repaired.png", "repaired.svg", "repair.json")
CANDIDATE = re.compile(r"candidate-\d+\.(txt|png|svg)")
MEMORY_MARKERS = ("MemoryError", "Unable to allocate", "Cannot allocate memory",
                  "out of memory", "std::bad_alloc")
PAIR_FIGURES = ("centroid_distance_um", "linear_ppm", "quadratic_ppm", "correlated_sigma_ppm",
                "white_sigma_ppm", "random_sigma_ppm")
SAMPLE_SPECS = ["bias_mirror", "input_pair", "split_mirror", "ref_ladder", "sar_cdac",
                "fc_amp", "lshape_cdac", "pinned_mirror"]


# --------------------------------------------------------------------------- running


@dataclass
class Run:
    """One finished placer process."""

    args: list[str]
    rc: int | None
    out: str
    err: str
    seconds: float
    maxrss_mb: float
    hung: bool = False
    leftover: bool = False       # a process of its group still ran after it exited
    cpu_s: float = 0.0           # user + system CPU of the process and its children


@dataclass
class Proc:
    popen: subprocess.Popen
    args: list[str]
    start: float
    out_path: Path
    err_path: Path


@dataclass
class Outcome:
    cls: str = "ok"
    reasons: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    def flag(self, cls: str, reason: str) -> None:
        if SEVERITY[cls] > SEVERITY[self.cls]:
            self.cls = cls
        if cls in FAILING:
            self.reasons.append(f"{cls}: {reason}")


def _child_setup(umask: int | None, fsize: int | None = None) -> Callable[[], None]:
    def setup() -> None:
        resource.setrlimit(resource.RLIMIT_AS, (MEMORY_CAP, MEMORY_CAP))
        if fsize is not None:         # ulimit -f: a write past it fails with EFBIG
            resource.setrlimit(resource.RLIMIT_FSIZE, (fsize, fsize))
        # a child of a background job inherits SIGINT ignored: give it the default back
        signal.signal(signal.SIGINT, signal.SIG_DFL)
        signal.signal(signal.SIGTERM, signal.SIG_DFL)
        if umask is not None:
            os.umask(umask)
    return setup


def base_env() -> dict[str, str]:
    env = dict(os.environ)
    env.pop("SOURCE_DATE_EPOCH", None)
    for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
        env[var] = "1"              # keep every run light on a shared machine
    env.setdefault("MPLBACKEND", "Agg")
    return env


class Ctx:
    """The folder of one case, the commands it ran and its outcome."""

    def __init__(self, family: str, name: str, folder: Path, timeout: float) -> None:
        self.family = family
        self.name = name
        self.dir = folder
        self.timeout = timeout
        self.outcome = Outcome()
        self.script: list[str] = []
        self.inputs: list[str] = []
        self.runs: list[Run] = []
        self.skipped = False
        self.index = 0
        self.seed = 0
        self.forced: str | None = None

    def pick(self, variants: list[str]) -> str:
        """Variants in a seed-shuffled round robin: N cases cover min(N, all) variants."""
        if self.forced is not None:
            if self.forced not in variants:
                raise ValueError(f"{self.family} has no variant {self.forced!r}")
            return self.forced
        order = sorted(dict.fromkeys(variants))
        random.Random(f"{self.seed}:{self.family}:order").shuffle(order)
        return order[self.index % len(order)]

    # files -----------------------------------------------------------------
    def write(self, rel: str, data: bytes | str) -> Path:
        path = self.dir / rel
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_bytes(data.encode() if isinstance(data, str) else data)
        self.inputs.append(rel)
        return path

    def note(self, text: str) -> None:
        self.script.append("# " + text.replace("\n", " "))

    # processes -------------------------------------------------------------
    def start(self, args: list[str], env: dict[str, str] | None = None,
              umask: int | None = None, stdout: int | None = None,
              launcher: list[str] | None = None, fsize: int | None = None) -> Proc:
        full_env = base_env()
        changed = dict(env or {})
        for key, value in changed.items():
            if value is None:
                full_env.pop(key, None)
            else:
                full_env[key] = value
        prefix = ""
        if changed:
            prefix = "env " + " ".join(f"{k}={shlex.quote(v)}" if v is not None else f"-u {k}"
                                       for k, v in changed.items()) + " "
        if umask is not None:
            self.script.append(f"(umask {umask:03o}; {prefix}placer {shlex.join(args)})")
        else:
            self.script.append(f"{prefix}placer {shlex.join(args)}")
        logs = Path(tempfile.mkdtemp(prefix="log-", dir=self.dir.parent))
        out_path, err_path = logs / "stdout", logs / "stderr"
        with open(err_path, "wb") as err_file:
            if stdout is None:
                with open(out_path, "wb") as out_file:
                    popen = subprocess.Popen(
                        [*(launcher or [PLACER]), *args], cwd=self.dir, env=full_env,
                        stdin=subprocess.DEVNULL, stdout=out_file, stderr=err_file,
                        preexec_fn=_child_setup(umask, fsize), start_new_session=True)
            else:
                out_path.write_bytes(b"")
                popen = subprocess.Popen(
                    [*(launcher or [PLACER]), *args], cwd=self.dir, env=full_env,
                    stdin=subprocess.DEVNULL, stdout=stdout, stderr=err_file,
                    preexec_fn=_child_setup(umask, fsize), start_new_session=True)
        return Proc(popen, args, time.monotonic(), out_path, err_path)

    def wait(self, proc: Proc, timeout: float | None = None) -> Run:
        deadline = proc.start + (timeout or self.timeout)
        pid = proc.popen.pid
        hung = False
        while True:
            done, status, usage = os.wait4(pid, os.WNOHANG)
            if done:
                break
            if time.monotonic() > deadline:
                hung = True
                _kill_group(pid)
                done, status, usage = os.wait4(pid, 0)
                break
            time.sleep(0.01)
        seconds = time.monotonic() - proc.start
        rc = os.waitstatus_to_exitcode(status)
        proc.popen.returncode = rc
        leftover = False
        if _group_alive(pid):
            time.sleep(0.5)
            if _group_alive(pid):
                leftover = True
                _kill_group(pid)
        out = proc.out_path.read_bytes().decode("utf-8", "replace")
        err = proc.err_path.read_bytes().decode("utf-8", "replace")
        shutil.rmtree(proc.out_path.parent, ignore_errors=True)
        run = Run(proc.args, rc, out, err, seconds, usage.ru_maxrss / 1024.0, hung, leftover,
                  usage.ru_utime + usage.ru_stime)
        self.runs.append(run)
        return run

    def placer(self, args: list[str], **kw) -> Run:
        timeout = kw.pop("timeout", None)
        return self.wait(self.start(args, **kw), timeout)

    # classification --------------------------------------------------------
    def judge(self, run: Run, must_refuse: str = "", allow_130: bool = False) -> str:
        """Classify one process; returns ok / clear / or a failing class (also recorded)."""
        text = run.out + run.err
        what = f"`placer {_show(run.args)}`"
        if run.hung:
            self.outcome.flag("hang", f"{what} ran past {self.timeout:.0f} s")
            return "hang"
        if run.leftover:
            self.outcome.flag("hang", f"{what} exited but left a process of its group running")
        if any(m in text for m in MEMORY_MARKERS) or (run.rc == -signal.SIGKILL):
            self.outcome.flag("memory", f"{what}: {_tail(text)}")
            return "memory"
        codes = (0, 1, 2, 130) if allow_130 else (0, 1, 2)
        if "Traceback" in text or "Exception ignored" in text or run.rc not in codes:
            self.outcome.flag("traceback", f"{what} exit {run.rc}: {_tail(text)}")
            return "traceback"
        if run.rc in (1, 2):
            errors = [ln for ln in run.err.splitlines() if ln.startswith("Error:")]
            if run.rc == 1 and len(errors) != 1:
                self.outcome.flag("wrong", f"{what} exit 1 with {len(errors)} `Error:` lines "
                                           f"on stderr: {_tail(run.err)}")
                return "wrong"
            if run.rc == 2 and not errors and "Usage:" not in run.err:
                self.outcome.flag("wrong", f"{what} exit 2 without a usage message or an "
                                           f"`Error:` line: {_tail(run.err)}")
                return "wrong"
            if run.seconds > SLOW_REFUSAL_S or run.maxrss_mb > HEAVY_REFUSAL_MB:
                self.outcome.notes.append(
                    f"slow/heavy refusal: {what} took {run.seconds:.1f} s, "
                    f"{run.maxrss_mb:.0f} MB: {_tail(run.err)}")
            self.outcome.flag("clear", "")
            return "clear"
        if run.rc == 0 and must_refuse:
            self.outcome.flag("wrong", f"{what} accepted an invalid input ({must_refuse})")
            return "wrong"
        return "ok"


def _show(args: list[str]) -> str:
    """A command line for messages: long arguments shortened (command.sh has them whole)."""
    return shlex.join(a if len(a) <= 60 else f"{a[:20]}...({len(a)} chars)" for a in args)


def _tail(text: str, n: int = 300) -> str:
    lines = [ln for ln in text.strip().splitlines() if ln.strip()]
    tb = [ln for ln in lines if ln.startswith("Traceback")]
    if tb:
        return " | ".join(ln.strip()[:150] for ln in lines[-3:])[-n:]
    errors = [ln for ln in lines if ln.startswith("Error:")]
    if errors:
        return " | ".join(errors)[:n]
    return " | ".join(lines[-2:])[-n:]


def _kill_group(pid: int) -> None:
    try:
        os.killpg(pid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError):
        pass


def _group_alive(pid: int) -> bool:
    try:
        os.killpg(pid, 0)
        return True
    except (ProcessLookupError, PermissionError):
        return False


# --------------------------------------------------------------------------- output checks


def snapshot(path: Path) -> dict[str, tuple] | None:
    """Names, sizes and digests of everything under path (None if it does not exist)."""
    try:
        if not path.exists():
            return None
        if not path.is_dir():
            return {"": ("file", path.stat().st_size)}
    except OSError:             # a name too long, a component that is a file ...
        return None
    found: dict[str, tuple] = {}
    for p in sorted(path.rglob("*")):
        rel = p.relative_to(path).as_posix()
        try:
            if p.is_dir():
                found[rel] = ("dir",)
            else:
                found[rel] = ("file", p.stat().st_size,
                              hashlib.sha1(p.read_bytes()).hexdigest())
        except OSError:
            found[rel] = ("unreadable",)
    return found


def expected_set(kind: str, out: Path, note: str = "") -> tuple[set[str], set[str], list[str]]:
    """(required, allowed, problems) of a finished run of ``kind`` in ``out``."""
    problems: list[str] = []
    names = {p.name for p in out.iterdir()} if out.is_dir() else set()
    if kind == "arrange":
        required = set(ARRANGE_OUTPUTS)
        report = None
        if "report.json" in names:
            try:
                report = json.loads((out / "report.json").read_text())
            except (ValueError, UnicodeDecodeError) as exc:
                problems.append(f"report.json does not parse: {exc}")
        if isinstance(report, dict):
            if report.get("budget"):
                required.add("budget.png")
            cands = report.get("candidates") or []
            required |= {f"candidate-{i}.txt" for i in range(1, len(cands) + 1)}
            # a picture beside each candidate is optional
            optional = {f"candidate-{i}.png" for i in range(1, len(cands) + 1)}
        else:
            optional = set()
        allowed = set(required) | optional
        if report is None:      # cannot tell: allow the optional ones
            allowed |= {"budget.png"} | {n for n in names if CANDIDATE.fullmatch(n)}
        return required, allowed, problems
    if kind == "repair":
        required = set(REPAIR_OUTPUTS)
        if note and "repaired.gds not written" in note:
            required.discard("repaired.gds")   # the layout's pitch cannot hold the cell: noted
        # a GDSII layout's repair may add the user's own file with the swaps applied
        return required, set(REPAIR_OUTPUTS) | {"repaired-own.gds"}, problems
    if kind == "draw":
        stems = {n.rsplit(".", 1)[0] for n in names if n.endswith(".gds")}
        required = {f"{s}.{e}" for s in stems for e in ("gds", "png", "svg")}
        if not stems:
            required = {"<name>.gds", "<name>.png", "<name>.svg"}
        return required, set(required), problems
    if kind == "compare":
        stems = {n[:-len("-compare.png")] for n in names if n.endswith("-compare.png")}
        required = {f"{s}-compare.{e}" for s in stems for e in ("png", "pdf")}
        if not stems:
            required = {"<name>-compare.png", "<name>-compare.pdf"}
        return required, set(required), problems
    raise ValueError(kind)


def check_outputs(ctx: Ctx, run: Run, kind: str | None, out_rel: str | None,
                  before: dict | None, force: bool, must_refuse: str = "") -> str:
    """Judge one run that writes --out: its exit and the state of the folder after it."""
    verdict = ctx.judge(run, must_refuse, allow_130=True)
    if kind is None or out_rel is None:
        return verdict
    out = ctx.dir / out_rel
    try:
        after = snapshot(out)
    except OSError:
        return verdict
    what = f"`placer {_show(run.args)}`"
    created = before is None
    if run.rc == 0:
        if after is None or not out.is_dir():
            ctx.outcome.flag("half", f"{what} exit 0 but {out_rel} is missing")
            return "half"
        required, allowed, problems = expected_set(kind, out, run.err)
        names = {p.name for p in out.iterdir()}
        missing = sorted(required - names)
        hidden = sorted(n for n in names if n.startswith(".") and n not in (before or {}))
        for p in problems:
            ctx.outcome.flag("half", f"{what}: {p}")
        if missing:
            ctx.outcome.flag("half", f"{what} exit 0 but {out_rel} lacks {', '.join(missing)}")
        if hidden:
            ctx.outcome.flag("half", f"{what} exit 0 but left {', '.join(hidden)} in {out_rel}")
        old = before or {}
        if not force:
            changed = [n for n, v in old.items() if "/" not in n and after.get(n) != v]
            if changed:
                ctx.outcome.flag("wrong", f"{what} overwrote {', '.join(changed)} without "
                                          "--force")
        stale = sorted(n for n in names - allowed if not n.startswith(".")
                       and n in old and after.get(n) == old.get(n)
                       and _output_like(kind, n))
        if force and stale:
            ctx.outcome.flag("half", f"{what} --force left stale {', '.join(stale)} of the "
                                     "previous run")
        return verdict
    # a failure, a usage error or an interrupt: the folder must be as it was
    if after == before:
        return verdict
    if run.rc == 130 and after is not None and out.is_dir():
        required, _, problems = expected_set(kind, out)
        names = {p.name for p in out.iterdir()}
        changed = {n for n in names if (before or {}).get(n) != after.get(n)}
        hidden = {n for n in changed if n.startswith(".")}
        if required <= names and not hidden and not problems:
            return verdict         # a complete set, then exit 130: allowed
    if created and after == {}:
        ctx.outcome.flag("half", f"{what} exit {run.rc} left an empty {out_rel} it created")
        return "half"
    diff = _diff(before, after)
    if run.rc in (1, 2) and after is not None and out.is_dir():
        required, _, problems = expected_set(kind, out)
        names = {p.name for p in out.iterdir()}
        touched = {n for n in required if (before or {}).get(n) != after.get(n)}
        if required <= names and touched and not problems:
            ctx.outcome.flag("wrong", f"{what} was refused (exit {run.rc}) yet wrote a "
                                      f"complete set: {diff}")
            return "wrong"
    ctx.outcome.flag("half", f"{what} exit {run.rc} changed {out_rel}: {diff}")
    return "half"


def _output_like(kind: str, name: str) -> bool:
    if kind == "arrange":
        return name in ARRANGE_OUTPUTS or name == "budget.png" or bool(CANDIDATE.fullmatch(name))
    return True


def _diff(before: dict | None, after: dict | None) -> str:
    if after is None:
        return "folder removed"
    b = before or {}
    added = sorted(set(after) - set(b))
    gone = sorted(set(b) - set(after))
    changed = sorted(n for n in set(after) & set(b) if after[n] != b[n])
    parts = []
    if before is None:
        parts.append("created the folder")
    if added:
        parts.append("added " + ", ".join(added[:8]) + (" ..." if len(added) > 8 else ""))
    if gone:
        parts.append("removed " + ", ".join(gone[:8]))
    if changed:
        parts.append("changed " + ", ".join(changed[:8]))
    return "; ".join(parts) or "no visible change"


def parse_json(text: str) -> object | None:
    text = text.strip()
    try:
        return json.loads(text)
    except ValueError:
        start = text.find("{")
        if start < 0:
            return None
        try:
            return json.loads(text[start:])
        except ValueError:
            return None


def compare_grades(ref: dict, got: dict, tol: float, names_too: bool) -> list[str]:
    """Differences between two grade dictionaries' pair figures and worst pairs."""
    problems: list[str] = []
    try:
        rp = {(p["a"], p["b"]): p for p in ref["pairs"]}
        gp = {(p["a"], p["b"]): p for p in got["pairs"]}
    except (KeyError, TypeError) as exc:
        return [f"no pairs to compare ({exc})"]
    if set(rp) != set(gp):
        # the same pair may come the other way round
        flip = {(b, a): p for (a, b), p in gp.items()}
        if set(rp) == set(flip):
            gp = flip
        else:
            return [f"pairs differ: {sorted(rp)[:4]} vs {sorted(gp)[:4]}"]
    for key, pr in rp.items():
        pg = gp[key]
        for f in PAIR_FIGURES:
            a, b = pr.get(f), pg.get(f)
            if isinstance(a, int | float) and isinstance(b, int | float):
                if not _close(a, b, tol):
                    problems.append(f"{key[0]}/{key[1]} {f}: {a!r} vs {b!r}")
    worst_r, worst_g = ref.get("worst") or {}, got.get("worst") or {}
    for figure, name in worst_r.items():
        other = worst_g.get(figure)
        if other is None:
            problems.append(f"worst {figure} missing")
            continue
        if names_too and name != other:
            va, vb = _pair_value(ref, name, figure), _pair_value(got, other, figure)
            if va is None or vb is None or not _close(va, vb, tol):
                problems.append(f"worst {figure}: {name} ({va}) vs {other} ({vb})")
    return problems[:6]


def _pair_value(grade: dict, name: str, figure: str) -> float | None:
    if not isinstance(name, str) or "/" not in name:
        return None
    a, b = name.split("/", 1)
    for p in grade.get("pairs", []):
        if {p.get("a"), p.get("b")} == {a, b}:
            v = p.get(figure)
            return abs(v) if isinstance(v, int | float) else None
    return None


def _close(a: float, b: float, tol: float) -> bool:
    if math.isnan(a) or math.isnan(b):
        return math.isnan(a) and math.isnan(b)
    return abs(a - b) <= tol * max(1.0, abs(a), abs(b))


def check_arrange_results(ctx: Ctx, out_rel: str, spec_rel: str, args: list[str],
                          layers: str | None, rerun: bool) -> None:
    """Results must be right: the report agrees with grade of what was written."""
    out = ctx.dir / out_rel
    try:
        report = json.loads((out / "report.json").read_text())
        pattern = (out / "pattern.txt").read_text()
    except (OSError, ValueError) as exc:
        ctx.outcome.flag("half", f"{out_rel}: cannot read report/pattern: {exc}")
        return
    if not isinstance(report, dict) or not isinstance(report.get("grade"), dict):
        ctx.outcome.flag("wrong", f"{out_rel}/report.json has no grade section")
        return
    if isinstance(report.get("pattern"), str) and _rows(report["pattern"]) != _rows(pattern):
        ctx.outcome.flag("wrong", f"{out_rel}/pattern.txt differs from report.json's pattern")
    g = ctx.placer(["grade", f"{out_rel}/pattern.txt", "--spec", spec_rel, "--json"])
    if ctx.judge(g) in FAILING:
        return
    if g.rc != 0:
        ctx.outcome.flag("wrong", f"grade of the pattern.txt arrange wrote fails: {_tail(g.err)}")
        return
    graded = parse_json(g.out)
    if not isinstance(graded, dict):
        ctx.outcome.flag("wrong", "grade --json printed no JSON")
        return
    diffs = compare_grades(report["grade"], graded, 1e-9, names_too=True)
    if diffs:
        ctx.outcome.flag("wrong", "grade of the written pattern.txt disagrees with report.json: "
                                  + "; ".join(diffs))
    gargs = ["grade", f"{out_rel}/pattern.gds", "--spec", spec_rel, "--json"]
    if layers:
        gargs += ["--layers", layers]
    g2 = ctx.placer(gargs)
    if ctx.judge(g2) in FAILING:
        return
    if g2.rc != 0:
        ctx.outcome.flag("wrong", f"grade of the pattern.gds arrange wrote fails: {_tail(g2.err)}")
    else:
        graded2 = parse_json(g2.out)
        if isinstance(graded2, dict):
            diffs = compare_grades(report["grade"], graded2, 1e-6, names_too=False)
            if diffs:
                ctx.outcome.flag("wrong", "grade of the written pattern.gds disagrees with "
                                          "report.json: " + "; ".join(diffs))
    if rerun and report.get("stopped") == "converged":
        again = f"{out_rel}-rerun"
        args2 = [again if a == out_rel else a for a in args]
        r2 = ctx.placer(args2)
        if ctx.judge(r2) in FAILING or r2.rc != 0:
            if r2.rc != 0 and ctx.outcome.cls not in FAILING:
                ctx.outcome.flag("wrong", f"the same arrange run again fails: {_tail(r2.err)}")
            return
        a, b = snapshot(out) or {}, snapshot(ctx.dir / again) or {}
        differ = sorted(n for n in set(a) | set(b) if a.get(n) != b.get(n))
        if differ:
            ctx.outcome.flag("wrong", "a rerun with the same spec and seed (search converged) "
                                      f"differs in {', '.join(differ)}")


def _rows(text: str) -> list[list[str]]:
    """The rows of a pattern text without comments and blank lines."""
    return [ln.split() for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith(
        "#")]


def grade_json(ctx: Ctx, args: list[str]) -> dict | None:
    run = ctx.placer(args)
    if ctx.judge(run) in FAILING or run.rc != 0:
        return None
    data = parse_json(run.out)
    return data if isinstance(data, dict) else None


# --------------------------------------------------------------------------- TOML writing


class Raw:
    """TOML text put in verbatim (values TOML can hold but Python cannot write back)."""

    def __init__(self, text: str) -> None:
        self.text = text


BARE = re.compile(r"[A-Za-z0-9_-]+")


def toml_key(key: str) -> str:
    return key if BARE.fullmatch(key) else toml_str(key)


def toml_str(s: str) -> str:
    out = json.dumps(s, ensure_ascii=False)
    return out.replace("\x7f", "\\u007F")


def toml_value(v: object) -> str:
    if isinstance(v, Raw):
        return v.text
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        text = repr(v)
        return text if any(c in text for c in ".en") else text + ".0"
    if isinstance(v, str):
        return toml_str(v)
    if isinstance(v, list | tuple):
        return "[" + ", ".join(toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{toml_key(k)} = {toml_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(type(v))


def toml_dump(doc: dict) -> str:
    lines: list[str] = []

    def table(path: list[str], body: dict) -> None:
        scalars = {k: v for k, v in body.items() if not isinstance(v, dict)}
        subs = {k: v for k, v in body.items() if k not in scalars}
        if path:
            lines.append("")
            lines.append("[" + ".".join(toml_key(p) for p in path) + "]")
        for k, v in scalars.items():
            lines.append(f"{toml_key(k)} = {toml_value(v)}")
        for k, v in subs.items():
            table(path + [k], v)

    table([], doc)
    return "\n".join(lines) + "\n"


# --------------------------------------------------------------------------- spec family

KINDS = ("mos", "cap", "res")
TERMINALS = {"mos": ("gate", "source", "drain"), "cap": ("top", "bottom"), "res": ("a", "b")}
INT_KEYS = {("array", "rows"), ("array", "columns"), ("gradient", "order"),
            ("monte_carlo", "samples"), ("monte_carlo", "seed"), ("search", "cancel_order"),
            ("electrical", "mc_samples"), ("electrical", "k_sigma")}
COUNT_KEYS = {("array", "rows"), ("array", "columns"), ("monte_carlo", "samples"),
              ("electrical", "mc_samples"), ("gradient", "order"), ("search", "cancel_order")}
SIZE_KEYS = {("unit", "width_um"), ("unit", "length_um"), ("correlated", "length_um"),
             ("array", "aspect"), ("correlated", "sigma_ppm"), ("mismatch", "a_param_pct_um"),
             ("gradient", "linear_ppm_per_um"), ("gradient", "quadratic_ppm_per_um2")}
NUMERIC_PATHS = sorted(INT_KEYS | SIZE_KEYS | {
    ("mismatch", "a_vt_mv_um"), ("search", "relative_tie"),
    ("routing", "metal1_ohm_per_um"), ("routing", "metal2_ohm_per_um"), ("routing", "via_ohm"),
    ("routing", "wire_ff_per_um"), ("electrical", "vov_v"), ("electrical", "lambda_per_v"),
    ("electrical", "tolerance_pct"), ("electrical", "vt_gradient_mv_per_mm"),
    ("electrical", "beta_gradient_pct_per_mm"), ("electrical", "a_vt_mv_um"),
    ("electrical", "a_beta_pct_um")})
STRING_PATHS = [("", "kind"), ("", "name"), ("array", "dummies"), ("array", "dummy_net"),
                ("array", "symmetry"), ("array", "mask"), ("correlated", "kernel"),
                ("search", "objective"), ("electrical", "reference"),
                ("electrical", "termination"), ("electrical", "fit")]


def hostile_number(rng: random.Random, path: tuple[str, str]) -> tuple[object, str]:
    """A hostile value for a numeric key and why it must be refused ('' if it need not)."""
    is_int = path in INT_KEYS or path[0] == "devices"
    count = path in COUNT_KEYS or path[0] == "devices"
    size = path in SIZE_KEYS or path == ("array", "pitch_um")
    choices: list[tuple[object, str]] = [
        (float("nan"), "nan"), (float("inf"), "inf"), (float("-inf"), "-inf"),
        (1e308, "1e308"), (-1e308, "-1e308"), (1e-300, "1e-300"), (5e-324, "5e-324"),
        (10 ** 400, "a 401-digit integer"), (-(10 ** 400), "a 401-digit negative integer"),
        (2 ** 63, "" if path == ("monte_carlo", "seed") else "2**63"),
        (2 ** 64 + 1, "" if path == ("monte_carlo", "seed") else "2**64+1"),
        (1e30, "1e30"), (0, ""), (-1, "a negative count or size" if (count or size) else ""),
        (-0.0, ""), (1.5 if is_int else 7, "a fraction for an integer key" if is_int else ""),
        (10 ** 7, ""), (65537, ""), (3, ""), (0.001, ""), (1e6, ""),
        ("12", "a string for a number"), (True, "a boolean for a number"),
        ([], "an array for a number"), ({}, "a table for a number"),
        (Raw("1979-05-27T07:32:00Z"), "a date for a number"),
        (Raw("1" + "0" * 400 + ".0"), "a 401-digit float (inf)"),
        (Raw("1e99999"), "1e99999 (inf)"),
    ]
    value, why = rng.choice(choices)
    if is_int and isinstance(value, float) and not why:
        why = "a float for an integer key" if value != int(value) else ""
    return value, why


def spec_base(rng: random.Random) -> dict:
    if rng.random() < 0.5:
        name = rng.choice(SAMPLE_SPECS)
        return tomllib.loads((SAMPLES / f"{name}.toml").read_text())
    kind = rng.choice(KINDS)
    prefix = {"mos": "M", "cap": "C", "res": "R"}[kind]
    n = rng.randint(2, 4)
    devices = {f"{prefix}{chr(65 + i)}": rng.choice([1, 2, 2, 3, 4, 4, 6, 8]) for i in range(n)}
    spec: dict = {"name": f"adv_{rng.randint(0, 9999)}", "kind": kind, "devices": devices,
                  "array": {"dummies": rng.choice(["none", "ends", "ring"])},
                  "unit": {"width_um": rng.choice([1.0, 2.0, 3.0]),
                           "length_um": rng.choice([0.5, 1.0, 2.0])}}
    if rng.random() < 0.5:
        spec["array"]["rows"] = rng.choice([1, 2])
    if rng.random() < 0.3:
        spec["gradient"] = {"linear_ppm_per_um": 10.0, "quadratic_ppm_per_um2": 0.02,
                            "order": rng.choice([2, 3, 4])}
    if rng.random() < 0.3:
        spec["electrical"] = {"mos": {"vov_v": 0.2, "lambda_per_v": 0.1,
                                      "vds_v": {d: 1.0 for d in devices}},
                              "cap": {"termination": "none"}, "res": {}}[kind]
    if kind == "mos" and rng.random() < 0.5:
        spec["terminals"] = {d: {"gate": "VG", "source": "VSS", "drain": f"D{d}"}
                             for d in devices}
    return spec


def _devices(spec: dict) -> dict:
    devs = spec.get("devices")
    return devs if isinstance(devs, dict) else {}


def _set(spec: dict, path: tuple[str, str], value: object) -> None:
    table, key = path
    if table == "":
        spec[key] = value
        return
    if not isinstance(spec.get(table), dict):
        spec[table] = {}
    spec[table][key] = value


def _kind(spec: dict) -> str:
    k = spec.get("kind")
    return k if k in KINDS else "mos"


MUTATIONS = ["number", "number_b", "number_c", "pitch", "sizes", "type", "unknown", "huge_name",
             "unicode", "case", "deep_array", "deep_inline", "deep_dotted", "deep_pitch",
             "many", "empty", "terminals", "terminals_b", "groups", "pins", "match", "mask",
             "electrical", "heavy", "raw", "raw_b"]
MUTATION_ALIAS = {"number_b": "number", "number_c": "number", "terminals_b": "terminals",
                  "raw_b": "raw"}


def mutate_spec(spec: dict, rng: random.Random, choice: str | None = None
                ) -> tuple[list[str], str, list]:
    """Apply one hostile change. Returns (descriptions, refusal reason, raw-text edits)."""
    devs = _devices(spec)
    names = list(devs)
    kind = _kind(spec)
    raw: list = []
    # a second, random change is a light one: the heavy kinds come once each in the rotation
    choice = choice or rng.choice([m for m in MUTATIONS if not m.startswith("deep_")])
    choice = MUTATION_ALIAS.get(choice, choice)
    style = ""
    if choice.startswith("deep_"):
        choice, style = "deep", choice[5:]
    if choice == "number":
        path = rng.choice(NUMERIC_PATHS + [("devices", n) for n in names])
        value, why = hostile_number(rng, path)
        _set(spec, path, value)
        return [f"[{path[0]}] {path[1]} = {toml_value(value)[:40]}"], why, raw
    if choice == "pitch":
        value, why = rng.choice([
            ([0, 0], "a zero pitch"), ([1e-300, 1e-300], "a tiny pitch"),
            ([2.3], "a pitch of one number"), ([2.3, 5.15, 1.0], "a pitch of three numbers"),
            (["a", "b"], "a pitch of strings"), ([float("nan"), 5.0], "a nan pitch"),
            ([1e308, 1e308], "a huge pitch"), ([-3.0, 6.0], "a negative pitch"),
            ([1e5, 1e5], ""), ([1e6, 1e7], ""), ([0.01, 0.01], "a pitch too small"),
            ([[2.3], [5.0]], "nested pitch")])
        _set(spec, ("array", "pitch_um"), value)
        return [f"[array] pitch_um = {toml_value(value)}"], why, raw
    if choice == "sizes":
        value = rng.choice([5000.0, 1e5, 1e7, 0.0001, 1e-9, 250.0])
        key = rng.choice(["width_um", "length_um"])
        _set(spec, ("unit", key), value)
        why = "a unit size out of any sane range" if value >= 1e7 or value <= 1e-9 else ""
        return [f"[unit] {key} = {value}"], why, raw
    if choice == "type":
        path = rng.choice(STRING_PATHS + NUMERIC_PATHS[:6])
        value = rng.choice([5, 1.5, True, [1, 2], {"a": 1}, Raw("1979-05-27"), ""])
        numeric_path = path in NUMERIC_PATHS
        if numeric_path and isinstance(value, int | float) and not isinstance(value, bool):
            value = "five"
        if path == ("array", "mask") and value == "":
            why = ""
        elif path == ("electrical", "reference") and value == "":
            why = "an empty reference"
        else:
            why = f"a {type(value).__name__} for [{path[0]}] {path[1]}"
        _set(spec, path, value)
        return [f"[{path[0]}] {path[1]} = {toml_value(value)}"], why, raw
    if choice == "unknown":
        tables = [t for t, v in spec.items() if isinstance(v, dict) and t != "devices"]
        key = rng.choice(["rowz", "Rows", "pitch", "width", "sigma", "colums", "x" * 200,
                          "d\u00e9vices", "kind2", "unit_um"])
        where = rng.choice(["", *tables])
        if where:
            spec[where][key] = 1
        elif key in ("d\u00e9vices",):
            spec[key] = {"MA": 1}
        else:
            spec[key] = 1
        return [f"unknown key {key[:30]!r} in [{where}]"], "an unknown key", raw
    if choice == "huge_name":
        what = rng.choice(["spec", "device", "net", "group"])
        n = rng.choice([25, 33, 300, 5000, 200_000])
        big = "N" + "x" * (n - 1)
        if what == "spec":
            spec["name"] = big
            return [f"name of {n} characters"], "a spec name over 24 characters", raw
        if what == "device":
            devs[big] = 2
            spec["devices"] = devs
            return [f"device name of {n} characters"], ("a huge device name" if n >= 1000
                                                        else ""), raw
        if what == "net" and kind == "mos" and names:
            spec.setdefault("terminals", {})[names[0]] = {"gate": big, "source": "VSS",
                                                          "drain": "D0"}
            return [f"net name of {n} characters"], "a net name over 32 characters", raw
        spec["groups"] = {big: {"devices": names}}
        return [f"group name of {n} characters"], ("a huge group name" if n >= 1000 else ""), raw
    if choice == "unicode":
        uname = rng.choice(["M\u00e9", "\u041c1", "M\u200bA", "\U0001d440A", "MA\u0301",
                            "\uff2d\uff21", "M\u202eA", "\u2603", "M\\x"])
        where = rng.choice(["spec", "device", "net"])
        if where == "spec":
            spec["name"] = uname
            return [f"spec name {uname!r}"], "a spec name that is not letters/digits/_", raw
        if where == "device" or kind != "mos" or not names:
            devs[uname] = 2
            spec["devices"] = devs
            return [f"device name {uname!r}"], "", raw
        spec.setdefault("terminals", {})[names[0]] = {"gate": uname, "source": "VSS",
                                                      "drain": "D0"}
        return [f"net name {uname!r}"], "", raw
    if choice == "case":
        if kind == "mos" and names and rng.random() < 0.5:
            terms = spec.setdefault("terminals", {})
            for i, d in enumerate(names):
                terms[d] = {"gate": "VBIAS" if i % 2 == 0 else "vbias", "source": "VSS",
                            "drain": f"OUT{i}"}
            return ["nets VBIAS and vbias"], "two nets that differ only by case", raw
        if names:
            other = names[0].swapcase() if names[0].swapcase() != names[0] else names[0] + "x"
            devs[other] = 2
            return [f"devices {names[0]} and {other}"], "", raw
        return ["no devices to copy"], "", raw
    if choice == "deep":
        depth = 100_000 if style == "dotted" else rng.choice([200, 5000, 100_000])
        if style == "array":
            raw.append(("append", f"deep = {'[' * depth}1{']' * depth}\n"))
        elif style == "inline":
            raw.append(("append", "deep = " + "{ a = " * depth + "1" + " }" * depth + "\n"))
        elif style == "dotted":
            raw.append(("append", ".".join(["a"] * depth) + " = 1\n"))
        else:
            _set(spec, ("array", "pitch_um"), Raw("[" * depth + "2.3" + "]" * depth))
        return [f"nesting {depth} deep ({style})"], "deeply nested TOML", raw
    if choice == "many":
        n = rng.choice([200, 1500, 70_000])
        units = rng.choice([1, 2])
        prefix = {"mos": "M", "cap": "C", "res": "R"}[kind]
        spec["devices"] = {f"{prefix}{i}": units for i in range(n)}
        for t in ("terminals", "electrical", "groups", "pins", "match"):
            spec.pop(t, None)
        if isinstance(spec.get("array"), dict):
            for k in ("rows", "columns", "mask", "keep_out", "symmetry"):
                spec["array"].pop(k, None)
        why = "more than 65 536 units" if n * units > 65536 else ""
        return [f"{n} devices of {units} unit(s)"], why, raw
    if choice == "heavy":
        what = rng.choice(["units", "units", "slots", "slots", "mc", "emc"])
        if what == "units" and names:
            n = rng.choice([65537, 10 ** 6, 2 ** 31, 2 ** 62])
            devs[names[0]] = n
            return [f"{names[0]} = {n} units"], "more than 65 536 units", raw
        if what == "slots":
            r, c = rng.choice([(100_000, 100_000), (262_145, 1), (1, 300_000), (600, 600),
                               (2 ** 31, 2 ** 31)])
            _set(spec, ("array", "rows"), r)
            _set(spec, ("array", "columns"), c)
            spec["array"].pop("mask", None)
            return [f"rows {r} x columns {c}"], "more than 262 144 slots", raw
        if what == "mc":
            n = rng.choice([10 ** 6, 10 ** 8, 10 ** 12])
            _set(spec, ("monte_carlo", "samples"), n)
            return [f"[monte_carlo] samples = {n}"], "", raw
        n = rng.choice([10 ** 6, 10 ** 9])
        _set(spec, ("electrical", "mc_samples"), n)
        if kind == "cap":
            spec["electrical"].setdefault("termination", "none")
        return [f"[electrical] mc_samples = {n}"], "", raw
    if choice == "empty":
        table = rng.choice(["devices", "terminals", "groups", "pins", "match", "electrical",
                            "array", "unit", "routing", "search"])
        spec[table] = {}
        why = "no devices" if table == "devices" else ""
        if table in ("groups",):
            why = ""
        return [f"empty [{table}]"], why, raw
    if choice == "terminals":
        terms = spec.setdefault("terminals", {})
        if not isinstance(terms, dict):
            spec["terminals"] = terms = {}
        tnames = TERMINALS[kind]
        d = names[0] if names else "MA"
        variant = rng.choice(["unknown_terminal", "net_is_device", "long_net", "number_net",
                              "empty_net", "unknown_device", "bad_join", "not_table", "all_one",
                              "bulk"])
        base = {t: f"N{t.upper()}" for t in tnames}
        if variant == "unknown_terminal":
            terms[d] = {**base, "gat": "X"}
            return [f"terminal 'gat' of {d}"], "an unknown terminal", raw
        if variant == "net_is_device" and len(names) > 1:
            terms[d] = {**base, tnames[0]: names[1]}
            return [f"net named like device {names[1]}"], "a net that clashes with a device", raw
        if variant == "long_net":
            terms[d] = {**base, tnames[0]: "L" * 33}
            return ["net of 33 characters"], "a net name over 32 characters", raw
        if variant == "number_net":
            terms[d] = {**base, tnames[0]: 7}
            return ["net given as a number"], "a number for a net name", raw
        if variant == "empty_net":
            terms[d] = {**base, tnames[0]: ""}
            return ["empty net name"], "an empty net name", raw
        if variant == "unknown_device":
            terms["NOSUCH"] = base
            return ["terminals of an unknown device"], "terminals of an unknown device", raw
        if variant == "bad_join":
            terms[d] = {**base, "join": "star"}
            why = "join = 'star'" if kind == "res" else "join on a non-resistor"
            return ["join = 'star'"], why, raw
        if variant == "not_table":
            terms[d] = "VSS"
            return [f"terminals.{d} a string"], "a string for a terminal table", raw
        if variant == "bulk":
            terms[d] = {**base, "bulk": "VSUB"}
            return ["a bulk terminal"], "" if kind == "mos" else "bulk on a non-MOS device", raw
        for dd in names:
            terms[dd] = {t: "ONE" for t in tnames}
        return ["every terminal on one net"], "", raw
    if choice == "groups":
        variant = rng.choice(["unknown", "twice", "rows_out", "rows_neg", "empty", "scalar",
                              "many", "case"])
        if variant == "unknown":
            spec["groups"] = {"g": {"devices": [*names[:1], "NOSUCH"]}}
            return ["a group with an unknown device"], "a group naming an unknown device", raw
        if variant == "twice":
            spec["groups"] = {"g1": {"devices": names}, "g2": {"devices": names[:1]}}
            return ["a device in two groups"], "", raw
        if variant == "rows_out":
            spec["groups"] = {"g": {"devices": names, "rows": [99]}}
            return ["group rows [99]"], "", raw
        if variant == "rows_neg":
            spec["groups"] = {"g": {"devices": names, "rows": [-1, 10 ** 400]}}
            return ["group rows [-1, 10**400]"], "negative / huge group rows", raw
        if variant == "empty":
            spec["groups"] = {"g": {"devices": []}}
            return ["a group with no devices"], "", raw
        if variant == "scalar":
            spec["groups"] = {"g": 5}
            return ["groups.g = 5"], "a number for a group table", raw
        if variant == "case":
            half = max(1, len(names) // 2)
            spec["groups"] = {"pair": {"devices": names[:half]}, "PAIR": {"devices": names[half:]}}
            return ["groups pair and PAIR"], "", raw
        spec["groups"] = {f"g{i}": {"devices": [n]} for i, n in enumerate(names)}
        spec["groups"].update({f"x{i}": {"devices": []} for i in range(500)})
        return ["500 empty groups"], "", raw
    if choice == "pins":
        d = names[0] if names else "MA"
        variant, value, why = rng.choice([
            ("outside", [[999, 999]], "a pin outside the array"),
            ("negative", [[-1, 0]], "a negative pin"),
            ("float", [[0.5, 1.5]], "fractional pin coordinates"),
            ("short", [[0]], "a pin of one number"),
            ("too_many", [[0, i] for i in range(300)], "more pins than units"),
            ("huge", [[10 ** 400, 0]], "a 401-digit pin row"),
            ("nan", [[float("nan"), 0]], "a nan pin"),
            ("ok", [[0, 0]], ""),
        ])
        spec["pins"] = {d: value}
        if variant == "ok" and len(names) > 1:
            spec["pins"][names[1]] = [[0, 0]]
            why = "two pins on one slot"
        return [f"pins {variant}"], why, raw
    if choice == "match":
        variant, value, why = rng.choice([
            ("unknown", [["NOSUCH", names[0] if names else "MA"]], "a match of an unknown device"),
            ("three", [names[:3] + ["X"]], "a match pair of more than two names"),
            ("self", [[names[0], names[0]]] if names else [["A", "A"]], ""),
            ("scalar", "MA", "a string for match pairs"),
            ("empty", [], ""),
        ])
        spec["match"] = {"pairs": value}
        return [f"match {variant}"], why, raw
    if choice == "mask":
        variant = rng.choice(["ragged", "badchar", "allkeep", "huge", "empty", "keep_rev",
                              "keep_huge", "keep_neg", "sym_bad", "sym_odd", "crlf"])
        arr = spec.setdefault("array", {})
        if not isinstance(arr, dict):
            spec["array"] = arr = {}
        total = sum(v for v in devs.values() if isinstance(v, int) and 0 < v < 10 ** 6) or 8
        width = max(2, math.ceil(math.sqrt(total)) + 1)
        height = max(1, math.ceil(total / width) + 1)
        rows = ["." * width for _ in range(height)]
        arr.pop("rows", None)
        arr.pop("columns", None)
        if variant == "ragged":
            rows[0] = rows[0] + ".."
            arr["mask"] = "\n".join(rows) + "\n"
            return ["ragged mask"], "", raw
        if variant == "badchar":
            rows[0] = "x" + rows[0][1:]
            arr["mask"] = "\n".join(rows) + "\n"
            return ["mask with 'x'"], "an unknown mask character", raw
        if variant == "allkeep":
            arr["mask"] = "\n".join("#" * width for _ in range(height)) + "\n"
            return ["mask all '#'"], "a mask with no usable slot", raw
        if variant == "huge":
            arr["mask"] = "\n".join("." * 600 for _ in range(600)) + "\n"
            return ["600 x 600 mask"], "more than 262 144 slots", raw
        if variant == "empty":
            arr["mask"] = ""
            return ["empty mask"], "", raw
        if variant == "crlf":
            arr["mask"] = "\r\n".join(rows) + "\r\n"
            return ["mask with CR LF"], "", raw
        arr["mask"] = "\n".join(rows) + "\n"
        if variant == "keep_rev":
            arr["keep_out"] = [[1, 1, 0, 0]]
            return ["keep_out reversed"], "", raw
        if variant == "keep_huge":
            arr["keep_out"] = [[0, 0, 10 ** 9, 10 ** 9]]
            return ["keep_out 10**9"], "", raw
        if variant == "keep_neg":
            arr["keep_out"] = [[-5, -5, -1, -1]]
            return ["keep_out negative"], "", raw
        if variant == "sym_bad":
            arr["symmetry"] = rng.choice(["z", "X ", "diagonal", ""])
            return [f"symmetry {arr['symmetry']!r}"], "an unknown symmetry", raw
        rows[0] = "#" + rows[0][1:]
        arr["mask"] = "\n".join(rows) + "\n"
        arr["symmetry"] = "x"
        return ["symmetry x on a footprint that is not its mirror image"], (
            "a footprint that is not its own mirror image"), raw
    if choice == "electrical":
        el = spec.setdefault("electrical", {})
        if not isinstance(el, dict):
            spec["electrical"] = el = {}
        variant, why = rng.choice([
            ("reference", "an unknown reference"), ("vds_unknown", ""),
            ("vds_nan", "a nan drain voltage"), ("termination", "an unknown termination"),
            ("fit", "an unknown fit"), ("tolerance", "a negative tolerance"),
            ("gm", ""), ("k_sigma", "k_sigma 1e308")])
        if variant == "reference":
            el["reference"] = "NOSUCH"
        elif variant == "vds_unknown":
            el["vds_v"] = {"NOSUCH": 1.0}
            why = "a drain voltage of an unknown device" if kind == "mos" else \
                "vds_v for a non-MOS kind"
        elif variant == "vds_nan":
            el["vds_v"] = {n: float("nan") for n in names}
        elif variant == "termination":
            el["termination"] = "NOSUCH"
        elif variant == "fit":
            el["fit"] = "worst"
        elif variant == "tolerance":
            el["tolerance_pct"] = -2.0
        elif variant == "gm":
            el["gm_id_per_v"] = 10.0
            el["vov_v"] = 0.2
            why = "" if kind == "mos" else "MOS keys on a non-MOS kind"
        else:
            el["k_sigma"] = 1e308
        return [f"electrical {variant}"], why, raw
    # raw text edits
    variant = rng.choice(["bom", "crlf", "nul", "badutf8", "truncate", "dupkey", "bigcomment",
                          "hugecomment", "redefine", "bigint", "infloat"])
    why = {"bom": "", "crlf": "", "nul": "a NUL byte", "badutf8": "invalid UTF-8",
           "truncate": "", "dupkey": "a duplicate key", "bigcomment": "",
           "hugecomment": "a spec over 4 MB", "redefine": "a table defined twice",
           "bigint": "a 400-digit integer", "infloat": "an infinite float"}[variant]
    raw.append((variant, None))
    return [f"raw edit: {variant}"], why, raw


def apply_raw(text: str, edits: list, rng: random.Random) -> bytes:
    data = text
    for kind, arg in edits:
        if kind == "append":
            data += arg
    blob = data.encode("utf-8")
    for kind, _ in edits:
        if kind == "bom":
            blob = b"\xef\xbb\xbf" + blob
        elif kind == "crlf":
            blob = blob.replace(b"\n", b"\r\n")
        elif kind == "nul":
            i = rng.randrange(len(blob))
            blob = blob[:i] + b"\x00" + blob[i:]
        elif kind == "badutf8":
            i = blob.find(b"\n", len(blob) // 3)
            blob = blob[:i] + b"\n# \xff\xfe\xc3\n" + blob[i + 1:]
        elif kind == "truncate":
            blob = blob[: rng.randrange(1, max(2, len(blob)))]
        elif kind == "dupkey":
            blob = blob.replace(b"[devices]\n", b"[devices]\nDUP = 1\nDUP = 2\n", 1)
            if b"DUP" not in blob:
                blob += b"\nkind = \"mos\"\nkind = \"cap\"\n"
        elif kind == "bigcomment":
            blob = b"# " + b"c" * (3 << 20) + b"\n" + blob
        elif kind == "hugecomment":
            blob = b"# " + b"c" * (5 << 20) + b"\n" + blob
        elif kind == "redefine":
            blob += b"\n[unit]\nwidth_um = 1.0\n"
        elif kind == "bigint":
            blob = re.sub(rb"(\n\[devices\]\n[^=\n]+= )\d+", rb"\g<1>" + b"9" * 400, blob,
                          count=1)
            if b"9" * 400 not in blob:
                blob += b"\n[gradient]\norder = " + b"9" * 400 + b"\n"
        elif kind == "infloat":
            blob += b"\n[correlated]\nsigma_ppm = 1" + b"0" * 400 + b".0\n"
    return blob


def pattern_for(devs: dict, rng: random.Random, kind: str = "mos") -> str | None:
    """A pattern text holding each device's units, with end dummies, or None."""
    items = [(n, v) for n, v in devs.items() if isinstance(v, int) and not isinstance(v, bool)]
    if not items or any(v <= 0 for _, v in items):
        return None
    total = sum(v for _, v in items)
    if total > 600 or any(not re.fullmatch(r"[A-Za-z][A-Za-z0-9_]*", n) for n, _ in items):
        return None
    tokens = [n for n, v in items for _ in range(v)]
    rng.shuffle(tokens)
    rows = 2 if total % 2 == 0 and total >= 4 else 1
    cols = total // rows
    lines = []
    for r in range(rows):
        row = tokens[r * cols:(r + 1) * cols]
        if kind == "mos":
            row = [t + rng.choice(">< ").strip() for t in row]
        lines.append(" ".join([".", *row, "."]))
    return "\n".join(lines) + "\n"


def gen_spec(ctx: Ctx, rng: random.Random) -> None:
    spec = spec_base(rng)
    descs: list[str] = []
    why = ""
    raw: list = []
    first = ctx.pick([*MUTATIONS, "valid", "valid_b"])
    if first.startswith("valid"):
        descs.append("valid spec (no change)")
    else:
        for k in range(rng.choice([1, 1, 1, 2])):
            d, w, r = mutate_spec(spec, rng, first if k == 0 else None)
            descs += d
            why = why or w
            raw += r
    text = toml_dump(spec)
    blob = apply_raw(text, raw, rng)
    ctx.write("spec.toml", blob)
    ctx.note("spec: " + "; ".join(descs))
    devs = _devices(spec)
    kind = _kind(spec)
    mode = rng.choices(["arrange", "grade", "draw", "compare"], [70, 18, 9, 3])[0]
    if mode in ("grade", "draw"):
        pat = pattern_for(devs, rng, kind) or (SAMPLES / "bias_mirror_hand.txt").read_text()
        ctx.write("pattern.txt", pat)
        if mode == "grade":
            run = ctx.placer(["grade", "pattern.txt", "--spec", "spec.toml", "--json"])
            ctx.judge(run, why)
            return
        args = ["draw", "pattern.txt", "--spec", "spec.toml", "--out", "out"]
        run = ctx.placer(args)
        verdict = check_outputs(ctx, run, "draw", "out", None, False, why)
        if verdict == "ok" and run.rc == 0:
            check_draw_results(ctx, "out", "pattern.txt", "spec.toml")
        return
    if mode == "compare":
        args = ["compare", "spec.toml", "--out", "out", "--time-limit", "2"]
        run = ctx.placer(args)
        check_outputs(ctx, run, "compare", "out", None, False, why)
        return
    args = ["arrange", "spec.toml", "--out", "out", "--time-limit", "2", "--quiet"]
    if rng.random() < 0.3:
        args += ["--seed", str(rng.randint(0, 99))]
    if rng.random() < 0.2:
        args += ["--candidates", str(rng.randint(1, 3))]
    if rng.random() < 0.15:
        args += ["--method", rng.choice(["clustered", "interdigitated", "mirrored"])]
    run = ctx.placer(args)
    verdict = check_outputs(ctx, run, "arrange", "out", None, False, why)
    if verdict == "ok" and run.rc == 0:
        check_arrange_results(ctx, "out", "spec.toml", args, None, rerun=rng.random() < 0.3)


def check_draw_results(ctx: Ctx, out_rel: str, pattern_rel: str, spec_rel: str | None) -> None:
    """A pattern and the GDSII drawn from it grade alike (with the same spec)."""
    out = ctx.dir / out_rel
    gds = sorted(out.glob("*.gds"))
    if not gds or spec_rel is None:
        return
    base = ["--spec", spec_rel, "--json"]
    a = grade_json(ctx, ["grade", pattern_rel, *base])
    b = grade_json(ctx, ["grade", f"{out_rel}/{gds[0].name}", *base])
    if a is None or b is None:
        if a is not None and b is None and ctx.outcome.cls not in FAILING:
            ctx.outcome.flag("wrong", f"the GDSII draw wrote ({gds[0].name}) does not grade")
        return
    diffs = compare_grades(a, b, 1e-6, names_too=False)
    if diffs:
        ctx.outcome.flag("wrong", "the drawn GDSII grades differently from its pattern: "
                                  + "; ".join(diffs))


# --------------------------------------------------------------------------- GDSII writing


def real8(x: float) -> bytes:
    """GDSII 8-byte excess-64 base-16 real (clamped to what the format holds)."""
    if x == 0 or math.isnan(x):
        return b"\x00" * 8
    sign = 0x80 if x < 0 else 0
    x = abs(x)
    if math.isinf(x):
        return bytes([sign | 0x7F]) + b"\xff" * 7
    exp = 64
    while x >= 1:
        x /= 16
        exp += 1
    while x < 1 / 16:
        x *= 16
        exp -= 1
    mant = int(round(x * (1 << 56)))
    if mant >= 1 << 56:
        mant >>= 4
        exp += 1
    if exp > 127:
        return bytes([sign | 0x7F]) + b"\xff" * 7
    if exp < 0:
        return b"\x00" * 8
    return bytes([sign | exp]) + mant.to_bytes(7, "big")


def rec(rtype: int, dtype: int, payload: bytes = b"") -> bytes:
    if len(payload) % 2:
        payload += b"\x00"
    return struct.pack(">HBB", 4 + len(payload), rtype, dtype) + payload


def i2(*vals: int) -> bytes:
    return b"".join(struct.pack(">h", max(-32768, min(32767, v))) for v in vals)


def i4(*vals: int) -> bytes:
    return b"".join(struct.pack(">i", max(-(2 ** 31), min(2 ** 31 - 1, int(v)))) for v in vals)


def ascii_(s: bytes | str) -> bytes:
    return s.encode("utf-8") if isinstance(s, str) else s


STAMP = i2(2024, 1, 1, 0, 0, 0, 2024, 1, 1, 0, 0, 0)


def g_box(layer: int, dt: int, x0: int, y0: int, x1: int, y1: int) -> bytes:
    return (rec(0x08, 0) + rec(0x0D, 2, i2(layer)) + rec(0x0E, 2, i2(dt))
            + rec(0x10, 3, i4(x0, y0, x1, y0, x1, y1, x0, y1, x0, y0)) + rec(0x11, 0))


def g_text(layer: int, tt: int, x: int, y: int, s: bytes | str) -> bytes:
    return (rec(0x0C, 0) + rec(0x0D, 2, i2(layer)) + rec(0x16, 2, i2(tt))
            + rec(0x10, 3, i4(x, y)) + rec(0x19, 6, ascii_(s)) + rec(0x11, 0))


def _strans(angle: float | None, mag: float | None, reflect: bool, raw_angle: bytes | None,
            raw_mag: bytes | None) -> bytes:
    if not (reflect or angle or mag is not None or raw_angle or raw_mag):
        return b""
    out = rec(0x1A, 1, struct.pack(">H", 0x8000 if reflect else 0))
    if raw_mag is not None:
        out += rec(0x1B, 5, raw_mag)
    elif mag is not None:
        out += rec(0x1B, 5, real8(mag))
    if raw_angle is not None:
        out += rec(0x1C, 5, raw_angle)
    elif angle:
        out += rec(0x1C, 5, real8(angle))
    return out


def g_sref(name: bytes | str, x: int, y: int, angle: float | None = None,
           mag: float | None = None, reflect: bool = False, raw_angle: bytes | None = None,
           raw_mag: bytes | None = None) -> bytes:
    return (rec(0x0A, 0) + rec(0x12, 6, ascii_(name))
            + _strans(angle, mag, reflect, raw_angle, raw_mag)
            + rec(0x10, 3, i4(x, y)) + rec(0x11, 0))


def g_aref(name: bytes | str, cols: int, rows: int, x: int, y: int, dx: int, dy: int,
           angle: float | None = None) -> bytes:
    return (rec(0x0B, 0) + rec(0x12, 6, ascii_(name)) + _strans(angle, None, False, None, None)
            + rec(0x13, 2, i2(cols, rows))
            + rec(0x10, 3, i4(x, y, x + cols * dx, y, x, y + rows * dy)) + rec(0x11, 0))


def gds_library(cells: list[tuple[bytes | str, list[bytes]]], units: bytes | None = None,
                libname: bytes | str = b"advlib") -> bytes:
    out = [rec(0x00, 2, i2(600)), rec(0x01, 2, STAMP), rec(0x02, 6, ascii_(libname)),
           rec(0x03, 5, units if units is not None else real8(1e-3) + real8(1e-9))]
    for name, elements in cells:
        out.append(rec(0x05, 2, STAMP) + rec(0x06, 6, ascii_(name)))
        out.extend(elements)
        out.append(rec(0x07, 0))
    out.append(rec(0x04, 0))
    return b"".join(out)


@dataclass
class Hand:
    """A small hand layout: the grid of tokens, its pitch (nm) and a matching spec."""

    grid: list[list[str]]
    px: int
    py: int

    @property
    def devices(self) -> dict[str, int]:
        counts: dict[str, int] = {}
        for row in self.grid:
            for t in row:
                name = t.rstrip("<>")
                if name not in (".", "-"):
                    counts[name] = counts.get(name, 0) + 1
        return counts

    def text(self) -> str:
        width = max(len(t) for row in self.grid for t in row)
        return "\n".join(" ".join(t.ljust(width) for t in row).rstrip()
                         for row in self.grid) + "\n"

    def spec(self) -> str:
        devs = self.devices
        lines = ['name = "hand"', 'kind = "mos"', "", "[devices]"]
        lines += [f"{n} = {v}" for n, v in devs.items()]
        lines += ["", "[array]", f"rows = {len(self.grid)}",
                  f"columns = {len(self.grid[0]) - 2}", 'dummies = "ends"',
                  f"pitch_um = [{self.px / 1000!r}, {self.py / 1000!r}]",
                  "", "[unit]", "width_um = 2.0", "length_um = 1.0", ""]
        return "\n".join(lines)

    def slots(self):
        for r, row in enumerate(self.grid):
            for c, t in enumerate(row):
                yield r, c, t


def make_hand(rng: random.Random, names: list[str] | None = None) -> Hand:
    n = rng.randint(2, 4)
    names = names or [f"M{chr(65 + i)}" for i in range(n)]
    rows = rng.choice([1, 2, 2, 3])
    cols = rng.choice([2, 3, 4, 5, 6])
    while rows * cols < len(names):
        cols += 1
    tokens = [names[i % len(names)] for i in range(rows * cols)]
    rng.shuffle(tokens)
    grid = []
    for r in range(rows):
        core = [t + rng.choice("<>") for t in tokens[r * cols:(r + 1) * cols]]
        grid.append([".", *core, "."])
    px = rng.choice([3000, 3200, 4000])
    py = rng.choice([9000, 10000, 12000])
    return Hand(grid, px, py)


def hand_gds(hand: Hand, *, ox: int = 0, oy: int = 0, rotate: float | None = None,
             labels_in_cells: bool = False, rows_as_cells: bool = False,
             corner_cells: bool = False, label_layer: int = 10, scale: int = 1,
             units: bytes | None = None, label_of: Callable[[str], bytes | str] | None = None,
             extra_top: list[bytes] | None = None, unit_mag: float | None = None) -> bytes:
    """The hand layout as GDSII: one reference per slot, device labels at unit centres."""
    w, h = hand.px * 8 // 10, hand.py * 4 // 10
    if corner_cells:
        body = g_box(1, 0, 0, 0, w * scale, h * scale)
        shift = (w * scale // 2, h * scale // 2)
    else:
        body = g_box(1, 0, -w * scale // 2, -h * scale // 2, w * scale // 2, h * scale // 2)
        shift = (0, 0)
    cells: list[tuple[bytes | str, list[bytes]]] = []
    label = label_of or (lambda s: s)
    unit_cells: dict[str, str] = {}
    if labels_in_cells:
        for name in hand.devices:
            cname = f"U_{name}"
            cells.append((cname, [body, g_text(label_layer, 0, *shift, label(name))]))
            unit_cells[name] = cname
    else:
        cells.append(("UNIT", [body]))
    cells.append(("UNIT_DUMMY", [body]))
    top: list[bytes] = []
    row_cells: list[tuple[str, list[bytes]]] = []
    for r, c, t in hand.slots():
        if t == "-":
            continue
        name = t.rstrip("<>")
        x = (ox + c * hand.px) * scale - shift[0]
        y = (oy - r * hand.py) * scale - shift[1]
        if name == ".":
            cname = "UNIT_DUMMY"
        else:
            cname = unit_cells.get(name, "UNIT")
        reflect = t.endswith("<")
        angle = rotate
        if reflect and not corner_cells:
            angle = (angle or 0) + 180
        elem = g_sref(cname, x, y, angle=angle, reflect=reflect and not corner_cells,
                      mag=unit_mag)
        labels = []
        if name != "." and not labels_in_cells:
            labels.append(g_text(label_layer, 0, (ox + c * hand.px) * scale,
                                 (oy - r * hand.py) * scale, label(name)))
        if rows_as_cells:
            if len(row_cells) <= r:
                row_cells.append((f"ROW{r}", []))
            row_cells[r][1].append(elem)
            row_cells[r][1].extend(labels)
        else:
            top.append(elem)
            top.extend(labels)
    for rname, elems in row_cells:
        cells.append((rname, elems))
        top.append(g_sref(rname, 0, 0))
    top.extend(extra_top or [])
    cells.append(("TOP", top))
    return gds_library(cells, units=units)


def hand_csv(hand: Hand, *, sep: str = ",", header: list[str] | None = None,
             order: tuple[int, ...] = (0, 1, 2, 3), shuffle: random.Random | None = None,
             ox: float = 100.0, oy: float = 50.0, newline: str = "\n",
             comment: bool = False) -> str:
    rows = []
    for r, c, t in hand.slots():
        if t == "-":
            continue
        name = t.rstrip("<>")
        mark = t[-1] if t[-1] in "<>" else ""
        fields = [f"{ox + c * hand.px / 1000:g}", f"{oy - r * hand.py / 1000:g}", name, mark]
        rows.append(sep.join(fields[i] for i in order))
    if shuffle is not None:
        shuffle.shuffle(rows)
    lines = []
    if comment:
        lines.append("# exported unit centres")
    if header is not None:
        lines.append(sep.join(header[i] for i in order))
    return newline.join(lines + rows) + newline


def gen_gds(ctx: Ctx, rng: random.Random) -> None:
    hand = make_hand(rng)
    ctx.write("hand.txt", hand.text())
    ctx.write("spec.toml", hand.spec())
    variant = ctx.pick([
        "plain", "rot180", "rot90", "labels_in_cells", "rows_as_cells", "corner", "offset",
        "scaled", "mag1", "layers",
        "units", "units", "aref_huge", "aref_medium", "deep", "deep", "cycle", "self_cycle",
        "empty_cells", "undefined", "nonascii", "case_labels", "odd_angle", "raw_angle",
        "magnified", "overlap", "offgrid", "far", "flat_many", "two_tops", "no_cells",
        "long_label", "labels_only", "path_elems"])
    benign = variant in ("plain", "rot180", "rot90", "labels_in_cells", "rows_as_cells",
                         "corner", "offset", "scaled", "mag1", "layers")
    why = ""
    extra_args: list[str] = []
    if variant == "plain":
        blob = hand_gds(hand)
    elif variant == "rot180":
        blob = hand_gds(hand, rotate=180)
    elif variant == "rot90":
        blob = hand_gds(hand, rotate=rng.choice([90, 270]))
    elif variant == "labels_in_cells":
        blob = hand_gds(hand, labels_in_cells=True)
    elif variant == "rows_as_cells":
        blob = hand_gds(hand, rows_as_cells=True)
    elif variant == "corner":
        blob = hand_gds(hand, corner_cells=True)
    elif variant == "offset":
        blob = hand_gds(hand, ox=rng.choice([10 ** 6, -(10 ** 6), 123457]), oy=-777777)
    elif variant == "scaled":
        # database unit 0.1 nm: coordinates ten times larger, the same geometry
        blob = hand_gds(hand, scale=10, units=real8(1e-4) + real8(1e-10))
    elif variant == "mag1":
        blob = hand_gds(hand, unit_mag=1.0)
    elif variant == "layers":
        layers = (TEMPLATES / "layers.toml").read_text().replace("label     = [10, 0]",
                                                                 "label     = [77, 3]")
        ctx.write("layers.toml", layers)
        blob = hand_gds(hand, label_layer=77)
        blob = blob.replace(rec(0x16, 2, i2(0)), rec(0x16, 2, i2(3)))
        extra_args = ["--layers", "layers.toml"]
    elif variant == "units":
        choice = rng.choice([
            (real8(1e70) + real8(1e70), "huge UNITS"),
            (real8(1e-70) + real8(1e-75), "tiny UNITS"),
            (b"\x00" * 16, "zero UNITS"),
            (real8(-1e-3) + real8(-1e-9), "negative UNITS"),
            (b"\x7f\xff\xff\xff\xff\xff\xff\xff" * 2, "the largest GDSII real as UNITS"),
            (b"\x41\x00\x00\x00\x00\x00\x00\x00" * 2, "unnormalised zero UNITS"),
            (real8(1.0) + real8(1e-6), ""),
        ])
        blob = hand_gds(hand, units=choice[0])
        why = choice[1] and f"{choice[1]} (no sane database unit)"
        ctx.note(f"UNITS: {choice[1] or 'user unit 1, db unit 1 um'}")
    elif variant in ("aref_huge", "aref_medium"):
        n = 32767 if variant == "aref_huge" else rng.choice([150, 200])
        cells = [("UA", [g_box(1, 0, -1000, -2000, 1000, 2000), g_text(10, 0, 0, 0, "MA")]),
                 ("UB", [g_box(1, 0, -1000, -2000, 1000, 2000), g_text(10, 0, 0, 0, "MB")]),
                 ("TOP", [g_aref("UA", n, n, 0, 0, 3000, 5000),
                          g_aref("UB", n, n, 3000 * n, 0, 3000, 5000)])]
        blob = gds_library(cells)
        why = "more than 65 536 units"
        ctx.note(f"two AREFs of {n} x {n}")
    elif variant == "deep":
        depth = rng.choice([14, 17, 30, 60])
        cells = [("L0A", [g_box(1, 0, -1000, -2000, 1000, 2000), g_text(10, 0, 0, 0, "MA")]),
                 ("L0B", [g_box(1, 0, -1000, -2000, 1000, 2000), g_text(10, 0, 0, 0, "MB")])]
        for k in range(1, depth + 1):
            for d in "AB":
                step = 3000 * (1 << ((k - 1) // 2)) if k % 2 else 0
                stepy = 5000 * (1 << ((k - 1) // 2)) if not k % 2 else 0
                cells.append((f"L{k}{d}", [g_sref(f"L{k - 1}{d}", 0, 0),
                                           g_sref(f"L{k - 1}{d}", step, -stepy)]))
        span = 3000 * (1 << ((depth + 1) // 2))
        cells.append(("TOP", [g_sref(f"L{depth}A", 0, 0), g_sref(f"L{depth}B", span, 0)]))
        blob = gds_library(cells)
        why = "more than 65 536 units" if 2 * 2 ** depth > 65536 else ""
        ctx.note(f"hierarchy {depth} deep, each level placing the one below twice")
    elif variant == "cycle":
        cells = [("A", [g_box(1, 0, 0, 0, 10, 10), g_sref("B", 100, 0)]),
                 ("B", [g_box(1, 0, 0, 0, 10, 10), g_sref("A", 0, 100)]),
                 ("TOP", [g_sref("A", 0, 0), g_text(10, 0, 5, 5, "MA")])]
        blob = gds_library(cells)
        why = "a reference cycle"
    elif variant == "self_cycle":
        blob = hand_gds(hand).replace(
            rec(0x06, 6, b"UNIT") + g_box(1, 0, 0, 0, 0, 0)[:0],
            rec(0x06, 6, b"UNIT") + g_sref("UNIT", 0, 0))
        why = "a cell that places itself"
    elif variant == "empty_cells":
        cells = [("E", []), ("TOP", [g_sref("E", i * 3000, 0) for i in range(6)]
                                    + [g_text(10, 0, i * 3000, 0, "MA" if i % 2 else "MB")
                                       for i in range(6)])]
        blob = gds_library(cells)
    elif variant == "undefined":
        blob = hand_gds(hand, extra_top=[g_sref("NOSUCHCELL", 0, 0)])
        why = "a reference to an undefined cell"
    elif variant == "nonascii":
        bad = rng.choice([b"M\xe9", b"\xff\xfe", b"M\x00A", "\u03a9".encode(), b"", b" MA",
                          b"MA\n", b"\x1b[31mMA"])
        first = next(iter(hand.devices))
        blob = hand_gds(hand, label_of=lambda s, b=bad, f=first: b if s == f else s)
        ctx.note(f"label of {first} written as bytes {bad!r}")
    elif variant == "case_labels":
        first = next(iter(hand.devices))
        flip = {"v": 0}

        def label_of(s: str, f: str = first) -> str:
            if s == f:
                flip["v"] += 1
                return s.lower() if flip["v"] % 2 else s
            return s
        blob = hand_gds(hand, label_of=label_of)
        why = "labels that differ only by case" if hand.devices[first] > 1 else ""
    elif variant == "odd_angle":
        blob = hand_gds(hand, rotate=rng.choice([37.0, 45.0, 1e-9, 359.999, -90.0, 720.0]))
    elif variant == "raw_angle":
        blob = hand_gds(hand).replace(
            rec(0x0A, 0) + rec(0x12, 6, b"UNIT"),
            rec(0x0A, 0) + rec(0x12, 6, b"UNIT") + rec(0x1A, 1, b"\x00\x00")
            + rec(0x1C, 5, b"\x7f\xff\xff\xff\xff\xff\xff\xff"), 1)
        ctx.note("one reference rotated by the largest GDSII real")
    elif variant == "magnified":
        mag = rng.choice([0.0, -1.0, 2.0, 1e-70, 1e70, 0.5])
        blob = hand_gds(hand, unit_mag=mag)
        ctx.note(f"every reference magnified by {mag}")
    elif variant == "overlap":
        first = next(iter(hand.devices))
        blob = hand_gds(hand, extra_top=[g_sref("UNIT", hand.px, 0), g_text(10, 0, hand.px, 0,
                                                                             first)])
        why = "two units on one slot"
    elif variant == "offgrid":
        first = next(iter(hand.devices))
        blob = hand_gds(hand, extra_top=[
            g_sref("UNIT", hand.px * 4 // 10, -hand.py * 3), g_text(10, 0, hand.px * 4 // 10,
                                                                   -hand.py * 3, first)])
        why = "a unit 40 % of a pitch off its grid"
    elif variant == "far":
        first = next(iter(hand.devices))
        blob = hand_gds(hand, extra_top=[g_sref("UNIT", 2 ** 31 - 1, -(2 ** 31)),
                                         g_text(10, 0, 2 ** 31 - 1, -(2 ** 31), first)])
        ctx.note("one unit at the int32 corner of the coordinate space")
    elif variant == "flat_many":
        n = rng.choice([20_000, 70_000])
        cols = 300
        elems = []
        for i in range(n):
            x, y = (i % cols) * 3000, -(i // cols) * 9000
            elems.append(g_sref("UNIT", x, y))
            elems.append(g_text(10, 0, x, y, "MA" if (i + i // cols) % 2 else "MB"))
        blob = gds_library([("UNIT", [g_box(1, 0, -1000, -2000, 1000, 2000)]), ("TOP", elems)])
        why = "more than 65 536 units" if n > 65536 else ""
        ctx.note(f"{n} flat references")
    elif variant == "two_tops":
        blob = _two_tops(hand)
    elif variant == "no_cells":
        blob = gds_library([])
        why = "a library without cells"
    elif variant == "long_label":
        first = next(iter(hand.devices))
        blob = hand_gds(hand, label_of=lambda s, f=first: "L" * 60000 if s == f else s)
        why = ""
    elif variant == "labels_only":
        cells = [("TOP", [g_text(10, 0, i * 3000, 0, "MA" if i % 2 else "MB")
                          for i in range(8)])]
        blob = gds_library(cells)
    else:  # path elements and boxes of odd shapes
        path = (rec(0x09, 0) + rec(0x0D, 2, i2(1)) + rec(0x0E, 2, i2(0)) + rec(0x0F, 3, i4(-5))
                + rec(0x10, 3, i4(0, 0, 100, 0)) + rec(0x11, 0))
        blob = hand_gds(hand, extra_top=[path, g_box(1, 0, 0, 0, 0, 0)])
    ctx.write("layout.gds", blob)
    ctx.note(f"GDSII variant {variant}" + (f" (must be refused: {why})" if why else ""))
    run_layout(ctx, rng, "layout.gds", hand, benign, why, extra_args,
               use_spec=False if variant in ("flat_many", "aref_medium", "aref_huge", "deep")
               else None)


def _two_tops(hand: Hand) -> bytes:
    body = g_box(1, 0, -1000, -2000, 1000, 2000)
    tops = []
    for t in ("TOPA", "TOPB"):
        elems = []
        for r, c, tok in hand.slots():
            name = tok.rstrip("<>")
            if name in (".", "-"):
                continue
            elems.append(g_sref("UNIT", c * hand.px, -r * hand.py))
            elems.append(g_text(10, 0, c * hand.px, -r * hand.py, name))
        tops.append((t, elems))
    return gds_library([("UNIT", [body]), *tops])


def run_layout(ctx: Ctx, rng: random.Random, layout: str, hand: Hand, benign: bool, why: str,
               extra: list[str], use_spec: bool | None = None) -> None:
    """Grade and repair one layout; equivalent layouts must grade like the pattern text."""
    with_spec = benign or (rng.random() < 0.5 if use_spec is None else use_spec)
    spec_args = ["--spec", "spec.toml"] if with_spec else []
    g = ctx.placer(["grade", layout, *spec_args, "--json", *extra])
    verdict = ctx.judge(g, why)
    if verdict in ("hang", "memory"):
        return                      # the other commands read the same file the same way
    if benign:
        if g.rc != 0 and verdict not in FAILING:
            ctx.outcome.flag("wrong", f"a valid layout ({layout}) is refused: {_tail(g.err)}")
        elif g.rc == 0:
            ref = grade_json(ctx, ["grade", "hand.txt", "--spec", "spec.toml", "--json"])
            got = parse_json(g.out)
            if ref is not None and isinstance(got, dict):
                diffs = compare_grades(ref, got, 1e-6, names_too=False)
                if diffs:
                    ctx.outcome.flag("wrong", f"{layout} grades differently from the same "
                                              "pattern as text: " + "; ".join(diffs))
    if rng.random() < 0.6 or benign:
        args = ["repair", layout, "--out", "out", "--time-limit", "3", *spec_args, *extra]
        if rng.random() < 0.3:
            args += ["--max-swaps", str(rng.choice([1, 2, 64]))]
        run = ctx.placer(args)
        v = check_outputs(ctx, run, "repair", "out", None, False, why)
        if v == "ok" and run.rc == 0 and with_spec:
            check_repair_results(ctx, "out", layout, args)


def check_repair_results(ctx: Ctx, out_rel: str, layout: str, args: list[str]) -> None:
    try:
        rep = json.loads((ctx.dir / out_rel / "repair.json").read_text())
    except (OSError, ValueError) as exc:
        ctx.outcome.flag("half", f"repair.json unreadable: {exc}")
        return
    swaps = rep.get("swaps") or []
    limit = 4
    if "--max-swaps" in args:
        limit = int(args[args.index("--max-swaps") + 1])
    if len(swaps) > limit:
        ctx.outcome.flag("wrong", f"repair made {len(swaps)} swaps, more than --max-swaps {limit}")
    after = (rep.get("after") or {}).get("linear_um")
    before = (rep.get("before") or {}).get("linear_um")
    if isinstance(after, int | float) and isinstance(before, int | float) and after > before + 1e-9:
        ctx.outcome.flag("wrong", f"repair made the linear error worse: {before} -> {after}")
    graded = grade_json(ctx, ["grade", f"{out_rel}/repaired.txt", "--spec", "spec.toml",
                              "--json"])
    if graded is None:
        if ctx.outcome.cls not in FAILING:
            ctx.outcome.flag("wrong", "the repaired.txt repair wrote does not grade with the "
                                      "same spec")
        return
    worst = max((p.get("centroid_distance_um", 0) for p in graded.get("pairs", [])), default=0)
    if isinstance(after, int | float) and not _close(worst, after, 1e-6):
        ctx.outcome.flag("wrong", f"repair.json says the linear worst pair is {after} um after, "
                                  f"grade of repaired.txt says {worst} um")


# --------------------------------------------------------------------------- CSV family


def gen_csv(ctx: Ctx, rng: random.Random) -> None:
    hand = make_hand(rng)
    ctx.write("hand.txt", hand.text())
    ctx.write("spec.toml", hand.spec())
    headers = [["x_um", "y_um", "device", "orientation"], ["X", "Y", "Name", "Orientation"],
               ["x", "y", "DEVICE", "orientation"]]
    variant = ctx.pick([
        "plain", "semicolon", "tab", "noheader", "reorder", "shuffled", "crlf", "comment",
        "bom", "pipe", "space", "missing_field", "nonnumber", "nan", "inf", "huge", "decimal_comma",
        "many_ok", "many_over", "empty", "header_only", "case_names", "duplicate_pos",
        "extra_col", "dup_header", "quoted", "bad_orient", "offgrid", "trailing_sep",
        "nul", "badutf8", "long_line", "mixed_sep"])
    benign = variant in ("plain", "semicolon", "tab", "noheader", "reorder", "shuffled",
                         "comment")
    why = ""
    order = (0, 1, 2, 3)
    header = rng.choice(headers)
    sep = ","
    if variant == "semicolon":
        sep = ";"
    elif variant == "tab":
        sep = "\t"
    elif variant == "pipe":
        sep = "|"
    elif variant == "space":
        sep = " "
    if variant == "noheader":
        text = hand_csv(hand, header=None)
    elif variant == "reorder":
        order = tuple(rng.sample([0, 1, 2, 3], 4))
        text = hand_csv(hand, header=header, order=order)
    elif variant == "shuffled":
        text = hand_csv(hand, header=header, shuffle=rng)
    elif variant == "crlf":
        text = hand_csv(hand, header=header, newline="\r\n")
    elif variant == "comment":
        text = hand_csv(hand, header=header, comment=True)
    else:
        text = hand_csv(hand, header=header, sep=sep)
    lines = text.splitlines()
    body = lines[1:]
    if variant == "bom":
        text = "\ufeff" + text
    elif variant == "missing_field":
        i = rng.randrange(1, len(lines))
        lines[i] = lines[i].rsplit(",", 2)[0]
        text = "\n".join(lines) + "\n"
        why = "a row without its device"
    elif variant == "nonnumber":
        i = rng.randrange(1, len(lines))
        lines[i] = "abc," + lines[i].split(",", 1)[1]
        text = "\n".join(lines) + "\n"
        why = "a coordinate that is not a number"
    elif variant in ("nan", "inf", "huge"):
        value = {"nan": "nan", "inf": rng.choice(["inf", "-inf", "1e400"]),
                 "huge": rng.choice(["1e300", "1e30", "-1e300"])}[variant]
        i = rng.randrange(1, len(lines))
        lines[i] = value + "," + lines[i].split(",", 1)[1]
        text = "\n".join(lines) + "\n"
        why = f"a coordinate of {value}"
    elif variant == "decimal_comma":
        text = hand_csv(hand, header=header, sep=";").replace(".", ",")
    elif variant in ("many_ok", "many_over"):
        n = 20_000 if variant == "many_ok" else 70_000
        cols = 200
        rows = [",".join(header[:3])]
        for i in range(n):
            dev = "MA" if (i + i // cols) % 2 else "MB"
            rows.append(f"{(i % cols) * 3},{-(i // cols) * 9},{dev}")
        text = "\n".join(rows) + "\n"
        why = "more than 65 536 units" if n > 65536 else ""
    elif variant == "empty":
        text = ""
        why = "an empty file"
    elif variant == "header_only":
        text = lines[0] + "\n"
        why = "no rows"
    elif variant == "case_names":
        first = next(iter(hand.devices))
        count = 0
        out = [lines[0]]
        for ln in body:
            f = ln.split(",")
            if f[2] == first:
                count += 1
                if count % 2:
                    f[2] = first.lower()
            out.append(",".join(f))
        text = "\n".join(out) + "\n"
        why = "device names that differ only by case" if count > 1 else ""
    elif variant == "duplicate_pos":
        text = text + body[0] + "\n"
        why = "two units at one position"
    elif variant == "extra_col":
        text = "\n".join(ln + ",extra" for ln in lines) + "\n"
    elif variant == "dup_header":
        text = "x,x,device,orientation\n" + "\n".join(body) + "\n"
        why = "a header naming x twice"
    elif variant == "quoted":
        text = "\n".join(",".join(f'"{f}"' for f in ln.split(",")) for ln in lines) + "\n"
    elif variant == "bad_orient":
        i = rng.randrange(1, len(lines))
        f = lines[i].split(",")
        f[3] = rng.choice(["^", "left", "<<", "\u2190"])
        lines[i] = ",".join(f)
        text = "\n".join(lines) + "\n"
    elif variant == "offgrid":
        i = rng.randrange(1, len(lines))
        f = lines[i].split(",")
        f[0] = f"{float(f[0]) + hand.px / 1000 * 0.45:g}"
        lines[i] = ",".join(f)
        text = "\n".join(lines) + "\n"
        why = "a unit 45 % of a pitch off its grid"
    elif variant == "trailing_sep":
        text = "\n".join(ln + "," for ln in lines) + "\n"
    elif variant == "nul":
        text = text.replace(",", ",\x00", 1)
    elif variant == "badutf8":
        ctx.write("layout.csv", text.encode() + b"9,9,M\xff\xfe,\n")
    elif variant == "long_line":
        text = text + "1," + "9" * 2_000_000 + ",MA,\n"
        why = "a 2-million-digit coordinate"
    elif variant == "mixed_sep":
        text = "\n".join(ln.replace(",", ";", 1) if i % 2 else ln
                         for i, ln in enumerate(lines)) + "\n"
    if variant != "badutf8":
        ctx.write("layout.csv", text)
    ctx.note(f"CSV variant {variant}" + (f" (must be refused: {why})" if why else ""))
    # the many-row files are not the hand layout: grade them without its spec
    run_layout(ctx, rng, "layout.csv", hand, benign, why, [],
               use_spec=False if variant.startswith("many") else None)


# --------------------------------------------------------------------------- pattern family


def gen_pattern(ctx: Ctx, rng: random.Random) -> None:
    hand = make_hand(rng)
    ctx.write("spec.toml", hand.spec())
    canon = hand.text()
    ctx.write("hand.txt", canon)
    variant = ctx.pick([
        "plain", "tabs", "comments", "spaces", "ragged", "unknown_token", "unknown_token",
        "huge_row", "wide_ok", "case_names", "all_dummies", "all_empty", "crlf", "bom",
        "long_name", "big_file", "nul", "badutf8", "one_device", "empty", "double_mark",
        "unicode_name", "many_rows", "many_over"])
    benign = variant in ("plain", "tabs", "comments", "spaces")
    why = ""
    lines = canon.splitlines()
    text = canon
    if variant == "tabs":
        text = canon.replace(" ", "\t")
    elif variant == "comments":
        text = "# hand pattern\n\n" + "\n\n".join(lines) + "\n# end\n"
    elif variant == "spaces":
        text = "\n".join("   " + ln + "   " for ln in lines) + "\n"
    elif variant == "ragged":
        if len(lines) == 1:
            lines.append(" ".join(lines[0].split()[:-1]))
        else:
            lines[-1] = lines[-1] + " ."
        text = "\n".join(lines) + "\n"
        why = "rows of different lengths"
    elif variant == "unknown_token":
        tok = rng.choice(["1A", "M-1", "M\u00e9", "<", "MA><", "M.A", "M$", "\u2603", "_A"])
        toks = lines[0].split()
        toks[1] = tok
        lines[0] = " ".join(toks)
        text = "\n".join(lines) + "\n"
        why = f"an invalid token {tok!r}"
    elif variant == "huge_row":
        text = " ".join(["MA", "MB"] * 150_000) + "\n"
        why = "more than 262 144 slots"
    elif variant == "wide_ok":
        text = " ".join(["MA", "MB"] * 2000) + "\n"
    elif variant == "case_names":
        text = canon.replace(next(iter(hand.devices)), next(iter(hand.devices)).lower(), 1)
    elif variant == "all_dummies":
        text = "\n".join(" ".join("." for _ in ln.split()) for ln in lines) + "\n"
    elif variant == "all_empty":
        text = "\n".join(" ".join("-" for _ in ln.split()) for ln in lines) + "\n"
    elif variant == "crlf":
        text = canon.replace("\n", "\r\n")
    elif variant == "bom":
        text = "\ufeff" + canon
    elif variant == "long_name":
        text = canon + " ".join(["N" + "x" * 100_000] * len(lines[0].split())) + "\n"
        why = "a 100 001-character device name"
    elif variant == "big_file":
        text = canon + ("# " + "c" * 1000 + "\n") * 4200
        why = "a pattern over 4 MB"
    elif variant == "nul":
        text = canon.replace(" ", "\x00", 1)
        why = "a NUL byte"
    elif variant == "one_device":
        text = "MA MA\nMA MA\n"
    elif variant == "empty":
        text = rng.choice(["", "\n\n", "# only a comment\n"])
        why = "no units"
    elif variant == "double_mark":
        text = canon.replace(">", ">>", 1).replace("<", "<>", 1)
        why = "a token with two orientation marks"
    elif variant == "unicode_name":
        text = canon.replace("MA", "\u041cA")
        why = "a non-ASCII device name" if "MA" in canon else ""
    elif variant == "many_rows":
        text = "MA MB\nMB MA\n" * 20_000
    elif variant == "many_over":
        text = ("MA MB " * 100 + "\n" + "MB MA " * 100 + "\n") * 175
        why = "more than 65 536 units"
    if variant == "badutf8":
        ctx.write("layout.txt", canon.encode() + b"M\xff\xfe M\xff\xfe\n")
        why = "invalid UTF-8"
    else:
        ctx.write("layout.txt", text)
    ctx.note(f"pattern variant {variant}" + (f" (must be refused: {why})" if why else ""))
    mode = rng.choice(["grade", "grade", "draw", "repair"])
    spec_args = ["--spec", "spec.toml"] if (benign or rng.random() < 0.5) else []
    if variant in ("many_rows", "many_over", "wide_ok", "huge_row"):
        spec_args = []              # not the hand layout: its spec would refuse it anyway
    if mode == "grade" or benign:
        g = ctx.placer(["grade", "layout.txt", *spec_args, "--json"])
        verdict = ctx.judge(g, why)
        if verdict in ("hang", "memory"):
            return
        if benign and g.rc != 0 and verdict not in FAILING:
            ctx.outcome.flag("wrong", f"a valid pattern variant is refused: {_tail(g.err)}")
        elif benign and g.rc == 0:
            ref = grade_json(ctx, ["grade", "hand.txt", "--spec", "spec.toml", "--json"])
            got = parse_json(g.out)
            if ref is not None and isinstance(got, dict):
                diffs = compare_grades(ref, got, 1e-12, names_too=True)
                if diffs:
                    ctx.outcome.flag("wrong", f"pattern variant {variant} grades differently: "
                                              + "; ".join(diffs))
    if mode == "draw":
        run = ctx.placer(["draw", "layout.txt", *spec_args, "--out", "out"])
        v = check_outputs(ctx, run, "draw", "out", None, False, why)
        if v == "ok" and run.rc == 0 and spec_args:
            check_draw_results(ctx, "out", "layout.txt", "spec.toml")
    elif mode == "repair":
        args = ["repair", "layout.txt", "--out", "out", "--time-limit", "3", *spec_args]
        run = ctx.placer(args)
        v = check_outputs(ctx, run, "repair", "out", None, False, why)
        if v == "ok" and run.rc == 0 and spec_args:
            check_repair_results(ctx, "out", "layout.txt", args)


# --------------------------------------------------------------------------- CLI family

FLOATS = [("2", ""), ("0.5", ""), ("0", "a zero time limit"), ("-1", "a negative time limit"),
          ("nan", "a nan time limit"), ("inf", "an infinite time limit"),
          ("-inf", "a negative infinite time limit"), ("1e308", ""), ("1e-300", ""),
          ("abc", "not a number"), ("", "an empty value"), ("0x10", "a hex number"),
          ("1e999", "an overflowing time limit"), ("1_0", "")]
INTS = [("0", ""), ("1", ""), ("3", ""), ("-1", "a negative count"),
        ("18446744073709551617", "?2**64+1"), ("1" + "0" * 400, "?a 401-digit integer"),
        ("x", "not an integer"), ("", "an empty value"), ("3.5", "a fraction"),
        ("50", ""), ("51", "over the documented maximum"), ("64", ""), ("65", "")]
BAD_LAYERS = {
    "layers_big.toml": ("label     = [10, 0]", "label     = [40000, 0]", "a layer over 32767"),
    "layers_neg.toml": ("metal1    = [4, 0]", "metal1    = [-1, 0]", "a negative layer"),
    "layers_nan.toml": ("gate      = [2, 0]", "gate      = [nan, 0]", "a nan layer"),
    "layers_connect.toml": ('conductors = ["diffusion", "gate", "metal1", "metal2"]',
                            'conductors = ["diffusion", "gate", "metal1"]',
                            "a changed [connect]"),
    "layers_role.toml": ("dummy     = [12, 0]", "dummy     = [12, 0]\nbogus = [1, 1]",
                         "an unknown role"),
    "layers_str.toml": ("via1      = [6, 0]", 'via1      = "six"', "a string layer"),
    "layers_deep.toml": ("via1      = [6, 0]", "via1      = " + "[" * 3000 + "]" * 3000,
                         "deeply nested TOML"),
}
BAD_TEMPLATES = {
    "tmpl_neg.toml": ("contact = 0.2 ", "contact = -0.2 ", "a negative rule"),
    "tmpl_nan.toml": ("metal1_width = 0.25", "metal1_width = nan", "a nan rule"),
    "tmpl_huge.toml": ("metal2_space = 0.3", "metal2_space = 1e308", "a huge rule"),
    "tmpl_tiny.toml": ("via1 = 0.25 ", "via1 = 1e-300 ", "a tiny rule"),
    "tmpl_kind.toml": ('kind = "mos"', 'kind = "cap"', "a template of another kind"),
    "tmpl_unknown.toml": ("[rules]", "[rules]\nbogus_rule = 1.0", "an unknown rule"),
}


def cli_files(ctx: Ctx) -> None:
    ctx.write("spec.toml", (SAMPLES / "bias_mirror.toml").read_bytes())
    ctx.write("pair.toml", (SAMPLES / "input_pair.toml").read_bytes())
    ctx.write("pat.txt", (SAMPLES / "bias_mirror_hand.txt").read_bytes())
    ctx.write("hand.gds", (SAMPLES / "bias_mirror_hand.gds").read_bytes())
    ctx.write("hand.csv", (SAMPLES / "bias_mirror_hand.csv").read_bytes())
    layers = (TEMPLATES / "layers.toml").read_text()
    ctx.write("layers_good.toml", layers.replace("[4, 0]", "[40, 7]"))
    for name, (old, new, _) in BAD_LAYERS.items():
        ctx.write(name, layers.replace(old, new, 1))
    tmpl = (TEMPLATES / "mos_finger.toml").read_text()
    ctx.write("tmpl_good.toml", tmpl)
    for name, (old, new, _) in BAD_TEMPLATES.items():
        ctx.write(name, tmpl.replace(old, new, 1))
    # a user's own unit cell: terminals as texts on metal1 (4/0); its outline (11/0) keeps
    # the diffusion off the sides where the next unit abuts
    cell = [g_box(11, 0, -1300, -1500, 1300, 1900),
            g_box(1, 0, -1000, -1500, 1000, 1500), g_box(4, 0, -900, -1400, -500, 1400),
            g_box(4, 0, 500, -1400, 900, 1400), g_box(4, 0, -200, 1500, 200, 1900),
            g_text(4, 0, -700, 0, "source"), g_text(4, 0, 700, 0, "drain"),
            g_text(4, 0, 0, 1700, "gate")]
    ctx.write("cell_good.gds", gds_library([("MYFINGER", cell)]))
    ctx.write("cell_nolabels.gds", gds_library([("MYFINGER", cell[:5])]))
    ctx.write("cell_cycle.gds", gds_library([("A", [g_sref("B", 0, 0)]),
                                             ("B", [g_sref("A", 0, 0)])]))
    ctx.write("not_a_dir", b"x")


def gen_cli(ctx: Ctx, rng: random.Random) -> None:
    cli_files(ctx)
    cmd = rng.choice(["arrange", "arrange", "grade", "draw", "compare", "repair", "repair"])
    why: list[str] = []
    args: list[str] = [cmd]
    pos_choices = {
        "arrange": ["spec.toml", "spec.toml", "pair.toml", "missing.toml", "", ".",
                    "/dev/null", "pat.txt", "hand.gds"],
        "compare": ["spec.toml", "pair.toml", "missing.toml", "/dev/null"],
        "grade": ["pat.txt", "hand.gds", "hand.csv", "spec.toml", "missing.gds", "/dev/null",
                  "."],
        "draw": ["pat.txt", "pat.txt", "hand.csv", "missing.txt", "/dev/null"],
        "repair": ["pat.txt", "hand.gds", "hand.csv", "hand.gds", "/dev/null", "missing.gds"],
    }
    if rng.random() < 0.02:
        pos_choices[cmd].append("/dev/zero")
    pos = rng.choice(pos_choices[cmd])
    if rng.random() < 0.5:
        pos = {"arrange": "spec.toml", "compare": "spec.toml", "grade": "hand.gds",
               "draw": "pat.txt", "repair": "hand.gds"}[cmd]
    valid_pos = pos in ("spec.toml", "pair.toml", "pat.txt", "hand.gds", "hand.csv")
    if cmd == "draw" and pos == "hand.csv":
        valid_pos = False
    if cmd == "grade" and pos == "spec.toml":
        valid_pos = False
    if cmd == "arrange" and pos in ("pat.txt", "hand.gds"):
        valid_pos = False
    if not valid_pos:
        why.append(f"the input {pos!r}")
    if rng.random() > 0.03:
        args.append(pos)
    else:
        why.append("no positional argument")
    opts: dict[str, list[tuple[str, str]]] = {
        "--time-limit": FLOATS, "--seed": INTS[:9], "--candidates": INTS,
        "--method": [("auto", ""), ("clustered", ""), ("milp", ""), ("mirrored", ""),
                     ("bogus", "an unknown method"), ("AUTO", "")],
        "--max-swaps": INTS,
        "--layers": [("layers_good.toml", "")] + [(n, w) for n, (_, _, w) in BAD_LAYERS.items()]
        + [("missing.toml", "a missing file")],
        "--template": [("tmpl_good.toml", "")] + [(n, w) for n, (_, _, w) in
                                                   BAD_TEMPLATES.items()],
        "--unit-gds": [("cell_good.gds", ""), ("cell_nolabels.gds", "a cell without terminal "
                                                                     "labels"),
                       ("cell_cycle.gds", "a cell cycle"), ("hand.gds", "")],
        "--unit-cell": [("MYFINGER", ""), ("NOSUCH", "an unknown cell"), ("", "")],
        "--cell": [("bias_mirror_TOP", ""), ("NOSUCH", "an unknown cell"), ("", "")],
        "--map": [("UNIT=MREF", ""), ("noequals", "a --map without ="), ("=X", "")],
        "--dummy-cell": [("bias_mirror_DUMMY", ""), ("NOSUCH", "")],
        "--spec": [("spec.toml", ""), ("pair.toml", ""), ("missing.toml", "a missing spec")],
        "--out": [("out", ""), ("out", ""), ("not_a_dir", "an --out that is a file"),
                  ("not_a_dir/sub", "an --out inside a file"), ("", "?an empty --out"),
                  ("deep/er/out", ""), ("o" * 300, "an --out name over 255 bytes")],
        "--budget-plot": [("b.png", ""), ("b.svg", ""), ("b.xyz", "an unknown picture type"),
                          ("nodir/b.png", "")],
        "--sensitivity-plot": [("s.png", ""), ("s.pdf", ""), ("s", "")],
    }
    flags = {"arrange": ["--quiet", "--force"], "draw": ["--force", "--gradient"],
             "compare": ["--force"], "repair": ["--force"], "grade": ["--json"]}
    per_cmd = {
        "arrange": ["--out", "--time-limit", "--seed", "--candidates", "--method", "--layers",
                    "--template", "--unit-gds", "--unit-cell"],
        "grade": ["--spec", "--budget-plot", "--sensitivity-plot", "--cell", "--map",
                  "--dummy-cell", "--layers"],
        "draw": ["--spec", "--out", "--layers", "--template", "--unit-gds", "--unit-cell"],
        "compare": ["--out", "--seed", "--time-limit"],
        "repair": ["--out", "--spec", "--max-swaps", "--seed", "--time-limit", "--force",
                   "--cell", "--map", "--dummy-cell", "--layers", "--template"],
    }
    chosen = rng.sample(per_cmd[cmd], k=min(len(per_cmd[cmd]), rng.randint(1, 3)))
    has_out = cmd in ("arrange", "draw", "compare", "repair")
    if has_out and "--out" not in chosen and rng.random() < 0.9:
        chosen.append("--out")
    out_rel = None
    layers = None
    for opt in chosen:
        if opt == "--force":
            args.append(opt)
            continue
        pool = opts[opt]
        if rng.random() < 0.55:     # most options valid, so that the hostile one is reached
            pool = [(v, w) for v, w in pool if not w] or pool
        value, w = rng.choice(pool)
        if opt == "--time-limit" and cmd in ("grade",):
            continue
        if opt == "--candidates" and w == "" and value in ("64",):
            w = "over the documented maximum"
        if opt == "--max-swaps" and value in ("0",):
            w = "under the documented minimum"
        if opt == "--max-swaps" and value in ("65", "50", "51"):
            w = "over the documented maximum" if value == "65" else ""
        if opt == "--candidates" and value in ("65", "64"):
            w = "over the documented maximum"
        if opt == "--seed" and value == "3.5":
            w = "a fraction"
        args += [opt, value]
        if w:
            why.append(f"{opt} {value!r}: {w}")
        if opt == "--out":
            out_rel = value
        if opt == "--layers":
            layers = value
    if has_out and "--out" not in chosen:
        why.append("no --out")
    if cmd in ("arrange", "compare", "repair") and "--time-limit" not in chosen:
        args += ["--time-limit", "2"]
    if cmd == "arrange" and rng.random() < 0.7:
        args.append("--quiet")
    if rng.random() < 0.25:
        args.append(rng.choice(flags[cmd]))
    if rng.random() < 0.1:
        args.append(rng.choice(["--bogus", "--out", "--seed", "-x", "--time-limit"]))
        why.append("an unknown option or an option without its value")
    if rng.random() < 0.05:
        args.append("extra_positional")
        why.append("an extra positional argument")
    soft = "; ".join(w.replace("?", "") for w in why if _soft(w))
    reason = "; ".join(w for w in why if not _soft(w))
    ctx.note("hostile: " + ("; ".join(why) or "nothing invalid").replace("?", ""))
    if "/dev/zero" in args:
        ctx.note("input is /dev/zero: a file without end")
    kind = cmd if has_out else None
    before = snapshot(ctx.dir / out_rel) if out_rel else None
    if out_rel in ("", "not_a_dir", "not_a_dir/sub") or (out_rel and len(out_rel) > 255):
        kind = None
    run = ctx.placer(args)
    verdict = check_outputs(ctx, run, kind, out_rel, before, "--force" in args, reason)
    if run.rc == 0 and soft and not reason:
        ctx.outcome.notes.append(f"accepted `placer {_show(args)}` ({soft})")
    if cmd == "arrange" and verdict == "ok" and run.rc == 0 and out_rel and pos in (
            "spec.toml", "pair.toml") and "--unit-gds" not in args:
        check_arrange_results(ctx, out_rel, pos, args, layers, rerun=False)


def _soft(reason: str) -> bool:
    """A reason marked '?' is doubtful: its acceptance is noted, not counted as wrong."""
    return "?" in reason


# --------------------------------------------------------------------------- concurrency


def gen_concurrency(ctx: Ctx, rng: random.Random) -> None:
    ctx.write("spec.toml", (SAMPLES / rng.choice(["bias_mirror", "sar_cdac"])).with_suffix(
        ".toml").read_bytes())
    existing = ctx.index % 2 == 1
    methods = rng.sample(["clustered", "interdigitated", "mirrored", "auto"], 2)
    cands = [rng.choice(["0", "2"]), rng.choice(["0", "3"])]
    common = ["arrange", "spec.toml", "--out", "out", "--time-limit", "3", "--quiet"]
    if existing:
        first = ctx.placer(common + ["--method", "clustered", "--candidates", "4"])
        if ctx.judge(first) != "ok" or first.rc != 0:
            ctx.outcome.flag("wrong", "the preparing run failed: " + _tail(first.err))
            return
    ctx.note("the next two commands are started at the same moment" + (
        " on the existing --out (with --force)" if existing else " on a new --out"))
    before = snapshot(ctx.dir / "out")
    extra = ["--force"] if existing else []
    runs_args = [common + ["--method", m, "--candidates", c] + extra
                 for m, c in zip(methods, cands, strict=True)]
    procs = [ctx.start(a) for a in runs_args]
    runs = [ctx.wait(p) for p in procs]
    verdicts = [ctx.judge(r, allow_130=False) for r in runs]
    if any(v in FAILING for v in verdicts):
        return
    out = ctx.dir / "out"
    ok = [r for r in runs if r.rc == 0]
    if len(ok) == 2 and not existing:
        ctx.outcome.flag("wrong", "both runs exit 0 on the same new --out without --force "
                                  "(one overwrote the other's files, or neither was refused)")
    after = snapshot(out)
    if not ok:
        if after != before:
            ctx.outcome.flag("half", "both runs refused but --out changed: "
                                     + _diff(before, after))
        return
    required, allowed, problems = expected_set("arrange", out)
    names = {p.name for p in out.iterdir()} if out.is_dir() else set()
    if problems or not required <= names:
        ctx.outcome.flag("half", "after two concurrent runs the set is incomplete: missing "
                                 f"{sorted(required - names)} {problems}")
        return
    hidden = sorted(n for n in names if n.startswith("."))
    if hidden:
        ctx.outcome.flag("half", f"staging left behind: {hidden}")
    stale = sorted(names - allowed)
    if stale:
        ctx.outcome.flag("half", f"files of another run mixed in: {stale}")
    report = json.loads((out / "report.json").read_text())
    pattern = (out / "pattern.txt").read_text()
    if isinstance(report.get("pattern"), str) and _rows(report["pattern"]) != _rows(pattern):
        ctx.outcome.flag("wrong", "pattern.txt and report.json come from different runs")
    g = grade_json(ctx, ["grade", "out/pattern.gds", "--spec", "spec.toml", "--json"])
    if g is not None and isinstance(report.get("grade"), dict):
        diffs = compare_grades(report["grade"], g, 1e-6, names_too=False)
        if diffs:
            ctx.outcome.flag("wrong", "pattern.gds and report.json come from different runs: "
                                      + "; ".join(diffs))
    winner_methods = [m for m, r in zip(methods, runs, strict=True) if r.rc == 0]
    method = str(report.get("method", ""))
    if winner_methods and method and not any(_method_matches(m, method) for m in
                                             winner_methods):
        ctx.outcome.flag("wrong", f"report.json is from method {method!r}, but only "
                                  f"{winner_methods} exited 0")


def _method_matches(asked: str, reported: str) -> bool:
    if asked == "auto":
        return reported not in ("clustered", "interdigitated", "mirrored", "milp")
    return asked in reported


# --------------------------------------------------------------------------- interrupts


def medium_spec(rng: random.Random) -> str:
    choice = rng.choice(["cdac8", "sar", "mirror"])
    if choice == "sar":
        return (SAMPLES / "sar_cdac.toml").read_text()
    if choice == "mirror":
        return ('name = "mirror_med"\nkind = "mos"\n\n[devices]\nMR = 4\nMA = 8\nMB = 12\n'
                'MC = 16\n\n[array]\nrows = 4\ndummies = "ends"\n\n[unit]\nwidth_um = 2.0\n'
                'length_um = 1.0\n\n[electrical]\nreference = "MR"\nvov_v = 0.2\n'
                'lambda_per_v = 0.1\n\n[electrical.vds_v]\nMR = 0.7\nMA = 1.0\nMB = 1.0\n'
                'MC = 1.0\n')
    return ('name = "cdac8"\nkind = "cap"\n\n[devices]\nCT = 1\n'
            + "".join(f"C{i} = {2 ** i}\n" for i in range(8))
            + '\n[array]\nrows = 16\ncolumns = 16\ndummies = "ring"\n\n[unit]\nwidth_um = 4.0\n'
              'length_um = 4.0\n\n[electrical]\ntermination = "CT"\nmc_samples = 500\n')


def gen_interrupt(ctx: Ctx, rng: random.Random, min_delay: float = 0.0) -> None:
    ctx.write("spec.toml", medium_spec(rng))
    existing = rng.random() < 0.35
    if existing:
        prep = ctx.placer(["arrange", "spec.toml", "--out", "out", "--method", "clustered",
                           "--quiet", "--candidates", "2"])
        if ctx.judge(prep) != "ok" or prep.rc != 0:
            ctx.outcome.flag("wrong", "the preparing run failed: " + _tail(prep.err))
            return
    before = snapshot(ctx.dir / "out")
    sig = rng.choice(["INT-group", "INT-pid", "TERM-pid", "INT-twice", "TERM-INT"])
    delay = round(rng.uniform(min_delay, 3.5), 2)
    if min_delay == 0.0 and ctx.index % 4 == 0:
        delay = round(rng.uniform(0.02, 0.4), 2)     # while the interpreter starts
    args = ["arrange", "spec.toml", "--out", "out", "--time-limit", "6"]
    if existing:
        args.append("--force")
    if rng.random() < 0.5:
        args.append("--quiet")
    proc = ctx.start(args)
    ctx.note(f"send {sig} {delay} s after the start of the command above")
    time.sleep(max(0.0, proc.start + delay - time.monotonic()))
    pid = proc.popen.pid
    try:
        if sig == "INT-group":
            os.killpg(pid, signal.SIGINT)
        elif sig == "INT-pid":
            os.kill(pid, signal.SIGINT)
        elif sig == "TERM-pid":
            os.kill(pid, signal.SIGTERM)
        elif sig == "INT-twice":
            os.killpg(pid, signal.SIGINT)
            time.sleep(0.15)
            os.killpg(pid, signal.SIGINT)
        else:
            os.kill(pid, signal.SIGTERM)
            time.sleep(0.1)
            os.killpg(pid, signal.SIGINT)
    except ProcessLookupError:
        ctx.note("the run had already finished")
    run = ctx.wait(proc)
    verdict = ctx.judge(run, allow_130=True)
    out = ctx.dir / "out"
    after = snapshot(out)
    if verdict in ("hang", "memory"):
        return
    if after == before:
        return
    if after is not None and out.is_dir():
        required, allowed, problems = expected_set("arrange", out)
        names = {p.name for p in out.iterdir()}
        hidden = sorted(n for n in names if n.startswith("."))
        complete = required <= names and not problems
        if complete and not hidden:
            try:
                report = json.loads((out / "report.json").read_text())
                pat = (out / "pattern.txt").read_text()
                if _rows(report.get("pattern", "")) != _rows(pat):
                    ctx.outcome.flag("half", f"after {sig} at {delay} s pattern.txt and "
                                             "report.json come from different runs")
            except (OSError, ValueError, AttributeError) as exc:
                ctx.outcome.flag("half", f"after {sig} at {delay} s: {exc}")
            stale = sorted(n for n in names - allowed if not n.startswith("."))
            if stale and existing:
                ctx.outcome.flag("half", f"after {sig} at {delay} s stale files of the previous "
                                         f"set remain: {stale}")
            return
        ctx.outcome.flag("half", f"after {sig} at {delay} s (exit {run.rc}) --out holds a partial "
                                 f"set: {_diff(before, after)}")
        return
    if before is not None:
        ctx.outcome.flag("half", f"after {sig} at {delay} s the previous set is gone")


# --------------------------------------------------------------------------- full disk


def _mount(target: Path, opts: str, ro: bool = False) -> bool:
    target.mkdir(parents=True, exist_ok=True)
    cmd = ["mount", "-t", "tmpfs", "-o", opts + (",ro" if ro else ""), "tmpfs", str(target)]
    try:
        r = subprocess.run(cmd, capture_output=True, timeout=20)
    except (OSError, subprocess.TimeoutExpired):
        return False
    return r.returncode == 0


def _umount(target: Path) -> None:
    for extra in ([], ["-l"]):
        try:
            r = subprocess.run(["umount", *extra, str(target)], capture_output=True, timeout=20)
            if r.returncode == 0:
                return
        except (OSError, subprocess.TimeoutExpired):
            pass


def _fill(disk: Path, leave: int) -> None:
    """Fill the mounted tmpfs so that about ``leave`` bytes stay free."""
    reserve = disk / "reserve"
    fd = os.open(reserve, os.O_WRONLY | os.O_CREAT, 0o644)
    try:
        if leave:
            os.write(fd, b"r" * leave)
    except OSError:
        pass
    finally:
        os.close(fd)
    fd = os.open(disk / "filler", os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o644)
    try:
        for size in (65536, 4096, 512):
            chunk = b"f" * size
            try:
                while os.write(fd, chunk) == size:
                    pass
            except OSError:
                pass
    finally:
        os.close(fd)
    reserve.unlink(missing_ok=True)


def gen_disk(ctx: Ctx, rng: random.Random) -> None:
    disk = ctx.dir / "disk"
    variant = ctx.pick(["free-0", "free-2048", "free-16384", "free-65536", "free-150000",
                        "free-300000", "free-600000", "inodes"])
    inodes = variant == "inodes"
    opts = "size=2m" + (",nr_inodes=12" if inodes else "")
    if not _mount(disk, opts):
        ctx.skipped = True
        ctx.note("could not mount a tmpfs; skipped")
        return
    try:
        ctx.script.append(f"mount -t tmpfs -o {opts} tmpfs disk")
        ctx.write("spec.toml", (SAMPLES / rng.choice(["sar_cdac", "bias_mirror", "ref_ladder"])
                                ).with_suffix(".toml").read_bytes())
        existing = rng.random() < 0.4
        method = rng.choice(["clustered", "mirrored", "auto"])
        args = ["arrange", "spec.toml", "--out", "disk/out", "--time-limit", "2", "--quiet",
                "--method", method]
        if existing:
            prep = ctx.placer(["arrange", "spec.toml", "--out", "disk/out", "--quiet",
                               "--method", "interdigitated", "--candidates", "3",
                               "--time-limit", "2"])
            if prep.rc != 0:
                ctx.judge(prep)
                if ctx.outcome.cls not in FAILING:
                    ctx.outcome.flag("clear", "")
                return
            args.append("--force")
        leave = 0 if inodes else int(variant.split("-")[1])
        if not inodes:
            _fill(disk, leave)
            ctx.note(f"filled the disk leaving about {leave} bytes: "
                     f"fallocate/dd a filler file into disk/")
        before = snapshot(ctx.dir / "disk" / "out")
        run = ctx.placer(args)
        check_outputs(ctx, run, "arrange", "disk/out", before, existing)
        if run.rc == 0 and ctx.outcome.cls not in FAILING:
            try:
                json.loads((disk / "out" / "report.json").read_text())
            except (OSError, ValueError) as exc:
                ctx.outcome.flag("half", f"report.json written to the full disk is damaged: {exc}")
        leftovers = sorted(p.name for p in disk.iterdir()
                           if p.name not in ("filler", "reserve", "out"))
        if leftovers:
            ctx.outcome.flag("half", f"left {leftovers} on the disk")
    finally:
        _umount(disk)


# --------------------------------------------------------------------------- environment

ENV_CASES = [
    ("sde_huge", {"SOURCE_DATE_EPOCH": str(10 ** 30)}, "arrange"),
    ("sde_negative", {"SOURCE_DATE_EPOCH": "-1"}, "draw"),
    ("sde_text", {"SOURCE_DATE_EPOCH": "yesterday"}, "arrange"),
    ("sde_empty", {"SOURCE_DATE_EPOCH": ""}, "draw"),
    ("sde_digits", {"SOURCE_DATE_EPOCH": "9" * 400}, "draw"),
    ("sde_float", {"SOURCE_DATE_EPOCH": "1e9"}, "arrange"),
    ("sde_2_63", {"SOURCE_DATE_EPOCH": str(2 ** 63)}, "repair"),
    ("sde_spaces", {"SOURCE_DATE_EPOCH": " 42 "}, "draw"),
    ("readonly_out", {}, "readonly"),
    ("readonly_parent", {}, "readonly_parent"),
    ("out_is_file", {}, "out_file"),
    ("out_in_file", {}, "out_in_file"),
    ("out_long", {}, "out_long"),
    ("umask_077", {}, "umask"),
    ("umask_000", {}, "umask"),
    ("stdout_full", {}, "stdout_full"),
    ("stdout_closed", {}, "stdout_closed"),
    ("no_home_tmp", {"HOME": None, "TMPDIR": "/nonexistent/tmp", "MPLCONFIGDIR": None},
     "arrange"),
    ("c_locale_unicode_out", {"LC_ALL": "C", "LANG": "C"}, "unicode_out"),
    ("sde_fixed_twice", {"SOURCE_DATE_EPOCH": "1700000000"}, "twice"),
]


def gen_env(ctx: Ctx, rng: random.Random) -> None:
    if ctx.forced is None:
        name, env, action = ENV_CASES[ctx.index % len(ENV_CASES)]
    else:
        name, env, action = next(c for c in ENV_CASES if c[0] == ctx.pick([e[0] for e in
                                                                           ENV_CASES]))
    ctx.note(f"environment case {name}")
    ctx.write("spec.toml", (SAMPLES / "bias_mirror.toml").read_bytes())
    ctx.write("pat.txt", (SAMPLES / "bias_mirror_hand.txt").read_bytes())
    ctx.write("hand.gds", (SAMPLES / "bias_mirror_hand.gds").read_bytes())
    arrange = ["arrange", "spec.toml", "--out", "out", "--time-limit", "2", "--quiet"]
    if action in ("arrange", "draw", "repair"):
        args = {"arrange": arrange,
                "draw": ["draw", "pat.txt", "--spec", "spec.toml", "--out", "out"],
                "repair": ["repair", "hand.gds", "--spec", "spec.toml", "--out", "out",
                           "--time-limit", "2"]}[action]
        run = ctx.placer(args, env=env)
        v = check_outputs(ctx, run, action, "out", None, False)
        if v == "ok" and run.rc == 0 and action == "arrange":
            check_arrange_results(ctx, "out", "spec.toml", arrange, None, rerun=False)
        return
    if action == "twice":
        for out in ("out", "out2"):
            run = ctx.placer(["draw", "pat.txt", "--spec", "spec.toml", "--out", out], env=env)
            if check_outputs(ctx, run, "draw", out, None, False) != "ok" or run.rc != 0:
                return
        a, b = snapshot(ctx.dir / "out"), snapshot(ctx.dir / "out2")
        if a != b:
            ctx.outcome.flag("wrong", "two draws with the same SOURCE_DATE_EPOCH differ: "
                                      + str(sorted(n for n in a or {} if (a or {}).get(n)
                                                   != (b or {}).get(n))))
        return
    if action in ("readonly", "readonly_parent"):
        ro = ctx.dir / "ro"
        if not _mount(ro, "size=1m", ro=True):
            ctx.skipped = True
            ctx.note("could not mount a read-only tmpfs; skipped")
            return
        try:
            ctx.script.append("mount -t tmpfs -o size=1m,ro tmpfs ro")
            out = "ro" if action == "readonly" else "ro/new"
            args = ["arrange", "spec.toml", "--out", out, "--time-limit", "2", "--quiet"]
            before = snapshot(ctx.dir / out)
            run = ctx.placer(args)
            check_outputs(ctx, run, "arrange", out, before, False, "a read-only --out")
        finally:
            _umount(ro)
        return
    if action in ("out_file", "out_in_file", "out_long", "unicode_out"):
        ctx.write("afile", b"keep me\n")
        out = {"out_file": "afile", "out_in_file": "afile/sub", "out_long": "o" * 300,
               "unicode_out": "ausgabe-\u00fc\u2603"}[action]
        args = ["arrange", "spec.toml", "--out", out, "--time-limit", "2", "--quiet"]
        run = ctx.placer(args, env=env)
        kind = "arrange" if action == "unicode_out" else None
        why = "" if action == "unicode_out" else "an unusable --out"
        check_outputs(ctx, run, kind, out if kind else None, None, False, why)
        if (ctx.dir / "afile").read_bytes() != b"keep me\n":
            ctx.outcome.flag("wrong", "the file given as --out was changed")
        return
    if action == "umask":
        mask = 0o077 if name.endswith("077") else 0o000
        run = ctx.placer(arrange, umask=mask)
        if check_outputs(ctx, run, "arrange", "out", None, False) != "ok" or run.rc != 0:
            return
        want = 0o666 & ~mask
        wrong = {p.name: oct(p.stat().st_mode & 0o777) for p in (ctx.dir / "out").iterdir()
                 if p.is_file() and p.stat().st_mode & 0o777 != want}
        if wrong:
            ctx.outcome.flag("wrong", f"with umask {mask:03o} output modes are {wrong}, "
                                      f"expected {oct(want)}")
        dmode = (ctx.dir / "out").stat().st_mode & 0o777
        if dmode != 0o777 & ~mask:
            ctx.outcome.flag("wrong", f"with umask {mask:03o} the created --out has mode "
                                      f"{oct(dmode)}, expected {oct(0o777 & ~mask)}")
        return
    if action == "stdout_full":
        with open("/dev/full", "wb") as full:
            ctx.note("stdout redirected to /dev/full")
            run = ctx.placer(["grade", "pat.txt", "--spec", "spec.toml"], stdout=full.fileno())
        ctx.judge(run)
        return
    if action == "stdout_closed":
        r, w = os.pipe()
        os.close(r)
        ctx.note("stdout is a pipe whose reader has exited (like `| true`)")
        try:
            run = ctx.placer(["grade", "hand.gds", "--spec", "spec.toml"], stdout=w)
        finally:
            os.close(w)
        # nobody reads the output: a quiet exit is fine, a traceback or a hang is not
        text = run.out + run.err
        if run.hung or "Traceback" in text or "Exception ignored" in text or run.rc is None \
                or run.rc < 0 or run.rc > 130:
            ctx.judge(run)
            if ctx.outcome.cls not in FAILING:
                ctx.outcome.flag("traceback", f"exit {run.rc} with stdout closed: {_tail(text)}")
        else:
            ctx.outcome.notes.append(f"stdout closed: exit {run.rc}, stderr {_tail(run.err, 120)}")
        return
    raise ValueError(action)


# --------------------------------------------------------------------------- driver


@dataclass
class CaseResult:
    family: str
    name: str
    cls: str
    reasons: list[str]
    notes: list[str]
    seconds: float
    kept: str | None
    skipped: bool
    summary: str = ""


# --------------------------------------------------------------------------- output sets
# Every command that writes: interrupts during the move-in, SIGTERM at any moment, short
# writes under a file-size limit; every input for special files; header bombs within a
# CPU and memory budget. The promise checked is the README's: the previous outputs or
# the whole new set, never a mix, nothing staged left behind.

WRITERS = ["arrange", "draw", "repair", "compare", "lesson", "batch", "grade"]
BOMB_CPU_S = 1.0              # a bomb-like input is refused within this much CPU ...
BOMB_MB = 200.0               # ... and this much memory (the issue's budget)

# the second version of the mirror: same names, other ratios, so every output differs
_MIRROR_V2 = ("MREF = 2\nMOUTA = 6\nMOUTB = 6\n")
_HAND_V2 = (". MREF> MOUTA> MOUTA< MOUTB> MOUTB< MOUTB> MOUTA< .\n"
            ". MREF< MOUTA> MOUTA< MOUTB> MOUTB< MOUTB> MOUTA< .\n")

# run placer with every move of a file into --out slowed down, so that a signal can land
# while a set moves in (argv: the --out folder, then placer's arguments)
_SLOW_MOVE_IN = r'''
import os, sys, time
real = os.replace
out = os.path.realpath(sys.argv[1])
def slow(src, dst, *a, **k):
    d = os.path.realpath(os.fspath(dst))
    rel = os.path.relpath(d, out)
    if not rel.startswith("..") and not any(p.startswith(".") for p in rel.split(os.sep)):
        time.sleep(0.3)            # a visible name in --out: the move-in itself
    return real(src, dst, *a, **k)
os.replace = slow
sys.argv = ["placer", *sys.argv[2:]]
from placer._entry import main
sys.exit(main())
'''


def writer_inputs(ctx: Ctx, version: int) -> None:
    """The inputs every writing command uses, as version 1 or 2 (same names)."""
    spec = (SAMPLES / "bias_mirror.toml").read_text()
    hand = (SAMPLES / "bias_mirror_hand.txt").read_text()
    if version == 2:
        spec = spec.replace("MREF = 2\nMOUTA = 4\nMOUTB = 8\n", _MIRROR_V2)
        hand = _HAND_V2
    ctx.write("spec.toml", spec)
    ctx.write("hand.txt", hand)
    ctx.write("specs/mirror.toml", spec)


def writer_args(command: str, out: str = "out") -> list[str]:
    """The command line of one writing command on the inputs of :func:`writer_inputs`."""
    return {
        "arrange": ["arrange", "spec.toml", "--out", out, "--time-limit", "1", "--quiet"],
        "draw": ["draw", "hand.txt", "--spec", "spec.toml", "--out", out],
        "repair": ["repair", "hand.txt", "--spec", "spec.toml", "--out", out,
                   "--time-limit", "1"],
        "compare": ["compare", "spec.toml", "--out", out, "--time-limit", "1"],
        "lesson": ["lesson", "spec.toml", "--out", out, "--time-limit", "1"],
        "batch": ["batch", "specs", "--out", out, "--time-limit", "1", "--jobs", "1",
                  "--quiet"],
        "grade": ["grade", "hand.txt", "--spec", "spec.toml", "--budget-plot",
                  f"{out}/budget.png", "--sensitivity-plot", f"{out}/units.svg"],
    }[command]


def _visible(snap: dict | None) -> dict:
    return {n: v for n, v in (snap or {}).items()
            if not any(p.startswith(".") for p in n.split("/"))}


def reference_set(ctx: Ctx, command: str, version: int, name: str) -> dict | None:
    """The outputs of an undisturbed run of ``command`` on version ``version``."""
    writer_inputs(ctx, version)
    if command == "grade":
        (ctx.dir / name).mkdir(exist_ok=True)
    run = ctx.placer(writer_args(command, name) + (["--force"] if command != "grade" else []))
    if run.rc != 0:
        ctx.outcome.flag("wrong", f"the undisturbed {command} run failed: {_tail(run.err)}")
        return None
    return _visible(snapshot(ctx.dir / name))


def check_set(ctx: Ctx, run: Run, command: str, before: dict | None, after: dict | None,
              ref_old: dict | None, ref_new: dict, when: str) -> None:
    """The folder after a disturbed run: as it was, or the whole new set (never a mix)."""
    what = f"`placer {_show(run.args)}` ({when}, exit {run.rc})"
    staged = sorted(n for n in (after or {}) if ".placer-staging" in n
                    and n not in (before or {}))
    if staged:
        ctx.outcome.flag("half", f"{what} left {', '.join(staged[:3])}")
    if _visible(after) == _visible(before):
        return
    got = _visible(after)
    if command == "batch":
        _check_batch(ctx, what, before, got, ref_new)
        return
    missing = sorted(set(ref_new) - set(got))
    if missing:
        ctx.outcome.flag("half", f"{what}: neither the previous outputs nor the whole new "
                                 f"set; missing {', '.join(missing[:4])}: "
                                 f"{_diff(before, after)}")
        return
    if before and ref_old is not None:
        # files whose content differs between the two versions: all new, or all old
        telling = [n for n in ref_new if ref_new[n][0] == "file"
                   and ref_old.get(n) != ref_new[n] and n in before]
        old = [n for n in telling if got.get(n) == before.get(n)]
        if old and len(old) < len(telling):
            ctx.outcome.flag("half", f"{what}: a mix of the two runs; still the previous "
                                     f"{', '.join(old[:4])}")
    if run.rc not in (0, 130):
        ctx.outcome.flag("wrong", f"{what} changed the outputs yet failed: {_tail(run.err)}")


def _check_batch(ctx: Ctx, what: str, before: dict | None, got: dict, ref: dict) -> None:
    """A batch is a set per block plus its own pair (summary.json, index.html): each
    block's folder as it was or whole, and the pair both old or both new."""
    old = _visible(before)
    pair = ("summary.json", "index.html")
    changed = [n for n in pair if got.get(n) != old.get(n)]
    if changed and (len(changed) < len(pair) or any(n not in got for n in pair)):
        ctx.outcome.flag("half", f"{what}: summary.json and index.html are not one set: "
                                 f"{_diff(before, got)}")
    for block in sorted(n for n, v in got.items() if "/" not in n and v[0] == "dir"):
        mine = {n: v for n, v in got.items() if n.startswith(block + "/")}
        if mine == {n: v for n, v in old.items() if n.startswith(block + "/")}:
            continue
        missing = sorted(n for n in ref if n.startswith(block + "/") and n not in mine)
        if missing:
            ctx.outcome.flag("half", f"{what}: block {block}/ is neither as it was nor whole; "
                                     f"missing {', '.join(missing[:4])}")


def _new_file_in(out: Path, seen: dict[str, int]) -> bool:
    """A regular file at the top of ``out`` that was not there (by inode) before."""
    try:
        with os.scandir(out) as it:
            for e in it:
                if e.name.startswith(".") or not e.is_file(follow_symlinks=False):
                    continue
                if seen.get(e.name) != e.inode():
                    return True
    except OSError:
        return False
    return False


def _inodes(out: Path) -> dict[str, int]:
    try:
        with os.scandir(out) as it:
            return {e.name: e.inode() for e in it}
    except OSError:
        return {}


def _disturbed(ctx: Ctx, rng: random.Random, command: str
               ) -> tuple[dict | None, dict | None, dict, list[str]] | None:
    """Reference sets of both versions, the starting state of ``out`` and the command
    line to disturb: (before, ref_old, ref_new, args) -- None when a reference run
    failed."""
    ref_old = reference_set(ctx, command, 1, "ref1")
    ref_new = reference_set(ctx, command, 2, "ref2")
    if ref_old is None or ref_new is None:
        return None
    existing = rng.random() < 0.6
    writer_inputs(ctx, 1)
    out = ctx.dir / "out"
    if command == "grade":
        out.mkdir(exist_ok=True)
    if existing:
        prep = ctx.placer(writer_args(command))
        if prep.rc != 0:
            ctx.outcome.flag("wrong", f"the preparing run failed: {_tail(prep.err)}")
            return None
    writer_inputs(ctx, 2)
    args = writer_args(command) + (["--force"] if existing and command != "grade" else [])
    return snapshot(out), ref_old, ref_new, args


def _send(pid: int, how: str) -> None:
    try:
        if how == "INT":
            os.kill(pid, signal.SIGINT)
        elif how == "INT-group":
            os.killpg(pid, signal.SIGINT)
        else:
            os.kill(pid, signal.SIGTERM)
    except ProcessLookupError:
        pass


def gen_movein(ctx: Ctx, rng: random.Random) -> None:
    """SIGINT or SIGTERM while a command's files move into --out."""
    variant = ctx.pick([f"{c}-{s}" for c in WRITERS for s in ("INT", "TERM")])
    command, how = variant.split("-")
    state = _disturbed(ctx, rng, command)
    if state is None:
        return
    before, ref_old, ref_new, args = state
    out = ctx.dir / "out"
    seen = _inodes(out)
    proc = ctx.start(args, launcher=[sys.executable, "-c", _SLOW_MOVE_IN, str(out)])
    ctx.note(f"send SIG{how} when the first file appears in out/ (moves into out/ slowed "
             "by 0.3 s each)")
    sent = False
    deadline = proc.start + ctx.timeout
    while proc.popen.poll() is None and time.monotonic() < deadline:
        if _new_file_in(out, seen):
            _send(proc.popen.pid, how)
            sent = True
            break
        time.sleep(0.005)
    run = ctx.wait(proc)
    verdict = ctx.judge(run, allow_130=True)
    if verdict in ("hang", "memory", "traceback"):
        return
    if not sent:
        ctx.outcome.notes.append("the move-in was not seen; the run ended first")
    elif run.rc != 0 and (run.rc != 130 or "complete" not in run.err):
        ctx.outcome.flag("wrong", f"SIG{how} during the move-in: exit {run.rc}, "
                                  f"{_tail(run.err)} (expected 130 and the set complete)")
    check_set(ctx, run, command, before, snapshot(out), ref_old, ref_new,
              f"SIG{how} during the move-in")


def gen_sigterm(ctx: Ctx, rng: random.Random) -> None:
    """SIGTERM (or Ctrl-C to the group) at a random moment of a writing command."""
    command = ctx.pick(WRITERS)
    state = _disturbed(ctx, rng, command)
    if state is None:
        return
    before, ref_old, ref_new, args = state
    out = ctx.dir / "out"
    how = rng.choice(["TERM", "TERM", "INT-group"])
    delay = round(rng.uniform(0.02, 3.0), 2)
    proc = ctx.start(args)
    ctx.note(f"send SIG{how} {delay} s after the start of the command above")
    time.sleep(max(0.0, proc.start + delay - time.monotonic()))
    _send(proc.popen.pid, how)
    run = ctx.wait(proc)
    verdict = ctx.judge(run, allow_130=True)
    if verdict in ("hang", "memory", "traceback"):
        return
    check_set(ctx, run, command, before, snapshot(out), ref_old, ref_new,
              f"SIG{how} at {delay} s")


_ENDINGS = {".gds": b"\x00\x04\x04\x00", ".png": b"IEND\xaeB`\x82", ".svg": b"</svg>\n",
            ".pdf": b"%%EOF\n", ".html": b"</html>\n"}


def gen_shortwrite(ctx: Ctx, rng: random.Random) -> None:
    """A file-size limit (``ulimit -f``) that cuts the command's writes short."""
    command = ctx.pick(WRITERS)
    limit_kb = rng.choice([1, 16, 40, 120, 400])
    writer_inputs(ctx, 1)
    out = ctx.dir / "out"
    if command == "grade":
        out.mkdir()
    before = snapshot(out)
    proc = ctx.start(writer_args(command), fsize=limit_kb * 1024)
    ctx.script[-1] = f"(ulimit -f {limit_kb}; {ctx.script[-1]})"
    run = ctx.wait(proc)
    verdict = ctx.judge(run)
    if verdict in ("hang", "memory", "traceback"):
        return
    after = snapshot(out)
    if run.rc == 1 and command == "batch" and "blocks failed" in run.err:
        # a block whose writes were cut short failed; the batch's own summary says so
        summary = parse_json((out / "summary.json").read_text()) if (
            out / "summary.json").is_file() else None
        if not isinstance(summary, dict):
            ctx.outcome.flag("half", f"batch exit 1 under ulimit -f {limit_kb} without a "
                                     "readable summary.json")
        return
    if run.rc != 0:
        if _visible(after) != _visible(before):
            ctx.outcome.flag("half", f"a write cut short at {limit_kb} KB (exit {run.rc}) "
                                     f"changed out/: {_diff(before, after)}")
        return
    for name in _visible(after):        # exit 0: every file whole
        path = out / name
        end = _ENDINGS.get(path.suffix)
        if path.is_file() and end is not None and not path.read_bytes().rstrip(
                b"\n").endswith(end.rstrip(b"\n")):
            ctx.outcome.flag("half", f"exit 0 under ulimit -f {limit_kb} but {name} is cut "
                                     f"short ({path.stat().st_size} bytes)")
        if path.suffix == ".json" and parse_json(path.read_text(errors="replace")) is None:
            ctx.outcome.flag("half", f"exit 0 under ulimit -f {limit_kb} but {name} does not "
                                     "parse")


_SPECIAL = ["/dev/zero", "/dev/urandom", "fifo", "folder", "/dev/null"]


def gen_special(ctx: Ctx, rng: random.Random) -> None:
    """A special file where a command reads an input: refused at once, never read whole."""
    place = ctx.pick(["spec", "layout", "pattern", "unit-gds", "layers", "template",
                      "batch-spec"])
    source = rng.choice(_SPECIAL)
    writer_inputs(ctx, 1)
    if source == "fifo":
        path = str(ctx.dir / "pipe")
        os.mkfifo(path)                 # nobody writes: an open() would wait for ever
    elif source == "folder":
        (ctx.dir / "adir").mkdir()
        path = "adir"
    else:
        path = source
    args = {"spec": ["arrange", path, "--out", "out", "--quiet"],
            "layout": ["grade", path],
            "pattern": ["draw", path, "--spec", "spec.toml", "--out", "out"],
            "unit-gds": ["arrange", "spec.toml", "--unit-gds", path, "--out", "out"],
            "layers": ["arrange", "spec.toml", "--layers", path, "--out", "out"],
            "template": ["arrange", "spec.toml", "--template", path, "--out", "out"],
            "batch-spec": ["batch", path, "--out", "out"]}[place]
    run = ctx.placer(args, timeout=min(ctx.timeout, 15.0))
    ctx.judge(run, must_refuse=f"{source} as the {place}")
    if run.rc == 0:
        return
    if snapshot(ctx.dir / "out") not in (None, {}):
        ctx.outcome.flag("half", f"refusing {source} as the {place} left out/ behind")


def _bombs(variant: str) -> tuple[str, bytes, list[str]]:
    """(file name, contents, placer arguments) of one header bomb."""
    if variant == "aref":           # 400 000 units from one 334-byte record set
        return "bomb.gds", gds_library([(b"U", [g_box(1, 0, 0, 0, 1000, 1000)]),
                                        (b"TOP", [g_aref(b"U", 1000, 400, 0, 0, 2000,
                                                         2000)])]), ["grade", "bomb.gds"]
    if variant == "nest":           # 100^3 placements through three levels
        cells: list[tuple[bytes | str, list[bytes]]] = [(b"L0", [g_box(1, 0, 0, 0, 100, 100)])]
        for lvl in range(1, 4):
            cells.append((f"L{lvl}".encode(),
                          [g_sref(f"L{lvl - 1}", k * 2000 * 100 ** (lvl - 1), 0)
                           for k in range(100)]))
        return "bomb.gds", gds_library(cells), ["grade", "bomb.gds"]
    if variant == "texts":          # millions of text records in one cell
        one = g_text(10, 0, 0, 0, b"AB")
        return "bomb.gds", gds_library([(b"TOP", [one * 4_900_000])]), ["grade", "bomb.gds"]
    if variant == "deep":           # a unit cell nested 101 levels
        cells = [(b"C0", [g_box(1, 0, 0, 0, 1000, 1000)])]
        cells += [(f"C{k}".encode(), [g_sref(f"C{k - 1}", 0, 0)]) for k in range(1, 102)]
        return "cell.gds", gds_library(cells), ["arrange", "spec.toml", "--unit-gds",
                                                "cell.gds", "--out", "out", "--quiet"]
    if variant == "toml":           # dotted keys 100 000 deep
        return "deep.toml", ("[devices]\nA = 1\n" + "a" + ".a" * 100_000 + " = 1\n").encode(), \
            ["arrange", "deep.toml", "--out", "out"]
    if variant == "columns":        # one pattern row of 400 000 tokens
        return "wide.txt", (" ".join(["A>", "B<"] * 200_000) + "\n").encode(), \
            ["grade", "wide.txt"]
    raise ValueError(variant)


def gen_bomb(ctx: Ctx, rng: random.Random) -> None:
    """An input whose headers promise far more than the limits: refused within the
    budget of CPU and memory, before any expansion."""
    variant = ctx.pick(["aref", "nest", "texts", "deep", "toml", "columns"])
    writer_inputs(ctx, 1)
    name, data, args = _bombs(variant)
    ctx.write(name, data)
    # a child's peak memory counts the parent it was forked from: drop the file's bytes
    del data
    run = ctx.placer(args)
    if ctx.judge(run, must_refuse=f"the {variant} bomb") in ("hang", "memory", "traceback"):
        return
    if run.cpu_s > BOMB_CPU_S:
        ctx.outcome.flag("hang", f"the {variant} bomb took {run.cpu_s:.2f} s CPU to refuse "
                                 f"(budget {BOMB_CPU_S} s)")
    if run.maxrss_mb > BOMB_MB:
        ctx.outcome.flag("memory", f"the {variant} bomb took {run.maxrss_mb:.0f} MB to refuse "
                                   f"(budget {BOMB_MB:.0f} MB)")


_OUTPUT_FAMILIES: dict[str, Callable[[Ctx, random.Random], None]] = {
    "movein": gen_movein, "sigterm": gen_sigterm, "shortwrite": gen_shortwrite,
    "special": gen_special, "bomb": gen_bomb}


def family_counts(cases: int) -> dict[str, int]:
    return {
        "spec": cases, "gds": max(1, cases * 3 // 5), "csv": max(1, cases * 2 // 5),
        "pattern": max(1, cases * 2 // 5), "cli": max(1, cases * 3 // 5),
        "concurrency": max(1, cases // 12), "interrupt": max(1, cases // 6),
        "disk": max(1, cases // 12), "env": len(ENV_CASES) if cases >= 20 else max(1, cases // 4),
        "movein": max(1, cases // 4), "sigterm": max(1, cases // 4),
        "shortwrite": max(1, cases // 6), "special": max(1, cases // 6),
        "bomb": max(1, cases // 10),
    }


def run_case(family: str, index: int, seed: int, work: Path, keep: Path, timeout: float,
             min_interrupt_delay: float = 0.0, variant: str | None = None) -> CaseResult:
    name = f"{family}-{index:04d}"
    folder = work / name
    folder.mkdir(parents=True)
    ctx = Ctx(family, name, folder, timeout)
    ctx.index, ctx.seed, ctx.forced = index, seed, variant
    rng = random.Random(f"{seed}:{family}:{index}")
    start = time.monotonic()
    try:
        if family == "spec":
            gen_spec(ctx, rng)
        elif family == "gds":
            gen_gds(ctx, rng)
        elif family == "csv":
            gen_csv(ctx, rng)
        elif family == "pattern":
            gen_pattern(ctx, rng)
        elif family == "cli":
            gen_cli(ctx, rng)
        elif family == "concurrency":
            gen_concurrency(ctx, rng)
        elif family == "interrupt":
            gen_interrupt(ctx, rng, min_interrupt_delay)
        elif family == "disk":
            gen_disk(ctx, rng)
        elif family == "env":
            gen_env(ctx, rng)
        elif family in _OUTPUT_FAMILIES:
            _OUTPUT_FAMILIES[family](ctx, rng)
        else:
            raise ValueError(family)
    except OSError as exc:   # our own trouble (not placer's): record it, do not hide it
        ctx.outcome.notes.append(f"harness error: {exc!r}")
        if exc.errno not in (errno.ENOSPC,):
            ctx.skipped = True
    seconds = time.monotonic() - start
    kept = None
    if ctx.outcome.cls in FAILING:
        kept = str(save_case(ctx, keep, seed, index))
    shutil.rmtree(folder, ignore_errors=True)
    summary = " / ".join([*(ln[2:] for ln in ctx.script if ln.startswith("# ")),
                          *(f"exit {r.rc}: {_tail(r.out + r.err, 160)}" for r in ctx.runs[:2])])
    return CaseResult(family, name, ctx.outcome.cls, ctx.outcome.reasons, ctx.outcome.notes,
                      seconds, kept, ctx.skipped, summary)


def save_case(ctx: Ctx, keep: Path, seed: int, index: int) -> Path:
    dest = keep / ctx.name
    shutil.rmtree(dest, ignore_errors=True)
    dest.mkdir(parents=True)
    for rel in dict.fromkeys(ctx.inputs):
        src = ctx.dir / rel
        if src.is_file():
            (dest / rel).parent.mkdir(parents=True, exist_ok=True)
            shutil.copyfile(src, dest / rel)
    lines = ["#!/bin/sh", f"# adversary case {ctx.name} (seed {seed}, case {index})",
             f"# regenerate: python -m tests.robustness.adversary --only {ctx.name} "
             f"--seed {seed}" + (f" --variant {ctx.forced}" if ctx.forced else ""),
             'cd "$(dirname "$0")"', *ctx.script]
    (dest / "command.sh").write_text("\n".join(lines) + "\n")
    report = [f"class: {ctx.outcome.cls}", *ctx.outcome.reasons, *ctx.outcome.notes, ""]
    for run in ctx.runs:
        report += [f"$ placer {shlex.join(run.args)}", f"exit {run.rc}, {run.seconds:.2f} s, "
                   f"{run.maxrss_mb:.0f} MB", "--- stdout (tail)", run.out[-3000:],
                   "--- stderr (tail)", run.err[-6000:], ""]
    (dest / "outcome.txt").write_text("\n".join(report))
    return dest


def table(results: list[CaseResult], families: list[str]) -> str:
    head = "| family | cases | " + " | ".join(HEADINGS) + " |"
    lines = [head, "|" + "---|" * (len(HEADINGS) + 2)]
    for fam in families:
        rs = [r for r in results if r.family == fam and not r.skipped]
        skipped = sum(1 for r in results if r.family == fam and r.skipped)
        counts = [sum(1 for r in rs if r.cls == c) for c in CLASSES]
        label = TITLES[fam] + (f" ({skipped} skipped)" if skipped else "")
        lines.append(f"| {label} | {len(rs)} | " + " | ".join(str(c) for c in counts) + " |")
    rs = [r for r in results if not r.skipped]
    counts = [sum(1 for r in rs if r.cls == c) for c in CLASSES]
    lines.append(f"| **all** | {len(rs)} | " + " | ".join(str(c) for c in counts) + " |")
    return "\n".join(lines)


def run_all(cases: int, seed: int, families: list[str], keep: Path, timeout: float,
            counts: dict[str, int] | None = None, only: str | None = None,
            min_interrupt_delay: float = 0.0, progress: bool = True,
            verbose: bool = False,
            variants: dict[str, list[str]] | None = None) -> list[CaseResult]:
    """Run the cases; ``variants[family][i]``, when given, fixes case i's variant."""
    counts = counts or family_counts(cases)
    work = Path(tempfile.mkdtemp(prefix="adversary-"))
    results: list[CaseResult] = []
    try:
        for fam in families:
            fixed = (variants or {}).get(fam)
            for i in range(len(fixed) if fixed is not None else counts.get(fam, 0)):
                name = f"{fam}-{i:04d}"
                if only and only != name:
                    continue
                res = run_case(fam, i, seed, work, keep, timeout, min_interrupt_delay,
                               fixed[i] if fixed is not None else None)
                results.append(res)
                if verbose:
                    print(f"{res.name}: {res.cls} ({res.seconds:.1f} s) {res.summary[:220]}",
                          flush=True)
                elif progress and res.cls in FAILING:
                    print(f"{res.name}: {res.cls}: {res.reasons[0][:200]}", flush=True)
    finally:
        for mnt in sorted(work.rglob("*")):
            if mnt.is_dir() and os.path.ismount(mnt):
                _umount(mnt)
        shutil.rmtree(work, ignore_errors=True)
    return results


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--cases", type=int, default=60,
                    help="cases of the spec family; the others scale with it")
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--timeout", type=float, default=60.0, help="per-case bound, seconds")
    ap.add_argument("--families", default=",".join(FAMILIES))
    ap.add_argument("--only", help="run one case, e.g. spec-0007")
    ap.add_argument("--variant", help="with --only: the variant that case had (CI cases)")
    ap.add_argument("--keep", default="/tmp/adversary-failures",
                    help="folder for the inputs of failing cases")
    ap.add_argument("--update-readme", action="store_true")
    ap.add_argument("--verbose", action="store_true", help="one line per case")
    opts = ap.parse_args(argv)
    families = [f for f in opts.families.split(",") if f]
    unknown = set(families) - set(FAMILIES)
    if unknown:
        ap.error(f"unknown families {sorted(unknown)}")
    keep = Path(opts.keep)
    started = time.monotonic()
    fixed = None
    if opts.only and opts.variant:
        fam, _, num = opts.only.rpartition("-")
        families = [fam]
        fixed = {fam: [opts.variant] * (int(num) + 1)}
    results = run_all(opts.cases, opts.seed, families, keep, opts.timeout, only=opts.only,
                      verbose=opts.verbose, variants=fixed)
    wall = time.monotonic() - started
    cmdline = "python -m tests.robustness.adversary " + " ".join(
        shlex.quote(a) for a in (argv if argv is not None else sys.argv[1:]))
    body = (table(results, families) + "\n\n"
            + f"`{cmdline.strip()}`: {wall:.0f} s on this machine; per-case bound "
              f"{opts.timeout:.0f} s, address space {MEMORY_CAP >> 30} GB.")
    print()
    print(body)
    failing = [r for r in results if r.cls in FAILING]
    notes = [(r.name, n) for r in results for n in r.notes]
    if notes:
        print("\nNotes:")
        for name, n in notes:
            print(f"  {name}: {n[:400]}")
    if failing:
        print(f"\n{len(failing)} failing case(s); inputs and commands kept in {keep}/CASE/:")
        for r in failing:
            print(f"  {r.name} [{r.cls}] -> {r.kept}")
            for reason in r.reasons[:4]:
                print(f"      {reason[:600]}")
    if opts.update_readme:
        readme = ROOT / "README.md"
        if "<!-- adversary -->" in readme.read_text():
            from tests.bench.readme_block import replace_block
            replace_block("adversary", body)
            print("README.md: adversary block updated")
        else:
            print("note: README.md has no <!-- adversary --> block; nothing updated")
    return 1 if failing else 0


if __name__ == "__main__":
    sys.exit(main())
