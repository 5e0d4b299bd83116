"""The SQLite journal: what it stores, exact replay and resume, refusals, and the failure policy.

The objectives are published test functions (named beside each); what is checked is mostly the
journal's own contract (bit-exact storage, replay without repetition, refusals naming the key),
against an uninterrupted run of the same search as the reference.
"""

from __future__ import annotations

import math
import sqlite3
from pathlib import Path

import numpy as np
import pytest
from hypothesis import example, given, settings
from hypothesis import strategies as st

import directional as dl
from directional.records import Batch, Outcome, Stop
from directional.run import journal as jr
from directional.run.driver import Driver, Evaluation

START = [-1.2, 1.0]


def rosenbrock(x: np.ndarray) -> float:
    """Moré, Garbow & Hillstrom 1981, problem 1 (minimum 0 at (1, 1), start (-1.2, 1))."""
    return float(100.0 * (x[1] - x[0] ** 2) ** 2 + (1.0 - x[0]) ** 2)


class Counting:
    """An objective that counts its calls, optionally failing or interrupting at some of them."""

    def __init__(self, f=rosenbrock, interrupt_at: int = 0, fail=lambda x: False) -> None:
        self.f = f
        self.__wrapped__ = f  # the journal sees the function it counts (identity.fingerprint)
        self.calls = 0
        self.points: list[bytes] = []
        self.interrupt_at = interrupt_at
        self.fail = fail

    def __call__(self, x: np.ndarray) -> float:
        self.calls += 1
        self.points.append(x.tobytes())
        if self.calls == self.interrupt_at:
            raise KeyboardInterrupt  # what Ctrl-C does inside the objective
        if self.fail(x):
            raise RuntimeError(f"the model did not converge at {x.tolist()}")
        return self.f(x)


def rows(path: Path) -> list[tuple]:
    with sqlite3.connect(path) as db:
        return db.execute(
            "SELECT search, sequence, point, value, status, detail, purpose, started, ended "
            "FROM evaluation ORDER BY row"
        ).fetchall()


@pytest.fixture(scope="module")
def reference() -> dl.Solution:
    """The uninterrupted run that every resumed run must reproduce."""
    return dl.minimize(rosenbrock, START)


def same_solution(a: dl.Solution, b: dl.Solution) -> None:
    assert a.point.tobytes() == b.point.tobytes()
    assert a.value == b.value
    assert (a.stop, a.cycles, a.evaluations) == (b.stop, b.cycles, b.evaluations)
    assert [e.point.tobytes() for e in a.history] == [e.point.tobytes() for e in b.history]


# ----------------------------------------------------------------------------- what is stored


def test_every_evaluation_is_stored_exactly(tmp_path, reference):
    path = tmp_path / "run.sqlite"
    sol = dl.minimize(rosenbrock, START, journal=path)
    same_solution(sol, reference)
    stored = rows(path)
    assert len(stored) == sol.evaluations
    for row, evaluation in zip(stored, sol.history):
        search, sequence, point, value, status, detail, purpose, started, ended = row
        assert (search, sequence) == (0, evaluation.index)
        assert point == evaluation.point.astype("<f8").tobytes()
        assert value == evaluation.value and status == "ok" and detail == ""
        assert purpose == evaluation.purpose
        assert started <= ended
    points = {row[2] for row in stored}
    assert len(points) == len(stored)  # no point evaluated twice


def test_header_holds_the_problem(tmp_path):
    parameters = [
        dl.Parameter("rate", 0.4, 0.01, 2.0, scale="log", unit="1/h"),
        dl.Parameter("offset", 0.0, -math.inf, math.inf, unit="K"),
    ]
    path = tmp_path / "run.sqlite"
    sol = dl.minimize(
        lambda x: (math.log(x[0]) - math.log(0.7)) ** 2 + (x[1] - 3.0) ** 2,
        parameters,
        budget=30,
        point_tolerance=1e-5,
        journal=path,
    )
    contents = jr.read(path)
    header = contents.header
    assert header.kind == "minimize"
    assert header.parameters == parameters
    assert header.budget == 30
    assert header.version == dl.__version__
    assert header.identity["arguments"]["point_tolerance"] == 1e-5
    assert header.identity["settings"]["value_tolerance"] == 1e-10
    assert len(header.digest) == 64
    assert len(contents.evaluations) == sol.evaluations
    (session,) = contents.sessions
    assert session["stop"] == sol.stop.value and session["evaluated"] == sol.evaluations
    assert session["replayed"] == 0


