"""Tests of `dl.explore` and many searches on the one driver (`directional.run.driver`).

The reference problem is Himmelblau's function (Himmelblau 1972, "Applied Nonlinear
Programming", McGraw-Hill): f(x, y) = (x² + y − 11)² + (x + y² − 7)², with four minima where
f = 0.  One is (3, 2) exactly; the other three are the roots quoted to six decimals below (from
memory; each is also checked here to be a zero of the gradient, an analytic fact).
"""

from __future__ import annotations

import concurrent.futures as cf
import math
import os
import random
import signal
import subprocess
import sys
import textwrap
import threading
import time
import zlib
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass
from pathlib import Path

import distributed  # a test dependency (the [test] extra): missing, the tests fail loudly
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import qmc

import directional as dl
from directional.api.explore import cluster, design
from directional.method.search import Settings, powell
from directional.method.space import build_space
from directional.run import journal as journal_module
from directional.run.driver import DIED, Driver, Evaluation, evaluate

HIMMELBLAU_MINIMA = np.array(  # Himmelblau 1972; decimals from memory, checked below
    [
        [3.0, 2.0],
        [-2.805118, 3.131312],
        [-3.779310, -3.283186],
        [3.584428, -1.848126],
    ]
)
BOX = [(-5.0, 5.0), (-5.0, 5.0)]


def himmelblau(x: np.ndarray) -> float:
    """Himmelblau's (1972) function."""
    return float((x[0] ** 2 + x[1] - 11.0) ** 2 + (x[0] + x[1] ** 2 - 7.0) ** 2)


def himmelblau_gradient(x: np.ndarray) -> np.ndarray:
    a, b = x[0] ** 2 + x[1] - 11.0, x[0] + x[1] ** 2 - 7.0
    return np.array([4.0 * a * x[0] + 2.0 * b, 2.0 * a + 4.0 * b * x[1]])


def _sorted_minima(land: dl.Landscape) -> np.ndarray:
    points = np.array([m.point for m in land.minima])
    return points[np.lexsort(points.T[::-1])]


def _same_landscape(a: dl.Landscape, b: dl.Landscape) -> None:
    assert len(a.minima) == len(b.minima)
    for m, n in zip(a.minima, b.minima):
        assert np.array_equal(m.point, n.point)
        assert m.value == n.value
    assert a.counts == b.counts
    assert a.reached == b.reached
    assert a.evaluations == b.evaluations
    assert np.array_equal(a.starts, b.starts)


@pytest.fixture(scope="module")
def sequential() -> dl.Landscape:
    return dl.explore(himmelblau, BOX, starts=16, seed=0)


# ------------------------------------------------------------------------------ the problem


def test_reference_minima_are_stationary_points_with_zero_value():
    """The quoted minima (from memory) are zeros of the gradient (analytic) with f = 0."""
    for x in HIMMELBLAU_MINIMA:
        assert np.max(np.abs(himmelblau_gradient(x))) < 1e-4
        assert himmelblau(x) < 1e-9


def test_sixteen_starts_find_the_four_minima_of_himmelblau(sequential):
    """Himmelblau 1972: four minima, each with f = 0."""
    land = sequential
    assert len(land.minima) == 4
    found = _sorted_minima(land)
    expected = HIMMELBLAU_MINIMA[np.lexsort(HIMMELBLAU_MINIMA.T[::-1])]
    assert np.allclose(found, expected, atol=1e-5)
    for m in land.minima:
        assert m.value < 1e-10
        assert m.stop is dl.Stop.CONVERGED
    values = [m.value for m in land.minima]
    assert values == sorted(values)  # best first
    assert sum(land.counts) == 16
    assert sorted(set(land.reached)) == [0, 1, 2, 3]
    for i, count in enumerate(land.counts):
        assert land.reached.count(i) == count
    assert land.evaluations == len(land.history)
    assert land.failures == 0
    assert land.best is land.minima[0]


def himmelblau_hessian(x: np.ndarray) -> np.ndarray:
    """The analytic Hessian of Himmelblau's function."""
    a, b = x[0] ** 2 + x[1] - 11.0, x[0] + x[1] ** 2 - 7.0
    xy = 4.0 * x[0] + 4.0 * x[1]
    return np.array([[8.0 * x[0] ** 2 + 4.0 * a + 2.0, xy], [xy, 8.0 * x[1] ** 2 + 4.0 * b + 2.0]])


