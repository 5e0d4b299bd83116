"""`minimize` on an executor: the same answer as in process, and a journal that resumes."""

from __future__ import annotations

import concurrent.futures as cf

import numpy as np
import pytest

import directional as dl


def rosenbrock(x):
    # Moré, Garbow & Hillstrom 1981, problem 1: minimum 0 at (1, 1).
    return (10.0 * (x[1] - x[0] ** 2)) ** 2 + (1.0 - x[0]) ** 2


def test_a_process_pool_gives_the_in_process_answer():
    alone = dl.minimize(rosenbrock, [-1.2, 1.0])
    with cf.ProcessPoolExecutor(2) as pool:
        pooled = dl.minimize(rosenbrock, [-1.2, 1.0], executor=pool)
    assert np.array_equal(alone.point, pooled.point)
    assert alone.evaluations == pooled.evaluations
    assert pooled.verdict is dl.Verdict.MINIMUM
    assert pooled.point == pytest.approx([1.0, 1.0], abs=1e-5)


def test_a_journal_written_on_an_executor_resumes_on_one(tmp_path):
    path = tmp_path / "pooled.sqlite"
    alone = dl.minimize(rosenbrock, [-1.2, 1.0])
    calls = []

    def counted(x):
        calls.append(x.tobytes())
        return rosenbrock(x)

    with cf.ThreadPoolExecutor(2) as pool:
        first = dl.minimize(counted, [-1.2, 1.0], executor=pool, journal=path, budget=60)
        assert first.stop is dl.Stop.BUDGET
        done = dl.resume(path, counted, budget=10_000, executor=pool)
    assert np.array_equal(done.point, alone.point)
    assert len(calls) == len(set(calls)) == alone.evaluations  # nothing evaluated twice


def test_a_progress_bar_changes_nothing(capsys):
    plain = dl.minimize(rosenbrock, [-1.2, 1.0], check=False)
    shown = dl.minimize(rosenbrock, [-1.2, 1.0], check=False, progress=True)
    assert np.array_equal(plain.point, shown.point)


def test_an_executor_that_is_not_one_is_a_problem_error():
    with pytest.raises(dl.ProblemError, match="executor"):
        dl.minimize(rosenbrock, [-1.2, 1.0], executor="pool")


def test_calibrate_shows_progress_and_refuses_a_process_pool():
    # y = 3 exp(-0.7 t) exactly: the fit is (3, 0.7) (analytic, zero residuals).
    t = np.linspace(0.0, 5.0, 12)
    y = 3.0 * np.exp(-0.7 * t)

    def residuals(x):
        return x[0] * np.exp(-x[1] * t) - y

    sol = dl.calibrate(residuals, [1.0, 0.2], progress=True)
    assert sol.point == pytest.approx([3.0, 0.7], abs=1e-6)
    with cf.ThreadPoolExecutor(2) as threads:  # the residual vectors come back in memory
        assert dl.calibrate(residuals, [1.0, 0.2], executor=threads).point == pytest.approx(
            sol.point, abs=1e-9)
    with pytest.raises(dl.ProblemError, match="thread pool"), cf.ProcessPoolExecutor(1) as pool:
        dl.calibrate(residuals, [1.0, 0.2], executor=pool)
