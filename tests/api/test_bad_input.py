"""Hardening, Python API: bad arguments and misbehaving objectives, each with a clear answer.

Items already checked elsewhere are not repeated here (see tests/README.md, which maps every item
of the catalogue to its test).  The objectives are analytic (a shifted bowl: minimum at its
centre) or Rosenbrock's function (Moré, Garbow & Hillstrom 1981, problem 1: minimum 0 at (1, 1)).
"""

from __future__ import annotations

import decimal
import fractions
import math
import time

import numpy as np
import pytest

import directional as dl
from directional.run import journal as jr


def bowl(x: np.ndarray) -> float:
    """Analytic: minimum 0 at (1, -2)."""
    return float((x[0] - 1.0) ** 2 + (x[1] + 2.0) ** 2)


def rosenbrock(x: np.ndarray) -> float:
    """Moré, Garbow & Hillstrom 1981, problem 1 (minimum 0 at (1, 1))."""
    return float(100.0 * (x[1] - x[0] ** 2) ** 2 + (1.0 - x[0]) ** 2)


class Counting:
    def __init__(self, f=bowl):
        self.f = f
        self.calls = 0

    def __call__(self, x):
        self.calls += 1
        return self.f(x)


# ----------------------------------------------------------------------------- bad arguments

BAD_ARGUMENTS = [
    # start
    (dict(start=None), "start must be numbers.*got None"),
    (dict(start=[]), "start must be a flat list of numbers"),
    (dict(start={"a": 1.0}), "start must be numbers"),
    (dict(start=[1j, 1.0]), "start must be numbers"),
    (dict(start=["a", 1.0]), "start must be numbers"),
    (dict(start=[-math.inf, 1.0]), "'x0': start must be finite"),
    (dict(start=[0.5, 1.0], names=["a"]), "names has 1 entries but start has 2"),
    # bounds
    (dict(start=[0.5, 1.0], bounds=[(0.5, 0.5), (0, 3)]), "'x0': lower must be below upper"),
    (dict(start=[0.5, 1.0], bounds=[(math.nan, 1), (0, 3)]), "'x0': lower must be a number"),
    (dict(start=[0.5, 1.0], bounds=[(0, 1), (0, math.nan)]), "'x1': upper must be a number"),
    (dict(start=[0.5, 1.0], bounds=[(0, 1, 2), (0, 3)]), "'x0': bounds must be a .lower, upper. pair"),
    (dict(start=[0.5, 1.0], bounds=5), "bounds must be one .lower, upper. pair per parameter"),
    (dict(start=[0.5, 1.0], bounds=[0, 1]), "'x0': bounds must be a .lower, upper. pair"),
    (dict(start=[0.5, 1.0], bounds=[("a", "b"), (0, 3)]), "'x0': lower must be a number"),
    (dict(start=[0.5, 1.0], bounds=[(0, 1), (0, 3), (0, 1)]), "bounds has 3 pairs"),
    # names
    (dict(start=[0.5, 1.0], names=[1, 2]), "identifier, got 1"),
    (dict(start=[0.5, 1.0], names="ab"), "names must be a list of strings"),
    (dict(start=[0.5, 1.0], names=["a", ""]), "identifier, got ''"),
    # budget
    (dict(start=[0.5, 1.0], budget=0), "at least n . 1 = 3 evaluations, got 0"),
    (dict(start=[0.5, 1.0], budget=-5), "at least n . 1 = 3 evaluations, got -5"),
    (dict(start=[0.5, 1.0], budget=10.0), "whole number of evaluations, got 10.0"),
    (dict(start=[0.5, 1.0], budget=True), "whole number of evaluations, got True"),
    (dict(start=[0.5, 1.0], budget="10"), "whole number of evaluations, got '10'"),
    (dict(start=[0.5, 1.0], budget=math.inf), "whole number of evaluations, got inf"),
    # tolerances and limits
    (dict(start=[0.5, 1.0], point_tolerance=math.nan), "point_tolerance must be a positive"),
    (dict(start=[0.5, 1.0], point_tolerance=math.inf), "point_tolerance must be finite"),
    (dict(start=[0.5, 1.0], value_tolerance="1e-3"), "value_tolerance must be a positive"),
    (dict(start=[0.5, 1.0], value_tolerance=True), "value_tolerance must be a positive"),
    (dict(start=[0.5, 1.0], time_limit=0), "time_limit must be a positive"),
    (dict(start=[0.5, 1.0], time_limit=-1.0), "time_limit must be a positive"),
    (dict(start=[0.5, 1.0], time_limit=math.nan), "time_limit must be a positive"),
    (dict(start=[0.5, 1.0], time_limit=True), "time_limit must be a positive"),
    (dict(start=[0.5, 1.0], time_limit="60"), "time_limit must be a positive"),
    (dict(start=[0.5, 1.0], check="yes"), "check must be True, False, 'quick' or 'extrapolated'"),
    (dict(start=[0.5, 1.0], escapes=-1), "escapes must be a whole number"),
    (dict(start=[0.5, 1.0], noise=-1.0), "noise must be a finite number >= 0"),
    (dict(start=[0.5, 1.0], noise="loud"), "noise must be None, a number, 'estimate' or 'none'"),
]


