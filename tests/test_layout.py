"""Hand layouts: GDSII and CSV import, sensitivity, repair, and their bad inputs."""

import gdstk
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from placer.cli import cli
from placer.errors import PlacerError
from placer.io.handlayout import read_layout
from placer.io.pattern import Pattern, parse_pattern
from placer.jobs.load import parse_spec
from placer.jobs.repair import repair, sensitivity
from placer.layout.block import layout_of
from placer.layout.gdswrite import write_gds
from placer.model.grade import grade_pattern
from tests import streamread
from tests.helpers import SAMPLES

SPEC = ('name = "pair"\n[devices]\nA = 4\nB = 4\n[array]\npitch_um = [2.5, 5.5]\n'
        '[unit]\nwidth_um = 1.0\nlength_um = 0.5\n')
CC = ". A> B< B> A< .\n. B> A< A> B< .\n"          # common centroid


def _spec():
    return parse_spec(SPEC, "s.toml")


def _gds(tmp_path, text, name="t.gds", spec=None):
    spec = spec or _spec()
    pattern = parse_pattern(text).reordered(spec.devices)
    path = tmp_path / name
    write_gds(layout_of(pattern, spec)[0], path)
    return path, pattern


def _magnitudes(grade):
    return np.array([[p.linear_ppm, p.quadratic_ppm, abs(p.bowl_ppm), p.correlated_sigma_ppm,
                      p.white_sigma_ppm] for p in grade.pairs])


def test_round_trip_pattern_gds_grade_gives_the_same_scores(tmp_path):
    """Round trip: pattern -> GDSII -> import reproduces the pattern and its grade."""
    spec = _spec()
    text = ". A> B< A> B< .\n. B> A< B> A< .\n"
    path, pattern = _gds(tmp_path, text)
    rec = read_layout(path, spec=spec)
    assert rec.fmt == "gds" and rec.pitch_um == spec.array.pitch_um
    assert rec.pattern.reordered(spec.devices) == pattern
    assert np.allclose(_magnitudes(grade_pattern(rec.pattern.reordered(spec.devices), spec)),
                       _magnitudes(grade_pattern(pattern, spec)))


@pytest.mark.parametrize("rotation, reflect, shift", [
    (0.0, False, (123.4, -56.7)), (np.pi / 2, False, (0.0, 0.0)), (np.pi, False, (5.0, 5.0)),
    (0.0, True, (0.0, 0.0)), (np.pi / 2, True, (-20.0, 7.5)),
])
def test_transformed_copies_give_the_same_error_magnitudes(tmp_path, rotation, reflect, shift):
    """Invariance (isometries): translated, rotated and mirrored copies of one layout have
    the same error magnitudes."""
    spec = _spec()
    text = ". A> B< A> A< .\n. B> B< B> A< .\n"
    path, pattern = _gds(tmp_path, text)
    ref = _magnitudes(grade_pattern(pattern, spec))
    lib = gdstk.read_gds(str(path))
    (top,) = lib.top_level()
    outer = lib.new_cell("OUTER")
    outer.add(gdstk.Reference(top, shift, rotation=rotation, x_reflection=reflect))
    moved = tmp_path / "moved.gds"
    lib.write_gds(str(moved))
    rec = read_layout(moved, spec=None)
    pat = rec.pattern
    own = parse_spec("[devices]\n" + "".join(f"{n} = {c}\n" for n, c in
                                             zip(pat.devices, pat.counts(), strict=True))
                     + f"[array]\npitch_um = [{rec.pitch_um[0]}, {rec.pitch_um[1]}]\n"
                     + "[unit]\nwidth_um = 1.0\nlength_um = 0.5\n")
    got = _magnitudes(grade_pattern(pat.reordered(own.devices), own))
    order = [own.devices.index(n) for n in spec.devices]
    assert order in ([0, 1], [1, 0])   # one pair either way round
    assert np.allclose(got, ref, rtol=1e-9, atol=1e-9)


def test_independent_stream_reader_agrees_with_the_importer(tmp_path):
    """Calma GDSII Stream Format Manual, release 6.0: the test-side record parser's
    flattened references and labels match what the importer recognised."""
    spec = _spec()
    path, _ = _gds(tmp_path, CC)
    rec = read_layout(path, spec=spec)
    lib = streamread.read(path.read_bytes())
    top = next(n for n in lib.order if n.endswith("_TOP"))
    labels = {e.xy[0]: e.text for e in lib.cells[top] if e.kind == "TEXT"}
    px, py = rec.pitch_um
    for e in lib.cells[top]:
        if e.kind != "SREF":
            continue
        x, y = e.xy[0]
        r, c = round(-y / (py * 1000)), round(x / (px * 1000))
        d = rec.pattern.ids[r, c]
        if e.sname.endswith("_DUMMY"):
            assert d == -1
        else:
            assert rec.pattern.devices[d] == labels[(x, y)]
            assert rec.pattern.orient[r, c] == (-1 if e.reflect else 1)


