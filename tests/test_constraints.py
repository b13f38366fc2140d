"""Real blocks: masks and keep-outs, pins, symmetry, groups -- from spec to GDSII."""

import re
from pathlib import Path

import gdstk
import numpy as np
import pytest

from placer.cli import cli
from placer.errors import SpecError
from placer.io.pattern import DUMMY, EMPTY
from placer.jobs.arrange import arrange
from placer.jobs.load import parse_spec
from tests import extraction

LAYERS = Path("templates/layers.toml")


def _arrange(text: str, **kw):
    return arrange(parse_spec(text, "s.toml"), time_limit_s=kw.pop("time_limit_s", 20), **kw)


def test_a_symmetric_constraint_gives_its_own_mirror_image():
    """The result with symmetry = x / y / point equals its mirror image (device by device)."""
    for sym, flip in (("x", lambda g: g[:, ::-1]), ("y", lambda g: g[::-1, :]),
                      ("point", lambda g: g[::-1, ::-1])):
        res = _arrange("[devices]\nA = 4\nB = 4\nC = 4\n[array]\nrows = 2\ncolumns = 6\n"
                       f'dummies = "none"\nsymmetry = "{sym}"\n')
        ids = res.pattern.ids
        assert np.array_equal(ids, flip(ids)), (sym, ids)


def test_a_pinned_unit_never_moves():
    res = _arrange(Path("samples/pinned_mirror.toml").read_text())
    # core (0, 3) is pattern (0, 4): one dummy column at each end
    assert res.pattern.devices[res.pattern.ids[0, 4]] == "MREF"


@pytest.mark.slow
def test_keep_out_slots_stay_empty_in_the_pattern_and_the_gdsii(runner, tmp_path):
    """The L-shaped sample: its '#' slots hold no unit and no dummy in the pattern, the
    GDSII places no cell there, and the layout extracts with no short or open."""
    out = tmp_path / "o"
    result = runner.invoke(cli, ["arrange", "samples/lshape_cdac.toml", "--out", str(out),
                                 "--quiet"])
    assert result.exit_code == 0, result.output
    spec = parse_spec(Path("samples/lshape_cdac.toml").read_text(), "s")
    mask = spec.placement.mask
    assert mask is not None
    from placer.io.pattern import read_pattern

    pat = read_pattern(out / "pattern.txt")
    keep = [(r + 1, c + 1) for r, row in enumerate(mask) for c, ch in enumerate(row)
            if ch == "#"]                                 # ring: the core sits at (1, 1)
    assert keep and all(pat.ids[r, c] == EMPTY for r, c in keep)
    px, py = spec.array.pitch_um
    lib = gdstk.read_gds(str(out / "pattern.gds"))
    origins = {(round(x / px), round(-y / py)) for x, y in
               (ref.origin for ref in lib.top_level()[0].references)}
    assert not any((c, r) in origins for r, c in keep)
    assert extraction.check(out / "pattern.gds", LAYERS).ok()


def test_a_mask_that_removes_only_unused_slots_changes_nothing():
    """Masking out the slots a result leaves spare gives the same arrangement."""
    base = "[devices]\nA = 3\nB = 3\n[array]\nrows = 2\ncolumns = 4\ndummies = \"none\"\n"
    first = _arrange(base)
    ids = first.pattern.ids
    mask = "\n".join("".join("." if d >= 0 else "#" for d in row) for row in ids)
    second = _arrange(base + f'mask = """\n{mask}\n"""\n')
    again = np.where(second.pattern.ids >= 0, second.pattern.ids, DUMMY)
    assert np.array_equal(np.where(ids >= 0, ids, DUMMY), again)
    assert second.keys.quadratic_ppm == pytest.approx(first.keys.quadratic_ppm, rel=1e-12)


