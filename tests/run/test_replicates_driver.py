"""Replicates through the driver and the journal: every run kept, the mean sent, nothing repeated.

The stochastic objective is invented for these tests (it says so below): a smooth bowl plus
Gaussian noise of a known standard deviation.  The checks are the driver's contract (the mean is
what the search got, the journal holds k rows per point, a resume repeats nothing) and one
statistical check of the reported noise against the known sigma.
"""

from __future__ import annotations

import concurrent.futures as cf
import hashlib
import math
import sqlite3
import threading
from pathlib import Path

import numpy as np
import pytest

import directional as dl
from directional.errors import JournalError
from directional.records import SPENT, SPREAD, Batch, Halt, Stop
from directional.run import journal as jr
from directional.run.driver import Driver

START = [-1.0, 1.5]


def bowl(x: np.ndarray) -> float:
    """Invented: a tilted quadratic bowl, minimum 0 at (1, -0.5)."""
    return float((x[0] - 1.0) ** 2 + 3.0 * (x[1] + 0.5) ** 2 + (x[0] - 1.0) * (x[1] + 0.5))


class Noisy:
    """Invented for these tests: ``bowl`` plus independent Gaussian noise of standard deviation sigma.

    The n-th run of a point draws from a generator seeded by the point's bytes and n, so that the
    same runs give the same values whatever the order of the points or the session (``counts``
    may be shared between sessions); ``interrupt_at`` makes that call a Ctrl-C, ``fail`` makes a
    run fail.
    """

    def __init__(self, sigma=0.01, *, interrupt_at=0, counts=None, fail=lambda x, n: False):
        self.sigma = sigma
        self.__wrapped__ = bowl  # the journal's fingerprint sees the function itself
        self.calls = 0
        self.interrupt_at = interrupt_at
        self.counts = {} if counts is None else counts
        self.fail = fail
        self.lock = threading.Lock()

    def __call__(self, x: np.ndarray) -> float:
        key = x.tobytes()
        with self.lock:
            self.calls += 1
            if self.calls == self.interrupt_at:
                raise KeyboardInterrupt  # what Ctrl-C does inside the objective
            n = self.counts.get(key, 0)
            self.counts[key] = n + 1
        if self.fail(x, n):
            raise RuntimeError("the random stream of this run diverged")
        seed = int.from_bytes(hashlib.sha256(key + n.to_bytes(4, "little")).digest()[:8], "little")
        return bowl(x) + self.sigma * float(np.random.default_rng(seed).standard_normal())


def rows(path: Path) -> list[tuple]:
    with sqlite3.connect(path) as db:
        return db.execute(
            "SELECT search, sequence, point, value, status FROM evaluation ORDER BY row"
        ).fetchall()


def by_point(stored: list[tuple]) -> dict[bytes, list[float]]:
    groups: dict[bytes, list[float]] = {}
    for row in stored:
        if row[4] != "interrupted":
            groups.setdefault(row[2], []).append(row[3] if row[4] == "ok" else math.inf)
    return groups


# ----------------------------------------------------------------------------- the driver


def asking(batches, sent):
    """A search of fixed batches that keeps what it is sent; asks SPENT and SPREAD at the end."""
    try:
        for points in batches:
            sent.append((yield Batch(points=np.array(points, dtype=float))))
    except Halt as halt:
        return halt.stop
    return (yield SPENT), (yield SPREAD)


def test_the_search_gets_the_mean_of_each_points_runs():
    objective, sent = Noisy(0.1), []
    driver = Driver(objective=objective, budget=100, replicates=3)
    spent, spread = driver.run(asking([[[0.0, 0.0], [1.0, 2.0]], [[0.0, 0.0], [2.0, 2.0]]], sent))
    assert objective.calls == 9 and driver.spent == 9  # three points, three runs each
    groups = {}
    for e in driver.log.evaluations:
        groups.setdefault(e.point.tobytes(), []).append(e.value)
    mean = {key: math.fsum(v) / 3 for key, v in groups.items()}
    assert all(len(v) == 3 for v in groups.values())
    key = np.array([0.0, 0.0]).tobytes()
    assert sent[0].tolist() == [mean[key], mean[np.array([1.0, 2.0]).tobytes()]]
    assert sent[1].tolist() == [mean[key], mean[np.array([2.0, 2.0]).tobytes()]]  # from the cache
    assert spent == 9  # SPENT counts runs
    expected = math.sqrt(sum(np.var(v, ddof=1) * 2 for v in groups.values()) / 6)
    assert spread == pytest.approx(expected, rel=1e-12)
    assert [e.sequence for e in driver.log.evaluations] == list(range(9))


