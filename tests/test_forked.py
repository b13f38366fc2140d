"""Work drawn aside in a forked child (placer/io/forked.py) and arrange's previews drawn so."""

from __future__ import annotations

import os
import time

import pytest
from click.testing import CliRunner

from placer.cli import cli
from placer.io import forked
from placer.present import outputs

pytestmark = pytest.mark.skipif(not hasattr(os, "fork"), reason="needs fork")


def test_the_work_runs_in_another_process_and_reports_success(tmp_path):
    mark = tmp_path / "pid"
    with forked.aside(lambda: mark.write_text(str(os.getpid()))) as job:
        ok = job.wait()
    assert ok
    assert int(mark.read_text()) != os.getpid()


def test_a_failure_in_the_child_is_reported_not_raised():
    def fail() -> None:
        raise RuntimeError("no")

    with forked.aside(fail) as job:
        pass
    assert job.wait() is False


def test_a_block_that_raises_stops_the_child_before_it_writes(tmp_path):
    """The parent's clean-up (a staging folder removed) must not race a child still
    writing into it: leaving the block by an error ends the child first."""
    late = tmp_path / "late"

    def slow() -> None:
        time.sleep(5)
        late.write_text("x")

    t0 = time.monotonic()
    with pytest.raises(KeyError), forked.aside(slow):
        raise KeyError("boom")
    assert time.monotonic() - t0 < 3
    time.sleep(0.2)
    assert not late.exists()


def _arrange(tmp_path, name: str) -> bytes:
    spec = tmp_path / "s.toml"
    spec.write_text('kind = "cap"\n[devices]\nCT = 1\nC0 = 1\nC1 = 2\nC2 = 4\nC3 = 8\n')
    res = CliRunner().invoke(cli, ["arrange", str(spec), "--out", str(tmp_path / name),
                                   "--time-limit", "1", "--quiet"])
    assert res.exit_code == 0, res.output
    return (tmp_path / name / "pattern.svg").read_bytes()


def test_arrange_previews_drawn_aside_are_the_ones_drawn_in_process(tmp_path, monkeypatch):
    """The child's pictures are byte for byte those the parent draws (the writer is
    deterministic), and when the child fails the parent draws them itself."""
    import placer.cli as cli_module

    monkeypatch.setattr(cli_module, "ASIDE_MIN_UNITS", 0)       # a child even for 16 units
    parent = os.getpid()
    log = tmp_path / "drawn-by"
    real = outputs.Previews.draw

    def draw(self: outputs.Previews, fail_in_child: bool = False) -> None:
        if fail_in_child and os.getpid() != parent:
            raise RuntimeError("the child fails")
        with log.open("a") as fh:
            fh.write(f"{os.getpid()}\n")
        real(self)

    monkeypatch.setattr(outputs.Previews, "draw", draw)
    aside_svg = _arrange(tmp_path, "a")
    assert [int(x) for x in log.read_text().split()] != [parent]  # drawn by the child
    log.unlink()
    monkeypatch.setattr(outputs.Previews, "draw",
                        lambda self: draw(self, fail_in_child=True))
    again_svg = _arrange(tmp_path, "b")
    assert [int(x) for x in log.read_text().split()] == [parent]   # the parent redrew
    assert again_svg == aside_svg
    assert (tmp_path / "b" / "pattern.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
