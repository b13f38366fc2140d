"""The guard ring (body tie) and a PMOS block's well, checked on the written GDSII by the
independent connectivity checker (tests/extraction.py, written from the layout contract
alone): every tie on its net, no short, the well tied through the ring's tap implant.
The well-proximity figures the report gives for the drawn well are recomputed here from
the GDSII's own shapes, with scipy quadrature of BSIM4's distribution function."""

from __future__ import annotations

import json
from pathlib import Path

import gdstk
import numpy as np
import pytest

from tests import extraction
from tests.helpers import ROOT, refused, run_placer, spec_file
from tests.lde_extract import lod_by_device

LAYERS = ROOT / "templates" / "layers.toml"

PLOAD = """
name = "pload"
kind = "mos"
[devices]
MLA = 4
MLB = 4
[array]
rows = 2
columns = 4
dummies = "ends"
guard_ring = true
[unit]
width_um = 2.0
length_um = 1.0
polarity = "p"
[terminals]
MLA = { gate = "PG", source = "VDD", drain = "OUTA", bulk = "VDD" }
MLB = { gate = "PG", source = "VDD", drain = "OUTB", bulk = "VDD" }
[lde]
kvth0we_mv = 30.0
"""


def _arrange(tmp: Path, text: str) -> Path:
    spec = spec_file(tmp, text)
    res = run_placer(["arrange", str(spec), "--out", "o", "--time-limit", "10"], cwd=tmp)
    assert res.returncode == 0, res.stderr
    return tmp / "o"


def _polygons(gds: Path, layer: int) -> list[np.ndarray]:
    top = gdstk.read_gds(str(gds)).top_level()[0].copy("flat").flatten()
    return [p.points for p in top.polygons if p.layer == layer]


@pytest.mark.parametrize("case", ["pmos_well", "nmos_own_body",
                                  pytest.param("bias_mirror", marks=pytest.mark.slow)])
def test_guard_ring_extracts_clean_with_every_tie_on_its_net(tmp_path, case):
    """The ring and (PMOS) the well join the body net and nothing else: VDD by a via onto
    its metal2 trunk (PMOS load), VSUB by its own metal1 rail (an NMOS block whose bulk
    and dummies are on VSUB), VSS of samples/bias_mirror.toml; the well carries a label of
    its net, so a well the ring did not tie would be an open."""
    if case == "pmos_well":
        out = _arrange(tmp_path, PLOAD)
    elif case == "nmos_own_body":
        out = _arrange(tmp_path, PLOAD.replace('bulk = "VDD"', 'bulk = "VSUB"')
                       .replace('polarity = "p"', 'polarity = "n"'))
    else:
        text = (ROOT / "samples" / "bias_mirror.toml").read_text()
        out = _arrange(tmp_path, text.replace('dummies = "ends"',
                                              'dummies = "ends"\nguard_ring = true'))
    gds = out / "pattern.gds"
    found = extraction.check(gds, LAYERS)
    assert not found.shorts and not found.opens and not found.stray_labels, found
    wells = _polygons(gds, 15)
    assert len(wells) == (1 if case == "pmos_well" else 0)
    assert len(_polygons(gds, 16)) == 4                    # the tap implant, four sides
    if case == "pmos_well":
        # the well holds every finger's channel (the PMOS devices sit in it)
        (w,) = wells
        rep = lod_by_device(gds, LAYERS)
        for dev in rep.devices.values():
            for f in dev.fingers:
                assert w[:, 0].min() < f.x < w[:, 0].max() and w[:, 1].min() < f.y < w[:, 1].max()


def test_a_well_without_its_tie_is_an_open(tmp_path):
    """Mutation of the written layout: the same PMOS block with its tap implant removed
    leaves the well on a node of its own, which the checker reports as an open of VDD
    (so the clean result above rests on the tie, not on the label alone)."""
    out = _arrange(tmp_path, PLOAD)
    lib = gdstk.read_gds(str(out / "pattern.gds"))
    for cell in lib.cells:
        for p in [p for p in cell.polygons if p.layer == 16]:
            cell.remove(p)
    cut = tmp_path / "untied.gds"
    lib.write_gds(str(cut))
    found = extraction.check(cut, LAYERS)
    assert "VDD" in found.opens


