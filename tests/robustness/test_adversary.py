"""A bounded share of the adversarial run (tests/robustness/adversary.py) on every CI run.

Each family runs a few fixed cases -- fixed seed, fixed variants, chosen to finish in a
few seconds each when placer behaves -- and the test asserts that none of them ended in
a traceback, a hang, a memory error, a half-written set of outputs or a wrong result.
A failure lists every failing case with its reason and the folder holding its inputs
and commands (``command.sh``) to reproduce it.
"""

from __future__ import annotations

import shutil
import tempfile
from pathlib import Path

import pytest

from tests.robustness import adversary as adv

SEED = 20240601
TIMEOUT = 20.0          # per command; a refusal should take about a second
KEEP = Path(tempfile.gettempdir()) / "adversary-failures-ci"

# (family, variants) -- None: the family draws its case from the seed alone
SHARE: dict[str, list[str | None]] = {
    "spec": ["valid", "number", "deep_dotted", "terminals", "raw"],
    "gds": ["rot90", "labels_in_cells", "cycle", "case_labels", "aref_huge"],
    "csv": ["shuffled", "semicolon", "nan", "many_over"],
    "pattern": ["tabs", "ragged", "huge_row", "many_over"],
    "cli": [None] * 4,
    "concurrency": [None],
    "interrupt": [None, None],
    "disk": ["free-0"],
    "env": ["sde_text", "out_long", "readonly_out", "umask_077", "stdout_full"],
    # every command that writes: a signal while its files move in, SIGTERM at a random
    # moment, a file-size limit; every input place with a special file; header bombs
    "movein": ["arrange-INT", "draw-TERM", "repair-INT", "compare-TERM", "lesson-INT",
               "batch-TERM", "grade-INT", "arrange-TERM", "draw-INT", "repair-TERM",
               "compare-INT", "lesson-TERM", "batch-INT", "grade-TERM"],
    "sigterm": list(adv.WRITERS),
    "shortwrite": list(adv.WRITERS),
    "special": ["spec", "layout", "pattern", "unit-gds", "layers", "template", "batch-spec"],
    "bomb": ["aref", "nest", "texts", "deep", "toml", "columns"],
}


@pytest.mark.slow
@pytest.mark.parametrize("family", list(SHARE))
def test_adversary_share(family: str) -> None:
    if family == "disk" and shutil.which("mount") is None:
        pytest.skip("no mount command for the small tmpfs")
    variants = SHARE[family]
    results = adv.run_all(
        cases=0, seed=SEED, families=[family], keep=KEEP, timeout=TIMEOUT,
        variants={family: variants}, min_interrupt_delay=1.0, progress=False)
    ran = [r for r in results if not r.skipped]
    if family == "disk" and not ran:
        pytest.skip("a small tmpfs could not be mounted here")
    assert len(results) == len(variants)
    failing = [r for r in results if r.cls in adv.FAILING]
    lines = [f"{len(failing)} of {len(results)} {family} case(s) failed "
             f"(inputs and command.sh kept under {KEEP}):"]
    for r in failing:
        lines.append(f"- {r.name} [{r.cls}] {r.kept}")
        lines += [f"    {reason[:500]}" for reason in r.reasons[:4]]
    assert not failing, "\n".join(lines)
