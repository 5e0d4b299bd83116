"""The verdict of a least-squares fit from JᵀJ (`directional.method.fitcheck`), driven here with a
plain function and no driver.

Reference answers are analytic: a linear residual ``r = A x - b`` has the Jacobian ``A`` exactly
(central differences are exact on it up to rounding), and in scaled coordinates a column is the
user column times the scale (`directional.method.space`); ``r = a b x - y`` determines only the
product ``a b`` (its Jacobian ``[b x, a x]`` has the null vector ``(a, -b)``); ``r = (a, b,
sqrt(k) (a b - 1))`` at 0 has ``JᵀJ = I`` and ``sum r_i ∇²r_i = -k [[0, 1], [1, 0]]`` (a saddle of
S for k > 1, unseen along the axes).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from directional.method.fitcheck import (
    ATTEMPTS,
    LARGE,
    FitCheck,
    Stencil,
    check_fit,
    judge,
    residual_noise,
)
from directional.method.leastsquares import SumOfSquares
from directional.method.space import build_space
from directional.records import Verdict

A = np.array([[1.0, 2.0], [3.0, -1.0], [0.5, 0.5], [-2.0, 1.0]])
B = np.array([1.0, 2.0, 0.0, -1.0])


def drive(generator, objective) -> tuple[FitCheck, int]:
    """Run the check with ``objective``; return its result and the evaluations it asked for."""
    count = 0
    try:
        batch = next(generator)
        while True:
            count += len(batch.points)
            batch = generator.send(np.array([objective(x.copy()) for x in batch.points]))
    except StopIteration as stop:
        return stop.value, count


def fit_at(residuals, start, point, bounds=None, **options) -> tuple[FitCheck, int, object]:
    space = build_space(start, bounds)
    squares = SumOfSquares(residuals, None)
    u0 = space.to_scaled(np.asarray(point, dtype=float))
    value = squares(space.to_user(u0))
    free = np.ones(space.size, dtype=bool) if bounds is None else ~space.on_bound(
        space.to_user(u0), 1e-5
    )
    found, count = drive(check_fit(space, squares, u0, value, free, **options), squares)
    return found, count, space


def test_a_linear_fit_is_a_minimum_with_the_exact_jacobian_for_2p_plus_1_evaluations():
    x = np.linalg.lstsq(A, B, rcond=None)[0]  # numpy's least-squares solution (reference library)
    found, count, space = fit_at(lambda p: A @ p - B, [1.0, 1.0], x)
    assert found.verdict is Verdict.MINIMUM and not found.large
    assert count == 2 * 2 + 1
    assert found.jacobian == pytest.approx(A * space.scale, rel=1e-8)  # dx/du = s
    assert found.gauss_newton == pytest.approx(2.0 * (A * space.scale).T @ (A * space.scale), rel=1e-8)
    assert found.ratio == pytest.approx(0.0, abs=1e-6)  # linear residuals have no curvature


def test_a_product_of_parameters_is_flat_along_the_null_vector():
    x = np.linspace(1.0, 5.0, 9)
    y = 6.0 * x
    found, count, space = fit_at(lambda p: p[0] * p[1] * x - y, [1.0, 1.0], [2.0, 3.0])
    assert found.verdict is Verdict.FLAT
    (direction,) = found.undetermined.T
    null = np.array([2.0, -3.0]) / space.scale  # (a, -b) in user coordinates, to scaled ones
    cosine = abs(direction @ null) / np.linalg.norm(null)
    assert cosine == pytest.approx(1.0, abs=1e-6)
    assert count <= ATTEMPTS * (2 * 2) + 1  # at most ATTEMPTS stencils


@pytest.mark.parametrize("k", [0.1, 4.0])
def test_the_residual_curvature_across_the_axes_is_measured(k):
    # JᵀJ = I (every direction equally soft), A = -k [[0, 1], [1, 0]]: zero along the axes, ∓k
    # along (1, ±1)/sqrt(2) (analytic, module docstring)
    found, count, _ = fit_at(
        lambda p: np.array([p[0], p[1], math.sqrt(k) * (p[0] * p[1] - 1.0)]),
        [1.0, 1.0], [0.0, 0.0], bounds=[(-3.0, 3.0), (-3.0, 3.0)],
    )
    assert found.ratio == pytest.approx(k, rel=1e-3)
    assert found.large is (k > LARGE)
    assert count == (2 * 2 + 1) * (2 if found.large else 1)  # large: measured again, GROWTH h


def test_the_residual_curvature_along_the_softest_direction_is_measured():
    # r = (a + b, (a - b) / 10, sqrt(3) (a b - 1)) at 0: JᵀJ = [[1.01, 0.99], [0.99, 1.01]] is
    # softest along (1, -1)/sqrt(2) (eigenvalue 0.02), where A = -3 [[0, 1], [1, 0]] gives +3:
    # q = 3 / 0.02 = 150 (analytic); the axes see A = 0
    found, _, _ = fit_at(
        lambda p: np.array([p[0] + p[1], 0.1 * (p[0] - p[1]), math.sqrt(3.0) * (p[0] * p[1] - 1.0)]),
        [1.0, 1.0], [0.0, 0.0], bounds=[(-3.0, 3.0), (-3.0, 3.0)],
    )
    assert found.ratio == pytest.approx(150.0, rel=1e-3)
    assert found.large


def deterministic_noise(scale: float):
    """Residual noise that depends on the point only (so a point evaluated twice agrees)."""

    def noise(p: np.ndarray, size: int) -> np.ndarray:
        seed = int.from_bytes(np.asarray(p, dtype=float).tobytes()[:8], "little") % 2**32
        return scale * np.random.default_rng(seed).standard_normal(size)

    return noise


@pytest.mark.parametrize("stated", [True, False])
def test_noise_that_hides_the_jacobian_at_every_allowed_step_is_noisy_not_flat(stated):
    # r = (a - 1, b - 2) ten times over plus noise of 1e-2 per residual, with bounds 2e-3 wide:
    # the largest step (a tenth of the bounds' width) leaves noise / step = 50 against a slope of
    # 1 (invented case)
    noise = deterministic_noise(1e-2)
    found, _, _ = fit_at(
        lambda p: np.tile([p[0] - 1.0, p[1] - 2.0], 10) + noise(p, 20), [1.0, 2.0], [1.0, 2.0],
        bounds=[(0.999, 1.001), (1.999, 2.001)], noise=2e-4 if stated else None,
    )
    assert found.verdict is Verdict.NOISY
    assert "noise" in found.note
    if stated:
        assert "2e-04" in found.note or "0.0002" in found.note


def test_moderate_noise_is_resolved_by_a_larger_step():
    # the same line with noise 1e-9 and wide bounds: the first step (6e-6) leaves noise / step
    # near 1e-4, decided; a noise level given makes the step larger still (invented case)
    noise = deterministic_noise(1e-9)
    found, count, _ = fit_at(
        lambda p: np.array([p[0] - 1.0, p[1] - 2.0, p[0] + p[1] - 3.0]) + noise(p, 3),
        [1.0, 2.0], [1.0, 2.0], noise=4e-18,
    )
    assert found.verdict is Verdict.MINIMUM
    assert count == 5


def test_a_failed_stencil_point_leaves_the_fit_unchecked():
    def residuals(p):
        if p[0] > 1.0:
            raise RuntimeError("solver failed")
        return A @ p - B

    space = build_space([1.0, 1.0])
    squares = SumOfSquares(residuals, None)
    u0 = space.to_scaled(np.array([1.0, 1.0]))
    squares(space.to_user(u0))

    def objective(x):
        try:
            return squares(x)
        except RuntimeError:
            return math.inf

    found, _ = drive(check_fit(space, squares, u0, 1.0, np.ones(2, bool)), objective)
    assert found.verdict is Verdict.UNCHECKED and "failed" in found.note


def test_residual_noise_from_the_noise_of_s():
    # S = |r|²: a noise e in each residual moves S by 2 |r| e to first order (analytic)
    assert residual_noise(1e-6, 25.0) == pytest.approx(1e-7)
    assert residual_noise(1e-8, 0.0) == pytest.approx(1e-4)  # near S = 0: |e|² leads
    assert residual_noise(None, 25.0) == 0.0


@settings(max_examples=25, deadline=None)
@given(st.integers(0, 2**31 - 1))
def test_the_eigenvalues_are_those_of_the_column_scaled_jtj(seed):
    # numpy's eigvalsh of the column-scaled JᵀJ (a reference library) against the singular values
    rng = np.random.default_rng(seed)
    j = rng.standard_normal((7, 3)) * np.array([1e3, 1.0, 1e-3])
    stencil = Stencil(columns=j, error=np.zeros_like(j), noise=np.zeros_like(j),
                      curvature=np.zeros_like(j), steps=np.full(3, 1e-5))
    judged = judge(stencil)
    scaled = j / np.linalg.norm(j, axis=0)
    assert judged.eigenvalues == pytest.approx(np.linalg.eigvalsh(scaled.T @ scaled), rel=1e-9)
    assert np.all(judged.margins > 0.0)  # the rounding floor, even with no error given


def test_the_points_of_the_searchs_own_jacobian_are_not_paid_again():
    # the search's forward differences at step h (points u0 + h e_k) are known: the check with
    # steps=h needs only the backward points and the probe, p + 1 evaluations (counted by a
    # cache of the evaluated points, as the driver keeps one)
    space = build_space([1.0, 1.0])
    squares = SumOfSquares(lambda p: A @ p - B, None)
    u0 = space.to_scaled(np.linalg.lstsq(A, B, rcond=None)[0])
    value = squares(space.to_user(u0))
    h = 1e-5
    known = {space.to_user(u0 + h * e).tobytes() for e in np.eye(2)}
    for x in known:
        squares(np.frombuffer(x))
    new = []

    def cached(x):
        if x.tobytes() not in known:
            new.append(x)
        return squares(x)

    found, _ = drive(check_fit(space, squares, u0, value, np.ones(2, bool), steps=np.full(2, h)),
                     cached)
    assert found.verdict is Verdict.MINIMUM and len(new) == 2 + 1
    assert found.jacobian == pytest.approx(A * space.scale, rel=1e-7)
