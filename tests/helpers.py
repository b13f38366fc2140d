"""What many test files share: the checkout's paths, running the command line in a fresh
process, one-line refusals, and writing a spec file."""

from __future__ import annotations

import os
import struct
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


def node_or_skip() -> str:
    """The Node.js executable for the page tests; skipped without one, failed when
    ``PLACER_REQUIRE_NODE=1`` (as CI sets it)."""
    import shutil

    import pytest

    node = shutil.which("node") or shutil.which("nodejs")
    if node is None:
        if os.environ.get("PLACER_REQUIRE_NODE") == "1":
            pytest.fail("Node.js is required here (PLACER_REQUIRE_NODE=1)")
        pytest.skip("no Node.js here (apt-get install nodejs); CI requires it")
    return node


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


# ----------------------------------------------------------- GDSII written record by record
# From the stream format's definition (record = 2-byte length, type, data type, data),
# so tests and benchmarks can build files no library would write.

def _rec(rt: int, dt: int, data: bytes = b"") -> bytes:
    data += b"\0" * (len(data) % 2)
    return struct.pack(">HBB", 4 + len(data), rt, dt) + data


def _real8(x: float) -> bytes:
    """GDSII's excess-64 base-16 real of a positive ``x``."""
    exp = 64
    while x >= 1:
        x, exp = x / 16, exp + 1
    while x < 1 / 16:
        x, exp = x * 16, exp - 1
    return bytes([exp]) + int(x * (1 << 56)).to_bytes(7, "big")


def gds_records(cells: list[tuple[bytes, bytes]]) -> bytes:
    """A stream (user unit 1 um, database unit 1 nm) of ``cells``: (name, elements)."""
    date = struct.pack(">12h", *([2026, 1, 1, 0, 0, 0] * 2))
    out = (_rec(0x00, 0x02, struct.pack(">h", 600)) + _rec(0x01, 0x02, date)
           + _rec(0x02, 0x06, b"LIB") + _rec(0x03, 0x05, _real8(1e-3) + _real8(1e-9)))
    for name, body in cells:
        out += _rec(0x05, 0x02, date) + _rec(0x06, 0x06, name) + body + _rec(0x07, 0x00)
    return out + _rec(0x04, 0x00)


def gds_box(layer: int = 1) -> bytes:
    """A 1 x 1 um boundary at the origin."""
    return (_rec(0x08, 0x00) + _rec(0x0D, 0x02, struct.pack(">h", layer))
            + _rec(0x0E, 0x02, struct.pack(">h", 0))
            + _rec(0x10, 0x03, struct.pack(">10i", 0, 0, 1000, 0, 1000, 1000, 0, 1000, 0, 0))
            + _rec(0x11, 0x00))


def gds_ref(name: bytes, x: int) -> bytes:
    """An SREF of ``name`` at (x, 0) database units."""
    return (_rec(0x0A, 0x00) + _rec(0x12, 0x06, name)
            + _rec(0x10, 0x03, struct.pack(">2i", x, 0)) + _rec(0x11, 0x00))


def gds_aref(name: bytes, cols: int, rows: int) -> bytes:
    """An AREF of ``name``, ``cols`` x ``rows`` at a 2 um step."""
    return (_rec(0x0B, 0x00) + _rec(0x12, 0x06, name)
            + _rec(0x13, 0x02, struct.pack(">hh", cols, rows))
            + _rec(0x10, 0x03, struct.pack(">6i", 0, 0, cols * 2000, 0, 0, rows * 2000))
            + _rec(0x11, 0x00))


def gds_text(text: bytes, x: int, y: int, layer: int = 10) -> bytes:
    """A TEXT element on ``layer``/0 at (x, y) database units."""
    return (_rec(0x0C, 0x00) + _rec(0x0D, 0x02, struct.pack(">h", layer))
            + _rec(0x16, 0x02, struct.pack(">h", 0)) + _rec(0x10, 0x03, struct.pack(">2i", x, y))
            + _rec(0x19, 0x06, text) + _rec(0x11, 0x00))
