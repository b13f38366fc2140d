"""The lesson page's formulas held to Python's by golden vectors, without a browser.

tests/golden/page_vectors.json holds cases of every kind (mirror, resistor ladder,
capacitor DAC with both line fits) under both correlation kernels: the page's data and
the figures placer's Python computes for them. Two checks share the file:

* the vectors are still what Python computes (a formula changed on purpose needs the
  vectors written again: ``python tests/golden/make_page_vectors.py``);
* the page's own formulas (lesson.js's model and budget sections, run in Node, no
  browser and no page) give the same figures.

The browser tests (tests/test_lesson.py) check the same agreement on the drawn page.
"""

from __future__ import annotations

import json
import subprocess

import pytest

from tests.golden.make_page_vectors import OUT, vectors
from tests.helpers import ROOT, node_or_skip

SCRIPT = ROOT / "placer" / "present" / "web" / "lesson.js"


def _stored() -> list[dict]:
    return json.loads(OUT.read_text())["vectors"]


def test_the_vectors_cover_every_kind_both_kernels_and_both_fits():
    names = {v["name"] for v in _stored()}
    assert {v["kind"] for v in _stored()} == {"mos", "res", "cap"}
    assert {n.split("/")[1] for n in names} == {"exponential", "gaussian"}
    assert {"dac_best_fit/gaussian", "dac_endpoint/exponential"} <= names
    # the shaded field's figures: the bowl everywhere, the known direction's error where
    # a spec gives a direction (the ladder and the capacitor array)
    assert all("bowl_ppm" in v["figures"] for v in _stored())
    assert {v["kind"] for v in _stored() if "along_ppm" in v["figures"]} == {"res", "cap"}


def test_the_vectors_are_what_python_computes_now():
    now = {v["name"]: v["figures"] for v in vectors()}
    for v in _stored():
        assert set(now[v["name"]]) == set(v["figures"]), v["name"]
        for key, value in v["figures"].items():
            assert now[v["name"]][key] == pytest.approx(value, rel=1e-12, abs=1e-12), \
                (v["name"], key)


def test_the_pages_formulas_give_the_vectors_figures_without_a_browser():
    node = node_or_skip()
    res = subprocess.run([node, str(ROOT / "tests" / "page_model.js"), str(SCRIPT), str(OUT)],
                         capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    page = {v["name"]: v["figures"] for v in json.loads(res.stdout)}
    for v in _stored():
        shown = page[v["name"]]
        assert set(shown) == set(v["figures"]), v["name"]
        for key, value in v["figures"].items():
            # the page sums in float where Python keeps exact integers: agree to rounding
            assert shown[key] == pytest.approx(value, rel=1e-9, abs=1e-9), (v["name"], key)


@pytest.mark.parametrize("script", ["lesson.js", "sequence.js"])
def test_the_pages_show_the_arithmetics_rounding_as_zero(script):
    """Both pages' number format, run in Node apart from the page: a figure under 1e-9
    (the rounding of sums that cancel, 4.44e-16 and the like) reads 0; real figures keep
    their digits, small ones in exponent form."""
    import re

    node = node_or_skip()
    text = (ROOT / "placer" / "present" / "web" / script).read_text(encoding="utf-8")
    fmt = re.search(r"^function fmt\(v\) \{.*?^\}", text, re.S | re.M).group(0)
    values = [4.44e-16, -2.11e-13, 0.0, 3.2e-4, 0.00123, 1.5, -25.0, 1.234e5]
    res = subprocess.run([node, "-e", fmt + f"\nconsole.log(JSON.stringify({values}.map(fmt)));"],
                         capture_output=True, text=True, check=True)
    shown = json.loads(res.stdout)
    assert shown[:3] == ["0", "0", "0"]
    assert all(s != "0" for s in shown[3:])
    assert shown[4] == "0.00123" and shown[5] == "1.5" and shown[6] == "-25"


_SWAP_BOARDS = {
    # a ring of dummies round an L (empty slots inside the grid), a 5-bit array's budget
    "lshape_cdac": None,
    # end dummies, the mirror's ratio budget
    "bias_mirror": None,
    # 256 units of eight devices, the Gaussian kernel, no budget
    "eight_256": ('name = "eight_256"\n[devices]\n' + "".join(f"Q{d} = 32\n" for d in range(8))
                  + '[array]\nrows = 16\ndummies = "ring"\n[correlated]\nsigma_ppm = 80.0\n'
                  'length_um = 12.0\nkernel = "gaussian"\n'),
}


@pytest.mark.parametrize("board", [
    pytest.param(b, marks=pytest.mark.slow) if b == "eight_256" else b   # 10 s: CI runs it
    for b in sorted(_SWAP_BOARDS)])
def test_the_pages_swap_by_swap_model_equals_its_rebuild_after_every_swap(board, tmp_path):
    """The page updates its figures from the two slots a swap changes (exact integer sums,
    the correlated sums by the changed slot's row of kernel values, the edge counts of
    the slots around). After each of 300 random swaps (units, dummies and empty slots
    alike) the updated model equals the one built from scratch: integer sums and edge
    counts exactly, pair sums and every figure under a random field to 1e-12 relative,
    the budget too (tests/page_swaps.js). The from-scratch build is the one held to
    ``placer grade`` by the golden vectors and the browser tests."""
    node = node_or_skip()
    from placer.jobs.arrange import baseline_patterns, candidate_shapes
    from placer.jobs.load import load_spec, parse_spec
    from placer.present.lesson import LessonArrangement, lesson_data

    text = _SWAP_BOARDS[board]
    spec = (load_spec(ROOT / "samples" / f"{board}.toml") if text is None
            else parse_spec(text, board))
    rows, cols = candidate_shapes(spec)[0]
    items = [LessonArrangement(m, m, p) for m, p in baseline_patterns(spec, rows, cols)]
    data = tmp_path / "data.json"
    data.write_text(json.dumps(lesson_data(spec, items)))
    res = subprocess.run([node, str(ROOT / "tests" / "page_swaps.js"), str(SCRIPT), str(data),
                          "300", "7"], capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr
    out = json.loads(res.stdout)
    assert out["swaps"] == 300 and out["changed"] > 150, out
    assert out["n_failures"] == 0, out
