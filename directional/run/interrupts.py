"""Ctrl-C, SIGTERM and SIGHUP during a run: the one handler for the signals that stop a run.

A batch scheduler ends a job with SIGTERM, a closed terminal sends SIGHUP; both stop a run the way
Ctrl-C (SIGINT) does: between evaluations, the evaluation in progress cut short (a program's
process group is ended by `directional.interface.process`), the journal closed, the summary
printed.  The signal that stopped the run is kept (`Interrupts.signal`), so that the command line
can exit with 128 + its number.

Nested uses share one handler: an `Interrupts` entered while another one's handler is installed
joins it (same pending flag, same signal), so that the command line can hold one around a whole
run while the driver and the many-search runner enter their own.
"""

from __future__ import annotations

import signal
import threading
from collections.abc import Callable
from types import FrameType
from typing import TypeVar

T = TypeVar("T")


def _stopping_signals() -> tuple[int, ...]:
    """SIGINT, SIGTERM and, where it exists, SIGHUP."""
    found = [signal.SIGINT, signal.SIGTERM]
    if hasattr(signal, "SIGHUP"):
        found.append(signal.SIGHUP)
    return tuple(found)


STOPPING = _stopping_signals()


def _untouched(signum: int, handler: object) -> bool:
    """The handler is Python's own default for ``signum``: ours to replace."""
    if signum == signal.SIGINT:
        return handler is signal.default_int_handler
    return handler == signal.SIG_DFL


class Interrupts:
    """A stopping signal during a run: raised inside a `raising` stretch (the objective running in
    process, the wait on an executor), only noted at any other moment, so that the bookkeeping
    and the journal are never cut in half; the run then halts before the next evaluation.

    Used as a context manager around a whole run.  The handler is installed only in the main
    thread and only over Python's default ones (an ignored SIGHUP, as under ``nohup``, stays
    ignored); an `Interrupts` entered while another one's handler is in place joins that one.
    """

    def __init__(self) -> None:
        self._pending = False
        self._inside = False
        self._signal: int | None = None
        self._previous: dict[int, object] = {}
        self._depth = 0
        self._root: Interrupts = self

    @property
    def pending(self) -> bool:
        """A stopping signal arrived during the run."""
        return self._root._pending

    @property
    def signal(self) -> int | None:
        """The number of the first stopping signal that arrived, or None."""
        return self._root._signal

    @property
    def reason(self) -> str:
        """Why the run halts, in words: "interrupted by the user" or "stopped by SIGTERM"."""
        number = self.signal
        if number is None or number == signal.SIGINT:
            return "interrupted by the user"
        return f"stopped by {signal.Signals(number).name}"

    def __enter__(self) -> Interrupts:
        self._depth += 1
        if self._depth > 1 or threading.current_thread() is not threading.main_thread():
            return self
        current = signal.getsignal(signal.SIGINT)
        owner = getattr(current, "__self__", None)
        if isinstance(owner, Interrupts) and owner is not self:
            self._root = owner._root
            return self
        self._root = self
        for signum in STOPPING:  # SIGINT's handler was just read (each read makes an enum)
            handler = current if signum == signal.SIGINT else signal.getsignal(signum)
            if _untouched(signum, handler):
                self._previous[signum] = signal.signal(signum, self._handle)
        return self

    def __exit__(self, *exc: object) -> None:
        self._depth -= 1
        if self._depth == 0:
            for signum, previous in self._previous.items():
                signal.signal(signum, previous)  # type: ignore[arg-type]
            self._previous.clear()
            self._root = self

    def raising(self) -> _Raising:
        """A stretch where a stopping signal raises `KeyboardInterrupt` at once (a context
        manager; already pending, it raises on entry)."""
        return _Raising(self._root)

    def calling(self, function: Callable[..., T], *args: object) -> T:
        """``function(*args)`` inside a `raising` stretch; the same as ``with raising():``,
        without making a context manager (the driver calls the objective so, once per
        evaluation)."""
        root = self._root
        if root._pending:
            raise KeyboardInterrupt
        outer, root._inside = root._inside, True
        try:
            return function(*args)
        finally:
            root._inside = outer

    def _handle(self, signum: int, frame: FrameType | None) -> None:
        self._pending = True
        if self._signal is None:
            self._signal = signum
        if self._inside:
            raise KeyboardInterrupt


class _Raising:
    """The context manager of `Interrupts.raising`: a plain class, not a generator-based one,
    since the driver enters it once per evaluation."""

    __slots__ = ("root", "outer")

    def __init__(self, root: Interrupts) -> None:
        self.root = root
        self.outer = False

    def __enter__(self) -> None:
        root = self.root
        if root._pending:
            raise KeyboardInterrupt
        self.outer = root._inside
        root._inside = True

    def __exit__(self, *exc: object) -> None:
        self.root._inside = self.outer


class deferred:  # noqa: N801 (used as a statement: ``with deferred():``)
    """Hold a stopping signal back for a short step that must not be cut (starting a program and
    taking hold of it), then raise it as `KeyboardInterrupt` where it would have been raised.

    Only inside a `Interrupts.raising` stretch of the handler in place; elsewhere nothing changes.
    Without it, a signal landing between the start of a program and the moment its caller holds
    it would leave the program running, out of reach.
    """

    __slots__ = ("root", "was")

    def __enter__(self) -> None:
        owner = getattr(signal.getsignal(signal.SIGINT), "__self__", None)
        self.root = owner._root if isinstance(owner, Interrupts) else None
        self.was = False
        if self.root is not None:
            self.was, self.root._inside = self.root._inside, False

    def __exit__(self, kind: object, error: object, trace: object) -> None:
        root = self.root
        if root is None:
            return
        root._inside = self.was
        if self.was and root._pending and error is None:
            raise KeyboardInterrupt


class held:  # noqa: N801 (used as a statement: ``with held():``)
    """Hold the stopping signals back while a file closes; raise `KeyboardInterrupt` afterwards.

    Inside a run (an `Interrupts` handler in place) a signal is only noted there, as always;
    outside one, a signal that arrives during the hold is raised when it ends (never on top of
    another exception).  A plain class, so that the moment before the hold starts, when a signal
    still interrupts, is as short as can be.
    """

    __slots__ = ("interrupts",)

    def __enter__(self) -> None:
        self.interrupts = Interrupts()
        self.interrupts.__enter__()

    def __exit__(self, kind: object, error: object, trace: object) -> None:
        interrupts = self.interrupts
        joined = interrupts._root is not interrupts
        interrupts.__exit__()
        if interrupts._pending and not joined and error is None:
            raise KeyboardInterrupt
