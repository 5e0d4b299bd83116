"""Least squares through the driver (`directional.method.leastsquares`) and the numdifftools adapter
(`directional.method.differences`), driven here with a plain function and no driver.

Reference answers: a linear residual ``r(x) = A x - b`` has the Jacobian ``A`` (exactly, for any
difference step, up to rounding) and the least-squares solution numpy's ``lstsq`` gives (a
general-purpose reference library); ``y = a exp(-k t)`` sampled without noise has the zero-residual
solution it was sampled from (analytic).  In scaled coordinates ``u`` a column of the Jacobian is
the user column times the scale ``s`` (``dx/du = s``; `directional.method.space`).
"""

from __future__ import annotations

import doctest
import math

import numpy as np
import pytest

import directional as dl
from directional.method import differences, leastsquares
from directional.method.leastsquares import (
    SumOfSquares,
    central_jacobian,
    extrapolated_jacobian,
    forward_jacobian,
    sum_of_squares,
)
from directional.method.space import build_space

A = np.array([[1.0, 2.0], [3.0, -1.0], [0.5, 0.5], [-2.0, 1.0]])
B = np.array([1.0, 2.0, 0.0, -1.0])


def linear(x):
    return A @ x - B


def drive(generator, objective):
    """Evaluate every batch the generator yields with ``objective``; return what it returns."""
    try:
        batch = next(generator)
        while True:
            batch = generator.send(np.array([objective(x.copy()) for x in batch.points]))
    except StopIteration as stop:
        return stop.value


# ----------------------------------------------------------------------------- the objective


def test_sum_of_squares_of_a_result():
    assert sum_of_squares([3.0, 4.0]) == 25.0  # 3-4-5 triangle
    assert math.isnan(sum_of_squares("text"))
    assert math.isnan(sum_of_squares(None))


def test_the_objective_keeps_each_vector_and_divides_by_sigma():
    squares = SumOfSquares(linear, np.array([1.0, 2.0, 1.0, 4.0]))
    x = np.array([1.0, 1.0])
    r = (A @ x - B) / np.array([1.0, 2.0, 1.0, 4.0])  # (2, 0, 1, 0) / sigma = (2, 0, 1, 0)
    assert r.tolist() == [2.0, 0.0, 1.0, 0.0]
    assert squares(x) == 5.0
    assert squares.vector(x) == pytest.approx(r)
    assert squares.recomputed == 0 and squares.size == 4


def test_a_vector_not_seen_is_computed_once_and_counted():
    calls = []
    squares = SumOfSquares(lambda x: calls.append(1) or linear(x), None)
    x = np.array([0.5, -0.5])
    assert squares.vector(x) == pytest.approx(linear(x))  # as on a journal's replay
    assert squares.vector(x) == pytest.approx(linear(x))
    assert len(calls) == 1 and squares.recomputed == 1


def test_a_failing_residual_function_gives_no_vector():
    def failing(x):
        raise RuntimeError("solver diverged")

    assert SumOfSquares(failing, None).vector(np.zeros(2)) is None


@pytest.mark.parametrize(
    ("results", "message"),
    [
        ([None], "flat array of real numbers, got None"),
        ([[[1.0, 2.0]]], "flat array"),
        ([[]], "flat array"),
        (["abc"], "flat array"),
    ],
)
def test_residuals_that_are_not_one_flat_array_are_an_objective_error(results, message):
    answers = iter(results)
    squares = SumOfSquares(lambda x: next(answers), None)
    with pytest.raises(dl.ObjectiveError, match=message):
        for _ in results:
            squares(np.zeros(1))


def test_a_vector_of_another_length_fails_that_evaluation_only():
    # a failed evaluation, not an ObjectiveError (which would end the run)
    answers = iter([[1.0, 2.0], [1.0, 2.0, 3.0], [3.0, 4.0]])
    squares = SumOfSquares(lambda x: next(answers), None)
    assert squares(np.zeros(1)) == 5.0
    with pytest.raises(leastsquares.WrongLength, match="had 2 entries and now have 3") as caught:
        squares(np.ones(1))
    assert not isinstance(caught.value, dl.ObjectiveError)
    assert squares(np.full(1, 2.0)) == 25.0  # 3-4-5 triangle
    assert SumOfSquares(lambda x: [1.0, 2.0, 3.0], None).vector(np.zeros(1)) is not None


def test_sigma_of_another_length_fails_the_evaluation():
    with pytest.raises(leastsquares.WrongLength, match="4 entries but sigma has 3"):
        SumOfSquares(linear, np.ones(3))(np.zeros(2))


def test_one_sigma_divides_every_residual():
    r = SumOfSquares(linear, np.array(2.0))
    assert r(np.ones(2)) == pytest.approx(np.sum((A @ np.ones(2) - B) ** 2) / 4.0)


# ----------------------------------------------------------------------------- Jacobians