def test_well_proximity_uses_the_drawn_well(tmp_path):
    """The report's mean SCA per device equals the BSIM4 integral (mean of SCref^2/x^2
    over the channel's distances x from each of the four well edges: across W for the
    edges above and below, across L for the left and right ones; SCref = 1 um),
    computed here by scipy quadrature from the well polygon and the channels the
    independent SA/SB checker finds in the GDSII."""
    from scipy.integrate import quad

    out = _arrange(tmp_path, PLOAD)
    gds = out / "pattern.gds"
    (w,) = _polygons(gds, 15)
    x0, x1, y0, y1 = w[:, 0].min(), w[:, 0].max(), w[:, 1].min(), w[:, 1].max()
    report = json.loads((out / "report.json").read_text())
    sca = {d["device"]: d["sca"] for d in report["grade"]["lde"]["devices"]}
    for name, dev in lod_by_device(gds, LAYERS).devices.items():
        vals = []
        for f in dev.fingers:
            top, bottom = y1 - (f.y + f.w_um / 2), (f.y - f.w_um / 2) - y0
            left, right = (f.x - f.l_um / 2) - x0, x1 - (f.x + f.l_um / 2)
            total = 0.0
            for sc, span in ((top, f.w_um), (bottom, f.w_um), (left, f.l_um),
                             (right, f.l_um)):
                total += quad(lambda x: 1.0 / x ** 2, sc, sc + span)[0] / span
            vals.append(total)
        assert sca[name] == pytest.approx(float(np.mean(vals)), rel=1e-6)
        assert sca[name] > 0


