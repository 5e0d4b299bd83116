"""An executor whose results are handed over in the order the calls were submitted.

Theory of operation.  `InOrder` wraps any `concurrent.futures.Executor`: the calls run on it in
parallel as usual, but each call gets a proxy future that is completed only when (a) its own
call has finished, (b) every call submitted before it has been handed over, and (c) the proxy
handed over before it has been *collected* (its ``result()`` read).  So a caller that waits with
``concurrent.futures.wait(..., FIRST_COMPLETED)`` and reads the results it finds sees them one
at a time, in submission order, however the calls raced.

Why: a search's batch (both bracketing probes, a Hessian stencil, the columns of a Jacobian)
evaluated on a pool then reaches the journal in the order a serial run would write it, so the
journal of a parallel run is the journal of the serial run (same values, same order) and either
can resume the other.  The cost is small: a result waits only for those submitted before it,
which were running at the same time.

A cancelled proxy is skipped (its call is cancelled too, if it has not started).
"""

from __future__ import annotations

import collections
import concurrent.futures as cf
import threading
from typing import Any


class InOrder(cf.Executor):
    """Run calls on ``inner``; deliver their results in submission order (module docstring).

    ``_max_workers`` is ``workers``, so that a caller that sizes its queue from a pool's
    ``_max_workers`` (as `directional.run.driver.Driver` does) keeps ``workers`` calls in flight.
    The inner executor is shut down with this one when ``owned``.

    >>> import concurrent.futures as cf
    >>> with InOrder(cf.ThreadPoolExecutor(2), workers=2) as pool:
    ...     [f.result() for f in [pool.submit(pow, 2, k) for k in range(4)]]
    [1, 2, 4, 8]
    """

    def __init__(self, inner: cf.Executor, *, workers: int, owned: bool = True) -> None:
        self._inner = inner
        self._max_workers = workers
        self._owned = owned
        self._lock = threading.RLock()
        self._queue: collections.deque[tuple[cf.Future, _Proxy]] = collections.deque()
        self._out: _Proxy | None = None  # handed over, not yet collected

    def submit(self, fn, /, *args, **kwargs):  # type: ignore[no-untyped-def]
        inner = self._inner.submit(fn, *args, **kwargs)
        proxy = _Proxy(self, inner)
        with self._lock:
            self._queue.append((inner, proxy))
        inner.add_done_callback(lambda _: self._release())
        return proxy

    def shutdown(self, wait: bool = True, *, cancel_futures: bool = False) -> None:
        if self._owned:
            self._inner.shutdown(wait=wait, cancel_futures=cancel_futures)

    def _collected(self, proxy: _Proxy) -> None:
        with self._lock:
            if self._out is proxy:
                self._out = None
        self._release()

    def _release(self) -> None:
        """Hand over the head of the queue if its call is done and the last one was collected."""
        with self._lock:
            while self._out is None and self._queue:
                inner, proxy = self._queue[0]
                if proxy.cancelled():
                    self._queue.popleft()
                    continue
                if not inner.done():
                    return
                self._queue.popleft()
                if not proxy.set_running_or_notify_cancel():
                    continue
                self._out = proxy
                error = inner.exception() if not inner.cancelled() else cf.CancelledError()
                if error is None:
                    proxy.set_result(inner.result())
                else:
                    proxy.set_exception(error)


class _Proxy(cf.Future):
    """The caller's future: completed by `InOrder._release`; reading it frees the next."""

    def __init__(self, owner: InOrder, inner: cf.Future) -> None:
        super().__init__()
        self._owner = owner
        self._inner = inner

    def result(self, timeout: float | None = None) -> Any:
        try:
            return super().result(timeout)
        finally:
            if self.done():
                self._owner._collected(self)

    def exception(self, timeout: float | None = None) -> BaseException | None:
        try:
            return super().exception(timeout)
        finally:
            if self.done():
                self._owner._collected(self)

    def cancel(self) -> bool:
        self._inner.cancel()
        cancelled = super().cancel()
        self._owner._collected(self)
        return cancelled
