"""The fixed work around the search is estimated from the sizes and checked against
--time-limit (and memory) before any of it starts.

Before the check, ``arrange --time-limit 0.3`` of 2048 units with 16 Monte Carlo samples
ran about 9 s (24 s CPU when the issue was filed) and exited 0, and 256 devices on a
256 x 256 core ran out of a 24 GB machine's memory after six minutes (killed by the
kernel): each test below failed then."""

from __future__ import annotations

import math
import time

import pytest

from placer.cli import cli
from placer.errors import LimitError
from placer.jobs import workload
from placer.jobs.load import parse_spec
from tests.helpers import spec_file

MC_2048 = ("[devices]\nA = 1024\nB = 1024\n[array]\nrows = 32\n"
           "[monte_carlo]\nsamples = 16\n")
WIDE_256 = ("[devices]\n" + "".join(f"D{i} = 256\n" for i in range(256))
            + "[array]\nrows = 256\ncolumns = 256\ndummies = \"none\"\n")


def _refused_fast(result, *words: str) -> None:
    assert result.exit_code == 1, result.output
    lines = [ln for ln in result.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("Error:"), result.output
    for w in words:
        assert w in lines[0], (w, lines[0])


def test_monte_carlo_far_past_a_short_limit_is_refused_before_any_work(tmp_path, runner):
    spec = spec_file(tmp_path, MC_2048)
    out = tmp_path / "o"
    t0 = time.process_time()
    result = runner.invoke(cli, ["arrange", str(spec), "--out", str(out),
                                 "--time-limit", "0.3"])
    cpu = time.process_time() - t0
    _refused_fast(result, "--time-limit 0.3", "[monte_carlo]", "give --time-limit")
    assert not out.exists()
    assert cpu < 1.0                  # refused from the sizes, not after the work


@pytest.mark.parametrize("command", ["arrange", "compare", "lesson"])
def test_the_named_limit_is_one_the_check_accepts(command):
    """The limit the message names lets the same spec through (no dead end)."""
    spec = parse_spec(MC_2048, "s.toml")
    routed = command == "arrange"
    with pytest.raises(LimitError) as err:
        workload.check(spec, "s.toml", 0.3, routed=routed)
    need = float(str(err.value).split("give --time-limit ")[1].split()[0])
    assert workload.check(spec, "s.toml", need, routed=routed).seconds > 0


def test_a_block_past_the_memory_bound_is_refused_at_any_limit(tmp_path, runner):
    spec = spec_file(tmp_path, WIDE_256)
    for limit in ("0.3", "86400"):
        result = runner.invoke(cli, ["arrange", str(spec), "--out", str(tmp_path / "o"),
                                     "--time-limit", limit])
        _refused_fast(result, "258 nets", "65536 units", "GB")
    # draw has no time limit, but the same memory bound
    with pytest.raises(LimitError, match="GB"):
        workload.check(parse_spec(WIDE_256, "s.toml"), "s.toml", None)


def test_samples_and_ordinary_blocks_pass_at_short_limits():
    """Every shipped sample at --time-limit 0.5, and a 4096-unit pair at 1 s."""
    from tests.helpers import SAMPLES

    for path in sorted(SAMPLES.glob("*.toml")):
        spec = parse_spec(path.read_text(), path.name)
        workload.check(spec, path.name, 0.5)
    pair = parse_spec("[devices]\nA = 2048\nB = 2048\n[array]\nrows = 64\n", "p.toml")
    workload.check(pair, "p.toml", 1.0)


def test_the_estimate_is_the_stated_sum_of_its_terms():
    """Hand calculation from the module's stated terms: 2 devices of 512 units on
    32 x 32, nets GATE, SOURCE and a drain each (4): 2.0 + 1.2e-3 * 1024
    + 3.6e-6 * 1024 * 4^1.5 + 3.0e-6 * 2 * 1024 = 3.2644352 s; memory
    100 + 0.026 * 1024 + 1.17e-4 * 1024 * 8 + 1.8e-3 * 2 * 1024 = 131.268864 MB."""
    spec = parse_spec("[devices]\nA = 512\nB = 512\n[array]\nrows = 32\ncolumns = 32\n",
                      "s.toml")
    work = workload.estimate(spec)
    assert math.isclose(work.seconds, 3.2644352, rel_tol=1e-9)
    assert math.isclose(work.peak_mb, 131.268864, rel_tol=1e-9)
    assert math.isclose(sum(s for _, s in work.parts), work.seconds, rel_tol=1e-12)
    unrouted = workload.estimate(spec, routed=False)
    assert math.isclose(work.seconds - unrouted.seconds, 3.6e-6 * 1024 * 8, rel_tol=1e-9)
    # the Monte Carlo term: units cubed
    mc = parse_spec(MC_2048, "s.toml")
    plain = parse_spec(MC_2048.split("[monte_carlo]")[0], "s.toml")
    assert math.isclose(workload.estimate(mc).seconds - workload.estimate(plain).seconds,
                        5.5e-10 * 2048 ** 3, rel_tol=1e-9)


@pytest.mark.parametrize("seconds", [35.0015, 26.0001, 8.0001, 5.1, 9.5])
def test_the_named_limit_passes_for_estimates_just_past_a_whole_limit(seconds, monkeypatch):
    """int(x + 0.999) is no ceiling: estimates of 35.0015, 26.0001 and 8.0001 s named
    limits (10, 7, 1) that the check then refused again."""
    spec = parse_spec(MC_2048, "s.toml")
    monkeypatch.setattr(workload, "estimate", lambda *a, **k: workload.Workload(
        seconds, 100.0, (("the work", seconds),)))
    with pytest.raises(LimitError) as err:
        workload.check(spec, "s.toml", 0.001)
    need = float(str(err.value).split("give --time-limit ")[1].split()[0])
    assert workload.allowed_seconds(need) >= seconds
    assert workload.allowed_seconds(need - 1) < seconds or need == 1


def test_the_capacitor_budget_and_monte_carlo_terms_by_hand():
    """A 4-bit array with its termination and the default 2000 budget samples: 2000 x
    2^4 = 32 000 code samples, 6e-7 s and 4e-5 MB each (0.0192 s, 1.28 MB); and the
    Monte Carlo's memory, 3.5e-5 MB per sampled unit squared (2048 units: 146.8 MB)."""
    base = ("kind = \"cap\"\n[devices]\nCT = 1\nC0 = 1\nC1 = 2\nC2 = 4\nC3 = 8\n"
            "[array]\nrows = 4\ncolumns = 4\n")
    with_budget = parse_spec(base + "[electrical]\ntermination = \"CT\"\n", "c.toml")
    plain = parse_spec(base, "c.toml")
    a, b = workload.estimate(with_budget), workload.estimate(plain)
    assert math.isclose(a.seconds - b.seconds, 6e-7 * 32_000, rel_tol=1e-9)
    assert math.isclose(a.peak_mb - b.peak_mb, 4e-5 * 32_000, rel_tol=1e-9)
    mc = parse_spec(MC_2048, "s.toml")
    no_mc = parse_spec(MC_2048.split("[monte_carlo]")[0], "s.toml")
    assert math.isclose(workload.estimate(mc).peak_mb - workload.estimate(no_mc).peak_mb,
                        3.5e-5 * 2048 ** 2, rel_tol=1e-9)


# ------------------------------------------------------------- arrange's whole-run limit

def test_the_search_gets_what_the_limit_leaves_never_under_a_fifth():
    """The share: limit - before - 1.15 x after, floored at a fifth of the limit."""
    assert workload.search_seconds(10.0, 2.0, before_s=1.0) == pytest.approx(10.0 - 1.0 - 2.3)
    assert workload.search_seconds(2.0, 5.0) == pytest.approx(0.4)
    assert workload.search_seconds(2.0, 0.0, before_s=0.0) == pytest.approx(2.0)
    assert workload.search_seconds(4.0, 1.0) == pytest.approx(
        4.0 - workload.BEFORE_SEARCH_S - 1.15)


def test_the_work_after_the_search_grows_with_each_of_its_terms():
    base = parse_spec("[devices]\nA = 64\nB = 64\n", "s.toml")
    more_units = parse_spec("[devices]\nA = 256\nB = 256\n", "s.toml")
    more_devices = parse_spec("[devices]\n" + "".join(f"D{i} = 16\n" for i in range(8)),
                              "s.toml")
    budget = parse_spec("[devices]\nA = 64\nB = 64\n[electrical]\nvov_v = 0.2\n"
                        "lambda_per_v = 0.1\n[electrical.vds_v]\nA = 1.0\nB = 1.0\n", "s.toml")
    after = workload.after_search
    assert after(more_units) > after(base)
    assert after(more_devices) > after(base)
    assert after(budget) > after(base)
    assert after(base, routed=False) < after(base)
    assert after(base, candidates=2) > after(base)
    dac = "kind = \"cap\"\n[devices]\nCT = 1\nC0 = 1\nC1 = 2\n[electrical]\n" \
          "termination = \"CT\"\nmc_samples = {}\n"
    assert after(parse_spec(dac.format(200000), "s.toml")) > \
        after(parse_spec(dac.format(2000), "s.toml")) + 0.05


def test_arrange_gives_the_search_its_share_of_the_whole_limit(tmp_path):
    """The work before the search and the estimated work after it come out of
    --time-limit; report.json says what the search got."""
    import json

    from tests.helpers import run_placer

    spec = spec_file(tmp_path, "[devices]\nA = 64\nB = 64\n")
    res = run_placer(["arrange", str(spec), "--out", str(tmp_path / "o"), "--time-limit",
                      "6", "--quiet"], cwd=tmp_path)
    assert res.returncode == 0, res.stderr
    report = json.loads((tmp_path / "o" / "report.json").read_text())
    after = workload.after_search(parse_spec(spec.read_text(), str(spec)))
    assert report["time_limit_s"] == 6.0
    # from the spec and the limit alone: the same on every run
    assert report["search_limit_s"] == workload.search_seconds(6.0, after)
    assert report["search_limit_s"] < 6.0 - workload.AFTER_SAFETY * after


def test_the_search_runs_with_the_share_the_report_gives(tmp_path, monkeypatch):
    import json

    from click.testing import CliRunner

    import placer.cli as cli_mod

    seen = []
    real = cli_mod.run_arrange

    def spy(spec, **kw):
        seen.append(kw["time_limit_s"])
        return real(spec, **kw)

    monkeypatch.setattr(cli_mod, "run_arrange", spy)
    spec = spec_file(tmp_path, "[devices]\nA = 8\nB = 8\n")
    res = CliRunner().invoke(cli, ["arrange", str(spec), "--out", str(tmp_path / "o"),
                                   "--time-limit", "3", "--quiet"])
    assert res.exit_code == 0, res.output
    report = json.loads((tmp_path / "o" / "report.json").read_text())
    after = workload.after_search(parse_spec(spec.read_text(), str(spec)))
    assert seen == [report["search_limit_s"]] == [workload.search_seconds(3.0, after)]
    assert f" of its {seen[0]:.3g} s, " in res.output          # the report says it too


def test_a_short_limit_goes_to_fewer_core_shapes_a_full_one_kept():
    """Each core shape costs fixed work before its search moves (the pitch fit, the
    baselines, the starts): a short limit tries fewer of them, always keeping a full
    rectangle where the list holds one, and the report says why the others were left."""
    from placer.jobs.arrange import _keep_shapes, arrange, candidate_shapes

    big = parse_spec("[devices]\nA = 2048\nB = 2048\n", "s.toml")
    assert workload.shapes_affordable(big, 0.5) == 1
    assert workload.shapes_affordable(big, 10.0) > len(candidate_shapes(big))
    shapes = [(2, 9), (3, 6), (4, 5)]
    assert _keep_shapes(shapes, 1, 18) == [(2, 9)]
    assert _keep_shapes(shapes, 1, 20) == [(4, 5)]          # the full one, not the first
    assert _keep_shapes(shapes, 2, 20) == [(2, 9), (4, 5)]
    assert _keep_shapes(shapes, 5, 20) == shapes
    spec = parse_spec("[devices]\nA = 200\nB = 200\n", "s.toml")
    res = arrange(spec, time_limit_s=0.05, fit=None)
    assert "not tried: the time limit affords 1" in res.shape_reason