@settings(max_examples=40, deadline=None)
@given(
    point=st.lists(st.floats(allow_nan=False, width=64), min_size=3, max_size=3),
    value=st.floats(allow_nan=False, width=64),
)
@example(point=[-0.0, 0.0, -0.0], value=-0.0)  # SQLite keeps a whole REAL as an integer: no sign
def test_points_and_values_round_trip_bit_for_bit(tmp_path_factory, point, value):
    """Any float64 point and value read back with the same bits (common practice, no source)."""
    path = tmp_path_factory.mktemp("bits") / "run.sqlite"
    identity = jr.run_identity("minimize", [dl.Parameter(f"x{i}", 0.0) for i in range(3)])
    x = np.array(point)
    with jr.Journal.open(path, identity) as journal:
        journal.append(Evaluation(index=0, point=x, value=value, status="ok", sequence=0))
    (back,) = jr.read(path).evaluations
    assert back.point.tobytes() == x.tobytes()
    assert np.float64(back.value).tobytes() == np.float64(value).tobytes()


@pytest.mark.parametrize(
    ("sync", "seconds", "expected"),
    [
        ("adaptive", [0.001, 5.0, 0.001], ["NORMAL", "FULL", "NORMAL"]),
        ("normal", [0.001, 5.0], ["NORMAL", "NORMAL"]),
        ("full", [0.001, 5.0], ["FULL", "FULL"]),
    ],
)
def test_a_long_evaluation_is_committed_to_the_disk(tmp_path, sync, seconds, expected):
    """Adaptive sync: an evaluation that took SYNC_AFTER or longer gets an fsync'd commit."""
    identity = jr.run_identity("minimize", [dl.Parameter("x0", 0.0)])
    seen = []
    with jr.Journal.open(tmp_path / "run.sqlite", identity, sync=sync) as journal:
        for i, spent in enumerate(seconds):
            journal.append(
                Evaluation(index=i, point=np.array([i]), value=1.0, status="ok", seconds=spent,
                           sequence=i)
            )
            seen.append(journal.synchronous)
    assert seen == expected
    assert jr.SYNC_AFTER <= 5.0


# ----------------------------------------------------------------------------- resume


def test_resuming_a_finished_run_evaluates_nothing(tmp_path, reference, capsys):
    path = tmp_path / "run.sqlite"
    dl.minimize(rosenbrock, START, journal=path)
    objective = Counting()
    sol = dl.resume(path, objective)
    assert objective.calls == 0
    same_solution(sol, reference)
    assert "the last run ended: converged" in capsys.readouterr().err
    assert len(rows(path)) == reference.evaluations
    sessions = jr.read(path).sessions
    assert [s["replayed"] for s in sessions] == [0, reference.evaluations]
    assert [s["evaluated"] for s in sessions] == [reference.evaluations, 0]


@pytest.mark.parametrize("first_budget", [3, 40, 100])
def test_a_larger_budget_goes_on_from_the_journal(tmp_path, reference, first_budget):
    """Stop on a budget, resume with the default budget: same end, no evaluation repeated."""
    path = tmp_path / "run.sqlite"
    first = dl.minimize(rosenbrock, START, budget=first_budget, journal=path)
    assert first.stop is Stop.BUDGET and first.evaluations == first_budget
    objective = Counting()
    sol = dl.minimize(objective, START, journal=path)  # same problem, another budget: resumed
    same_solution(sol, reference)
    assert objective.calls == reference.evaluations - first_budget
    assert not set(objective.points) & {row[2] for row in rows(path)[:first_budget]}
    assert len({row[2] for row in rows(path)}) == reference.evaluations


