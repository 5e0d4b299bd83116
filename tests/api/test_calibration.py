"""`dl.calibrate` against NIST's certified nonlinear regression results, and its uncertainty.

The NIST StRD files live in tests/reference/nist-strd/ (its README says where each number came
from): data, NIST's two official starts, certified estimates and certified standard deviations.
From both starts the estimates must agree to 1e-6 and the standard deviations to 1e-3, relative,
on every set.
"""

from __future__ import annotations

import math
import tomllib
import warnings

import numpy as np
import pytest
from conftest import REFERENCE
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

import directional as dl
from directional.records import Verdict
from directional.report.summary import solution_document

NIST = REFERENCE / "nist-strd"
SETS = ["Misra1a", "Chwirut2", "DanWood", "Misra1b", "Kirby2", "Hahn1", "BoxBOD"]


def nist(name: str) -> dict:
    with open(NIST / f"{name}.toml", "rb") as handle:
        return tomllib.load(handle)


def model(data: dict):
    """The NIST mean function f(x; b) from the file's plain-math model line."""
    expression = compile(data["model"].replace("^", "**"), data["name"], "eval")
    x = np.array(data["x"], dtype=float)

    def f(b: np.ndarray) -> np.ndarray:
        names = {f"b{i + 1}": b[i] for i in range(len(b))}
        with np.errstate(all="ignore"):
            return eval(expression, {"exp": np.exp, "x": x, **names})  # noqa: S307

    return f


def fit(name: str, start: str, **options) -> tuple[dict, dl.Solution]:
    data = nist(name)
    f, y = model(data), np.array(data["y"], dtype=float)
    names = [f"b{i + 1}" for i in range(data["n_parameters"])]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # correlation warnings are tested on their own
        sol = dl.calibrate(lambda b: f(b) - y, data[start], names=names, **options)
    return data, sol


@pytest.mark.parametrize("start", ["start1", "start2"])
@pytest.mark.parametrize("name", SETS)
def test_nist_strd_certified_estimates_and_standard_deviations(name, start):
    # Source: NIST StRD nonlinear regression, data set `name`, certified values.
    data, sol = fit(name, start)
    certified = np.array(data["certified_estimates"])
    deviations = np.array(data["certified_std_devs"])
    assert sol.point == pytest.approx(certified, rel=1e-6), f"NIST StRD {name} estimates"
    u = sol.uncertainty
    assert u.standard_errors == pytest.approx(deviations, rel=1e-3), f"NIST StRD {name} std devs"
    assert sol.value == pytest.approx(data["residual_sum_of_squares"], rel=1e-6)
    assert math.sqrt(u.residual_variance) == pytest.approx(data["residual_std_dev"], rel=1e-6)
    assert u.degrees_of_freedom == data["degrees_of_freedom"]
    assert sol.verdict is Verdict.MINIMUM


def test_nist_strd_misra1a_intervals_use_students_t():
    # NIST StRD Misra1a: 14 observations, 2 parameters, 12 degrees of freedom.  The 97.5 % point
    # of Student's t with 12 degrees of freedom, from scipy.stats (a reference library), agrees
    # with the printed tables: 2.179 (Abramowitz & Stegun 1964, table 26.10; from memory).
    t = stats.t.ppf(0.975, 12)
    assert t == pytest.approx(2.179, abs=5e-4)
    data, sol = fit("Misra1a", "start2")
    u = sol.uncertainty
    half = 0.5 * (u.intervals[:, 1] - u.intervals[:, 0])
    assert half == pytest.approx(t * np.array(data["certified_std_devs"]), rel=1e-3)
    assert 0.5 * (u.intervals[:, 0] + u.intervals[:, 1]) == pytest.approx(sol.point, rel=1e-12)


def test_nist_strd_misra1a_correlation_is_named_in_a_warning():
    # NIST StRD Misra1a: b1 and b2 are correlated beyond 0.99 at the certified estimates
    data = nist("Misra1a")
    f, y = model(data), np.array(data["y"])
    with pytest.warns(UserWarning, match=r"b1 and b2 \(r = -0\.99"):
        sol = dl.calibrate(lambda b: f(b) - y, data["start2"], names=["b1", "b2"])
    assert sol.uncertainty.correlation[0, 1] < -0.99
    assert sol.uncertainty.correlation[0, 0] == 1.0


