"""Routed layouts checked by an extraction written apart from the writer.

Every layout here is written by placer and read back by ``tests/extraction.py``, which
knows only the GDSII file and the layer map (the layout contract in the README). Besides
placer's own net labels, the tests add *probe* labels of their own: the net each device
region must carry by the spec (a finger's source and drain diffusion, its gate, a
capacitor's plates, a resistor's heads), placed from the unit's centre and its W and L
alone. A probe on the wrong region shows as a short; a probe on nothing as a stray label.
"""

from __future__ import annotations

from pathlib import Path

import gdstk
import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from placer.cli import cli
from placer.io.pattern import DUMMY, EMPTY, Pattern, parse_pattern
from placer.jobs.load import parse_spec
from placer.layout.block import layout_of
from placer.layout.cells import load_rules, spacing_rules
from placer.layout.gdswrite import write_gds
from placer.layout.layers import load_layers
from placer.layout.pitch import fitted
from tests import extraction

LAYERS = Path("templates/layers.toml")
SAMPLES = sorted(Path("samples").glob("*.toml"))
CASES_PER_KIND = 300


def _spacing(kind: str) -> dict[str, float]:
    """The template's own spacing rules, per conductor (what 'no shape of one net comes
    closer than the stated spacing to another net's' is checked against)."""
    return spacing_rules(load_rules(kind))


def _snake(ids: np.ndarray) -> list[tuple[int, int]]:
    """Snake order, as the README documents for series resistors."""
    out = []
    for r in range(ids.shape[0]):
        cols = range(ids.shape[1]) if r % 2 == 0 else range(ids.shape[1] - 1, -1, -1)
        out.extend((r, c) for c in cols)
    return out


def _probes(pattern: Pattern, spec, dummies: bool = True) -> list[tuple[str, str, float, float]]:
    """(net, role, x, y) the spec demands at device regions, from geometry alone (at the
    dummies' too, unless ``dummies`` is False: a ring of strips draws only part of them)."""
    px, py = spec.array.pitch_um
    w, length = spec.unit.width_um, spec.unit.length_um
    out = []
    seen = [0] * len(spec.devices)
    for r, c in _snake(pattern.ids):
        d = int(pattern.ids[r, c])
        if d == EMPTY or (d == DUMMY and not dummies):
            continue
        x, y = c * px, -r * py
        if spec.kind == "mos":
            if d == DUMMY:
                nets = {"gate": spec.dummy_net, "source": spec.dummy_net,
                        "drain": spec.dummy_net}
            else:
                nets = spec.nets[d]
            s = -1 if int(pattern.orient[r, c]) < 0 else 1
            off = length / 2 + 0.02
            out += [(nets["source"], "diffusion", x - s * off, y),
                    (nets["drain"], "diffusion", x + s * off, y),
                    (nets["gate"], "gate", x, y)]
        elif spec.kind == "cap":
            nets = ({"top": spec.dummy_net, "bottom": spec.dummy_net} if d == DUMMY
                    else spec.nets[d])
            # the top plate a quarter of its width and length off the centre: a strap may
            # cross the middle of a row (through a corridor cut in each dummy's plate), and
            # the notches for the bottom plate's vias may sit in the middle of its edges
            out += [(nets["top"], "metal2", x - w / 4, y - length / 4),
                    (nets["bottom"], "metal1", x - w / 2 - 0.05, y)]
        else:
            if d == DUMMY:
                a = b = spec.dummy_net
            elif spec.joins[d] == "parallel":
                a, b = spec.nets[d]["a"], spec.nets[d]["b"]
            else:
                k, n, name = seen[d], spec.counts[d], spec.devices[d]
                a = spec.nets[d]["a"] if k == 0 else f"{name}_N{k}"
                b = spec.nets[d]["b"] if k == n - 1 else f"{name}_N{k + 1}"
                seen[d] += 1
            out += [(a, "gate", x, y + length / 2 + 0.05),
                    (b, "gate", x, y - length / 2 - 0.05)]
    return out


def _write_and_check(tmp_path: Path, pattern: Pattern, spec, name: str = "t",
                     probes: bool = True, dummy_probes: bool = True) -> extraction.Report:
    lib, block = layout_of(pattern.reordered(spec.devices), spec)
    if probes:
        layers = load_layers()
        top = lib.top_level()[0]
        for net, role, x, y in _probes(pattern.reordered(spec.devices), block.spec,
                                       dummy_probes):
            layer, dtype = layers[role]
            top.add(gdstk.Label(net, (round(x, 3), round(y, 3)), layer=layer, texttype=dtype))
    path = tmp_path / f"{name}.gds"
    write_gds(lib, path)
    return extraction.check(path, LAYERS, spacing_um=_spacing(spec.kind))


