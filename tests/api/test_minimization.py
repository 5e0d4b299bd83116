"""`minimize` against published test problems and analytic minima, and its bad-input errors."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import directional as dl


def rosenbrock(x):
    # Rosenbrock (1960); Moré, Garbow & Hillstrom 1981 problem 1 as a sum of squares.
    return (10.0 * (x[1] - x[0] ** 2)) ** 2 + (1.0 - x[0]) ** 2


def helical_valley(x):
    # Moré, Garbow & Hillstrom 1981 problem 7 (Fletcher & Powell 1963).
    if x[0] == 0.0:
        theta = math.copysign(0.25, x[1])
    else:
        theta = math.atan(x[1] / x[0]) / (2.0 * math.pi) + (0.5 if x[0] < 0 else 0.0)
    r1 = 10.0 * (x[2] - 10.0 * theta)
    r2 = 10.0 * (math.hypot(x[0], x[1]) - 1.0)
    return r1**2 + r2**2 + x[2] ** 2


def powell_singular(x):
    # Moré, Garbow & Hillstrom 1981 problem 13 (Powell 1962).
    return (
        (x[0] + 10 * x[1]) ** 2
        + 5 * (x[2] - x[3]) ** 2
        + (x[1] - 2 * x[2]) ** 4
        + 10 * (x[0] - x[3]) ** 4
    )


def test_rosenbrock_from_the_standard_start(mgh_reference):
    ref = mgh_reference[1]  # Moré, Garbow & Hillstrom 1981, problem 1
    sol = dl.minimize(rosenbrock, ref["start"], check=False)
    assert sol.stop is dl.Stop.CONVERGED
    assert sol.point == pytest.approx(ref["xmin"], abs=1e-5)
    assert sol.value == pytest.approx(ref["fmin"], abs=1e-10)


def test_helical_valley(mgh_reference):
    ref = mgh_reference[7]  # Moré, Garbow & Hillstrom 1981, problem 7
    sol = dl.minimize(helical_valley, ref["start"], check=False)
    assert sol.point == pytest.approx(ref["xmin"], abs=1e-5)
    assert sol.value == pytest.approx(ref["fmin"], abs=1e-9)


def test_powell_singular_function(mgh_reference):
    ref = mgh_reference[13]  # Moré, Garbow & Hillstrom 1981, problem 13
    sol = dl.minimize(powell_singular, ref["start"], check=False)
    # The Hessian is singular at the minimum, so the point converges only like f^(1/4).
    assert sol.value == pytest.approx(ref["fmin"], abs=1e-8)
    assert sol.point == pytest.approx([0, 0, 0, 0], abs=1e-2)


@settings(max_examples=25, deadline=None)
@given(
    n=st.integers(2, 6),
    log_condition=st.floats(0, 4),
    seed=st.integers(0, 2**32 - 1),
)
def test_convex_quadratics_reach_the_analytic_minimizer(n, log_condition, seed):
    # f = (x - c)' A (x - c) / 2 with A positive definite: the minimizer is c (analytic).
    rng = np.random.default_rng(seed)
    q, _ = np.linalg.qr(rng.normal(size=(n, n)))
    a = q @ np.diag(np.logspace(0, log_condition, n)) @ q.T
    c = rng.uniform(-2, 2, size=n)
    sol = dl.minimize(lambda x: 0.5 * (x - c) @ a @ (x - c), np.zeros(n), check=False)
    assert sol.stop is dl.Stop.CONVERGED
    assert np.max(np.abs(sol.point - c)) < 1e-4 * 10 ** (log_condition / 2)


def test_bounds_hold_and_the_active_bound_is_reported():
    # The unconstrained minimum (3, -1) lies outside x0 <= 2: the constrained one is (2, -1)
    # (analytic, convex quadratic).
    sol = dl.minimize(
        lambda x: (x[0] - 3) ** 2 + (x[1] + 1) ** 2, [0.0, 0.0], bounds=[(-5, 2), (-5, 5)],
        check=False,
    )
    assert sol.point == pytest.approx([2.0, -1.0], abs=1e-6)
    assert sol.active == ("x0",)
    assert all(-5 <= e.point[0] <= 2 for e in sol.history)


def test_log_scale_parameter_spanning_decades():
    # A rate constant whose best value is 1e-3, searched from 1 in log coordinates: the misfit is
    # quadratic in log10(k) (invented test function, analytic minimum k = 1e-3, tau = 50).
    def misfit(x):
        return (math.log10(x[0]) + 3.0) ** 2 + (x[1] - 50.0) ** 2 / 100.0

    start = [dl.Parameter("k", 1.0, 1e-6, 1e2, scale="log", unit="1/s"),
             dl.Parameter("tau", 10.0, 1.0, 100.0, unit="s")]
    sol = dl.minimize(misfit, start, check=False)
    assert sol.named["k"] == pytest.approx(1e-3, rel=1e-5)
    assert sol.named["tau"] == pytest.approx(50.0, abs=1e-4)


def test_failures_on_part_of_the_space_are_avoided():
    # Rosenbrock's minimum (1, 1) is kept, but x0 > 1.5 raises and x1 < -0.5 gives NaN.
    def guarded(x):
        if x[0] > 1.5:
            raise RuntimeError("solver diverged")
        if x[1] < -0.5:
            return math.nan
        return rosenbrock(x)

    sol = dl.minimize(guarded, [-1.2, 1.0], check=False)
    assert sol.point == pytest.approx([1.0, 1.0], abs=1e-5)
    assert all(e.value == math.inf for e in sol.history if e.status != "ok")


def test_budget_is_respected_exactly():
    sol = dl.minimize(rosenbrock, [-1.2, 1.0], budget=37, check=False)
    assert sol.stop is dl.Stop.BUDGET
    assert sol.evaluations == 37
    assert sol.value == min(e.value for e in sol.history)


def test_ctrl_c_returns_the_best_point_so_far():
    calls = []

    def interrupted(x):
        calls.append(1)
        if len(calls) == 25:
            raise KeyboardInterrupt
        return rosenbrock(x)

    sol = dl.minimize(interrupted, [-1.2, 1.0], check=False)
    assert sol.stop is dl.Stop.INTERRUPTED
    assert sol.evaluations == 24
    assert sol.value == min(e.value for e in sol.history)


def test_the_objective_may_mutate_its_argument():
    def vandal(x):
        value = rosenbrock(x)
        x[:] = 1e9
        return value

    sol = dl.minimize(vandal, [-1.2, 1.0], check=False)
    assert sol.point == pytest.approx([1.0, 1.0], abs=1e-5)


def test_exact_repeats_are_answered_from_the_cache():
    points = []
    sol = dl.minimize(lambda x: points.append(x.tobytes()) or rosenbrock(x), [-1.2, 1.0],
                      check=False)
    assert len(points) == len(set(points)) == sol.evaluations


def test_summary_is_a_readable_table():
    sol = dl.minimize(rosenbrock, [-1.2, 1.0], names=["a", "b"], check=False)
    text = sol.summary()
    assert "converged" in text and "a " in text and "b " in text
    assert sol.named == {"a": pytest.approx(1.0, abs=1e-5), "b": pytest.approx(1.0, abs=1e-5)}


@pytest.mark.parametrize(
    "kwargs, words",
    [
        (dict(start=[math.nan, 1.0]), "start"),
        (dict(start=[math.inf, 1.0]), "start"),
        (dict(start="12"), "start"),
        (dict(start=[[1.0, 2.0]]), "shape"),
        (dict(start=[1.5, 2.0], bounds=[(0, 1), (0, 3)]), "'x0'.*outside"),
        (dict(start=[0.5, 2.0], bounds=[(1, 0), (0, 3)]), "lower must be below upper"),
        (dict(start=[0.5, 2.0], bounds=[(0, 1)]), "bounds has 1"),
        (dict(start=[0.5, 2.0], names=["a", "a"]), "unique"),
        (dict(start=[0.5, 2.0], names=["a", "b c"]), "identifier"),
        (dict(start=[0.5, 2.0], budget=2), "budget"),
        (dict(start=[0.5, 2.0], budget=10.5), "budget"),
        (dict(start=[0.5, 2.0], point_tolerance=0.0), "point_tolerance"),
        (dict(start=[0.5, 2.0], value_tolerance=-1.0), "value_tolerance"),
    ],
)
def test_bad_input_is_a_problem_error_naming_the_culprit(kwargs, words):
    calls = []
    with pytest.raises(dl.ProblemError, match=words):
        dl.minimize(lambda x: calls.append(1) or 0.0, **kwargs)
    assert calls == []  # raised before any evaluation


def test_parameter_records_validate_themselves():
    with pytest.raises(dl.ProblemError, match="'k'.*positive lower bound"):
        dl.Parameter("k", 1.0, -1.0, 2.0, scale="log")


def test_a_non_callable_objective_is_a_problem_error():
    with pytest.raises(dl.ProblemError, match="callable"):
        dl.minimize(42, [1.0])


@pytest.mark.parametrize("bad", [None, "1.0", 1j, np.array([1.0, 2.0])])
def test_a_non_number_from_the_objective_is_an_objective_error(bad):
    with pytest.raises(dl.ObjectiveError, match="objective must return"):
        dl.minimize(lambda x: bad, [1.0], check=False)


def test_a_failing_start_point_is_an_objective_error():
    def broken(x):
        raise OSError("licence server unreachable")

    with pytest.raises(dl.ObjectiveError, match="licence server unreachable"):
        dl.minimize(broken, [1.0, 2.0], check=False)


def test_the_journal_identity_is_made_only_when_read_and_is_the_same_when_it_is():
    # a run without a journal never pays for its identity; read, it is what run_identity makes
    # (and what the journal stores, through canonical) - common practice, no source
    from directional.api.options import minimize_options, search_settings
    from directional.method.space import build_space
    from directional.run.identity import Deferred, canonical, run_identity

    options = minimize_options(lambda x: float(x @ x), np.ones(3), check="quick", escapes=2)
    assert isinstance(options.identity, Deferred)
    assert options.identity._made is None
    direct = run_identity(
        "minimize", build_space(np.ones(3)).parameters, search_settings(1e-6, 1e-10),
        point_tolerance=1e-6, value_tolerance=1e-10, check="quick", escapes=2, noise=None,
    )
    assert canonical(options.identity) == canonical(direct)
    assert dict(options.identity) == direct and options.identity["kind"] == "minimize"