@pytest.mark.parametrize(("kwargs", "message"), BAD_ARGUMENTS, ids=[m for _, m in BAD_ARGUMENTS])
def test_bad_arguments_are_a_problem_error_before_any_evaluation(kwargs, message):
    objective = Counting()
    with pytest.raises(dl.ProblemError, match=message):
        dl.minimize(objective, **kwargs)
    assert objective.calls == 0


@pytest.mark.parametrize(
    ("make", "message"),
    [
        (lambda: dl.Parameter("k", 1.0, 0.0, 2.0, scale="log"), "'k'.*positive lower bound, got 0.0"),
        (lambda: dl.Parameter("k", 1.0, scale="log"), "'k'.*positive lower bound, got -inf"),
        (lambda: dl.Parameter("k", 1.0, 0.5, 2.0, scale="ln"), "'k': scale must be 'linear' or 'log'"),
        (lambda: dl.Parameter("k", math.nan), "'k': start must be a number"),
        (lambda: dl.Parameter("k", 1.0, 2.0, 1.0), "'k': lower must be below upper"),
        (lambda: dl.Parameter("k", 1.0, unit=3), "'k': unit must be a string"),
        (lambda: dl.Parameter("k", "one"), "'k': start must be a number, got 'one'"),
        (lambda: dl.Parameter("2k", 1.0), "identifier, got '2k'"),
    ],
)
def test_parameter_records_refuse_bad_fields_at_once(make, message):
    with pytest.raises(dl.ProblemError, match=message):
        make()


def test_parameters_named_twice_are_refused():
    with pytest.raises(dl.ProblemError, match="'k' appears twice"):
        dl.minimize(bowl, [dl.Parameter("k", 1.0), dl.Parameter("k", 2.0)])


@pytest.mark.parametrize(
    ("args", "message"),
    [
        ((lambda t: t * t, 1, 0), "finite lower < upper"),
        ((lambda t: t * t, 0, math.inf), "finite lower < upper"),
        ((lambda t: t * t, math.nan, 1), "finite lower < upper"),
        ((lambda t: t * t, "a", 1), "must be numbers"),
        ((lambda t: t * t, 0, 1, "a"), "must be numbers"),
        ((lambda t: t * t, 0, 1, 2.0), "outside"),
        (("f", 0, 1), "f must be callable"),
    ],
)
def test_line_minimum_refuses_bad_arguments(args, message):
    with pytest.raises(dl.ProblemError, match=message):
        dl.line_minimum(*args)


# ----------------------------------------------------------------------------- what the objective returns


