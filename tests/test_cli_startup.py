"""Start-up: ``placer --help``, every command's ``--help`` and ``--version`` answer without
loading numpy or the other heavy libraries, and say what the command line says in-process."""

from __future__ import annotations

import json
import os
import subprocess
import sys

import pytest
from click.testing import CliRunner

from placer.cli import cli
from tests.helpers import ROOT

HEAVY = ("numpy", "scipy", "matplotlib", "shapely", "gdstk")
#: the help is wrapped to the terminal's width: a terminal of 80 columns in the child
#: process, which click's help fills to 78 (two short of it); in-process CliRunner would
#: force 80, so the width is given to it
COLUMNS = "80"
HELP_WIDTH = 78

ASKS = [["--help"], ["--version"], *([name, "--help"] for name in sorted(cli.commands))]

#: the click group itself, as the entry point runs it, then the modules it loaded
SNIPPET = """\
import json, sys
from placer.cli import cli
try:
    cli.main(args=json.loads(sys.argv[1]), prog_name="placer", standalone_mode=True)
except SystemExit as done:
    code = done.code
else:
    code = 0
sys.stdout.flush()
sys.stderr.write("\\nMODULES " + json.dumps([code, sorted(sys.modules)]) + "\\n")
"""


def _env() -> dict[str, str]:
    path = os.pathsep.join(p for p in (str(ROOT), os.environ.get("PYTHONPATH", "")) if p)
    return {**os.environ, "PYTHONPATH": path, "COLUMNS": COLUMNS}


def _heavy(modules: list[str]) -> list[str]:
    return sorted(m for m in modules if m.split(".")[0] in HEAVY)


def _in_process(args: list[str]) -> str:
    res = CliRunner().invoke(cli, args, prog_name="placer", terminal_width=HELP_WIDTH)
    assert res.exit_code == 0, res.output
    return res.output


def test_every_command_is_asked():
    assert {a[0] for a in ASKS} >= {"arrange", "batch", "compare", "draw", "grade", "lesson",
                                    "repair"}


@pytest.mark.parametrize("args", ASKS, ids=" ".join)
def test_the_group_answers_without_heavy_imports(args):
    res = subprocess.run([sys.executable, "-c", SNIPPET, json.dumps(args)], cwd=ROOT,
                         env=_env(), capture_output=True, text=True, timeout=120)
    marker = res.stderr.rpartition("\nMODULES ")[2]
    assert marker != res.stderr, res.stderr
    code, modules = json.loads(marker)
    assert code == 0, res.stderr
    assert "placer.cli" in modules and "click" in modules
    assert _heavy(modules) == []
    assert res.stdout == _in_process(args)


@pytest.mark.parametrize("args", ASKS, ids=" ".join)
def test_the_command_answers_without_heavy_imports(args):
    """``python -m placer ARGS`` as a user runs it, its imports listed by ``-X importtime``."""
    res = subprocess.run([sys.executable, "-X", "importtime", "-m", "placer", *args],
                         cwd=ROOT, env=_env(), capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    imported = [ln.rpartition("|")[2].strip() for ln in res.stderr.splitlines()
                if ln.startswith("import time:")]
    assert "placer" in imported, res.stderr          # the listing is there to read
    if args != ["--version"]:                        # --version answers before the CLI
        assert "placer.cli" in imported
    assert _heavy(imported) == []
    assert res.stdout == _in_process(args)

