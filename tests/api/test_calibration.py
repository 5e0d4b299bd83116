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
    assert {"jacobian", "gauss-newton", "hessian"} <= purposes
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
    with pytest.raises(dl.ObjectiveError, match="entries"):
        dl.calibrate(lambda p: np.ones(3 if p[0] == 0.0 else 4), [0.0])


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