@pytest.mark.parametrize(
    "bad",
    [
        np.array([]),
        [1.0],
        decimal.Decimal("1.5"),
        fractions.Fraction(3, 2),
        True,
        np.array([True]),
        np.array([1.0], dtype=object),
    ],
    ids=["empty-array", "list", "Decimal", "Fraction", "bool", "bool-array", "object-array"],
)
def test_a_return_value_that_is_not_a_real_number_is_an_objective_error(bad):
    with pytest.raises(dl.ObjectiveError, match="objective must return"):
        dl.minimize(lambda x: bad, [1.0, 2.0], check=False)


@pytest.mark.parametrize("wrap", [np.longdouble, np.int64, lambda v: np.array([[v]])])
def test_other_real_numbers_are_numbers(wrap):
    sol = dl.minimize(lambda x: wrap(round(bowl(x) * 1e6)), [0.5, 1.0], check=False)
    assert sol.point == pytest.approx([1.0, -2.0], abs=2e-3)  # analytic minimum


@pytest.mark.parametrize("check", [False, True])
@pytest.mark.parametrize(
    ("objective", "words"),
    [
        (lambda x: math.nan, "start point .*objective returned nan"),
        (lambda x: math.inf, "start point .*objective returned inf"),
        (lambda x: 1e308 * (bowl(x) + 1.0), "start point .*objective returned inf"),  # overflow
        (lambda x: 10**400, "start point .*OverflowError"),
        (lambda x: {}["pressure"], "start point .*KeyError: 'pressure'"),
    ],
    ids=["nan-everywhere", "inf-everywhere", "overflow", "huge-int", "raises"],
)
def test_failing_everywhere_is_an_objective_error_naming_the_start(objective, words, check):
    with pytest.raises(dl.ObjectiveError, match=words):
        dl.minimize(objective, [0.5, 1.0], check=check)


def test_failing_at_the_start_only_is_an_objective_error_naming_the_start():
    # The start lies in the region where the model fails; everywhere else it works.
    def picky(x):
        if np.array_equal(x, [0.5, 1.0]):
            raise RuntimeError("mesh generation failed at the start")
        return bowl(x)

    with pytest.raises(dl.ObjectiveError, match=r"start point \[0\.5, 1\.0\].*mesh generation"):
        dl.minimize(picky, [0.5, 1.0])


def test_failing_for_the_first_calls_only_is_an_objective_error_and_not_retried():
    # A licence server that answers only from the fourth call: the start is not tried again.
    calls = []

    def warming(x):
        calls.append(1)
        if len(calls) <= 3:
            raise ConnectionError("licence server not ready")
        return bowl(x)

    with pytest.raises(dl.ObjectiveError, match="licence server not ready"):
        dl.minimize(warming, [0.5, 1.0])
    assert len(calls) == 1


@pytest.mark.parametrize("check", [False, "quick", True])
def test_minus_infinity_at_the_start_stops_with_a_message(check):
    # Was a traceback (records.Halt escaping the search): fixed in search.powell.
    sol = dl.minimize(lambda x: -math.inf, [0.5, 1.0], check=check)
    assert sol.stop is dl.Stop.STALLED and sol.value == -math.inf
    assert list(sol.point) == [0.5, 1.0]
    assert "unbounded below" in sol.reason
    assert sol.evaluations == 1


def test_minus_infinity_at_every_start_of_explore_is_named():
    with pytest.raises(dl.ObjectiveError, match="-inf .* unbounded below"):
        dl.explore(lambda x: -math.inf, [(0, 1), (0, 1)], starts=2, check=False)


def test_minus_infinity_inside_explore_ends_that_search_only():
    land = dl.explore(
        lambda x: -math.inf if x[0] > 0.5 else bowl(x), [(0, 1), (-3, 3)], starts=4, check=False
    )
    stalled = [s for s in land.minima if s.stop is dl.Stop.STALLED]
    assert stalled and all("unbounded below" in s.reason for s in stalled)


@pytest.mark.parametrize("check", [False, True])
@pytest.mark.parametrize("size", [1e300, 1e-300])
def test_huge_and_tiny_values_with_the_check(size, check):
    # Minimum at (1, -2) whatever the size of the values (analytic); the check agrees.
    sol = dl.minimize(lambda x: size * (bowl(x) + 1.0), [0.5, 1.0], check=check)
    assert sol.point == pytest.approx([1.0, -2.0], abs=1e-6)
    assert sol.verdict is (dl.Verdict.MINIMUM if check else dl.Verdict.UNCHECKED)