def test_the_best_is_the_best_mean_not_the_lowest_run():
    """A single low run must not make its point the best (the mean is what counts)."""
    values = iter([0.0, 10.0, 10.0, 3.0, 3.0, 3.0])  # point a: runs 0, 10, 10 (mean 6.67); b: 3
    driver = Driver(objective=lambda x: next(values), budget=100, replicates=3)
    sent = []
    driver.run(asking([[[0.0], [1.0]]], sent))
    assert sent[0].tolist() == [20.0 / 3.0, 3.0]
    assert driver.log.best.point.tolist() == [1.0] and driver.log.best.value == 3.0


def test_failed_runs_are_left_out_of_the_mean():
    """The documented policy: the mean of the runs that succeeded; all failed: the point fails."""
    def objective(x):
        if x[0] > 1.5 or (x[0] > 0.5 and objective.calls % 2):
            objective.calls += 1
            raise RuntimeError("diverged")
        objective.calls += 1
        return float(x[0] + objective.calls)

    objective.calls = 0
    sent = []
    driver = Driver(objective=objective, budget=100, replicates=3)
    driver.run(asking([[[0.0], [1.0], [2.0]]], sent))
    values = [e.value for e in driver.log.evaluations]
    assert values[:3] == [1.0, 2.0, 3.0]
    assert sent[0][0] == 2.0
    assert values[3:6] == [math.inf, 6.0, math.inf]  # calls 4 and 6 fail, call 5 gives 1 + 5
    assert sent[0][1] == 6.0
    assert sent[0][2] == math.inf
    assert sum(1 for e in driver.log.evaluations if e.status == "failed") == 5


def test_the_budget_counts_runs_and_a_point_gets_all_its_runs_or_none():
    sent = []
    driver = Driver(objective=Noisy(), budget=8, replicates=3)  # room for two points, not three
    stop = driver.run(asking([[[0.0, 0.0], [1.0, 0.0], [2.0, 0.0]]], sent))
    assert stop is Stop.BUDGET and driver.spent == 6 and sent == []


def test_the_total_budget_starts_a_point_only_when_all_its_runs_fit():
    sent = []
    driver = Driver(objective=Noisy(), budget=100, total=8, replicates=3)
    stop = driver.run(asking([[[0.0, 0.0], [1.0, 0.0], [2.0, 0.0]]], sent))
    assert stop is Stop.BUDGET and driver.spent == 6  # no run of the third point


def test_the_runs_of_a_point_go_to_the_executor_at_once():
    """Three runs of the start point must be in flight together to pass the barrier."""
    barrier = threading.Barrier(3, timeout=20)
    noisy = Noisy()

    def objective(x):
        if x.tolist() == START:
            barrier.wait()  # raises BrokenBarrierError (a failed run) unless all three are here
        return noisy(x)

    with cf.ThreadPoolExecutor(3) as pool:
        driver = Driver(objective=objective, budget=100, replicates=3, executor=pool)
        sent = []
        driver.run(asking([[START]], sent))
    assert all(e.status == "ok" for e in driver.log.evaluations) and len(driver.log.evaluations) == 3


# ----------------------------------------------------------------------------- the journal


def test_the_journal_keeps_every_run_and_the_solution_is_a_mean(tmp_path):
    path = tmp_path / "run.sqlite"
    sol = dl.minimize(Noisy(), START, replicates=3, journal=path, check=False)
    stored = rows(path)
    groups = by_point(stored)
    assert len(stored) == 3 * len(groups) == sol.evaluations
    assert {len(v) for v in groups.values()} == {3}
    assert sorted(r[1] for r in stored) == list(range(len(stored)))  # each run its own row
    assert sol.value == math.fsum(groups[sol.point.tobytes()]) / 3
    # above the replicates' noise the search returns the point its model puts lowest, not the
    # lowest mean (a low mean may be luck): still within a few noise levels of that lowest mean
    lowest = min(math.fsum(v) / 3 for v in groups.values())
    assert sol.noise is not None and sol.value <= lowest + 4 * sol.noise
    assert jr.read(path).header.identity["arguments"]["replicates"] == 3


def test_one_run_per_point_leaves_the_identity_as_before(tmp_path):
    """Journals written before replicates existed name none: they must still resume."""
    path = tmp_path / "run.sqlite"
    dl.minimize(bowl, START, journal=path, check=False)
    assert "replicates" not in jr.read(path).header.identity["arguments"]