def test_csv_of_unit_centres_grades_like_the_pattern(tmp_path):
    spec = _spec()
    pattern = parse_pattern(CC).reordered(spec.devices)
    rows = ["x_um,y_um,device,orientation"]
    for r in range(2):
        for c in range(6):
            d = pattern.ids[r, c]
            name = "." if d < 0 else pattern.devices[d]
            mark = {1: ">", -1: "<", 0: ""}[int(pattern.orient[r, c])]
            rows.append(f"{10 + c * 1.5},{-r * 2.5},{name},{mark}")
    path = tmp_path / "units.csv"
    path.write_text("\n".join(rows) + "\n")
    rec = read_layout(path, spec=spec)
    assert rec.fmt == "csv" and rec.pattern.reordered(spec.devices) == pattern


def test_sensitivity_contributions_add_up_to_the_worst_pair_error():
    """Linearity: the per-unit terms w_i G u.(r_i - C) sum to the pair's error."""
    spec = _spec()
    pattern = parse_pattern(". A A B A .\n. B A B B .").reordered(spec.devices)
    grade = grade_pattern(pattern, spec)
    pair, units = sensitivity(pattern, spec.array.pitch_um, grade, 10.0)
    worst = grade.worst("linear_ppm")
    assert pair.startswith(f"{worst.a}/{worst.b}")
    assert sum(u.contribution_ppm for u in units) == pytest.approx(worst.linear_ppm)


def test_hot_spot_contributions_add_up_to_the_pairs_hot_spot_error():
    """Linearity again, for a known hot spot: the terms w_i f(r_i) sum to the error the
    grade reports under that field (mean of the field over a's units minus b's)."""
    text = SPEC + "[gradient]\nhot_spot = { x_um = 0, y_um = 0, ppm = 300, fall_off_um = 3 }\n"
    spec = parse_spec(text, "s.toml")
    pattern = parse_pattern(". A A B A .\n. B A B B .").reordered(spec.devices)
    grade = grade_pattern(pattern, spec)
    pair, units = sensitivity(pattern, spec.array.pitch_um, grade, 10.0, spec.gradient)
    (p,) = grade.pairs
    assert "hot spot" in pair
    assert sum(u.contribution_ppm for u in units) == pytest.approx(p.hot_spot_ppm)


def test_two_swapped_units_are_repaired_with_exactly_one_swap_common_practice():
    """Common practice: a common-centroid pattern with two units exchanged is put right by
    exchanging them back (one swap)."""
    spec = _spec()
    broken = parse_pattern(". A> B< B> B< .\n. A> A< A> B< .").reordered(spec.devices)
    res = repair(broken, spec, spec.array.pitch_um, max_swaps=3, time_limit_s=10)
    assert len(res.swaps) == 1 and res.reached_target
    assert res.after.linear_um == 0.0 < res.before.linear_um


@settings(max_examples=15, deadline=None)
@given(st.permutations(list("AAAABBBBC..")))
def test_repair_never_makes_the_linear_error_worse(cells):
    """Property: repair returns the layout unchanged rather than worse."""
    spec = parse_spec("[devices]\nA = 4\nB = 4\nC = 1\n")
    pattern = parse_pattern(" ".join(cells[:6]) + "\n" + " ".join(cells[6:]) + " .")
    pattern = pattern.reordered(spec.devices)
    res = repair(pattern, spec, spec.array.pitch_um, max_swaps=2, time_limit_s=5, beam=6)
    assert res.after.linear_um <= res.before.linear_um + 1e-12
    assert res.pattern.counts() == pattern.counts()


def _lib_with(units, labels=(), tmp_path=None, name="bad.gds"):
    lib = gdstk.Library(unit=1e-6, precision=1e-9)
    cell = lib.new_cell("UNIT")
    cell.add(gdstk.rectangle((-0.4, -0.4), (0.4, 0.4)))
    top = lib.new_cell("TOP")
    for x, y in units:
        top.add(gdstk.Reference(cell, (x, y)))
    for text, x, y in labels:
        top.add(gdstk.Label(text, (x, y), layer=10, texttype=0))
    path = tmp_path / name
    lib.write_gds(str(path))
    return path


