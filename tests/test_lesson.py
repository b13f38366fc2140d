"""The lesson page in a real browser: swaps made through the page's own controls, every
figure it shows read back and checked against ``placer grade`` on the arrangement the
page exports.

The browser is Debian's headless Chromium driven by selenium (``.ci/run`` installs
both). Where there is no Chromium the tests are skipped, with the reason -- except under
PLACER_REQUIRE_BROWSER=1, which ``.ci/run`` sets: there a missing browser fails them.

Figures agree to 1e-9 relative; a figure that is zero, or a centroid offset that is
zero up to rounding, is compared to 1e-9 of its natural scale (the pitch, or the
gradient times the pitch) instead, since the page and numpy sum in different orders.
"""

from __future__ import annotations

import json
import os
import shutil
from pathlib import Path

import numpy as np
import pytest

from tests.helpers import ROOT, run_placer

ARTEFACTS = Path(os.environ.get("PLACER_ARTEFACT_DIR", ROOT / "ci-artifacts"))
REL = 1e-9

if (os.environ.get("PLACER_REQUIRE_BROWSER") != "1"
        and not (shutil.which("chromium") and shutil.which("chromedriver"))):
    pytest.skip("no Chromium here (apt-get install chromium chromium-driver); CI requires it",
                allow_module_level=True)


@pytest.fixture(scope="module")
def browser():
    from tests.browser import chromium

    driver = chromium()
    yield driver
    driver.quit()


def _page(tmp: Path, sample: str) -> tuple[Path, Path]:
    spec = ROOT / "samples" / f"{sample}.toml"
    res = run_placer(["lesson", str(spec), "--out", str(tmp), "--time-limit", "5"], cwd=tmp)
    assert res.returncode == 0, res.stderr
    return spec, next(tmp.glob("*-lesson.html"))


def _open(driver, page: Path) -> None:
    driver.get(page.as_uri())
    assert driver.execute_script("return document.body.dataset.ready") == "true"
    errors = [e for e in driver.get_log("browser") if e["level"] == "SEVERE"]
    assert not errors, errors


def _figures(driver) -> dict[str, str]:
    return {e.get_attribute("data-figure"): e.get_attribute("data-value")
            for e in driver.find_elements("css selector", "[data-figure]")}


def _slot(driver, r: int, c: int):
    return driver.find_element("css selector", f'.slot[data-row="{r}"][data-col="{c}"]')


def _swap_by_clicks(driver, a: tuple[int, int], b: tuple[int, int]) -> None:
    _slot(driver, *a).click()
    _slot(driver, *b).click()


def _exported(driver, tmp: Path, name: str) -> Path:
    driver.find_element("id", "export").click()
    text = driver.find_element("id", "export-text").get_attribute("value")
    path = tmp / name
    path.write_text(text)
    return path


_GRADED: dict[tuple[str, str], dict] = {}


def _grade(pattern: Path, spec: Path) -> dict:
    """``placer grade --json`` of an exported pattern (run once per file)."""
    key = (str(pattern), pattern.read_text())
    if key not in _GRADED:
        # the page models the gradients and random mismatch, not the layout-dependent
        # effects of drawn fingers (diffusion length, well): grade with those set to zero
        flat = spec
        if 'kind = "mos"' in spec.read_text():
            flat = pattern.parent / f"{spec.stem}-no-lde.toml"
            flat.write_text(spec.read_text() + "\n[lde]\nku0_um = 0\nkvth0_mv_um = 0\n")
        res = run_placer(["grade", str(pattern), "--spec", str(flat), "--json"],
                         cwd=pattern.parent)
        assert res.returncode == 0, res.stderr
        _GRADED[key] = json.loads(res.stdout)
        _GRADED[key]["_routing"] = _routing(pattern, spec, _GRADED[key]["pitch_um"])
    return _GRADED[key]


def _routing(pattern: Path, spec_path: Path, pitch_um: list[float]) -> dict:
    """The routing estimate placer makes of an exported pattern (estimate_routing, as arrange
    calls it) at the pitch grade reports: the figures of the page's routing table and
    devices' wire column."""
    from dataclasses import replace

    from placer.io.pattern import check_against_spec, read_pattern
    from placer.jobs.load import load_spec
    from tests.test_page_routing import placer_routing

    spec = load_spec(spec_path)
    spec = replace(spec, array=replace(spec.array, pitch_um=tuple(pitch_um)))
    return placer_routing(check_against_spec(read_pattern(pattern), spec, str(pattern)), spec)


