"""The lesson page's new boards held to placer's baselines, in Node (no browser).

A trainee's new board is dealt by the page's own code: the clustered, interdigitated and
mirrored cores (placer/search/baselines.py), the dummies round them
(placer/model/grid.py) and, for MOS fingers, the orientations (placer/jobs/arrange.py
build_pattern: orient_row or pair_row, then balance_orientations). ``tests/page_boards.js``
runs that code on random counts, core shapes and dummy styles, for a capacitor array
and three MOS arrays (fingers two to an island, shared diffusion, sources of their own);
each board must equal :func:`placer.jobs.arrange.baseline_patterns` of a spec with those
counts and that shape, ids and orientations alike. The browser test
(``tests/test_lesson.py``) drives the same through the page's controls and grades it.
"""

from __future__ import annotations

import json
import random
import subprocess

import numpy as np

from tests.helpers import ROOT, node_or_skip

SCRIPT = ROOT / "placer" / "present" / "web" / "lesson.js"

KINDS = {
    "cap": 'kind = "cap"\n',
    "mos-pairs": 'kind = "mos"\n',
    "mos-shared": 'kind = "mos"\n[unit]\ndiffusion = "shared"\n',
    "mos-own": 'kind = "mos"\n',        # each device its own source: few joins
}


def _spec_text(kind: str, counts: list[int], rows: int, cols: int, style: str) -> str:
    names = [f"M{chr(65 + d)}" for d in range(len(counts))]
    text = 'name = "tern"\n' + KINDS[kind].split("[unit]")[0]
    text += "[devices]\n" + "".join(f"{n} = {c}\n" for n, c in zip(names, counts, strict=True))
    text += f'[array]\nrows = {rows}\ncolumns = {cols}\ndummies = "{style}"\n'
    if "[unit]" in KINDS[kind]:
        text += "[unit]" + KINDS[kind].split("[unit]")[1]
    if kind == "mos-own":
        text += "[terminals]\n" + "".join(
            f'{n} = {{ gate = "G", source = "S{n}", drain = "D{n}" }}\n' for n in names)
    return text


def _cases(seed: int, n: int) -> list[tuple[str, list[int], int, int, str]]:
    rng = random.Random(seed)
    out = []
    for k in range(n):
        kind = list(KINDS)[k % len(KINDS)]
        counts = [rng.randint(1, 9) for _ in range(rng.randint(2, 4))]
        units = sum(counts)
        rows = rng.randint(1, 4)
        cols = -(-units // rows) + rng.randint(0, 2)
        out.append((kind, counts, rows, cols, rng.choice(["ring", "ends", "none"])))
    return out


def test_the_pages_new_boards_are_placers_baselines(tmp_path):
    """200 random requests: every board the page deals equals placer's, token for token."""
    from placer.jobs.arrange import baseline_patterns
    from placer.jobs.load import parse_spec
    from placer.present.lesson import _routing_data

    node = node_or_skip()
    cases, specs = [], []
    for kind, counts, rows, cols, style in _cases(7, 200):
        spec = parse_spec(_spec_text(kind, counts, rows, cols, style), f"{kind}.toml")
        specs.append((spec, rows, cols))
        cases.append({"data": {"devices": list(spec.devices), "routing": _routing_data(spec)},
                      "counts": counts, "rows": rows, "cols": cols, "style": style})
    path = tmp_path / "cases.json"
    path.write_text(json.dumps(cases))
    res = subprocess.run([node, str(ROOT / "tests" / "page_boards.js"), str(SCRIPT), str(path)],
                         capture_output=True, text=True, timeout=120)
    assert res.returncode == 0, res.stderr
    made = json.loads(res.stdout)
    assert len(made) == len(cases)
    oriented = 0
    for (spec, rows, cols), case, page in zip(specs, cases, made, strict=True):
        for method, pattern in baseline_patterns(spec, rows, cols):
            got = page[method]
            where = (case["counts"], rows, cols, case["style"], spec.kind, method)
            assert np.array_equal(np.array(got["ids"]), pattern.ids), where
            assert np.array_equal(np.array(got["orient"]), pattern.orient), where
            oriented += int(np.any(pattern.orient != 0))
    assert oriented >= 200                 # the MOS boards' fingers were marked and held
