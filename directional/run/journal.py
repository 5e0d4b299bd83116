"""The journal: every evaluation kept in an SQLite file as it completes, for exact resume.

Theory of operation.  The driver calls `Journal.append` with each new evaluation the moment it
exists; the row is committed at once, in its own transaction, so a committed row survives the
process being killed at any instant (``kill -9``, an out-of-memory kill, a batch system ending the
job).  The search is deterministic given the values it receives, so a run can be continued from
its journal (`api.resume`): the stored values are fed back to a new search (`driver.Driver`
``stored``, replay by point), each point it asks for is checked bit for bit against the stored
ones, and when the stored evaluations run out the run goes on live.  Nothing is evaluated twice,
and the resumed run ends exactly where the uninterrupted run would have.

The file (stdlib `sqlite3`, write-ahead log) has three tables:

- ``header``: key/value text: the format and its version, the package version that created the
  journal, the *identity* of the run (JSON) and its SHA-256, the latest budget, free ``info``;
- ``evaluation``: one row per evaluation: search id, sequence number within that search, the
  point (float64 little-endian bytes, exact), the value (``inf`` when failed), status (``ok``,
  ``failed``, ``timed-out``, ``interrupted``), error text, purpose, start and end time (Unix
  seconds), the session that made it, and for a calibration the residual vector (float64 bytes;
  NULL otherwise, and absent from journals written before it existed: the column is added when
  such a journal is resumed), so that a resumed or shown calibration recomputes nothing;
- ``session``: one row per run on the journal (the first and each resume): process id, package
  version, budget, how many evaluations were replayed and made, how it ended.

The identity is what must agree for a journal to be resumed: the kind of run (``"minimize"``,
``"calibrate"``, ``"explore"`` ...), the parameters (name, start, bounds, scale, unit), the
arguments of the entry point that change the search (tolerances, ``check``, seeds, starts) and the
search settings.  The budget and the time limit are *not* part of it: a user may resume with a
larger budget to go further (the budget counts the journaled evaluations too).

The *objective* is identified too, by a fingerprint kept beside the identity (header key
``objective``; `identity.fingerprint`: a function's module, name and source hashes, a program's
command, files and ``version``).  It is compared on every open of an existing journal, but a
difference does not refuse the journal by itself: the first stored evaluation and the best are
made again (`reproduced`), and the run goes on, with a note, only if their values come back within
the noise; otherwise `JournalError` says what changed, before anything is written.  Files that a
program rewrites during a run are found when the journal closes and are no longer compared.

An evaluation interrupted by Ctrl-C (or SIGTERM, SIGHUP) is stored with status ``interrupted`` and
no value; it is informative only and is evaluated again on resume.  A resume with ``retry`` makes
the stored failed and timed-out evaluations again; the new row keeps the failure's search and
sequence number, and `effective` puts it in the failure's place (both rows stay in the file).

Durability. The journal runs in WAL mode with ``synchronous=NORMAL`` by default, and switches to
``synchronous=FULL`` for the commit of any evaluation that took at least `SYNC_AFTER` seconds
("adaptive"). A NORMAL commit is in the operating system's hands when it returns, so it survives
the death of the process; it may be lost in a power cut, which never corrupts the file but can drop
the last commits (always a suffix, so the journal stays a valid prefix of the run and the lost
evaluations are simply made again on resume). A FULL commit is on the disk when it returns, and
with it every commit before it; so is everything once the run closes the journal (the final
checkpoint syncs the log and the file). So an evaluation that cost real time is never lost, even to
a power cut, while a cheap objective pays some 10 to 30 µs per evaluation instead of an ``fsync``
(0.1 ms to several ms; measured in ``benchmarks/results/journal.md``). ``sync="full"`` or
``"normal"`` force one mode (see ``benchmarks/journal_overhead.py``).

A journal is locked while a run writes it (``fcntl.flock`` on ``<journal>.lock``, released by the
operating system when the process dies, so a killed run leaves no stale lock); a second run on
the same journal is refused with `JournalError`.
"""

from __future__ import annotations

import contextlib
import functools
import json
import math
import os
import shlex
import shutil
import sqlite3
import struct
import sys
import tempfile
import time
from collections.abc import Callable, Iterable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, TextIO

import numpy as np

from directional.errors import JournalError, ProblemError
from directional.method.noise import DETECTED, detected_level, difference_table
from directional.method.replicates import pooled
from directional.parameters import Parameter
from directional.records import Batch, Halt, Status
from directional.run.driver import RETRIED, Driver, Evaluation
from directional.run.identity import (
    canonical,
    comparable,
    describe_change,
    describe_place,
    difference,
    digest,
    outputs_seen,
    run_identity,
)
from directional.run.identity import fingerprint as objective_fingerprint
from directional.run.interrupts import held
from directional.run.lockfile import Lock
from directional.version import VERSION

__all__ = [
    "INTERRUPTED",
    "Contents",
    "Header",
    "Journal",
    "Target",
    "journal_for",
    "read",
    "run_identity",
]

