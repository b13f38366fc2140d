"""Tests of the stress-term checker (tests/lde_extract.py) on layouts built here with gdstk.

Every expected value is worked out by hand in a comment from the BSIM4 single-finger
form quoted in the checker: term = 1/(SA + L/2) + 1/(SB + L/2), in 1/um, with SA and
SB read off the rectangles drawn in each test.  Units: 1 user unit = 1 um, database
unit 1 nm (gdstk's defaults).
"""

from __future__ import annotations

import math
import time
from pathlib import Path

import gdstk
import pytest

from tests.lde_extract import Finger, LodReport, Stray, lod_by_device, main

DIFF = 1
GATE = 2
LABEL = 10
METAL1 = 4

LAYER_MAP = f"""\
[layers]
diffusion = [{DIFF}, 0]
gate      = [{GATE}, 0]
metal1    = [{METAL1}, 0]
label     = [{LABEL}, 0]
outline   = [11, 0]

[connect]
conductors = ["diffusion", "gate", "metal1"]
"""


def approx(value: float) -> object:
    return pytest.approx(value, rel=1e-9, abs=1e-9)


def diff(x0: float, y0: float, x1: float, y1: float) -> gdstk.Polygon:
    return gdstk.rectangle((x0, y0), (x1, y1), layer=DIFF)


def gate(x0: float, x1: float, y0: float, y1: float) -> gdstk.Polygon:
    """A vertical gate over x0..x1, reaching 0.2 um past the diffusion's y0..y1."""
    return gdstk.rectangle((x0, y0 - 0.2), (x1, y1 + 0.2), layer=GATE)


def label(text: str, x: float, y: float, layer: int = LABEL) -> gdstk.Label:
    return gdstk.Label(text, (x, y), layer=layer)


def measure(tmp_path: Path, lib: gdstk.Library) -> LodReport:
    gds = tmp_path / "layout.gds"
    lib.write_gds(str(gds))
    layers = tmp_path / "layers.toml"
    layers.write_text(LAYER_MAP)
    return lod_by_device(gds, layers)


def unit_cell(lib: gdstk.Library, name: str = "U", device: str | None = "M1") -> gdstk.Cell:
    """Diffusion 0..2 x 0..1, gate 0.6..0.8 (L = 0.2, W = 1), device name at the centre."""
    cell = lib.new_cell(name)
    cell.add(diff(0, 0, 2.0, 1.0), gate(0.6, 0.8, 0, 1.0))
    if device is not None:
        cell.add(label(device, 0.7, 0.5))
    return cell


def finger_at(fingers: list[Finger], x: float) -> Finger:
    (found,) = [f for f in fingers if math.isclose(f.x, x, abs_tol=1e-9)]
    return found


# The unit cell's finger, unmirrored: SA = 0.6 - 0 = 0.6, SB = 2.0 - 0.8 = 1.2, L = 0.2,
# term = 1/(0.6 + 0.1) + 1/(1.2 + 0.1) = 1/0.7 + 1/1.3 = (1.3 + 0.7)/(0.7 * 1.3)
#      = 2/0.91 = 2.1978021978...  (hand calculation, BSIM4 single-finger form)
UNIT_TERM = 2 / 0.91


def test_single_finger_in_its_own_island(tmp_path: Path) -> None:
    lib = gdstk.Library()
    unit_cell(lib)
    report = measure(tmp_path, lib)

    assert report.islands == 1 and report.dummies == 0
    assert report.stray == [] and report.irregular == [] and report.conflicts == []
    assert list(report.devices) == ["M1"]
    (finger,) = report.devices["M1"].fingers
    # centre of channel 0.6..0.8 x 0..1; SA/SB/L/W read off the rectangles (see unit_cell)
    assert (finger.x, finger.y) == (approx(0.7), approx(0.5))
    assert finger.sa_um == approx(0.6)
    assert finger.sb_um == approx(1.2)
    assert finger.l_um == approx(0.2)
    assert finger.w_um == approx(1.0)
    assert finger.term_per_um == approx(UNIT_TERM)  # 2/0.91, hand calculation above
    assert report.devices["M1"].mean_term == approx(UNIT_TERM)


