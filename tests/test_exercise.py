"""Exercise files of the lesson page: the format read and written, every bad value one
clear line before anything is written, the starter's goals from placer's best
arrangement, and the swaps between two boards."""

from __future__ import annotations

import itertools
import tomllib

import numpy as np
import pytest

from placer.errors import ExerciseError
from placer.io.exercise import Exercise, Goal, exercise_text, parse_exercise
from placer.jobs.exercise import round_up, swaps_between
from placer.jobs.load import load_spec, parse_spec
from tests.helpers import ROOT, node_or_skip

COURSE = ROOT / "samples" / "course"

GOOD = '''[exercise]
block = "duo"
title = "Two devices"
task = "Cancel the linear error."
start = "clustered"
max_swaps = 3
hints = ["one", "two"]

[[goal]]
figure = "linear_ppm"
at_most = 0.5
'''


@pytest.fixture(scope="module")
def duo():
    return parse_spec('name = "duo"\n[devices]\nA = 4\nB = 4\n[array]\nrows = 2\n', "duo")


def test_a_good_exercise_reads_and_writes_back_the_same(duo):
    ex = parse_exercise(GOOD, "ex.toml", duo)
    assert ex == Exercise("duo", "Two devices", "Cancel the linear error.", "clustered", 3,
                          (Goal("linear_ppm", 0.5),), ("one", "two"))
    odd = Exercise("duo", 'A "quoted" title \\ with a backslash', "line one\nline two",
                   "mirrored", 7, (Goal("linear_ppm", 1.25), Goal("diffusion_breaks", 2.0)),
                   ("hint",))
    assert parse_exercise(exercise_text(odd, "a comment\nof two lines"), "x.toml", duo) == odd


@pytest.mark.parametrize("change, words", [
    (("block = \"duo\"", "block = \"trio\""),
     "[exercise] block is 'trio', but the spec's name is 'duo'"),
    (("start = \"clustered\"", "start = \"random\""), "[exercise] start must be one of"),
    (("max_swaps = 3", "max_swaps = 0"),
     "[exercise] max_swaps must be a whole number from 1 to 1000, got 0"),
    (("max_swaps = 3", "max_swaps = 2.5"), "max_swaps must be a whole number"),
    (("max_swaps = 3", "max_swaps = true"), "max_swaps must be a whole number"),
    (("max_swaps = 3\n", ""), "max_swaps must be a whole number from 1 to 1000, got nothing"),
    (("hints = [\"one\", \"two\"]", "hints = [\"one\", 2]"),
     "[exercise] hints[1] must be a non-empty string"),
    (("hints = [\"one\", \"two\"]", "hints = \"one\""), "hints must be an array of at most 12"),
    (("title = \"Two devices\"", "title = \"\""), "[exercise] title must be a non-empty string"),
    (("title = \"Two devices\"", "titel = \"Two\""),
     "[exercise] unknown key 'titel'; allowed: block"),
    (("figure = \"linear_ppm\"", "figure = \"linear\""),
     "[[goal]] 1 figure must be one of linear_ppm"),
    (("figure = \"linear_ppm\"", "figure = \"diffusion_breaks\"\nkind = 1"),
     "[[goal]] 1 unknown key 'kind'"),
    (("at_most = 0.5", "at_most = -1"),
     "[[goal]] 1 at_most must be a number of at least 0, got -1"),
    (("at_most = 0.5", "at_most = nan"), "at_most must be a number of at least 0, got nan"),
    (("at_most = 0.5", "at_most = \"low\""), "at_most must be a number of at least 0, got 'low'"),
    (("[[goal]]\nfigure = \"linear_ppm\"\nat_most = 0.5\n", ""), "give 1 to 8 [[goal]] tables"),
    (("at_most = 0.5", "at_most = 0.5\n[[goal]]\nfigure = \"linear_ppm\"\nat_most = 1"),
     "[[goal]] 2 bounds linear_ppm a second time"),
    (("[exercise]", "[exercise]\n[extra]"), "unknown table or key 'extra'"),
    (("task = ", "task = = "), "invalid TOML"),
])
def test_every_bad_value_is_one_line_naming_the_file_and_key(duo, change, words):
    text = GOOD.replace(*change)
    assert text != GOOD
    with pytest.raises(ExerciseError) as err:
        parse_exercise(text, "ex.toml", duo)
    msg = str(err.value)
    assert msg.startswith("ex.toml:") and "\n" not in msg
    assert words in msg, msg


