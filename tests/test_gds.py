"""GDSII output against an independent stream reader, gdstk's reader and the format's rules."""

import re

import gdstk
import pytest

from placer.cli import cli
from placer.errors import PlacerError
from placer.io.pattern import parse_pattern
from placer.jobs.load import parse_spec
from placer.layout.block import layout_of
from placer.layout.cells import load_rules
from placer.layout.gdswrite import cell_name, write_gds
from placer.layout.layers import load_layers
from tests import streamread

PATTERN = ". IREF> IOUT< IOUT> IREF< .\n. IOUT> IREF< IREF> IOUT< .\n"
SPEC = ('name = "tail_pair"\n[devices]\nIREF = 4\nIOUT = 4\n[array]\npitch_um = [2.5, 6.0]\n'
        "[unit]\nwidth_um = 2.0\nlength_um = 0.5\n")


@pytest.fixture
def written(tmp_path):
    spec = parse_spec(SPEC, "s.toml")
    pattern = parse_pattern(PATTERN).reordered(spec.devices)
    lib, _ = layout_of(pattern, spec)
    data = write_gds(lib, tmp_path / "t.gds")
    return spec, pattern, data, tmp_path / "t.gds"


def test_stream_is_well_formed_and_units_are_um_and_nm(written):
    """Calma GDSII Stream Format Manual, release 6.0: record grammar and UNITS record
    (database unit in user units, then in metres)."""
    _, _, data, _ = written
    lib = streamread.read(data)
    assert lib.user_unit == pytest.approx(1e-3)
    assert lib.db_unit_m == pytest.approx(1e-9)


def test_units_sit_where_pattern_times_pitch_puts_them(written):
    """Independent read-back (Calma manual, release 6.0): flatten the top cell's SREFs and
    compare each unit's origin, reflection and label with pattern x pitch."""
    spec, pattern, data, _ = written
    lib = streamread.read(data)
    top = next(n for n in lib.order if n.endswith("_TOP"))
    refs = [e for e in lib.cells[top] if e.kind == "SREF"]
    labels = {e.xy[0]: e.text for e in lib.cells[top] if e.kind == "TEXT"}
    px, py = spec.array.pitch_um
    seen = 0
    for r in range(pattern.shape[0]):
        for c in range(pattern.shape[1]):
            d = int(pattern.ids[r, c])
            want = (round(c * px * 1000), round(-r * py * 1000))
            (ref,) = [e for e in refs if e.xy[0] == want]
            if d < 0:
                assert ref.sname.endswith("_DUMMY")
                continue
            seen += 1
            assert ref.sname.endswith("_MOS")
            mirrored = pattern.orient[r, c] < 0
            assert ref.reflect == mirrored
            assert ref.angle == pytest.approx(180.0 if mirrored else 0.0)
            assert labels[want] == pattern.devices[d]
    assert seen == 8


def test_left_fingers_are_mirrored_left_to_right(written):
    """Calma manual, release 6.0, STRANS/ANGLE: reflection about x, then rotation. For a
    '<' finger the writer asks for reflection plus 180 degrees, which must map the '>'
    cell's source side (x < 0) to the right of the slot centre and keep y."""
    _, pattern, data, _ = written
    lib = streamread.read(data)
    top = next(n for n in lib.order if n.endswith("_TOP"))
    n_left = 0
    for ref in (e for e in lib.cells[top] if e.kind == "SREF" and e.reflect):
        tr = (ref.xy[0][0], ref.xy[0][1], ref.angle, ref.reflect)
        x, y = streamread.apply(tr, (-400.0, 100.0))
        assert x == pytest.approx(ref.xy[0][0] + 400.0, abs=1e-6)
        assert y == pytest.approx(ref.xy[0][1] + 100.0, abs=1e-6)
        n_left += 1
    assert n_left == int((pattern.orient < 0).sum())


def test_gdstk_reader_sees_the_same_cells_references_and_labels(written):
    _, pattern, data, path = written
    ours = streamread.read(data)
    lib = gdstk.read_gds(str(path))
    assert sorted(c.name for c in lib.cells) == sorted(ours.order)
    (top,) = lib.top_level()
    assert len(top.references) == pattern.shape[0] * pattern.shape[1]
    label = load_layers()["label"]
    assert sorted(lb.text for lb in top.labels if (lb.layer, lb.texttype) == label) == sorted(
        pattern.devices[d] for d in pattern.ids.ravel() if d >= 0)


def test_one_top_cell_and_no_dummy_cell_without_dummies(tmp_path):
    """Stream format (Calma manual, release 6.0): a library may hold several top cells;
    placer's holds exactly one, and no unused dummy cell."""
    spec = parse_spec(SPEC, "s.toml")
    pattern = parse_pattern("IREF> IOUT< IOUT> IREF< IOUT> IREF< IREF> IOUT<\n"
                            ).reordered(spec.devices)
    lib, _ = layout_of(pattern, spec)
    write_gds(lib, tmp_path / "n.gds")
    back = gdstk.read_gds(str(tmp_path / "n.gds"))
    assert len(back.top_level()) == 1
    assert not any(c.name.endswith("_DUMMY") for c in back.cells)


