"""Where the direction-set search stops early: plateaus and lines that run out to infinity."""

from __future__ import annotations

import math

import numpy as np
import pytest

import directional as dl
from directional.method.directions import DirectionSet
from directional.method.search import _flat
from directional.testproblems import mgh


def test_box_leaves_the_plateau_it_reached_and_finds_the_published_minimum():
    # Box's three-dimensional function (Moré, Garbow & Hillstrom 1981, problem 12; Box 1966):
    # minimum 0 at (1, 10, 1) among others.  From the standard start (0, 10, 20) the first cycle's
    # line search along x2 follows the dying exponential exp(-t x2) out to x2 = 353, where the
    # value no longer depends on x2; the search used to stop there, "converged", at 0.0756.
    # Within 100 (n + 1) evaluations (the benchmark's budget) it must reach the minimum.
    p = mgh.problem(12)
    sol = dl.minimize(p, p.start, check=False, budget=100 * (p.n + 1))
    assert sol.stop is dl.Stop.CONVERGED
    assert sol.value < 1e-10
    assert sol.point == pytest.approx([1.0, 10.0, 1.0], abs=1e-4)


def test_box_from_a_hundred_times_its_start_is_not_called_a_minimum_on_its_plateau():
    # the same function from (0, 1000, 2000) (MGH 1981 take starts 10 and 100 times out): the
    # start itself lies on the plateau x2 > 100, where the values along x2 are equal to the last
    # bit.  The search does not probe a direction it never moved along (a parameter the
    # objective ignores looks the same: MGH 34), so it stops at the plateau's 0.0756 (the least
    # value with the x2 term gone, as this search measures it: not a published figure); the
    # default check must then say the point is flat, not a minimum.
    p = mgh.problem(12)
    sol = dl.minimize(p, 100.0 * np.asarray(p.start), budget=100 * (p.n + 1))
    assert sol.value == pytest.approx(0.0755887, rel=1e-5)
    assert sol.verdict is dl.Verdict.FLAT


def test_only_directions_whose_parabola_saw_rounding_are_flat():
    # common practice, no source: a parabola through points h apart whose curvature c changes
    # the value by c h² ~ eps |f| saw nothing but rounding; one that saw more is a real minimum
    # along its line, and a direction never measured (nan) is not judged
    eps = float(np.finfo(float).eps)
    directions = DirectionSet(
        vectors=np.eye(3),
        curvatures=np.array([2.0, 10.0 * eps / 1e-10, math.nan]),
        steps=np.full(3, 1e-5),
    )
    assert _flat(directions, 1.0) == [1]
    assert _flat(directions, 0.0) == []


def test_a_direction_travelled_far_without_upward_curvature_is_flat():
    # common practice, no source: equal values to the last bit give no positive curvature (nan);
    # such a direction is a plateau once the point has travelled along it (Box's x2 ran from 10
    # to 353 in Moré, Garbow & Hillstrom 1981, no. 12), not while it never moved (MGH 34's zero
    # columns)
    directions = DirectionSet(
        vectors=np.eye(3), curvatures=np.array([2.0, math.nan, math.nan]), steps=np.full(3, 1e-5)
    )
    assert _flat(directions, 1.0, np.array([0.5, 34.0, 0.0])) == [1]
    assert _flat(directions, 1.0, np.array([0.5, 0.5, 0.0])) == []
    assert _flat(directions, 1.0) == []


def test_a_variable_the_objective_ignores_costs_no_probes():
    # f = (x0 - 1)² (analytic): x1 does not enter, so it is flat for good; its line searches see
    # equal values, measure no curvature, and the search must not probe it to the end of REACH
    counted = []

    def f(x):
        counted.append(x.copy())
        return float((x[0] - 1.0) ** 2)

    sol = dl.minimize(f, [0.0, 0.0], check=False)
    assert sol.stop is dl.Stop.CONVERGED
    assert max(abs(x[1]) for x in counted) < 10.0


def test_a_plateau_without_lower_ground_is_said_so():
    # f = (x0 - 1)² + 1 + exp(-x1) (analytic): the infimum 1 is approached as x1 -> infinity, and
    # beyond x1 ≈ 37 the value is 1 to rounding.  The search stops there, "converged" (nothing
    # lower within reach), and the reason says that x1 is not determined
    sol = dl.minimize(lambda x: (x[0] - 1.0) ** 2 + 1.0 + math.exp(-x[1]), [0.0, 0.0], check=False)
    assert sol.stop is dl.Stop.CONVERGED
    assert sol.value == pytest.approx(1.0, abs=1e-12)
    assert sol.point[1] > 30.0
    assert "plateau" in sol.reason and "not determined" in sol.reason


def test_a_true_minimum_is_not_called_a_plateau():
    # Rosenbrock (MGH 1981, problem 1): a strict minimum 0 at (1, 1); no note
    p = mgh.problem(1)
    sol = dl.minimize(p, p.start, check=False)
    assert sol.stop is dl.Stop.CONVERGED and sol.value < 1e-10
    assert sol.reason == ""


@pytest.mark.parametrize("budget", [131, 135, 141, 144, 147, 150])
def test_a_run_halted_while_leaving_a_plateau_returns_its_lowest_value(budget):
    # Box (MGH 1981, problem 12) from its start probes its plateau from evaluation 130 on; a
    # budget that ends the run among the probes or the line search after them must still
    # return the lowest value evaluated (nothing computed is lost)
    p = mgh.problem(12)
    sol = dl.minimize(p, p.start, check=False, budget=budget)
    assert sol.stop is dl.Stop.BUDGET
    assert sol.value == min(e.value for e in sol.history)
