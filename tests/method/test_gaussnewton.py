"""The derivative-free Gauss–Newton trust-region steps (`directional.method.gaussnewton`), driven
with a plain function and no driver.

Reference answers: a linear residual ``r(x) = A x - b`` has the least-squares solution numpy's
``lstsq`` gives (a general-purpose reference library) and the exact Jacobian ``A``;
``y = a exp(-k t)`` sampled without noise has the zero-residual solution it was sampled from
(analytic); the trust-region subproblem of an identity Jacobian is solved by hand (analytic).
"""

from __future__ import annotations

import doctest

import numpy as np
import pytest
from hypothesis import example, given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from directional.method import gaussnewton
from directional.method.gaussnewton import gauss_newton, trust_region_step
from directional.method.leastsquares import SumOfSquares
from directional.method.space import build_space
from directional.records import Halt, Purpose, Stop

A = np.array([[1.0, 2.0], [3.0, -1.0], [0.5, 0.5], [-2.0, 1.0]])
B = np.array([1.0, 2.0, 0.0, -1.0])


def linear(x):
    return A @ x - B


def drive(generator, objective, purposes=None):
    """Evaluate every batch with ``objective``; return what the generator returns."""
    try:
        batch = next(generator)
        while True:
            if purposes is not None:
                purposes.extend([batch.purpose] * len(batch.points))
            batch = generator.send(np.array([objective(x.copy()) for x in batch.points]))
    except StopIteration as stop:
        return stop.value


def test_a_linear_residual_is_solved_in_one_step_and_confirmed_on_a_central_jacobian():
    space = build_space([5.0, -5.0])
    squares = SumOfSquares(linear, None)
    value = squares(space.start)
    purposes = []
    done = drive(gauss_newton(space, squares, np.zeros(2), value), squares, purposes)
    best, *_ = np.linalg.lstsq(A, B, rcond=None)  # numpy's reference solution
    assert done.stop is Stop.CONVERGED
    assert space.to_user(done.point) == pytest.approx(best, rel=1e-9, abs=1e-12)
    r = A @ best - B
    assert done.value == pytest.approx(float(r @ r), rel=1e-12)
    # forward Jacobian (2), the Gauss-Newton step (1), the central Jacobian that confirms it (4)
    assert purposes == ["jacobian"] * 2 + ["gauss-newton"] + ["jacobian"] * 4
    assert done.jacobian_kind == "central"
    assert done.jacobian == pytest.approx(A * space.scale, rel=1e-8)


def test_an_exponential_decay_is_fitted_to_exact_data():
    # y = 2 exp(-0.7 t) sampled exactly: the zero-residual solution (2, 0.7) (analytic)
    t = np.linspace(0.0, 3.0, 12)
    y = 2.0 * np.exp(-0.7 * t)
    space = build_space([1.0, 0.3], [(0.1, 10.0), (0.01, 5.0)])
    squares = SumOfSquares(lambda p: p[0] * np.exp(-p[1] * t) - y, None)
    value = squares(space.start)
    purposes = []
    done = drive(gauss_newton(space, squares, np.zeros(2), value), squares, purposes)
    assert done.stop is Stop.CONVERGED
    assert space.to_user(done.point) == pytest.approx([2.0, 0.7], rel=1e-8)
    assert done.value < 1e-20
    # secant updates carry the Jacobian between steps: fewer Jacobian evaluations than
    # a finite-difference Jacobian at every step would cost (2 per step)
    assert purposes.count("jacobian") < 2 * purposes.count("gauss-newton")


def test_a_parameter_the_gradient_pushes_out_of_its_bounds_is_held_there():
    # r = (x0 - 3, x1 - 1): unconstrained minimum (3, 1); with x0 <= 2 the minimum is (2, 1)
    space = build_space([1.0, 0.0], [(0.0, 2.0), (-5.0, 5.0)])
    squares = SumOfSquares(lambda x: np.array([x[0] - 3.0, x[1] - 1.0]), None)
    value = squares(space.start)
    done = drive(gauss_newton(space, squares, np.zeros(2), value), squares)
    assert done.stop is Stop.CONVERGED
    assert space.to_user(done.point) == pytest.approx([2.0, 1.0], rel=1e-10)
    assert done.value == pytest.approx(1.0, rel=1e-10)


def test_a_halt_from_the_driver_returns_the_best_point_so_far():
    space = build_space([5.0, -5.0])
    squares = SumOfSquares(linear, None)
    value = squares(space.start)
    generator = gauss_newton(space, squares, np.zeros(2), value)
    batch = next(generator)
    while batch.purpose != Purpose.GAUSS_NEWTON:
        batch = generator.send(np.array([squares(x.copy()) for x in batch.points]))
    with pytest.raises(StopIteration) as stop:
        generator.throw(Halt(Stop.BUDGET, "the budget of 3 evaluations is spent"))
    done = stop.value.value
    assert done.stop is Stop.BUDGET and "budget" in done.reason
    assert done.value == value and np.all(done.point == 0.0)