def test_groups_rank_their_own_pairs_and_report_each_group():
    """Two groups in one array: only pairs inside a group (and [match] pairs) are ranked
    and graded; the grade names the worst pair of each group."""
    text = ("[devices]\nPA = 2\nPB = 2\nMR = 2\nMO = 4\n[array]\nrows = 2\ncolumns = 5\n"
            'dummies = "none"\n[groups.pair]\ndevices = ["PA", "PB"]\n'
            '[groups.mirror]\ndevices = ["MR", "MO"]\n')
    res = _arrange(text)
    names = {(p.a, p.b) for p in res.grade.pairs}
    assert names == {("PA", "PB"), ("MR", "MO")}
    assert {p.group for p in res.grade.pairs} == {"pair", "mirror"}
    assert res.grade.worst("linear_ppm", "pair") is not None
    matched = _arrange(text + '[match]\npairs = [["PA", "MR"]]\n')
    assert {p.group for p in matched.grade.pairs} == {"pair", "mirror", "match"}


def test_group_rows_confine_their_devices():
    res = _arrange(Path("samples/fc_amp.toml").read_text())
    spec = parse_spec(Path("samples/fc_amp.toml").read_text(), "s")
    ids = res.pattern.ids
    for g in spec.placement.groups:
        for d in g.devices:
            rows = set(np.nonzero(ids == spec.devices.index(d))[0].tolist())
            assert rows <= set(g.rows or ()), (d, rows)


@pytest.mark.parametrize("extra, message", [
    ('[array]\nrows = 2\ncolumns = 4\n[pins]\nA = [[0, 9]]\n', "outside the 2 x 4 core"),
    ('[array]\nrows = 2\ncolumns = 4\n[pins]\nA = [[0, 0]]\nB = [[0, 0]]\n',
     "already pinned to 'A'"),
    ('[array]\nrows = 2\ncolumns = 4\n[pins]\nA = [[0, 0], [0, 1], [1, 1], [1, 2]]\n',
     "pins 4 units, the device has 3"),
    ('[array]\nmask = """\n..#.\n....\n"""\n[pins]\nA = [[0, 2]]\n', "is not usable"),
    ('[array]\nmask = """\n..x.\n....\n"""\n', "holds 'x'"),
    ('[array]\nmask = """\n...\n....\n"""\n', "line 2 has 4 slots, line 1 has 3"),
    ('[array]\nmask = """\n..#.\n....\n"""\nsymmetry = "x"\n', "its mirror [0, 2] is not"),
    ('[array]\nrows = 2\ncolumns = 4\nsymmetry = "x"\n', "each needs one"),
    ('[array]\nrows = 2\ncolumns = 4\n[groups.g]\ndevices = ["A"]\n', "'B' is in no group"),
    ('[array]\nrows = 2\ncolumns = 4\n[groups.g]\ndevices = ["A", "B"]\nkind = "res"\n',
     "one kind per spec"),
    ('[array]\nrows = 2\ncolumns = 4\n[groups.g]\ndevices = ["A"]\nrows = [0]\n'
     '[groups.h]\ndevices = ["B"]\n[pins]\nA = [[1, 0]]\n', "outside the rows [0]"),
    ('[array]\nrows = 2\ncolumns = 4\n[groups.g]\ndevices = ["A", "B"]\nrows = [5]\n',
     "row 5 is outside"),
    ('[array]\nrows = 2\ncolumns = 4\n[match]\npairs = [["A", "A"]]\n', "two different"),
])
def test_constraints_that_cannot_be_honoured_are_refused_in_one_line(extra, message):
    with pytest.raises(SpecError, match=re.escape(message)) as info:
        parse_spec("[devices]\nA = 3\nB = 3\n" + extra, "s.toml")
    assert "\n" not in str(info.value)


def test_infeasible_combination_is_refused_before_any_search(runner, tmp_path, write):
    spec = write("s.toml", "[devices]\nA = 4\nB = 2\n[array]\nrows = 2\ncolumns = 4\n"
                           'dummies = "none"\n[groups.g]\ndevices = ["A"]\nrows = [0]\n'
                           '[groups.h]\ndevices = ["B"]\nrows = [0]\n')
    result = runner.invoke(cli, ["arrange", str(spec), "--out", str(tmp_path / "o")])
    assert result.exit_code == 1 and "Traceback" not in result.output
    assert not (tmp_path / "o").exists()