def test_each_minimum_is_checked_against_the_analytic_hessian(sequential):
    """The curvature check at each minimum agrees with the analytic Hessian (positive definite)."""
    for m in sequential.minima:
        assert m.verdict is dl.Verdict.MINIMUM
        assert m.curvature is not None and m.curvature.source in ("quick", "extrapolated")
        exact = himmelblau_hessian(m.point)
        assert np.all(np.linalg.eigvalsh(exact) > 0)
        assert np.allclose(m.curvature.hessian, exact, rtol=1e-4, atol=1e-4)
        assert any(e.purpose == "hessian" for e in m.history) or m.curvature.evaluations > 0


def test_without_the_check_the_verdicts_stay_unchecked():
    land = dl.explore(himmelblau, BOX, starts=4, seed=0, check=False)
    assert all(m.verdict is dl.Verdict.UNCHECKED for m in land.minima)


def test_each_end_point_is_its_minimum(sequential):
    """Every search ended within the clustering distance of the minimum it is said to reach."""
    land = sequential
    for j, g in enumerate(land.reached):
        assert np.linalg.norm((land.ends[j] - land.minima[g].point) / 10.0) < 1e-3


def test_summary_names_the_minima_and_counts(sequential):
    text = sequential.summary()
    assert "16 starts reached 4 distinct minima" in text
    rows = [line.split() for line in text.splitlines() if line[:5].strip().isdigit()]
    assert [int(r[0]) for r in rows] == [1, 2, 3, 4]
    for row, m, count in zip(rows, sequential.minima, sequential.counts):
        assert float(row[1]) == pytest.approx(m.value, rel=1e-7)
        assert int(row[2]) == count
        assert np.allclose([float(v) for v in row[4:]], m.point, rtol=1e-7)
    assert "x0" in text and "x1" in text


def test_the_minima_history_is_the_searches_that_reached_them(sequential):
    land = sequential
    for g, m in enumerate(land.minima):
        members = {j for j, r in enumerate(land.reached) if r == g}
        assert {e.search for e in m.history} <= members
        assert m.evaluations == len(m.history)
    assert sum(m.evaluations for m in land.minima) == land.evaluations


def noisy_himmelblau(x: np.ndarray) -> float:
    """Himmelblau plus uniform noise of standard deviation 1e-6, fixed for each point."""
    u = np.random.default_rng(zlib.crc32(x.tobytes())).uniform(-1.0, 1.0)
    return himmelblau(x) + 1e-6 * math.sqrt(3.0) * u


def test_noise_does_not_split_a_minimum_in_two():
    """End points whose values differ by the noise alone are one minimum."""
    land = dl.explore(noisy_himmelblau, BOX, starts=16, seed=0, noise=1e-6, check=False)
    assert len(land.minima) == 4
    found = _sorted_minima(land)
    expected = HIMMELBLAU_MINIMA[np.lexsort(HIMMELBLAU_MINIMA.T[::-1])]
    assert np.allclose(found, expected, atol=1e-3)
    _, label = cluster(np.zeros((2, 1)), np.array([0.0, 5e-6]), noise=1e-6)
    assert label == [0, 0]
    _, label = cluster(np.zeros((2, 1)), np.array([0.0, 7e-6]), noise=1e-6)
    assert label == [0, 1]


# ------------------------------------------------------------------------------ the design


def test_design_is_scipy_scrambled_sobol_in_the_bounds():
    """Against scipy.stats.qmc: the same scrambled Sobol points, mapped to the bounds."""
    space = build_space([0.0, 1.0], [(-2.0, 2.0), (0.0, 4.0)])
    points = space.to_user(design(space, 8, seed=7))
    engine = qmc.Sobol(d=2, scramble=True, rng=np.random.default_rng(7))
    unit = engine.random_base2(3)
    assert np.allclose(points, qmc.scale(unit, [-2.0, 0.0], [2.0, 4.0]), rtol=0, atol=1e-12)


def test_design_spreads_log_parameters_evenly_in_their_logarithm():
    rate = dl.Parameter("rate", 1.0, 1e-3, 1e3, scale="log")
    space = build_space([rate])
    points = space.to_user(design(space, 16, seed=3))
    logs = np.log10(points[:, 0])
    # the 16 points of a scrambled Sobol' sequence in 1-d: one in each sixteenth (Sobol 1967)
    cells = np.floor((logs + 3.0) / 6.0 * 16).astype(int)
    assert sorted(cells) == list(range(16))


