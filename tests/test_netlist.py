"""The SPICE netlist of a routed array, simulated with Debian's ngspice (``.ci/run``
installs it): the current-ratio error the drawn wiring gives a mirror in the simulator
agrees with the budget's wiring term within 10 %.

The simulator solves the full nonlinear circuit (square-law devices, every wire as a
resistor); the budget's term is placer's first-order model over the same extracted
network. The gradient-free comparison: the same netlist with the wires' resistance made
negligible sets the ratio the wiring is measured against.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
from dataclasses import replace
from pathlib import Path

import pytest

from placer.jobs.arrange import arrange
from placer.jobs.load import parse_spec
from placer.layout.block import layout_of, wiring_of
from placer.layout.netlist import netlist, subckt_name
from placer.model.budget import budget
from placer.model.grade import grade_pattern
from tests.specs import tiny_mirror

MIRROR = tiny_mirror(lambda_per_v=0.0, unit_current_ua=50.0, routing=(
    "[routing]\nmetal1_ohm_per_sq = 2.0\nmetal2_ohm_per_sq = 2.0\nvia_ohm = 40.0\n"))


def _ngspice() -> str:
    exe = shutil.which("ngspice")
    if exe is None:
        if os.environ.get("PLACER_REQUIRE_NGSPICE"):
            pytest.fail("ngspice is required here (apt-get install ngspice)")
        pytest.skip("no ngspice here (apt-get install ngspice); CI requires it")
    return exe


def _output_current(exe: str, tmp: Path, spec, par, tag: str) -> float:
    (tmp / f"{tag}.sp").write_text(netlist(spec, par))
    ports = [n for n, nw in par.networks.items() if nw.pin is not None]
    i_ref = 2 * spec.electrical.unit_current_ua * 1e-6
    bench = "\n".join([
        f"* bench {tag}", f".include {tag}.sp",
        f"XA {' '.join(ports)} {subckt_name(spec)}",
        f"IREF 0 VB DC {i_ref:.9g}",             # into the diode-connected reference
        "VS VSS 0 DC 0", "VO OUT 0 DC 1.0",
        ".options reltol=1e-9 abstol=1e-18 vntol=1e-12",
        ".control", "op", "print -i(VO)", ".endc", ".end", ""])
    (tmp / f"bench_{tag}.sp").write_text(bench)
    run = subprocess.run([exe, "-b", f"bench_{tag}.sp"], cwd=tmp, capture_output=True,
                         text=True, timeout=120)
    m = re.search(r"-i\(vo\)\s*=\s*([-+0-9.eE]+)", run.stdout)
    assert m, run.stdout + run.stderr
    return float(m.group(1))


def test_ngspice_mirror_ratio_error_matches_the_budgets_wiring_term(tmp_path):
    exe = _ngspice()
    spec = parse_spec(MIRROR, "tiny_mirror.toml")
    result = arrange(spec, seed=1, time_limit_s=1.0)
    _, block = layout_of(result.pattern, result.spec)
    spec = block.spec
    bud = budget(result.pattern, spec, grade_pattern(result.pattern, spec), wiring_of(block))
    wire_pct = bud.lines[0].wiring_pct
    assert wire_pct is not None and abs(wire_pct) > 0.05      # large enough to simulate

    ideal = replace(spec, routing=replace(spec.routing, metal1_ohm_per_sq=0.0,
                                          metal2_ohm_per_sq=0.0, via_ohm=0.0))
    _, flat = layout_of(result.pattern, ideal)
    i_wired = _output_current(exe, tmp_path, spec, block.parasitics, "wired")
    i_flat = _output_current(exe, tmp_path, ideal, flat.parasitics, "flat")
    assert i_flat == pytest.approx(4 * 50e-6, rel=1e-3)       # the square-law model's point
    simulated_pct = 100.0 * (i_wired / i_flat - 1.0)
    assert simulated_pct == pytest.approx(wire_pct, rel=0.10), (simulated_pct, wire_pct)