def test_mos_figures_are_refused_for_another_kind_and_unpaired_needs_pairs():
    cap = parse_spec('name = "duo"\nkind = "cap"\n[devices]\nA = 4\nB = 4\n', "duo")
    text = GOOD.replace('figure = "linear_ppm"', 'figure = "diffusion_breaks"')
    with pytest.raises(ExerciseError, match="counts MOS fingers, and the spec's kind is 'cap'"):
        parse_exercise(text, "ex.toml", cap)
    shared = parse_spec('name = "duo"\n[devices]\nA = 4\nB = 4\n[unit]\ndiffusion = "shared"\n',
                        "duo")
    with pytest.raises(ExerciseError, match="unpaired_fingers needs fingers two"):
        parse_exercise(text.replace("diffusion_breaks", "unpaired_fingers"), "ex.toml", shared)


def _fewest_swaps(a: list[int], b: list[int]) -> int:
    """The fewest swaps from a to b, by breadth-first search over the boards."""
    seen, frontier, depth = {tuple(a)}, [tuple(a)], 0
    while tuple(b) not in seen:
        nxt = []
        for board in frontier:
            for i, j in itertools.combinations(range(len(board)), 2):
                if board[i] != board[j]:
                    t = list(board)
                    t[i], t[j] = t[j], t[i]
                    if tuple(t) not in seen:
                        seen.add(tuple(t))
                        nxt.append(tuple(t))
        frontier, depth = nxt, depth + 1
    return depth


def test_swaps_between_boards_turns_one_into_the_other_and_is_at_worst_one_over_the_fewest():
    """Every arrangement of a few small multisets against a fixed target: the count is
    never below the fewest (breadth-first search), equals it wherever every wrong slot
    lies on a two-cycle, and stays within the greedy's slack on the rest."""
    rng = np.random.default_rng(20261205)
    for units in ([0, 0, 1, 1, -1, 2], [0, 0, 0, 1, 1, 2, -1], [0, 1, 2, 3, 3, 1]):
        target = list(units)
        for _ in range(30):
            start = [int(v) for v in rng.permutation(units)]
            got = swaps_between(np.array(start), np.array(target))
            best = _fewest_swaps(start, target)
            assert best <= got <= best + 1, (start, target, got, best)
    assert swaps_between(np.array([0, 0, 0, 0, 1, 1, 1, 1]),
                         np.array([0, 1, 1, 0, 1, 0, 0, 1])) == 2
    with pytest.raises(ValueError):
        swaps_between(np.array([0, 1]), np.array([0, 0]))


def test_round_up_keeps_two_digits_and_never_goes_below():
    for v in (0.01234, 57.01, 8.4, 123456.0, 1e-7):
        r = round_up(v)
        assert r >= v and r <= v * 1.1 + 1e-12
        assert len(f"{r:.15g}".replace(".", "").replace("-", "").strip("0").split("e")[0]) <= 2


#: Each sample exercise, its spec and a way to meet it: placer's own arrangement (None),
#: or swaps (row, column pairs of the full pattern) made from the start.
COURSE_SAMPLES = [
    ("row_pair", "row_pair-exercise", None),
    ("common_centroid", "common_centroid-exercise", None),
    ("odd_ratio", "odd_ratio-exercise", None),
    ("cap_ring", "cap_ring-exercise", None),
    ("common_centroid", "common_centroid-random-exercise", None),
    # rows NREF NREF NOUT NOUT / NOUT NOUT NREF NREF / ... : placer's arrangement, made
    # for the errors alone, needs more wire than this goal allows
    ("common_centroid", "common_centroid-wire-exercise",
     [((0, 3), (2, 3)), ((0, 4), (2, 4)), ((1, 1), (3, 1)), ((1, 2), (3, 2))]),
]


