"""Kinks and jumps: the curvature check names where the objective is not smooth.

The functions are built so that the answer is known analytically; each check names it.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import directional as dl
from directional.api.explore import cluster
from directional.method.smoothness import axis_lines, complement, line_finding
from directional.records import Check, Verdict

STEPS = np.array([1e-4, 2e-4, 4e-4])


def on_line(f, t=STEPS):
    """Values f(-t), f(+t) and f(0) of a function of one variable."""
    return t, np.column_stack([f(-t), f(t)]), float(f(np.zeros(1))[0])


# ----------------------------------------------------------------------------- one line


def test_a_corner_is_found_with_its_slopes():
    # Analytic: |t| + t² at 0 rises both ways with slope 1 on each side.
    t, values, f0 = on_line(lambda x: np.abs(x) + x**2)
    found = line_finding(t, values, f0, noise=1e-16)
    assert found.kind == "corner"
    assert found.slopes == pytest.approx((1.0, 1.0), rel=1e-3)


def test_a_kink_that_is_not_a_minimum_is_called_a_kink():
    # Analytic: |t| + 2t falls to the left (slope -1 outward) and rises to the right (slope 3).
    t, values, f0 = on_line(lambda x: np.abs(x) + 2.0 * x)
    found = line_finding(t, values, f0, noise=1e-16)
    assert found.kind == "kink"
    assert found.slopes == pytest.approx((-1.0, 3.0), rel=1e-9)


def test_the_low_edge_of_a_jump_is_an_edge():
    # Analytic: (t - 0.1)² + 0.5 [t > 0] at 0: the value jumps up by 0.5 to the right, and the
    # smooth part rises to the left (its minimum lies to the right, beyond the jump).
    t, values, f0 = on_line(lambda x: (x - 0.1) ** 2 + 0.5 * (x > 0))
    found = line_finding(t, values, f0, noise=1e-16)
    assert found.kind == "edge"
    assert found.change == pytest.approx(0.5, abs=1e-3)


def test_a_jump_down_beside_the_point_is_a_jump():
    # Analytic: t² + 0.5 [t >= 0] at 0: the point is on the high side; the left side is lower.
    t, values, f0 = on_line(lambda x: x**2 + 0.5 * (x >= 0))
    assert line_finding(t, values, f0, noise=1e-16).kind == "jump"


def test_a_jump_between_the_steps_is_still_seen():
    # Analytic: a jump of 0.5 at t = 1.5e-4 lies between the first and the second step.
    t, values, f0 = on_line(lambda x: x**2 + 0.5 * (x > 1.5e-4))
    assert line_finding(t, values, f0, noise=1e-16).kind == "edge"


@pytest.mark.parametrize(
    "f",
    [
        lambda x: 3.0 * x**2 + 1.0,  # a plain minimum
        lambda x: x**4,  # a degenerate minimum: curvature grows away from the point
        lambda x: x**2 - 1e4 * x**4,  # curvature shrinking away from it, but slowly at the step
        lambda x: np.cos(1e3 * x),  # a smooth maximum with a large curvature
        lambda x: 0.0 * x + 1.0,  # flat: no difference at all
    ],
)
def test_smooth_lines_are_smooth(f):
    # Analytic: each is infinitely differentiable at 0.
    t, values, f0 = on_line(f)
    assert line_finding(t, values, f0, noise=4e-16) is None


def test_a_kink_within_the_noise_is_not_a_kink():
    # Common practice, no source: differences below three noise deviations carry no information.
    t, values, f0 = on_line(lambda x: 1e-13 * np.abs(x))
    assert line_finding(t, values, f0, noise=1e-12) is None
    assert line_finding(t, values, f0, noise=1e-30).kind == "corner"


@settings(max_examples=60, deadline=None)
@given(
    curvature=st.floats(1e-2, 1e2),
    slope=st.floats(-1.0, 1.0),
    kink=st.floats(0.0, 1e2),
    size=st.floats(1e-5, 1e-2),
)
def test_kinks_larger_than_a_step_of_curvature_are_found(curvature, slope, kink, size):
    # Analytic: c t²/2 + g t + k |t|.  With k = 0 the line is smooth; with a kink larger than
    # what the curvature changes the slope by over a few steps, the slopes' jump is seen.
    t = size * np.array([1.0, 2.0, 4.0])
    g = slope * curvature * size  # the point is within a step of the smooth minimum
    f = lambda x: 0.5 * curvature * x**2 + g * x + kink * np.abs(x)  # noqa: E731
    found = line_finding(*on_line(f, t), noise=0.0)
    if kink == 0.0:
        assert found is None
    elif kink > 4.0 * curvature * size:
        assert found is not None and found.kind == "corner"


def test_axis_lines_pair_the_stencil_points_on_each_axis():
    # Common practice, no source: only symmetric pairs along an axis make a line.
    offsets = np.array([[1e-3, 0.0], [-1e-3, 0.0], [2e-3, 0.0], [0.0, 1e-3], [1e-3, 1e-3]])
    values = np.arange(5.0)
    (t0, v0), (t1, v1) = axis_lines(offsets, values)
    assert t0 == pytest.approx([1e-3]) and v0.tolist() == [[1.0, 0.0]]
    assert len(t1) == 0


def test_the_smooth_part_of_an_axis_break_is_the_other_axes():
    # Analytic: the orthogonal complement of e0 in R³ is spanned by e1 and e2.
    basis = complement(np.array([[1.0, 0.0, 0.0]]), 3)
    assert basis.tolist() == [[0.0, 0.0], [1.0, 0.0], [0.0, 1.0]]
    tilted = complement(np.array([[1.0, 1.0, 0.0]]) / math.sqrt(2.0), 3)
    assert tilted.shape == (3, 2)
    assert np.allclose(np.array([1.0, 1.0, 0.0]) @ tilted, 0.0)


# ----------------------------------------------------------------------------- whole searches


def kink(x):
    # |x0 - 0.3| + (x1 - 0.2)²: a corner minimum at (0.3, 0.2) (analytic)
    return abs(x[0] - 0.3) + (x[1] - 0.2) ** 2


def jump(x):
    # (x0 - 0.5)² + (x1 - 0.2)² + 0.5 [x0 > 0.4]: the lowest value at x0 = 0.4 from below,
    # x1 = 0.2, f = 0.01 (analytic)
    return (x[0] - 0.5) ** 2 + (x[1] - 0.2) ** 2 + 0.5 * (x[0] > 0.4)


def crease(x):
    # |x0 + x1 - 1| + (x0 - x1)² + (x2 - 0.5)²: a kinked valley along x0 + x1 = 1 whose lowest
    # point is (0.5, 0.5, 0.5), f = 0 (analytic); the kink is along the combination x0 + x1
    return abs(x[0] + x[1] - 1.0) + (x[0] - x[1]) ** 2 + (x[2] - 0.5) ** 2


@pytest.mark.parametrize("check", [True, "quick"])
def test_a_corner_minimum_is_named_and_x0_is_not_called_undetermined(check):
    sol = dl.minimize(kink, [0.0, 0.0], bounds=[(-1, 1), (-1, 1)], check=check)
    assert np.allclose(sol.point, [0.3, 0.2], atol=1e-4)  # analytic
    assert sol.verdict is Verdict.NONSMOOTH
    (piece,) = sol.curvature.breaks
    assert (piece.along, piece.kind) == ("x0", "corner")
    assert piece.slopes == pytest.approx((1.0, 1.0), rel=0.05)  # |x0 - 0.3|: slope 1 each way
    assert not any("x0" in c for c in sol.curvature.undetermined)
    text = sol.summary()
    assert "not smooth: x0, a corner minimum" in text
    assert "not determined" not in text


@pytest.mark.parametrize("check", [True, "quick"])
def test_the_edge_of_a_jump_is_named(check):
    sol = dl.minimize(jump, [0.0, 0.0], bounds=[(-1, 1), (-1, 1)], check=check)
    assert np.allclose(sol.point, [0.4, 0.2], atol=1e-4)  # analytic
    assert sol.verdict is Verdict.NONSMOOTH
    (piece,) = sol.curvature.breaks
    assert (piece.along, piece.kind) == ("x0", "edge")
    assert piece.change == pytest.approx(0.5, rel=0.01)  # the size of the jump
    assert "not determined" not in sol.summary()
    assert "the edge of a jump of +0.5" in sol.summary()


@pytest.mark.parametrize("check", [True, "quick"])
def test_a_kinked_valley_in_three_parameters_names_the_combination(check):
    sol = dl.minimize(crease, [0.0, 0.0, 0.0], bounds=[(-2, 2)] * 3, check=check)
    assert np.allclose(sol.point, [0.5, 0.5, 0.5], atol=1e-4)  # analytic
    assert sol.verdict is Verdict.NONSMOOTH
    (piece,) = sol.curvature.breaks
    assert piece.along == "0.707 x0 + 0.707 x1"  # the normal of the kink, (1, 1)/sqrt 2
    assert set(piece.parameters) == {"x0", "x1"}
    assert piece.kind == "corner"
    assert piece.slopes == pytest.approx((math.sqrt(2.0),) * 2, rel=0.05)  # |u·(1,1)|: sqrt 2
    assert sol.curvature.undetermined == ()


def test_a_search_stuck_on_the_crease_escapes_along_it():
    # The direction-set search stops on the crease, where every axis has its line minimum; the
    # check sees the smooth slope along the crease and escapes along it to (0.5, 0.5, 0.5).
    start = [0.30488499, 0.69511501, 0.5]  # on the crease, f = 0.152 (from a many-start run)
    sol = dl.minimize(crease, start, bounds=[(-2, 2)] * 3)
    assert np.allclose(sol.point, [0.5, 0.5, 0.5], atol=1e-4)  # analytic
    assert any(note.startswith("escape 1: nonsmooth") for note in sol.notes)


def test_smooth_problems_stay_minima():
    # Analytic: a positive definite quadratic; no break may be reported.
    sol = dl.minimize(lambda x: (x[0] - 1) ** 2 + 10 * (x[1] + x[0]) ** 2, [0.0, 0.0])
    assert sol.verdict is Verdict.MINIMUM
    assert sol.curvature.breaks == ()


def test_a_flat_direction_is_still_flat():
    # Analytic: x1 does not enter; both one-sided differences along it are exactly zero.
    sol = dl.minimize(lambda x: (x[0] - 1) ** 2, [0.0, 0.0], bounds=[(-2, 2), (-2, 2)])
    assert sol.verdict is Verdict.FLAT
    assert sol.curvature.breaks == ()
    (combination,) = sol.curvature.undetermined
    assert combination.endswith("x1") and "x0" not in combination


# ----------------------------------------------------------------------------- many starts


@pytest.mark.parametrize("steep", [1.0, 100.0, 1e4])
def test_many_starts_report_one_corner_once(steep):
    # Analytic: steep |x0 - 0.3| + steep |x1 + 0.1| + (x1 - 0.2)² has one minimum, (0.3, -0.1);
    # beside it the value changes at the rate `steep`, far beyond the value agreement.
    def f(x):
        return steep * abs(x[0] - 0.3) + steep * abs(x[1] + 0.1) + (x[1] - 0.2) ** 2

    land = dl.explore(f, [(-10, 10), (-10, 10)], starts=8)
    assert len(land.minima) == 1
    assert np.allclose(land.best.point, [0.3, -0.1], atol=1e-4)
    assert land.best.verdict is Verdict.NONSMOOTH
    assert "#1: not smooth: x0, a corner minimum" in land.summary()


def test_cluster_joins_rough_neighbours_by_distance_alone():
    # Common practice, no source: two ends 1e-6 apart beside a corner are one minimum.
    points = np.array([[0.0, 0.0], [1e-6, 0.0], [0.5, 0.0]])
    values = np.array([0.0, 1e-3, 0.0])
    assert cluster(points, values)[0] == [0, 2, 1]
    leaders, label = cluster(points, values, rough=[True, True, False])
    assert leaders == [0, 2] and label == [0, 0, 1]


# ----------------------------------------------------------------------------- calibration


def test_no_interval_where_the_misfit_is_not_smooth():
    # Invented residuals: sqrt|a - 0.3| makes the sum of squares |a - 0.3| + ..., a corner at
    # a = 0.3 (analytic); b enters linearly, its least-squares value is 0.05 (analytic: the
    # mean of 0.1 (b - 0.2) + 0.01 k over k = 0..3 vanishes).
    def residuals(p):
        return np.concatenate(
            [[math.sqrt(abs(p[0] - 0.3))], 0.1 * (p[1] - 0.2) + 0.01 * np.arange(4.0)]
        )

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        sol = dl.calibrate(residuals, [0.0, 0.0], bounds=[(-1, 1), (-1, 1)], names=["a", "b"])
    assert sol.named["a"] == pytest.approx(0.3, abs=1e-4)
    assert sol.named["b"] == pytest.approx(0.05, abs=1e-4)
    u = sol.uncertainty
    assert u.rough == ("a",)
    assert np.all(np.isnan(u.intervals[0])) and math.isnan(u.standard_errors[0])
    assert np.all(np.isfinite(u.intervals[1]))
    assert any("no linearized interval for a" in str(w.message) for w in caught)
    assert "not smooth" in sol.summary()


def test_the_json_document_lists_the_break():
    # Analytic: |x0 - 0.3| + (x1 - 0.2)² has its corner along x0.
    import json

    from directional.report.summary import solution_document

    sol = dl.minimize(kink, [0.0, 0.0], bounds=[(-1, 1), (-1, 1)], check="quick")
    document = json.loads(json.dumps(solution_document(sol), allow_nan=False))
    assert document["verdict"] == "nonsmooth"
    (piece,) = document["curvature"]["breaks"]
    assert piece["along"] == "x0" and piece["kind"] == "corner" and piece["parameters"] == ["x0"]


def test_unstated_noise_is_not_called_a_kink():
    # Invented: a positive definite quadratic plus noise of 1e-8 on a value near 1, not stated.
    # At the check's steps the noise makes jumps of a few 1e-8; the check notices the noise in
    # its stencil's fourth differences (Moré & Wild 2011) and sizes its steps for it, so no jump
    # is reported and the note gives the level it noticed (a handful of differences: within 4x).
    rng = np.random.default_rng(0)
    hessian = np.array([[2.0, 0.5, 0.0], [0.5, 1.0, 0.2], [0.0, 0.2, 3.0]])

    def f(x):
        d = np.asarray(x) - 0.3
        return float(d @ hessian @ d) + 1.0 + 1e-8 * rng.standard_normal()

    sol = dl.minimize(f, np.zeros(3), bounds=[(-2, 2)] * 3, check="quick", noise="none")
    assert sol.verdict is Verdict.MINIMUM
    assert sol.curvature.breaks == ()
    assert any("noise noticed by the check" in note for note in sol.notes)
    assert 1e-8 / 4 < sol.curvature.noise < 4e-8
    # left to itself (the default), the search measures the noise and the check works above it
    noticed = dl.minimize(f, np.zeros(3), bounds=[(-2, 2)] * 3, check="quick")
    assert noticed.verdict is Verdict.MINIMUM and noticed.curvature.breaks == ()
    # noise this small (1e-8 on values near 1) the search may not need to notice: then the check
    # does, and either way it is not called a kink
    assert any("noticed by the search" in note or "noise noticed by the check" in note
               for note in noticed.notes)
    stated = dl.minimize(f, np.zeros(3), bounds=[(-2, 2)] * 3, check="quick", noise=1e-8)
    assert stated.verdict is Verdict.MINIMUM and stated.curvature.breaks == ()


def test_the_check_asks_for_the_probes_as_one_more_batch():
    # Drive the check by hand (a fake partner, no driver).  |x0 + x1| + (x0 - x1)² at 0: both
    # axes cross the kink, so the candidate normals and the lines along the kink are probed in
    # one batch of purpose "smoothness"; the kink is along x0 + x1 (analytic).
    from directional.method import curvature
    from directional.method.space import build_space

    def f(p):
        return abs(p[0] + p[1]) + (p[0] - p[1]) ** 2

    space = build_space([0.0, 0.0], bounds=[(-1, 1), (-1, 1)])
    gen = curvature.check_point(
        space, space.to_scaled(np.zeros(2)), 0.0, None, check=Check.QUICK, noise=None,
        active=np.zeros(2, bool),
    )
    batch = next(gen)
    assert batch.purpose == "hessian" and len(batch.points) == 2 * 4 + 2 * 2 + 1
    batch = gen.send(np.array([f(p) for p in batch.points]))
    assert batch.purpose == "smoothness"
    with pytest.raises(StopIteration) as done:
        gen.send(np.array([f(p) for p in batch.points]))
    checked = done.value.value
    assert checked.verdict is Verdict.NONSMOOTH
    (piece,) = checked.curvature.breaks
    assert piece.along == "0.707 x0 + 0.707 x1" and piece.kind == "corner"