def test_design_is_reproducible_and_extends():
    space = build_space([0.0, 0.0, 0.0], [(-1, 1)] * 3)
    assert np.array_equal(design(space, 12, seed=5), design(space, 12, seed=5))
    assert np.array_equal(design(space, 8, seed=5), design(space, 16, seed=5)[:8])
    assert not np.array_equal(design(space, 8, seed=5), design(space, 8, seed=6))
    with_start = design(space, 4, seed=5, include_start=True)
    assert np.array_equal(with_start[0], np.zeros(3))
    assert np.array_equal(with_start[1:], design(space, 3, seed=5))


@given(
    lower=st.lists(st.floats(-1e3, 1e3), min_size=1, max_size=4),
    width=st.floats(1e-3, 1e3),
    starts=st.integers(1, 40),
    seed=st.integers(0, 2**32 - 1),
)
@settings(max_examples=50, deadline=None)
def test_design_points_lie_inside_the_bounds(lower, width, starts, seed):
    bounds = [(lo, lo + width) for lo in lower]
    space = build_space([lo + 0.5 * width for lo in lower], bounds)
    points = space.to_user(design(space, starts, seed=seed))
    assert points.shape == (starts, len(lower))
    assert np.all(points >= space.lower) and np.all(points <= space.upper)


def test_explore_uses_the_start_of_parameters_first():
    params = [dl.Parameter("a", 1.0, -5.0, 5.0), dl.Parameter("b", 1.0, -5.0, 5.0)]
    land = dl.explore(himmelblau, params, starts=3, seed=1, check=False)
    assert np.array_equal(land.starts[0], [1.0, 1.0])
    assert land.names == ("a", "b")
    alone = dl.explore(himmelblau, params, starts=3, seed=1, include_start=False, check=False)
    assert not np.any(np.all(alone.starts == [1.0, 1.0], axis=1))


# ------------------------------------------------------------------------------ clustering


def test_cluster_merges_only_near_points_with_equal_values():
    points = np.array([[0.0, 0.0], [5e-4, 0.0], [0.0, 2e-3], [5e-4, 0.0], [1.0, 1.0]])
    values = np.array([1.0, 1.0 + 1e-8, 1.0, 1.1, np.inf])
    leaders, label = cluster(points, values)
    assert leaders == [0, 2, 3]
    assert label == [0, 0, 1, 2, -1]


@given(st.lists(st.floats(-10, 10), min_size=1, max_size=12), st.randoms())
@settings(max_examples=50)
def test_cluster_groups_do_not_depend_on_input_order(xs, rnd):
    points = np.array(xs)[:, None]
    values = np.round(points[:, 0] ** 2, 1)
    _, label = cluster(points, values, same_point=0.5)
    order = list(range(len(xs)))
    rnd.shuffle(order)
    _, shuffled = cluster(points[order], values[order], same_point=0.5)
    groups = {frozenset(i for i in range(len(xs)) if label[i] == g) for g in set(label)}
    again = {
        frozenset(order[i] for i in range(len(xs)) if shuffled[i] == g) for g in set(shuffled)
    }
    if len(set(values)) == len(values):  # ties broken by position: compare only without ties
        assert groups == again


# ------------------------------------------------------------------------------ executors


class Holding(cf.Executor):
    """A test double: one thread runs the calls, taking them in batches of its own choosing.

    It waits until ``gather`` calls are waiting (or a moment passed), then `_take` picks the calls
    to run now and `_run` runs them; `_run` returning False ends the thread.
    """

    def __init__(self, gather: int) -> None:
        self._gather = gather
        self._waiting: list = []
        self._cv = threading.Condition()
        self._closed = False
        self._thread = threading.Thread(target=self._loop, daemon=True)
        self._thread.start()

    def submit(self, fn, /, *args, **kwargs):
        future: cf.Future = cf.Future()
        with self._cv:
            self._waiting.append((future, fn, args))
            self._cv.notify()
        return future

    def _loop(self) -> None:
        while True:
            with self._cv:
                self._cv.wait_for(lambda: self._waiting or self._closed)
                if self._closed:
                    return
                self._cv.wait_for(lambda: len(self._waiting) >= self._gather, timeout=0.002)
                jobs = self._take()
            if not self._run(jobs):
                return

    def _take(self) -> list:
        jobs, self._waiting = self._waiting, []
        return jobs

    def _run(self, jobs: list) -> bool:
        for future, fn, args in jobs:
            future.set_result(fn(*args))
        return True

    def shutdown(self, wait=True, *, cancel_futures=False):
        with self._cv:
            self._closed = True
            self._cv.notify()
        self._thread.join()