@pytest.mark.parametrize("spec_name, ex_name, swaps", COURSE_SAMPLES)
def test_the_course_samples_are_valid_exercises_that_can_be_met(spec_name, ex_name, swaps):
    """Each sample exercise reads against its spec, and it can be met: placer's own
    arrangement (a short search), or the listed swaps from the start, meets every goal
    (grade's figures and placer's routing estimate) in at most the swaps allowed."""
    from placer.io.pattern import Pattern
    from placer.jobs.arrange import arrange, baseline_patterns
    from placer.model.grade import grade_pattern
    from placer.present.lesson import LessonArrangement, lesson_data
    from tests.test_page_routing import placer_routing

    spec = load_spec(COURSE / f"{spec_name}.toml")
    ex = parse_exercise((COURSE / f"{ex_name}.toml").read_text(), ex_name, spec)
    best = arrange(spec, seed=0, time_limit_s=10)
    spec = best.spec or spec
    start = dict(baseline_patterns(spec, *best.core_shape))[ex.start]
    if swaps is None:
        done, used = best.pattern, swaps_between(start.ids, best.pattern.ids)
    else:
        ids, orient = start.ids.copy(), start.orient.copy()
        for a, b in swaps:
            for g in (ids, orient):
                g[a], g[b] = g[b].copy(), g[a].copy()
        done, used = Pattern(spec.devices, ids, orient), len(swaps)
        # what the hint says: placer's arrangement does not meet this goal
        assert placer_routing(best.pattern, spec)["total"] > max(x.at_most for x in ex.goals)
    assert used <= ex.max_swaps
    g, route = grade_pattern(done, spec), placer_routing(done, spec)
    for goal in ex.goals:
        value = (route["total"] if goal.figure == "total_tree_um" else
                 max(abs(getattr(p, goal.figure)) for p in g.pairs))
        assert value <= goal.at_most, (goal, value)
    data = lesson_data(spec, [LessonArrangement(ex.start, "", start),
                              LessonArrangement("optimised", "", best.pattern)], ex)
    assert data["exercise"]["start"] == 0 and data["exercise"]["best"] == 1


def test_a_bad_exercise_stops_the_command_before_anything_is_written(tmp_path, runner):
    from placer.cli import cli

    spec = tmp_path / "duo.toml"
    spec.write_text('name = "duo"\n[devices]\nA = 4\nB = 4\n[array]\nrows = 2\n')
    ex = tmp_path / "ex.toml"
    ex.write_text(GOOD.replace("max_swaps = 3", "max_swaps = -2"))
    out = tmp_path / "out"
    res = runner.invoke(cli, ["lesson", str(spec), "--exercise", str(ex), "--out", str(out)])
    assert res.exit_code == 1, res.output
    assert "Traceback" not in res.output
    lines = [ln for ln in res.output.splitlines() if ln.strip()]
    assert lines == [f"Error: {ex}: [exercise] max_swaps must be a whole number from 1 to "
                     "1000, got -2"], res.output
    assert not out.exists() or not any(out.iterdir())
    both = runner.invoke(cli, ["lesson", str(spec), "--exercise", str(ex), "--write-exercise",
                               "--out", str(out)])
    assert both.exit_code == 2 and "not both" in both.output