def test_straight_line_matches_a_reference_library():
    # A straight line y = a + b x through the published NIST StRD Misra1a observations (only the
    # data: NIST certifies an exponential model for them, not this line).  NIST's certified line,
    # Norris, is not among the reference files (see tests/reference/README.md), so the check
    # values come from general-purpose libraries: scipy.stats.linregress (slope, intercept and
    # their standard errors) and numpy.linalg.lstsq with s² (XᵀX)⁻¹ (the covariance of ordinary
    # least squares, e.g. Draper & Smith 1998, "Applied Regression Analysis", ch. 1 and 5).
    data = nist("Misra1a")
    x, y = np.array(data["x"]), np.array(data["y"])
    m = len(x)
    line = stats.linregress(x, y)
    design = np.column_stack([np.ones(m), x])
    (a, b), (rss,), _, _ = np.linalg.lstsq(design, y, rcond=None)
    s2 = rss / (m - 2)
    covariance = s2 * np.linalg.inv(design.T @ design)
    assert (a, b) == pytest.approx((line.intercept, line.slope), rel=1e-12)  # the two libraries
    # the point to 1e-9 needs a point tolerance to match (the default 1e-6 is met at 5e-8)
    sol = dl.calibrate(lambda p: p[0] + p[1] * x - y, [0.0, 1.0], names=["a", "b"],
                       point_tolerance=1e-10)
    u = sol.uncertainty
    assert sol.point == pytest.approx([line.intercept, line.slope], rel=1e-9)
    assert sol.value == pytest.approx(rss, rel=1e-9)
    assert u.residual_variance == pytest.approx(s2, rel=1e-7)
    assert u.standard_errors == pytest.approx([line.intercept_stderr, line.stderr], rel=1e-6)
    assert u.covariance == pytest.approx(covariance, rel=1e-6)
    correlation = covariance[0, 1] / math.sqrt(covariance[0, 0] * covariance[1, 1])
    assert u.correlation[0, 1] == pytest.approx(correlation, rel=1e-6)
    assert u.degrees_of_freedom == m - 2 == 12


def test_a_product_of_parameters_is_not_identifiable():
    # y = a b x determines only the product a b: the Jacobian has rank 1 (analytic); the data
    # are invented for this check.
    x = np.linspace(1.0, 5.0, 9)
    y = 6.0 * x + np.array([0.1, -0.2, 0.05, 0.0, -0.1, 0.2, -0.05, 0.1, -0.1])
    with pytest.warns(UserWarning, match="do not determine"):
        sol = dl.calibrate(lambda p: p[0] * p[1] * x - y, [1.0, 2.0], names=["a", "b"])
    assert np.all(np.isinf(sol.uncertainty.standard_errors))
    (combination,) = sol.uncertainty.undetermined
    assert "a" in combination and "b" in combination
    assert sol.point[0] * sol.point[1] == pytest.approx(np.sum(x * y) / np.sum(x * x), rel=1e-8)