class Shuffled(Holding):
    """Runs one call at a time, picked at random among those waiting."""

    def __init__(self, seed: int, gather: int) -> None:
        self._rng = random.Random(seed)
        super().__init__(gather)

    def _take(self) -> list:
        return [self._waiting.pop(self._rng.randrange(len(self._waiting)))]


@pytest.mark.parametrize(("seed", "budget"), [(1, 500), (2, 500), (3, 25)])
def test_outcomes_do_not_depend_on_the_order_of_completion(seed, budget):
    """Each search receives its values in its own order: same outcomes, same evaluations.

    With a budget of 25 every search stops on its budget: where does not depend on the order.
    """
    space = build_space([0.0, 0.0], BOX)
    starts = design(space, 6, seed=4)

    def run(**kw):
        runner = Driver(objective=himmelblau, budget=budget, **kw)
        out = runner.run_all({j: powell(space, Settings(), start=u) for j, u in enumerate(starts)})
        return out, runner.log.evaluations

    alone, log_alone = run()
    executor = Shuffled(seed, gather=4)
    try:
        shuffled, log_shuffled = run(executor=executor, workers=4)
    finally:
        executor.shutdown()
    for j in alone:
        assert np.array_equal(alone[j].point, shuffled[j].point)
        assert alone[j].value == shuffled[j].value
        assert alone[j].cycles == shuffled[j].cycles
        assert alone[j].stop is shuffled[j].stop
        assert alone[j].stop is (dl.Stop.CONVERGED if budget == 500 else dl.Stop.BUDGET)
    assert {e.point.tobytes() for e in log_alone} == {e.point.tobytes() for e in log_shuffled}
    assert len(log_alone) == len(log_shuffled)
    order = [(e.search, e.point.tobytes()) for e in log_shuffled]
    assert order != [(e.search, e.point.tobytes()) for e in log_alone]  # the test did shuffle
    by_search: dict[int, list[int]] = {}
    for e in log_shuffled:
        by_search.setdefault(e.search, []).append(e.sequence)
    assert all(seqs == list(range(len(seqs))) for seqs in by_search.values())


def test_process_pool_and_sequential_give_the_same_landscape(sequential):
    pooled = dl.explore(himmelblau, BOX, starts=16, seed=0, workers=2)
    _same_landscape(sequential, pooled)


def test_dask_local_cluster_gives_the_same_landscape():
    alone = dl.explore(himmelblau, BOX, starts=8, seed=0, check="quick")
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0"
    ) as cluster_, distributed.Client(cluster_) as client:
        land = dl.explore(
            himmelblau, BOX, starts=8, seed=0, check="quick", executor=client.get_executor()
        )
        used = {worker for worker in client.run(os.getpid).values()}
    _same_landscape(alone, land)
    assert [m.verdict for m in land.minima] == [m.verdict for m in alone.minima]
    assert os.getpid() not in used


def test_a_caller_executor_is_used_as_it_is(sequential):
    with cf.ThreadPoolExecutor(max_workers=3) as executor:
        land = dl.explore(himmelblau, BOX, starts=16, seed=0, executor=executor)
        assert not executor._shutdown  # left running for its owner
    _same_landscape(sequential, land)


# ------------------------------------------------------------------------------ dying workers


@dataclass(frozen=True)
class DiesBeyond:
    """Himmelblau, but a worker process (never the parent) kills itself for x > edge."""

    parent: int
    edge: float

    def __call__(self, x: np.ndarray) -> float:
        if x[0] > self.edge and os.getpid() != self.parent:
            os.kill(os.getpid(), signal.SIGKILL)
        return himmelblau(x)


