"""Benchmark of the lesson page: one swap at 1024 units in headless Chromium (target: the
median swap updates every figure in under 50 ms).

Run:  python tests/bench/bench_lesson.py [--swaps N] [--update-readme]

Builds the lesson pages of two invented 1024-unit blocks (a 10-bit capacitor array in a
32 x 32 core with a dummy ring, its INL/DNL budget computed on every swap; sixteen
64-unit transistors in a 32 x 32 core), with the textbook arrangements only (no search),
opens each in headless Chromium and makes N swaps between random slots through the
page's own click handlers. A swap is timed inside the page, from the first click to the
end of the layout that follows the second (every figure, the routing cost -- the two
devices' spanning trees recomputed -- the board and the polar curve redrawn); the
times of a shared machine are noisy, so the script prints min, median and max and states
the target, and no test depends on them. It then moves the direction
slider as often, each move redrawing every figure and the shading of every slot.
"""

from __future__ import annotations

import argparse
import random
import statistics
import sys
import tempfile
from pathlib import Path

from readme_block import replace_block  # this script's folder

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))   # run as a script: make tests.browser importable

from tests.browser import chromium  # noqa: E402

TARGET_MS = 50.0

CASES = {
    "capacitor array, 11 devices (1 + 1 + 2 + ... + 512), ring": (
        'name = "bench_cdac"\nkind = "cap"\n[devices]\nCT = 1\n'
        + "".join(f"C{b} = {2 ** b}\n" for b in range(10))
        + '[array]\nrows = 32\ncolumns = 32\ndummies = "ring"\n'
        '[electrical]\ntermination = "CT"\n'),
    "transistors, 16 devices x 64 units": (
        'name = "bench_mos"\n[devices]\n'
        + "".join(f"M{d} = 64\n" for d in range(16))
        + '[array]\nrows = 32\ncolumns = 32\n'),
}

# two clicks through the page's own handlers, then a forced layout; the time inside the page
_SWAP_JS = """
const q = (r, c) => document.querySelector(`.slot[data-row="${r}"][data-col="${c}"]`);
const click = (e) => e.dispatchEvent(new MouseEvent("click", {bubbles: true}));
const before = document.body.dataset.swaps;
const t0 = performance.now();
click(q(arguments[0], arguments[1]));
click(q(arguments[2], arguments[3]));
document.body.offsetHeight;
const t1 = performance.now();
return [t1 - t0, document.body.dataset.swaps !== before];
"""


def _page(text: str, out: Path) -> Path:
    from placer.jobs.arrange import baseline_patterns
    from placer.jobs.load import parse_spec
    from placer.present.lesson import LessonArrangement, lesson_data, render_page

    spec = parse_spec(text, "bench")
    rows, cols = spec.array.rows, spec.array.columns
    assert rows is not None and cols is not None
    items = [LessonArrangement(m, m, p) for m, p in baseline_patterns(spec, rows, cols)]
    path = out / f"{spec.name}-lesson.html"
    path.write_text(render_page(lesson_data(spec, items)), encoding="utf-8")
    return path


# the direction slider moved as a hand moves it: every figure, the curve and the shading
_TURN_JS = """
const e = document.getElementById("field-angle");
const t0 = performance.now();
e.value = arguments[0];
e.dispatchEvent(new Event("input", {bubbles: true}));
document.body.offsetHeight;
return performance.now() - t0;
"""


def measure(page: Path, swaps: int, seed: int) -> tuple[list[float], list[float]]:
    """Per-swap times (ms) of ``swaps`` swaps between random slots holding different
    things, then per-move times of as many moves of the direction slider."""
    driver = chromium()
    try:
        driver.get(page.as_uri())
        assert driver.execute_script("return document.body.dataset.ready") == "true"
        grid = driver.execute_script(
            "return [...document.querySelectorAll('.slot')].map(s => "
            "[+s.dataset.row, +s.dataset.col, s.getAttribute('aria-label')]);")
        slots = [(r, c) for r, c, _ in grid]
        rng = random.Random(seed)
        times: list[float] = []
        while len(times) < swaps:
            a, b = rng.sample(slots, 2)
            ms, swapped = driver.execute_script(_SWAP_JS, *a, *b)
            if swapped:                     # two slots holding the same thing do not swap
                times.append(float(ms))
        turns = [float(driver.execute_script(_TURN_JS, rng.randrange(360)))
                 for _ in range(swaps)]
        return times, turns
    finally:
        driver.quit()


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--swaps", type=int, default=60)
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--update-readme", action="store_true")
    args = ap.parse_args()
    lines = [f"| 1024 units, {args.swaps} of each | | min ms | median ms | max ms |",
             "|---|---|---|---|---|"]
    met = True
    with tempfile.TemporaryDirectory() as tmp:
        for label, text in CASES.items():
            swaps, turns = measure(_page(text, Path(tmp)), args.swaps, args.seed)
            met = met and statistics.median(swaps) < TARGET_MS
            for what, t in (("random swap", swaps), ("direction slider moved", turns)):
                lines.append(f"| {label} | {what} | {min(t):.1f} | {statistics.median(t):.1f} "
                             f"| {max(t):.1f} |")
                print(lines[-1], file=sys.stderr, flush=True)
    lines.append(f"\nA swap timed from the first click to the layout after the second (every "
                 f"figure and the routing cost, the two devices' spanning trees recomputed), a "
                 f"slider move from its input event to the layout after it (every figure, the "
                 f"polar curve and the board's shading redrawn), in headless Chromium; target: the "
                 f"median swap under {TARGET_MS:g} ms ({'met' if met else 'MISSED'}).")
    table = "\n".join(lines)
    print(table)
    if args.update_readme:
        replace_block("bench:lesson", table)
    return 0 if met else 1


if __name__ == "__main__":
    sys.exit(main())