def test_a_starter_exercise_is_written_from_placers_best_and_reads_back(tmp_path, runner):
    """--write-exercise: the file reads back with --exercise; its linear goal lies between
    placer's best and the start's worst linear error (a tenth of the way), and the swaps
    allowed are those that turn the start into placer's arrangement."""
    import json
    import re

    from placer.cli import cli

    spec = COURSE / "common_centroid.toml"
    res = runner.invoke(cli, ["lesson", str(spec), "--write-exercise", "--out",
                              str(tmp_path / "a"), "--time-limit", "5"])
    assert res.exit_code == 0, res.output
    written = tmp_path / "a" / "plover_mirror-exercise.toml"
    data = tomllib.loads(written.read_text())
    page = (tmp_path / "a" / "plover_mirror-lesson.html").read_text()
    blob = re.search(r'<script type="application/json" id="lesson-data">(.*?)</script>',
                     page, re.S).group(1)
    d = json.loads(blob)
    start = np.array(d["arrangements"][d["exercise"]["start"]]["ids"])
    best = np.array(d["arrangements"][d["exercise"]["best"]]["ids"])
    assert data["exercise"]["max_swaps"] == swaps_between(start, best) >= 1
    lin = data["goal"][0]
    assert lin["figure"] == "linear_ppm"

    def linear(ids: np.ndarray) -> float:        # the worst direction: g |c_a - c_b|
        px, py = d["pitch_um"]
        r, c = np.nonzero(ids >= 0)
        cen = [np.array([c[ids[r, c] == k].mean() * px, -r[ids[r, c] == k].mean() * py])
               for k in range(2)]
        return d["linear_ppm_per_um"] * float(np.hypot(*(cen[0] - cen[1])))

    lo, hi = linear(best), linear(start)
    assert lo + 0.1 * (hi - lo) <= lin["at_most"] <= (lo + 0.1 * (hi - lo)) * 1.1 + 1e-9
    again = runner.invoke(cli, ["lesson", str(spec), "--exercise", str(written), "--out",
                                str(tmp_path / "b"), "--time-limit", "5"])
    assert again.exit_code == 0, again.output
    assert (tmp_path / "b" / "plover_mirror-lesson.html").exists()


def test_the_pages_score_says_met_over_open_and_revealed():
    """The page's own scoring (lesson.js, run in Node without a page): every goal met
    within the swaps allowed is "met", met with more swaps "over", a goal missed "open"
    (a figure over its bound by a thousandth misses, one over it by the arithmetic's
    rounding meets it), and placer's arrangement revealed "revealed" whatever the
    figures."""
    import json
    import subprocess

    node = node_or_skip()
    text = (ROOT / "placer" / "present" / "web" / "lesson.js").read_text()
    rule = "// " + "-" * 64 + " "
    start, end = text.index(rule + "the exercise's score"), text.index(rule + "the budget")
    E = {"max_swaps": 3, "goals": [{"figure": "linear_ppm", "at_most": 0.5},
                                   {"figure": "total_tree_um", "at_most": 40.0}]}
    cases = [([0.0, 40.0], 3, False), ([0.0, 40.0 + 1e-12], 2, False), ([0.0, 40.0], 4, False),
             ([0.5005, 12.0], 1, False), ([9.0, 99.0], 0, True)]
    script = (text[start:end] + f"\nconst E = {json.dumps(E)};\n" +
              f"console.log(JSON.stringify({json.dumps(cases)}.map(([v, n, r]) => "
              "exerciseScore(E, v, n, r))));")
    res = subprocess.run([node, "-e", script], capture_output=True, text=True, check=True)
    got = json.loads(res.stdout)
    assert [g["verdict"] for g in got] == ["met", "met", "over", "open", "revealed"]
    assert got[0]["text"] == "Goal met in 3 swaps (3 allowed)."
    assert got[3]["met"] == [False, True] and got[3]["text"].startswith("1 of 2 goals met; 1 of 3")
    # and the figures a goal reads are the ones the page shows under the same names
    values = subprocess.run([node, "-e", text[start:end] + (
        "\nconst sc = {worst: {linear: {value: 1}, quadratic: {value: 2}, corr: {value: 3}}};"
        "\nconst rt = {total: 4, tracks: 5, breaks: 6, unpaired: 7};"
        "\nconst keys = ['linear_ppm', 'quadratic_ppm', 'correlated_sigma_ppm',"
        " 'total_tree_um', 'row_tracks', 'diffusion_breaks', 'unpaired_fingers'];"
        "\nconsole.log(JSON.stringify(goalValues(keys.map((figure) => ({figure})), sc, rt)));")],
        capture_output=True, text=True, check=True)
    assert json.loads(values.stdout) == [1, 2, 3, 4, 5, 6, 7]
    from placer.io.exercise import FIGURES
    assert list(FIGURES) == ["linear_ppm", "quadratic_ppm", "correlated_sigma_ppm",
                             "total_tree_um", "row_tracks", "diffusion_breaks",
                             "unpaired_fingers"]
