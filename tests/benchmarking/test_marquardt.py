"""The textbook Levenberg–Marquardt baseline against NIST's certified results and analysis.

NIST StRD nonlinear regression files in tests/reference/nist-strd (their README says where every
number came from): data, NIST's two starts, certified estimates and residual sum of squares.
"""

from __future__ import annotations

import numpy as np
import pytest
from conftest import REFERENCE
from hypothesis import given, settings
from hypothesis import strategies as st

from directional.benchmarking import marquardt
from directional.benchmarking import nist as nist_files

NIST = REFERENCE / "nist-strd"
SETS = ["Misra1a", "Chwirut2", "DanWood", "Misra1b", "Kirby2", "Hahn1", "BoxBOD"]
# The one run the textbook method misses: see test_boxbod_from_the_first_start_stops_on_the_plateau
MISSED = {("BoxBOD", "start1")}
SOLVED = [(n, s) for n in SETS for s in ("start1", "start2") if (n, s) not in MISSED]


def nist(name: str) -> tuple[dict, nist_files.Residuals]:
    """The NIST file ``name`` and its residuals ``f(x; b) - y`` (`directional.benchmarking.nist`)."""
    return nist_files.read(NIST / f"{name}.toml")


@pytest.mark.parametrize(("name", "start"), SOLVED)
def test_reaches_the_certified_sum_of_squares(name, start):
    # Source: NIST StRD nonlinear regression, data set `name`, certified residual sum of squares.
    data, residuals = nist(name)
    fit = marquardt.levenberg_marquardt(residuals, data[start], budget=1000)
    certified = data["residual_sum_of_squares"]
    assert fit.value == pytest.approx(certified, rel=1e-6), f"NIST StRD {name} {start}"
    assert fit.reason in ("relative reduction", "relative step")
    assert fit.evaluations == fit.values.size <= 1000
    reached = fit.evaluations_to(certified * (1.0 + 1e-6))
    assert reached is not None and reached <= fit.evaluations
    assert fit.values[reached - 1] <= certified * (1.0 + 1e-6)


@pytest.mark.parametrize(("name", "start"), SOLVED)
def test_tight_tolerances_give_the_certified_estimates(name, start):
    # Source: NIST StRD nonlinear regression, data set `name`, certified estimates.
    data, residuals = nist(name)
    fit = marquardt.levenberg_marquardt(residuals, data[start], budget=1000,
                                        ftol=1e-14, xtol=1e-14)
    assert fit.point == pytest.approx(data["certified_estimates"], rel=1e-6)


def test_boxbod_from_the_first_start_stops_on_the_plateau():
    # NIST StRD BoxBOD, start 1 (b1 = b2 = 1): the steps drive b2 so far that exp(-b2 x) = 0 at
    # every observation, the b2 column of the Jacobian vanishes and b1 settles at the mean of y.
    # There J^T f = 0 exactly, Moré's orthogonality test stops the run, and S is the sum of
    # squared deviations from the mean (analytic), far above NIST's certified 1168.0088766.
    data, residuals = nist("BoxBOD")
    fit = marquardt.levenberg_marquardt(residuals, data["start1"], budget=1000)
    y = np.array(data["y"])
    assert fit.reason == "orthogonality"
    assert fit.value == pytest.approx(float(np.sum((y - y.mean()) ** 2)), rel=1e-9)
    assert fit.point[0] == pytest.approx(y.mean(), rel=1e-9)
    assert fit.value > 8.0 * data["residual_sum_of_squares"]


def test_rosenbrock_as_residuals():
    # Moré, Garbow & Hillstrom 1981, problem 1: f1 = 10 (x2 - x1^2), f2 = 1 - x1, start
    # (-1.2, 1), minimum 0 at (1, 1).
    fit = marquardt.levenberg_marquardt(
        lambda x: np.array([10.0 * (x[1] - x[0] ** 2), 1.0 - x[0]]), [-1.2, 1.0], budget=500)
    assert fit.value < 1e-20
    assert fit.point == pytest.approx([1.0, 1.0], abs=1e-10)
    assert fit.reason in ("zero residual", "relative reduction", "relative step")