def test_two_fingers_share_an_island_of_abutting_rectangles(tmp_path: Path) -> None:
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    # Three abutting rectangles: one island 0..3.0 x 0..2 (W = 2).
    top.add(diff(0, 0, 1.0, 2.0), diff(1.0, 0, 1.8, 2.0), diff(1.8, 0, 3.0, 2.0))
    # Gates at 0.5..0.7 and 2.2..2.4 (L = 0.2), both fingers of M1.
    top.add(gate(0.5, 0.7, 0, 2.0), gate(2.2, 2.4, 0, 2.0))
    top.add(label("M1", 0.6, 1.0), label("M1", 2.3, 1.0))
    report = measure(tmp_path, lib)

    assert report.islands == 1 and report.dummies == 0 and report.irregular == []
    device = report.devices["M1"]
    assert len(device.fingers) == 2
    left, right = finger_at(device.fingers, 0.6), finger_at(device.fingers, 2.3)
    # left finger: SA = 0.5, SB = 3.0 - 0.7 = 2.3;
    # term = 1/0.6 + 1/2.4 = 5/3 + 5/12 = 25/12 = 2.08333... (hand calculation)
    assert (left.sa_um, left.sb_um, left.w_um) == (approx(0.5), approx(2.3), approx(2.0))
    assert left.term_per_um == approx(25 / 12)
    # right finger: SA = 2.2, SB = 3.0 - 2.4 = 0.6;
    # term = 1/2.3 + 1/0.7 = (0.7 + 2.3)/(2.3 * 0.7) = 3/1.61 = 1.86335... (hand calculation)
    assert (right.sa_um, right.sb_um) == (approx(2.2), approx(0.6))
    assert right.term_per_um == approx(3 / 1.61)
    # device: mean of the two (BSIM4 averages over fingers) = (25/12 + 3/1.61)/2 = 1.97334...
    assert device.mean_term == approx((25 / 12 + 3 / 1.61) / 2)
    assert device.sa_range == (approx(0.5), approx(2.2))
    assert device.sb_range == (approx(0.6), approx(2.3))


def test_mirrored_reference_mirrors_sa_and_sb(tmp_path: Path) -> None:
    lib = gdstk.Library()
    unit = unit_cell(lib)
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(unit, (10, 0)))
    # rotation pi + x_reflection: x -> 20 - x, y -> y.  Diffusion 18..20, channel
    # 19.2..19.4, the cell's label lands at 20 - 0.7 = 19.3, the channel's centre.
    top.add(gdstk.Reference(unit, (20, 0), rotation=math.pi, x_reflection=True))
    report = measure(tmp_path, lib)

    assert report.islands == 2 and report.stray == [] and report.irregular == []
    fingers = report.devices["M1"].fingers
    plain, mirrored = finger_at(fingers, 10.7), finger_at(fingers, 19.3)
    # plain: channel 10.6..10.8 in diffusion 10..12: SA = 0.6, SB = 1.2
    assert (plain.sa_um, plain.sb_um) == (approx(0.6), approx(1.2))
    # mirrored: channel 19.2..19.4 in diffusion 18..20: SA = 19.2 - 18 = 1.2,
    # SB = 20 - 19.4 = 0.6 (the unit's SA and SB exchanged)
    assert (mirrored.sa_um, mirrored.sb_um) == (approx(1.2), approx(0.6))
    # the term is symmetric in SA and SB: both 2/0.91 (UNIT_TERM, hand calculation)
    assert plain.term_per_um == approx(UNIT_TERM)
    assert mirrored.term_per_um == approx(UNIT_TERM)
    assert report.devices["M1"].sa_range == (approx(0.6), approx(1.2))