def test_resume_takes_the_last_budget_and_accepts_a_new_one(tmp_path, reference):
    path = tmp_path / "run.sqlite"
    dl.minimize(rosenbrock, START, budget=40, journal=path)
    again = dl.resume(path, Counting())
    assert again.stop is Stop.BUDGET and again.evaluations == 40
    objective = Counting()
    sol = dl.resume(path, objective, budget=10_000)
    same_solution(sol, reference)
    assert objective.calls == reference.evaluations - 40
    assert jr.read(path).header.budget == 10_000


def test_ctrl_c_inside_the_objective(tmp_path, reference):
    """Ctrl-C returns the best point so far; the interrupted evaluation is kept but not reused."""
    path = tmp_path / "run.sqlite"
    objective = Counting(interrupt_at=60)
    sol = dl.minimize(objective, START, journal=path)
    assert sol.stop is Stop.INTERRUPTED and sol.evaluations == 59
    best = min(reference.history[:59], key=lambda e: e.value)
    assert sol.point.tobytes() == best.point.tobytes() and sol.value == best.value
    stored = rows(path)
    assert [row[4] for row in stored] == ["ok"] * 59 + ["interrupted"]
    assert stored[-1][2] == reference.history[59].point.tobytes()
    assert stored[-1][1] == 59  # the place it would have had
    objective = Counting()
    again = dl.resume(path, objective)
    same_solution(again, reference)
    assert objective.calls == reference.evaluations - 59
    assert objective.points[0] == reference.history[59].point.tobytes()  # made again first
    assert [row[4] for row in rows(path)].count("interrupted") == 1


def test_ctrl_c_outside_the_objective_halts_before_the_next_evaluation():
    """A Ctrl-C that lands in the search's own code is noted, not raised there."""
    import signal

    assert signal.getsignal(signal.SIGINT) is signal.default_int_handler
    objective = Counting()

    def search():
        values = yield Batch(points=np.array([[0.0, 0.0]]))
        signal.raise_signal(signal.SIGINT)  # Ctrl-C while the search itself computes
        try:
            values = yield Batch(points=np.array([[1.0, 0.0], [2.0, 0.0]]))
        except Exception as halt:
            return Outcome(
                point=np.zeros(2), value=float(values[0]), stop=halt.stop, cycles=0,
                directions=np.eye(2), curvatures=np.full(2, np.nan), reason=halt.reason,
            )
        raise AssertionError("the search was not halted")

    driver = Driver(objective=objective, budget=10)
    outcome = driver.run(search())
    assert outcome.stop is Stop.INTERRUPTED and objective.calls == 1
    assert signal.getsignal(signal.SIGINT) is signal.default_int_handler  # put back


def test_an_objective_that_turns_ctrl_c_into_its_own_error(tmp_path, reference):
    """The failure that follows a Ctrl-C is the interrupt's doing: made again on resume."""
    import signal

    calls = 0

    def objective(x):
        nonlocal calls
        calls += 1
        if calls == 40:
            try:
                signal.raise_signal(signal.SIGINT)
            except KeyboardInterrupt:
                raise RuntimeError("solver aborted") from None
        return rosenbrock(x)

    objective.__wrapped__ = rosenbrock  # the same function as Counting's, for the journal
    path = tmp_path / "run.sqlite"
    sol = dl.minimize(objective, START, journal=path)
    assert sol.stop is Stop.INTERRUPTED and sol.evaluations == 39 and sol.failures == 0
    assert [row[4] for row in rows(path)][-2:] == ["ok", "interrupted"]
    assert rows(path)[-1][5] == "RuntimeError: solver aborted"
    counting = Counting()
    same_solution(dl.resume(path, counting), reference)
    assert counting.calls == reference.evaluations - 39


