"""The quadratic model of the search: exact on quadratics, trust-region steps, and what it buys.

Expected values are analytic (worked out beside each check) or published minima (named).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import directional as dl
from directional.method import curvature, search
from directional.method.model import (
    MARGIN,
    SCREENED,
    Quadratic,
    Sample,
    coefficients,
    fit,
    free,
    refreshed,
    trust_step,
)
from directional.method.search import Settings
from directional.method.space import build_space
from directional.records import Verdict
from directional.testproblems import mgh


def test_a_quadratic_is_recovered_exactly_from_a_poised_sample():
    # f = 3 + gᵀx + ½ xᵀHx is itself a quadratic: a full-rank fit reproduces g and H (analytic)
    rng = np.random.default_rng(1)
    h = np.array([[4.0, 1.0, 0.0], [1.0, 3.0, -0.5], [0.0, -0.5, 2.0]])
    g = np.array([1.0, -2.0, 0.5])
    sample = Sample(3, 40)
    for x in rng.standard_normal((25, 3)):
        sample.add(x, 3.0 + g @ x + 0.5 * x @ h @ x)
    model = fit(sample, np.zeros(3), 20)
    assert model is not None
    assert model.value == pytest.approx(3.0, abs=1e-10)
    assert model.gradient == pytest.approx(g, abs=1e-9)
    assert model.hessian == pytest.approx(h, abs=1e-9)
    assert model.misfit < 1e-9


def test_a_determined_model_is_reused_for_the_same_samples_whatever_the_prior():
    # a determined fit is the unique least-squares quadratic, so a prior changes it by rounding
    # only (analytic): the model fitted with a prior serves a later request without one for the
    # same samples and centre; a new sample, another centre or an undetermined model is refitted
    rng = np.random.default_rng(5)
    h = np.array([[2.0, 0.5], [0.5, 1.0]])
    sample = Sample(2, 40)
    for x in rng.standard_normal((14, 2)):
        sample.add(x, 1.0 + x @ h @ x)
    prior = np.eye(2)
    first = fit(sample, np.zeros(2), 12, prior)
    again = fit(sample, np.zeros(2), 12, reuse=True)
    assert first is not None and np.isfinite(first.misfit) and again is first
    fresh = fit(sample, np.zeros(2), 12)
    assert fresh is not first
    assert fresh.hessian == pytest.approx(first.hessian, abs=1e-12)
    assert fit(sample, np.array([0.1, 0.0]), 12, reuse=True).centre[0] == 0.1
    x = rng.standard_normal(2)
    sample.add(x, 1.0 + x @ h @ x)
    assert fit(sample, np.array([0.1, 0.0]), 12, reuse=True) is not first
    few = Sample(2, 10)
    for x in rng.standard_normal((4, 2)):
        few.add(x, 1.0 + x @ h @ x)
    loose = fit(few, np.zeros(2), 12, prior)
    assert loose is not None and loose.misfit == np.inf
    refitted = fit(few, np.zeros(2), 12, reuse=True)  # without the prior, which mattered here
    assert refitted is not None and refitted is not loose
    assert np.max(np.abs(refitted.hessian - loose.hessian)) > 0.1


def test_a_sample_on_one_line_is_not_poised():
    # points on a line fix no cross term: no model (Conn, Scheinberg & Vicente 2009, ch. 3)
    sample = Sample(2, 20)
    for t in np.linspace(-1.0, 1.0, 12):
        sample.add(np.array([t, 2.0 * t]), t * t)
    assert fit(sample, np.zeros(2), 12) is None
    assert coefficients(2) == 6


@pytest.mark.parametrize("n", [2, 3, 6])
def test_a_linear_interpolation_leaves_the_prior_hessian_unchanged(n):
    # n + 1 points in general position are interpolated by the linear part for any Hessian, so
    # the least-change model keeps the prior exactly (Powell 2004, the least Frobenius norm
    # update; analytic)
    rng = np.random.default_rng(n)
    prior = rng.standard_normal((n, n))
    prior = prior + prior.T
    sample = Sample(n, 3 * coefficients(n))
    for x in rng.standard_normal((n + 1, n)):
        sample.add(x, float(np.sum(np.cos(x))))
    model = fit(sample, np.zeros(n), 2 * coefficients(n), prior)
    assert model is not None
    assert model.hessian == pytest.approx(prior, abs=1e-9 * np.max(np.abs(prior)))
    assert model.misfit == np.inf  # not determined


def test_a_sample_on_the_axes_leaves_the_cross_terms_free_until_a_point_off_them():
    # on the coordinate axes every product x_i x_j (i != j) vanishes, so points there fix the
    # value, the gradient and the diagonal of the Hessian but none of its n (n - 1) / 2 cross
    # terms; one point off the axes adds one equation in them, fixing one combination (Conn,
    # Scheinberg & Vicente 2009, ch. 3: the poisedness of the sample; analytic)
    n = 3
    h = np.array([[4.0, 1.0, 0.0], [1.0, 3.0, -0.5], [0.0, -0.5, 2.0]])
    sample = Sample(n, 40)
    sample.add(np.zeros(n), 0.0)
    for i in range(n):
        for t in (-1.0, -0.5, 0.5, 1.0):
            x = np.zeros(n)
            x[i] = t
            sample.add(x, 0.5 * x @ h @ x)
    model = fit(sample, np.zeros(n), 40)
    assert model is not None and model.missing == 3 and model.misfit == np.inf
    assert np.diag(model.hessian) == pytest.approx(np.diag(h), abs=1e-9)
    x = np.array([0.3, -0.7, 0.4])
    sample.add(x, 0.5 * x @ h @ x)
    model = fit(sample, np.zeros(n), 40)
    assert model is not None and model.missing == 2 and model.misfit == np.inf


def test_the_free_count_follows_the_fits_as_points_on_lines_arrive():
    # points on lines through the start, as a direction-set search lays them: a line fixes at
    # most three more combinations of the coefficients (its points' quadratic features span
    # three dimensions; analytic), so the sample leaves many free until points off the lines
    # arrive.  The count kept from call to call (each call absorbs only the new points) equals
    # the fit's own count of free Hessian coefficients at every stage, and a fresh count of
    # the same points (the null space of the design does not depend on the centre)
    rng = np.random.default_rng(3)
    n = 4
    sample = Sample(n, 3 * coefficients(n))
    h = rng.standard_normal((n, n))
    h = h @ h.T

    def f(x):
        return float(x @ h @ x + np.sin(x[0]))

    base = np.zeros(n)
    sample.add(base, f(base))
    counts = []
    for direction in [*np.eye(n), *rng.standard_normal((3, n))]:
        for t in (0.3, -0.2, 0.7):
            x = base + t * direction
            sample.add(x, f(x))
        base = base + 0.5 * direction
        sample.add(base, f(base))
        if sample.size <= n + 1:
            continue
        centre = sample.points[sample.size - 1]
        model = fit(sample, centre, 10 * coefficients(n))
        count = free(sample, centre)
        counts.append(count)
        fresh = Sample(n, sample.points.shape[0])
        for x, value in zip(sample.points[: sample.size], sample.values[: sample.size]):
            fresh.add(x, float(value))
        assert free(fresh, np.zeros(n)) == count
        if model is not None:
            assert model.missing == count
    assert counts[0] > 5 and counts[-1] == 0 and counts == sorted(counts, reverse=True)


def test_a_fit_that_could_not_be_used_is_skipped_and_a_dropped_point_ends_the_count():
    # with ``usable`` the fit returns None at once when the sample leaves more coefficients
    # free than the caller can use (plus MARGIN), and fits as before otherwise; once the store
    # has dropped a point the count cannot be kept (``inf``) and the fit runs.  On the axes of
    # R^5 every cross term is free: 5 * 4 / 2 = 10 of them (as in the test of the axes above)
    n = SCREENED
    assert n == 5 and MARGIN == 2
    sample = Sample(n, coefficients(n) + 1)  # 21 points on the axes, room for one more
    sample.add(np.zeros(n), 0.0)
    for i in range(n):
        for t in (-1.0, -0.5, 0.5, 1.0):
            x = np.zeros(n)
            x[i] = t
            sample.add(x, float(x @ x + x[0] ** 3))
    centre = np.zeros(n)
    assert free(sample, centre) == 10
    assert fit(sample, centre, 40, usable=7) is None  # 10 > 7 + MARGIN: not fitted
    model = fit(sample, centre, 40, usable=8)  # 10 <= 8 + MARGIN: fitted, as without ``usable``
    assert model is not None and model.missing == 10
    x = np.full(n, 0.3)
    sample.add(x, 1.0)
    sample.add(-x, 1.0)  # the store is full: the oldest point was dropped
    assert free(sample, centre) == np.inf
    assert fit(sample, centre, 40, usable=0) is not None  # the count is unknown: fitted
    # below SCREENED variables the fit runs whatever the count: a line and three points in R^3
    # fix 3 + 3 of the 10 coefficients (a line's points span three; analytic), 4 are left
    line = Sample(3, 40)
    for t in np.linspace(-1.0, 1.0, 12):
        x = np.array([t, 0.5 * t, 0.0])
        line.add(x, t * t)
    for x in np.eye(3):
        line.add(x, 1.0)
    assert free(line, np.zeros(3)) == 4 == coefficients(3) - 6
    loose = fit(line, np.zeros(3), 40, usable=0)
    assert loose is not None and loose.missing == 4


@pytest.mark.parametrize("rows, columns, rank", [(10, 14, 6), (14, 10, 10), (12, 12, 5)])
def test_the_free_counts_pivoted_qr_is_scipys_bit_for_bit(rows, columns, rank):
    # `free` calls LAPACK's geqp3 and orgqr directly; the reference is scipy.linalg.qr with
    # column pivoting (a general-purpose library): the same orthogonal factor and the same
    # diagonal of the triangle, on wide, tall and rank-deficient matrices
    import scipy.linalg

    from directional.method.model import _pivoted_qr

    rng = np.random.default_rng(rows + 7 * columns + rank)
    a = rng.standard_normal((rows, rank)) @ rng.standard_normal((rank, columns))
    q, pivots = _pivoted_qr(a)
    expected_q, expected_r, _ = scipy.linalg.qr(a, pivoting=True)
    assert np.array_equal(q, expected_q)
    assert np.array_equal(pivots, np.abs(np.diagonal(expected_r)))
    assert np.count_nonzero(pivots > 1e-12 * pivots[0]) == rank


def test_near_samples_decide_the_model_where_far_ones_see_higher_terms():
    # f = Σ cos x_i has gradient -sin c and Hessian diag(-cos c) at c (analytic).  A cluster of
    # samples about 0.03 from c fixes them to about 0.03 |f'''|; far samples (distance ~2) see
    # the quartic terms, and an unweighted fit of both misses the gradient by 0.5 and the
    # curvature by 0.6; the locally weighted fit (Cleveland 1979) keeps the cluster's accuracy.
    rng = np.random.default_rng(7)
    n, centre = 3, np.array([0.3, -0.2, 0.5])
    sample = Sample(n, 100)
    for x in [*(centre + 0.03 * rng.standard_normal((20, n))), *(2.0 * rng.standard_normal((20, n)))]:
        sample.add(x, float(np.sum(np.cos(x))))
    sample.add(centre, float(np.sum(np.cos(centre))))
    model = fit(sample, centre, 41)
    assert model is not None
    assert model.gradient == pytest.approx(-np.sin(centre), abs=5e-4)
    assert model.hessian == pytest.approx(np.diag(-np.cos(centre)), abs=3e-2)


def test_the_sample_keeps_the_newest_points_and_skips_failures():
    sample = Sample(1, 3)
    for k in range(5):
        sample.add(np.array([float(k)]), float(k))
    sample.add(np.array([9.0]), float("inf"))
    assert sorted(sample.values[: sample.size]) == [2.0, 3.0, 4.0]
    assert sample.added == 5


@settings(max_examples=40, deadline=None)
@given(
    eigenvalues=st.lists(st.floats(-5.0, 5.0), min_size=2, max_size=4),
    radius=st.floats(0.01, 10.0),
    seed=st.integers(0, 1000),
)
def test_the_trust_step_stays_inside_the_region_and_does_not_go_uphill(eigenvalues, radius, seed):
    # the trust-region minimizer lies in the ball and lowers the model at least as much as the
    # Cauchy point does, hence never raises it (Conn, Gould & Toint 2000, ch. 7)
    n = len(eigenvalues)
    rng = np.random.default_rng(seed)
    q, _ = np.linalg.qr(rng.standard_normal((n, n)))
    h = (q * np.array(eigenvalues)) @ q.T
    g = rng.standard_normal(n)
    model = Quadratic(centre=np.zeros(n), value=0.0, gradient=g, hessian=h, radius=1.0, misfit=0.0)
    s = trust_step(model, radius)
    assert np.linalg.norm(s) <= radius * (1.0 + 1e-9)
    assert model.predict(s) <= 1e-12


@settings(max_examples=40, deadline=None)
@given(seed=st.integers(0, 2**32 - 1), n=st.integers(1, 6))
def test_a_refreshed_model_with_the_right_hessian_is_the_quadratic_itself(seed, n):
    # on samples of a quadratic, a model with its Hessian and any value and gradient is
    # refreshed to the quadratic itself at any centre (analytic): it predicts every value
    rng = np.random.default_rng(seed)
    a = rng.standard_normal((n, n))
    h, g, c = a + a.T, rng.standard_normal(n), float(rng.standard_normal())
    sample = Sample(n, 4 * n + 4)
    for x in rng.standard_normal((3 * n + 3, n)):
        sample.add(x, c + g @ x + 0.5 * x @ h @ x)
    stale = Quadratic(centre=rng.standard_normal(n), value=0.0, gradient=np.zeros(n), hessian=h,
                      radius=1.0, misfit=0.0)
    u = rng.standard_normal(n)
    model = refreshed(stale, sample, u, 2 * n + 2)
    assert model is not None and np.array_equal(model.centre, u)
    for x in rng.standard_normal((5, n)):
        expected = c + g @ x + 0.5 * x @ h @ x
        assert model.predict(x - u) == pytest.approx(expected, rel=1e-7, abs=1e-7)


def test_a_refreshed_model_is_the_weighted_least_squares_fit_of_its_linear_part():
    # value and gradient by weighted least squares with the Hessian held, the weights
    # (1 + d² / (0.01 median d²))⁻² of the fit (Cleveland 1979), over the nearest samples;
    # computed here independently with numpy's lstsq, on samples with a quartic term
    rng = np.random.default_rng(3)
    h = np.array([[3.0, 1.0, 0.0], [1.0, 2.0, 0.5], [0.0, 0.5, 1.0]])
    sample = Sample(3, 60)
    for x in rng.standard_normal((40, 3)):
        sample.add(x, 2.0 + x @ h @ x + 0.1 * x[0] ** 4)
    model = fit(sample, np.zeros(3), 20)
    assert model is not None
    u = np.array([0.3, -0.2, 0.1])
    moved = refreshed(model, sample, u, 20)
    assert moved is not None
    points, values = sample.points[: sample.size], sample.values[: sample.size]
    distance = np.sum((points - u) ** 2, axis=1)
    nearest = np.argsort(distance)[:20]
    d, d2 = points[nearest] - u, distance[nearest]
    weight = (1.0 + d2 / (0.01 * np.median(d2))) ** -2
    rest = values[nearest] - 0.5 * np.einsum("ij,jk,ik->i", d, model.hessian, d)
    design = np.column_stack([np.ones(20), d]) * weight[:, None]
    line = np.linalg.lstsq(design, rest * weight, rcond=None)[0]
    assert moved.value == pytest.approx(line[0], rel=1e-9)
    assert moved.gradient == pytest.approx(line[1:], rel=1e-7, abs=1e-9)
    assert moved.misfit == pytest.approx(np.max(np.abs(design @ line - rest * weight)), rel=1e-6)
    assert moved.radius == pytest.approx(np.sqrt(d2.max()))
    assert moved.misfit > 1e-6  # the quartic term shows


def test_a_step_that_agreed_with_its_model_is_followed_without_a_fit(monkeypatch):
    # a model step whose point the model predicted well (within AGREED of the decrease) is
    # followed by a step on the same Hessian (`refreshed`): fewer fits than model steps.  Convex
    # quadratics (condition 1e3, random rotation), minimum 0 (analytic): the runs still reach
    # f <= 1e-8 f(x0) within 3 (n + 1)(n + 2) / 2 evaluations
    fits = []
    monkeypatch.setattr(search, "fit", lambda *a, **k: fits.append(1) or fit(*a, **k))
    n, unfitted = 10, 0
    for seed in (1, 2, 3):
        f, _, counted = _rotated_quadratic(n, seed)
        space = build_space(np.zeros(n))
        run = search.powell(space, Settings())
        batch, steps, since = next(run), 0, len(fits)
        try:
            while True:
                if batch.purpose == "model":
                    steps += 1
                    unfitted += len(fits) == since
                    since = len(fits)
                batch = run.send(np.array([f(x) for x in batch.points]))
        except StopIteration:
            pass
        first = next(i for i, v in enumerate(counted) if v <= 1e-8 * counted[0]) + 1
        assert first <= 3.0 * coefficients(n)
    assert unfitted >= 1


def test_a_refreshed_model_keeps_its_hessian_and_refits_the_rest():
    # on samples of a quadratic with Hessian h, a model with that Hessian and any value and
    # gradient is refreshed to the quadratic's own value and gradient at the new centre, with a
    # misfit of rounding; with another Hessian the misfit shows (analytic)
    rng = np.random.default_rng(4)
    h = np.array([[3.0, 1.0, 0.0], [1.0, 2.0, 0.5], [0.0, 0.5, 1.0]])
    x_star = np.array([0.5, -1.0, 0.25])
    sample = Sample(3, 60)
    for x in rng.standard_normal((30, 3)):
        sample.add(x, 2.0 + 0.5 * (x - x_star) @ h @ (x - x_star))
    stale = Quadratic(centre=np.ones(3), value=9.0, gradient=np.array([5.0, 0.0, -1.0]),
                      hessian=h, radius=1.0, misfit=0.0)
    u = np.array([0.1, 0.2, -0.3])
    model = refreshed(stale, sample, u, 20)
    assert model is not None and not model.fitted and model.misfit < 1e-9
    assert model.value == pytest.approx(2.0 + 0.5 * (u - x_star) @ h @ (u - x_star), abs=1e-9)
    assert model.gradient == pytest.approx(h @ (u - x_star), abs=1e-8)
    wrong = Quadratic(centre=u, value=0.0, gradient=np.zeros(3), hessian=np.eye(3), radius=1.0,
                      misfit=0.0)
    off = refreshed(wrong, sample, u, 20)
    assert off is not None and off.misfit > 1e-5  # weighted: far samples count little
    line = Sample(3, 10)  # samples on one line do not fix a gradient: not poised, None
    for t in range(6):
        line.add(t * np.ones(3), float(t * t))
    assert refreshed(stale, line, np.zeros(3), 6) is None


def test_a_calm_cycle_is_judged_settled_without_a_fit(monkeypatch):
    # after a cycle that moved less than the tolerances, the last model with its value and
    # gradient fitted again at the point says whether it is settled: the search ends with no
    # fit after its last cycle.  Convex quadratics (condition 1e3, random rotation), minimum 0
    # at x* (analytic).  Counted: requests for a fit (not those that may reuse the last model)
    fits = []

    def counted(*args, **kwargs):
        if not kwargs.get("reuse"):
            fits.append(1)
        return fit(*args, **kwargs)

    monkeypatch.setattr(search, "fit", counted)
    n = 10
    for seed in (1, 2, 3):
        f, x_star, _ = _rotated_quadratic(n, seed)
        run = search.powell(build_space(np.zeros(n)), Settings())
        batch, after = next(run), 0
        try:
            while True:
                since = len(fits)
                try:
                    batch = run.send(np.array([f(x) for x in batch.points]))
                finally:
                    after = 0 if len(fits) > since else after + 1
        except StopIteration as stop:
            outcome = stop.value
        assert outcome.stop is dl.Stop.CONVERGED
        assert outcome.point == pytest.approx(x_star, abs=1e-5)
        assert after >= n  # at least a cycle's line searches since the last fit


def test_the_newton_step_of_a_convex_model_is_its_minimizer():
    # m(s) = -2 s0 + ½ (s0² + 4 s1²): minimizer (2, 0) (analytic)
    model = Quadratic(centre=np.zeros(2), value=0.0, gradient=np.array([-2.0, 0.0]),
                      hessian=np.diag([1.0, 4.0]), radius=1.0, misfit=0.0)
    assert trust_step(model, 5.0) == pytest.approx([2.0, 0.0])


def _rotated_quadratic(n: int, seed: int | None = None):
    """A convex quadratic in ``n`` variables (condition 1e3, random rotation seeded by ``seed``,
    else ``n``) with minimum 0 at x* (analytic); returns it, x* and the list of the values it
    gave."""
    rng = np.random.default_rng(n if seed is None else seed)
    q, _ = np.linalg.qr(rng.standard_normal((n, n)))
    a = (q * np.geomspace(1.0, 1e3, n)) @ q.T
    x_star = rng.standard_normal(n)
    counted: list[float] = []

    def f(x):
        d = x - x_star
        counted.append(0.5 * float(d @ a @ d))
        return counted[-1]

    return f, x_star, counted


@pytest.mark.parametrize("n", [5, 10])
def test_model_steps_reach_a_rotated_quadratic_in_a_few_times_its_coefficients(n):
    # a convex quadratic (condition 1e3, random rotation); the minimum is 0 at x* (analytic).
    # Without the model the search needs 4-6 times (n+1)(n+2)/2 evaluations (benchmarks/RESULTS.md)
    f, x_star, counted = _rotated_quadratic(n)
    sol = dl.minimize(f, np.zeros(n), check=False)
    assert sol.point == pytest.approx(x_star, abs=1e-5)
    first = next(i for i, v in enumerate(counted) if v <= 1e-8 * counted[0]) + 1
    assert first <= 3.0 * coefficients(n)
    assert sol.stop is dl.Stop.CONVERGED


def test_a_nearly_determined_model_is_completed_by_its_own_steps():
    # the line searches' points fix about one coefficient of the model per two evaluations, so
    # waiting for them to determine it costs about 2 (n + 1)(n + 2) / 2 evaluations (2.01 times
    # on this quadratic before nearly determined models were stepped on); model steps land off
    # their lines and fix about one each.  A convex quadratic (condition 1e3, random rotation),
    # minimum 0 at x* (analytic).
    n = 20
    f, x_star, counted = _rotated_quadratic(n)
    sol = dl.minimize(f, np.zeros(n), check=False)
    assert sol.stop is dl.Stop.CONVERGED
    assert sol.point == pytest.approx(x_star, abs=1e-5)
    first = next(i for i, v in enumerate(counted) if v <= 1e-8 * counted[0]) + 1
    assert first < 2.0 * coefficients(n)


def test_meyer_reaches_the_published_minimum():
    # Moré, Garbow & Hillstrom (1981), problem 10 (Meyer): f* = 87.9458 from the standard start.
    # The search used to stop, "converged", at 7665 on a nearly dependent direction set.
    p = mgh.problem(10)
    sol = dl.minimize(p, p.start, check=False, budget=20000)
    assert sol.stop is dl.Stop.CONVERGED
    assert sol.value == pytest.approx(87.9458, rel=1e-3)


def test_meyer_without_model_steps_still_escapes_the_false_stop():
    # the same problem with the model switched off: the reset of a nearly dependent set alone
    # takes it below the old false stop (7665) to within 1 % of 87.9458 (MGH 1981, problem 10)
    from directional.method.search import powell
    from directional.method.space import build_space
    from directional.run.driver import Driver

    p = mgh.problem(10)
    outcome = Driver(objective=p, budget=20000).run(
        powell(build_space(p.start), Settings(model_steps=False))
    )
    assert outcome.value == pytest.approx(87.9458, rel=1e-2)


def test_a_check_the_budget_cannot_pay_for_is_not_begun():
    # f = x² + y²: the search ends in a few evaluations, and the 2·2² = 8 the stencil needs
    # beside its centre are not left
    counted = []
    sol = dl.minimize(lambda x: counted.append(1) or float(x @ x), [1.0, 2.0], budget=12)
    assert sol.verdict is Verdict.UNCHECKED
    assert any("cannot pay" in note for note in sol.notes)
    assert not any(e.purpose == "hessian" for e in sol.history)


def test_the_default_check_escalates_only_when_a_stencil_leaves_the_sign_in_doubt():
    # f = (x - y)²: the Hessian [[2, -2], [-2, 2]] has the eigenvalue 0 along (1, 1), which one
    # stencil measures only to rounding: undecided, so the extrapolated check is paid for and
    # says FLAT; at the clear minimum of x² + y² one stencil suffices (analytic)
    flat = dl.minimize(lambda x: float((x[0] - x[1]) ** 2), [1.0, 3.0])
    clear = dl.minimize(lambda x: float(x @ x), [1.0, 1.0])
    assert clear.curvature.source == "quick"
    assert clear.curvature.evaluations <= curvature.check_cost("quick", 2) + 1
    assert flat.curvature.source == "extrapolated"
    assert flat.verdict is Verdict.FLAT


@pytest.mark.parametrize("rows, columns, rank", [(30, 10, 10), (30, 10, 6), (7, 12, 7), (12, 12, 5)])
def test_the_fits_gelsy_call_is_scipys_lstsq_bit_for_bit(rows, columns, rank):
    # the fit calls LAPACK's gelsy directly; the reference is scipy.linalg.lstsq with the same
    # driver and cutoff (a general-purpose library): the same solution to the last bit and the
    # same rank, on full-rank, rank-deficient and underdetermined systems
    import scipy.linalg

    from directional.method.model import POISED, _gelsy

    rng = np.random.default_rng(rows * columns + rank)
    a = rng.standard_normal((rows, rank)) @ rng.standard_normal((rank, columns))
    b = rng.standard_normal(rows)
    x, found = _gelsy(a, b, 1.0 / POISED)
    expected, _, expected_rank, _ = scipy.linalg.lstsq(
        a, b, cond=1.0 / POISED, check_finite=False, lapack_driver="gelsy"
    )
    assert found == expected_rank == rank
    assert x.tobytes() == expected.tobytes()


def assert_close(got: np.ndarray, expected: np.ndarray, atol: float) -> None:
    np.testing.assert_allclose(got, expected, rtol=0.0, atol=atol)


@pytest.mark.parametrize("n", [2, 5, 10, 31, 50])
def test_the_models_lapack_calls_agree_with_numpy(n):
    # the fit, `refreshed` and the trust step call LAPACK's geqrf/orgqr, gesdd, gesv and syevd
    # directly; the reference is numpy.linalg (a general-purpose library): the same numbers to
    # rounding and the same memory layout (the products that follow read the factors by rows,
    # and a product's rounding depends on the layout), for the model's sizes (n + 1 columns, one
    # to three times as many rows; an n × n Hessian).  numpy and scipy each bundle their own
    # LAPACK build, so the bits may differ between releases: agreement to rounding is the check.
    from directional.method.model import _qr, _singular_values, _solve, eigen

    rng = np.random.default_rng(n)
    for rows in (n + 1, 2 * n + 3, 3 * (n + 1)):
        a = rng.standard_normal((rows, n + 1)) * 10.0 ** rng.uniform(-3, 3, n + 1)
        basis, triangle = _qr(a)
        expected_basis, expected_triangle = np.linalg.qr(a)
        for got, expected in ((basis, expected_basis), (triangle, expected_triangle)):
            assert got.strides == expected.strides
            assert_close(got, expected, 1e-10 * np.abs(expected).max())
        singular = _singular_values(triangle)
        assert_close(singular, np.linalg.svd(triangle, compute_uv=False), 1e-10 * singular[0])
        b = rng.standard_normal(n + 1)
        x = np.linalg.solve(triangle, b)
        assert_close(_solve(triangle, b), x, 1e-6 * np.abs(x).max())
    h = rng.standard_normal((n, n)) * 10.0 ** rng.uniform(-4, 4)
    h = h + h.T
    model = Quadratic(centre=np.zeros(n), value=0.0, gradient=np.zeros(n), hessian=h,
                      radius=1.0, misfit=0.0)
    eigenvalues, vectors = eigen(model)
    expected_values, expected_vectors = np.linalg.eigh(h)
    scale = np.abs(expected_values).max()
    assert_close(eigenvalues, expected_values, 1e-10 * scale)
    # eigenvectors up to sign (the same routine decides it; a column flipped is the same answer)
    signs = np.sign(np.sum(vectors * expected_vectors, axis=0))
    assert_close(vectors * signs, expected_vectors, 1e-6)
    assert vectors.strides == expected_vectors.strides
    assert eigen(model)[1] is vectors  # made once, kept with the model
    with pytest.raises(np.linalg.LinAlgError):
        _solve(np.zeros((n + 1, n + 1)), np.ones(n + 1))  # singular, as numpy says