def test_an_extremely_flat_objective_is_checked_flat():
    # Differences far below rounding of 1.0: nothing to find, and the check says so.
    sol = dl.minimize(lambda x: 1.0 + 1e-300 * bowl(x), [0.5, 1.0])
    assert sol.stop is dl.Stop.CONVERGED
    assert sol.verdict is dl.Verdict.FLAT
    assert list(sol.point) == [0.5, 1.0]


@pytest.mark.parametrize("check", ["quick", True])
def test_a_discontinuous_objective_ends_with_the_check_too(check):
    sol = dl.minimize(lambda x: math.floor(x[0]) + abs(x[1]), [1.5, 2.0], check=check)
    assert sol.value <= 1.0 + 1e-6  # analytic: floor(x0) + |x1| is 1 at the start's floor
    assert sol.stop is dl.Stop.CONVERGED
    # analytic: inside the step 1 <= x0 < 2 the value does not change with x0, so the point is
    # one of a line of equally good ones, which is what FLAT says
    assert 1.0 <= sol.point[0] < 2.0 and abs(sol.point[1]) < 1e-6
    assert sol.verdict is dl.Verdict.FLAT


def test_calibrate_and_explore_are_immune_to_an_objective_that_mutates_its_point():
    t = np.array([0.0, 1.0, 2.0, 3.0])  # invented demo data: exact for a = 2, k = 0.5
    y = 2.0 * np.exp(-0.5 * t)

    def residuals(k):
        r = k[0] * np.exp(-k[1] * t) - y
        k[:] = 1e9
        return r

    sol = dl.calibrate(residuals, [1.0, 1.0], check=False)
    assert sol.point == pytest.approx([2.0, 0.5], abs=1e-5)

    def vandal(x):
        value = bowl(x)
        x[:] = np.nan
        return value

    land = dl.explore(vandal, [(-5, 5), (-5, 5)], starts=3, check=False)
    assert land.best.point == pytest.approx([1.0, -2.0], abs=1e-5)


# ----------------------------------------------------------------------------- time


def test_an_evaluation_longer_than_the_time_limit_is_kept_and_the_run_stops_after_it():
    # A Python objective cannot be cut off safely: the long evaluation completes, is kept, and no
    # new one starts (a program is cut off by Command's timeout: tests/interface/test_command.py).
    calls = []

    def slow_second(x):
        calls.append(1)
        if len(calls) == 2:
            time.sleep(0.3)
        return bowl(x)

    sol = dl.minimize(slow_second, [0.5, 1.0], time_limit=0.1, check=False)
    assert sol.stop is dl.Stop.BUDGET and "time limit of 0.1 s" in sol.reason
    assert sol.evaluations == len(calls) == 2
    assert sol.history[1].seconds >= 0.3


def test_a_time_limit_that_passes_before_the_first_evaluation_is_named():
    # Was a traceback (records.Halt escaping the search at its start point).
    with pytest.raises(dl.ObjectiveError, match="no evaluation was made: the time limit"):
        dl.minimize(bowl, [0.5, 1.0], time_limit=1e-9)


# ----------------------------------------------------------------------------- interrupts and exits


def test_ctrl_c_at_the_start_point_is_a_keyboard_interrupt_and_resumes(tmp_path):
    path = tmp_path / "run.sqlite"
    calls = []

    def objective(x):
        calls.append(1)
        if len(calls) == 1:
            raise KeyboardInterrupt
        return rosenbrock(x)

    with pytest.raises(KeyboardInterrupt):
        dl.minimize(objective, [-1.2, 1.0], journal=path, check=False)
    contents = jr.read(path)
    assert [e.status for e in contents.evaluations] == ["interrupted"]
    assert contents.sessions[-1]["stop"] == "interrupted"
    sol = dl.resume(path, objective)
    reference = dl.minimize(rosenbrock, [-1.2, 1.0], check=False)
    assert sol.point.tobytes() == reference.point.tobytes()
    assert sol.evaluations == reference.evaluations


