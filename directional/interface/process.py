"""Run one external program in its own process group: bounded output, a deadline, a clean stop.

Theory of operation
-------------------
The program starts in a new session (``start_new_session=True``), so it and everything it starts
share one process group that can be signalled at once.  Standard input is empty; standard output
and error are read through a selector as they arrive, and of each stream only the last
``max_output`` bytes are kept (a deque of chunks), so a program that writes gigabytes costs a
bounded amount of memory and never blocks on a full pipe.

The end of the program is observed with ``waitid(..., WNOWAIT)``, which leaves it a zombie until
the very end: its process id, which is also the group id, cannot be reused while we still signal
the group.  On Linux a pidfd wakes the selector the moment the program ends; elsewhere the end is
polled every few milliseconds.

How a run ends:

* the program ends and both pipes close: the group gets SIGKILL (a no-op unless the program left
  something running in the background), the program is reaped, done;
* the deadline passes first (``timed_out``), or the program ended but something it started still
  holds the pipes open half a second later: the group gets SIGTERM; we keep reading for up to
  ``grace`` seconds until the program has ended and the pipes are closed; if that does not happen
  the group gets SIGKILL (``killed``).  Output that arrives meanwhile is kept.

A process that left the group (its own ``setsid``) is out of reach; if it holds the pipes, they are
read for one more second and then closed.  POSIX only.
"""

from __future__ import annotations

import math
import os
import selectors
import signal
import subprocess
import time
from collections import deque
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

from directional.run.interrupts import deferred

_CHUNK = 1 << 16  # bytes per read
_POLL = 0.01  # s between checks for the program's end when no pidfd announces it
_LINGER = 0.5  # s the pipes may stay open after the program ended before the group is stopped
_DRAIN = 1.0  # s to read what is left after SIGKILL (pipes held by a process outside the group)


@dataclass(frozen=True, slots=True, kw_only=True)
class Outcome:
    """What one run of a program did, as seen from outside.

    Attributes
    ----------
    returncode : int
        The exit status; negative ``-N`` when the program was ended by signal ``N``.
    stdout, stderr : str
        The last ``max_output`` bytes of each stream, decoded as UTF-8 (bad bytes replaced).
    stdout_size, stderr_size : int
        Bytes the program wrote to each stream in all (kept or not).
    timed_out : bool
        The deadline passed before the program ended.
    terminated : bool
        The group was sent SIGTERM (after a time-out, or to stop processes left holding the
        pipes).
    killed : bool
        SIGTERM was not enough within the grace period and the group was sent SIGKILL.
    seconds : float
        Wall-clock time from start to reaping.
    directory : Path or None
        The working directory of the run, or None for the caller's.
    """

    returncode: int
    stdout: str
    stderr: str
    stdout_size: int
    stderr_size: int
    timed_out: bool
    terminated: bool
    killed: bool
    seconds: float
    directory: Path | None


class _Tail:
    """The last ``limit`` bytes of a stream, kept as a deque of chunks."""

    __slots__ = ("limit", "chunks", "kept", "size")

    def __init__(self, limit: int) -> None:
        self.limit = limit
        self.chunks: deque[bytes] = deque()
        self.kept = 0
        self.size = 0

    def add(self, chunk: bytes) -> None:
        self.chunks.append(chunk)
        self.kept += len(chunk)
        self.size += len(chunk)
        while self.kept - len(self.chunks[0]) >= self.limit:
            self.kept -= len(self.chunks.popleft())

    def text(self) -> str:
        return b"".join(self.chunks)[-self.limit :].decode("utf-8", errors="replace")


def _has_ended(pid: int) -> bool:
    """True if our child ``pid`` has ended; it is left unreaped (a zombie)."""
    try:
        info = os.waitid(os.P_PID, pid, os.WEXITED | os.WNOHANG | os.WNOWAIT)
    except ChildProcessError:
        return True
    return info is not None


def _signal_group(pgid: int, signum: int) -> None:
    try:
        os.killpg(pgid, signum)
    except (ProcessLookupError, PermissionError):
        pass


def _open_pidfd(pid: int) -> int | None:
    try:
        return os.pidfd_open(pid)
    except (AttributeError, OSError):
        return None


