"""The quadratic lower bound beside the best known quadratic error of the benchmark's cases.

For every case of tests/bench/cases.py with a best known result in optima.json: the bound
(placer/search/_bounds.py) at the best known linear error, the best known quadratic
error, how close the bound comes, and the time it takes. Cases with spare slots inside
the core, or no bound above zero, are listed as such.

Run:  python tests/bench/bench_bounds.py [--update-readme]
"""

from __future__ import annotations

import argparse
import json
import sys
import time
from pathlib import Path

from cases import CASES  # this script's folder
from readme_block import replace_block

from placer.jobs.arrange import problem_for
from placer.jobs.load import parse_spec
from placer.search import quadratic_bound

OPTIMA = Path(__file__).resolve().with_name("optima.json")


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--update-readme", action="store_true")
    args = ap.parse_args()
    optima = json.loads(OPTIMA.read_text())
    lines = ["| case | units | best known quad ppm | lower bound ppm | bound / best known "
             "| bound ms |", "|---|---|---|---|---|---|"]
    for label, text, _ in CASES:
        known = optima.get(label)
        if known is None:
            continue
        spec = parse_spec(text)
        prob = problem_for(spec, spec.array.rows, spec.array.columns)
        t = time.perf_counter()
        bound = quadratic_bound(prob, known["linear_um"])
        ms = (time.perf_counter() - t) * 1e3
        star = "*" if known["proven"] else ""
        if bound != bound:
            shown, ratio = "none (spare slots in the core)", "-"
        elif bound == 0:
            shown, ratio = "0 (none above zero)", "-"
        else:
            shown, ratio = f"{bound:.6g}", f"{bound / known['quadratic_ppm']:.4f}"
        lines.append(f"| {label} | {sum(prob.counts)} "
                     f"| {known['quadratic_ppm']:.6g}{star} | {shown} | {ratio} | {ms:.1f} |")
    table = "\n".join([*lines, "", "`python tests/bench/bench_bounds.py`; * a proven "
                       "optimum (tests/bench/optima.json)."])
    print(table)
    if args.update_readme:
        replace_block("bench:bounds", table)
    return 0


if __name__ == "__main__":
    sys.exit(main())