def test_stored_value_is_fed_back_without_calling_the_objective():
    """Replay at the driver: values come from the journal, repeats from the cache."""
    stored = [
        Evaluation(index=i, point=np.array([float(i)]), value=10.0 + i, status="ok", sequence=i)
        for i in range(3)
    ]
    seen = []

    def search():
        for points in ([[0.0]], [[1.0], [0.0], [2.0]], [[3.0]]):
            values = yield Batch(points=np.array(points))
            seen.append(values.tolist())
        return None

    objective = Counting(f=lambda x: 100.0 + x[0])
    driver = Driver(objective=objective, budget=10, stored=stored)
    driver.run(search())
    assert seen == [[10.0], [11.0, 10.0, 12.0], [103.0]]
    assert objective.calls == 1 and driver.replayed == 3 and driver.spent == 4
    assert driver.log.cache_hits == 1
    assert [e.sequence for e in driver.log.evaluations] == [0, 1, 2, 3]


def test_journaled_evaluations_count_against_the_budget():
    stored = [
        Evaluation(index=i, point=np.array([float(i)]), value=1.0, status="ok", sequence=i)
        for i in range(3)
    ]

    def search():
        try:
            for i in range(10):
                yield Batch(points=np.array([[float(i)]]))
        except Exception as halt:
            return halt.stop
        return None

    objective = Counting(f=lambda x: 1.0)
    assert Driver(objective=objective, budget=5, stored=stored).run(search()) is Stop.BUDGET
    assert objective.calls == 2


# ----------------------------------------------------------------------------- refusals


@pytest.mark.parametrize(
    ("change", "named"),
    [
        ({"bounds": [(-2.0, 2.0), (-1.0, 3.0)]}, "parameters[0].lower (parameter 'x0')"),
        ({"names": ["a", "b"]}, "parameters[0].name"),
        ({"point_tolerance": 1e-7}, "arguments.point_tolerance"),
        ({"check": False}, "arguments.check"),
        ({"start": [-1.2, 1.0, 0.0]}, "parameters (length)"),
        ({"start": [-1.2, 1.5]}, "parameters[1].start (parameter 'x1')"),
    ],
)
def test_a_journal_of_another_problem_is_refused(tmp_path, change, named):
    path = tmp_path / "run.sqlite"
    dl.minimize(rosenbrock, START, budget=20, journal=path)
    before = path.read_bytes()
    arguments = {"start": START} | change
    objective = Counting(lambda x: float(np.sum(x**2)))
    with pytest.raises(dl.JournalError, match=named.replace("[", r"\[").replace("(", r"\(")
                       .replace(")", r"\)").replace("]", r"\]")):
        dl.minimize(objective, **arguments, journal=path)
    assert objective.calls == 0
    assert path.read_bytes() == before
    assert len(jr.read(path).sessions) == 1


def test_a_stored_point_that_differs_is_refused_naming_the_evaluation(tmp_path):
    """A journal whose points do not match what the search asks for (another version)."""
    path = tmp_path / "run.sqlite"
    dl.minimize(rosenbrock, START, budget=20, journal=path)
    with sqlite3.connect(path) as db:
        db.execute(
            "UPDATE evaluation SET point = ? WHERE sequence = 7",
            (np.array([0.25, 0.5]).tobytes(),),
        )
    with pytest.raises(dl.JournalError, match=r"evaluation 7: the journal holds the point "
                       r"\[0\.25, 0\.5\] but the search asks for \["):
        dl.resume(path, Counting())


def test_a_second_run_on_a_journal_in_use_is_refused(tmp_path):
    path = tmp_path / "run.sqlite"
    identity = jr.run_identity("minimize", [dl.Parameter("x0", -1.2), dl.Parameter("x1", 1.0)])
    with jr.Journal.open(path, identity):
        with pytest.raises(dl.JournalError, match=r"in use by another run \(process \d+\)"):
            dl.minimize(rosenbrock, START, journal=path)
        assert jr.read(path).header.kind == "minimize"  # reading is never refused
    assert not Path(str(path) + ".lock").exists()
    with jr.Journal.open(path, identity):  # free again
        pass


@pytest.mark.parametrize(
    "content",
    [
        b"time,temperature\n0,21.5\n1,22.0\n",
        bytes(range(256)) * 64,
        b"SQLite format 3\x00" + b"\x00" * 200,
    ],
    ids=["text", "binary", "bad-sqlite-header"],
)
def test_a_file_that_is_not_a_database_is_refused(tmp_path, content):
    path = tmp_path / "data.sqlite"
    path.write_bytes(content)
    with pytest.raises(dl.JournalError, match="not a readable journal"):
        dl.minimize(rosenbrock, START, journal=path)
    with pytest.raises(dl.JournalError):
        dl.resume(path, rosenbrock)
    assert path.read_bytes() == content


