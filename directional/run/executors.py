"""What the driver evaluates on besides its own process: checks for pools, an in-process executor.

The driver (`directional.run.driver`) takes any `concurrent.futures.Executor`: a process pool, or
a Dask cluster's ``client.get_executor()``.  A process pool sends the objective to its workers by
`pickle`, so a lambda or a nested function fails there, late and obscurely: `check_picklable`
says so before the run starts.
"""

from __future__ import annotations

import concurrent.futures as cf
import pickle

from directional.errors import ProblemError
from directional.run.driver import Objective


class InProcess(cf.Executor):
    """An executor that runs each call at once, in this process.

    The driver's default (no executor) calls the objective itself, so that Ctrl-C can cut it;
    this is for callers that want an executor object that behaves the same, e.g. to check that
    a journal written on a pool resumes anywhere.
    """

    def submit(self, fn, /, *args, **kwargs):  # type: ignore[no-untyped-def]
        future: cf.Future = cf.Future()
        try:
            future.set_result(fn(*args, **kwargs))
        except Exception as error:
            future.set_exception(error)
        return future


def check_picklable(objective: Objective) -> None:
    """Raise `ProblemError` unless ``objective`` can be sent to a process pool.

    Raises
    ------
    ProblemError
        For a lambda, a nested function or anything else `pickle` cannot send.
    """
    try:
        pickle.dumps(objective)
    except Exception as error:
        raise ProblemError(
            f"objective must be picklable to run on a process pool (define it at the top level "
            f"of a module, not as a lambda or nested function); {objective!r}: {error}"
        ) from None
