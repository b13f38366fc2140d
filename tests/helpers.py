"""What many test files share: the checkout's paths, running the command line in a fresh
process, one-line refusals, and writing a spec file."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
SAMPLES = ROOT / "samples"


def run_placer(args: list[str] | tuple[str, ...], cwd: Path, env: dict[str, str] | None = None,
               timeout: float = 300) -> subprocess.CompletedProcess[str]:
    """``python -m placer ARGS`` in ``cwd`` (this checkout's package first on the path)."""
    path = os.pathsep.join(p for p in (str(ROOT), os.environ.get("PYTHONPATH", "")) if p)
    return subprocess.run([sys.executable, "-m", "placer", *args], cwd=cwd, text=True,
                          capture_output=True, timeout=timeout,
                          env={**os.environ, "PYTHONPATH": path, **(env or {})})


def refused(res: subprocess.CompletedProcess[str], *words: str, code: int = 1) -> None:
    """``res`` ended with one ``Error:`` line holding ``words``, exit ``code``, no traceback."""
    assert res.returncode == code, (res.returncode, res.stderr)
    assert "Traceback" not in res.stderr
    lines = [ln for ln in res.stderr.splitlines() if ln.strip()]
    assert lines and lines[-1].startswith("Error:"), res.stderr
    for w in words:
        assert w in res.stderr, (w, res.stderr)


def spec_file(tmp: Path, text: str, name: str = "s.toml") -> Path:
    """``text`` written to ``tmp/name``."""
    path = tmp / name
    path.write_text(text)
    return path
