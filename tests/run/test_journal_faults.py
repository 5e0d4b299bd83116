"""Hardening, the journal: damaged files, a second process, a full disk, a power cut, and data that
must never run.

Items already checked in tests/run/test_journal.py (another problem, not a database, a foreign
database, a damaged page, damaged rows, an edited header) are listed in tests/README.md, not
repeated.  Processes are made with ``fork`` (fast: the package is imported already).  The
objective is Rosenbrock's function (Moré, Garbow & Hillstrom 1981, problem 1: minimum 0 at
(1, 1), standard start (-1.2, 1)); the reference is the same search run without a journal.
"""

from __future__ import annotations

import ast
import gc
import multiprocessing
import os
import resource
import shutil
import signal
import sqlite3
import time
from pathlib import Path

import numpy as np
import pytest

import directional as dl
from directional.interface import cli
from directional.run import journal as jr

START = [-1.2, 1.0]
FORK = multiprocessing.get_context("fork")


def rosenbrock(x: np.ndarray) -> float:
    """Moré, Garbow & Hillstrom 1981, problem 1."""
    return float(100.0 * (x[1] - x[0] ** 2) ** 2 + (1.0 - x[0]) ** 2)


class Counting:
    def __init__(self) -> None:
        self.calls = 0
        self.__wrapped__ = rosenbrock  # the journal sees the function it counts

    def __call__(self, x: np.ndarray) -> float:
        self.calls += 1
        return rosenbrock(x)


@pytest.fixture(scope="module")
def reference() -> dl.Solution:
    return dl.minimize(rosenbrock, START, check=False)


def same_as(sol: dl.Solution, reference: dl.Solution) -> None:
    assert sol.point.tobytes() == reference.point.tobytes()
    assert (sol.value, sol.stop, sol.evaluations) == (
        reference.value, reference.stop, reference.evaluations
    )


# ----------------------------------------------------------------------------- truncated files


@pytest.mark.parametrize("keep", [0, 100, 1024, 3000, 0.5, 0.9])
def test_a_truncated_journal_is_refused_or_read_never_misread(tmp_path, reference, keep):
    path = tmp_path / "run.sqlite"
    dl.minimize(rosenbrock, START, journal=path, check=False)  # closed: all in the main file
    data = path.read_bytes()
    size = int(len(data) * keep) if isinstance(keep, float) else keep
    path.write_bytes(data[:size])
    if size == 0:  # an empty file is no journal yet: resume says so, a run starts afresh
        with pytest.raises(dl.JournalError, match="does not exist or is empty"):
            dl.resume(path, rosenbrock)
        same_as(dl.minimize(rosenbrock, START, journal=path, check=False), reference)
        return
    objective = Counting()
    with pytest.raises(dl.JournalError):
        dl.resume(path, objective)
    assert objective.calls == 0


@pytest.mark.parametrize("keep", [1.0, 0.9, 0.5, 0.1])
def test_a_torn_write_ahead_log_loses_only_a_suffix(tmp_path, reference, keep, capsys):
    """A power cut may cut the log anywhere: SQLite's frame checksums drop the torn end, the
    journal is a shorter prefix of the run, and resume makes only the lost evaluations again."""
    path, snapshot = tmp_path / "run.sqlite", tmp_path / "snapshot"
    snapshot.mkdir()
    calls = []

    def objective(x):
        calls.append(1)
        if len(calls) == 60:  # the files as they are on disk mid-run (log not checkpointed)
            shutil.copy(path, snapshot / "run.sqlite")
            shutil.copy(f"{path}-wal", snapshot / "run.sqlite-wal")
        return rosenbrock(x)

    objective.__wrapped__ = rosenbrock  # the same function as Counting's, for the journal
    dl.minimize(objective, START, journal=path, check=False)
    log = (snapshot / "run.sqlite-wal").read_bytes()
    (snapshot / "run.sqlite-wal").write_bytes(log[: int(len(log) * keep)])
    stored = len(jr.read(snapshot / "run.sqlite").evaluations)
    assert (stored == 59) if keep == 1.0 else (0 < stored < 59)
    counting = Counting()
    same_as(dl.resume(snapshot / "run.sqlite", counting), reference)
    assert counting.calls == reference.evaluations - stored


