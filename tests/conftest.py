"""Shared fixtures and the derandomised hypothesis profile."""

import os

import matplotlib
import pytest
from click.testing import CliRunner
from hypothesis import settings

matplotlib.use("Agg")

settings.register_profile("ci", derandomize=True, max_examples=60, deadline=None)
settings.register_profile("dev", max_examples=200, deadline=None)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "ci"))


def pytest_addoption(parser: pytest.Parser) -> None:
    parser.addoption("--slow", action="store_true",
                     help="also run the tests marked slow (CI runs them: PLACER_SLOW=1)")


def pytest_collection_modifyitems(config: pytest.Config, items: list[pytest.Item]) -> None:
    """Tests marked ``slow`` (long searches, every sample routed, the adversarial share)
    run in CI and with ``--slow`` or ``PLACER_SLOW=1``; a local run skips them."""
    if config.getoption("--slow") or os.environ.get("PLACER_SLOW") == "1":
        return
    skip = pytest.mark.skip(reason="slow: run with --slow or PLACER_SLOW=1 (CI runs it)")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip)


@pytest.fixture
def runner() -> CliRunner:
    return CliRunner()


@pytest.fixture
def write(tmp_path):
    """Write text to a file under tmp_path and return its path."""

    def _write(name: str, text: str):
        path = tmp_path / name
        path.write_text(text)
        return path

    return _write
