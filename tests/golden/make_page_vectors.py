"""Write tests/golden/page_vectors.json: cases of every kind and both correlation kernels,
each with the lesson page's data and the figures placer's Python computes for it.

    python tests/golden/make_page_vectors.py

Run it when a formula changes on purpose (and the page with it); tests/test_page_vectors.py
fails until then. The specs are invented demo blocks.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import Any

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parents[1]))

from placer.io.pattern import check_against_spec, parse_pattern  # noqa: E402
from placer.jobs.load import parse_spec  # noqa: E402
from placer.model.budget import budget  # noqa: E402
from placer.model.grade import grade_pattern  # noqa: E402
from placer.present.lesson import LessonArrangement, lesson_data  # noqa: E402

OUT = HERE / "page_vectors.json"

_MIRROR = """name = "vec_mirror"
[devices]
MR = 2
MA = 4
MB = 2
[array]
rows = 2
[gradient]
linear_ppm_per_um = 120.0
quadratic_ppm_per_um2 = 9.0
[correlated]
sigma_ppm = 300.0
length_um = 6.0
kernel = "{kernel}"
[electrical]
reference = "MR"
vov_v = 0.25
lambda_per_v = 0.08
[electrical.vds_v]
MR = 0.7
MA = 0.9
MB = 0.5
"""
_LADDER = """name = "vec_ladder"
kind = "res"
[devices]
RA = 3
RB = 3
RC = 2
[array]
rows = 2
[gradient]
linear_ppm_per_um = 40.0
quadratic_ppm_per_um2 = 2.5
direction_deg = 35.0
[correlated]
sigma_ppm = 150.0
length_um = 10.0
kernel = "{kernel}"
[mismatch]
a_param_pct_um = 0.6
[electrical]
reference = "RA"
"""
_DAC = """name = "vec_dac"
kind = "cap"
[devices]
CT = 1
C0 = 1
C1 = 2
C2 = 4
[array]
rows = 2
[gradient]
linear_ppm_per_um = 80.0
quadratic_ppm_per_um2 = 6.0
direction_deg = -120.0
[correlated]
sigma_ppm = 200.0
length_um = 8.0
kernel = "{kernel}"
[electrical]
termination = "CT"
fit = "{fit}"
"""
CASES = [
    ("mirror", _MIRROR, {}, ["MA MR MB MA", "MA MB MR MA"]),
    ("mirror_skewed", _MIRROR, {}, ["MR MR MA MA", "MA MA MB MB"]),
    ("ladder", _LADDER, {}, ["RA RB RC RA", "RB RA RC RB"]),
    ("dac_best_fit", _DAC, {"fit": "best"}, ["C2 C1 C0 C2", "C2 CT C1 C2"]),
    ("dac_endpoint", _DAC, {"fit": "endpoint"}, ["C2 C2 C1 C1", "C0 CT C2 C2"]),
]


def python_figures(grade: Any, bud: Any) -> dict[str, float]:
    """The page's figure keys, from placer's own grade and budget."""
    g = grade.to_dict()
    pairs = g["pairs"]
    out = {key: max(abs(p[key]) for p in pairs)
           for key in ("linear_ppm", "quadratic_ppm", "correlated_sigma_ppm", "white_sigma_ppm")}
    # the field the page shades, at the spec's values: the bowl about the centre, and the
    # gradient along the spec's known direction where it gives one
    out["bowl_ppm"] = max(abs(p["bowl_ppm"]) for p in pairs)
    if pairs[0]["known_direction_ppm"] is not None:
        out["along_ppm"] = max(abs(p["known_direction_ppm"]) for p in pairs)
    for d in g["devices"]:
        out[f"centroid_x:{d['name']}"] = d["centroid_um"][0]
        out[f"centroid_y:{d['name']}"] = d["centroid_um"][1]
        out[f"offset_um:{d['name']}"] = d["offset_um"]
        out[f"edge_units:{d['name']}"] = d["edge_units"]
    if hasattr(bud, "lines"):
        for ln in bud.lines:
            out[f"gradient_pct:{ln.device}"] = ln.gradient_pct
            out[f"quadratic_pct:{ln.device}"] = ln.quadratic_pct
            out[f"clm_pct:{ln.device}"] = ln.clm_pct
            out[f"random_sigma_pct:{ln.device}"] = ln.random_sigma_pct
            out[f"within_tolerance:{ln.device}"] = ln.within_tolerance
            out[f"range_low:{ln.device}"] = ln.total_low_pct
            out[f"range_high:{ln.device}"] = ln.total_high_pct
    else:
        for key in ("worst_gradient_inl_lsb", "worst_gradient_dnl_lsb", "quadratic_inl_lsb",
                    "quadratic_dnl_lsb"):
            out[key] = getattr(bud, key)
    return out


def vectors() -> list[dict[str, Any]]:
    """Every case, both kernels: the page's data and Python's figures."""
    out = []
    for name, text, extra, rows in CASES:
        for kernel in ("exponential", "gaussian"):
            spec = parse_spec(text.format(kernel=kernel, **extra), f"<{name}>")
            pattern = check_against_spec(parse_pattern("\n".join(rows)), spec, name)
            grade = grade_pattern(pattern, spec)
            bud = budget(pattern, spec, grade)
            out.append({"name": f"{name}/{kernel}", "kind": spec.kind,
                        "data": lesson_data(spec, [LessonArrangement(name, "", pattern)]),
                        "figures": python_figures(grade, bud)})
    return out


def main() -> None:
    OUT.write_text(json.dumps({"vectors": vectors()}, indent=1, sort_keys=True) + "\n")
    print(f"wrote {OUT}")


if __name__ == "__main__":
    main()