@pytest.mark.parametrize("case, message", [
    ("no_refs", "places no unit cells by reference"),
    ("unknown_label", "label 'Z' at (1, 0) um matches no device"),
    ("two_labels", "1 units carry two labels: (0, 0) um: A, B"),
    ("overlap", "units overlap"),
    ("mixed_pitch", "off the 1 x"),
    ("unlabelled", "have no label and no --map"),
])
def test_bad_gds_inputs_name_the_units(runner, tmp_path, write, case, message):
    spec = write("s.toml", "[devices]\nA = 2\nB = 2\n")
    if case == "no_refs":
        lib = gdstk.Library()
        lib.new_cell("TOP").add(gdstk.rectangle((0, 0), (1, 1)))
        path = tmp_path / "bad.gds"
        lib.write_gds(str(path))
    else:
        units = [(0, 0), (1, 0), (2, 0), (3, 0)]
        labels = [("A", 0, 0), ("B", 1, 0), ("B", 2, 0), ("A", 3, 0)]
        if case == "unknown_label":
            labels[1] = ("Z", 1, 0)
        if case == "two_labels":
            labels.append(("B", 0.1, 0))
        if case == "overlap":
            units.append((3.0005, 0))
            labels.append(("A", 3.0005, 0.2))
        if case == "mixed_pitch":
            units[3] = (3.5, 0)
            labels[3] = ("A", 3.5, 0)
        if case == "unlabelled":
            labels = labels[:3]
        path = _lib_with(units, labels, tmp_path)
    result = runner.invoke(cli, ["grade", str(path), "--spec", str(spec)])
    assert result.exit_code == 1, result.output
    assert "Traceback" not in result.output
    assert message in result.output


def test_truncated_and_corrupted_gds_give_one_clear_line(runner, tmp_path):
    path, _ = _gds(tmp_path, CC)
    data = path.read_bytes()
    rng = np.random.default_rng(3)
    for i in range(30):
        bad = bytearray(data[: rng.integers(8, len(data) - 1)] if i % 2 else data)
        if not i % 2:
            for _ in range(4):
                bad[rng.integers(0, len(bad))] ^= 1 << int(rng.integers(0, 8))
        p = tmp_path / f"c{i}.gds"
        p.write_bytes(bytes(bad))
        result = runner.invoke(cli, ["grade", str(p)])
        assert "Traceback" not in result.output
        assert result.exit_code in (0, 1), result.output
        if result.exit_code == 1:
            errors = [ln for ln in result.output.splitlines() if ln.startswith("Error:")]
            assert len(errors) == 1


def test_map_option_names_devices_of_unlabelled_cells(runner, tmp_path, write):
    path = _lib_with([(0, 0), (1, 0)], [("A", 0, 0)], tmp_path)
    result = runner.invoke(cli, ["grade", str(path), "--map", "UNIT=B", "--json"])
    assert result.exit_code == 0, result.output
    assert '"b": "B"' in result.output
    result = runner.invoke(cli, ["grade", str(path), "--map", "bad"])
    assert result.exit_code == 1 and "use CELL=DEVICE" in result.output


def test_sample_hand_layout_is_graded_and_repaired(runner, tmp_path):
    """The README's walk-through: one swap repairs the sample hand layout."""
    result = runner.invoke(cli, ["repair", "samples/bias_mirror_hand.gds", "--spec",
                                 "samples/bias_mirror.toml", "--out", str(tmp_path / "r")])
    assert result.exit_code == 0, result.output
    assert "1 swap(s)" in result.output and "target 0 um reached" in result.output
    assert (tmp_path / "r" / "repaired.gds").exists()


def test_importer_rejects_non_device_names_without_spec(tmp_path):
    path = tmp_path / "u.csv"
    path.write_text("x_um,y_um,device\n0,0,A\n1,0,2B\n")
    with pytest.raises(PlacerError, match="device '2B' is not a name"):
        read_layout(path)


def test_empty_integer_record_is_a_clear_error(tmp_path):
    """Found by the robustness run: a LAYER record with no data must not crash."""
    path, _ = _gds(tmp_path, CC)
    data = bytearray(path.read_bytes())
    at = data.find(b"\x00\x06\x0d\x02")          # first LAYER record (6 bytes, int2)
    damaged = data[:at] + b"\x00\x04\x0d\x02" + data[at + 6:]
    bad = tmp_path / "empty.gds"
    bad.write_bytes(bytes(damaged))
    with pytest.raises(PlacerError, match="integer record of 0 bytes"):
        read_layout(bad)


def test_csv_with_a_stray_carriage_return_is_a_clear_error(tmp_path):
    """Found by the robustness run: the csv module's own errors become one line."""
    path = tmp_path / "u.csv"
    path.write_bytes(b'x_um,y_um,device\n0,0,"A\n1,0,B\n')
    with pytest.raises(PlacerError):
        read_layout(path)