FORMAT = "directional journal"
FORMAT_VERSION = 1
SYNC_AFTER = 0.1  # s: an evaluation at least this long is committed with synchronous=FULL
SYNC_MODES = ("adaptive", "normal", "full")
PAGE_SIZE = 1024  # bytes: a commit writes whole pages to the log, and a row is ~150 bytes
CHECKPOINT_PAGES = 10_000  # log pages between checkpoints (each costs fsyncs): 10 MB
INTERRUPTED = Status.INTERRUPTED
NOISE_POINTS = 9  # values per noise-estimate try (`method.noise.estimate`'s default)

_SCHEMA = (
    "CREATE TABLE header (key TEXT PRIMARY KEY, value TEXT NOT NULL)",
    """CREATE TABLE evaluation (
        row INTEGER PRIMARY KEY,
        search INTEGER NOT NULL,
        sequence INTEGER NOT NULL,
        point BLOB NOT NULL,
        value REAL NOT NULL,
        status TEXT NOT NULL,
        detail TEXT NOT NULL,
        purpose TEXT NOT NULL,
        started REAL NOT NULL,
        ended REAL NOT NULL,
        session INTEGER NOT NULL,
        residuals BLOB)""",
    """CREATE TABLE session (
        session INTEGER PRIMARY KEY,
        opened REAL NOT NULL,
        closed REAL,
        pid INTEGER NOT NULL,
        version TEXT NOT NULL,
        budget INTEGER,
        replayed INTEGER,
        evaluated INTEGER,
        stop TEXT,
        reason TEXT)""",
)
_INSERT = (
    "INSERT INTO evaluation (search, sequence, point, value, status, detail, purpose, started, "
    "ended, session, residuals) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)"
)


# ----------------------------------------------------------------------------- the journal


@dataclass(frozen=True, slots=True, kw_only=True)
class Header:
    """What a journal says about itself."""

    identity: dict[str, Any]
    digest: str
    version: str  # of the package that created the journal
    created: float
    budget: int | None
    info: dict[str, Any] = field(default_factory=dict)
    objective: dict[str, Any] | None = None  # the fingerprint of the objective (identity.py)

    @property
    def kind(self) -> str:
        return str(self.identity.get("kind", ""))

    @property
    def parameters(self) -> list[Parameter]:
        """The journal's parameters, rebuilt."""
        return [Parameter(**row) for row in self.identity.get("parameters", [])]


@dataclass(frozen=True, slots=True, kw_only=True)
class Contents:
    """Everything in a journal, read without locking it (see `read`)."""

    header: Header
    evaluations: tuple[Evaluation, ...]  # in the order they were written, interrupted included
    sessions: tuple[dict[str, Any], ...]
    made_by: tuple[int, ...] = ()  # the session of each evaluation

    @property
    def stored(self) -> tuple[Evaluation, ...]:
        """The evaluations a resume replays (`effective`): no interrupted one, retries in place."""
        return effective(self.evaluations)


