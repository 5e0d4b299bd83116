"""The docstring examples of the package run, and the modules that should have examples have them.

`pytest` runs every docstring example of `directional/` (``--doctest-modules`` in
pyproject.toml).  That alone passes when a module has lost its examples; this test does not: each
module listed must hold at least one example, and all of them must pass.
"""

from __future__ import annotations

import doctest
import importlib

import pytest

# Every module whose docstrings carry examples today: public entry points, the method's pieces
# and the scenarios.  A module may join the list; one leaves it only with its examples.  Not here:
# directional.run.journal, whose one example (resume) needs a journal file and is skipped.
WITH_EXAMPLES = [
    "directional.parameters",
    "directional.api.calibration",
    "directional.api.explore",
    "directional.api.minimization",
    "directional.method.curvature",
    "directional.method.directions",
    "directional.method.hessian",
    "directional.method.linesearch",
    "directional.method.noise",
    "directional.run.identity",
    "directional.interface.command",
    "directional.interface.problemfile",
    "directional.interface.reading",
    "directional.interface.templates",
    "directional.run.ordered",
    "directional.testproblems.bioreactor",
    "directional.testproblems.cooling_rod",
    "directional.testproblems.heater",
    "directional.testproblems.mgh",
    "directional.benchmarking.baselines",
    "directional.benchmarking.profiles",
    "directional.benchmarking.scaling",
    "directional.benchmarking.solvers",
]


def examples_of(module) -> tuple[int, int]:
    """(failed, attempted) for the docstring examples of ``module``."""
    result = doctest.testmod(module, verbose=False, report=False)
    return result.failed, result.attempted


@pytest.mark.parametrize("name", WITH_EXAMPLES)
def test_the_docstring_examples_exist_and_pass(name):
    failed, attempted = examples_of(importlib.import_module(name))
    assert attempted > 0, f"{name} has no docstring examples"
    assert failed == 0, f"{failed} of the {attempted} examples of {name} fail"


def test_a_module_without_examples_is_noticed():
    # the check above can fail: a module with no examples counts none
    from directional import errors

    assert examples_of(errors)[1] == 0
