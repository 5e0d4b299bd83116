"""A progress bar for a running search: wrap the objective, see every real evaluation.

The bar (tqdm, on standard error) shows the evaluations spent of the budget, the best value so
far, the cycle when the caller reports it, and the wall time of the last evaluation.  It is off
when standard error is not a terminal, or when asked (``--quiet``), so logs and pipes stay clean.

Wrapping the objective rather than the driver keeps the driver untouched: the driver answers
repeated points from its cache without calling the objective, so the wrapper counts exactly the
evaluations the driver counts.
"""

from __future__ import annotations

import math
import sys
import time
from collections.abc import Callable
from typing import IO, Any

import numpy as np
from tqdm import tqdm

from directional.method.leastsquares import sum_of_squares


class Progress:
    """The objective, counted: a callable that forwards to ``objective`` and updates a bar.

    Parameters
    ----------
    objective
        The objective to wrap; its return value is passed through unchanged.
    budget
        Evaluations allowed (the bar's total); None for a bar without a total.
    kind
        ``"value"`` or ``"residuals"`` (the best value is then the sum of squares).
    enabled
        None: on when ``stream`` is a terminal.
    stream
        Where the bar goes (default standard error).
    done
        Evaluations already spent before this bar started (a resumed run).

    The wrapper holds a tqdm bar, so it does not pickle: use it in the process that runs the
    driver, never as the objective shipped to worker processes.
    """

    def __init__(
        self,
        objective: Callable[[np.ndarray], Any],
        *,
        budget: int | None,
        kind: str = "value",
        enabled: bool | None = None,
        stream: IO[str] | None = None,
        done: int = 0,
    ) -> None:
        self.objective = objective
        self.kind = kind
        self.stream = sys.stderr if stream is None else stream
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

    def __call__(self, x: np.ndarray) -> Any:
        tick = time.perf_counter()
        value = math.nan
        try:
            result = self.objective(x)
            value = sum_of_squares(result) if self.kind == "residuals" else _number(result)
            return result
        finally:
            self.note(value, time.perf_counter() - tick)

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


def _number(result: Any) -> float:
    try:
        return float(np.asarray(result, dtype=float).reshape(()))
    except (TypeError, ValueError):
        return math.nan


def _seconds(seconds: float) -> str:
    if seconds < 1.0:
        return f"{seconds * 1000:.3g} ms"
    if seconds < 120.0:
        return f"{seconds:.3g} s"
    return f"{seconds / 60:.3g} min"
