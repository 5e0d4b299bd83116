"""Process pools whose workers die with the run that made them.

A worker of a `concurrent.futures.ProcessPoolExecutor` outlives its parent when the parent is
killed (``kill -9``, an out-of-memory kill): it waits on its task queue for ever, holds what it
inherited (the journal's lock among them) and may keep a simulator running.  Each worker made here
asks the kernel to kill it when its parent dies (Linux ``prctl(PR_SET_PDEATHSIG, SIGKILL)``, see
``man 2 prctl``); where that is not available, a thread in the worker watches the parent's process
id and ends the worker within `WATCH_SECONDS` of the parent's death.  A worker also takes the
stopping signals (SIGINT, SIGTERM, SIGHUP) as `KeyboardInterrupt`, so that a program it runs is
ended with its process group (`directional.interface.process`).

The kernel's parent-death signal follows the *thread* that started the worker: pools are made and
used from one thread (the one that calls `explore`), which outlives the pool.
"""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import ctypes
import ctypes.util
import os
import signal
import sys
import threading
import time

from directional.run.interrupts import STOPPING, Interrupts

PR_SET_PDEATHSIG = 1  # from <linux/prctl.h>
WATCH_SECONDS = 0.2


def process_pool(workers: int | None) -> cf.ProcessPoolExecutor:
    """A process pool of ``workers`` processes that end when this process ends."""
    pool = cf.ProcessPoolExecutor(
        max_workers=workers, initializer=bind_to_parent, initargs=(os.getpid(),)
    )
    pool._directional_workers = True  # type: ignore[attr-defined]  # see `stop_workers`
    return pool


def stop_workers(executor: object) -> None:
    """Interrupt the evaluations running in a pool made by `process_pool` (a run was stopped).

    Each worker gets SIGTERM, which its handler turns into `KeyboardInterrupt`: a program it runs
    is ended with its process group at once, instead of the stopped run waiting for it.  Pools
    made elsewhere (the caller's, Dask's) are left alone.  A pool wrapped in
    `directional.run.ordered.InOrder` (``--workers`` for one search) is seen through.
    """
    executor = getattr(executor, "_inner", executor)
    if not getattr(executor, "_directional_workers", False):
        return
    for process in list((getattr(executor, "_processes", None) or {}).values()):
        with contextlib.suppress(OSError, ValueError, AttributeError):
            process.terminate()


def bind_to_parent(parent: int) -> None:
    """In a worker: die when process ``parent`` dies; stopping signals become KeyboardInterrupt."""
    if not _death_signal():
        threading.Thread(target=_watch, args=(parent,), name="parent-watch", daemon=True).start()
    if os.getppid() != parent:  # the parent died before the worker could ask to follow it
        os._exit(1)
    for signum in STOPPING:  # not the handler of the run that forked this worker
        if signal.getsignal(signum) != signal.SIG_IGN:
            signal.signal(signum, signal.default_int_handler if signum == signal.SIGINT else
                          signal.SIG_DFL)
    interrupts = Interrupts()  # the one handler, raising at any moment (`deferred` may hold it)
    interrupts.__enter__()
    interrupts._inside = True


def _death_signal() -> bool:
    """Ask Linux to send SIGKILL to this process when its parent ends; True if it agreed."""
    if not sys.platform.startswith("linux"):
        return False
    with contextlib.suppress(OSError, AttributeError, TypeError):
        libc = ctypes.CDLL(ctypes.util.find_library("c") or "libc.so.6", use_errno=True)
        return libc.prctl(PR_SET_PDEATHSIG, signal.SIGKILL, 0, 0, 0) == 0
    return False


def _watch(parent: int) -> None:  # pragma: no cover (Linux uses the kernel's signal)
    while os.getppid() == parent:
        time.sleep(WATCH_SECONDS)
    os._exit(1)