def test_a_linear_problem_is_solved_by_the_first_gauss_newton_step():
    # Linear least squares (analytic): the first step with lam = 0 lands on the solution of
    # numpy.linalg.lstsq (a general-purpose reference library), so one Jacobian (p = 3
    # evaluations), the start and the trial point suffice to reach it.
    rng = np.random.default_rng(7)
    A, b = rng.normal(size=(12, 3)), rng.normal(size=12)
    solution = np.linalg.lstsq(A, b, rcond=None)[0]
    fit = marquardt.levenberg_marquardt(lambda x: A @ x - b, np.ones(3), budget=200)
    assert fit.point == pytest.approx(solution, rel=1e-6)
    assert fit.evaluations_to(float(np.sum((A @ solution - b) ** 2)) * (1 + 1e-9)) == 1 + 3 + 1


def test_the_budget_counts_the_jacobians():
    data, residuals = nist("Misra1a")
    fit = marquardt.levenberg_marquardt(residuals, data["start1"], budget=10)
    assert fit.reason == "budget"
    assert fit.evaluations == 10  # start (1), Jacobian (2), then trial steps and a second Jacobian


def test_a_failed_evaluation_is_stepped_around():
    # The residuals of MGH 1981 problem 1 from its standard start (minimum 0 at (1, 1)), refusing
    # any point with x2 < -2: the first Gauss-Newton trial lands there (x2 = -3.84), counts as an
    # infinite S, the radius shrinks, and the run still converges.
    def residuals(x):
        if x[1] < -2.0:
            raise RuntimeError("outside the model's range")
        return np.array([10.0 * (x[1] - x[0] ** 2), 1.0 - x[0]])

    fit = marquardt.levenberg_marquardt(residuals, [-1.2, 1.0], budget=1000)
    assert np.isinf(fit.values).sum() >= 1
    assert fit.point == pytest.approx([1.0, 1.0], abs=1e-8)


def test_a_start_that_cannot_be_evaluated_is_refused():
    with pytest.raises(ValueError, match="start"):
        marquardt.levenberg_marquardt(lambda x: np.array([np.nan]), [1.0], budget=10)


@settings(max_examples=60, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), radius=st.floats(1e-3, 1e3))
def test_the_damped_step_solves_marquardts_equations(seed, radius):
    # Marquardt (1963): the step is (J^T J + lam D^T D) s = -J^T f with lam >= 0; lam > 0 only when
    # the Gauss-Newton step is longer than the radius, and then ||D s|| is within 10 % of it
    # (Moré 1978, Algorithm 5.5).  Checked with numpy.linalg.solve.
    rng = np.random.default_rng(seed)
    J, f = rng.normal(size=(6, 3)) * rng.uniform(0.1, 10.0, size=3), rng.normal(size=6)
    D = rng.uniform(0.1, 10.0, size=3)
    step, lam = marquardt.trust_region_step(J, f, D, radius)
    expected = np.linalg.solve(J.T @ J + lam * np.diag(D * D), -J.T @ f)
    assert step == pytest.approx(expected, rel=1e-6, abs=1e-12)
    length = float(np.linalg.norm(D * step))
    if lam > 0.0:
        assert abs(length - radius) <= 0.1 * radius * (1 + 1e-9)
    else:
        assert length <= 1.1 * radius * (1 + 1e-9)


def test_the_forward_jacobian_of_a_linear_map_is_its_matrix():
    # Forward differences are exact for a linear map up to rounding (analytic).
    A = np.array([[1.0, 2.0], [3.0, -4.0], [0.5, 0.0]])
    calls = []

    def counted(x):
        calls.append(x)
        return A @ x

    x = np.array([2.0, 0.0])
    J = marquardt.forward_jacobian(counted, x, A @ x)
    assert J == pytest.approx(A, rel=1e-6)
    assert len(calls) == 2
