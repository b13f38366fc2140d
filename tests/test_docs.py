"""The public API's docstrings, checked by numpydoc's own validator: every public function
documents its parameters (none missing, none unknown, in order) and what it returns."""

from __future__ import annotations

import importlib
import inspect

import pytest

numpydoc_validate = pytest.importorskip("numpydoc.validate")

#: Parameters documented (PR01, PR02, PR03, PR10), a Returns section that describes
#: what comes back (RT01, RT02, RT03), and each parameter described (PR07).
CHECKS = {"PR01", "PR02", "PR03", "PR07", "PR10", "RT01", "RT02", "RT03"}


def _public_functions() -> list[str]:
    import placer
    import placer.search

    names = [f"placer.{n}" for n in placer.__all__ if n != "__version__"]
    names += [f"placer.search.{n}" for n in placer.search.__all__]
    names += ["placer.jobs.load.default_spec", "placer.jobs.arrange.arrange",
              "placer.jobs.repair.repair"]
    out = []
    for full in names:
        mod, _, attr = full.rpartition(".")
        if inspect.isfunction(getattr(importlib.import_module(mod), attr)):
            out.append(full)
    return out


@pytest.mark.parametrize("name", _public_functions())
def test_public_function_has_numpydoc_parameters_and_returns(name):
    errors = [f"{code}: {msg}" for code, msg in numpydoc_validate.validate(name)["errors"]
              if code in CHECKS]
    assert errors == [], f"{name}: " + "; ".join(errors)
