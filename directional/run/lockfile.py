"""A lock file that keeps a second run off a journal: ``flock`` on ``<journal>.lock``.

``fcntl.flock`` is released by the operating system when its process dies, however it dies, so a
killed run leaves no stale lock; the file holds the owner's process id, for the message and for
`holder` (is a run writing this journal now?).  Worker processes forked by the owner inherit the
lock and hold it until they exit; the pools of `directional.run.workers` die with their parent,
and a lock whose owner has died is waited for a few seconds (`ORPHAN_GRACE`) before a second run
is refused.  POSIX; where ``fcntl`` is missing, nothing is locked.
"""

from __future__ import annotations

import contextlib
import os
import time
from pathlib import Path

from directional.errors import JournalError

try:
    import fcntl
except ImportError:  # pragma: no cover
    fcntl = None  # type: ignore[assignment]


ORPHAN_GRACE = 10.0  # seconds to wait for the workers of a run that died to let go of its lock


def _ended(owner: str) -> bool:
    """True when ``owner`` is the process id of a process that no longer exists."""
    if not owner.isdigit():
        return False
    try:
        os.kill(int(owner), 0)
    except ProcessLookupError:
        return True
    except OSError:
        return False
    return False


def holder(journal: Path) -> int | None:
    """The process id of the live run that holds ``journal``'s lock, or None.

    Read from the lock file without locking (a report must not keep a run off its journal): the
    file exists while a run holds the lock, or after one was killed (then its process is gone).
    """
    path = journal.with_name(journal.name + ".lock")
    try:
        owner = path.read_text(encoding="ascii", errors="replace").strip()
    except OSError:
        return None
    if not owner.isdigit() or int(owner) == os.getpid() or _ended(owner):
        return None
    return int(owner)


class Lock:
    """An exclusive ``flock`` on ``<journal>.lock``, holding the owner's process id."""

    def __init__(self, path: Path, descriptor: int | None) -> None:
        self.path = path
        self._descriptor = descriptor

    @classmethod
    def take(cls, journal: Path) -> Lock:
        """Lock ``journal`` for this process.

        Raises
        ------
        JournalError
            When another run holds the lock, or the lock file cannot be made.
        """
        path = journal.with_name(journal.name + ".lock")
        if fcntl is None:  # pragma: no cover
            return cls(path, None)
        deadline = time.monotonic() + ORPHAN_GRACE
        for _ in range(1000):
            try:
                descriptor = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
            except OSError as error:
                raise JournalError(f"cannot lock journal {str(journal)!r}: {error}") from None
            try:
                fcntl.flock(descriptor, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:
                owner = os.read(descriptor, 64).decode(errors="replace").strip()
                os.close(descriptor)
                if _ended(owner) and time.monotonic() < deadline:
                    # The run that took the lock is gone, but worker processes it forked still
                    # hold the lock until they notice: give them a moment.
                    time.sleep(0.1)
                    continue
                raise JournalError(
                    f"journal {str(journal)!r} is in use by another run"
                    + (f" (process {owner})" if owner else "")
                    + (", which has ended: processes it started still hold the journal"
                       if _ended(owner) else "")
                ) from None
            # The holder before us may have removed the file after we opened it: lock it again.
            try:
                same = os.stat(path).st_ino == os.fstat(descriptor).st_ino
            except FileNotFoundError:
                same = False
            if same:
                os.ftruncate(descriptor, 0)
                os.write(descriptor, str(os.getpid()).encode())
                return cls(path, descriptor)
            os.close(descriptor)
        raise JournalError(f"cannot lock journal {str(journal)!r}: the lock file keeps changing")

    def release(self) -> None:
        if self._descriptor is None:
            return
        with contextlib.suppress(OSError):
            os.unlink(self.path)
        os.close(self._descriptor)
        self._descriptor = None

    def __del__(self) -> None:
        # A journal dropped unclosed (a second Ctrl-C in the instant its closing began) must not
        # keep the lock for the rest of a long-lived process.
        with contextlib.suppress(Exception):
            self.release()