class Journal:
    """An open journal that a run writes: holds the lock, appends, knows what was stored.

    Open it with `Journal.open` (or `journal_for`), use it as a context manager, pass
    `Journal.hooks` to the `driver.Driver`.  ``stored`` holds the evaluations of earlier sessions
    that are fed back on resume (interrupted ones left out), in the order they were written.
    """

    def __init__(
        self,
        path: Path,
        connection: sqlite3.Connection,
        lock: Lock,
        header: Header,
        stored: tuple[Evaluation, ...],
        session: int,
        sync: str,
        retry: bool = False,
        notes: tuple[str, ...] = (),
    ) -> None:
        self.path = path
        self.retry = retry  # stored failed evaluations are made again (`driver.Driver` ``retry``)
        self.notes = notes  # for the solution: e.g. that the objective changed but reproduced
        self.header = header
        self.stored = stored
        self.resumed = session > 1  # the file held a journal of this run already
        self.written = 0
        self._connection = connection
        self._lock = lock
        self._session = session
        self._sync = sync
        self._full = sync == "full"
        self._stop: tuple[str, str] | None = None
        self._replayed: int | None = None
        self._fingerprint: dict[str, Any] | None = None
        self._refresh: Callable[[], Mapping[str, Any]] | None = None
        # For a calibration: the residual vector of an evaluation, or None.
        self.vectors: Callable[[Evaluation], np.ndarray | None] | None = None

    # -- opening

    @classmethod
    def open(
        cls,
        path: str | os.PathLike[str],
        identity: Mapping[str, Any],
        *,
        budget: int | None = None,
        info: Mapping[str, Any] | None = None,
        sync: str = "adaptive",
        objective: Mapping[str, Any] | None = None,
        reproduce: Callable[[Header, Sequence[Evaluation], Mapping[str, Any]], str] | None = None,
        retry: bool = False,
        refresh: Callable[[], Mapping[str, Any]] | None = None,
    ) -> Journal:
        """Open the journal at ``path`` for a run with ``identity``, creating it if need be.

        An existing journal must hold the same identity; its evaluations become `stored`.  A file
        that does not exist or is empty becomes a new journal (missing folders are made).

        ``objective`` is the objective's fingerprint (`identity.fingerprint`; None: not checked).
        When it differs from the one the journal holds, ``reproduce(header, stored, objective)``
        decides:
        it evaluates stored points again and returns a note, or raises `JournalError`.  Nothing
        is written to the file before that decision, so a refused journal is left byte for byte
        as it was.  ``retry`` makes the stored failed evaluations again (see `driver.Driver`).
        ``refresh`` takes the fingerprint again when the journal closes: files named by a program
        that changed during the run are its outputs, no longer compared (`identity.outputs_seen`).

        Raises
        ------
        JournalError
            When the file is not a journal, is damaged, belongs to another run (the message names
            the first key that differs), or is in use by another run.
        ProblemError
            For a ``sync`` that is not one of `SYNC_MODES`.
        """
        if sync not in SYNC_MODES:
            raise ProblemError(f"sync must be one of {SYNC_MODES!r}, got {sync!r}")
        path = _journal_path(path)
        identity = json.loads(canonical(identity))
        fingerprint = None if objective is None else json.loads(canonical(objective))
        notes: tuple[str, ...] = ()
        if path.exists() and not path.is_file():
            raise JournalError(f"journal {str(path)!r} is not a file")
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
        except OSError as error:
            raise JournalError(f"cannot make the folder of journal {str(path)!r}: {error}") from None
        lock = Lock.take(path)
        connection = None
        try:
            connection = _connect(path)
            with _translated(path):
                connection.execute("PRAGMA synchronous = NORMAL")
                if _is_empty(connection):
                    connection.execute(f"PRAGMA page_size = {PAGE_SIZE}")
                    _use_wal(connection, path)
                    header = _create(connection, identity, budget, info or {}, fingerprint)
                    stored: tuple[Evaluation, ...] = ()
                else:
                    header = _read_header(connection, path)
                    _compare(path, header, identity)
                    if fingerprint is not None:
                        fingerprint = comparable(header.objective, fingerprint)
                    stored = effective(_read_evaluations(connection, path, header), path)
                    changed = fingerprint is not None and header.objective != fingerprint
                    if changed and stored and reproduce is not None:
                        notes = (_reproduce(path, reproduce, header, stored, fingerprint),)
                    _use_wal(connection, path)
                    _add_vector_column(connection)  # after the checks: a refusal writes nothing
                    if changed:
                        _set_header(connection, {"objective": canonical(fingerprint)})
                    if budget is not None:
                        _set_header(connection, {"budget": str(int(budget))})
                session = _begin_session(connection, budget)
                connection.execute(f"PRAGMA synchronous={'FULL' if sync == 'full' else 'NORMAL'}")
        except BaseException:
            with held():
                if connection is not None:
                    connection.close()
                lock.release()
            raise
        opened = cls(path, connection, lock, header, stored, session, sync, retry, notes)
        if fingerprint is not None and refresh is not None:
            opened._fingerprint, opened._refresh = fingerprint, refresh
        return opened

    # -- the driver's side

    def hooks(self) -> dict[str, Any]:
        """Keyword arguments for `driver.Driver`: ``observers`` (append), ``stored`` and
        ``retry`` (stored failures made again, when asked for)."""
        return {"observers": (self.append,), "stored": self.stored, "retry": self.retry}

    def by_search(self) -> dict[int, list[Evaluation]]:
        """The stored evaluations of each search, in sequence order."""
        searches: dict[int, list[Evaluation]] = {}
        for evaluation in sorted(self.stored, key=lambda e: (e.search, e.sequence)):
            searches.setdefault(evaluation.search, []).append(evaluation)
        return searches

    def append(self, evaluation: Evaluation) -> None:
        """Commit one evaluation (one INSERT in its own transaction).

        Raises
        ------
        JournalError
            When the row cannot be written (disk full, file removed).
        """
        if self._sync == "adaptive":
            self._adapt(evaluation.seconds >= SYNC_AFTER)
        point = np.ascontiguousarray(evaluation.point, dtype="<f8").tobytes()
        vector = None if self.vectors is None else self.vectors(evaluation)
        row = (
            evaluation.search,
            evaluation.sequence,
            point,
            _stored_value(evaluation.value),
            evaluation.status,
            evaluation.detail,
            evaluation.purpose,
            evaluation.started,
            evaluation.started + evaluation.seconds,
            self._session,
            None if vector is None else np.ascontiguousarray(vector, dtype="<f8").tobytes(),
        )
        try:
            self._connection.execute(_INSERT, row)
        except sqlite3.Error as error:
            raise JournalError(
                f"cannot write to journal {str(self.path)!r}: {error}{_cause(error)}; the "
                f"{self.written} evaluations committed before this one are kept and are replayed "
                "on resume"
            ) from None
        self.written += 1

    def stored_vectors(self) -> dict[bytes, np.ndarray]:
        """The residual vectors stored with earlier evaluations, by point (float64 bytes)."""
        rows = self._connection.execute(
            "SELECT point, residuals FROM evaluation WHERE residuals IS NOT NULL"
        ).fetchall()
        return {
            np.frombuffer(point, dtype="<f8").astype(float).tobytes():
                np.frombuffer(vector, dtype="<f8").astype(float)
            for point, vector in rows
        }

    def stored_runs(self) -> dict[bytes, list[tuple[float, np.ndarray]]]:
        """Each stored residual vector with its evaluation's value, by point, in row order.

        With replicates a point has several rows, each with its own vector.
        """
        rows = self._connection.execute(
            "SELECT point, value, residuals FROM evaluation WHERE residuals IS NOT NULL ORDER BY row"
        ).fetchall()
        runs: dict[bytes, list[tuple[float, np.ndarray]]] = {}
        for point, value, vector in rows:
            runs.setdefault(np.frombuffer(point, dtype="<f8").astype(float).tobytes(), []).append(
                (_read_value(value), np.frombuffer(vector, dtype="<f8").astype(float))
            )
        return runs

    @property
    def synchronous(self) -> str:
        """SQLite's ``synchronous`` setting now: "NORMAL" or "FULL" (see the module docstring)."""
        level = self._connection.execute("PRAGMA synchronous").fetchone()[0]
        return {0: "OFF", 1: "NORMAL", 2: "FULL", 3: "EXTRA"}[int(level)]

    def last_stop(self) -> str:
        """How the session before this one ended ("" when it was killed)."""
        row = self._connection.execute(
            "SELECT stop FROM session WHERE session < ? ORDER BY session DESC LIMIT 1",
            (self._session,),
        ).fetchone()
        return str(row[0] or "") if row else ""

    def _adapt(self, full: bool) -> None:
        if full != self._full:
            self._connection.execute(f"PRAGMA synchronous={'FULL' if full else 'NORMAL'}")
            self._full = full

    def finish(self, stop: object, reason: str = "", replayed: int | None = None) -> None:
        """Note how the run ended (written to the session row when the journal closes)."""
        self._stop = (str(getattr(stop, "value", stop)), reason)
        self._replayed = replayed

    # -- closing

    def close(self, error: BaseException | None = None) -> None:
        """Write the session's end, close the file and release the lock."""
        if self._lock is None:
            return
        stop, reason = self._stop or ("", "")
        if error is not None:
            stop = stop or ("interrupted" if isinstance(error, KeyboardInterrupt) else "error")
            reason = reason or f"{type(error).__name__}: {error}"[:2000]
        with held():  # a second Ctrl-C must not leave the file open, the lock held
            try:  # closing checkpoints the log into the file, with an fsync of both: all durable
                self._connection.execute(
                    "UPDATE session SET closed = ?, replayed = ?, evaluated = ?, stop = ?, "
                    "reason = ? WHERE session = ?",
                    (time.time(), self._replayed, self.written, stop, reason, self._session),
                )
            except sqlite3.Error:
                pass  # the evaluations are what matters; a failed note must not hide the real error
            try:
                self._note_outputs()
            except Exception:  # noqa: BLE001 (a file that cannot be hashed now: leave it compared)
                pass
            finally:
                self._connection.close()
                self._lock.release()
                self._lock = None  # type: ignore[assignment]

    def _note_outputs(self) -> None:
        """Files the program named that changed during the run are outputs (`refresh`)."""
        if self._fingerprint is None or self._refresh is None or "files" not in self._fingerprint:
            return
        after = json.loads(canonical(self._refresh()))
        seen = outputs_seen(self._fingerprint, after)
        if seen != self._fingerprint:
            _set_header(self._connection, {"objective": canonical(seen)})

    def __enter__(self) -> Journal:
        return self

    def __exit__(self, kind: object, error: BaseException | None, trace: object) -> None:
        self.close(error)


