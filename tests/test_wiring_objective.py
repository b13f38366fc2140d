"""[search] wiring: the drawn wiring's error joins the objective, and the candidates'
trade-off includes wiring error and block area."""

from __future__ import annotations

from pathlib import Path

import pytest

from placer.jobs.arrange import arrange
from placer.jobs.load import load_spec, parse_spec
from placer.layout.block import load_tools, wiring_of

MIRROR = Path("samples/bias_mirror.toml").read_text()


def _spec(wiring: bool):
    text = MIRROR + f"\n[search]\nwiring = {'true' if wiring else 'false'}\n"
    return parse_spec(text, "m.toml")


def test_the_least_gradient_plus_wiring_error_wins():
    """With a weighing that charges the search's own result heavily, the arrangement kept
    is another of the search's with the least sum; without the option the result stands.
    The sum is the objective the option names (gradient + wiring, worst pair each)."""
    seen: dict[bytes, float] = {}
    plain = arrange(_spec(False), seed=1, time_limit_s=2.0)
    first = plain.pattern.ids.tobytes()

    def weigh(pattern, spec):
        cost = 1e6 if pattern.ids.tobytes() == first else 0.0
        seen[pattern.ids.tobytes()] = cost
        return cost, 1.0

    again = arrange(_spec(False), seed=1, time_limit_s=2.0, weigh=weigh)
    assert again.pattern.ids.tobytes() == first and not seen     # the option is off
    chosen = arrange(_spec(True), seed=1, time_limit_s=2.0, weigh=weigh)
    assert chosen.pattern.ids.tobytes() != first
    assert len(seen) >= 2
    assert "gradient + wiring" in chosen.method
    assert chosen.proven == ""           # the search's proof was for its own result


def test_tools_weigh_is_the_budgets_worst_pair_wiring_error():
    """Tools.weigh gives the routed block's worst-pair wiring error: the largest difference
    of the devices' wiring terms, as the budget's wiring column prints it (in %)."""
    from placer.layout.block import prepare
    from placer.model.budget import budget
    from placer.model.grade import grade_pattern

    spec = load_spec(Path("samples/bias_mirror.toml"))
    spec, tools = load_tools(spec)
    result = arrange(spec, seed=1, time_limit_s=1.0, fit=tools.fit)
    ppm, area = tools.weigh(result.pattern, result.spec)
    block = prepare(result.pattern, result.spec, tools)
    bud = budget(result.pattern, block.spec, grade_pattern(result.pattern, block.spec),
                 wiring_of(block))
    wires = [0.0] + [ln.wiring_pct for ln in bud.lines]       # the reference's own is 0
    assert ppm == pytest.approx(1e4 * (max(wires) - min(wires)), rel=1e-9, abs=1e-9)
    assert area == pytest.approx(block.wiring.size_um[0] * block.wiring.size_um[1])


def test_candidates_carry_wiring_error_and_area_on_their_front():
    spec = load_spec(Path("samples/bias_mirror.toml"))
    spec, tools = load_tools(spec)
    result = arrange(spec, seed=1, time_limit_s=2.0, n_candidates=5, fit=tools.fit,
                     weigh=tools.weigh)
    cands = result.candidates
    assert cands and all(c.wiring_ppm is not None and c.block_um2 for c in cands)
    axes = [(c.systematic_ppm, c.wiring_ppm, c.block_um2) for c in cands]
    for a in axes:           # none is worse on all three than another
        assert not any(all(u <= v for u, v in zip(b, a, strict=True)) and b != a
                       for b in axes)