def test_a_journal_of_other_replicates_is_refused(tmp_path):
    path = tmp_path / "run.sqlite"
    dl.minimize(Noisy(), START, replicates=3, budget=30, journal=path, check=False)
    with pytest.raises(JournalError, match="replicates"):
        dl.minimize(Noisy(), START, replicates=2, journal=path, check=False)


@pytest.mark.parametrize("interrupt_at", [20, 47, 101])  # in the middle of a point's runs
def test_a_resume_after_ctrl_c_repeats_nothing(tmp_path, interrupt_at):
    reference = dl.minimize(Noisy(), START, replicates=3, check=False)
    path = tmp_path / "run.sqlite"
    counts: dict[bytes, int] = {}
    first = dl.minimize(Noisy(interrupt_at=interrupt_at, counts=counts), START, replicates=3,
                        journal=path, check=False)
    assert first.stop is Stop.INTERRUPTED and first.evaluations == interrupt_at - 1
    objective = Noisy(counts=counts)
    again = dl.resume(path, objective)
    assert again.point.tobytes() == reference.point.tobytes() and again.value == reference.value
    assert objective.calls == reference.evaluations - (interrupt_at - 1)
    stored = rows(path)
    groups = by_point(stored)
    assert {len(v) for v in groups.values()} == {3}  # the interrupted point got only its missing run
    assert sum(1 for r in stored if r[4] != "interrupted") == reference.evaluations


def test_a_resume_with_a_larger_budget_goes_on(tmp_path):
    reference = dl.minimize(Noisy(), START, replicates=3)
    path = tmp_path / "run.sqlite"
    counts: dict[bytes, int] = {}
    first = dl.minimize(Noisy(counts=counts), START, replicates=3, budget=61, journal=path)
    assert first.stop is Stop.BUDGET and first.evaluations <= 61 and first.evaluations % 3 == 0
    objective = Noisy(counts=counts)
    again = dl.minimize(objective, START, replicates=3, journal=path)
    assert again.point.tobytes() == reference.point.tobytes()
    assert again.verdict == reference.verdict
    assert objective.calls == reference.evaluations - first.evaluations


def test_a_thread_pool_finds_what_one_process_finds():
    """The runs come back in any order; the mean must not depend on it (bit for bit)."""
    alone = dl.minimize(Noisy(), START, replicates=4, check=False)
    with cf.ThreadPoolExecutor(4) as pool:
        pooled = dl.minimize(Noisy(), START, replicates=4, check=False, executor=pool)
    assert pooled.point.tobytes() == alone.point.tobytes() and pooled.value == alone.value
    assert pooled.evaluations == alone.evaluations


def test_failed_runs_are_noted_and_the_point_keeps_its_mean(tmp_path):
    fail = lambda x, n: n == 1 and x[0] > 0.0  # noqa: E731 - the second run fails right of 0
    sol = dl.minimize(Noisy(fail=fail), START, replicates=3, check=False)
    assert sol.failures > 0 and math.isfinite(sol.value)
    assert any("had failed replicates" in note for note in sol.notes)


# ----------------------------------------------------------------------------- the noise


def test_the_planned_level_is_the_starts_spread_over_root_k(tmp_path):
    path = tmp_path / "run.sqlite"
    sol = dl.minimize(Noisy(0.02), START, replicates=4, journal=path, check=False)
    start = np.array(START, dtype=float).tobytes()
    runs = by_point(rows(path))[start]
    level = float(np.std(np.sort(runs), ddof=1)) / 2.0
    assert any(f"noise level {level:.3g} for the mean of 4 replicates" in n for n in sol.notes)


@pytest.mark.parametrize(("sigma", "k"), [(0.01, 4), (0.1, 2), (1e-3, 9)])
def test_the_reported_noise_is_that_of_the_mean(sigma, k):
    """Known sigma: the reported noise of the mean is sigma / sqrt(k) within 20 %.

    The pooled estimate has ``dof`` = points (k - 1) degrees of freedom (over a hundred points
    here); its relative standard error is about 1 / sqrt(2 dof) (chi-square variance, from
    memory), under 6 % for dof >= 150: 20 % is more than three standard errors, and the seed is
    fixed, so the test is deterministic and fails only if the estimate is wrong.
    """
    sol = dl.minimize(Noisy(sigma), START, replicates=k, check=False)
    spread = sol.spread
    assert spread.replicates == k and spread.degrees_of_freedom >= 150
    assert spread.degrees_of_freedom == spread.points * (k - 1)
    assert spread.mean == pytest.approx(sigma / math.sqrt(k), rel=0.2)
    assert spread.run == pytest.approx(sigma, rel=0.2)
    assert "noise from the" in sol.summary()


