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