def test_a_journal_cut_before_its_header_says_so_and_a_new_run_starts_there(tmp_path, reference):
    path = tmp_path / "run.sqlite"
    with sqlite3.connect(path) as db:  # what a kill between "WAL on" and the header leaves
        db.execute("PRAGMA journal_mode = WAL")
    db.close()
    with pytest.raises(dl.JournalError, match="holds no run yet"):
        dl.resume(path, rosenbrock)
    same_as(dl.minimize(rosenbrock, START, journal=path, check=False), reference)


def _die_inside_a_transaction(path: Path) -> None:
    """Write half a transaction in rollback mode, then die as ``kill -9`` would: SQLite leaves the
    original pages in ``path-journal`` ("hot journal", https://sqlite.org/lockingv3.html)."""
    db = sqlite3.connect(path, isolation_level=None)
    db.execute("PRAGMA journal_mode = DELETE")
    db.execute("PRAGMA cache_size = 1")  # changed pages reach the file before the commit
    db.execute("BEGIN")
    db.execute("DELETE FROM evaluation")
    db.execute("CREATE TABLE filler (x BLOB)")
    for _ in range(200):
        db.execute("INSERT INTO filler VALUES (zeroblob(4096))")
    os.kill(os.getpid(), signal.SIGKILL)


def test_a_writer_killed_inside_a_rollback_transaction_leaves_what_was_committed(
    tmp_path, reference
):
    # A read-only connection cannot roll a hot journal back (SQLITE_READONLY_ROLLBACK, "attempt to
    # write a readonly database"): reading must still give the committed contents.
    path = tmp_path / "run.sqlite"
    dl.minimize(rosenbrock, START, journal=path, check=False)
    committed = jr.read(path)
    child = FORK.Process(target=_die_inside_a_transaction, args=(path,), daemon=True)
    child.start()
    child.join(30)
    assert child.exitcode == -signal.SIGKILL
    assert Path(str(path) + "-journal").is_file()
    held = jr.read(path)
    assert [e.point.tobytes() for e in held.evaluations] == [
        e.point.tobytes() for e in committed.evaluations
    ]
    assert len(held.evaluations) == reference.evaluations
    counting = Counting()
    same_as(dl.resume(path, counting), reference)
    assert counting.calls == 0


# ----------------------------------------------------------------------------- another process


HELD = jr.run_identity("minimize", [dl.Parameter("x0", -1.2), dl.Parameter("x1", 1.0)])


def _hold(path: Path, ready) -> None:
    with jr.Journal.open(path, HELD):
        ready.set()
        time.sleep(60)  # until killed


def test_a_journal_locked_by_another_process_is_refused_until_that_process_dies(tmp_path):
    path = tmp_path / "run.sqlite"
    ready = FORK.Event()
    holder = FORK.Process(target=_hold, args=(path, ready), daemon=True)
    holder.start()
    try:
        assert ready.wait(30)
        objective = Counting()
        with pytest.raises(dl.JournalError, match=rf"in use by another run \(process {holder.pid}\)"):
            dl.minimize(objective, START, journal=path, check=False)
        assert objective.calls == 0
        assert jr.read(path).header.kind == "minimize"  # reading is never refused
        os.kill(holder.pid, signal.SIGKILL)  # the holder dies: the operating system drops the lock
        holder.join(30)
        with jr.Journal.open(path, HELD) as journal:  # free at once: no stale lock
            assert journal.resumed and journal.last_stop() == ""  # "killed", as it was
    finally:
        if holder.is_alive():
            holder.kill()
        holder.join(5)


# ----------------------------------------------------------------------------- a full disk


def _fill_disk(path: Path, limit: int, answers) -> None:
    signal.signal(signal.SIGXFSZ, signal.SIG_IGN)  # so that a write fails instead of killing us
    resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))
    objective = Counting()
    try:
        dl.minimize(objective, START, journal=path, check=False)
        answers.put(("finished", "", objective.calls))
    except BaseException as error:  # the answer is what is checked, in the parent
        answers.put((type(error).__name__, str(error), objective.calls))