def _expected(g: dict) -> dict[str, float]:
    """The page's figure keys, from grade's JSON (computed by placer, not the page)."""
    pairs = g["pairs"]
    out = {
        "linear_ppm": max(abs(p["linear_ppm"]) for p in pairs),
        "quadratic_ppm": max(abs(p["quadratic_ppm"]) for p in pairs),
        "correlated_sigma_ppm": max(abs(p["correlated_sigma_ppm"]) for p in pairs),
        "white_sigma_ppm": max(abs(p["white_sigma_ppm"]) for p in pairs),
    }
    for d in g["devices"]:
        out[f"centroid_x:{d['name']}"] = d["centroid_um"][0]
        out[f"centroid_y:{d['name']}"] = d["centroid_um"][1]
        out[f"offset_um:{d['name']}"] = d["offset_um"]
        out[f"edge_units:{d['name']}"] = d["edge_units"]
    out.update(_field_expected(g))
    rt = g["_routing"]
    out["row_tracks"] = rt["tracks"]
    out["total_tree_um"] = rt["total"]
    for d, v in zip(g["devices"], rt["tree"], strict=True):
        out[f"tree_um:{d['name']}"] = v
    if rt["breaks"] is not None:
        out["diffusion_breaks"] = rt["breaks"]
    if rt["unpaired"] is not None:
        out["unpaired_fingers"] = rt["unpaired"]
    b = g["budget"]
    if b is not None and "lines" in b:
        for ln in b["lines"]:
            for key in ("gradient_pct", "quadratic_pct", "clm_pct", "random_sigma_pct",
                        "within_tolerance"):
                out[f"{key}:{ln['device']}"] = ln[key]
            out[f"range_low:{ln['device']}"] = ln["total_low_pct"]
            out[f"range_high:{ln['device']}"] = ln["total_high_pct"]
    elif b is not None:
        for key in ("worst_gradient_inl_lsb", "worst_gradient_dnl_lsb", "quadratic_inl_lsb",
                    "quadratic_dnl_lsb"):
            out[key] = b[key]
    return out


def _field_expected(g: dict) -> dict[str, float]:
    """The figures of the field the page shades, at the spec's own values (its gradient
    along its known direction, else +x; its curvature as a bowl about the centre of all
    device units), from grade's centroids, second moments and bowl_ppm. A device's mean
    field less the mean over all units is g u.(c_d - c) + h/(2 sqrt 2)(tr_d - tr_all)."""
    a = g["assumptions"]
    lin, h = a["linear_gradient_ppm_per_um"], a["quadratic_hessian_norm_ppm_per_um2"]
    theta = np.radians(a["known_direction_deg"] or 0.0)
    u = np.array([np.cos(theta), np.sin(theta)])
    centre = np.array(g["centre_um"])
    cen = {d["name"]: np.array(d["centroid_um"]) for d in g["devices"]}
    tr = {d["name"]: d["second_moment_um2"][0] + d["second_moment_um2"][2] for d in g["devices"]}
    n = {d["name"]: d["units"] for d in g["devices"]}
    tr_all = sum(n[k] * tr[k] for k in n) / sum(n.values())
    along = [lin * float(u @ (cen[p["a"]] - cen[p["b"]])) for p in g["pairs"]]
    bowl = [p["bowl_ppm"] for p in g["pairs"]]
    out = {"along_ppm": max(abs(v) for v in along), "bowl_ppm": max(abs(v) for v in bowl),
           "field_ppm": max(abs(x + y) for x, y in zip(along, bowl, strict=True))}
    for k in cen:
        out[f"field_mean:{k}"] = (lin * float(u @ (cen[k] - centre))
                                  + h / (2 * np.sqrt(2)) * (tr[k] - tr_all))
    return out


def _shown(figs: dict[str, str]) -> dict[str, float]:
    out = {}
    for key, value in figs.items():
        if key.startswith("range:"):
            low, high = value.split()
            out["range_low:" + key[6:]] = float(low)
            out["range_high:" + key[6:]] = float(high)
        else:
            out[key] = float(value)
    return out


def _scale(key: str, g: dict) -> float:
    """The size a figure's rounding is relative to: a centroid's is the array's (the page
    and numpy sum positions in different orders), every other figure's is its own."""
    if key.startswith(("centroid", "offset")):
        return min(g["pitch_um"])
    if key.startswith(("along", "bowl", "field")):     # sums of the field that cancel
        a, pitch = g["assumptions"], max(g["pitch_um"])
        return (a["linear_gradient_ppm_per_um"] * pitch
                + a["quadratic_hessian_norm_ppm_per_um2"] * pitch ** 2)
    return 0.0


def _agree(key: str, shown: float, want: float, g: dict) -> bool:
    return abs(shown - want) <= REL * max(abs(want), _scale(key, g))


@pytest.fixture(scope="module")
def mirror_run(browser, tmp_path_factory):
    """The sample mirror: two swaps by mouse, one by keyboard, then export."""
    from selenium.webdriver.common.keys import Keys

    tmp = tmp_path_factory.mktemp("mirror")
    spec, page = _page(tmp, "bias_mirror")
    _open(browser, page)
    loaded = _figures(browser)
    first = _exported(browser, tmp, "loaded.txt")
    _swap_by_clicks(browser, (0, 1), (1, 6))
    _swap_by_clicks(browser, (0, 3), (1, 2))
    # keyboard: focus a slot, Enter, move right twice, Enter
    _slot(browser, 0, 2).click()                # select (0, 2) by mouse ...
    _slot(browser, 0, 2).click()                # ... and clear it: focus stays there
    active = browser.switch_to.active_element
    active.send_keys(Keys.ENTER)
    browser.switch_to.active_element.send_keys(Keys.ARROW_DOWN)
    browser.switch_to.active_element.send_keys(Keys.ARROW_RIGHT)
    browser.switch_to.active_element.send_keys(Keys.ENTER)
    assert browser.execute_script("return document.body.dataset.swaps") == "3"
    swapped = _figures(browser)
    path = _exported(browser, tmp, "swapped.txt")
    ARTEFACTS.mkdir(parents=True, exist_ok=True)
    shot = ARTEFACTS / "lesson-bias_mirror.png"
    browser.save_screenshot(str(shot))
    return {"spec": spec, "loaded": (loaded, first), "swapped": (swapped, path),
            "shot": shot, "tmp": tmp}


