"""`minimize` on an executor: the same answer as in process, and a journal that resumes."""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import functools
import io
import re
import sys

import numpy as np
import pytest

import directional as dl
from directional.run import progress


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


def test_a_journal_written_on_a_pool_resumes_in_process(tmp_path):
    """One replay rule (by point): where a journal was written does not matter."""
    path = tmp_path / "pooled.sqlite"
    alone = dl.minimize(rosenbrock, [-1.2, 1.0])
    calls = []

    def counted(x):
        calls.append(x.tobytes())
        return rosenbrock(x)

    with cf.ThreadPoolExecutor(2) as pool:
        first = dl.minimize(counted, [-1.2, 1.0], executor=pool, journal=path, budget=60)
    assert first.stop is dl.Stop.BUDGET
    done = dl.resume(path, counted, budget=10_000)
    assert np.array_equal(done.point, alone.point)
    assert len(calls) == len(set(calls)) == alone.evaluations == done.evaluations


class Terminal(io.StringIO):
    """Standard error that says it is a terminal: the progress bar is drawn on it."""

    def isatty(self) -> bool:
        return True


def test_a_process_pool_with_a_progress_bar_on_a_terminal(monkeypatch):
    """The bar is an observer of the driver: the objective sent to the workers is the caller's.

    (It once wrapped the objective, and the pool failed to pickle the bar's terminal stream.)
    """
    alone = dl.minimize(rosenbrock, [-1.2, 1.0], check=False)
    terminal = Terminal()
    monkeypatch.setattr(sys, "stderr", terminal)
    with cf.ProcessPoolExecutor(2) as pool:
        shown = dl.minimize(rosenbrock, [-1.2, 1.0], executor=pool, progress=True, check=False)
    assert "directional" in terminal.getvalue() and "eval" in terminal.getvalue()
    assert np.array_equal(shown.point, alone.point) and shown.evaluations == alone.evaluations


@pytest.fixture
def terminal(monkeypatch) -> Terminal:
    """A terminal for standard error, and a bar redrawn at every evaluation (not every 0.1 s).

    Used as ``with contextlib.redirect_stderr(terminal)`` inside the test: pytest sets its own
    standard error back between a fixture and the test.
    """
    stream = Terminal()
    monkeypatch.setattr(progress, "tqdm", functools.partial(progress.tqdm, mininterval=0,
                                                            miniters=1))
    return stream


def frames(text: str) -> list[tuple[int, int, str]]:
    """(evaluations, budget, best value) of every frame of the bar that shows a best value."""
    return [(int(m[1]), int(m[2]), m[3])
            for m in re.finditer(r"(\d+)/(\d+) \[[^\]]*?best ([^,\]]+)", text)]


def test_a_progress_bar_changes_nothing(terminal):
    with contextlib.redirect_stderr(terminal):
        plain = dl.minimize(rosenbrock, [-1.2, 1.0], check=False)
        assert terminal.getvalue() == ""  # no bar unless asked
        shown = dl.minimize(rosenbrock, [-1.2, 1.0], check=False, progress=True)
    assert np.array_equal(plain.point, shown.point)
    drawn = frames(terminal.getvalue())
    assert [n for n, _, _ in drawn] == list(range(1, shown.evaluations + 1))  # every evaluation
    assert {total for _, total, _ in drawn} == {3000}  # the default budget, 1000 (n + 1)
    assert drawn[-1][2] == f"{shown.value:.6g}"
    assert terminal.getvalue().endswith("\r")  # the bar is removed at the end


def test_an_executor_that_is_not_one_is_a_problem_error():
    with pytest.raises(dl.ProblemError, match="executor"):
        dl.minimize(rosenbrock, [-1.2, 1.0], executor="pool")


def test_calibrate_shows_progress_and_refuses_a_process_pool(terminal):
    # y = 3 exp(-0.7 t) exactly: the fit is (3, 0.7) (analytic, zero residuals).
    t = np.linspace(0.0, 5.0, 12)
    y = 3.0 * np.exp(-0.7 * t)

    def residuals(x):
        return x[0] * np.exp(-x[1] * t) - y

    with contextlib.redirect_stderr(terminal):
        sol = dl.calibrate(residuals, [1.0, 0.2], progress=True)
    assert sol.point == pytest.approx([3.0, 0.7], abs=1e-6)
    drawn = frames(terminal.getvalue())
    assert [n for n, _, _ in drawn] == list(range(1, sol.evaluations + 1))
    # the best value shown is the sum of squares, the least one evaluated
    assert drawn[-1][2] == f"{min(e.value for e in sol.history):.6g}"
    with cf.ThreadPoolExecutor(2) as threads:  # the residual vectors come back in memory
        assert dl.calibrate(residuals, [1.0, 0.2], executor=threads).point == pytest.approx(
            sol.point, abs=1e-9)
    with pytest.raises(dl.ProblemError, match="thread pool"), cf.ProcessPoolExecutor(1) as pool:
        dl.calibrate(residuals, [1.0, 0.2], executor=pool)