def test_a_foreign_database_is_refused_and_left_alone(tmp_path):
    path = tmp_path / "plant.sqlite"
    with sqlite3.connect(path) as db:
        db.execute("CREATE TABLE reading (time REAL, temperature REAL)")
        db.execute("INSERT INTO reading VALUES (0.0, 21.5)")
    db.close()
    before = path.read_bytes()
    with pytest.raises(dl.JournalError, match="not a directional journal"):
        dl.minimize(rosenbrock, START, journal=path)
    with pytest.raises(dl.JournalError, match="not a directional journal"):
        dl.resume(path, rosenbrock)
    assert path.read_bytes() == before


def test_a_damaged_journal_is_refused(tmp_path):
    path = tmp_path / "run.sqlite"
    dl.minimize(rosenbrock, START, journal=path)  # closed: checkpointed into the main file
    data = bytearray(path.read_bytes())
    middle = len(data) // 2
    data[middle : middle + 4096] = b"\xa5" * 4096
    path.write_bytes(bytes(data))
    with pytest.raises(dl.JournalError):
        dl.resume(path, rosenbrock)
    path.write_bytes(bytes(data[: len(data) // 3]))  # truncated
    with pytest.raises(dl.JournalError):
        dl.resume(path, rosenbrock)


@pytest.mark.parametrize(
    ("edit", "message"),
    [
        ("DELETE FROM evaluation WHERE sequence = 5", "evaluation number 5 is missing"),
        (
            "INSERT INTO evaluation (search, sequence, point, value, status, detail, purpose, "
            "started, ended, session) SELECT search, sequence, point, value, status, detail, "
            "purpose, started, ended, session FROM evaluation WHERE sequence = 3",
            "evaluation number 3 is twice",
        ),
        ("UPDATE evaluation SET point = x'00' WHERE sequence = 2", "damaged evaluation in row 3"),
    ],
)
def test_damaged_rows_are_refused(tmp_path, edit, message):
    path = tmp_path / "run.sqlite"
    dl.minimize(rosenbrock, START, budget=10, journal=path)
    with sqlite3.connect(path) as db:
        db.execute(edit)
    db.close()
    objective = Counting()
    with pytest.raises(dl.JournalError, match=message):
        dl.resume(path, objective)
    assert objective.calls == 0


def test_an_edited_header_is_refused(tmp_path):
    path = tmp_path / "run.sqlite"
    dl.minimize(rosenbrock, START, budget=10, journal=path)
    with sqlite3.connect(path) as db:
        (text,) = db.execute("SELECT value FROM header WHERE key = 'identity'").fetchone()
        db.execute(
            "UPDATE header SET value = ? WHERE key = 'identity'", (text.replace("-1.2", "-1.3"),)
        )
    with pytest.raises(dl.JournalError, match="damaged header"):
        dl.resume(path, rosenbrock)


def test_missing_paths_and_bad_arguments(tmp_path):
    with pytest.raises(dl.JournalError, match="does not exist"):
        dl.resume(tmp_path / "none.sqlite", rosenbrock)
    with pytest.raises(dl.JournalError, match="not a file"):
        dl.minimize(rosenbrock, START, journal=tmp_path)
    with pytest.raises(dl.ProblemError, match="journal must be a file path"):
        dl.minimize(rosenbrock, START, journal=42)
    path = tmp_path / "runs" / "deep" / "run.sqlite"
    dl.minimize(rosenbrock, START, budget=10, journal=path)  # folders are made
    with pytest.raises(dl.ProblemError, match="'point_tolerance' is fixed by the journal"):
        dl.resume(path, rosenbrock, point_tolerance=1e-3)


def test_a_journal_of_an_unknown_kind_is_refused(tmp_path):
    path = tmp_path / "run.sqlite"
    identity = jr.run_identity("anneal", [dl.Parameter("x0", 1.0)])
    with jr.Journal.open(path, identity):
        pass
    with pytest.raises(dl.JournalError, match="unknown kind 'anneal'"):
        dl.resume(path, rosenbrock)


# ----------------------------------------------------------------------------- failure policy


def failing_region(x: np.ndarray) -> bool:
    return x[0] > -0.5  # invented: the simulation fails for x0 > -0.5


def test_failures_count_against_the_budget_are_journaled_and_replayed(tmp_path):
    path = tmp_path / "run.sqlite"
    objective = Counting(fail=failing_region)
    sol = dl.minimize(objective, START, budget=60, journal=path)
    assert sol.stop is Stop.BUDGET and sol.evaluations == 60 and objective.calls == 60
    assert 0 < sol.failures < 60
    assert len(set(objective.points)) == 60  # a failed point is never tried again
    assert sol.point[0] <= -0.5
    failed = [row for row in rows(path) if row[4] == "failed"]
    assert len(failed) == sol.failures
    assert all(row[3] == math.inf and "did not converge" in row[5] for row in failed)
    objective = Counting(fail=failing_region)
    again = dl.resume(path, objective)
    assert objective.calls == 0
    same_solution(again, sol)
    assert again.failures == sol.failures


def test_a_failing_start_point_stops_the_run(tmp_path):
    path = tmp_path / "run.sqlite"
    with pytest.raises(dl.ObjectiveError, match=r"start point \[-1\.2, 1\.0\]: RuntimeError"):
        dl.minimize(Counting(fail=lambda x: True), START, journal=path)
    ((*_, status, detail, _purpose, _s, _e),) = rows(path)
    assert status == "failed" and "did not converge" in detail
    assert jr.read(path).sessions[0]["stop"] == "stalled"


def test_a_run_of_failures_stalls_with_the_reason(tmp_path):
    path = tmp_path / "run.sqlite"
    limit = 40
    objective = Counting()
    objective.fail = lambda x: objective.calls > limit  # the model breaks for good
    sol = dl.minimize(objective, START, journal=path, check=False)
    assert sol.stop is Stop.STALLED
    assert "failed" in sol.reason and "did not converge" in sol.reason  # the last error
    # the driver's rule (50 failures in a row) or the search's own (a whole cycle failed),
    # whichever comes first; never more than 50 in a row
    assert limit < sol.evaluations == objective.calls <= limit + 50
    statuses = [row[4] for row in rows(path)]
    assert statuses == ["ok"] * limit + ["failed"] * (sol.evaluations - limit)
    assert jr.read(path).sessions[0]["stop"] == "stalled"


@pytest.mark.parametrize("stall_after", [1, 3, 50])
def test_the_driver_halts_at_the_nth_failure_in_a_row(stall_after):
    """STALLED as soon as the last ``stall_after`` evaluations all failed, never later."""

    def search():
        try:
            for i in range(200):
                yield Batch(points=np.array([[float(i)]]))
        except Exception as halt:
            return halt
        return None

    objective = Counting(f=lambda x: 1.0, fail=lambda x: x[0] >= 5.0)
    halt = Driver(objective=objective, budget=1000, stall_after=stall_after).run(search())
    assert halt.stop is Stop.STALLED
    assert objective.calls == 5 + stall_after
    assert halt.reason.startswith(f"the last {stall_after} evaluations all failed")
    assert f"did not converge at [{4.0 + stall_after}]" in halt.reason


def test_an_error_with_a_status_is_journaled_with_it(tmp_path):
    """An objective's exception may carry ``status`` and ``detail`` (as an external program's)."""

    class TookTooLong(Exception):
        status = "timed-out"
        detail = "no answer after 600 s"

    def objective(x):
        if x[0] > 0.0:
            raise TookTooLong
        return rosenbrock(x)

    path = tmp_path / "run.sqlite"
    dl.minimize(objective, START, budget=80, journal=path)
    timed_out = [row for row in rows(path) if row[4] == "timed-out"]
    assert timed_out and all(row[5] == "no answer after 600 s" for row in timed_out)
    assert all(e.status == "timed-out" for e in jr.read(path).evaluations if e.value == math.inf)