def test_a_killed_worker_fails_its_evaluation_not_the_run():
    objective = DiesBeyond(parent=os.getpid(), edge=4.5)
    land = dl.explore(objective, BOX, starts=8, seed=2, workers=2, check=False)
    died = [e for e in land.history if e.detail == DIED]
    assert died, "no worker died: the test did not test anything"
    assert all(e.point[0] > 4.5 and e.status == "failed" for e in died)
    assert all(e.status == "ok" for e in land.history if e.point[0] <= 4.5)
    assert len(land.minima) >= 3
    for m in land.minima:
        assert m.value < 1e-10


class Breaks(Holding):
    """A test double for a process pool that a worker death breaks.

    Holds calls until two are waiting (or a moment passed); if one of them is at ``poison``, every
    waiting call fails with `BrokenProcessPool` and the pool stays broken, as a real one does.
    """

    def __init__(self, poison: np.ndarray, made: list) -> None:
        self._poison = poison.tobytes()
        self.broken = False
        made.append(self)
        super().__init__(2)

    def submit(self, fn, /, *args, **kwargs):
        if self.broken:
            raise BrokenProcessPool("broken")
        return super().submit(fn, *args, **kwargs)

    def _take(self) -> list:
        jobs = super()._take()
        if any(args[1].tobytes() == self._poison for _, _, args in jobs):
            self.broken = True
        return jobs

    def _run(self, jobs: list) -> bool:
        if not self.broken:
            return super()._run(jobs)
        for future, _, _ in jobs:
            future.set_exception(BrokenProcessPool("a worker died"))
        return False


def test_a_broken_pool_is_replaced_and_only_the_killing_point_fails():
    """Points in flight beside the one that broke the pool are run again, alone; they succeed."""
    space = build_space([0.0, 0.0], BOX)
    starts = design(space, 6, seed=9)
    poison = space.to_user(starts[2])
    made: list = []

    def fresh():
        return Breaks(poison, made)

    def objective(x):
        return np.nan if x.tobytes() == poison.tobytes() else himmelblau(x)

    runner = Driver(objective=himmelblau, budget=500, executor=fresh(), workers=2, replace=fresh)
    with runner:
        out = runner.run_all({j: powell(space, Settings(), start=u) for j, u in enumerate(starts)})
    reference = Driver(objective=objective, budget=500)
    expected = reference.run_all({j: powell(space, Settings(), start=u) for j, u in enumerate(starts)})
    died = [e for e in runner.log.evaluations if e.status != "ok"]
    assert [(e.point.tobytes(), e.detail) for e in died] == [(poison.tobytes(), DIED)]
    assert len(made) >= 2
    for j in expected:
        assert np.array_equal(out[j].point, expected[j].point)
        assert out[j].stop is expected[j].stop
    assert out[2].stop is dl.Stop.STALLED  # its start failed


# ------------------------------------------------------------------------------ journal


SCRIPT = """
import sys, time
import numpy as np
import directional as dl

def slow_himmelblau(x):
    time.sleep(0.004)
    return float((x[0] ** 2 + x[1] - 11.0) ** 2 + (x[0] + x[1] ** 2 - 7.0) ** 2)

if __name__ == "__main__":
    dl.explore(slow_himmelblau, [(-5.0, 5.0), (-5.0, 5.0)], starts=16, seed=0, workers=2,
               journal=sys.argv[1])
"""


def _rows(path: Path) -> int:
    try:
        return len(journal_module.read(path).evaluations)
    except dl.JournalError:
        return 0


def test_killed_exploration_resumes_to_the_same_landscape(tmp_path, sequential):
    script = tmp_path / "run.py"
    script.write_text(textwrap.dedent(SCRIPT))
    path = tmp_path / "explore.sqlite"
    env = {**os.environ, "PYTHONPATH": str(Path(__file__).resolve().parents[2])}
    errors = tmp_path / "stderr.txt"
    with open(errors, "wb") as stderr:
        process = subprocess.Popen(
            [sys.executable, str(script), str(path)], env=env, stderr=stderr,
            start_new_session=True,
        )
    try:
        deadline = time.monotonic() + 60
        while _rows(path) < 150 and process.poll() is None and time.monotonic() < deadline:
            time.sleep(0.02)
    finally:
        os.killpg(process.pid, signal.SIGKILL)  # the run and its pool workers
        process.wait()
    before = journal_module.read(path).evaluations
    assert 150 <= len(before) < sequential.evaluations, (
        f"the run was not killed mid-way ({len(before)} rows): {errors.read_text()[-2000:]}"
    )

    land = dl.explore(himmelblau, BOX, starts=16, seed=0, journal=path)
    _same_landscape(sequential, land)
    after = journal_module.read(path).evaluations
    assert len(after) == sequential.evaluations  # nothing evaluated twice
    assert len({e.point.tobytes() for e in after}) == len(after)
    assert [e.point.tobytes() for e in after[: len(before)]] == [
        e.point.tobytes() for e in before
    ]