def test_three_swaps_changed_the_board(mirror_run):
    before = mirror_run["loaded"][1].read_text().splitlines()[1:]
    after = mirror_run["swapped"][1].read_text().splitlines()[1:]
    diff = sum(a != b for ra, rb in zip(before, after, strict=True)
               for a, b in zip(ra.split(), rb.split(), strict=True))
    assert diff == 6                            # three swaps, two slots each


MIRROR_KEYS = ["linear_ppm", "quadratic_ppm", "correlated_sigma_ppm", "white_sigma_ppm",
               "along_ppm", "bowl_ppm", "field_ppm", "field_mean:MOUTA",
               "centroid_x:MOUTA", "centroid_y:MOUTB", "offset_um:MREF", "edge_units:MREF",
               "gradient_pct:MOUTA", "quadratic_pct:MOUTB", "clm_pct:MOUTA",
               "random_sigma_pct:MOUTB", "range_low:MOUTA", "range_high:MOUTB",
               "within_tolerance:MOUTA", "row_tracks", "total_tree_um", "tree_um:MOUTB",
               "diffusion_breaks", "unpaired_fingers"]


@pytest.mark.parametrize("state", ["loaded", "swapped"])
@pytest.mark.parametrize("key", MIRROR_KEYS)
def test_mirror_figure_matches_grade(mirror_run, state, key):
    figs, pattern = mirror_run[state]
    g = _grade(pattern, mirror_run["spec"])
    shown, want = _shown(figs), _expected(g)
    assert key in shown and key in want
    assert _agree(key, shown[key], want[key], g), (key, shown[key], want[key])


def test_every_mirror_figure_on_the_page_is_checked(mirror_run):
    figs, pattern = mirror_run["swapped"]
    g = _grade(pattern, mirror_run["spec"])
    shown, want = _shown(figs), _expected(g)
    assert set(shown) <= set(want)
    bad = {k: (shown[k], want[k]) for k in shown if not _agree(k, shown[k], want[k], g)}
    assert not bad


def test_screenshot_is_not_blank(mirror_run):
    import matplotlib.image as mpimg

    img = mpimg.imread(mirror_run["shot"])
    colours = np.unique((img[..., :3] * 255).astype(np.uint8).reshape(-1, 3), axis=0)
    assert img.shape[0] > 500 and img.shape[1] > 1000
    assert len(colours) > 50                    # text, device colours, plot lines


def test_load_buttons_and_undo(browser, mirror_run):
    tmp = mirror_run["tmp"]
    browser.find_element("css selector", 'button[data-load="2"]').click()     # mirrored
    mirrored = _exported(browser, tmp, "mirrored.txt")
    figs = _shown(_figures(browser))
    g = _grade(mirrored, mirror_run["spec"])
    assert _agree("linear_ppm", figs["linear_ppm"], _expected(g)["linear_ppm"], g)
    _swap_by_clicks(browser, (0, 1), (0, 2))
    browser.find_element("id", "undo").click()
    assert _exported(browser, tmp, "undone.txt").read_text() == mirrored.read_text()


@pytest.fixture(scope="module")
def dac_run(browser, tmp_path_factory):
    tmp = tmp_path_factory.mktemp("dac")
    spec, page = _page(tmp, "sar_cdac")
    _open(browser, page)
    browser.find_element("css selector", 'button[data-load="3"]').click()     # optimised
    _swap_by_clicks(browser, (1, 1), (4, 4))
    _swap_by_clicks(browser, (3, 5), (0, 5))    # a unit onto the dummy ring
    figs = _figures(browser)
    path = _exported(browser, tmp, "dac.txt")
    ARTEFACTS.mkdir(parents=True, exist_ok=True)
    browser.save_screenshot(str(ARTEFACTS / "lesson-sar_cdac.png"))
    return {"spec": spec, "figs": figs, "path": path}


DAC_KEYS = ["linear_ppm", "quadratic_ppm", "correlated_sigma_ppm", "white_sigma_ppm",
            "along_ppm", "bowl_ppm", "field_mean:C3",
            "centroid_x:C5", "offset_um:CT", "edge_units:C4", "worst_gradient_inl_lsb",
            "worst_gradient_dnl_lsb", "quadratic_inl_lsb", "quadratic_dnl_lsb",
            "row_tracks", "total_tree_um", "tree_um:C5"]


@pytest.mark.parametrize("key", DAC_KEYS)
def test_dac_figure_matches_grade(dac_run, key):
    g = _grade(dac_run["path"], dac_run["spec"])
    shown, want = _shown(dac_run["figs"]), _expected(g)
    assert _agree(key, shown[key], want[key], g), (key, shown[key], want[key])



