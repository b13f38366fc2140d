"""The sequence lesson page (``placer lesson`` of a unary spec) in a real browser: every
order its buttons load, exchanges made by mouse and keyboard, and an undo; each time the
figures the page shows are checked against what ``placer sequence --grid`` reports for the
grid the page exports (placer's Python, not the page, run in-process).

Headless Chromium as in tests/test_lesson.py: skipped where there is none, except under
PLACER_REQUIRE_BROWSER=1 (CI).
"""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import numpy as np
import pytest

from tests.helpers import ROOT, run_placer, spec_file

ARTEFACTS = Path(os.environ.get("PLACER_ARTEFACT_DIR", ROOT / "ci-artifacts"))

if (os.environ.get("PLACER_REQUIRE_BROWSER") != "1"
        and not (shutil.which("chromium") and shutil.which("chromedriver"))):
    pytest.skip("no Chromium here (apt-get install chromium chromium-driver); CI requires it",
                allow_module_level=True)

UNARY = """name = "wren_msb"
[unary]
cells = 15
rows = 4
columns = 4
pitch_um = [8.0, 6.0]
[gradient]
linear_ppm_per_um = 20.0
quadratic_ppm_per_um2 = 0.05
"""

SEGMENTED = """name = "wren_dac"
[unary]
cells = 7
binary_bits = 2
rows = 6
columns = 6
pitch_um = [8.0, 6.0]
[gradient]
linear_ppm_per_um = 20.0
quadratic_ppm_per_um2 = 0.05
"""


@pytest.fixture(scope="module")
def browser():
    from tests.browser import chromium

    driver = chromium()
    yield driver
    driver.quit()


def _figures(driver) -> dict[str, float]:
    return {e.get_attribute("data-figure"): float(e.get_attribute("data-value"))
            for e in driver.find_elements("css selector", "[data-figure]")}


def _exported(driver, path: Path) -> Path:
    driver.find_element("id", "export").click()
    path.write_text(driver.find_element("id", "export-text").get_attribute("value"))
    return path


def _graded(spec: Path, grid: Path) -> dict:
    """What ``placer sequence SPEC --grid GRID`` writes to report.json (in-process)."""
    from placer.io.unaryspec import read_sequence_layout, read_unary_spec
    from placer.jobs.sequence import score_sequence

    s = read_unary_spec(spec)
    rep = score_sequence(s, read_sequence_layout(grid, s), grid.name, baselines=False)
    return json.loads(json.dumps(rep.to_dict()))


def _agree(figs: dict[str, float], rep: dict) -> None:
    """The page's figures against placer's report of the same order. The worst code may
    differ where two codes tie to rounding: the page's code is then as bad as the worst."""
    total = np.array(rep["linear_part_lsb"]) + np.abs(rep["bowl_part_lsb"])
    scale = 1e-9 * max(rep["worst_inl_lsb"], 1e-12)
    assert figs["worst_inl_lsb"] == pytest.approx(rep["worst_inl_lsb"], rel=1e-9, abs=1e-15)
    assert abs(total[int(figs["worst_code"])] - rep["worst_inl_lsb"]) <= scale
    assert figs["linear_part_max_lsb"] == pytest.approx(max(rep["linear_part_lsb"]),
                                                        rel=1e-9, abs=1e-15)
    assert figs["bowl_part_max_lsb"] == pytest.approx(max(map(abs, rep["bowl_part_lsb"])),
                                                      rel=1e-9, abs=1e-15)
    if int(figs["worst_code"]) == rep["worst_code"]:
        assert figs["max_dnl_lsb"] == pytest.approx(rep["max_dnl_lsb"], rel=1e-7, abs=1e-15)
        assert figs["worst_direction_deg"] == pytest.approx(rep["worst_direction_deg"],
                                                            abs=1e-7)


@pytest.mark.parametrize("text", [UNARY, SEGMENTED], ids=["unary", "segmented"])
def test_every_order_and_every_exchange_agrees_with_placer_sequence(browser, tmp_path, text):
    from selenium.webdriver.common.keys import Keys

    spec = spec_file(tmp_path, text)
    res = run_placer(["lesson", str(spec), "--out", str(tmp_path / "page"), "--time-limit",
                      "1"], cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    page = next((tmp_path / "page").glob("*-lesson.html"))
    browser.get(page.as_uri())
    assert browser.execute_script("return document.body.dataset.ready") == "true"
    assert not [e for e in browser.get_log("browser") if e["level"] == "SEVERE"]
    buttons = browser.find_elements("css selector", "[data-load]")
    labels = [b.text for b in buttons]
    assert labels[:3] == ["row-by-row", "row-column", "centre pairs"]
    assert labels[-1] == "placer"
    worst = {}
    for k, label in enumerate(labels):
        browser.find_elements("css selector", "[data-load]")[k].click()
        figs = _figures(browser)
        rep = _graded(spec, _exported(browser, tmp_path / f"order{k}.txt"))
        _agree(figs, rep)
        worst[label] = figs["worst_inl_lsb"]
    assert worst["placer"] <= min(worst.values()) * (1 + 1e-9)
    # exchanges on the row-by-row order: two by mouse, one by keyboard, then an undo
    browser.find_elements("css selector", "[data-load]")[0].click()
    before = (tmp_path / "order0.txt").read_text().splitlines()[1:]

    def slot(r: int, c: int):
        return browser.find_element("css selector", f'.slot[data-row="{r}"][data-col="{c}"]')

    slot(0, 0).click()
    slot(3, 3).click()
    slot(0, 1).click()
    slot(2, 2).click()
    slot(1, 0).click()
    slot(1, 0).click()                              # select and clear: focus stays
    browser.switch_to.active_element.send_keys(Keys.ENTER)
    browser.switch_to.active_element.send_keys(Keys.ARROW_RIGHT)
    browser.switch_to.active_element.send_keys(Keys.ARROW_DOWN)
    browser.switch_to.active_element.send_keys(Keys.ENTER)
    assert browser.execute_script("return document.body.dataset.swaps") == "3"
    figs = _figures(browser)
    swapped = _exported(browser, tmp_path / "swapped.txt")
    _agree(figs, _graded(spec, swapped))
    after = swapped.read_text().splitlines()[1:]
    changed = sum(a != b for ra, rb in zip(before, after, strict=True)
                  for a, b in zip(ra.split(), rb.split(), strict=True))
    assert changed == 6                              # three exchanges of distinct cells
    ARTEFACTS.mkdir(parents=True, exist_ok=True)
    browser.save_screenshot(str(ARTEFACTS / f"sequence-lesson-{spec.stem}-{labels[-1]}.png"))
    browser.find_element("id", "undo").click()
    assert browser.execute_script("return document.body.dataset.swaps") == "2"
    _agree(_figures(browser), _graded(spec, _exported(browser, tmp_path / "undone.txt")))
