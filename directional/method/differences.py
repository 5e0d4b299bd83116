"""The one numdifftools adapter: extrapolated central-difference Hessians and Jacobians.

numdifftools builds a stencil of points around ``x``, calls the function at each, one at a time,
and extrapolates the differences of several step sizes (Richardson) to a sharper estimate with an
error estimate.  Our objective is evaluated by the driver in batches, never called from here, so
the adapter works at the origin of step space (nominal step 1 in every coordinate, so the steps
given are the steps taken) and with a `Recorder` as the function: a first pass only records which
points the stencil needs (their positions do not depend on the values, for fixed steps), the
caller evaluates them as one batch, and a second pass reads the values back
(`hessian.extrapolated_hessian`, `leastsquares.extrapolated_jacobian`).

Both operations use the same steps: ``steps``, ``steps / 2`` and ``steps / 4`` (`RATIO`,
`STEPS`).  numdifftools silences floating-point warnings, so the callers check ``isfinite``.

References
----------
.. [1] P. A. Brodtkorb, numdifftools (Richardson extrapolation of finite differences).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numdifftools as nd
import numpy as np

RATIO = 2.0  # ratio of the successive steps numdifftools extrapolates from
STEPS = 3  # steps numdifftools extrapolates from


class Recorder:
    """numdifftools' function for the recording and the reading passes.

    ``known`` maps a step vector (its bytes) to its value, once evaluated; a step not known yet is
    added to ``missing`` (in the order numdifftools asks, which is the order of the batch) and
    answered with ``blank`` (a zero of the right shape), so that the pass can finish.
    """

    def __init__(self, blank: float | np.ndarray) -> None:
        self.blank = blank
        self.known: dict[bytes, Any] = {}
        self.missing: dict[bytes, np.ndarray] = {}

    def __call__(self, v: np.ndarray) -> Any:
        v = np.asarray(v, dtype=float)
        key = v.tobytes()
        if key in self.known:
            return self.known[key]
        self.missing.setdefault(key, v.copy())
        return self.blank.copy() if isinstance(self.blank, np.ndarray) else self.blank


def hessian(function: Callable[[np.ndarray], float], steps: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """numdifftools' extrapolated central-difference Hessian of ``function`` at 0.

    ``steps`` are the largest steps per coordinate.  Returns ``(hessian, error_estimate)``,
    both (k, k) for k steps; 6 k² + 1 calls of ``function``.
    """
    result = nd.Hessian(function, step=_steps(steps), method="central", full_output=True)(
        np.zeros(len(steps))
    )
    estimate, error = fields(result)
    k = len(steps)
    return estimate.reshape(k, k), error.reshape(k, k)


def jacobian(function: Callable[[np.ndarray], np.ndarray], steps: np.ndarray) -> np.ndarray:
    """numdifftools' extrapolated central-difference Jacobian of ``function`` at 0, (m, k)."""
    result = nd.Jacobian(function, step=_steps(steps), method="central", full_output=True)(
        np.zeros(len(steps))
    )
    estimate, _ = fields(result)
    return np.atleast_2d(estimate).reshape(-1, len(steps))


def fields(result: Any) -> tuple[np.ndarray, np.ndarray]:
    """numdifftools' estimate and error estimate, by name, whatever its version returns.

    0.11 returns a named tuple ``EstimateResult(estimate, error_estimate, final_step,
    best_index)``; some earlier versions return ``(estimate, info)`` with ``info.error_estimate``.
    """
    estimate = getattr(result, "estimate", None)
    if estimate is not None:
        return np.asarray(estimate, dtype=float), np.asarray(result.error_estimate, dtype=float)
    estimate, info = result
    return np.asarray(estimate, dtype=float), np.asarray(info.error_estimate, dtype=float)


def _steps(steps: np.ndarray) -> Any:
    """The step generator: ``steps / RATIO**k`` for k < STEPS, taken exactly (nominal step 1)."""
    return nd.MaxStepGenerator(
        base_step=np.asarray(steps, dtype=float),
        step_ratio=RATIO,
        num_steps=STEPS,
        step_nom=1.0,
        offset=0,
        use_exact_steps=True,
    )
