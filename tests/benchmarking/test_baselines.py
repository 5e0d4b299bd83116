"""Checks of the reference baselines of the benchmarks against published problems and analysis.

Minima from Moré, Garbow & Hillstrom (1981): problem 1 (Rosenbrock) has f = 0 at (1, 1),
problem 7 (helical valley) f = 0 at (1, 0, 0).  Golden section shrinks the bracket by the golden
ratio at every evaluation (Kiefer 1953).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from benchmarks import baselines as exported
from directional.benchmarking import baselines
from directional.testproblems import mgh

METHODS = [baselines.nelder_mead, baselines.hooke_jeeves, baselines.coordinate_search]


def test_the_benchmarks_folder_re_exports_the_baselines():
    assert exported.nelder_mead is baselines.nelder_mead
    assert exported.golden_section is baselines.golden_section


@pytest.mark.parametrize("method", [baselines.nelder_mead, baselines.hooke_jeeves])
def test_rosenbrock_from_the_standard_start(method):
    rosenbrock = mgh.problem(1)  # Moré, Garbow & Hillstrom 1981, problem 1: f* = 0 at (1, 1)
    result = method(rosenbrock, rosenbrock.start, budget=3000)
    assert result.value < 1e-8
    assert np.allclose(result.point, [1.0, 1.0], atol=1e-3)
    assert result.evaluations <= 3000


def test_nelder_mead_on_the_helical_valley():
    valley = mgh.problem(7)  # Moré, Garbow & Hillstrom 1981, problem 7: f* = 0 at (1, 0, 0)
    result = baselines.nelder_mead(valley, valley.start, budget=3000)
    assert np.allclose(result.point, [1.0, 0.0, 0.0], atol=1e-3)


def test_coordinate_search_solves_a_separable_function_in_one_cycle():
    # On a separable function the exact minimum along each axis is the minimum (analytic); the
    # first cycle's line searches are coarse (a hundredth of the first step), the later ones fine.
    def f(x):
        return float((x[0] - 1.0) ** 2 + 3.0 * (x[1] + 2.0) ** 2)

    result = baselines.coordinate_search(f, [0.5, 0.5], budget=2000)
    assert np.allclose(result.point, [1.0, -2.0], atol=1e-6)


@pytest.mark.parametrize("method", METHODS)
def test_failed_evaluations_count_as_infinity(method):
    # A region where the objective fails (raises) is avoided, as the driver of directional does.
    def f(x):
        if x[0] > 2.0:
            raise RuntimeError("simulation diverged")
        return float((x[0] - 1.5) ** 2 + (x[1] - 0.5) ** 2)

    result = method(f, [1.0, 1.0], budget=2000)
    assert math.isfinite(result.value)
    assert result.value < 1e-6


@settings(max_examples=25, deadline=None)
@given(st.integers(1, 120), st.sampled_from(METHODS), st.integers(1, 5))
def test_no_baseline_spends_more_than_its_budget(budget, method, n):
    calls = []

    def f(x):
        calls.append(1)
        return float(np.sum(np.cos(3 * x) + x**2))

    result = method(f, np.linspace(-1, 1, n), budget=budget)
    assert len(calls) == result.evaluations <= budget


def test_golden_section_shrinks_by_the_golden_ratio():
    # Kiefer (1953): after k evaluations the bracket is (b - a) / phi^(k - 1) wide, with the
    # golden ratio phi = (1 + sqrt 5) / 2 = 1.6180339887..., so reaching a width of 2 tol from 3
    # takes 1 + log(3 / 2e-8) / log(phi) evaluations.
    phi = (1.0 + math.sqrt(5.0)) / 2.0
    x, fx, spent = baselines.golden_section(
        lambda t: (t - 1.0) ** 2, 0.0, 3.0, tolerance=lambda t: 1e-8
    )
    expected = 1 + math.log(3.0 / 2e-8) / math.log(phi)
    assert abs(spent - expected) <= 2
    assert abs(x - 1.0) <= 2e-8


def test_first_steps_match_the_search():
    # The baselines start with the same first step as directional's search: a tenth of the
    # problem's size in each coordinate (directional.method.search.FIRST_STEP in scaled units).
    from directional.method.search import FIRST_STEP

    assert FIRST_STEP == 0.1
    assert baselines.first_steps(np.array([-1.2, 0.0])).tolist() == [0.12, 0.1]