def test_the_trust_region_step_of_an_identity_jacobian():
    # min |r + p|² with |p| <= radius: p = -r when it fits, else -r scaled to the radius
    r = np.array([-3.0, -4.0])
    assert trust_region_step(np.eye(2), r, np.ones(2), 10.0) == pytest.approx([3.0, 4.0])
    short = trust_region_step(np.eye(2), r, np.ones(2), 1.0)
    assert short == pytest.approx([0.6, 0.8], rel=0.1)
    assert np.linalg.norm(short) == pytest.approx(1.0, rel=0.1)


@settings(max_examples=60, deadline=None)
@given(
    jacobian=hnp.arrays(float, (5, 3), elements=st.floats(-10.0, 10.0)),
    r=hnp.arrays(float, 5, elements=st.floats(-10.0, 10.0)),
    d=hnp.arrays(float, 3, elements=st.floats(0.1, 10.0)),
    radius=st.floats(1e-3, 1e3),
)
@example(  # values near underflow (found by hypothesis): lambda is solved in units of sigma²
    jacobian=np.full((5, 3), 9.08321172e-131), r=np.full(5, 9.08321172e-131), d=np.ones(3), radius=0.5
)
def test_the_trust_region_step_stays_in_the_region_and_never_raises_the_model(jacobian, r, d, radius):
    p = trust_region_step(jacobian, r, d, radius)
    assert np.linalg.norm(d * p) <= 1.1 * radius + 1e-12
    assert np.sum((r + jacobian @ p) ** 2) <= np.sum(r**2) * (1.0 + 1e-12) + 1e-12


def test_docstring_examples():
    assert doctest.testmod(gaussnewton).failed == 0


def test_the_noise_of_a_sum_of_squares_matches_its_sampled_spread():
    # the variance of |r + e|² for normal e: 4|r|²sigma² + 2m sigma⁴ (moments of a noncentral
    # chi-square, Johnson, Kotz & Balakrishnan 1995, ch. 29); checked against numpy's sampling
    rng = np.random.default_rng(5)
    r, sigma = np.array([0.3, -0.2, 0.1, 0.05]), 0.02
    samples = np.sum((r + sigma * rng.standard_normal((200_000, r.size))) ** 2, axis=1)
    expected = gaussnewton.value_noise(sigma, float(r @ r), r.size)
    assert float(np.std(samples)) == pytest.approx(expected, rel=0.02)
    # far from the minimum the same residual noise moves S ten times more (|r| ten times larger)
    assert gaussnewton.value_noise(sigma, 100 * float(r @ r), r.size) > 9 * expected


def test_the_residuals_noise_is_measured_along_a_line_and_the_steps_work_above_it():
    # Moré & Wild 2011: a difference table finds noise of standard deviation 0.01 added to each
    # residual of a smooth model (invented data); the steps then converge instead of stalling
    rng = np.random.default_rng(3)

    def noisy(x):
        return linear(x) + 0.01 * rng.standard_normal(B.size)

    space = build_space([5.0, -5.0])
    squares = SumOfSquares(noisy, None)
    level = drive(gaussnewton.residual_noise_level(space, squares, np.zeros(2)), squares)
    assert 0.005 < level < 0.02
    start = squares(space.start)
    done = drive(gauss_newton(space, squares, np.zeros(2), start, notice=True), squares)
    best, *_ = np.linalg.lstsq(A, B, rcond=None)
    assert done.stop is Stop.CONVERGED and 0.005 < done.noise < 0.02  # noticed, not stalled
    # the least-squares estimate moves by about 0.01 / (smallest singular value of A) ≈ 0.004
    assert space.to_user(done.point) == pytest.approx(best, abs=0.03)


def test_a_fit_whose_minimum_lies_at_infinity_stalls_and_names_the_parameter_running_away():
    # analytic: S(a, b) = (a - 1)^2 + exp(-2 b) + 1/4 has no minimum; its infimum 1/4 lies at
    # a = 1, b -> +inf.  Without the runaway test the steps go on until the decrease is
    # rounding and then call the point converged.
    space = build_space([0.0, 1.0], names=["a", "b"])
    squares = SumOfSquares(lambda x: np.array([x[0] - 1.0, np.exp(-x[1]), 0.5]), None)
    purposes = []
    done = drive(gauss_newton(space, squares, np.zeros(2), squares(space.start)), squares, purposes)
    assert done.stop is Stop.STALLED
    assert done.reason.startswith("b running away") and "limit at infinity" in done.reason
    assert "0.25" in done.reason  # the extrapolated limit of S
    assert 10.0 < space.to_user(done.point)[1] < 30.0
    assert done.value == pytest.approx(0.25, rel=1e-6)
    assert len(purposes) < 100

