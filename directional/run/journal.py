"""The journal: every evaluation kept in an SQLite file as it completes, for exact resume.

Theory of operation.  The driver calls `Journal.append` with each new evaluation the moment it
exists; the row is committed at once, in its own transaction, so a committed row survives the
process being killed at any instant (``kill -9``, an out-of-memory kill, a batch system ending the
job).  The search is deterministic given the values it receives, so a run can be continued from
its journal (`api.resume`): the stored values are fed back to a new search (`driver.Driver`
``replay``), each point it asks for is checked bit for bit against the stored one, and when the
stored evaluations run out the run goes on live.  Nothing is evaluated twice, and the resumed run
ends exactly where the uninterrupted run would have.

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

An evaluation interrupted by Ctrl-C is stored with status ``interrupted`` and no value; it is
informative only and is evaluated again on resume.

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
import json
import math
import os
import signal
import sqlite3
import sys
import threading
import time
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, TextIO

import numpy as np

from directional.errors import JournalError, ProblemError
from directional.parameters import Parameter
from directional.run.driver import Evaluation
from directional.run.identity import canonical, describe_place, difference, digest, run_identity
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
INTERRUPTED = "interrupted"

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
    ) -> None:
        self.path = path
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
        # For a calibration: the residual vector of a point (its float64 bytes), or None.
        self.vectors: Callable[[bytes], np.ndarray | None] | None = None

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
    ) -> Journal:
        """Open the journal at ``path`` for a run with ``identity``, creating it if need be.

        An existing journal must hold the same identity; its evaluations become `stored`.  A file
        that does not exist or is empty becomes a new journal (missing folders are made).

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
                    header = _create(connection, identity, budget, info or {})
                    stored: tuple[Evaluation, ...] = ()
                else:
                    header = _read_header(connection, path)
                    _compare(path, header, identity)
                    _use_wal(connection, path)
                    _add_vector_column(connection)
                    stored = tuple(
                        e for e in _read_evaluations(connection, path, header) if e.status != INTERRUPTED
                    )
                    _check_places(path, stored)
                    if budget is not None:
                        _set_header(connection, {"budget": str(int(budget))})
                session = _begin_session(connection, budget)
                connection.execute(f"PRAGMA synchronous={'FULL' if sync == 'full' else 'NORMAL'}")
        except BaseException:
            with _HeldInterrupts():
                if connection is not None:
                    connection.close()
                lock.release()
            raise
        return cls(path, connection, lock, header, stored, session, sync)

    # -- the driver's side

    def hooks(self) -> dict[str, Any]:
        """Keyword arguments for `driver.Driver`: ``record`` (append) and ``replay`` (stored)."""
        return {"record": self.append, "replay": self.by_search()}

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
        vector = None if self.vectors is None else self.vectors(evaluation.point.tobytes())
        row = (
            evaluation.search,
            evaluation.sequence,
            point,
            evaluation.value,
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
        with _HeldInterrupts():  # a second Ctrl-C must not leave the file open, the lock held
            try:  # closing checkpoints the log into the file, with an fsync of both: all durable
                self._connection.execute(
                    "UPDATE session SET closed = ?, replayed = ?, evaluated = ?, stop = ?, "
                    "reason = ? WHERE session = ?",
                    (time.time(), self._replayed, self.written, stop, reason, self._session),
                )
            except sqlite3.Error:
                pass  # the evaluations are what matters; a failed note must not hide the real error
            finally:
                self._connection.close()
                self._lock.release()
                self._lock = None  # type: ignore[assignment]

    def __enter__(self) -> Journal:
        return self

    def __exit__(self, kind: object, error: BaseException | None, trace: object) -> None:
        self.close(error)


class _NoJournal:
    """Stands in for `Journal` when a run keeps none."""

    stored: tuple[Evaluation, ...] = ()
    vectors: Callable[[bytes], np.ndarray | None] | None = None

    def stored_vectors(self) -> dict[bytes, np.ndarray]:
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
    """A journal path with notes for its header (e.g. the problem file a CLI run came from)."""

    path: str | os.PathLike[str]
    info: Mapping[str, Any] = field(default_factory=dict)


def journal_for(
    journal: object,
    identity: Mapping[str, Any],
    *,
    budget: int | None = None,
    stderr: TextIO | None = None,
) -> Journal | _NoJournal:
    """Open the journal a public entry point was given (None: a stand-in that keeps nothing).

    ``journal`` is a path, a `Target`, or None.  When the journal exists and matches, it is
    resumed rather than overwritten, and a line on ``stderr`` (default `sys.stderr`) says so.

    Raises
    ------
    ProblemError
        When ``journal`` is neither None, a path nor a `Target`.
    JournalError
        As `Journal.open`.
    """
    if journal is None:
        return _NoJournal()
    info: Mapping[str, Any] = {}
    if isinstance(journal, Target):
        journal, info = journal.path, journal.info
    if not isinstance(journal, str | os.PathLike) or not os.fspath(journal):
        raise ProblemError(f"journal must be a file path or None, got {journal!r}")
    opened = Journal.open(journal, identity, budget=budget, info=info)
    if opened.resumed:
        last = opened.last_stop()
        print(
            f"directional: resuming journal {str(opened.path)!r}: {len(opened.stored)} "
            "evaluations stored are replayed, not repeated; the last run "
            + (f"ended: {last}" if last else "did not end cleanly (killed?)"),
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
    connection = _connect(path, read_only=True)
    try:
        with _translated(path):
            header = _read_header(connection, path)
            evaluations = tuple(_read_evaluations(connection, path, header))
            columns = ("session", "opened", "closed", "pid", "version", "budget", "replayed",
                       "evaluated", "stop", "reason")
            rows = connection.execute(
                f"SELECT {', '.join(columns)} FROM session ORDER BY session"
            ).fetchall()
    finally:
        connection.close()
    return Contents(
        header=header,
        evaluations=evaluations,
        sessions=tuple(dict(zip(columns, row)) for row in rows),
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


class _HeldInterrupts:
    """Hold a Ctrl-C back while the journal closes; raise it as `KeyboardInterrupt` afterwards.

    Only in the main thread with Python's default SIGINT handler (elsewhere a Ctrl-C is not
    raised here anyway, or belongs to a handler that is not ours to replace).  A plain class, so
    that the moment before the hold starts, when a Ctrl-C still interrupts, is as short as can be.
    """

    __slots__ = ("caught", "previous")

    def __enter__(self) -> None:
        self.caught: list[int] = []
        self.previous: object = None
        if (
            signal.getsignal(signal.SIGINT) is signal.default_int_handler
            and threading.current_thread() is threading.main_thread()
        ):
            self.previous = signal.signal(signal.SIGINT, self._note)

    def _note(self, signum: int, frame: object) -> None:
        self.caught.append(signum)

    def __exit__(self, kind: object, error: object, trace: object) -> None:
        if self.previous is not None:
            signal.signal(signal.SIGINT, self.previous)  # type: ignore[arg-type]
        if self.caught and error is None:
            raise KeyboardInterrupt


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
) -> Header:
    header = Header(
        identity=dict(identity),
        digest=digest(identity),
        version=VERSION,
        created=time.time(),
        budget=None if budget is None else int(budget),
        info=json.loads(canonical(dict(info))),
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
        f"is {old!r} in the journal but {new!r} now; use another journal file, or the same "
        "settings to resume"
    )


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
            and isinstance(value, float | int)
            and isinstance(search, int)
            and isinstance(sequence, int)
            and isinstance(status, str)
        ):
            raise JournalError(f"journal {str(path)!r} has a damaged evaluation in row {number}")
        yield Evaluation(
            index=index,
            point=np.frombuffer(point, dtype="<f8").astype(float),
            value=float(value) if status != INTERRUPTED else math.inf,
            status=status,
            detail=str(detail),
            purpose=str(purpose),
            started=float(started),
            seconds=float(ended) - float(started),
            search=search,
            sequence=sequence,
        )


def _check_places(path: Path, stored: Sequence[Evaluation]) -> None:
    """Each search's stored sequence numbers must be 0, 1, 2, ... without a gap."""
    expected: dict[int, int] = {}
    for evaluation in sorted(stored, key=lambda e: (e.search, e.sequence)):
        want = expected.get(evaluation.search, 0)
        if evaluation.sequence != want:
            problem = "twice" if evaluation.sequence < want else "missing"
            raise JournalError(
                f"journal {str(path)!r} is damaged: search {evaluation.search}, evaluation "
                f"number {min(want, evaluation.sequence)} is {problem}"
            )
        expected[evaluation.search] = want + 1


def _begin_session(connection: sqlite3.Connection, budget: int | None) -> int:
    cursor = connection.execute(
        "INSERT INTO session (opened, pid, version, budget) VALUES (?, ?, ?, ?)",
        (time.time(), os.getpid(), VERSION, budget),
    )
    return int(cursor.lastrowid or 0)