class _NoJournal:
    """Stands in for `Journal` when a run keeps none."""

    stored: tuple[Evaluation, ...] = ()
    notes: tuple[str, ...] = ()
    retry = False
    vectors: Callable[[Evaluation], np.ndarray | None] | None = None

    def stored_vectors(self) -> dict[bytes, np.ndarray]:
        return {}

    def stored_runs(self) -> dict[bytes, list[tuple[float, np.ndarray]]]:
        return {}

    def hooks(self) -> dict[str, Any]:
        return {}

    def by_search(self) -> dict[int, list[Evaluation]]:
        return {}

    def finish(self, stop: object, reason: str = "", replayed: int | None = None) -> None:
        pass

    def __enter__(self) -> _NoJournal:
        return self

    def __exit__(self, *exc: object) -> None:
        pass


@dataclass(frozen=True, slots=True)
class Target:
    """A journal path with notes for its header (e.g. the problem file a CLI run came from).

    ``objective`` replaces the fingerprint taken from the objective itself (a problem file knows
    its program, its files and its ``version``); ``verify`` False skips the comparison (``show``
    replays a journal with a stand-in objective); ``retry`` makes stored failures again.
    """

    path: str | os.PathLike[str]
    info: Mapping[str, Any] = field(default_factory=dict)
    objective: Mapping[str, Any] | None = None
    verify: bool = True
    retry: bool = False
    refresh: Callable[[], Mapping[str, Any]] | None = None