@pytest.mark.parametrize("limit", [20_000, 40_000, 100_000])
def test_a_full_disk_stops_the_run_with_a_clear_error_and_the_committed_rows_survive(
    tmp_path, reference, limit
):
    """The file-size limit (RLIMIT_FSIZE) stands in for a full disk: the same write error."""
    path = tmp_path / "run.sqlite"
    answers = FORK.Queue()
    child = FORK.Process(target=_fill_disk, args=(path, limit, answers), daemon=True)
    child.start()
    kind, message, calls = answers.get(timeout=60)
    child.join(30)
    assert kind == "JournalError"
    assert f"cannot write to journal {str(path)!r}" in message
    assert "the disk may be full, or a file-size or quota limit reached" in message
    if calls == 0:  # the limit struck while the journal was being made: nothing was evaluated
        with pytest.raises(dl.JournalError):
            dl.resume(path, rosenbrock)
        return
    committed = int(message.split("; the ")[1].split(" evaluations committed")[0])
    assert calls == committed + 1  # the evaluation whose row could not be written
    stored = jr.read(path).evaluations
    assert len(stored) == committed
    assert [e.point.tobytes() for e in stored] == [
        e.point.tobytes() for e in reference.history[:committed]
    ]
    counting = Counting()
    same_as(dl.resume(path, counting), reference)  # room again: the run goes on
    assert counting.calls == reference.evaluations - committed


# ----------------------------------------------------------------------------- a close under Ctrl-C


class _InterruptedClose:
    """Stands in for the journal's connection: Ctrl-C arrives while the file is being closed."""

    def __init__(self, connection: sqlite3.Connection) -> None:
        self._connection = connection

    def execute(self, *args):
        return self._connection.execute(*args)

    def close(self) -> None:
        os.kill(os.getpid(), signal.SIGINT)
        time.sleep(0.05)  # the handler runs at the next bytecode: here, with the default handler
        self._connection.close()


def test_a_second_ctrl_c_while_the_journal_closes_still_releases_the_lock(tmp_path):
    path = tmp_path / "run.sqlite"
    identity = jr.run_identity("minimize", [dl.Parameter("x0", -1.2), dl.Parameter("x1", 1.0)])
    journal = jr.Journal.open(path, identity)
    journal._connection = _InterruptedClose(journal._connection)
    with pytest.raises(KeyboardInterrupt):  # delivered, once the journal is closed
        journal.close()
    assert not Path(f"{path}.lock").exists()
    with jr.Journal.open(path, identity):  # not "in use by another run (process <this one>)"
        pass


def test_a_journal_dropped_without_closing_frees_its_lock_when_collected(tmp_path):
    # What is left of a second Ctrl-C that lands in the instant before the closing is shielded.
    path = tmp_path / "run.sqlite"
    journal = jr.Journal.open(path, HELD)
    with pytest.raises(dl.JournalError, match="in use"):
        jr.Journal.open(path, HELD)
    del journal
    gc.collect()
    with jr.Journal.open(path, HELD):
        pass


# ----------------------------------------------------------------------------- nothing stored runs


FORBIDDEN_IMPORTS = {"pickle", "marshal", "shelve", "dill", "cloudpickle", "importlib"}
FORBIDDEN_CALLS = {"eval", "exec", "compile", "__import__"}


@pytest.mark.parametrize(
    "module",
    ["run/journal.py", "run/identity.py", "run/lockfile.py", "run/driver.py", "api/resume.py",
     "interface/runs.py"],
)
def test_the_journal_code_neither_unpickles_nor_evaluates(module):
    tree = ast.parse((Path(dl.__file__).parent / module).read_text())
    imported, called = set(), set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            imported |= {alias.name.split(".")[0] for alias in node.names}
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            imported.add(node.module.split(".")[0])
        elif isinstance(node, ast.Call) and isinstance(node.func, ast.Name):
            called.add(node.func.id)
    assert not imported & FORBIDDEN_IMPORTS  # resume's entry points are a fixed table of functions
    assert not called & FORBIDDEN_CALLS