def _assert_clean(report: extraction.Report) -> None:
    assert report.ok(), report.summary() + "\n" + "\n".join(report.details()[:8])


# ---------------------------------------------------------------- samples and named cases

@pytest.mark.parametrize("sample", [
    pytest.param(p, marks=pytest.mark.slow) if p.stem in ("sar_cdac", "lshape_cdac") else p
    for p in SAMPLES], ids=[p.stem for p in SAMPLES])
def test_every_sample_arranges_into_a_layout_without_shorts_opens_or_strays(runner, tmp_path,
                                                                           sample):
    out = tmp_path / "out"
    result = runner.invoke(cli, ["arrange", str(sample), "--out", str(out), "--quiet",
                                 "--time-limit", "20"])
    assert result.exit_code == 0, result.output
    spec = parse_spec(sample.read_text(), str(sample), sample.stem)
    report = extraction.check(out / "pattern.gds", LAYERS, spacing_um=_spacing(spec.kind))
    _assert_clean(report)
    # every net of the spec reaches the layout, each of its terminals labelled
    assert set(report.nets) == set(spec.net_names()) - (
        set() if "." in (out / "pattern.txt").read_text() else {spec.dummy_net})


DIFF_PAIR = """name = "inpair"
[devices]
MINP = 4
MINN = 4
[array]
rows = 2
dummies = "ends"
[unit]
width_um = 3.0
length_um = 0.5
[terminals]
MINP = { gate = "INP", drain = "OUTN", source = "TAIL" }
MINN = { gate = "INN", drain = "OUTP", source = "TAIL" }
"""

SPLIT_SOURCES = """name = "degen_mirror"
[devices]
MA = 3
MB = 3
[array]
rows = 1
dummies = "ends"
dummy_net = "VSS"
[terminals]
MA = { gate = "VG", source = "SA", drain = "DA" }
MB = { gate = "VG", source = "SB", drain = "DB" }
"""


@pytest.mark.parametrize("text, pattern", [
    (DIFF_PAIR, ". MINP> MINN< MINN> MINP< .\n. MINN> MINP< MINP> MINN< .\n"),
    (SPLIT_SOURCES, ". MA> MB< MA> MB< MA> MB< .\n"),
])
def test_differential_pair_and_separate_sources_route_cleanly(tmp_path, text, pattern):
    """Common practice: a differential pair has its own gates and drains and a shared
    tail; a degenerated mirror has separate sources. Every region carries its own net."""
    spec = parse_spec(text, "s.toml")
    report = _write_and_check(tmp_path, parse_pattern(pattern), spec)
    _assert_clean(report)
    names = set(report.nets)
    assert {"INP", "INN", "OUTN", "OUTP", "TAIL"} <= names or {"SA", "SB", "DA", "DB"} <= names


def test_separate_sources_never_share_diffusion(tmp_path):
    """Fingers of MA and MB side by side with their sources facing: SA and SB differ, so the
    diffusion must break between them (a join would short them)."""
    spec = parse_spec(SPLIT_SOURCES, "s.toml")
    report = _write_and_check(tmp_path, parse_pattern(". MA< MB> MA< MB> MA< MB> .\n"), spec)
    _assert_clean(report)


def test_a_row_of_dummies_beside_one_spine_is_joined_to_the_rail(tmp_path):
    """A capacitor array whose last row holds only dummies and whose dummies stand in one
    column only: the row's strap must reach every dummy of the row, not only run from
    spine to spine (found by docs/wiring_check.py, an open on the rail)."""
    spec = parse_spec('kind = "cap"\n[devices]\nD0 = 3\n[array]\ndummies = "none"\n'
                      'dummy_net = "N0"\n[unit]\nwidth_um = 1.6\nlength_um = 3.0\n'
                      '[terminals]\nD0 = { top = "N5", bottom = "N1" }\n', "gen.toml")
    ids = np.array([[DUMMY, 0, 0], [EMPTY, 0, EMPTY], [DUMMY, DUMMY, DUMMY]])
    pattern = Pattern(("D0",), ids, np.zeros(ids.shape, dtype=np.int8))
    _assert_clean(_write_and_check(tmp_path, pattern, spec, name="dummy_row"))