class _Watch:
    """Reads both pipes of a running program and notices when it ends."""

    def __init__(self, process: subprocess.Popen, limit: int) -> None:
        self.pid = process.pid
        self.out, self.err = _Tail(limit), _Tail(limit)
        self.selector = selectors.DefaultSelector()
        self.selector.register(process.stdout, selectors.EVENT_READ, self.out)
        self.selector.register(process.stderr, selectors.EVENT_READ, self.err)
        self.pipes = 2
        self.pidfd = _open_pidfd(self.pid)
        if self.pidfd is not None:
            self.selector.register(self.pidfd, selectors.EVENT_READ, None)
        self.ended_at: float | None = None

    def ended(self) -> bool:
        if self.ended_at is None and _has_ended(self.pid):
            self.ended_at = time.monotonic()
        return self.ended_at is not None

    def settled(self) -> bool:
        return self.ended() and self.pipes == 0

    def step(self, until: float) -> None:
        """Read what arrives, returning at the next event or at ``until`` (monotonic seconds)."""
        wait = max(0.0, until - time.monotonic())
        if self.pidfd is None and not self.ended():
            wait = min(wait, _POLL)
        if not self.selector.get_map():
            time.sleep(min(wait, _POLL))
            return
        for key, _ in self.selector.select(None if math.isinf(wait) else wait):
            if key.data is None:  # the pidfd: the program has ended
                self._close_pidfd()
                continue
            chunk = os.read(key.fd, _CHUNK)
            if chunk:
                key.data.add(chunk)
            else:
                self.selector.unregister(key.fileobj)
                key.fileobj.close()
                self.pipes -= 1

    def wait(self, deadline: float) -> str:
        """Read until the program ends and the pipes close: "ended", "timeout" or "lingering"."""
        while True:
            if self.ended():
                if self.pipes == 0:
                    return "ended"
                if time.monotonic() >= self.ended_at + _LINGER:
                    return "lingering"
                self.step(self.ended_at + _LINGER)
            elif time.monotonic() >= deadline:
                return "timeout"
            else:
                self.step(deadline)

    def settle(self, until: float) -> bool:
        """Read until the program has ended and the pipes closed, or ``until``; True if so."""
        while not self.settled():
            if time.monotonic() >= until:
                return False
            self.step(until)
        return True

    def _close_pidfd(self) -> None:
        if self.pidfd is not None:
            self.selector.unregister(self.pidfd)
            os.close(self.pidfd)
            self.pidfd = None

    def close(self) -> None:
        self._close_pidfd()
        for key in list(self.selector.get_map().values()):
            self.selector.unregister(key.fileobj)
            key.fileobj.close()
        self.selector.close()


def run_program(
    argv: Sequence[str],
    *,
    cwd: str | os.PathLike[str] | None = None,
    env: Mapping[str, str] | None = None,
    timeout: float | None = None,
    grace: float = 2.0,
    max_output: int = 1_000_000,
) -> Outcome:
    """Run ``argv`` (no shell) in its own process group and return what happened.

    The argument list is passed to the operating system as it is: no shell sees it, so no
    element is ever split, expanded or run as a command.  See the module docstring for how a run
    ends; a failing program is not an error here, only in the `Outcome`.

    Raises
    ------
    OSError
        If the program cannot be started (missing, not executable, bad ``cwd``).
    """
    start = time.monotonic()
    deadline = math.inf if timeout is None else start + timeout
    process = watch = None
    terminated = killed = False
    try:
        with deferred():  # a Ctrl-C or SIGTERM waits until the program is held (then raised)
            process = subprocess.Popen(
                list(argv),
                cwd=cwd,
                env=None if env is None else dict(env),
                stdin=subprocess.DEVNULL,
                stdout=subprocess.PIPE,
                stderr=subprocess.PIPE,
                start_new_session=True,
            )
            watch = _Watch(process, max_output)
        how = watch.wait(deadline)
        if how != "ended":
            terminated = True
            _signal_group(process.pid, signal.SIGTERM)
            killed = not watch.settle(time.monotonic() + grace)
        _signal_group(process.pid, signal.SIGKILL)  # the leader is unreaped: the group id is ours
        drain_until = time.monotonic() + _DRAIN
        while watch.pipes and time.monotonic() < drain_until:
            watch.step(drain_until)
        returncode = process.wait()
    finally:
        if process is not None and process.returncode is None:  # interrupted: leave nothing
            _signal_group(process.pid, signal.SIGKILL)
            process.wait()
        if watch is not None:
            watch.close()
    return Outcome(
        returncode=returncode,
        stdout=watch.out.text(),
        stderr=watch.err.text(),
        stdout_size=watch.out.size,
        stderr_size=watch.err.size,
        timed_out=how == "timeout",
        terminated=terminated,
        killed=killed,
        seconds=time.monotonic() - start,
        directory=None if cwd is None else Path(cwd),
    )
