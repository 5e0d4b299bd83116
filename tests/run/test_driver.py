"""The one driver (`directional.run.driver`): its protocol, driven with hand-written generators.

Common practice, no source: these are the rules the driver's module docstring states, checked
with small fake searches whose every request is known in advance.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from directional.errors import JournalError
from directional.records import SPENT, Batch, Halt, Stop
from directional.run.driver import Driver, Evaluation
from directional.run.executors import InProcess


class Counting:
    """An objective that counts its calls: f(x) = x0 (or fails where ``fail`` says)."""

    def __init__(self, fail=lambda x: False):
        self.calls = 0
        self.fail = fail

    def __call__(self, x):
        self.calls += 1
        if self.fail(x):
            raise RuntimeError(f"no value at {x.tolist()}")
        return float(x[0])


def points(*values):
    return Batch(points=np.array([[float(v)] for v in values]))


def test_a_stage_with_a_limit_keeps_evaluations_for_the_next():
    """`Batch.limit` halts one stage early; the next stage goes on under the full budget."""

    def run():
        done = []
        try:
            for i in range(10):
                yield Batch(points=np.array([[float(i)]]), limit=3)
        except Halt as halt:
            done.append(halt.stop)
        values = yield points(100, 101)
        done.append(values.tolist())
        return done

    objective = Counting()
    driver = Driver(objective=objective, budget=5)
    assert driver.run(run()) == [Stop.BUDGET, [100.0, 101.0]]
    assert objective.calls == driver.spent == 5


def test_a_generator_may_go_on_after_a_halt_and_is_halted_again():
    """A tree of stages: the halted stage returns, the next one meets the same limit."""

    def stage(start):
        try:
            for i in range(start, start + 10):
                yield points(i)
        except Halt as halt:
            return halt.stop
        return None

    def tree():
        first = yield from stage(0)
        second = yield from stage(50)
        return first, second

    objective = Counting()
    assert Driver(objective=objective, budget=4).run(tree()) == (Stop.BUDGET, Stop.BUDGET)
    assert objective.calls == 4


def test_spent_tells_a_stage_what_it_cost():
    def run():
        before = yield SPENT
        yield points(1, 2, 3)
        yield points(2, 3, 4)  # two repeats from the cache, one new point
        return before, (yield SPENT)

    objective = Counting()
    driver = Driver(objective=objective, budget=100)
    assert driver.run(run()) == (0, 4)
    assert objective.calls == 4 and driver.log.cache_hits == 2


def test_points_of_a_batch_before_the_budget_are_evaluated_and_kept():
    """Nothing computed is lost: the points before the limit count and reach the log."""
    seen = []

    def run():
        try:
            yield points(5, 4, 3)
        except Halt as halt:
            return halt.stop
        return None

    driver = Driver(objective=Counting(), budget=2, observers=(seen.append,))
    assert driver.run(run()) is Stop.BUDGET
    assert [e.point[0] for e in driver.log.evaluations] == [5.0, 4.0]
    assert [e.point[0] for e in seen] == [5.0, 4.0] and driver.log.best.value == 4.0


def test_minus_infinity_halts_at_once_and_the_rest_of_the_batch_is_not_evaluated():
    def run():
        try:
            yield points(1, -math.inf, 2)
        except Halt as halt:
            return halt
        return None

    objective = Counting()
    halt = Driver(objective=objective, budget=10).run(run())
    assert halt.stop is Stop.STALLED and "unbounded below" in halt.reason
    assert objective.calls == 2


@pytest.mark.parametrize("executor", [{}, {"executor": InProcess(), "workers": 1}])
def test_a_search_going_round_in_a_circle_over_known_points_is_halted(executor):
    """Points a search asked for before are answered from the cache and cost no budget: a search
    whose known values lead it back where it was would never end.  The driver halts it at the
    `REPEATS_IN_A_ROW`-th such point in a row; a new point in between starts the count again."""
    from directional.run.driver import REPEATS_IN_A_ROW

    def circle():
        try:
            yield points(1, 2)
            for i in range(REPEATS_IN_A_ROW - 1):  # one short of the limit, then a new point
                yield points(1 + i % 2)
            yield points(3)
            while True:
                yield points(1)
        except Halt as halt:
            return halt

    objective = Counting()
    driver = Driver(objective=objective, budget=100, **executor)
    halt = driver.run(circle())
    assert halt.stop is Stop.STALLED and "round in a circle" in halt.reason
    assert objective.calls == driver.spent == 3  # nothing evaluated twice, nothing lost
    assert driver.log.cache_hits == 2 * (REPEATS_IN_A_ROW - 1)  # the halting one is not asked


def test_stored_evaluations_replay_by_point_and_a_divergence_names_the_first_unasked():
    stored = [
        Evaluation(index=i, point=np.array([float(i)]), value=float(i), status="ok", sequence=i)
        for i in range(3)
    ]

    def run(*asked):
        for value in asked:
            yield points(value)

    objective = Counting()
    driver = Driver(objective=objective, budget=10, stored=stored)
    driver.run(run(0, 1, 2, 7))
    assert objective.calls == 1 and driver.replayed == 3 and driver.spent == 4
    with pytest.raises(JournalError, match="search 0, evaluation 1: the journal holds the point"):
        Driver(objective=Counting(), budget=10, stored=stored).run(run(0, 9))


def _asking(requests):
    """A search that asks for ``requests`` (lists of numbers), goes on after each halt, and
    returns what it was sent: the values, or the halt's stop and reason."""
    heard = []
    for rows in requests:
        try:
            values = yield Batch(points=np.array([[float(v)] for v in rows]), limit=None)
            heard.append(values.tolist())
        except Halt as halt:
            heard.append((halt.stop, halt.reason))
    return heard


@settings(max_examples=150, deadline=None)
@given(
    requests=st.lists(st.lists(st.sampled_from([0, 1, 2, 3, 4, 5, 6, -1, -2]), min_size=1,
                               max_size=4), min_size=1, max_size=12),
    budget=st.integers(min_value=1, max_value=12),
    stall_after=st.integers(min_value=1, max_value=4),
    total=st.none() | st.integers(min_value=1, max_value=12),
)
def test_one_search_in_process_is_driven_as_through_the_queue(requests, budget, stall_after, total):
    """The only search of a run in process is answered without the queue (`Driver._at_once`);
    the same search through an executor, one evaluation at a time, goes through the queue.
    Both must evaluate the same points in the same order, send the same values and halts, and
    log the same records and cache hits, with and without a total budget for the run.  Points
    -1 fail, -2 are -inf (common practice, no source: the module docstring's rules, checked
    against each other)."""

    def objective(x):
        if x[0] == -1.0:
            raise RuntimeError("no value here")
        return -math.inf if x[0] == -2.0 else float(x[0]) ** 2

    def drive(**executor):
        driver = Driver(
            objective=objective, budget=budget, stall_after=stall_after, total=total, **executor
        )
        heard = driver.run(_asking(requests))
        log = [(e.index, e.point.tolist(), e.value, e.status, e.detail, e.sequence)
               for e in driver.log.evaluations]
        return heard, log, driver.log.cache_hits, driver.spent

    assert drive() == drive(executor=InProcess(), workers=1)
