"""The README's Python API examples run as they stand, and say what they claim."""

from __future__ import annotations

import re
import subprocess
import sys

import pytest

from tests.helpers import ROOT


def _api_blocks() -> list[str]:
    text = (ROOT / "README.md").read_text()
    section = text.split("## Python API", 1)[1].split("\n## ", 1)[0]
    return re.findall(r"```python\n(.*?)```", section, flags=re.S)


def test_the_api_section_has_its_examples():
    assert len(_api_blocks()) == 3


@pytest.mark.parametrize("index", range(3))
def test_readme_api_example_runs(index, tmp_path):
    code = _api_blocks()[index].replace("/tmp/", f"{tmp_path}/")
    res = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True,
                         text=True, timeout=300)
    assert res.returncode == 0, res.stderr[-2000:]
    out = res.stdout
    # hand computation for samples/bias_mirror_hand.txt: MREF in column 1, MOUTB in
    # columns 4..7 of both rows, pitch 2.3 um, so their centroids lie (5.5 - 1) x 2.3 =
    # 10.35 um apart; at the default 10 ppm/um that is 103.5 ppm in the worst direction
    apart_um = (5.5 - 1.0) * 2.3
    if index == 0:
        # the sample mirror is small enough for the search to prove a zero linear error
        assert "linear and quadratic" in out.splitlines()[0], out
        assert re.search(r"linear 0 ppm", out), out
    elif index == 1:
        assert float(out.splitlines()[0]) == pytest.approx(10.0 * apart_um, rel=1e-9)
        assert (tmp_path / "bias_mirror_hand.gds").stat().st_size > 1000
    else:
        before, after = re.search(r"^(\S+) -> (\S+) um$", out, flags=re.M).groups()
        assert float(before) == pytest.approx(apart_um, rel=1e-9)
        assert float(after) == 0.0