@pytest.mark.slow
def test_old_layer_map_still_loads_and_a_ring_needs_its_roles(tmp_path):
    """A layer map written before the well and tap roles (its [connect] without them) is
    still accepted; a block with a guard ring drawn with it is refused in one line naming
    the missing role; a template without the ring's rules likewise."""
    text = LAYERS.read_text()
    old = (text.replace('well      = [15, 0]', '#').replace('tap       = [16, 0]', '#')
           .replace(', tap = ["diffusion", "well"]', '').replace(', "well"]', ']'))
    (tmp_path / "old.toml").write_text(old)
    spec = spec_file(tmp_path, PLOAD.replace("guard_ring = true", "guard_ring = false"))
    res = run_placer(["arrange", str(spec), "--out", "a", "--layers", "old.toml"],
                     cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    spec = spec_file(tmp_path, PLOAD, name="ring.toml")
    refused(run_placer(["arrange", str(spec), "--out", "b", "--layers", "old.toml"],
                       cwd=tmp_path), "old.toml", "no", "role")
    assert not (tmp_path / "b").exists()
    tmpl = (ROOT / "templates" / "mos_finger.toml").read_text()
    tmpl = "\n".join(ln for ln in tmpl.splitlines()
                     if not ln.startswith(("guard_space", "tap_enclosure", "well_enclosure")))
    (tmp_path / "t.toml").write_text(tmpl)
    refused(run_placer(["arrange", str(spec), "--out", "c", "--template", "t.toml"],
                       cwd=tmp_path), "guard ring needs the rules", "guard_space")


def test_guard_ring_and_polarity_refused_for_other_kinds(tmp_path):
    """guard_ring and polarity describe MOS blocks: a capacitor array's spec that gives
    them is refused in one line."""
    cap = 'kind = "cap"\n[devices]\nC0 = 1\nC1 = 1\n'
    (tmp_path / "x.txt").write_text("C0 C1\n")
    for extra, word in (("[array]\nguard_ring = true\n", "guard_ring"),
                        ('[unit]\npolarity = "p"\n', "polarity")):
        spec = spec_file(tmp_path, cap + extra)
        refused(run_placer(["grade", "x.txt", "--spec", str(spec)], cwd=tmp_path), word,
                "MOS")


def test_pmos_block_netlist_uses_a_pmos_unit(tmp_path):
    """The illustrative netlist of a PMOS block models its unit as a PMOS (negative
    threshold), not an NMOS."""
    out = _arrange(tmp_path, PLOAD)
    text = (out / "pattern.sp").read_text()
    model = next(ln for ln in text.splitlines() if ln.startswith(".model placer_unit"))
    assert " pmos " in model and "vto=-" in model


def test_a_ring_on_a_net_no_terminal_names_says_so_and_differing_bulks_are_refused(tmp_path):
    """Loads that give no bulk and whose sources differ (VDDA, VDDB) leave the ring no net
    of theirs: it falls back to VDD (PMOS), the report says no terminal names it, and the
    layout still extracts clean. Devices whose bulks differ are refused at once, before
    any search, in one line."""
    text = (PLOAD.replace(', bulk = "VDD"', "")
            .replace('source = "VDD", drain = "OUTA"', 'source = "VDDA", drain = "OUTA"')
            .replace('source = "VDD", drain = "OUTB"', 'source = "VDDB", drain = "OUTB"')
            .replace("guard_ring = true", 'guard_ring = true\ndummy_net = "VDDA"'))
    out_text = run_placer(["arrange", str(spec_file(tmp_path, text)), "--out", "o",
                           "--time-limit", "10"], cwd=tmp_path)
    assert out_text.returncode == 0, out_text.stderr
    assert "guard ring: on VDD, a net no terminal names" in out_text.stdout
    found = extraction.check(tmp_path / "o" / "pattern.gds", LAYERS)
    assert not found.shorts and not found.opens and not found.stray_labels
    text = PLOAD.replace('drain = "OUTB", bulk = "VDD"', 'drain = "OUTB", bulk = "VDDB"')
    refused(run_placer(["arrange", str(spec_file(tmp_path, text, name="b.toml")), "--out",
                        "b"], cwd=tmp_path), "guard_ring", "bulk")


@pytest.fixture(scope="module")
def ota5(tmp_path_factory):
    """samples/ota5.toml arranged once for the tests below: its output folder."""
    tmp = tmp_path_factory.mktemp("ota5")
    res = run_placer(["arrange", str(ROOT / "samples" / "ota5.toml"), "--out", "o",
                      "--time-limit", "20"], cwd=tmp)
    assert res.returncode == 0, res.stderr
    return tmp / "o"


def test_five_transistor_amplifier_sample(ota5):
    """samples/ota5.toml (NMOS pair, PMOS mirror load in a well of its own, NMOS tail, one
    block): it arranges, draws the load's well with its tie strip and the guard ring, and
    the independent checker finds it clean with every tie on its net (the well labelled
    VDD, the ring VSS); every finger's stress term is equal (SA/SB checker), and the load
    mirror's layout-dependent term is 0 (the well symmetric about the array)."""
    gds = ota5 / "pattern.gds"
    found = extraction.check(gds, LAYERS)
    assert not found.shorts and not found.opens and not found.stray_labels, found
    wells = _polygons(gds, 15)
    assert len(wells) == 1                                  # the load's row
    lib = gdstk.read_gds(str(gds)).top_level()[0].copy("flat").flatten()
    texts = {(lb.text, lb.layer) for lb in lib.labels}
    assert ("VDD", 15) in texts and ("VSS", 4) in texts     # well on VDD, ring on VSS
    rep = lod_by_device(gds, LAYERS)
    (w,) = wells
    for name, dev in rep.devices.items():                   # p fingers in, n fingers out
        inside = [w[:, 1].min() < f.y < w[:, 1].max() for f in dev.fingers]
        assert all(inside) if name in ("MLA", "MLB") else not any(inside), name
    terms = [d.mean_term for d in rep.devices.values()]
    assert max(terms) - min(terms) <= 1e-9 * max(terms)
    report = json.loads((ota5 / "report.json").read_text())
    assert report["budget"]["lines"][0]["lde_pct"] == pytest.approx(0.0, abs=1e-9)


@pytest.mark.slow
def test_five_transistor_amplifier_netlist_simulates_at_its_bias(tmp_path, ota5):
    """The sample's netlist in ngspice (an independent simulator; Debian's, as CI
    installs): VDD 1.8 V, inputs at 0.9 V, the tail's gate at VTO + V_ov = 0.7 V. Each
    finger is the square-law unit sized for 10 uA at V_ov = 0.2 V, so the 8-finger tail
    carries 80 uA (lambda 0.1/V at V_DS ~ 0.2 V: within a few %), split evenly, and the
    diode-connected 4-finger PMOS load sits at V_SG = 0.5 + 0.2 V: OUTN = 1.1 V (hand
    calculation from the square law)."""
    import os
    import re
    import shutil
    import subprocess

    exe = shutil.which("ngspice")
    if exe is None:
        if os.environ.get("PLACER_REQUIRE_NGSPICE"):
            pytest.fail("ngspice is required here (apt-get install ngspice)")
        pytest.skip("no ngspice here (apt-get install ngspice); CI requires it")
    text = (ota5 / "pattern.sp").read_text()
    (tmp_path / "o").mkdir()
    (tmp_path / "o" / "pattern.sp").write_text(text)
    ports = re.search(r"^\.subckt OTA5_ARRAY (.*)$", text, re.M).group(1).split()
    bench = "\n".join([
        "* ota5 at its bias", ".include o/pattern.sp", f"XA {' '.join(ports)} OTA5_ARRAY",
        "VDD VDD 0 DC 1.8", "VSS VSS 0 DC 0", "VP INP 0 DC 0.9", "VN INN 0 DC 0.9",
        "VB VBN 0 DC 0.7", ".control", "op", "print v(OUTN)", "print i(VDD)", ".endc",
        ".end", ""])
    (tmp_path / "bench.sp").write_text(bench)
    run = subprocess.run([exe, "-b", "bench.sp"], cwd=tmp_path, capture_output=True,
                         text=True, timeout=120)
    outn = float(re.search(r"v\(outn\)\s*=\s*([-+0-9.eE]+)", run.stdout).group(1))
    supply = -float(re.search(r"i\(vdd\)\s*=\s*([-+0-9.eE]+)", run.stdout).group(1))
    assert outn == pytest.approx(1.1, abs=0.03), run.stdout
    assert supply == pytest.approx(80e-6, rel=0.05), run.stdout


@pytest.mark.parametrize("edit, words", [
    (lambda t: t.replace("rows = [0]\npolarity", "polarity"), ("MLA", "group with rows")),
    (lambda t: t.replace("devices = [\"MINP\", \"MINN\"]\nrows = [1]",
                         "devices = [\"MINP\", \"MINN\"]\nrows = [0, 1]"),
     ("row 0", "other polarity")),
    (lambda t: t.replace("guard_ring = true", "guard_ring = false"), ("guard_ring = true",)),
    (lambda t: t.replace('polarity = "p"', 'polarity = "q"'), ("polarity", '"n" or "p"')),
    pytest.param(None, ("well", "row pitch of at least"), marks=pytest.mark.slow),
])
def test_a_mixed_block_that_cannot_be_drawn_is_refused_in_one_line(tmp_path, edit, words):
    """A block of n and p devices: each in a group with rows of its polarity, no row
    shared, a guard ring given, a row pitch whose channel leaves the well its enclosure
    and its spacing to the next row's n diffusion (a template asking 3 um of well_space);
    otherwise one line, nothing written."""
    text = (ROOT / "samples" / "ota5.toml").read_text()
    extra = []
    if edit is None:
        tmpl = (ROOT / "templates" / "mos_finger.toml").read_text()
        (tmp_path / "wide.toml").write_text(tmpl.replace("well_space = 1.0", "well_space = 3.0"))
        extra = ["--template", "wide.toml"]
    else:
        text = edit(text)
    spec = spec_file(tmp_path, text)
    res = run_placer(["arrange", str(spec), "--out", "o", "--time-limit", "5", *extra],
                     cwd=tmp_path)
    refused(res, *words)
    assert not (tmp_path / "o").exists()


def test_a_ring_on_its_own_net(tmp_path):
    """[array] guard_net puts the ring on a net of its own (its own pin, the ring's
    label): the checker finds it a node apart from every routed net, with no open; the
    key without a ring is refused in one line."""
    text = PLOAD.replace('polarity = "p"', 'polarity = "n"').replace(
        "guard_ring = true", 'guard_ring = true\nguard_net = "GRD"')
    out = _arrange(tmp_path, text)
    gds = out / "pattern.gds"
    found = extraction.check(gds, LAYERS)
    assert not found.shorts and not found.opens and not found.stray_labels
    top = gdstk.read_gds(str(gds)).top_level()[0]
    assert any(lb.text == "GRD" and lb.layer == 4 for lb in top.labels)
    spec = spec_file(tmp_path, text.replace("guard_ring = true", "guard_ring = false"),
                     name="b.toml")
    refused(run_placer(["arrange", str(spec), "--out", "b"], cwd=tmp_path), "guard_net",
            "guard_ring = true")


@pytest.mark.slow
def test_a_mixed_block_keeps_to_the_nets_it_names(tmp_path, ota5):
    """A block of n and p devices whose bulks are AGND and AVDD: its dummies default to
    the n devices' bulk (no VSS appears that the spec never named), the layout extracts
    clean; and grade of a pattern text says the drawn well is not measured there."""
    text = ((ROOT / "samples" / "ota5.toml").read_text()
            .replace('"VSS"', '"AGND"').replace('"VDD"', '"AVDD"'))
    out = _arrange(tmp_path, text)
    report = json.loads((out / "report.json").read_text())
    nets = {n["name"] for n in report["layout"]["nets"]}
    assert "VSS" not in nets and "AGND" in nets and "AVDD" in nets
    found = extraction.check(out / "pattern.gds", LAYERS)
    assert not found.shorts and not found.opens and not found.stray_labels
    res = run_placer(["grade", str(ota5 / "pattern.txt"), "--spec",
                      str(ROOT / "samples" / "ota5.toml")], cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    assert "the well a guard ring draws is not measured here" in res.stdout