@settings(max_examples=10, deadline=None)
@given(scale=st.floats(0.01, 100.0))
def test_constant_weights_change_neither_estimates_nor_errors(scale):
    # dividing every residual by the same sigma scales S and s² alike: the estimates and the
    # standard errors s² (JᵀJ)⁻¹ do not move (Bates & Watts 1988, sec. 2.3)
    data = nist("DanWood")
    f, y = model(data), np.array(data["y"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        plain = dl.calibrate(lambda b: f(b) - y, data["start2"], check=False)
        weighted = dl.calibrate(
            lambda b: f(b) - y, data["start2"], sigma=np.full(len(y), scale), check=False
        )
    assert weighted.point == pytest.approx(plain.point, rel=1e-7)
    assert weighted.value == pytest.approx(plain.value / scale**2, rel=1e-7)
    assert weighted.uncertainty.standard_errors == pytest.approx(
        plain.uncertainty.standard_errors, rel=1e-5
    )


def test_every_evaluation_goes_through_the_driver():
    data, sol = fit("DanWood", "start1")
    purposes = {e.purpose for e in sol.history}
    assert {"jacobian", "gauss-newton"} <= purposes
    # small residuals: the verdict comes from JᵀJ, no numerical Hessian is paid for
    assert "hessian" not in purposes and sol.curvature.source == "gauss-newton"
    assert sol.evaluations == len(sol.history)
    assert len({e.point.tobytes() for e in sol.history}) == len(sol.history)  # nothing twice


def test_budget_counts_everything():
    data = nist("Misra1a")
    f, y = model(data), np.array(data["y"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sol = dl.calibrate(lambda b: f(b) - y, data["start1"], budget=120)
    assert sol.evaluations <= 120


def test_summary_shows_the_uncertainty_table():
    data, sol = fit("Misra1a", "start2")
    text = sol.summary()
    assert "std. error" in text and "95 % interval" in text
    assert "strongest correlations: b1-b2 -0.99" in text
    assert "12 degrees of freedom" in text
    assert "verdict: minimum" in text


def test_bad_sigma_and_bad_residuals_are_named():
    y = np.array([1.0, 2.0, 3.0])
    with pytest.raises(dl.ProblemError, match="sigma"):
        dl.calibrate(lambda p: p[0] - y, [0.0], sigma=[1.0, -1.0, 1.0])
    with pytest.raises(dl.ObjectiveError, match="sigma has 2"):
        dl.calibrate(lambda p: p[0] - y, [0.0], sigma=[1.0, 1.0])
    with pytest.raises(dl.ObjectiveError, match="flat array"):
        dl.calibrate(lambda p: np.ones((2, 2)), [0.0])
    with pytest.raises(dl.ProblemError, match="sigma"):
        dl.calibrate(lambda p: p[0] - y, [0.0], sigma="wide")
    with pytest.raises(dl.ProblemError, match="sigma"):
        dl.calibrate(lambda p: p[0] - y, [0.0], sigma=[[1.0, 1.0, 1.0]])
    with pytest.raises(dl.ProblemError, match=r"sigma.*0\.0"):
        dl.calibrate(lambda p: p[0] - y, [0.0], sigma=0.0)


def test_one_sigma_for_every_residual_is_the_same_as_a_vector_of_it():
    # dividing every residual by one number (Bates & Watts 1988, sec. 2.3: S and s² scale alike)
    data = nist("Misra1a")
    f, y = model(data), np.array(data["y"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        one = dl.calibrate(lambda b: f(b) - y, data["start2"], sigma=0.05)
        many = dl.calibrate(lambda b: f(b) - y, data["start2"], sigma=np.full(len(y), 0.05))
    assert one.value == many.value
    assert one.value == pytest.approx(data["residual_sum_of_squares"] / 0.05**2, rel=1e-6)
    assert one.uncertainty.standard_errors == pytest.approx(data["certified_std_devs"], rel=1e-3)


def test_a_residual_vector_of_the_wrong_length_is_a_failed_evaluation():
    # NIST StRD Misra1a from its first start, with a model that returns one residual too few at
    # about one point in three between b1 = 250 and the start, 500 (the search passes there on its
    # way to 238.9): those evaluations fail with the reason, and the run still reaches the
    # certified estimates.
    data = nist("Misra1a")
    f, y = model(data), np.array(data["y"])

    def residuals(b):
        r = f(b) - y
        odd = 250.0 < b[0] < 500.0 and int.from_bytes(b.tobytes()[:8], "little") % 3 == 0
        return r[:-1] if odd else r

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sol = dl.calibrate(residuals, data["start1"], names=["b1", "b2"])
    failed = [e for e in sol.history if e.status != "ok"]
    assert failed and all("had 14 entries and now have 13" in e.detail for e in failed)
    assert sol.point == pytest.approx(data["certified_estimates"], rel=1e-6)
    assert sol.uncertainty.standard_errors == pytest.approx(data["certified_std_devs"], rel=1e-3)


def test_a_parameter_on_a_bound_gets_no_error():
    # y = a + b x with b forced to stay below 1 while the data want 2: b sits on its bound;
    # a is then the mean of y - x (analytic); data invented for this check.
    x = np.array([0.0, 1.0, 2.0, 3.0])
    y = np.array([1.0, 3.1, 4.9, 7.0])
    sol = dl.calibrate(
        lambda p: p[0] + p[1] * x - y, [0.0, 0.5], bounds=[(-10, 10), (0, 1)], names=["a", "b"],
    )
    assert sol.active == ("b",)
    assert sol.point[0] == pytest.approx(np.mean(y - x), rel=1e-7)
    assert math.isnan(sol.uncertainty.standard_errors[1])
    assert sol.uncertainty.degrees_of_freedom == 3


def _quadratic_with_a_bound(low: float, high: float):
    # y = a + b x + c x² with c held to c <= 0 while the data curve upward: c ends on its upper
    # bound 0, and a + b x is then the least-squares line (analytic); data invented for the check
    x = np.linspace(low, high, 12)
    y = 1.0 + 2.0 * x + 0.8 * x**2 + 0.01 * np.sin(7.0 * x)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        sol = dl.calibrate(
            lambda p: p[0] + p[1] * x + p[2] * x**2 - y, [0.0, 1.0, -0.5],
            bounds=[(-50, 50), (-50, 50), (-1, 0)], names=["a", "b", "c"],
        )
    return x, y, sol, [str(w.message) for w in caught]


def test_intervals_hold_with_a_parameter_fixed_on_its_bound():
    x, y, sol, _ = _quadratic_with_a_bound(0.0, 4.0)
    assert sol.active == ("c",) and sol.uncertainty.fixed == ("c",)
    line = stats.linregress(x, y)  # the line through the data, from a reference library
    assert sol.point[:2] == pytest.approx([line.intercept, line.slope], rel=1e-7)
    assert sol.uncertainty.standard_errors[:2] == pytest.approx(
        [line.intercept_stderr, line.stderr], rel=1e-5
    )
    assert "the errors and intervals hold with c fixed at its upper bound" in sol.summary()
    assert not sol.uncertainty.confounded


def test_a_parameter_the_data_cannot_separate_from_one_on_a_bound_gets_no_interval():
    # on 1 <= x <= 1.1, x and x² are nearly collinear: freeing c would multiply the standard
    # errors of a and b by the variance-inflation factors of the design [1, x, x²] (analytic:
    # sqrt of the ratio of the diagonals of the inverse normal matrices, with and without c)
    x, _, sol, messages = _quadratic_with_a_bound(1.0, 1.1)
    design = np.column_stack([np.ones_like(x), x, x**2])
    with_c = np.diag(np.linalg.inv(design.T @ design))[:2]
    without = np.diag(np.linalg.inv(design[:, :2].T @ design[:, :2]))
    growth = np.sqrt(with_c / without)
    assert np.all(growth > 10.0)
    found = {j: (b, g) for j, b, g in sol.uncertainty.confounded}
    assert set(found) == {"a", "b"} and found["a"][0] == found["b"][0] == "c"
    assert [found["a"][1], found["b"][1]] == pytest.approx(growth, rel=1e-4)
    assert np.all(np.isnan(sol.uncertainty.intervals[:2]))
    text = sol.summary()
    assert "not separable from c" in text
    assert any("cannot separate a from c" in m for m in messages)
    document = solution_document(sol)["uncertainty"]
    assert document["fixed_on_bound"] == ["c"]
    assert [(d["parameter"], d["on_bound"]) for d in document["not_separable"]] == [
        ("a", "c"), ("b", "c")
    ]
    assert "central-difference Jacobian" in document["jacobian"]


def test_a_saddle_of_a_large_residual_fit_is_escaped():
    # r = (a, b, 2 (a b - 1)) from (0, 0): there JᵀJ = I is positive definite, but
    # sum r_i ∇²r_i = -4 [[0, 1], [1, 0]] makes S a saddle; the check sees the residuals'
    # curvature, hands the point to the Hessian check, which escapes along (1, 1).  On a = b = t,
    # S = 2 t² + 4 (t² - 1)² is least at t² = 3/4, S = 7/4 (analytic).
    sol = dl.calibrate(lambda p: np.array([p[0], p[1], 2.0 * (p[0] * p[1] - 1.0)]), [0.0, 0.0],
                       bounds=[(-3.0, 3.0), (-3.0, 3.0)], names=["a", "b"])
    assert sol.verdict is Verdict.MINIMUM
    assert np.abs(sol.point) == pytest.approx([math.sqrt(0.75)] * 2, rel=1e-6)
    assert sol.value == pytest.approx(1.75, rel=1e-9)
    assert any("curvature is not small against JᵀJ" in n for n in sol.notes)
    assert any(n.startswith("escape 1: saddle") for n in sol.notes)


def test_where_gauss_newton_stalls_the_direction_set_search_takes_over():
    # r = (x0 - 3, x1 - 1): minimum (3, 1) (analytic).  The residuals fail in a thin band on
    # both sides of the start's x0 = 1, where the difference Jacobian of Gauss-Newton probes: it
    # stalls at once, and the direction-set search (whose line searches step over the band)
    # must take over from the start.  The band is invented for this check.
    def residuals(x):
        if 1e-9 < abs(x[0] - 1.0) < 1e-6:
            raise RuntimeError("the model does not converge here")
        return np.array([x[0] - 3.0, x[1] - 1.0])

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sol = dl.calibrate(residuals, [1.0, 0.0])
    assert sol.point == pytest.approx([3.0, 1.0], abs=1e-8)
    assert any(e.status == "failed" for e in sol.history)
    assert "line" in {e.purpose for e in sol.history}
    assert any("direction-set search" in note for note in sol.notes)