def test_same_input_gives_the_same_bytes(tmp_path, written):
    spec, pattern, data, _ = written
    lib, _ = layout_of(pattern, spec)
    assert write_gds(lib, tmp_path / "again.gds") == data


@pytest.mark.parametrize("base", ["a", "x" * 40, "9lives", "bad-name.with.dots", "ÄÖ"])
def test_cell_names_follow_the_stream_rules(base):
    """Stream format rules (Calma manual, release 6.0, STRNAME): at most 32 characters of
    A-Z, a-z, 0-9, _ (and ? $, which placer avoids); names stay unique."""
    taken: set[str] = set()
    names = [cell_name(base, s, taken) for s in ("TOP", "TOP", "MOS", "DUMMY")]
    assert len(set(names)) == 4
    for n in names:
        assert len(n) <= 32 and re.fullmatch(r"[A-Za-z][A-Za-z0-9_]*", n)


def _shipped_layers() -> str:
    from placer.layout.cells import shipped_text

    return shipped_text("layers.toml")


@pytest.mark.parametrize("edit, match", [
    (lambda t: t.replace("diffusion = [1, 0]", ""), "missing role"),
    (lambda t: t.replace("diffusion = [1, 0]", "diffusion = [40000, 0]"), "outside 0..32767"),
    (lambda t: t.replace("diffusion = [1, 0]", "diffusion = [1]"),
     r"must be \[layer, datatype\]"),
    (lambda t: t.replace("diffusion = [1, 0]", "difusion = [1, 0]"), "unknown role 'difusion'"),
    (lambda t: t.replace("metal2    = [5, 0]", "metal2    = [4, 0]"), "share 4/0"),
    (lambda t: t.replace('"metal1", "metal2", "well"]\n', '"metal1", "metal2"]\n'),
     r"\[connect\] must state"),
    (lambda t: t.replace("well      = [15, 0]", ""), "well and the tap implant come together"),
])
def test_bad_layer_maps_are_refused(tmp_path, edit, match):
    path = tmp_path / "layers.toml"
    path.write_text(edit(_shipped_layers()))
    with pytest.raises(PlacerError, match=match):
        load_layers(path)


def test_the_generic_layer_map_states_the_contract_exactly():
    """The layout contract in the README: the generic map's [connect] table, word for word."""
    import tomllib

    data = tomllib.loads(_shipped_layers())
    assert data["connect"] == {
        "conductors": ["diffusion", "gate", "metal1", "metal2", "well"],
        "cuts": {"contact": ["diffusion", "gate", "metal1"], "via1": ["metal1", "metal2"],
                 "tap": ["diffusion", "well"]},
        "splits": {"gate": ["diffusion"]}}


@pytest.mark.parametrize("text, match", [
    ('kind = "mos"\n', "needs a \\[rules\\] table"),
    ('kind = "cap"\n[rules]\ncontact = 0.2\n', "does not match the spec's kind"),
    ('[rules]\ncontact = 0.2\n', "missing contact_space"),
    ('[rules]\ncontakt = 0.2\n', "did you mean 'contact'"),
    ('[rules]\ncontact = -1\n', "must be a number from 0.001"),
    ('[rules]\ncontact = inf\n', "must be a number from 0.001"),
    ('[rules]\ncontact = nan\n', "must be a number from 0.001"),
    ('shape = 1\n', "unknown key 'shape'"),
])
def test_bad_templates_are_refused(tmp_path, text, match):
    path = tmp_path / "t.toml"
    path.write_text(text)
    with pytest.raises(PlacerError, match=match):
        load_rules("mos", path)


def test_draw_cli_writes_three_files_and_refuses_bad_layers(runner, write, tmp_path):
    pat = write("pair.txt", PATTERN)
    spec = write("s.toml", SPEC)
    out = tmp_path / "out"
    result = runner.invoke(cli, ["draw", str(pat), "--spec", str(spec), "--out", str(out)])
    assert result.exit_code == 0, result.output
    assert {p.name for p in out.iterdir()} == {"pair.gds", "pair.png", "pair.svg"}
    bad = write("l.toml", "[layers]\ndiffusion = [1, 0]\n")
    out2 = tmp_path / "out2"
    result = runner.invoke(cli, ["draw", str(pat), "--spec", str(spec), "--out", str(out2),
                                 "--layers", str(bad)])
    assert result.exit_code == 1 and "missing role" in result.output
    assert not out2.exists()


def test_draw_cli_refuses_an_output_path_that_is_a_file(runner, write):
    pat = write("pair.txt", PATTERN)
    blocker = write("blocker", "x")
    result = runner.invoke(cli, ["draw", str(pat), "--out", str(blocker)])
    assert result.exit_code in (1, 2) and "Traceback" not in result.output
    assert blocker.read_text() == "x"


def test_sample_gdsii_files_open_in_gdstk_and_parse_cleanly():
    """Every GDSII sample opens in a standard reader (gdstk) and passes the independent
    record-grammar check (Calma GDSII Stream Format Manual, release 6.0)."""
    from pathlib import Path

    samples = sorted(Path("samples").glob("*.gds"))
    assert samples
    for path in samples:
        lib = gdstk.read_gds(str(path))
        assert lib.top_level() and lib.unit == pytest.approx(1e-6)
        streamread.read(path.read_bytes())
