"""The lesson page's routing cost held to placer's estimate, in Node (no browser).

The page counts each row's tracks, each device's spanning-tree wire and, for MOS fingers,
the diffusion breaks and the fingers without a partner, and after a swap counts again
only the two slots' rows and devices. ``tests/page_routing.js`` runs the page's own code
on a lesson page's data: every arrangement built from scratch, then 200 random swaps
(units, dummies and empty slots, each unit taking its orientation along) checked against
a rebuild after each one. Here each of those boards is held to
:func:`placer.model.routing_estimate.estimate_routing`, called as ``arrange`` calls it.
"""

from __future__ import annotations

import json
import subprocess

import numpy as np
import pytest

from tests.helpers import ROOT, node_or_skip

SCRIPT = ROOT / "placer" / "present" / "web" / "lesson.js"

_BOARDS = {
    "bias_mirror": None,           # MOS fingers two to an island, end dummies
    "split_mirror": None,          # MOS devices with sources of their own
    "lshape_cdac": None,           # a capacitor array: empty slots, a ring of dummies
    "sar_cdac": None,              # a ring of dummy strips
    # 300-unit devices: past the size where Python leaves dense Prim for scipy's tree
    "wide_cap": ('name = "wide_cap"\nkind = "cap"\n[devices]\nCA = 300\nCB = 300\n'
                 '[array]\nrows = 20\ndummies = "ring"\n'),
    "shared_mos": ('name = "shared_mos"\n[devices]\nMA = 6\nMB = 6\n[array]\nrows = 2\n'
                   'dummies = "ends"\n[unit]\ndiffusion = "shared"\n'),
}


def placer_routing(pattern, spec) -> dict:
    """The routing estimate placer makes of ``pattern``, as arrange makes it, and the
    fingers without a partner (``unpaired_in_row`` row by row) when fingers pair."""
    from placer.jobs.arrange import _nets, _pair_dummy
    from placer.kinds import KINDS
    from placer.model.routing_estimate import estimate_routing, unpaired_in_row

    fingers = KINDS[spec.kind].fingers
    route = estimate_routing(pattern, spec.array.pitch_um, fingers, _nets(spec),
                             _pair_dummy(spec))
    out = {"tracks": route.total_tracks, "row_tracks": list(route.row_tracks),
           "tree": [route.tree_length_um[n] for n in spec.devices],
           "total": route.total_tree_um, "breaks": route.diffusion_breaks, "unpaired": None}
    dummy = _pair_dummy(spec)
    if fingers and dummy is not None:
        out["unpaired"] = sum(unpaired_in_row([int(v) for v in row], [int(v) for v in marks],
                                              _nets(spec), dummy)
                              for row, marks in zip(pattern.ids, pattern.orient, strict=True))
    return out


def _agree(page: dict, want: dict) -> None:
    assert page["tracks"] == want["tracks"]
    assert page["rowTracks"] == want["row_tracks"]
    assert page["breaks"] == want["breaks"]
    assert page["unpaired"] == want["unpaired"]
    assert page["tree"] == pytest.approx(want["tree"], rel=1e-9, abs=1e-9)
    assert page["total"] == pytest.approx(want["total"], rel=1e-9)


@pytest.mark.parametrize("board", [
    pytest.param(b, marks=pytest.mark.slow) if b == "wide_cap" else b    # 1 s: CI runs it
    for b in sorted(_BOARDS)])
def test_the_pages_routing_cost_is_placers_estimate_before_and_after_swaps(board, tmp_path):
    from placer.io.pattern import Pattern
    from placer.jobs.arrange import baseline_patterns, candidate_shapes
    from placer.jobs.load import load_spec, parse_spec
    from placer.present.lesson import LessonArrangement, lesson_data

    text = _BOARDS[board]
    spec = (load_spec(ROOT / "samples" / f"{board}.toml") if text is None
            else parse_spec(text, board))
    rows, cols = candidate_shapes(spec)[0]
    pats = baseline_patterns(spec, rows, cols)
    data = tmp_path / "data.json"
    data.write_text(json.dumps(lesson_data(spec, [LessonArrangement(m, m, p)
                                                  for m, p in pats])))
    res = subprocess.run([node_or_skip(), str(ROOT / "tests" / "page_routing.js"), str(SCRIPT),
                          str(data), "200", "3"], capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr
    out = json.loads(res.stdout)
    assert out["swaps"] == 200 and out["changed"] > 80, out["changed"]
    assert out["failures"] == [], out["failures"][:5]
    for (_, pat), page in zip(pats, out["loaded"], strict=True):
        _agree(page, placer_routing(pat, spec))
    board_now = Pattern(spec.devices, np.array(out["board"]["ids"]),
                        np.array(out["board"]["orient"], dtype=np.int8))
    want = placer_routing(board_now, spec)
    _agree(out["last"], want)
    if board == "bias_mirror":          # random swaps leave fingers without a partner
        assert want["unpaired"] > 0 and want["breaks"] > 0
