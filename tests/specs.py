"""Spec texts several tests share (invented blocks)."""

from __future__ import annotations


def tiny_mirror(lambda_per_v: float, unit_current_ua: float, routing: str = "") -> str:
    """A 1:2 mirror of six fingers on two rows, its reference diode-connected, with an
    [electrical] table and optionally a [routing] table's text."""
    return f"""name = "tiny_mirror"
[devices]
MREF = 2
MOUT = 4
[array]
rows = 2
[unit]
width_um = 2.0
length_um = 1.0
[terminals]
MREF = {{ gate = "VB", drain = "VB", source = "VSS" }}
MOUT = {{ gate = "VB", drain = "OUT", source = "VSS" }}
[electrical]
reference = "MREF"
vov_v = 0.2
lambda_per_v = {lambda_per_v}
unit_current_ua = {unit_current_ua}
[electrical.vds_v]
MREF = 0.7
MOUT = 0.7
{routing}"""