def journal_for(
    journal: object,
    identity: Mapping[str, Any],
    *,
    budget: int | None = None,
    stderr: TextIO | None = None,
    objective: object = None,
) -> Journal | _NoJournal:
    """Open the journal a public entry point was given (None: a stand-in that keeps nothing).

    ``journal`` is a path, a `Target`, or None.  When the journal exists and matches, it is
    resumed rather than overwritten, and a line on ``stderr`` (default `sys.stderr`) says so.
    ``objective`` is the callable whose values the journal keeps: its fingerprint is stored, and
    on resume compared with the stored one; when they differ the first stored evaluation and
    the best are made again through a `driver.Driver`, and the run goes on only if their values
    come back within the noise (`reproduced`).

    Raises
    ------
    ProblemError
        When ``journal`` is neither None, a path nor a `Target`.
    JournalError
        As `Journal.open`.
    """
    if journal is None:
        return _NoJournal()
    target = journal if isinstance(journal, Target) else Target(journal)  # type: ignore[arg-type]
    journal = target.path
    if not isinstance(journal, str | os.PathLike) or not os.fspath(journal):
        raise ProblemError(f"journal must be a file path or None, got {journal!r}")
    fingerprint = None
    if target.verify and (target.objective is not None or objective is not None):
        fingerprint = target.objective if target.objective is not None else objective_fingerprint(
            objective
        )
    refresh = target.refresh
    if refresh is None and target.objective is None and objective is not None:
        refresh = functools.partial(objective_fingerprint, objective)
    opened = Journal.open(
        journal, identity, budget=budget, info=target.info, objective=fingerprint,
        reproduce=None if objective is None else functools.partial(reproduced, objective),
        retry=target.retry, refresh=refresh,
    )
    if opened.resumed:
        last = opened.last_stop()
        print(
            f"directional: resuming journal {str(opened.path)!r}: {len(opened.stored)} "
            "evaluations stored are replayed, not repeated; the last run "
            + (f"ended: {last}" if last else "did not end cleanly (killed?)")
            + ("; stored failures are evaluated again" if opened.retry else ""),
            file=stderr if stderr is not None else sys.stderr,
        )
    return opened


# ----------------------------------------------------------------------------- reading


def read(path: str | os.PathLike[str]) -> Contents:
    """Return everything a journal holds, without locking it (for reports of a live run too).

    Raises
    ------
    JournalError
        When the file does not exist, is not a journal or is damaged.
    """
    path = _journal_path(path)
    if not path.is_file() or path.stat().st_size == 0:
        raise JournalError(f"journal {str(path)!r} does not exist or is empty")
    try:
        return _read(path, path)
    except JournalError:
        if _writable(path) and not _hot(path):
            raise
    # SQLite reads a journal in write-ahead mode only where it may write its index beside it, and
    # a read-only connection cannot roll back a transaction a killed writer left half done: read a
    # copy (where SQLite may replay its log or roll the transaction back) of a journal on a
    # read-only disk or folder, or one left with a rollback journal beside it.
    with tempfile.TemporaryDirectory(prefix="directional-read-") as folder:
        copy = Path(folder) / path.name
        _copy_files(path, copy)
        return _read(copy, path)


def snapshot(source: str | os.PathLike[str], target: str | os.PathLike[str]) -> None:
    """Copy the journal at ``source`` to ``target``, consistent even while a run writes it.

    SQLite's backup, read-only; for a journal that cannot be opened that way (a read-only folder),
    a copy of the file and its write-ahead log.

    Raises
    ------
    JournalError
        When the file cannot be read.
    """
    source, target = _journal_path(source), _journal_path(target)
    try:
        uri = source.resolve().as_uri() + "?mode=ro"
        with contextlib.closing(sqlite3.connect(uri, uri=True)) as src, contextlib.closing(
            sqlite3.connect(target)
        ) as dst:
            src.backup(dst)
        return
    except sqlite3.Error as error:
        if _writable(source):
            raise JournalError(f"cannot read journal {str(source)!r}: {error}") from None
    for suffix in ("-wal", "-shm"):
        with contextlib.suppress(FileNotFoundError):
            os.unlink(str(target) + suffix)
    _copy_files(source, target)


def _writable(path: Path) -> bool:
    effective = os.access in os.supports_effective_ids
    return all(os.access(p, os.W_OK, effective_ids=effective) for p in (path, path.parent))


def _hot(path: Path) -> bool:
    """Whether a rollback journal lies beside ``path``: a writer died inside a transaction."""
    return Path(str(path) + "-journal").is_file()


def _copy_files(source: Path, target: Path) -> None:
    """Copy the journal's file with its write-ahead log and any rollback journal (SQLite replays
    the log, or rolls the unfinished transaction back, when the copy is opened)."""
    try:
        shutil.copyfile(source, target)
        for suffix in ("-wal", "-journal"):
            beside = Path(str(source) + suffix)
            if beside.is_file():
                shutil.copyfile(beside, str(target) + suffix)
    except OSError as error:
        raise JournalError(f"cannot read journal {str(source)!r}: {error}") from None


def _read(path: Path, shown: Path) -> Contents:
    connection = _connect(path, read_only=path == shown)
    try:
        with _translated(shown):
            header = _read_header(connection, shown)
            evaluations = tuple(_read_evaluations(connection, shown, header))
            columns = ("session", "opened", "closed", "pid", "version", "budget", "replayed",
                       "evaluated", "stop", "reason")
            rows = connection.execute(
                f"SELECT {', '.join(columns)} FROM session ORDER BY session"
            ).fetchall()
            made_by = tuple(
                int(row[0]) for row in connection.execute("SELECT session FROM evaluation ORDER BY row")
            )
    finally:
        connection.close()
    return Contents(
        header=header,
        evaluations=evaluations,
        sessions=tuple(dict(zip(columns, row)) for row in rows),
        made_by=made_by,
    )