# ----------------------------------------------------------------------------- journal safety


def bowl_again(x: np.ndarray) -> float:
    """Invented: the same bowl written again (another source: another fingerprint)."""
    return float((x[0] - 1.0) ** 2 + 3.0 * (x[1] + 0.5) ** 2 + (x[1] + 0.5) * (x[0] - 1.0))


def test_a_changed_objective_is_compared_within_the_replicates_noise(tmp_path):
    """One new run against one stored run: they differ by the noise of one run (6 sigma allowed)."""
    path = tmp_path / "run.sqlite"
    dl.minimize(Noisy(0.05), START, replicates=3, budget=90, journal=path, check=False)
    same = Noisy(0.05, counts={})
    same.__wrapped__ = bowl_again
    again = dl.minimize(same, START, replicates=3, budget=120, journal=path, check=False)
    assert any("objective changed" in note for note in again.notes)
    with pytest.raises(JournalError, match="was written for another objective"):
        dl.minimize(lambda x: bowl_again(x) + 1.0, START, replicates=3, budget=150, journal=path,
                    check=False)  # 1 is 20 sigma: not the noise


def test_a_retry_makes_only_the_failed_runs_again(tmp_path):
    path = tmp_path / "run.sqlite"
    fail = lambda x, n: n == 1 and x[0] > 0.0  # noqa: E731 - the second run fails right of 0
    first = dl.minimize(Noisy(fail=fail), START, replicates=3, journal=path, check=False)
    assert first.failures > 0
    failed = {r[2] for r in rows(path) if r[4] == "failed"}
    objective = Noisy()
    dl.resume(path, objective, retry_failed=True)
    stored = rows(path)
    good: dict[bytes, int] = {}
    for row in stored:
        if row[4] == "ok":
            good[row[2]] = good.get(row[2], 0) + 1
    assert max(good.values()) == 3  # no run that succeeded was made again
    assert objective.calls > 0 and any(good[p] == 3 for p in failed if p in good)


def test_ctrl_c_among_the_starts_runs_raises_and_resumes_with_the_missing_runs(tmp_path):
    """Nothing whole was computed (no point has all its runs): Ctrl-C reaches the caller."""
    reference = dl.minimize(Noisy(), START, replicates=3, check=False)
    path = tmp_path / "run.sqlite"
    counts: dict[bytes, int] = {}
    with pytest.raises(KeyboardInterrupt):
        dl.minimize(Noisy(interrupt_at=3, counts=counts), START, replicates=3, journal=path,
                    check=False)
    assert [r[4] for r in rows(path)] == ["ok", "ok", "interrupted"]
    objective = Noisy(counts=counts)
    again = dl.resume(path, objective)
    assert objective.calls == reference.evaluations - 2
    assert again.point.tobytes() == reference.point.tobytes()


def test_the_noise_of_the_replicates_is_in_the_json_and_the_html_report(tmp_path):
    from directional.report.html import write_html
    from directional.report.summary import solution_document

    sol = dl.minimize(Noisy(0.01), START, replicates=3, check=False)
    document = solution_document(sol)["replicates"]
    assert document["runs_per_point"] == 3 and document["noise_of_one_run"] == sol.spread.run
    assert document["degrees_of_freedom"] == sol.spread.degrees_of_freedom
    page = write_html(sol, tmp_path / "report.html").read_text(encoding="utf-8")
    assert "noise from the 3 replicates of each point" in page
    assert "replicates" not in solution_document(dl.minimize(bowl, START, check=False))


def test_the_progress_bar_shows_the_best_mean_not_the_lowest_run():
    from directional.run.driver import Evaluation
    from directional.run.progress import Progress

    bar = Progress(budget=6, enabled=False, replicates=3)
    for i, (x, value) in enumerate([(0.0, 0.0), (0.0, 10.0), (1.0, 3.0), (0.0, 10.0),
                                    (1.0, 3.0), (1.0, 3.0)]):
        bar(Evaluation(index=i, point=np.array([x]), value=value, status="ok"))
        if i == 3:
            assert bar.best == pytest.approx(20.0 / 3.0)  # point 0's mean, not its run at 0
    assert bar.count == 6 and bar.best == 3.0