def test_dummy_counted_not_reported_and_stray_label_listed(tmp_path: Path) -> None:
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    # One island 0..3.0 x 0..1 with a labelled finger (0.5..0.7) and a dummy (2.0..2.2).
    top.add(diff(0, 0, 3.0, 1.0), gate(0.5, 0.7, 0, 1.0), gate(2.0, 2.2, 0, 1.0))
    top.add(label("M1", 0.5, 0.5))  # on the channel's left edge: still names it
    top.add(label("M2", 5.0, 5.0))  # on no channel: stray
    top.add(label("VDD", 1.0, 0.5, layer=METAL1))  # not the label role: ignored
    report = measure(tmp_path, lib)

    assert report.dummies == 1
    assert list(report.devices) == ["M1"]
    assert report.stray == [Stray("M2", 5.0, 5.0)]
    assert report.islands == 1 and report.irregular == []
    (finger,) = report.devices["M1"].fingers
    # The dummy's diffusion belongs to the island: SB reaches 3.0, not the dummy's gate.
    # SA = 0.5, SB = 3.0 - 0.7 = 2.3, term = 1/0.6 + 1/2.4 = 25/12 (hand calculation)
    assert (finger.sa_um, finger.sb_um) == (approx(0.5), approx(2.3))
    assert finger.term_per_um == approx(25 / 12)
    assert not report.ok()  # a stray label is a finding


@pytest.mark.parametrize("joined", [True, False])
def test_island_joined_by_a_top_cell_rectangle(tmp_path: Path, joined: bool) -> None:
    lib = gdstk.Library()
    unit = unit_cell(lib)
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(unit, (0, 0)), gdstk.Reference(unit, (3.0, 0)))
    if joined:
        top.add(diff(2.0, 0, 3.0, 1.0))  # fills the gap 2..3: one island 0..5
    report = measure(tmp_path, lib)

    fingers = report.devices["M1"].fingers
    first, second = finger_at(fingers, 0.7), finger_at(fingers, 3.7)
    assert report.irregular == []
    if joined:
        assert report.islands == 1
        # first: SA = 0.6, SB = 5.0 - 0.8 = 4.2;
        # term = 1/0.7 + 1/4.3 = (4.3 + 0.7)/(0.7 * 4.3) = 5/3.01 = 1.66113 (hand calc.)
        assert (first.sa_um, first.sb_um) == (approx(0.6), approx(4.2))
        assert first.term_per_um == approx(5 / 3.01)
        # second: SA = 3.6, SB = 5.0 - 3.8 = 1.2;
        # term = 1/3.7 + 1/1.3 = (1.3 + 3.7)/(3.7 * 1.3) = 5/4.81 = 1.03950 (hand calc.)
        assert (second.sa_um, second.sb_um) == (approx(3.6), approx(1.2))
        assert second.term_per_um == approx(5 / 4.81)
        # mean = (5/3.01 + 5/4.81)/2 = 1.35032 (hand calculation)
        assert report.devices["M1"].mean_term == approx((5 / 3.01 + 5 / 4.81) / 2)
    else:
        assert report.islands == 2
        # two separate unit islands: both SA = 0.6, SB = 1.2, term = 2/0.91 (UNIT_TERM)
        for f in (first, second):
            assert (f.sa_um, f.sb_um) == (approx(0.6), approx(1.2))
            assert f.term_per_um == approx(UNIT_TERM)


def test_irregular_island_is_flagged(tmp_path: Path) -> None:
    lib = gdstk.Library()
    top = lib.new_cell("TOP")
    # M1: diffusion 0..2 x 0..1 plus a lower step 2..3 x 0..0.4 on its right, so the
    # island's right end is 3.0 below y = 0.4 and 2.0 above: no single SB.
    top.add(diff(0, 0, 2.0, 1.0), diff(2.0, 0, 3.0, 0.4), gate(0.6, 0.8, 0, 1.0))
    top.add(label("M1", 0.7, 0.5))
    # M2: a plain rectangular island elsewhere, 10..12 x 0..1, gate 10.6..10.8.
    top.add(diff(10.0, 0, 12.0, 1.0), gate(10.6, 10.8, 0, 1.0), label("M2", 10.7, 0.5))
    report = measure(tmp_path, lib)

    assert report.islands == 2
    assert [(i.device, i.x, i.y) for i in report.irregular] == [("M1", approx(0.7), approx(0.5))]
    # Still measured on the centre line y = 0.5, above the step: SA = 0.6, SB = 2.0 - 0.8 = 1.2,
    # term = 2/0.91 (UNIT_TERM, hand calculation); M2 is the same finger, regular.
    (m1,) = report.devices["M1"].fingers
    (m2,) = report.devices["M2"].fingers
    assert (m1.sa_um, m1.sb_um) == (approx(0.6), approx(1.2))
    assert m1.term_per_um == approx(UNIT_TERM)
    assert m2.term_per_um == approx(UNIT_TERM)


