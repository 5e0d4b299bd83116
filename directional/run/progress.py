"""A progress bar for a running search: an observer of the driver, told of every evaluation.

The bar (tqdm, on standard error) shows the evaluations spent of the budget, the best value so
far, the cycle when the caller reports it, and the wall time of the last evaluation.  It is off
when standard error is not a terminal, or when asked (``--quiet``), so logs and pipes stay clean.

The driver calls the bar with each new `driver.Evaluation` as it completes, as it calls the
journal; the bar never wraps the objective, so the objective sent to a process pool or a Dask
cluster is the caller's own (a bar holds its terminal stream, which does not pickle), and the
bar counts exactly the evaluations the driver counts (cache hits are not evaluations).  With
replicates (each point run k times) it counts every run, and its best is the best mean of a point
whose k runs it has seen, not the lowest single run (which the noise biases low).
"""

from __future__ import annotations

import math
import sys
from typing import IO

from tqdm import tqdm

from directional.method.replicates import combined
from directional.records import Status
from directional.run.driver import Evaluation


class Progress:
    """A progress bar that the driver notifies of each evaluation (an observer).

    Parameters
    ----------
    budget
        Evaluations allowed (the bar's total); None for a bar without a total.
    enabled
        None: on when ``stream`` is a terminal.
    stream
        Where the bar goes (default standard error).
    done
        Evaluations already spent before this bar started (a resumed run).
    replicates
        Runs of each point: the best is then the best mean of a point's runs.
    """

    def __init__(
        self,
        *,
        budget: int | None,
        enabled: bool | None = None,
        stream: IO[str] | None = None,
        done: int = 0,
        replicates: int = 1,
    ) -> None:
        self.stream = sys.stderr if stream is None else stream
        self.replicates = replicates
        self._runs: dict[bytes, list[float]] = {}  # the runs of points not yet all seen
        if enabled is None:
            enabled = bool(getattr(self.stream, "isatty", lambda: False)())
        self.enabled = enabled
        self.count = done
        self.best = math.inf
        self.cycle: int | None = None
        self.last_seconds = math.nan
        self._bar = (
            tqdm(
                total=budget,
                initial=done,
                file=self.stream,
                unit="eval",
                dynamic_ncols=True,
                leave=False,
                desc="directional",
            )
            if enabled
            else None
        )

    def __call__(self, evaluation: Evaluation) -> None:
        """Count one evaluation the driver made (one cut by Ctrl-C is not counted)."""
        if evaluation.status == Status.INTERRUPTED:
            return
        if self.replicates == 1:
            self.note(evaluation.value, evaluation.seconds)
            return
        key = evaluation.point.tobytes()
        runs = self._runs.setdefault(key, [])
        runs.append(evaluation.value if evaluation.status == Status.OK else math.inf)
        value = math.inf  # counted, not a value of the point until all its runs are in
        if len(runs) >= self.replicates:
            value = combined(self._runs.pop(key))
        self.note(value, evaluation.seconds)

    def note(self, value: float, seconds: float) -> None:
        """Count one evaluation of ``value`` that took ``seconds``."""
        self.count += 1
        self.last_seconds = seconds
        if math.isfinite(value) and value < self.best:
            self.best = value
        if self._bar is not None:
            self._bar.set_postfix_str(self.status(), refresh=False)
            self._bar.update(1)

    def status(self) -> str:
        """The bar's text after the count: best value, cycle, last evaluation's wall time."""
        parts = [f"best {self.best:.6g}" if math.isfinite(self.best) else "best -"]
        if self.cycle is not None:
            parts.append(f"cycle {self.cycle}")
        if math.isfinite(self.last_seconds):
            parts.append(f"last {_seconds(self.last_seconds)}")
        return ", ".join(parts)

    def close(self) -> None:
        """Remove the bar from the terminal."""
        if self._bar is not None:
            self._bar.close()
            self._bar = None

    def __enter__(self) -> Progress:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()


def _seconds(seconds: float) -> str:
    if seconds < 1.0:
        return f"{seconds * 1000:.3g} ms"
    if seconds < 120.0:
        return f"{seconds:.3g} s"
    return f"{seconds / 60:.3g} min"