def test_hostile_text_in_a_journal_is_read_back_as_text(tmp_path):
    """Code and a pickle planted in every text field are data: reading, resuming and showing the
    journal run none of it (the pickle would create a file; the code would too)."""
    path = tmp_path / "run.sqlite"
    dl.minimize(rosenbrock, START, budget=10, journal=path, check=False)
    planted = tmp_path / "PWNED"
    code = f"__import__('pathlib').Path({str(planted)!r}).touch()"
    payload = (b"cos\nsystem\n(S'touch " + str(planted).encode() + b"'\ntR.").decode("latin-1")
    with sqlite3.connect(path) as db:
        db.execute("UPDATE evaluation SET detail = ?, purpose = ?", (code, payload))
        db.execute(
            "INSERT INTO header (key, value) VALUES ('note', ?) "
            "ON CONFLICT (key) DO UPDATE SET value = excluded.value", (code,)
        )
        db.execute("UPDATE session SET reason = ?, version = ?", (payload, code))
    db.close()
    contents = jr.read(path)
    assert {e.detail for e in contents.evaluations} == {code}
    assert {e.purpose for e in contents.evaluations} == {payload}
    dl.resume(path, rosenbrock, budget=20)
    assert cli.main(["show", str(path)]) in (cli.OK, cli.UNVERIFIED)
    assert not planted.exists()


def test_show_without_plots_imports_nothing_the_journal_names(tmp_path, capsys):
    """``show`` reads the problem file a journal names, but without --plots runs none of its code."""
    marker = tmp_path / "IMPORTED"
    (tmp_path / "model.py").write_text(
        f"from pathlib import Path\nPath({str(marker)!r}).touch()\n\n"
        "def bowl(x):\n    return (x[0] - 1.5) ** 2\n",
        encoding="utf-8",
    )
    problem = tmp_path / "problem.toml"
    problem.write_text(
        '[[parameter]]\nname = "a"\nstart = 0.0\nlower = -5.0\nupper = 5.0\n\n'
        '[objective]\nfunction = "model:bowl"\n\n[search]\ncheck = false\n\n'
        '[journal]\npath = "run.sqlite"\n',
        encoding="utf-8",
    )
    assert cli.main(["run", str(problem), "--quiet"]) == cli.UNVERIFIED
    marker.unlink()  # the run imported it, by design
    for name in list(__import__("sys").modules):
        if name.startswith("_directional_problem_") and name.endswith("_model"):
            del __import__("sys").modules[name]
    assert cli.main(["show", str(tmp_path / "run.sqlite")]) == cli.UNVERIFIED
    assert "best value" in capsys.readouterr().out
    assert not marker.exists()


@pytest.mark.parametrize(
    ("make", "words"),
    [
        (lambda p: p.write_bytes(b"time,temperature\n0,21.5\n"), "not a readable journal"),
        (lambda p: None, "does not exist or is empty"),
        (lambda p: p.write_bytes(b""), "does not exist or is empty"),
        (lambda p: _wal_only(p), "holds no run yet"),
        (lambda p: _truncated(p), "not a readable journal"),
    ],
    ids=["text", "missing", "empty", "no-header", "truncated"],
)
@pytest.mark.parametrize("command", ["resume", "show"])
def test_the_command_line_refuses_a_bad_journal_with_exit_code_2(tmp_path, capsys, make, words,
                                                                 command):
    path = tmp_path / "run.sqlite"
    make(path)
    assert cli.main([command, str(path)]) == cli.BAD_INPUT
    err = capsys.readouterr().err
    assert err.startswith("directional: error: journal ") and words in err


def _wal_only(path: Path) -> None:
    with sqlite3.connect(path) as db:
        db.execute("PRAGMA journal_mode = WAL")
    db.close()


def _truncated(path: Path) -> None:
    dl.minimize(rosenbrock, START, journal=path, check=False)
    path.write_bytes(path.read_bytes()[:3000])