class InterruptsOnce:
    """Himmelblau that sends Ctrl-C (SIGINT) to this process at its ``at``-th call."""

    def __init__(self, at: int) -> None:
        self.at = at
        self.calls = 0

    def __call__(self, x: np.ndarray) -> float:
        self.calls += 1
        if self.calls == self.at:
            os.kill(os.getpid(), signal.SIGINT)
        return himmelblau(x)


def test_ctrl_c_halts_every_search_and_the_journal_resumes(tmp_path, sequential):
    path = tmp_path / "explore.sqlite"
    cut = dl.explore(InterruptsOnce(200), BOX, starts=16, seed=0, journal=path)
    assert dl.Stop.INTERRUPTED in cut.stops
    assert all(m.verdict is dl.Verdict.UNCHECKED for m in cut.minima)  # no check after Ctrl-C
    kept = journal_module.read(path)
    made = [e for e in kept.evaluations if e.status != "interrupted"]
    assert len(made) == cut.evaluations < 210
    assert kept.evaluations[-1].status == "interrupted"  # journaled, to be made again on resume
    assert kept.sessions[-1]["stop"] == "interrupted"
    done = dl.explore(himmelblau, BOX, starts=16, seed=0, journal=path)
    _same_landscape(sequential, done)
    made = [e for e in journal_module.read(path).evaluations if e.status != "interrupted"]
    assert len(made) == sequential.evaluations


def test_resume_continues_an_exploration_from_its_journal(tmp_path, sequential):
    path = tmp_path / "explore.sqlite"
    short = dl.explore(himmelblau, BOX, starts=16, seed=0, journal=path, total_budget=300)
    assert short.evaluations == 300
    assert dl.Stop.BUDGET in short.stops
    more = dl.resume(path, himmelblau, total_budget=500)  # a budget is no part of the identity
    assert more.evaluations == 500
    done = dl.resume(path, himmelblau)
    _same_landscape(sequential, done)
    assert len(journal_module.read(path).evaluations) == sequential.evaluations


def test_a_journal_of_other_points_is_refused():
    space = build_space([0.0, 0.0], BOX)
    foreign = Evaluation(index=0, point=np.array([1.25, -0.5]), value=3.0, status="ok", search=0)
    runner = Driver(objective=himmelblau, budget=100, stored=[foreign])
    with pytest.raises(dl.JournalError, match="search 0"):
        runner.run_all({0: powell(space, Settings(), start=np.array([0.1, 0.1]))})


def test_a_journal_with_other_settings_is_refused(tmp_path):
    path = tmp_path / "explore.sqlite"
    dl.explore(himmelblau, BOX, starts=2, seed=0, journal=path, check=False)
    with pytest.raises(dl.JournalError, match="seed"):
        dl.explore(himmelblau, BOX, starts=2, seed=1, journal=path, check=False)


# ------------------------------------------------------------------------------ budgets, errors


def test_each_search_keeps_its_own_budget_and_the_run_its_total():
    land = dl.explore(himmelblau, BOX, starts=4, seed=0, budget=10, check=False)
    assert land.evaluations <= 40
    assert all(s is dl.Stop.BUDGET for s in land.stops)
    capped = dl.explore(himmelblau, BOX, starts=4, seed=0, total_budget=25, check=False)
    assert capped.evaluations == 25


def test_the_worker_evaluates_through_driver_call():
    def broken(x):
        raise RuntimeError("solver diverged")

    value, status, detail, started, seconds = evaluate(broken, np.array([1.0]))
    assert value == np.inf and status == "failed" and "solver diverged" in detail
    assert seconds >= 0.0 and started > 0.0
    with pytest.raises(dl.ObjectiveError):
        evaluate(lambda x: "text", np.array([1.0]))