@pytest.mark.parametrize(
    "u",
    [np.zeros(2), np.array([-0.25, 0.5])],  # inside; on the lower bound of x0, the upper of x1
    ids=["central", "one-sided"],
)
def test_the_difference_jacobians_of_a_linear_residual_are_its_matrix(u):
    space = build_space([1.0, 0.0], [(0.0, 4.0), (-1.0, 1.0)])  # scales 4 and 2
    squares = SumOfSquares(linear, None)
    squares(space.to_user(u))
    jacobian = drive(central_jacobian(space, squares, u), squares)
    assert jacobian == pytest.approx(A * np.array([4.0, 2.0]), rel=1e-7, abs=1e-7)
    r = squares.vector(space.to_user(u))
    forward = drive(forward_jacobian(space, squares, u, r, 1e-7), squares)
    assert forward == pytest.approx(A * np.array([4.0, 2.0]), rel=1e-6, abs=1e-6)


def test_the_central_jacobian_asks_for_two_points_per_free_column_and_one_at_a_bound():
    # x0 on its lower bound (one point, forward), x1 inside (two points): three in one batch
    space = build_space([0.0, 0.0], [(0.0, 4.0), (-1.0, 1.0)])
    squares = SumOfSquares(linear, None)
    squares(space.start)
    generator = central_jacobian(space, squares, np.zeros(2))
    batch = next(generator)
    with pytest.raises(StopIteration) as done:
        generator.send(np.array([squares(x.copy()) for x in batch.points]))
    assert batch.points.shape == (3, 2) and batch.purpose == "jacobian"
    assert np.all(batch.points[:, 0] >= 0.0)  # never below the bound
    assert done.value.value == pytest.approx(A * np.array([4.0, 2.0]), rel=1e-7)


def test_a_failed_end_of_a_column_gives_a_one_sided_difference():
    # a linear residual fails for x0 > 0 (invented): the columns come from the other side
    space = build_space([0.0, 0.0])
    squares = SumOfSquares(lambda x: linear(x) if x[0] <= 0.0 else [math.nan] * 4, None)
    squares(space.start)
    central = drive(central_jacobian(space, squares, np.zeros(2)), squares)
    assert central == pytest.approx(A, rel=1e-6)  # scales 1: the user's Jacobian
    r = squares.vector(space.start)
    forward = drive(forward_jacobian(space, squares, np.zeros(2), r, 1e-7), squares)
    assert forward == pytest.approx(A, rel=1e-6)


def test_a_failed_point_gives_no_difference_jacobian():
    space = build_space([0.0, 0.0])  # both sides of x0 = 0 fail (invented)
    squares = SumOfSquares(lambda x: linear(x) if x[0] == 0.0 else [math.nan] * 4, None)
    squares(space.start)
    assert drive(central_jacobian(space, squares, np.zeros(2)), squares) is None
    r = squares.vector(space.start)
    assert drive(forward_jacobian(space, squares, np.zeros(2), r, 1e-7), squares) is None


def test_the_extrapolated_jacobian_is_exact_on_a_linear_residual_and_zero_off_the_free_columns():
    space = build_space([1.0, 0.0], [(0.0, 4.0), (-1.0, 1.0)])
    squares = SumOfSquares(linear, None)
    squares(space.start)
    u = np.zeros(2)
    full = drive(extrapolated_jacobian(space, squares, u, np.array([True, True])), squares)
    assert full == pytest.approx(A * np.array([4.0, 2.0]), rel=1e-9, abs=1e-9)
    one = drive(extrapolated_jacobian(space, squares, u, np.array([False, True])), squares)
    assert one[:, 0].tolist() == [0.0] * 4 and one[:, 1] == pytest.approx(2.0 * A[:, 1], rel=1e-9)


@pytest.mark.filterwarnings("ignore:All-NaN slice")  # numdifftools, on the nan it was given
def test_a_failed_stencil_point_gives_no_extrapolated_jacobian():
    space = build_space([0.0, 0.0])
    squares = SumOfSquares(lambda x: linear(x) if x[0] <= 0.0 else [math.nan] * 4, None)
    squares(space.start)
    assert drive(extrapolated_jacobian(space, squares, np.zeros(2), np.ones(2, bool)), squares) is None


def test_the_adapter_records_the_stencil_then_reads_it_back():
    recorder = differences.Recorder(np.zeros(1))
    steps = np.array([1e-2, 1e-2])
    differences.jacobian(recorder, steps)  # first pass: only records
    assert len(recorder.missing) == 2 * 2 * 3 + 1  # two points per coordinate, three steps, centre
    for key, v in recorder.missing.items():
        recorder.known[key] = np.array([3.0 * v[0] - 2.0 * v[1]])
    recorder.missing = {}
    assert differences.jacobian(recorder, steps) == pytest.approx(np.array([[3.0, -2.0]]), abs=1e-10)
    assert not recorder.missing


def test_docstring_examples():
    assert doctest.testmod(leastsquares).failed == 0
    assert doctest.testmod(differences).failed == 0
