"""The kind registry: one record per kind decides everything kind-specific.

A kind whose units behave like an existing one (its cell geometry, routing and budget
are among those the package knows) is added by one record in ``placer.kinds.KINDS`` and
its template; these tests add one, a poly-plate capacitor unit, and run the whole job
on it without touching any other module (DEVELOPERS.md walks through the same steps)."""

from __future__ import annotations

import ast
import json
from dataclasses import replace
from pathlib import Path

import pytest

from placer.cli import cli
from placer.kinds import KINDS, default_nets
from tests.helpers import ROOT

SPEC = """name = "pcap_demo"
kind = "pcap"
[devices]
C0 = 1
C1 = 1
C2 = 2
C3 = 4
[array]
rows = 2
[electrical]
termination = "C0"
unit_cap_ff = 20.0
"""


@pytest.fixture
def pcap(monkeypatch):
    """A new kind: a capacitor unit with its own template (here the shipped plate rules
    under its own name) registered for the test's duration."""
    from placer.layout import cells

    record = replace(KINDS["cap"], name="pcap", template="pcap_unit.toml",
                     default_net={"top": "PTOP", "bottom": "_PB"})
    monkeypatch.setitem(KINDS, "pcap", record)
    text = (ROOT / "templates" / "cap_unit.toml").read_text().replace('kind = "cap"',
                                                                     'kind = "pcap"')
    shipped = cells.shipped_text
    monkeypatch.setattr(cells, "shipped_text",
                        lambda name: text if name == "pcap_unit.toml" else shipped(name))
    return record


def test_a_new_kind_is_read_arranged_routed_budgeted_and_written(pcap, tmp_path, runner):
    spec = tmp_path / "pcap.toml"
    spec.write_text(SPEC)
    out = tmp_path / "out"
    result = runner.invoke(cli, ["arrange", str(spec), "--out", str(out), "--time-limit", "2",
                                 "--quiet"])
    assert result.exit_code == 0, result.output
    report = json.loads((out / "report.json").read_text())
    assert report["budget"]["bits"] == ["C1", "C2", "C3"]             # the DAC budget ran
    assert {"PTOP", "C1_PB", "C3_PB"} <= {n["name"] for n in report["layout"]["nets"]}
    assert (out / "pattern.gds").stat().st_size > 0
    assert "placer_pcap" in (out / "pattern.sp").read_text()


def test_a_new_kinds_defaults_come_from_its_record(pcap):
    assert default_nets("pcap", "C1") == {"top": "PTOP", "bottom": "C1_PB"}
    assert pcap.shared == ("top",)


def test_no_module_outside_the_registry_tests_a_kinds_name():
    """Everything kind-specific goes through the record: no ``spec.kind == "mos"`` (or any
    comparison of a kind with a string) in the package outside placer/kinds.py."""
    offenders = []
    for path in sorted((ROOT / "placer").rglob("*.py")):
        if path.name == "kinds.py":
            continue
        tree = ast.parse(path.read_text())
        for node in ast.walk(tree):
            if isinstance(node, ast.Compare):
                names = [n for n in (node.left, *node.comparators)
                         if (isinstance(n, ast.Attribute) and n.attr == "kind")
                         or (isinstance(n, ast.Name) and n.id == "kind")]
                strings = [n for n in (node.left, *node.comparators)
                           if isinstance(n, ast.Constant) and n.value in KINDS]
                if names and strings:
                    offenders.append(f"{path.relative_to(ROOT)}:{node.lineno}")
    assert offenders == []


def test_every_kind_has_its_template_and_known_flavours():
    from placer.layout.cells import RULES

    for kind in KINDS.values():
        assert (ROOT / "templates" / kind.template).is_file(), kind.name
        assert kind.cell in RULES
        assert kind.routing in ("rows", "plates", "chains")
        assert kind.budget in ("ratio", "dac")
        assert kind.quantity in ("current", "capacitance", "resistance")
        assert set(kind.default_net) == set(kind.drawn) <= set(kind.terminals)
        assert set(kind.spice_ports) == set(kind.drawn)
        assert Path(kind.template).suffix == ".toml"