def test_a_start_that_fails_is_reported_not_fatal():
    def half(x):
        return np.nan if x[0] > 0 else himmelblau(x)

    land = dl.explore(half, BOX, starts=8, seed=0, check=False)
    assert -1 in land.reached
    assert all(m.point[0] <= 0 for m in land.minima)
    assert "failed at the first evaluation" in land.summary()


def test_failing_at_every_start_is_an_objective_error():
    def never(x):
        raise RuntimeError("licence server down")

    with pytest.raises(dl.ObjectiveError, match="every one of the 4 starts.*licence server down"):
        dl.explore(never, BOX, starts=4, check=False)


@pytest.mark.parametrize(
    ("kwargs", "message"),
    [
        ({"bounds": [(-1, 1), (0, None)]}, "'x1'"),
        ({"bounds": [(-1, 1)], "starts": 0}, "starts"),
        ({"bounds": [(-1, 1)], "workers": 0}, "workers"),
        ({"bounds": [(-1, 1)], "executor": "pool"}, "executor"),
        ({"bounds": None}, "bounds"),
        ({"bounds": [(-1, 1)], "same_point": -1.0}, "same_point"),
        ({"bounds": [(-1, 1)], "journal": "j.sqlite", "seed": None}, "seed"),
        ({"bounds": [dl.Parameter("k", 1.0, 0.1, 10.0)], "start": [1.0]}, "inside each"),
    ],
)
def test_bad_arguments_are_refused_before_any_evaluation(kwargs, message, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    calls = []
    with pytest.raises(dl.ProblemError, match=message):
        dl.explore(lambda x: calls.append(x) or 0.0, **kwargs)
    assert not calls


def test_an_unpicklable_objective_is_refused_for_a_process_pool():
    with pytest.raises(dl.ProblemError, match="picklable"):
        dl.explore(lambda x: float(x[0] ** 2), [(-1, 1)], starts=2, workers=2)
    with cf.ProcessPoolExecutor(max_workers=1) as pool, pytest.raises(dl.ProblemError):
        dl.explore(lambda x: float(x[0] ** 2), [(-1, 1)], starts=2, executor=pool)


# ------------------------------------------------------------------------------ start map


def test_start_map_is_drawn_from_the_evaluations_made_without_new_ones(tmp_path, sequential):
    from matplotlib import image

    from directional.report.maps import start_map

    calls = []

    def counting(x):
        calls.append(x.copy())
        return himmelblau(x)

    for objective, extra in ((counting, 0), (counting, 24), (None, 400)):
        path = start_map(sequential, objective, tmp_path / "starts.png", extra=extra)
        assert calls == []  # no grid of at least 5 x 5 allowed, or no objective: no evaluation
        height, width = image.imread(path, format="png").shape[:2]  # a PNG decoded whole
        assert height >= 600 and width >= 600


def test_start_map_spends_at_most_extra_report_evaluations(tmp_path, sequential):
    from directional.report.maps import start_map

    calls = []

    def counting(x):
        calls.append(x.copy())
        return himmelblau(x)

    start_map(sequential, counting, tmp_path / "starts.png", extra=100)
    assert len(calls) == 100  # a square grid of 10 x 10, the most that fits in 100
    assert all(-5.0 <= x[0] <= 5.0 and -5.0 <= x[1] <= 5.0 for x in calls)


def test_start_map_of_log_parameters_and_bad_pairs(tmp_path):
    from directional.report.maps import start_map

    params = [
        dl.Parameter("rate", 1.0, 0.01, 100.0, scale="log"),
        dl.Parameter("gain", 0.0, -2.0, 2.0),
        dl.Parameter("lag", 0.0, -2.0, 2.0),
    ]

    def bowl(x):
        return float(np.log10(x[0]) ** 2 + (x[1] - 0.5) ** 2 + x[2] ** 2)

    land = dl.explore(bowl, params, starts=4, seed=0, check=False)
    assert np.allclose(land.best.point, [1.0, 0.5, 0.0], atol=1e-4)
    start_map(land, bowl, tmp_path / "log.png", pair=(0, 2), extra=36)
    with pytest.raises(dl.ProblemError, match="pair"):
        start_map(land, bowl, tmp_path / "bad.png", pair=(1, 1))
    one = dl.explore(lambda x: float(x[0] ** 2), [(-1, 1)], starts=2, check=False)
    with pytest.raises(dl.ProblemError, match="two parameters"):
        start_map(one, None, tmp_path / "one.png")