# ----------------------------------------------------------------------------- file helpers


def _journal_path(path: object) -> Path:
    if not isinstance(path, str | os.PathLike) or not os.fspath(path):
        raise ProblemError(f"journal must be a file path, got {path!r}")
    return Path(os.fspath(path))


def _connect(path: Path, read_only: bool = False) -> sqlite3.Connection:
    try:
        if read_only:
            uri = path.resolve().as_uri() + "?mode=ro"
            return sqlite3.connect(uri, uri=True, isolation_level=None)
        return sqlite3.connect(path, isolation_level=None)
    except sqlite3.Error as error:
        raise JournalError(f"cannot open journal {str(path)!r}: {error}") from None


def _use_wal(connection: sqlite3.Connection, path: Path) -> None:
    """Switch to the write-ahead log (kept in the file once set)."""
    connection.execute("PRAGMA busy_timeout = 5000")
    connection.execute(f"PRAGMA wal_autocheckpoint = {CHECKPOINT_PAGES}")
    mode = connection.execute("PRAGMA journal_mode = WAL").fetchone()[0]
    if str(mode).lower() != "wal":
        raise JournalError(
            f"journal {str(path)!r} cannot use a write-ahead log (mode {mode!r}); "
            "put it on a local disk"
        )


# SQLite's primary result codes for a file that cannot be written (https://sqlite.org/rescode.html)
_WRITE_FAILURES = {
    3: "permission denied",  # SQLITE_PERM
    8: "the file or its folder is read-only",  # SQLITE_READONLY
    10: "the disk may be full, or a file-size or quota limit reached",  # SQLITE_IOERR
    13: "the disk is full",  # SQLITE_FULL
    14: "the file cannot be opened",  # SQLITE_CANTOPEN
}


def _cause(error: sqlite3.Error) -> str:
    """`` (the disk is full)``-style words for an error of the disk or folder, else ""."""
    code = getattr(error, "sqlite_errorcode", None)
    cause = None if code is None else _WRITE_FAILURES.get(int(code) & 0xFF)
    return f" ({cause})" if cause else ""


@contextlib.contextmanager
def _translated(path: Path) -> Iterator[None]:
    """Turn sqlite3's errors into `JournalError` naming the file."""
    try:
        yield
    except sqlite3.DatabaseError as error:
        if _cause(error):  # the disk or the folder, not the file's contents
            raise JournalError(f"cannot write to journal {str(path)!r}: {error}{_cause(error)}") from None
        raise JournalError(
            f"journal {str(path)!r} is not a readable journal (damaged, or another kind of file): "
            f"{error}"
        ) from None
    except sqlite3.Error as error:
        raise JournalError(f"journal {str(path)!r}: {error}") from None


def _create(
    connection: sqlite3.Connection,
    identity: Mapping[str, Any],
    budget: int | None,
    info: Mapping[str, Any],
    fingerprint: dict[str, Any] | None,
) -> Header:
    header = Header(
        identity=dict(identity),
        digest=digest(identity),
        version=VERSION,
        created=time.time(),
        budget=None if budget is None else int(budget),
        info=json.loads(canonical(dict(info))),
        objective=fingerprint,
    )
    connection.execute("BEGIN IMMEDIATE")
    try:
        for statement in _SCHEMA:
            connection.execute(statement)
        _set_header(
            connection,
            {
                "format": FORMAT,
                "format_version": str(FORMAT_VERSION),
                "version": header.version,
                "created": repr(header.created),
                "identity": canonical(header.identity),
                "identity_sha256": header.digest,
                "budget": "" if budget is None else str(int(budget)),
                "info": canonical(header.info),
                **({"objective": canonical(fingerprint)} if fingerprint is not None else {}),
            },
        )
        connection.execute("COMMIT")
    except BaseException:
        connection.execute("ROLLBACK")
        raise
    return header


def _add_vector_column(connection: sqlite3.Connection) -> None:
    """Give a journal written before residual vectors were kept their (nullable) column."""
    columns = {row[1] for row in connection.execute("PRAGMA table_info(evaluation)")}
    if "residuals" not in columns:
        connection.execute("ALTER TABLE evaluation ADD COLUMN residuals BLOB")


def _is_empty(connection: sqlite3.Connection) -> bool:
    """No table at all: a new file (an empty file is an empty SQLite database)."""
    return connection.execute("SELECT count(*) FROM sqlite_master").fetchone()[0] == 0


def _set_header(connection: sqlite3.Connection, items: Mapping[str, str]) -> None:
    connection.executemany(
        "INSERT INTO header (key, value) VALUES (?, ?) "
        "ON CONFLICT (key) DO UPDATE SET value = excluded.value",
        list(items.items()),
    )


