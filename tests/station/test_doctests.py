"""The examples in the docstrings of station and sequences modules still run as written.

(pytest's --doctest-modules covers analysis/ only; these modules are checked here.)
"""

from __future__ import annotations

import doctest
import importlib

import pytest

MODULES = ["station.inputs.limits", "station.formatting", "station.analyses.registry",
           "station.record.events", "sequences.plansteps"]


@pytest.mark.parametrize("name", MODULES)
def test_docstring_examples_run(name: str) -> None:
    result = doctest.testmod(importlib.import_module(name), optionflags=doctest.ELLIPSIS)
    assert result.attempted > 0 and result.failed == 0