def test_system_exit_inside_the_objective_is_not_swallowed_and_the_journal_survives(tmp_path):
    # sys.exit() in the objective is the caller's own request to stop: it propagates; the journal
    # keeps what was done and the run resumes.
    path = tmp_path / "run.sqlite"
    calls = []

    def objective(x):
        calls.append(1)
        if len(calls) == 20:
            raise SystemExit(3)
        return rosenbrock(x)

    with pytest.raises(SystemExit):
        dl.minimize(objective, [-1.2, 1.0], journal=path, check=False)
    contents = jr.read(path)
    assert len(contents.evaluations) == 19
    assert contents.sessions[-1]["stop"] == "error"
    sol = dl.resume(path, rosenbrock)
    reference = dl.minimize(rosenbrock, [-1.2, 1.0], check=False)
    assert sol.point.tobytes() == reference.point.tobytes()


@pytest.mark.parametrize("check", [False, True])
def test_every_parameter_on_a_bound_is_reported_not_a_traceback(check):
    # Was an IndexError from numdifftools (a Jacobian of no free parameter) in calibrate, and a
    # StopIteration from the driver (a check with nothing to evaluate) in minimize.  The minimum of
    # x0 + x1 on [0, 1]^2 is the corner (0, 0) (analytic).
    sol = dl.minimize(lambda x: x[0] + x[1], [0.5, 0.5], bounds=[(0, 1), (0, 1)], check=check)
    assert list(sol.point) == [0.0, 0.0] and sol.active == ("x0", "x1")
    fit = dl.calibrate(lambda x: [x[0] + 1.0, x[1] + 1.0, 0.5], [0.5, 0.5],
                       bounds=[(0, 1), (0, 1)], check=check)
    assert list(fit.point) == [0.0, 0.0] and fit.active == ("x0", "x1")
    assert fit.value == pytest.approx(2.25)  # 1 + 1 + 0.25
    assert sol.verdict is fit.verdict is dl.Verdict.UNCHECKED
    if check:
        assert "not checked: every parameter is on a bound" in sol.notes + fit.notes


@pytest.mark.parametrize(
    ("bad", "words"),
    [
        (None, "flat array of real numbers, got None"),  # was "objective returned nan"
        ("1.0", "flat array of real numbers, got '1.0'"),
        (np.array([]), "flat array of real numbers"),
        (np.array([[1.0, 2.0]]), "flat array of real numbers"),
        ([1j, 2.0], "flat array of real numbers"),
    ],
)
def test_residuals_that_are_not_a_flat_array_are_an_objective_error(bad, words):
    with pytest.raises(dl.ObjectiveError, match=words):
        dl.calibrate(lambda k: bad, [1.0, 1.0], check=False)


def test_residuals_that_change_length_are_failed_evaluations_not_an_abort():
    # the start's length is the run's; every other point fails, with the reason, and is not
    # called twice (its vector is not "recomputed")
    calls = []

    def residuals(k):
        calls.append(1)
        return np.ones(2 if k[0] == 1.0 else 3)

    sol = dl.calibrate(residuals, [1.0, 1.0], check=False)
    assert sol.failures == sum(1 for e in sol.history if e.point[0] != 1.0) > 0
    assert len(calls) == sol.evaluations
    assert all("had 2 entries and now have 3" in e.detail for e in sol.history if e.status != "ok")
    assert sol.uncertainty is None and not any("recomputed" in n for n in sol.notes)


@pytest.mark.parametrize("seed", ["a", -1, 1.5])
def test_a_bad_seed_of_explore_is_a_problem_error(seed):
    # Was a TypeError from numpy's SeedSequence.
    objective = Counting(lambda x: float(x[0] ** 2))
    with pytest.raises(dl.ProblemError, match="seed must be None, a whole number"):
        dl.explore(objective, [(0, 1)], starts=2, seed=seed, check=False)
    assert objective.calls == 0
