"""Standard test problems and the models of the example scenarios."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

import numpy as np

from directional.errors import ProblemError


def named_values(
    params: Sequence[float] | Mapping[str, float] | np.ndarray, names: Sequence[str], what: str
) -> tuple[float, ...]:
    """The values of ``names`` from a mapping or a flat sequence, as finite floats.

    Raises
    ------
    ProblemError
        Naming ``what`` and the parameter: a missing name, a wrong count, a non-finite value.
    """
    if isinstance(params, Mapping):
        missing = [name for name in names if name not in params]
        if missing:
            raise ProblemError(f"{what}: missing {missing!r}")
        values = [params[name] for name in names]
    else:
        values = list(np.asarray(params, dtype=float).ravel())
        if len(values) != len(names):
            raise ProblemError(
                f"{what}: expected {len(names)} values {tuple(names)!r}, got {len(values)}"
            )
    out = tuple(float(v) for v in values)
    for name, value in zip(names, out, strict=True):
        if not math.isfinite(value):
            raise ProblemError(f"{what}: {name!r} must be finite, got {value!r}")
    return out
