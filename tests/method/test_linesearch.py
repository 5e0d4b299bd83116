"""The line search on its own: outside checks are analytic minima and Jarratt's (1967) order."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import directional as dl
from directional.method.linesearch import line_search, parabola


def drive(f, search):
    """Run a line-search generator against ``f`` with no driver at all (a fake partner)."""
    seen = []
    try:
        ts = next(search)
        while True:
            seen.extend(ts.tolist())
            ts = search.send(np.array([f(t) for t in ts]))
    except StopIteration as done:
        return done.value, seen


def test_parabola_vertex_and_curvature_analytic():
    # (t - 2)^2 + 1 through t = 0, 1, 3: vertex 2, second derivative 2 (analytic).
    vertex, curvature = parabola([0.0, 1.0, 3.0], [5.0, 2.0, 2.0])
    assert vertex == pytest.approx(2.0)
    assert curvature == pytest.approx(2.0)


@pytest.mark.parametrize(
    "f, lower, upper, minimum",
    [
        (lambda t: math.exp(t) - 2.0 * t, -1.0, 3.0, math.log(2.0)),  # analytic: e^t = 2
        (lambda t: -math.cos(t - 0.7), -2.0, 3.0, 0.7),  # analytic
        (lambda t: t**4 - 2.0 * t**2, 0.2, 3.0, 1.0),  # analytic: 4t^3 = 4t
        (lambda t: abs(t - 0.3) ** 1.5, -1.0, 1.0, 0.3),  # analytic, not twice differentiable
    ],
)
def test_line_minimum_reaches_analytic_minimum(f, lower, upper, minimum):
    result = dl.line_minimum(f, lower, upper, tolerance=1e-8)
    assert result.point == pytest.approx(minimum, abs=1e-6)
    assert result.bracket[0] <= result.point <= result.bracket[1]


def test_minimum_at_the_end_of_the_segment_is_accepted():
    # f(t) = t falls towards the lower end: the minimum of [-1, 5] is -1 (analytic).
    result = dl.line_minimum(lambda t: t, -1.0, 5.0)
    assert result.point == -1.0
    assert result.evaluations <= 6


def test_straddled_maximum_still_gives_a_minimum():
    # f = -t^2 + t^4/10 has a maximum at 0 and minima at ±sqrt(5) (analytic).  Start on the
    # maximum, so the first parabola opens downward: the safeguards must not step to it.
    result = dl.line_minimum(lambda t: -(t**2) + 0.1 * t**4, -4.0, 4.0, start=0.0)
    assert abs(result.point) == pytest.approx(math.sqrt(5.0), abs=1e-6)
    assert result.value == pytest.approx(-2.5, abs=1e-10)


def test_order_of_convergence_is_jarratts():
    # Jarratt (1967): successive parabolic interpolation converges with order 1.3247, the real
    # root of t^3 = t + 1.  Measured over the asymptotic phase of several smooth functions.
    cases = [
        (lambda t: math.exp(t) - 2.0 * t, -1.0, 3.0, 2.0, math.log(2.0)),
        (lambda t: math.cosh(t - 0.4) + 0.1 * (t - 0.4) ** 3, -2.0, 2.0, 1.5, 0.4),
        (lambda t: t * math.log(t), 0.05, 2.0, 1.9, math.exp(-1.0)),
        (lambda t: (t - 1.0) ** 2 + 0.5 * (t - 1.0) ** 3 + (t - 1.0) ** 4, -1.0, 3.0, 2.5, 1.0),
    ]
    orders = []
    for f, lower, upper, start, minimum in cases:
        seen = []
        dl.line_minimum(lambda t, f=f, seen=seen: seen.append(t) or f(t), lower, upper, start=start)
        errors = [abs(t - minimum) for t in seen]
        for e0, e1, e2 in zip(errors, errors[1:], errors[2:]):
            if 1e-7 < e2 < e1 < e0 < 1e-1:
                orders.append(math.log(e2 / e1) / math.log(e1 / e0))
    assert len(orders) >= 4
    assert float(np.median(orders)) == pytest.approx(1.3247, abs=0.15)


def test_known_curvature_makes_a_quadratic_cost_two_evaluations():
    # On a quadratic with known second derivative 4 the parabola through the base point and one
    # probe is the function itself (analytic), so the second point is the minimum.
    f = lambda t: 2.0 * (t - 3.0) ** 2  # noqa: E731
    result, seen = drive(
        f, line_search({0.0: f(0.0)}, -10.0, 10.0, step=0.1, curvature=4.0, tolerance=1e-9)
    )
    assert len(seen) == 2
    assert result.point == pytest.approx(3.0, abs=1e-12)
    assert result.curvature == pytest.approx(4.0, rel=1e-8)


@pytest.mark.parametrize("worth, count, point", [(0.1, 1, 2.9), (0.01, 2, 3.0)])
def test_a_line_stops_when_the_parabola_promises_less_than_it_is_worth(worth, count, point):
    # f = 2 (t - 3)^2 with known second derivative 4, probe at 2.9 (analytic): f(2.9) = 0.02
    # and the parabola promises 0.02 more at its vertex 3; worth 0.1 leaves it there after one
    # evaluation, worth 0.01 takes the second.
    f = lambda t: 2.0 * (t - 3.0) ** 2  # noqa: E731
    result, seen = drive(
        f,
        line_search({0.0: f(0.0)}, -10.0, 10.0, step=2.9, curvature=4.0, tolerance=1e-9,
                    worth=worth),
    )
    assert len(seen) == count
    assert result.point == pytest.approx(point, abs=1e-12)


@pytest.mark.parametrize("ample, count, point", [(0.0, 2, 0.0), (2.0, 2, 0.0), (0.5, 3, 1e-5)])
def test_a_valley_narrower_than_the_resolution_is_not_hidden_when_it_promises_enough(
    ample, count, point
):
    # f = 1 + 1e10 (t - 1e-5)^2 (analytic): the probes at +-0.1 give the parabola exactly, its
    # vertex 1e-5 lies within the resolution 0.01 of the base point and promises 1.0 below
    # f(0) = 2.  Without ``ample``, or with more than it promises, the line stays at 0; with
    # ample 0.5 it evaluates the vertex, the minimum.
    f = lambda t: 1.0 + 1e10 * (t - 1e-5) ** 2  # noqa: E731
    result, seen = drive(
        f,
        line_search({0.0: f(0.0)}, -10.0, 10.0, step=0.1, tolerance=0.01, ample=ample,
                    finest=1e-9),
    )
    assert len(seen) == count
    assert result.point == pytest.approx(point, abs=1e-12)
    assert result.value == pytest.approx(f(point), rel=1e-9)


@settings(max_examples=60, deadline=None)
@given(
    lower=st.floats(-50, 0),
    width=st.floats(1e-3, 100),
    centre=st.floats(-100, 100),
    power=st.sampled_from([2, 4]),
    start_fraction=st.floats(0, 1),
)
def test_never_evaluates_outside_the_segment(lower, width, centre, power, start_fraction):
    upper = lower + width
    start = lower + start_fraction * width
    seen = []

    def f(t):
        seen.append(t)
        return (t - centre) ** power

    result = dl.line_minimum(f, lower, upper, start=start)
    assert all(lower <= t <= upper for t in seen)
    assert len(seen) == len(set(seen))  # never the same point twice
    assert result.value == min((t - centre) ** power for t in seen)


def test_a_noisy_line_stops_refining_and_says_what_it_heard():
    # A parabola plus N(0, 1e-3²) (invented for the test): Brent's iteration would chase the
    # noise to the 40-evaluation limit; the line's own table stops it and returns the level.
    rng = np.random.default_rng(7)
    sigma = 1e-3

    def f(t):
        return 1.0 + (t - 0.3) ** 2 + sigma * rng.standard_normal()

    result, seen = drive(f, line_search({0.0: f(0.0)}, -2.0, 2.0, step=0.1, tolerance=1e-9,
                                        limit=40))
    assert 0.5 * sigma <= result.heard <= 2.0 * sigma
    assert len(seen) < 20
    assert abs(result.point - 0.3) < 0.1  # where (t - 0.3)² is a few sigma


def test_a_level_heard_before_ends_the_next_line_early():
    # With the level passed as ``heard``, the next line on the same noisy function resolves no
    # finer than a quarter of it: it stops once the parabola's vertex is that near the best.
    rng = np.random.default_rng(8)

    def f(t):
        return 1.0 + (t - 0.3) ** 2 + 1e-3 * rng.standard_normal()

    result, seen = drive(f, line_search({0.0: f(0.0)}, -2.0, 2.0, step=0.1, tolerance=1e-9,
                                        limit=40, heard=1e-3))
    assert len(seen) <= 6
    assert math.isnan(result.heard)  # nothing more to hear: it stopped before the table
    assert abs(result.point - 0.3) < 0.1


def _drive_floats(f, search):
    """`drive` for `line_search_floats`: lists of t out, lists of values in."""
    seen = []
    try:
        ts = next(search)
        while True:
            seen.extend(ts)
            ts = search.send([f(t) for t in ts])
    except StopIteration as done:
        return done.value, seen


@settings(max_examples=300, deadline=None)
@given(
    minimum=st.floats(-3.0, 3.0),
    height=st.floats(0.1, 10.0),
    cubic=st.sampled_from([0.0, 0.05, -0.3, 2.0]),
    guess=st.sampled_from([math.nan, 0.3, 1.0, 1.7]),
    step=st.floats(0.01, 2.0),
    worth=st.sampled_from([0.0, 1e-9, 1e-4, 1e-1]),
    rounded=st.booleans(),
    tolerance=st.sampled_from([1e-7, 0.05]),
    ample=st.sampled_from([0.0, 1e-6, 1e-2, 1.0]),
)
def test_the_shortcuts_take_the_general_loops_decisions(
    minimum, height, cubic, guess, step, worth, rounded, tolerance, ample
):
    # The three-point verdict (`_settled`), the lowest value without ties (`_best`) and the
    # parabola of finite values (`_lowest_parabola`) only save work: with each replaced by the
    # general computation, the same points are evaluated and the same result returned (common
    # practice, no source).  Values rounded to a coarse grid make ties.
    from unittest import mock

    from directional.method import linesearch

    def f(t):
        value = height * (t - minimum) ** 2 + cubic * (t - minimum) ** 3
        return round(value, 2) if rounded else value

    def run():
        curvature = 2.0 * height * guess  # nan: unknown, else a guess off by the factor
        return _drive_floats(f, linesearch.line_search_floats(
            {0.0: f(0.0)}, -5.0, 5.0, step=step, tolerance=tolerance, curvature=curvature,
            worth=worth, limit=40, ample=ample, finest=1e-9,
        ))

    def general_best(ts, fs):
        return min(zip(fs, map(abs, ts), range(len(ts))))[2]

    def general_parabola(ts, fs):
        return linesearch._model(dict(zip(ts, fs)), 0.0)

    fast = run()
    with (
        mock.patch.object(linesearch, "_settled", lambda *args: None),
        mock.patch.object(linesearch, "_best", general_best),
        mock.patch.object(linesearch, "_lowest_parabola", general_parabola),
    ):
        slow = run()
    assert fast == slow


@given(st.lists(st.sampled_from([0.0, -0.0, 1.0, 2.0, math.inf, math.nan, -1.5]), min_size=1, max_size=8))
def test_the_lowest_value_is_the_general_ones(values):
    # `_best` skips the keyed minimum when the lowest value is unique; with ties, infinities and
    # nan it must pick what the keyed minimum picks (common practice, no source)
    from directional.method import linesearch

    ts = [0.5 * k - 1.0 for k in range(len(values))]
    assert linesearch._best(ts, values) == min(zip(values, map(abs, ts), range(len(ts))))[2]