def test_a_probe_on_the_wrong_region_is_caught(tmp_path):
    """The probes have teeth: swap a finger's source and drain probes and the check fails."""
    spec = parse_spec(DIFF_PAIR, "s.toml")
    pattern = parse_pattern(". MINP> MINN< MINN> MINP< .\n. MINN> MINP< MINP> MINN< .\n")
    lib, block = layout_of(pattern.reordered(spec.devices), spec)
    layers = load_layers()
    top = lib.top_level()[0]
    px = block.spec.array.pitch_um[0]
    top.add(gdstk.Label("TAIL", (px + 0.27, 0.0), layer=layers["diffusion"][0],
                        texttype=layers["diffusion"][1]))          # MINP> drain side
    write_gds(lib, tmp_path / "w.gds")
    report = extraction.check(tmp_path / "w.gds", LAYERS)
    assert report.shorts


# ---------------------------------------------------------------- generated patterns

NET_POOL = ["N0", "N1", "N2", "N3", "N4", "N5"]


@st.composite
def _cases(draw, kind: str):
    n_dev = draw(st.integers(1, 8))
    counts = [draw(st.integers(1, 5)) for _ in range(n_dev)]
    total = sum(counts)
    rows = draw(st.integers(1, min(12, total)))
    cols = -(-total // rows) + draw(st.integers(0, 2))
    dummies = draw(st.sampled_from(["none", "ends", "ring"]))
    seq = [d for d, n in enumerate(counts) for _ in range(n)]
    spare = rows * cols - total
    seq += [draw(st.sampled_from([DUMMY, EMPTY])) for _ in range(spare)]
    order = draw(st.permutations(range(rows * cols)))
    ids = np.array([seq[i] for i in order], dtype=int).reshape(rows, cols)
    if dummies == "ends":
        ids = np.pad(ids, ((0, 0), (1, 1)), constant_values=DUMMY)
    elif dummies == "ring":
        ids = np.pad(ids, 1, constant_values=DUMMY)
    orient = np.zeros(ids.shape, dtype=np.int8)
    if kind == "mos":
        flips = draw(st.lists(st.booleans(), min_size=ids.size, max_size=ids.size))
        orient = np.where(ids >= 0, np.where(np.array(flips).reshape(ids.shape), -1, 1), 0
                          ).astype(np.int8)
    names = [f"D{i}" for i in range(n_dev)]
    if kind == "mos":
        w = draw(st.sampled_from([0.5, 1.0, 2.0, 4.5]))
        length = draw(st.sampled_from([0.15, 0.5, 1.0, 3.0]))
    elif kind == "cap":
        w = draw(st.sampled_from([1.6, 2.5, 5.0]))     # the notched plate's least size
        length = draw(st.sampled_from([1.3, 3.0, 6.0]))
    else:
        w = draw(st.sampled_from([0.4, 1.0, 2.0]))
        length = draw(st.sampled_from([2.0, 8.0, 20.0]))
    terms = {"mos": ("gate", "source", "drain"), "cap": ("top", "bottom"),
             "res": ("a", "b")}[kind]
    lines = []
    for name in names:
        nets = {t: draw(st.sampled_from(NET_POOL)) for t in terms}
        if kind == "res":
            nets["join"] = draw(st.sampled_from(["series", "parallel"]))
        lines.append(f"{name} = {{ " + ", ".join(f'{k} = "{v}"' for k, v in nets.items())
                     + " }")
    dummy_net = draw(st.sampled_from([*NET_POOL, "TIE"]))
    extra = draw(st.sampled_from([None, (0.3, 0.0), (0.0, 1.1), (0.75, 2.3)]))
    # a MOS block may have a guard ring, and then be PMOS in a well
    ring = kind == "mos" and draw(st.booleans())
    polarity = draw(st.sampled_from(["n", "p"])) if ring else "n"
    text = (f'kind = "{kind}"\n[devices]\n'
            + "".join(f"{n} = {c}\n" for n, c in zip(names, counts, strict=True))
            + f'[array]\ndummies = "{dummies}"\ndummy_net = "{dummy_net}"\n'
            + ("guard_ring = true\n" if ring else "")
            + f"[unit]\nwidth_um = {w}\nlength_um = {length}\n"
            + (f'polarity = "{polarity}"\n' if ring else "") + "[terminals]\n"
            + "\n".join(lines) + "\n")
    spec = parse_spec(text, "gen.toml")
    pattern = Pattern(tuple(names), ids, orient)
    if extra is not None:       # a larger, non-square pitch than the routing needs, given
        px, py = fitted(pattern, spec).array.pitch_um
        text = text.replace("[array]\n", f"[array]\npitch_um = [{px + extra[0]:.3f}, "
                                         f"{py + extra[1]:.3f}]\n")
        spec = parse_spec(text, "gen.toml")
    return spec, pattern


@pytest.mark.slow
@pytest.mark.parametrize("kind", ["mos", "cap", "res"])
def test_generated_patterns_route_without_shorts_opens_strays_or_spacing(tmp_path, kind):
    """300 generated patterns per kind: 1-8 devices, 1-12 rows, dummies none/ends/ring, both
    finger orientations, MOS blocks with and without a guard ring (NMOS, or PMOS in a
    well), random nets shared across terminals and devices (diode
    connections, common sources, resistor chains in series or parallel), empty slots,
    computed and larger non-square pitches. Each layout must extract with 0 shorts,
    0 opens, 0 stray labels and no spacing below the template's rules."""
    seen = []

    @settings(max_examples=CASES_PER_KIND, deadline=None, derandomize=True,
              suppress_health_check=list(HealthCheck))
    @given(_cases(kind))
    def run(case):
        spec, pattern = case
        report = _write_and_check(tmp_path, pattern, spec, name=kind)
        _assert_clean(report)
        seen.append(1)

    run()
    assert len(seen) >= CASES_PER_KIND


def test_rings_of_dummy_strips_route_clean(tmp_path):
    """Capacitor arrays sharing one top plate in a ring of dummy strips (``ring_depth_um``
    from the least the template allows to more than half a cell), random bottom-plate
    nets, rails, plate sizes and pitches: every layout extracts with no short, open, stray
    label or spacing below the rules, the probes on every unit's plates included."""
    rng = np.random.default_rng(11)
    routed = 0
    for case in range(40):
        n_dev = int(rng.integers(1, 6))
        counts = [int(c) for c in rng.integers(1, 6, n_dev)]
        total = sum(counts)
        rows = int(rng.integers(1, min(6, total) + 1))
        cols = -(-total // rows) + int(rng.integers(0, 2))
        seq = [d for d, n in enumerate(counts) for _ in range(n)]
        seq += [int(rng.choice([DUMMY, EMPTY])) for _ in range(rows * cols - total)]
        ids = np.pad(np.array(seq)[rng.permutation(rows * cols)].reshape(rows, cols), 1,
                     constant_values=DUMMY)
        if case % 4 == 0:           # a row of dummies (or nothing) across the middle
            ids = np.insert(ids, 1 + rows // 2, DUMMY if case % 8 else EMPTY, axis=0)
            ids[1 + rows // 2, [0, -1]] = DUMMY
        names = [f"D{i}" for i in range(n_dev)]
        bottoms = [str(rng.choice(["N0", "N1", "N2", "N3"])) for _ in names]
        text = ('kind = "cap"\n[devices]\n'
                + "".join(f"{n} = {c}\n" for n, c in zip(names, counts, strict=True))
                + f'[array]\ndummies = "ring"\ndummy_net = "{rng.choice(["N4", "TIE"])}"\n'
                + f"ring_depth_um = {rng.choice([0.95, 1.0, 1.7, 2.5])}\n"
                + f"[unit]\nwidth_um = {rng.choice([2.5, 5.0])}\n"
                + f"length_um = {rng.choice([3.0, 6.0])}\n[terminals]\n"
                + "".join(f'{n} = {{ top = "TOP", bottom = "{b}" }}\n'
                          for n, b in zip(names, bottoms, strict=True)))
        spec = parse_spec(text, f"strips{case}.toml")
        pattern = Pattern(tuple(names), ids, np.where(ids >= 0, 1, 0).astype(np.int8))
        _assert_clean(_write_and_check(tmp_path, pattern, spec, name=f"strips{case}",
                                       dummy_probes=False))
        _cuts_on_metal_inside_the_outline(tmp_path / f"strips{case}.gds")
        routed += 1
    assert routed == 40


def test_a_given_pattern_without_a_ring_all_round_draws_whole_dummies_and_says_so(tmp_path):
    """The spec asks for strips but the pattern drawn (a hand or edited one) has a unit
    where the ring should be: its dummies are drawn as whole cells, the layout still
    extracts clean, and the command says why in a note."""
    from click.testing import CliRunner

    from placer.cli import cli

    counts = {"CT": 1, "C0": 1, "C1": 2, "C2": 4, "C3": 8, "C4": 16, "C5": 32}
    flat = [d for d, n in counts.items() for _ in range(n)]
    flat.remove("C4")
    flat.append(".")                           # the unit on the ring leaves a dummy inside
    grid = [["."] * 10 for _ in range(10)]
    for k, d in enumerate(flat):
        grid[1 + k // 8][1 + k % 8] = d
    grid[0][3] = "C4"                          # a unit on the ring
    (tmp_path / "p.txt").write_text("\n".join(" ".join(row) for row in grid) + "\n")
    res = CliRunner().invoke(cli, ["draw", str(tmp_path / "p.txt"), "--spec",
                                   "samples/sar_cdac.toml", "--out", str(tmp_path / "o")])
    assert res.exit_code == 0, res.output
    assert "Note: ring_depth_um: this arrangement has no ring of dummies all round" \
        in res.output
    from placer.layout.cells import load_rules, spacing_rules

    gds = next((tmp_path / "o").glob("*.gds"))
    report = extraction.check(gds, LAYERS,
                              spacing_um=spacing_rules(load_rules("cap")))
    assert report.ok(), report.summary()


@pytest.mark.parametrize("depth", [None, 1.0])
def test_a_ring_with_empty_corners_and_gaps_joins_its_rail(tmp_path, depth):
    """A ring of dummies whose corners and some slots are empty (a row's strap then ends
    on the left spine with no dummy beneath): the spines reach every strap and the metal1
    spine takes it by a via of its own, so the rail is one piece (found by a random
    search of ring shapes, whole cells and strips alike)."""
    ids = np.array([[-2, -1, -2, -1, -1], [-1, 1, 1, 1, -2], [-1, 1, 1, 0, -1],
                    [-1, 2, 1, 2, -1], [-1, 2, 0, 2, -1], [-1, 0, -2, 2, -1],
                    [-2, -1, -1, -1, -1]])
    counts = [int((ids == k).sum()) for k in range(3)]
    text = ('kind = "cap"\n[devices]\n' + "".join(f"C{k} = {n}\n" for k, n in enumerate(counts))
            + '[array]\ndummies = "ring"\n'
            + (f"ring_depth_um = {depth}\n" if depth else "")
            + "[unit]\nwidth_um = 6.0\nlength_um = 6.0\n")
    spec = parse_spec(text, "gaps.toml")
    pattern = Pattern(spec.devices, ids, np.where(ids >= 0, 1, 0).astype(np.int8))
    _assert_clean(_write_and_check(tmp_path, pattern, spec, name="gaps",
                                   dummy_probes=depth is None))
    _cuts_on_metal_inside_the_outline(tmp_path / "gaps.gds")


@pytest.mark.parametrize("w, length, centred, strap", [
    (2.1, 5.0, False, True), (2.25, 5.0, True, True),     # about 2.2 um wide
    (5.0, 1.5, False, False), (5.0, 1.7, True, False),    # about 1.6 um long
    (5.0, 1.9, True, False), (5.0, 2.1, True, True),      # about 2 um for the strap
])
def test_the_cap_cells_thresholds_the_readme_quotes(w, length, centred, strap):
    """The README's limits of the generic capacitor cell: centred notches from about
    2.2 um wide and 1.6 um long, a strap from about 2 um long; and the least strip depth
    of a ring of strips, 0.95 um (all from the template's rules)."""
    from placer.layout.cells import load_rules, unit_cell
    from placer.layout.ring import least_depth

    rules = load_rules("cap")
    cell = unit_cell("cap", w, length, None, rules)
    down = next(t for t in cell.terminals if t.name == "bottom").exits[0]
    assert (abs(down.x) < w / 4) == centred         # the via in the middle, not a corner
    assert (cell.strap_y is not None) == strap
    text = Path("README.md").read_text(encoding="utf-8")
    assert f"({least_depth(rules):g} um in the generic template)" in text
    assert "narrower than about 2.2 um or shorter than about 1.6 um" in text
    assert "shorter than about 2 um has no" in text


def test_a_ring_of_strips_with_a_cell_of_ones_own_is_refused():
    """The strips are cut from placer's own capacitor cell; a user's cell (``user``, what
    --unit-gds sets) keeps its own ring, and ring_depth_um is refused, not ignored."""
    from placer.errors import RouteError
    from placer.jobs.load import load_spec
    from placer.layout.router import route

    spec = load_spec(Path("samples/sar_cdac.toml"))
    ids = np.full((10, 10), DUMMY)
    ids[1:9, 1:9] = np.repeat(np.arange(7), spec.counts).reshape(8, 8)
    pattern = Pattern(spec.devices, ids, np.where(ids >= 0, 1, 0).astype(np.int8))
    with pytest.raises(RouteError, match="with a unit cell of your own"):
        route(pattern, spec, user=True)


def test_the_strip_sample_grades_and_repairs_from_its_own_gdsii(tmp_path):
    """A ring's strip lies off its slot's centre: read back, every strip still marks its
    own slot (a dummy may sit anywhere nearer its slot than the next), so placer grades
    and repairs the GDSII it wrote for samples/sar_cdac.toml as the pattern it wrote."""
    from click.testing import CliRunner

    from placer.cli import cli
    from placer.io.pattern import read_pattern

    spec = "samples/sar_cdac.toml"
    run = CliRunner()
    assert run.invoke(cli, ["arrange", spec, "--out", str(tmp_path / "a"), "--quiet",
                            "--time-limit", "1"]).exit_code == 0
    graded = run.invoke(cli, ["grade", str(tmp_path / "a" / "pattern.gds"), "--spec", spec,
                              "--json"])
    assert graded.exit_code == 0, graded.output
    back = run.invoke(cli, ["repair", str(tmp_path / "a" / "pattern.gds"), "--spec", spec,
                            "--out", str(tmp_path / "r"), "--max-swaps", "1"])
    assert back.exit_code == 0, back.output
    wrote = read_pattern(tmp_path / "a" / "pattern.txt")
    again = read_pattern(tmp_path / "r" / "repaired.txt")
    # a repair swaps units, never dummies: the ring read back is the ring written
    assert again.ids.shape == wrote.ids.shape
    assert ((again.ids == -1) == (wrote.ids == -1)).all()


def _cuts_on_metal_inside_the_outline(path: Path) -> None:
    """Two facts of the GDSII alone (the layer map's roles): every via1 cut lies on metal1
    and on metal2 (a cut on nothing joins nothing), and every shape lies inside the
    block's outline."""
    from shapely.geometry import box
    from shapely.ops import unary_union

    layers = load_layers()
    flat = gdstk.read_gds(str(path)).top_level()[0].copy("flat").flatten()

    def rects(role: str) -> list:
        return [box(*p.bounding_box()[0], *p.bounding_box()[1]) for p in flat.polygons
                if (p.layer, p.datatype) == layers[role]]

    m1 = unary_union(rects("metal1")).buffer(1e-6)
    m2 = unary_union(rects("metal2")).buffer(1e-6)
    loose = [c.bounds for c in rects("via1") if not (m1.contains(c) and m2.contains(c))]
    assert not loose, f"{path.name}: via1 cuts off metal: {loose[:3]}"
    (outline,) = rects("outline")
    edge = outline.buffer(1e-6)
    outside = [p.bounding_box() for p in flat.polygons
               if (p.layer, p.datatype) != layers["outline"]
               and not edge.contains(box(*p.bounding_box()[0], *p.bounding_box()[1]))]
    assert not outside, f"{path.name}: shapes outside the outline: {outside[:3]}"


@pytest.mark.parametrize("change, message", [
    ("length_um = 1.3", "its plates are too short for a top-plate strap"),
    ("ring_depth_um = 0.5", "ring_depth_um = 0.5 um is too small"),
    ("ring_depth_um = 5.4", "is a whole cell deep"),
    ('dummies = "none"', 'it needs kind = "cap" and dummies = "ring"'),
])
def test_a_ring_of_strips_that_cannot_be_drawn_is_refused_in_one_line(tmp_path, change,
                                                                     message):
    from click.testing import CliRunner

    from placer.cli import cli

    text = Path("samples/sar_cdac.toml").read_text()
    key = change.split(" = ")[0]
    text = "\n".join(change if ln.split(" = ")[0].strip() == key else ln
                     for ln in text.splitlines()) + "\n"
    path = tmp_path / "s.toml"
    path.write_text(text)
    res = CliRunner().invoke(cli, ["arrange", str(path), "--out", str(tmp_path / "o"),
                                   "--time-limit", "1"])
    assert res.exit_code == 1, res.output
    assert message in res.output and "Traceback" not in res.output
    assert len(res.output.strip().splitlines()) == 1
    assert not (tmp_path / "o").exists()


# ---------------------------------------------------------------- the user's own unit cell

def _user_cell_gds(path: Path, *, labels: bool = True, outline: bool = True,
                   strap: float = 0.2, gate_pad: str = "rect",
                   gate_label: tuple[float, float] = (0.0, -1.8),
                   extra_metal1: tuple[float, float, float, float] | None = None) -> None:
    """A MOS unit cell of the test's own making (not placer's): gate over diffusion, contact
    columns with metal1 straps (``strap`` wide on each side of their centre), a gate pad
    below (a rectangle, or an L whose bounding box's centre is off its metal); terminals
    labelled by name on metal1; an outline rectangle sets its bounding box, so abutted
    cells keep their spacing (without it the diffusion sets the box)."""
    layers = load_layers()

    def rect(cell, role, x0, y0, x1, y1):
        layer, dtype = layers[role]
        cell.add(gdstk.rectangle((x0, y0), (x1, y1), layer=layer, datatype=dtype))

    lib = gdstk.Library("userlib", unit=1e-6, precision=1e-9)
    cell = lib.new_cell("MYFINGER")
    if outline:
        rect(cell, "outline", -1.3, -2.4, 1.3, 1.6)
    rect(cell, "diffusion", -1.0, -1.0, 1.0, 1.0)
    rect(cell, "gate", -0.25, -1.75, 0.25, 1.3)
    rect(cell, "gate", -0.3, -2.1, 0.3, -1.5)
    rect(cell, "contact", -0.1, -1.9, 0.1, -1.7)
    if gate_pad == "rect":
        rect(cell, "metal1", -0.2, -2.0, 0.2, -1.6)
    else:                     # an L: a foot under the gate, an arm up at the right; the
        m1 = layers["metal1"]  # centre of its bounding box, (0.3, -1.5), is off its metal
        cell.add(gdstk.Polygon([(-0.2, -2.0), (0.8, -2.0), (0.8, -1.0), (0.4, -1.0),
                                (0.4, -1.6), (-0.2, -1.6)], layer=m1[0], datatype=m1[1]))
    if extra_metal1 is not None:
        rect(cell, "metal1", *extra_metal1)
    for x in (-0.75, 0.75):
        for y in (-0.6, 0.0, 0.6):
            rect(cell, "contact", x - 0.1, y - 0.1, x + 0.1, y + 0.1)
        rect(cell, "metal1", x - strap, -0.75, x + strap, 0.75)
    if labels:
        m1 = layers["metal1"]
        for text, x, y in (("gate", *gate_label), ("source", -0.75, -0.5),
                           ("drain", 0.75, -0.5)):
            cell.add(gdstk.Label(text, (x, y), layer=m1[0], texttype=m1[1]))
    lib.write_gds(str(path))


def test_user_unit_cell_is_placed_and_routed_without_shorts_or_opens(runner, tmp_path):
    """A unit cell built here with gdstk, placed with --unit-gds: its terminals are found
    from their labels and routed; the extraction, with probes on the cell's own source and
    drain regions, finds 0 shorts, 0 opens and 0 stray labels."""
    _user_cell_gds(tmp_path / "cell.gds")
    spec = tmp_path / "s.toml"
    spec.write_text(DIFF_PAIR)
    pat = tmp_path / "p.txt"
    pat.write_text(". MINP> MINN< MINN> MINP< .\n. MINN> MINP< MINP> MINN< .\n")
    out = tmp_path / "o"
    result = runner.invoke(cli, ["draw", str(pat), "--spec", str(spec), "--out", str(out),
                                 "--unit-gds", str(tmp_path / "cell.gds")])
    assert result.exit_code == 0, result.output
    lib = gdstk.read_gds(str(out / "p.gds"))
    assert "MYFINGER_UNIT" in {c.name for c in lib.cells}
    top = lib.top_level()[0]
    px = top.references[1].origin[0] - top.references[0].origin[0]
    assert px == pytest.approx(2.6)                      # the cell's bounding box
    layers = load_layers()
    d = layers["diffusion"]
    p = parse_pattern(pat.read_text())
    nets = {"MINP": ("TAIL", "OUTN"), "MINN": ("TAIL", "OUTP")}
    py = -top.references[p.shape[1]].origin[1]
    for r in range(p.shape[0]):
        for c in range(p.shape[1]):
            i = int(p.ids[r, c])
            if i < 0:
                continue
            s = -1 if p.orient[r, c] < 0 else 1
            src, drn = nets[p.devices[i]]
            for net, x in ((src, c * px - s * 0.5), (drn, c * px + s * 0.5)):
                top.add(gdstk.Label(net, (x, -r * py), layer=d[0], texttype=d[1]))
    lib.write_gds(str(tmp_path / "probed.gds"))
    report = extraction.check(tmp_path / "probed.gds", LAYERS,
                              spacing_um={"metal1": 0.25, "metal2": 0.3})
    _assert_clean(report)


def test_user_unit_cell_without_terminal_labels_is_refused_in_one_line(runner, tmp_path):
    _user_cell_gds(tmp_path / "cell.gds", labels=False)
    spec = tmp_path / "s.toml"
    spec.write_text(DIFF_PAIR)
    pat = tmp_path / "p.txt"
    pat.write_text("MINP> MINN< MINN> MINP<\nMINN> MINP< MINP> MINN<\n")
    result = runner.invoke(cli, ["draw", str(pat), "--spec", str(spec), "--out",
                                 str(tmp_path / "o"), "--unit-gds", str(tmp_path / "cell.gds")])
    assert result.exit_code == 1 and "Traceback" not in result.output
    assert "no label for terminal(s) gate, source, drain" in result.output
    assert not (tmp_path / "o").exists()


def test_outputs_get_the_users_usual_permissions(runner, tmp_path):
    """POSIX umask: new files get 0666 less the umask (0644 under the usual 022)."""
    import os

    old = os.umask(0o022)
    try:
        spec = tmp_path / "s.toml"
        spec.write_text(DIFF_PAIR)
        out = tmp_path / "o"
        result = runner.invoke(cli, ["arrange", str(spec), "--out", str(out), "--quiet",
                                     "--time-limit", "5"])
        assert result.exit_code == 0, result.output
    finally:
        os.umask(old)
    modes = {p.name: p.stat().st_mode & 0o777 for p in out.iterdir()}
    assert modes and all(m == 0o644 for m in modes.values()), modes


def _draw_with_cell(runner, tmp_path, **cell):
    _user_cell_gds(tmp_path / "cell.gds", **cell)
    spec = tmp_path / "s.toml"
    spec.write_text(DIFF_PAIR)
    pat = tmp_path / "p.txt"
    pat.write_text(". MINP> MINN< MINN> MINP< .\n. MINN> MINP< MINP> MINN< .\n")
    return runner.invoke(cli, ["draw", str(pat), "--spec", str(spec), "--out",
                               str(tmp_path / "o"), "--unit-gds", str(tmp_path / "cell.gds")])


@pytest.mark.parametrize("cell,words", [
    # metal1 at the cell's right side: the next unit's metal1 would touch it (a short
    # through every unit of the row, which placer drew and exited 0 on)
    ({"extra_metal1": (0.95, 1.2, 1.3, 1.5)}, ["metal1", "right side", "touch"]),
    # no outline: the diffusion sets the box, so abutting units join their diffusion
    ({"outline": False}, ["diffusion", "left side", "touch"]),
    # straps 0.3 um wide: a 0.25 um via1 with 0.05 um of enclosure needs 0.35 um
    ({"strap": 0.15}, ["metal1 pad of terminal 'source'", "does not enclose the via1"]),
    # inside the L's bounding box, off its metal
    ({"gate_pad": "L", "gate_label": (0.0, -1.3)}, ["label 'gate'", "not on a metal1"]),
])
def test_a_user_cell_that_would_draw_wrong_is_refused_in_one_line(runner, tmp_path, cell,
                                                                  words):
    result = _draw_with_cell(runner, tmp_path, **cell)
    assert result.exit_code == 1 and "Traceback" not in result.output, result.output
    for w in words:
        assert w in result.output, (w, result.output)
    assert not (tmp_path / "o").exists()


def test_an_l_shaped_pad_gets_its_net_label_and_via_on_its_metal(runner, tmp_path):
    """The gate label sits in the L's foot (its bounding box's centre is off the metal);
    every net label placer writes on metal1 lies on metal1 of the layout (shapely on the
    flattened GDSII, apart from placer's own data), every via1 lies within metal1, and the
    extraction finds no short, open or stray label."""
    from shapely.geometry import Point, Polygon, box
    from shapely.ops import unary_union

    result = _draw_with_cell(runner, tmp_path, gate_pad="L", gate_label=(0.0, -1.8))
    assert result.exit_code == 0, result.output
    layers = load_layers()
    lib = gdstk.read_gds(str(tmp_path / "o" / "p.gds"))
    top = lib.top_level()[0]
    flat = top.copy("flat").flatten()
    m1 = unary_union([Polygon(p.points) for p in flat.polygons
                      if (p.layer, p.datatype) == tuple(layers["metal1"])])
    labels = [lb for lb in top.labels if (lb.layer, lb.texttype) == tuple(layers["metal1"])]
    assert labels
    for lb in labels:
        assert m1.buffer(1e-6).contains(Point(*lb.origin)), (lb.text, lb.origin)
    for p in flat.polygons:
        if (p.layer, p.datatype) == tuple(layers["via1"]):
            (x0, y0), (x1, y1) = p.bounding_box()
            assert m1.buffer(1e-6).contains(box(x0 - 0.05, y0 - 0.05, x1 + 0.05, y1 + 0.05))
    report = extraction.check(tmp_path / "o" / "p.gds", LAYERS,
                              spacing_um={"metal1": 0.25, "metal2": 0.3})
    assert not report.shorts and not report.stray_labels, report