def test_two_names_on_one_channel_are_a_conflict(tmp_path: Path) -> None:
    lib = gdstk.Library()
    unit = unit_cell(lib, device=None)
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(unit, (0, 0)), gdstk.Reference(unit, (5.0, 0)))
    top.add(label("M1", 0.7, 0.5), label("M2", 0.7, 0.6))  # two names on the first channel
    top.add(label("M3", 5.7, 0.5), label("M3", 5.7, 0.6))  # one name, twice, on the second
    report = measure(tmp_path, lib)

    assert report.dummies == 0 and report.stray == []
    assert [(c.names, c.x, c.y) for c in report.conflicts] == [
        (("M1", "M2"), approx(0.7), approx(0.5))
    ]
    assert list(report.devices) == ["M3"]
    (m3,) = report.devices["M3"].fingers
    # the unit's finger: SA = 0.6, SB = 1.2, term = 2/0.91 (UNIT_TERM, hand calculation)
    assert (m3.sa_um, m3.sb_um) == (approx(0.6), approx(1.2))
    assert m3.term_per_um == approx(UNIT_TERM)


def test_command_line_prints_one_line_per_device(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    lib = gdstk.Library()
    unit = unit_cell(lib)
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(unit, (0, 0)))
    top.add(gdstk.Reference(unit, (5.0, 0), rotation=math.pi, x_reflection=True))
    gds = tmp_path / "layout.gds"
    lib.write_gds(str(gds))
    layers = tmp_path / "layers.toml"
    layers.write_text(LAYER_MAP)

    assert main([str(gds), "--layers", str(layers)]) == 0
    out = capsys.readouterr().out.splitlines()
    # SA 0.6 (plain) .. 1.2 (mirrored), SB the same; term 2/0.91 = 2.198 to 4 figures
    assert out == ["M1  fingers 2  SA 0.6..1.2 um  SB 0.6..1.2 um  term 2.198 /um"]


@pytest.mark.parametrize("pitch", [3.0, 2.0])
def test_a_thousand_fingers_in_arrays_are_fast(tmp_path: Path, pitch: float) -> None:
    lib = gdstk.Library()
    unit = unit_cell(lib)
    top = lib.new_cell("TOP")
    # 33 columns x 34 rows = 1122 fingers placed by one AREF.  At a 3 um pitch every unit
    # is its own island; at 2 um the units of a row abut: 34 islands 0..66 um long.
    top.add(gdstk.Reference(unit, (0, 0), columns=33, rows=34, spacing=(pitch, 3.0)))
    start = time.perf_counter()
    report = measure(tmp_path, lib)
    elapsed = time.perf_counter() - start

    device = report.devices["M1"]
    assert len(device.fingers) == 33 * 34
    assert report.irregular == [] and report.dummies == 0
    if pitch == 3.0:
        assert report.islands == 33 * 34
        # every finger is the unit's: term 2/0.91 (UNIT_TERM, hand calculation)
        assert device.mean_term == approx(UNIT_TERM)
    else:
        assert report.islands == 34
        # finger k (k = 0..32) of a row: channel 2k+0.6..2k+0.8 in island 0..66, so
        # SA = 2k + 0.6 (0.6..64.6) and SB = 66 - (2k + 0.8) = 65.2 - 2k (1.2..65.2)
        assert device.sa_range == (approx(0.6), approx(64.6))
        assert device.sb_range == (approx(1.2), approx(65.2))
        # term_k = 1/(2k + 0.7) + 1/(65.3 - 2k); every row is the same, so the mean is
        # the mean over k of the row (hand derivation of the BSIM4 form per finger)
        row = [1 / (2 * k + 0.7) + 1 / (65.3 - 2 * k) for k in range(33)]
        assert device.mean_term == approx(sum(row) / 33)
    assert elapsed < 10.0, f"{elapsed:.2f} s for 1122 fingers"