def _read_header(connection: sqlite3.Connection, path: Path) -> Header:
    tables = {row[0] for row in connection.execute("SELECT name FROM sqlite_master")}
    if not tables:
        raise JournalError(
            f"journal {str(path)!r} holds no run yet (the run that made it ended before writing "
            "anything): start the run again"
        )
    if not {"header", "evaluation", "session"} <= tables:
        raise JournalError(f"{str(path)!r} is an SQLite file but not a directional journal")
    items = dict(connection.execute("SELECT key, value FROM header").fetchall())
    if items.get("format") != FORMAT:
        raise JournalError(f"{str(path)!r} is an SQLite file but not a directional journal")
    if items.get("format_version") != str(FORMAT_VERSION):
        raise JournalError(
            f"journal {str(path)!r} has format version {items.get('format_version')!r}; "
            f"this version of directional reads version {FORMAT_VERSION}"
        )
    try:
        identity = json.loads(items["identity"])
        info = json.loads(items.get("info", "{}"))
        budget = int(items["budget"]) if items.get("budget") else None
        created = float(items.get("created", "nan"))
        stored_digest = items["identity_sha256"]
        objective = json.loads(items["objective"]) if items.get("objective") else None
        if not isinstance(identity, dict) or not isinstance(identity.get("parameters"), list):
            raise ValueError("the identity is not a JSON object with parameters")
        parameters = [Parameter(**row) for row in identity["parameters"]]
    except (KeyError, ValueError, TypeError) as error:
        raise JournalError(f"journal {str(path)!r} has a damaged header: {error}") from None
    if digest(identity) != stored_digest:
        raise JournalError(
            f"journal {str(path)!r} has a damaged header: the identity does not match its SHA-256"
        )
    if not parameters:
        raise JournalError(f"journal {str(path)!r} has a damaged header: no parameters")
    return Header(
        identity=identity,
        digest=stored_digest,
        version=items.get("version", "?"),
        created=created,
        budget=budget,
        info=info if isinstance(info, dict) else {},
        objective=objective if isinstance(objective, dict) else None,
    )


def _compare(path: Path, header: Header, identity: Mapping[str, Any]) -> None:
    if header.digest == digest(identity):
        return
    found = difference(header.identity, dict(identity)) or ("identity", "?", "?")
    where, old, new = found
    if where == "kind":
        raise JournalError(
            f"journal {str(path)!r} holds a {old!r} run, not a {new!r} run: resume it with "
            f"the same kind of run (dl.resume picks it)"
        )
    raise JournalError(
        f"journal {str(path)!r} belongs to another problem: {describe_place(where, header.identity)} "
        f"is {old!r} in the journal but {new!r} now; use another journal file (or move this one "
        f"aside: mv {shlex.quote(str(path))} {shlex.quote(str(path) + '.old')}), or the same "
        "settings to resume"
    )


def _stored_value(value: float) -> float | bytes:
    """The value as the evaluation table keeps it: a REAL, except -0.0 as its 8 bytes.

    SQLite stores a REAL that is a whole number as an integer, which loses the sign of -0.0; a
    BLOB keeps it (a REAL column's affinity leaves a BLOB alone).  Journals from before this
    have only REALs and read as before.
    """
    value = float(value)
    if value == 0.0 and math.copysign(1.0, value) < 0:
        return struct.pack("<d", value)
    return value


def _read_value(value: float | int | bytes) -> float:
    """The value `_stored_value` kept."""
    if isinstance(value, bytes):
        return float(struct.unpack("<d", value)[0])
    return float(value)


def _read_evaluations(
    connection: sqlite3.Connection, path: Path, header: Header
) -> Iterator[Evaluation]:
    n = len(header.identity["parameters"])
    cursor = connection.execute(
        "SELECT row, search, sequence, point, value, status, detail, purpose, started, ended "
        "FROM evaluation ORDER BY row"
    )
    for index, row in enumerate(cursor):
        number, search, sequence, point, value, status, detail, purpose, started, ended = row
        if not (
            isinstance(point, bytes)
            and len(point) == 8 * n
            and (isinstance(value, float | int) or (isinstance(value, bytes) and len(value) == 8))
            and isinstance(search, int)
            and isinstance(sequence, int)
            and isinstance(status, str)
        ):
            raise JournalError(f"journal {str(path)!r} has a damaged evaluation in row {number}")
        yield Evaluation(
            index=index,
            point=np.frombuffer(point, dtype="<f8").astype(float),
            value=_read_value(value) if status != INTERRUPTED else math.inf,
            status=status,
            detail=str(detail),
            purpose=str(purpose),
            started=float(started),
            seconds=float(ended) - float(started),
            search=search,
            sequence=sequence,
        )


def effective(evaluations: Iterable[Evaluation], path: object = "") -> tuple[Evaluation, ...]:
    """The evaluations a resume replays: interrupted ones left out, retries in place.

    Each search's sequence numbers must run 0, 1, 2, ... without a gap.  A later row with the
    number of a stored failure is its retry (``resume --retry-failed``): it takes the failure's
    place and, when its value differs, ends that search's older rows after it (the search took
    another path from there).  Any other repeat or gap is damage: `JournalError`.
    """
    searches: dict[int, list[Evaluation]] = {}
    for evaluation in evaluations:
        if evaluation.status == INTERRUPTED:
            continue
        rows = searches.setdefault(evaluation.search, [])
        k = evaluation.sequence
        if k < len(rows) and rows[k].status in RETRIED:
            if evaluation.value != rows[k].value:
                del rows[k + 1 :]
            rows[k] = evaluation
            continue
        if k != len(rows):
            problem = "twice" if k < len(rows) else "missing"
            raise JournalError(
                f"journal {str(path)!r} is damaged: search {evaluation.search}, evaluation "
                f"number {min(k, len(rows))} is {problem}"
            )
        rows.append(evaluation)
    kept = {id(e) for rows in searches.values() for e in rows}
    return tuple(e for e in evaluations_in_order(searches) if id(e) in kept)