def test_figures_read_as_people_write_them(browser, tmp_path):
    """Exact zeros show as 0, never as the arithmetic's rounding (4.44e-16 and the like):
    every figure whose value is under 1e-9 reads "0", every other one keeps its digits."""
    _, page = _page(tmp_path, "bias_mirror")
    _open(browser, page)
    shown = [(e.get_attribute("data-value"), e.text)
             for e in browser.find_elements("css selector", "td[data-figure]")]
    numbers = []
    for value, text in shown:
        try:
            numbers.append((float(value), text))
        except ValueError:
            continue                           # a range "low high" or a word
    tiny = [(v, t) for v, t in numbers if abs(v) < 1e-9]
    assert tiny, "the sample's page shows no zero figure to check"
    assert all(t.split()[0] == "0" for _, t in tiny), tiny
    assert all("e-1" not in t and "e-2" not in t for _, t in numbers), numbers


def test_a_32_column_board_fits_a_1280_pixel_window_without_a_sideways_scroll(tmp_path):
    """At a 1280 px window an 18-slot board needed a horizontal scroll; the board now
    shrinks to its column. Checked on a 32-column board (plus its end dummies) and on
    the sample: neither the page nor the board scrolls sideways, and a swap by clicks
    still works on the shrunk board."""
    from tests.browser import chromium

    spec = tmp_path / "wide.toml"
    spec.write_text("name = \"wide\"\n[devices]\nA = 128\nB = 128\n[array]\nrows = 8\n")
    res = run_placer(["lesson", str(spec), "--out", str(tmp_path), "--time-limit", "2"],
                     cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    (tmp_path / "s").mkdir()
    sample = _page(tmp_path / "s", "bias_mirror")[1]
    driver = chromium(1280, 900)
    try:
        for page in (tmp_path / "wide-lesson.html", sample):
            _open(driver, page)
            widths = driver.execute_script(
                "const a = document.getElementById('array');"
                "return [document.documentElement.scrollWidth, window.innerWidth,"
                " a.scrollWidth, a.clientWidth];")
            assert widths[0] <= widths[1] and widths[2] <= widths[3], widths
        cols = len(driver.find_elements("css selector", '.slot[data-row="0"]'))
        assert cols >= 9
        before = driver.execute_script("return document.body.dataset.swaps")
        _swap_by_clicks(driver, (0, 1), (1, 2))
        assert driver.execute_script("return document.body.dataset.swaps") != before
    finally:
        driver.quit()


def test_the_printed_handout_holds_the_board_figures_and_every_step(tmp_path):
    """Printed (print media emulated in headless Chromium), the page shows the board as it
    stands after a swap, its figures and every step's text, and none of the controls; on
    screen the handout stays hidden. Chromium's own print to PDF of it gives a document."""
    import base64

    from tests.browser import chromium

    page = _page(tmp_path, "bias_mirror")[1]
    driver = chromium(1280, 900)
    try:
        _open(driver, page)
        shown = ("return [...arguments[0]].map(s => {const e = document.querySelector(s);"
                 " return e !== null && getComputedStyle(e).display !== 'none'"
                 " && e.getBoundingClientRect().height > 0;});")
        parts = ["#array svg", "#worst", "#polar svg", "#devices", "#handout",
                 "#controls", "#guide", "#export-block"]
        assert driver.execute_script(shown, parts) == [True] * 4 + [False, True, True, True]
        _swap_by_clicks(driver, (0, 1), (1, 2))
        swapped = driver.execute_script("return document.getElementById('array').innerHTML")
        driver.execute_cdp_cmd("Emulation.setEmulatedMedia", {"media": "print"})
        assert driver.execute_script(shown, parts) == [True] * 5 + [False] * 3
        # the board printed is the board as it stands, and every step is there
        assert driver.execute_script(
            "return document.getElementById('array').innerHTML") == swapped
        titles = driver.execute_script(
            "return [...document.querySelectorAll('#handout-steps h3')]"
            ".map(h => h.textContent);")
        assert len(titles) == 4 and titles[0].startswith("1. ") and titles[3].startswith("4. ")
        pdf = base64.b64decode(driver.execute_cdp_cmd("Page.printToPDF", {})["data"])
        assert pdf.startswith(b"%PDF") and pdf.count(b"/Type /Page") >= 1
    finally:
        driver.quit()


def _units_by_hand(pattern: Path, devices: list[str], pitch: tuple[float, float]):
    """Every device unit's position (x = column * pitch x, y = -row * pitch y, as placer
    places slots) and device, read from exported pattern text without placer."""
    rows = [ln.split() for ln in pattern.read_text().splitlines()
            if ln.strip() and not ln.startswith("#")]
    xy, dev = [], []
    for r, row in enumerate(rows):
        for c, tok in enumerate(row):
            name = tok.rstrip("<>")
            if name in devices:
                xy.append((c * pitch[0], -r * pitch[1]))
                dev.append(devices.index(name))
    return np.array(xy), np.array(dev), (len(rows), len(rows[0]))


def _set_control(driver, control: str, value: float) -> None:
    """Move a range control as a hand would: set its value, fire its input event."""
    driver.execute_script("const e = document.getElementById(arguments[0]);"
                          "e.value = arguments[1];"
                          "e.dispatchEvent(new Event('input', {bubbles: true}));",
                          control, value)


def test_the_field_controls_move_every_figure_as_a_direct_calculation_says(browser, tmp_path):
    """Turn the gradient to 30 deg at 2.5 times its strength, give the curvature 0.05
    ppm/um2 about a hot spot at row 0, column 1 (sliders), then about a clicked slot:
    the figures the page shows follow a direct numpy calculation on the exported board.

    The calculation, from the definitions alone (no placer code): a device's value under a
    field f is the mean of f over its units; for a linear f = g u.r that is f at the
    device's first moment (its centroid: an identity, the mean is linear), so a pair's
    common-centroid error is g u.(c_a - c_b) and the worst direction's g |c_a - c_b|;
    the bowl of Hessian norm h is h/(2 sqrt 2)|r - p|^2 (H = h/sqrt 2 I, the bowl of
    grade's bowl_ppm), and a pair's bowl error is the difference of the two devices'
    means of it, here summed unit by unit. Every slot's shade value is f less the mean
    of f over the units."""
    spec, page = _page(tmp_path, "bias_mirror")
    _open(browser, page)
    _swap_by_clicks(browser, (0, 1), (1, 6))
    g = _grade(_exported(browser, tmp_path, "before.txt"), spec)
    devices = [d["name"] for d in g["devices"]]
    pitch = tuple(g["pitch_um"])
    pairs = [(devices.index(p["a"]), devices.index(p["b"])) for p in g["pairs"]]
    lin0 = g["assumptions"]["linear_gradient_ppm_per_um"]

    def by_hand(lin, theta_deg, h, spot_rc):
        xy, dev, shape = _units_by_hand(tmp_path / "now.txt", devices, pitch)
        cen = np.array([xy[dev == d].mean(axis=0) for d in range(len(devices))])
        u = np.array([np.cos(np.radians(theta_deg)), np.sin(np.radians(theta_deg))])
        p = (xy.mean(axis=0) if spot_rc is None
             else np.array([spot_rc[1] * pitch[0], -spot_rc[0] * pitch[1]]))

        def field(pts):
            return lin * pts @ u + h / (2 * np.sqrt(2)) * np.sum((pts - p) ** 2, axis=-1)

        mean_f = np.array([field(xy[dev == d]).mean() for d in range(len(devices))])
        along = [lin * u @ (cen[a] - cen[b]) for a, b in pairs]
        bowl = [(mean_f[a] - mean_f[b]) - along[i] for i, (a, b) in enumerate(pairs)]
        grid = np.array([[c * pitch[0], -r * pitch[1]] for r in range(shape[0])
                         for c in range(shape[1])])
        want = {"linear_ppm": max(lin * np.hypot(*(cen[a] - cen[b])) for a, b in pairs),
                "along_ppm": max(abs(v) for v in along), "bowl_ppm": max(abs(v) for v in bowl),
                "field_ppm": max(abs(mean_f[a] - mean_f[b]) for a, b in pairs)}
        all_mean = field(xy).mean()
        for d, name in enumerate(devices):
            want[f"field_mean:{name}"] = mean_f[d] - all_mean
        return want, (field(grid) - all_mean).reshape(shape)

    def check(lin, theta, h, spot_rc):
        _exported(browser, tmp_path, "now.txt")
        want, shade = by_hand(lin, theta, h, spot_rc)
        shown = _shown(_figures(browser))
        scale = lin * max(pitch) + h * max(pitch) ** 2
        for key, value in want.items():
            assert abs(shown[key] - value) <= REL * max(abs(value), scale), (key, shown[key], value)
        slots = browser.execute_script(
            "return [...document.querySelectorAll('.slot[data-field]')].map(s => "
            "[+s.dataset.row, +s.dataset.col, +s.dataset.field]);")
        assert len(slots) == shade.size             # the sample has no empty slot
        for r, c, v in slots:
            assert abs(v - shade[r, c]) <= REL * max(abs(shade[r, c]), scale), (r, c, v)
        return shown

    at_spec = check(lin0, 0.0, 0.02, None)
    _set_control(browser, "field-angle", 30)
    _set_control(browser, "field-g", 2.5 * lin0)
    turned = check(2.5 * lin0, 30.0, 0.02, None)
    assert turned["along_ppm"] != pytest.approx(at_spec["along_ppm"], rel=1e-3)
    # the budget takes the strength too: its gradient line is the worst pair's linear error
    budget_pair = next(p for p in g["pairs"] if {p["a"], p["b"]} == {"MOUTA", "MREF"})
    assert turned["gradient_pct:MOUTA"] == pytest.approx(
        2.5 * 1e-4 * budget_pair["linear_ppm"], rel=1e-9)
    _set_control(browser, "field-h", 0.05)
    _set_control(browser, "field-row", 0)
    _set_control(browser, "field-col", 1)
    check(2.5 * lin0, 30.0, 0.05, (0, 1))
    # a swap under the moved field, then the hot spot placed by a click on a slot
    _swap_by_clicks(browser, (0, 3), (1, 2))
    check(2.5 * lin0, 30.0, 0.05, (0, 1))
    browser.find_element("id", "field-place").click()
    _slot(browser, 1, 7).click()
    check(2.5 * lin0, 30.0, 0.05, (1, 7))
    # the spec's field again: grade's own figures
    browser.find_element("id", "field-reset").click()
    back = _shown(_figures(browser))
    g2 = _grade(_exported(browser, tmp_path, "after.txt"), spec)
    want = _expected(g2)
    assert all(_agree(k, back[k], want[k], g2) for k in back), \
        {k: (back[k], want[k]) for k in back if not _agree(k, back[k], want[k], g2)}


def test_every_slot_but_the_empty_ones_keeps_its_shade_through_swaps(browser, tmp_path):
    """The sample L-shaped array has empty slots (a keep-out corner): they carry no shade,
    every other slot does. A dummy swapped onto an empty slot takes a shade there and
    leaves none behind, and a unit onto an empty slot too (the centre of the units moves,
    so every shade is taken afresh); the shades stay the field less its mean over the
    units, the mean of the units' shades stays 0 (a property of the definition)."""
    _, page = _page(tmp_path, "lshape_cdac")
    _open(browser, page)
    read = ("return [...document.querySelectorAll('.slot')].map(s => [s.getAttribute("
            "'aria-label').split(': ')[1], s.dataset.field === undefined ? null"
            " : +s.dataset.field]);")

    def check():
        slots = browser.execute_script(read)
        assert all((v is None) == (what == "empty") for what, v in slots), slots
        units = [v for what, v in slots if what not in ("empty", "dummy")]
        assert abs(np.mean(units)) <= 1e-9 * max(abs(v) for v in units)

    check()
    _swap_by_clicks(browser, (0, 1), (0, 7))        # a dummy onto an empty slot
    check()
    _swap_by_clicks(browser, (1, 1), (0, 8))        # a unit onto an empty slot
    check()


def _page_data(page: Path) -> dict:
    """The data the page was written with (its JSON element, read back)."""
    import re

    blob = re.search(r'<script type="application/json" id="lesson-data">(.*?)</script>',
                     page.read_text(), re.S).group(1)
    return json.loads(blob)


def test_an_exercise_driven_to_its_score_then_revealed(browser, tmp_path):
    """The one-row sample exercise (samples/course): two swaps of the middle units turn
    the clustered row into A B B A B A A B, and the score says the goal is met within the
    swaps allowed; one more swap and it is not, Undo and it is again. A hint is shown
    when asked, the file's first. The reveal loads placer's arrangement (the page's
    "optimised" one, exported exactly), and every figure the page shows then, the goals'
    values and the routing cost among them, equals ``placer grade --json`` (and placer's
    routing estimate) of that export."""
    import tomllib

    course = ROOT / "samples" / "course"
    spec, ex_path = course / "row_pair.toml", course / "row_pair-exercise.toml"
    ex = tomllib.loads(ex_path.read_text())
    res = run_placer(["lesson", str(spec), "--exercise", str(ex_path), "--out", str(tmp_path),
                      "--time-limit", "5"], cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    page = tmp_path / "tern_pair-lesson.html"
    _open(browser, page)
    score = browser.find_element("id", "ex-score")

    def now() -> tuple[str, str, dict[str, float]]:
        goals = {e.get_attribute("data-goal"): float(e.get_attribute("data-value"))
                 for e in browser.find_elements("css selector", "[data-goal]")}
        return score.get_attribute("data-score"), score.text, goals

    assert browser.find_element("id", "ex-title").text.endswith(ex["exercise"]["title"])
    handout = browser.execute_script(
        "return document.getElementById('handout-exercise').textContent")
    assert ex["exercise"]["task"] in handout and "within 2 swaps from the clustered" in handout
    # no arrangement buttons in an exercise: the board opens on the exercise's start,
    # and the guided steps do not ask for them
    assert browser.find_elements("css selector", "#controls button[data-load]") == []
    steps = ""
    for _ in range(4):
        steps += browser.find_element("id", "step-text").text
        browser.find_element("id", "step-next").click()
    assert "Load clustered" not in steps and "Compare interdigitated" not in steps
    assert "On a clustered start" in steps
    verdict, text, goals = now()
    assert verdict == "open" and "1 of 2 goals met; 0 of 2 swaps used" in text
    assert goals["linear_ppm"] > 0.5
    _swap_by_clicks(browser, (0, 2), (0, 6))
    assert now()[0] == "open"
    browser.find_element("id", "ex-hint").click()
    hints = browser.find_elements("css selector", "#ex-hints li")
    assert [h.text for h in hints] == ex["exercise"]["hints"][:1]
    _swap_by_clicks(browser, (0, 3), (0, 7))
    verdict, text, goals = now()
    assert verdict == "met" and text.startswith("Goal met in 2 swaps (2 allowed)"), text
    met = _exported(browser, tmp_path, "met.txt")
    assert met.read_text().splitlines()[1].split() == [
        ".", "QA<", "QB>", "QB<", "QA>", "QB<", "QA>", "QA<", "QB>", "."]
    g = _grade(met, spec)
    want = _expected(g)
    for key, value in goals.items():
        assert value <= next(x["at_most"] for x in ex["goal"] if x["figure"] == key)
        assert _agree(key, value, want[key], g), (key, value, want[key])
    _swap_by_clicks(browser, (0, 1), (0, 2))            # a third swap: over the limit
    assert now()[0] in ("open", "over")
    browser.find_element("id", "undo").click()
    assert now()[0] == "met"
    # the reveal: placer's arrangement, and its figures are grade's
    browser.find_element("id", "ex-reveal").click()
    verdict, text, goals = now()
    assert verdict == "revealed"
    shown_best = _exported(browser, tmp_path, "revealed.txt")
    data = _page_data(page)
    best = data["arrangements"][data["exercise"]["best"]]
    assert best["label"] == "optimised"
    rows = [ln.split() for ln in shown_best.read_text().splitlines()[1:]]
    ids = [[-1 if t == "." else -2 if t == "-" else data["devices"].index(t.rstrip("<>"))
            for t in row] for row in rows]
    assert ids == best["ids"]
    g = _grade(shown_best, spec)
    want, figs = _expected(g), _shown(_figures(browser))
    assert {"linear_ppm", "quadratic_ppm", "row_tracks", "total_tree_um",
            "diffusion_breaks", "unpaired_fingers"} <= set(figs)
    bad = {k: (figs[k], want[k]) for k in figs if not _agree(k, figs[k], want[k], g)}
    assert not bad
    assert all(_agree(k, v, want[k], g) for k, v in goals.items())
    ARTEFACTS.mkdir(parents=True, exist_ok=True)
    browser.save_screenshot(str(ARTEFACTS / "lesson-exercise.png"))


# ---------------------------------------------------------------- a new board in the page
NEW_BOARD_SPECS = {
    # (spec, new counts, new core shape, new dummy style)
    # a capacitor array in a ring of dummies: the bits re-sort by their new counts
    "cap": ('name = "tern_dac"\nkind = "cap"\n[devices]\nCT = 1\nC0 = 1\nC1 = 2\nC2 = 4\n'
            '[array]\nrows = 2\ncolumns = 4\ndummies = "ring"\npitch_um = [6.0, 7.0]\n'
            '[unit]\nwidth_um = 5.0\nlength_um = 5.0\n'
            '[gradient]\nlinear_ppm_per_um = 5.0\nquadratic_ppm_per_um2 = 0.01\n'
            '[correlated]\nsigma_ppm = 50.0\nlength_um = 20.0\n'
            '[mismatch]\na_param_pct_um = 0.5\n'
            '[electrical]\ntermination = "CT"\nfit = "endpoint"\n',
            {"CT": 2, "C0": 1, "C1": 7, "C2": 3}, (3, 5), "ends"),
    # a resistor divider with end dummies: the ratio budget's random part follows the counts
    "res": ('name = "tern_ladder"\nkind = "res"\n[devices]\nRA = 3\nRB = 5\nRC = 4\n'
            '[array]\nrows = 2\ncolumns = 6\ndummies = "ends"\npitch_um = [3.0, 17.0]\n'
            '[unit]\nwidth_um = 2.0\nlength_um = 16.0\n'
            '[gradient]\nlinear_ppm_per_um = 20.0\nquadratic_ppm_per_um2 = 0.02\n'
            '[correlated]\nsigma_ppm = 30.0\nlength_um = 25.0\n'
            '[electrical]\nreference = "RC"\ntolerance_pct = 0.1\n',
            {"RA": 5, "RB": 2, "RC": 6}, (2, 7), "ring"),
    # a MOS mirror whose fingers go two to a diffusion island: each board's orientations
    # (pair_row, balance_orientations) and its current budget follow the counts
    "mos": ('name = "tern_mirror"\nkind = "mos"\n[devices]\nMR = 2\nMA = 4\nMB = 6\n'
            '[array]\nrows = 2\ncolumns = 6\ndummies = "ends"\npitch_um = [4.0, 6.0]\n'
            '[unit]\nwidth_um = 2.0\nlength_um = 1.0\n'
            '[terminals]\nMR = { gate = "VB", source = "VSS", drain = "VB" }\n'
            'MA = { gate = "VB", source = "VSS", drain = "IA" }\n'
            'MB = { gate = "VB", source = "VSS", drain = "IB" }\n'
            '[gradient]\nlinear_ppm_per_um = 10.0\nquadratic_ppm_per_um2 = 0.02\n'
            '[correlated]\nsigma_ppm = 100.0\nlength_um = 10.0\n'
            '[electrical]\nreference = "MR"\nvov_v = 0.2\nlambda_per_v = 0.1\n'
            'a_vt_mv_um = 5.0\na_beta_pct_um = 1.0\ntolerance_pct = 2.0\n'
            '[electrical.vds_v]\nMR = 0.7\nMA = 1.5\nMB = 1.5\n',
            {"MR": 3, "MA": 5, "MB": 7}, (3, 6), "ring"),
    # the same mirror with shared diffusion: orient_row's fewest breaks
    "mos-shared": ('name = "tern_shared"\nkind = "mos"\n[devices]\nMR = 2\nMA = 4\nMB = 6\n'
                   '[array]\nrows = 2\ncolumns = 6\ndummies = "ends"\n'
                   'pitch_um = [4.0, 6.0]\n'
                   '[unit]\nwidth_um = 2.0\nlength_um = 1.0\ndiffusion = "shared"\n'
                   '[terminals]\nMR = { gate = "VB", source = "VSS", drain = "VB" }\n'
                   'MA = { gate = "VB", source = "VSS", drain = "IA" }\n'
                   'MB = { gate = "VB", source = "VSS", drain = "IB" }\n'
                   '[gradient]\nlinear_ppm_per_um = 10.0\n',
                   {"MR": 1, "MA": 6, "MB": 4}, (2, 6), "ends"),
}


def _with_counts(text: str, counts: dict[str, int], shape: tuple[int, int],
                 dummies: str) -> str:
    """The spec text with new unit counts, core shape and dummy style."""
    import re

    for name, n in counts.items():
        text = re.sub(rf"(?m)^{name} = \d+$", f"{name} = {n}", text)
    text = re.sub(r'(?m)^dummies = "\w+"$', f'dummies = "{dummies}"', text)
    text = re.sub(r"(?m)^rows = \d+$", f"rows = {shape[0]}", text)
    return re.sub(r"(?m)^columns = \d+$", f"columns = {shape[1]}", text)


def _make_board(driver, counts: list, shape: tuple, dummies: str = "ring") -> str:
    """Fill the page's new-board fields with counts, a shape and a dummy style (in one
    script call: a round trip per key press costs seconds) and press its button; the
    message the page gives."""
    values = {f"edit-count-{d}": n for d, n in enumerate(counts)}
    values.update({"edit-rows": shape[0], "edit-cols": shape[1], "edit-dummies": dummies})
    driver.execute_script("for (const [id, v] of Object.entries(arguments[0])) "
                          "document.getElementById(id).value = String(v);", values)
    driver.find_element("id", "edit-make").click()
    return driver.find_element("id", "edit-message").text


def _open_new_board_page(browser, tmp: Path, kind: str) -> None:
    """``placer lesson`` of one of NEW_BOARD_SPECS, opened."""
    first = tmp / f"{kind}.toml"
    first.write_text(NEW_BOARD_SPECS[kind][0])
    res = run_placer(["lesson", str(first), "--out", str(tmp), "--time-limit", "2"], cwd=tmp)
    assert res.returncode == 0, res.stderr
    _open(browser, next(tmp.glob("*-lesson.html")))


def _new_board_checked(browser, tmp: Path, kind: str, graded: tuple[str, ...]) -> None:
    """On the open page of one spec, make a board with other counts, another shape and
    another dummy style,
    and hold each textbook arrangement the page builds to placer's baselines for a spec
    with those counts, shape and dummies (the exported pattern text, token by token), and
    every figure of those in ``graded`` to ``placer grade --json`` of the export."""
    from placer.io.pattern import format_pattern
    from placer.jobs.arrange import baseline_patterns
    from placer.jobs.load import load_spec

    text, counts, shape, dummies = NEW_BOARD_SPECS[kind]
    said = _make_board(browser, list(counts.values()), shape, dummies)
    assert said.startswith("A new board"), said
    assert browser.find_element("css selector", 'button[data-load="3"]').get_attribute(
        "disabled") == "true"                                 # optimised: not for these counts
    new = tmp / f"{kind}-new.toml"
    new.write_text(_with_counts(text, counts, shape, dummies))
    spec = load_spec(new)
    for k, (method, pattern) in enumerate(baseline_patterns(spec, *shape)):
        browser.find_element("css selector", f'button[data-load="{k}"]').click()
        path = _exported(browser, tmp, f"{kind}-{method}.txt")
        assert [r.split() for r in path.read_text().splitlines()[1:]] == [
            r.split() for r in format_pattern(pattern).splitlines()], method
        if method not in graded:
            continue
        g = _grade(path, new)
        shown, want = _shown(_figures(browser)), _expected(g)
        assert set(shown) <= set(want)
        bad = {key: (shown[key], want[key]) for key in shown
               if not _agree(key, shown[key], want[key], g)}
        assert not bad, (method, bad)
        assert len(shown) > 15


def test_a_new_board_made_in_the_page_is_placers_baselines(browser, tmp_path):
    """New counts, shape and dummies typed into the page of a MOS mirror: its clustered,
    interdigitated and mirrored boards, fingers' orientations too, are placer's
    baselines for a spec with those counts and that shape (placer/search/baselines.py,
    build_pattern); the test below grades them. Before that, a zero count,
    more units than slots and a core beyond the page's limit are each refused with a
    message naming the problem, and the board stays as it was; after it, the spec's own
    board comes back with placer's arrangement."""
    _open_new_board_page(browser, tmp_path, "mos")
    before = _exported(browser, tmp_path, "before.txt").read_text()
    for counts, shape, words in (([3, 0, 4], (2, 6), "MA needs a whole number"),
                                 ([3, 5, 9], (2, 6), "17 units do not fit 2 x 6"),
                                 ([2, 4, 6], (40, 40), "at most 1024 slots")):
        said = _make_board(browser, counts, shape)
        assert words in said, said
        assert _exported(browser, tmp_path, "after.txt").read_text() == before
    _new_board_checked(browser, tmp_path, "mos", ())
    browser.find_element("id", "edit-back").click()          # the spec's board again
    assert _exported(browser, tmp_path, "back.txt").read_text() == before
    assert browser.find_element("css selector", 'button[data-load="3"]').is_enabled()
    errors = [e for e in browser.get_log("browser") if e["level"] == "SEVERE"]
    assert not errors, errors


@pytest.mark.slow
@pytest.mark.parametrize("kind", ["cap", "res", "mos", "mos-shared"])
def test_every_figure_of_a_new_board_is_grades(browser, tmp_path, kind):
    """A board made in the page, for a capacitor array from a ring of dummies to end
    dummies (its budget's bits re-sorted by the new counts) and a resistor divider from
    end dummies to a ring (its ratio budget's random part from the new areas): each
    textbook arrangement is placer's baseline, and every figure the page shows on it is
    ``placer grade --json``'s of the export, the routing cost placer's estimate."""
    _open_new_board_page(browser, tmp_path, kind)
    _new_board_checked(browser, tmp_path, kind, ("clustered", "interdigitated", "mirrored"))

