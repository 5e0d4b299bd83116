"""NIST StRD nonlinear-regression files (as transcribed to TOML) and their residual functions.

Each file holds the data (``x``, ``y``), NIST's starts and certified values, and the model as one
plain-math line in ``b1, b2, ...`` and ``x`` (``^`` for powers, ``exp``).  The caller names the
file: the transcriptions live with the tests (tests/reference/nist-strd), not in the package.

Reference: NIST Statistical Reference Datasets, nonlinear regression
(https://www.itl.nist.gov/div898/strd/nls/nls_main.shtml).
"""

from __future__ import annotations

import tomllib
from collections.abc import Callable
from pathlib import Path

import numpy as np

Residuals = Callable[[np.ndarray], np.ndarray]


def read(path: Path) -> tuple[dict, Residuals]:
    """The file at ``path`` and its residuals ``f(x; b) - y``, evaluated from the model line."""
    with open(path, "rb") as handle:
        data = tomllib.load(handle)
    expression = compile(data["model"].replace("^", "**"), path.stem, "eval")
    x, y = np.array(data["x"], dtype=float), np.array(data["y"], dtype=float)

    def residuals(b: np.ndarray) -> np.ndarray:
        names = {f"b{i + 1}": b[i] for i in range(len(b))}
        with np.errstate(all="ignore"):
            return eval(expression, {"exp": np.exp, "x": x, **names}) - y  # noqa: S307

    return data, residuals