def evaluations_in_order(searches: Mapping[int, list[Evaluation]]) -> list[Evaluation]:
    """The evaluations of all searches in the order they were written."""
    return sorted((e for rows in searches.values() for e in rows), key=lambda e: e.index)


def reproduced(
    objective: Any, header: Header, stored: Sequence[Evaluation], fingerprint: Mapping[str, Any]
) -> str:
    """Evaluate the first stored point that succeeded and the best one again; a note, or
    `JournalError`.

    They reproduce when each new value is within ``6 * noise`` of the stored one (the noise the
    run was given, or the level its noise estimate found in the journal; the difference of two
    noisy values has a standard deviation of sqrt(2) times the noise, common practice, no
    source), and never closer than ``1e-9 * max(1, |f|)`` (rounding); two failures agree.
    """
    good = [e for e in stored if e.status == "ok"]  # a stored failure may be cured since
    first = min(good or stored, key=lambda e: e.index)
    chosen = [first] + ([min(good, key=lambda e: e.value)] if good else [])
    if len(chosen) == 2 and chosen[1].point.tobytes() == first.point.tobytes():
        chosen = chosen[:1]
    change = describe_change(header.objective, fingerprint)
    level = _noise_of(header, stored)
    values = _evaluate_again(objective, [e.point for e in chosen])
    for evaluation, value in zip(chosen, values.tolist()):
        old = evaluation.value
        tolerance = max(6.0 * level, 1e-9 * max(1.0, abs(old) if math.isfinite(old) else 0.0))
        agree = (not math.isfinite(old) and not math.isfinite(value)) or abs(value - old) <= tolerance
        if not agree:
            raise JournalError(
                f"was written for another objective: {change}; evaluated again, the point "
                f"{evaluation.point.tolist()!r} gives {value!r} where the journal holds {old!r} "
                f"(tolerance {tolerance:.3g})"
            )
    return (
        f"the objective changed since the journal was written ({change}); {len(chosen)} stored "
        f"point{'s' if len(chosen) > 1 else ''} (the first and the best) evaluated again "
        "reproduced their values within the noise, so the stored evaluations are used"
    )


def _evaluate_again(objective: Any, points: Sequence[np.ndarray]) -> np.ndarray:
    """The values of ``points`` through a `Driver` (failures are +inf), nothing journaled."""

    def ask() -> Iterator[Batch]:
        try:
            values = yield Batch(points=np.array(points), purpose="verify")
        except Halt:
            return None
        return values

    values = Driver(objective=objective, budget=len(points), stall_after=len(points) + 1).run(
        ask()  # type: ignore[arg-type]
    )
    if values is None:  # interrupted
        raise KeyboardInterrupt
    return np.asarray(values, dtype=float)


def _noise_of(header: Header, stored: Sequence[Evaluation]) -> float:
    """The noise level of one run: given, or found again from its stored noise estimate or, for a
    run with replicates, from their pooled spread (one evaluated point is one run)."""
    replicates = header.identity.get("arguments", {}).get("replicates", 1)
    if isinstance(replicates, int) and replicates > 1:
        groups: dict[bytes, list[float]] = {}
        for e in stored:
            groups.setdefault(e.point.tobytes(), []).append(e.value if e.status == "ok" else math.inf)
        spread = pooled(groups.values(), replicates)
        if spread is not None:
            return spread.run
    noise = header.identity.get("arguments", {}).get("noise")
    if isinstance(noise, int | float) and not isinstance(noise, bool):
        return float(noise)
    if noise != "estimate":
        return 0.0
    values = np.array([e.value for e in stored if e.purpose == "noise"])
    level = 0.0
    for start in range(0, len(values) - NOISE_POINTS + 1, NOISE_POINTS):  # one table per try
        chunk = values[start : start + NOISE_POINTS]
        if np.all(np.isfinite(chunk)):
            levels, changes, status = difference_table(chunk)
            if status == DETECTED:
                level = detected_level(levels, changes)[0]
    return level


def _reproduce(
    path: Path,
    reproduce: Callable[[Header, Sequence[Evaluation], Mapping[str, Any]], str],
    header: Header,
    stored: Sequence[Evaluation],
    fingerprint: Mapping[str, Any],
) -> str:
    """`reproduced`, its refusal naming the journal and how to start afresh."""
    try:
        return reproduce(header, stored, fingerprint)
    except JournalError as error:
        raise JournalError(
            f"journal {str(path)!r} {error}. The journal is left as it was. To start afresh, "
            f"move it aside (mv {shlex.quote(str(path))} {shlex.quote(str(path) + '.old')}) and "
            "run again; to continue it, restore the objective it was written for"
        ) from None


def _begin_session(connection: sqlite3.Connection, budget: int | None) -> int:
    cursor = connection.execute(
        "INSERT INTO session (opened, pid, version, budget) VALUES (?, ?, ?, ?)",
        (time.time(), os.getpid(), VERSION, budget),
    )
    return int(cursor.lastrowid or 0)