def test_repairs_batched_pair_moments_equal_the_compiled_kernels_keys():
    """The repair scores thousands of states at once in float64 through the one Python
    pair-moment kernel (model/exact_moments.moment_differences); on random layouts its
    worst linear and quadratic errors equal the search's compiled kernel's keys (C,
    integer sums: an implementation written apart) to rounding."""
    from placer.jobs import repair as rep
    from placer.search import keys_of

    rng = np.random.default_rng(7)
    for trial in range(25):
        n_dev = int(rng.integers(2, 5))
        rows, cols = int(rng.integers(1, 7)), int(rng.integers(n_dev, 9))
        ids = rng.integers(-1, n_dev, size=(rows, cols))
        ids[0, :n_dev] = np.arange(n_dev)            # every device has a unit
        names = tuple(f"D{i}" for i in range(n_dev))
        pattern = Pattern(names, ids.astype(np.int64), np.zeros_like(ids, dtype=np.int8))
        counts = "\n".join(f"{n} = {int((ids == i).sum())}" for i, n in enumerate(names))
        spec = parse_spec(f"[devices]\n{counts}\n[gradient]\nquadratic_ppm_per_um2 = 3.0\n")
        pitch = (float(rng.uniform(0.5, 3)), float(rng.uniform(0.5, 3)))
        prob = rep._problem(pattern, spec, pitch)
        flat = ids.ravel()
        every = np.nonzero(flat >= 0)[0]
        r, c = np.divmod(np.arange(rows * cols), cols)
        u, v = 2 * c - (cols - 1), (rows - 1) - 2 * r
        mono = np.column_stack([np.ones_like(u), u, v, u * u, u * v, v * v]).astype(np.int64)
        sums = np.zeros((n_dev, 6), dtype=np.int64)
        np.add.at(sums, flat[every], mono[every])
        lin, quad = rep._batch_worst(prob, sums[None], prob.pair_array(),
                                     mono[every, 1:3].sum(axis=0), len(every))
        keys = keys_of(prob, np.where(flat >= 0, flat, -2))
        assert lin[0] == pytest.approx(keys.linear_um, rel=1e-9, abs=1e-12), trial
        assert quad[0] == pytest.approx(keys.quadratic_ppm, rel=1e-9, abs=1e-12), trial


def _ct_in_a_corner(spec_text: str, time_limit: float):
    """An arranged DAC with its termination unit swapped into the core's first slot."""
    from placer.jobs.arrange import arrange

    spec = parse_spec(spec_text)
    res = arrange(spec, seed=0, time_limit_s=time_limit)
    ids = res.pattern.ids.copy()
    t = spec.devices.index("CT")
    (r, c), = np.argwhere(ids == t)
    rr, cc = np.argwhere(ids >= 0)[0]
    ids[r, c], ids[rr, cc] = ids[rr, cc], ids[r, c]
    return res.spec, Pattern(res.pattern.devices, ids, res.pattern.orient), res.keys.linear_um


def test_repair_past_its_unit_limit_finds_the_one_swap_fix(monkeypatch):
    """Past REPAIR_UNITS the swaps tried are those of the units adding most to the worst
    pair's error (per-unit sensitivity) with any unit: a termination unit moved into a
    corner goes back in one swap (only the outermost units were tried, so its partner
    near the centre never was)."""
    from placer.jobs import repair as rep

    monkeypatch.setattr(rep, "REPAIR_UNITS", 16)
    monkeypatch.setattr(rep, "SWAP_PAIRS", 16 * 64)
    spec, moved, best = _ct_in_a_corner((SAMPLES / "sar_cdac.toml").read_text(), 3.0)
    res = rep.repair(moved, spec, spec.array.pitch_um, 4, time_limit_s=10.0)
    assert len(res.swaps) == 1 and res.reached_target
    assert res.after.linear_um <= best * (1 + 1e-9)
    assert "adding most" in res.limited


@pytest.mark.slow
def test_repair_of_a_1024_unit_array_with_its_termination_in_a_corner(tmp_path):
    """The case that made 2 swaps, stopped at 396 ppm and took 164 s on a 30 s limit: one
    swap to the target, within the time limit (plus start-up)."""
    import time

    bits = "".join(f"C{b} = {2 ** b}\n" for b in range(1, 10))
    text = ('kind = "cap"\n[devices]\nCT = 1\nC0 = 1\n' + bits
            + '[array]\nrows = 32\ncolumns = 32\ndummies = "ring"\n')
    spec, moved, best = _ct_in_a_corner(text, 10.0)
    from placer.jobs.repair import repair

    t0 = time.monotonic()
    res = repair(moved, spec, spec.array.pitch_um, 4, time_limit_s=30.0)
    assert len(res.swaps) == 1 and res.reached_target
    assert time.monotonic() - t0 < 30.0 + 5.0
