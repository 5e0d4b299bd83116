"""Ctrl-C during a run of the driver or the many-search runner: the one SIGINT handler."""

from __future__ import annotations

import contextlib
import signal
import threading
from collections.abc import Iterator
from types import FrameType


class Interrupts:
    """Ctrl-C during a run: raised inside a `raising` stretch (the objective running in process,
    the wait on an executor), only noted at any other moment, so that the bookkeeping and the
    journal are never cut in half; the run then halts before the next evaluation.

    Used as a context manager around a whole run; nested uses share the outermost handler, and
    the handler is installed only in the main thread and only over Python's default one.
    """

    def __init__(self) -> None:
        self.pending = False
        self._inside = False
        self._previous: object = None
        self._depth = 0

    def __enter__(self) -> Interrupts:
        self._depth += 1
        if (
            self._depth == 1
            and threading.current_thread() is threading.main_thread()
            and signal.getsignal(signal.SIGINT) is signal.default_int_handler
        ):
            self._previous = signal.signal(signal.SIGINT, self._handle)
        return self

    def __exit__(self, *exc: object) -> None:
        self._depth -= 1
        if self._depth == 0 and self._previous is not None:
            signal.signal(signal.SIGINT, self._previous)  # type: ignore[arg-type]
            self._previous = None

    @contextlib.contextmanager
    def raising(self) -> Iterator[None]:
        """A stretch where Ctrl-C raises `KeyboardInterrupt` at once."""
        if self.pending:
            raise KeyboardInterrupt
        self._inside = True
        try:
            yield
        finally:
            self._inside = False

    def _handle(self, signum: int, frame: FrameType | None) -> None:
        self.pending = True
        if self._inside:
            raise KeyboardInterrupt
