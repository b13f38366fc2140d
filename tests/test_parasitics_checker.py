"""Self-tests of the independent parasitics checker (tests/parasitics.py).

Every layout here is a tiny GDSII file built with gdstk in the test, so the expected
figures can be worked out by hand.  Where each expected value comes from:

* wire resistance R = rho_sheet * L / W (sheet resistance times the number of
  squares) is the textbook formula for a uniform strip; series resistances add and
  parallel ones combine as R1 * R2 / (R1 + R2) (textbook circuit theory);
* which length L counts (between neighbouring connection points, none beyond the
  last one, none over terminal metal), the via resistance per cut, the facing rule
  (coupling_ff_per_um * L * s_min / s for 0 < s <= 3 s_min), the facing length at
  minimum space (s <= s_min + 1 nm), the overlap rule (overlap_ff_per_um2 * area),
  the exclusion of two shapes of one instance and the ground figure
  (wire_ff_per_um * longer sides) are the wiring parasitics contract's rules,
  restated in the checker's module docstring.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import gdstk
import pytest

from tests.parasitics import DEFAULT_FIGURES, main, measure

LAYERS = Path(__file__).resolve().parents[1] / "templates" / "layers.toml"
M1, M2, VIA = (4, 0), (5, 0), (6, 0)  # metal1, metal2, via1 in templates/layers.toml

Key = tuple[int, int]
Rect = tuple[float, float, float, float]
FIG = dict(DEFAULT_FIGURES)  # sheet 0.1 / 0.07 ohm/sq, via 5 ohm, spaces 0.25 / 0.3 um


def build(
    path: Path,
    *,
    unit: Sequence[tuple[Key, Rect]] = (),
    refs: Sequence[tuple[tuple[float, float], float, bool]] = (),
    wires: Sequence[tuple[Key, Rect]] = (),
    cuts: Sequence[Rect] = (),
    labels: Sequence[tuple[str, Key, tuple[float, float]]] = (),
) -> Path:
    """Write a library: a unit cell placed by `refs` (origin, rotation, x-reflection)
    in a top cell that holds the wires, cuts and labels."""
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    top = lib.new_cell("TOP")
    if refs:
        cell = lib.new_cell("UNIT")
        for (layer, datatype), (x0, y0, x1, y1) in unit:
            cell.add(gdstk.rectangle((x0, y0), (x1, y1), layer=layer, datatype=datatype))
        for origin, rotation, reflect in refs:
            top.add(gdstk.Reference(cell, origin, rotation=rotation, x_reflection=reflect))
    for (layer, datatype), (x0, y0, x1, y1) in wires:
        top.add(gdstk.rectangle((x0, y0), (x1, y1), layer=layer, datatype=datatype))
    for x0, y0, x1, y1 in cuts:
        top.add(gdstk.rectangle((x0, y0), (x1, y1), layer=VIA[0], datatype=VIA[1]))
    for text, (layer, texttype), origin in labels:
        top.add(gdstk.Label(text, origin, layer=layer, texttype=texttype))
    lib.write_gds(str(path))
    return path


def pair(result: dict[str, Any], a: str, b: str) -> dict[str, Any]:
    """The one coupling entry of nets a < b."""
    found = [c for c in result["couplings"] if (c["a"], c["b"]) == (a, b)]
    assert len(found) == 1, result["couplings"]
    return found[0]


def test_straight_wire_terminal_to_pin(tmp_path: Path) -> None:
    # A metal1 pad (the terminal) at the origin; a metal2 wire 0.4 wide from
    # y = -0.2 to y = 10; one cut joins them at y = 0; the pin label is at y = 9.8,
    # within one wire width of the top edge (y = 10).
    gds = build(
        tmp_path / "one.gds",
        unit=[(M1, (-0.5, -0.5, 0.5, 0.5))],
        refs=[((0.0, 0.0), 0.0, False)],
        wires=[(M2, (-0.2, -0.2, 0.2, 10.0))],
        cuts=[(-0.1, -0.1, 0.1, 0.1)],
        labels=[("A", M1, (0.0, 0.0)), ("A", M2, (0.0, 9.8))],
    )
    result = measure(gds, LAYERS, FIG)
    # R = rho * L / W between the cut (y = 0) and the pin (y = 9.8), plus one via;
    # the 0.2 um beyond each end point carries no current.
    expected = 0.07 * 9.8 / 0.4 + 5.0  # = 6.715
    assert result["taps"] == [{"net": "A", "x": 0.0, "y": 0.0, "r_ohm": pytest.approx(expected)}]
    assert result["nets"]["A"] == {
        "wire_um": pytest.approx(10.2),
        "vias": 1,
        "ground_ff": pytest.approx(0.2 * 10.2),
    }
    assert result["couplings"] == []


def test_wire_over_terminal_metal_starts_at_the_overlap_end(tmp_path: Path) -> None:
    # A metal1 wire runs from x = 3.2 (the instance's centre) to x = 13.2 over a
    # metal1 pad reaching x = 3.7; the pin is at x = 13.1.  The instance is mirrored
    # and rotated (rotation pi with x-reflection mirrors x), which leaves the
    # symmetric pad in place; the tap is reported at the reference origin.  The
    # terminal's label sits on the pad beside the wire: a label on a wire this close
    # to the top edge would be a pin.
    gds = build(
        tmp_path / "stretch.gds",
        unit=[(M1, (-0.5, -0.2, 0.5, 0.2))],
        refs=[((3.2, -6.55), 3.141592653589793, True)],
        wires=[(M1, (3.2, -6.75, 13.2, -6.35))],
        labels=[("A", M1, (2.9, -6.55)), ("A", M1, (13.1, -6.55))],
    )
    result = measure(gds, LAYERS, FIG)
    # The stretch x = 3.2 .. 3.7 belongs to the terminal: R = rho * (13.1 - 3.7) / W.
    expected = 0.1 * (13.1 - 3.7) / 0.4  # = 2.35
    assert result["taps"] == [{"net": "A", "x": 3.2, "y": -6.55, "r_ohm": pytest.approx(expected)}]
    assert result["nets"]["A"]["vias"] == 0


def test_two_pins_give_two_parallel_paths(tmp_path: Path) -> None:
    # A metal1 wire H over the terminal pad (x = -0.3 .. 0.3) joins by cuts at
    # x = -1 and x = 2 two metal2 wires running up to y = 10, each with a pin at
    # y = 9.8; all pins of a net are one node.
    gds = build(
        tmp_path / "loop.gds",
        unit=[(M1, (-0.3, -0.2, 0.3, 0.2))],
        refs=[((0.0, 0.0), 0.0, False)],
        wires=[
            (M1, (-1.2, -0.2, 2.2, 0.2)),
            (M2, (-1.2, -0.2, -0.8, 10.0)),
            (M2, (1.8, -0.2, 2.2, 10.0)),
        ],
        cuts=[(-1.1, -0.1, -0.9, 0.1), (1.9, -0.1, 2.1, 0.1)],
        labels=[("A", M1, (0.0, 0.0)), ("A", M2, (-1.0, 9.8)), ("A", M2, (2.0, 9.8))],
    )
    result = measure(gds, LAYERS, FIG)
    left = 0.1 * 0.7 / 0.4 + 5.0 + 0.07 * 9.8 / 0.4  # pad end -0.3 to cut -1, via, up
    right = 0.1 * 1.7 / 0.4 + 5.0 + 0.07 * 9.8 / 0.4  # pad end 0.3 to cut 2, via, up
    expected = left * right / (left + right)  # parallel combination, ~3.5064
    [tap] = result["taps"]
    assert tap["r_ohm"] == pytest.approx(expected)
    assert result["nets"]["A"]["vias"] == 2
    assert result["nets"]["A"]["wire_um"] == pytest.approx(3.4 + 10.2 + 10.2)


def test_parallel_wires_facing_and_minimum_space(tmp_path: Path) -> None:
    # Five metal1 wires 10 um long, 0.4 wide, stacked in y.  Gaps: A-B 0.25 (the
    # metal1 minimum space), B-C 0.251 (minimum + 1 nm), C-D 0.75 (3 x minimum),
    # D-E 0.751 (beyond reach).
    ys = {"A": 0.0, "B": 0.65, "C": 1.301, "D": 2.451, "E": 3.602}
    gds = build(
        tmp_path / "parallel.gds",
        wires=[(M1, (0.0, y, 10.0, y + 0.4)) for y in ys.values()],
        labels=[(name, M1, (5.0, y + 0.2)) for name, y in ys.items()],
    )
    result = measure(gds, LAYERS, FIG)
    assert {(c["a"], c["b"]) for c in result["couplings"]} == {("A", "B"), ("B", "C"), ("C", "D")}
    ab, bc, cd = pair(result, "A", "B"), pair(result, "B", "C"), pair(result, "C", "D")
    assert ab["c_ff"] == pytest.approx(0.1 * 10.0 * 0.25 / 0.25)  # = 1.0
    assert (ab["facing_um"], ab["facing_min_um"]) == (pytest.approx(10.0), pytest.approx(10.0))
    assert bc["c_ff"] == pytest.approx(0.1 * 10.0 * 0.25 / 0.251)
    assert bc["facing_min_um"] == pytest.approx(10.0)  # within s_min + 1 nm
    assert cd["c_ff"] == pytest.approx(0.1 * 10.0 / 3.0)
    assert (cd["facing_um"], cd["facing_min_um"]) == (pytest.approx(10.0), 0.0)
    assert ab["overlap_um2"] == 0.0
    assert result["nets"]["A"]["ground_ff"] == pytest.approx(0.2 * 10.0)
    assert result["taps"] == []


def test_partial_facing_length(tmp_path: Path) -> None:
    # Two metal2 wires side by side in x (vertical strips) whose y ranges overlap
    # by 3 um, at the metal2 minimum space 0.3: L is the overlap of projections.
    gds = build(
        tmp_path / "partial.gds",
        wires=[(M2, (0.0, 0.0, 0.4, 5.0)), (M2, (0.7, 2.0, 1.1, 9.0))],
        labels=[("P", M2, (0.2, 1.0)), ("Q", M2, (0.9, 8.0))],
    )
    result = measure(gds, LAYERS, FIG)
    c = pair(result, "P", "Q")
    assert c["facing_um"] == pytest.approx(3.0)
    assert c["facing_min_um"] == pytest.approx(3.0)
    assert c["c_ff"] == pytest.approx(0.1 * 3.0 * 0.3 / 0.3)


def test_metal2_over_metal1_crossing(tmp_path: Path) -> None:
    # A metal2 wire 0.5 wide crosses a metal1 wire 0.4 wide: overlap 0.5 x 0.4.
    gds = build(
        tmp_path / "cross.gds",
        wires=[(M1, (0.0, 0.0, 10.0, 0.4)), (M2, (5.0, -3.0, 5.5, 3.0))],
        labels=[("A", M1, (1.0, 0.2)), ("B", M2, (5.25, 2.0))],
    )
    result = measure(gds, LAYERS, FIG)
    c = pair(result, "A", "B")
    assert c["overlap_um2"] == pytest.approx(0.2)
    assert c["c_ff"] == pytest.approx(0.05 * 0.2)
    assert (c["facing_um"], c["facing_min_um"]) == (0.0, 0.0)


def test_shapes_of_one_instance_do_not_couple(tmp_path: Path) -> None:
    # Each instance holds pads of nets A (left) and B (right) 0.25 apart; only the
    # pads of the two instances (B of the first, A of the second, 0.25 apart,
    # facing 1 um) count.  No wire and no pin: every tap has r_ohm None.
    gds = build(
        tmp_path / "units.gds",
        unit=[(M1, (-1.0, -0.5, -0.125, 0.5)), (M1, (0.125, -0.5, 1.0, 0.5))],
        refs=[((0.0, 0.0), 0.0, False), ((2.25, 0.0), 0.0, False)],
        labels=[
            ("A", M1, (-0.5, 0.0)),
            ("B", M1, (0.5, 0.0)),
            ("A", M1, (1.75, 0.0)),
            ("B", M1, (2.75, 0.0)),
        ],
    )
    result = measure(gds, LAYERS, FIG)
    c = pair(result, "A", "B")
    assert c["facing_um"] == pytest.approx(1.0)
    assert c["c_ff"] == pytest.approx(0.1 * 1.0 * 0.25 / 0.25)
    assert [t["r_ohm"] for t in result["taps"]] == [None] * 4
    assert sorted((t["net"], t["x"]) for t in result["taps"]) == [
        ("A", 0.0),
        ("A", 2.25),
        ("B", 0.0),
        ("B", 2.25),
    ]


def test_array_reference_places_one_instance_per_element(tmp_path: Path) -> None:
    # The two instances of the test above, placed by one 2 x 1 array reference:
    # each array element is its own instance (its own taps, its own exclusion).
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    cell = lib.new_cell("UNIT")
    cell.add(gdstk.rectangle((-1.0, -0.5), (-0.125, 0.5), layer=M1[0], datatype=M1[1]))
    cell.add(gdstk.rectangle((0.125, -0.5), (1.0, 0.5), layer=M1[0], datatype=M1[1]))
    top = lib.new_cell("TOP")
    top.add(gdstk.Reference(cell, (0, 0), columns=2, rows=1, spacing=(2.25, 0)))
    for text, x in (("A", -0.5), ("B", 0.5), ("A", 1.75), ("B", 2.75)):
        top.add(gdstk.Label(text, (x, 0.0), layer=M1[0], texttype=M1[1]))
    lib.write_gds(str(tmp_path / "array.gds"))
    result = measure(tmp_path / "array.gds", LAYERS, FIG)
    assert pair(result, "A", "B")["facing_um"] == pytest.approx(1.0)
    assert sorted(t["x"] for t in result["taps"]) == [0.0, 0.0, 2.25, 2.25]


def test_short_and_non_rectangle_are_refused(tmp_path: Path) -> None:
    gds = build(
        tmp_path / "short.gds",
        wires=[(M1, (0.0, 0.0, 10.0, 0.4))],
        labels=[("A", M1, (1.0, 0.2)), ("B", M1, (9.0, 0.2))],
    )
    with pytest.raises(ValueError, match="two or more net names"):
        measure(gds, LAYERS, FIG)
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    lib.new_cell("TOP").add(gdstk.Polygon([(0, 0), (2, 0), (2, 1), (1, 2), (0, 1)], layer=4))
    lib.write_gds(str(tmp_path / "poly.gds"))
    with pytest.raises(ValueError, match="not an axis-aligned rectangle"):
        measure(tmp_path / "poly.gds", LAYERS, FIG)


def test_command_line(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    gds = build(
        tmp_path / "cli.gds",
        unit=[(M1, (-0.5, -0.5, 0.5, 0.5))],
        refs=[((0.0, 0.0), 0.0, False)],
        wires=[(M2, (-0.2, -0.2, 0.2, 10.0))],
        cuts=[(-0.1, -0.1, 0.1, 0.1)],
        labels=[("A", M1, (0.0, 0.0)), ("A", M2, (0.0, 9.8))],
    )
    figures = tmp_path / "figures.json"
    figures.write_text(json.dumps({"via_ohm": 2.0}))
    assert main([str(gds), "--layers", str(LAYERS), "--routing", str(figures)]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["taps"][0]["r_ohm"] == pytest.approx(0.07 * 9.8 / 0.4 + 2.0)
    figures.write_text(json.dumps({"via_ohms": 2.0}))
    assert main([str(gds), "--layers", str(LAYERS), "--routing", str(figures)]) == 2
