"""A data table: measurements in a CSV file, and the weighted residuals of a model against them.

The ``[data]`` table of a problem file names a CSV file (a header row, then one row per
measurement) and its columns::

    [data]
    file = "readings.csv"
    observed = ["T_mid", "T_tip"]     # one column, or several series
    sigma = ["s_mid", "s_tip"]        # optional: columns of standard deviations, or one number
    variables = ["time"]              # optional: the independent variable(s), for the plots

The objective (a program or a Python function) then returns its *predictions*: a flat vector
aligned with the rows, series after series (all rows of ``T_mid``, then all rows of ``T_tip``).
The tool forms the weighted residuals ``(predicted - observed) / sigma`` itself (unweighted
when no sigma is given), so the calibration's standard errors are in the data's own units
(Bates & Watts 1988, sec. 2.3 and 3.8 for the weighting).  A prediction vector of the wrong
length fails that evaluation with the lengths named; so does one holding NaN.

References
----------
.. [1] D. M. Bates and D. G. Watts, *Nonlinear Regression Analysis and Its Applications*, Wiley,
   1988.
"""

from __future__ import annotations

import csv
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from directional.errors import ProblemError
from directional.interface.command import FAILED, Command, EvaluationFailed


@dataclass(frozen=True, slots=True, kw_only=True)
class DataTable:
    """Measurements read from a CSV file: observed series, their sigmas, independent variables.

    ``observed`` and ``sigma`` are (rows, series) arrays; ``sigma`` is None when not given.
    ``variables`` maps each independent-variable column to its (rows,) array.
    """

    path: Path
    names: tuple[str, ...]
    observed: np.ndarray
    sigma: np.ndarray | None
    variables: dict[str, np.ndarray]

    @property
    def size(self) -> int:
        """How many predictions the objective must return: rows times series."""
        return int(self.observed.size)

    def residuals(self, predicted: object) -> np.ndarray:
        """``(predicted - observed) / sigma``, flattened series after series.

        Raises
        ------
        EvaluationFailed
            When ``predicted`` is not a flat vector of `size` finite numbers.
        """
        p = self.predictions(predicted)
        r = p - self.observed.T.ravel()
        return r if self.sigma is None else r / self.sigma.T.ravel()

    def predictions(self, predicted: object) -> np.ndarray:
        """``predicted`` as a checked flat float array (see `residuals`)."""
        try:
            p = np.asarray(predicted, dtype=float)
        except (TypeError, ValueError):
            raise EvaluationFailed(FAILED, f"the predictions are not numbers: {predicted!r:.200}") from None
        rows, series = self.observed.shape
        if p.ndim != 1 or p.size != self.size:
            shape = "x".join(map(str, p.shape)) or "one number"
            raise EvaluationFailed(
                FAILED,
                f"the objective gave {shape} predictions; the data table {self.path.name} needs "
                f"{self.size} ({rows} rows x {series} series {', '.join(self.names)}, series "
                "after series)",
            )
        bad = np.flatnonzero(~np.isfinite(p))
        if bad.size:
            raise EvaluationFailed(FAILED, f"prediction {bad[0]} is {p[bad[0]]!r}, not a finite value")
        return p

    def series(self, predicted: np.ndarray) -> list[dict[str, Any]]:
        """The fit plots' series (`directional.report.plots.write_plots`): one per observed column."""
        p = self.predictions(predicted).reshape(self.observed.shape[1], -1)
        name, x = (next(iter(self.variables.items())) if self.variables
                   else ("row", np.arange(1.0, self.observed.shape[0] + 1)))
        out = []
        for k, column in enumerate(self.names):
            entry: dict[str, Any] = {"name": column, "x": x, "observed": self.observed[:, k],
                                     "predicted": p[k], "x_label": name}
            if self.sigma is not None:
                entry["sigma"] = self.sigma[:, k]
            out.append(entry)
        return out


def read_table(
    path: str | Path,
    observed: Sequence[str],
    sigma: Sequence[str] | float | None = None,
    variables: Sequence[str] = (),
) -> DataTable:
    """Read the CSV file at ``path`` and check the named columns.

    ``sigma`` is None, one positive number for every measurement, or one column per observed
    series.  Lines that are empty or start with ``#`` are skipped.

    Raises
    ------
    ProblemError
        When the file cannot be read, a column is missing, a cell is not a number (its line and
        column named), a sigma is not positive, or a column is named twice.
    """
    path = Path(path)
    try:
        with open(path, newline="", encoding="utf-8") as f:
            lines = [(n, row) for n, row in enumerate(csv.reader(f), start=1)
                     if any(c.strip() for c in row) and not row[0].lstrip().startswith("#")]
    except (OSError, UnicodeDecodeError, csv.Error) as error:
        raise ProblemError(f"data file {str(path)!r} cannot be read: {error}") from None
    if len(lines) < 2:
        raise ProblemError(f"data file {str(path)!r} needs a header row and at least one data row")
    header = [c.strip() for c in lines[0][1]]
    observed, variables = tuple(observed), tuple(variables)
    deviations = tuple(sigma) if isinstance(sigma, list | tuple) else ()
    if deviations and len(deviations) != len(observed):
        raise ProblemError(f"data: sigma names {len(deviations)} columns for {len(observed)} "
                           "observed series; give one per series, or one number")
    wanted = observed + deviations + variables
    for name in wanted:
        if wanted.count(name) > 1:
            raise ProblemError(f"data: column {name!r} is named twice")
        if name not in header:
            raise ProblemError(f"data file {str(path)!r} has no column {name!r} (columns: "
                               f"{', '.join(header)})")
    columns = {name: _column(path, lines[1:], header.index(name), name) for name in wanted}
    values = np.column_stack([columns[name] for name in observed])
    if deviations:
        spread = np.column_stack([columns[name] for name in deviations])
    elif sigma is not None:
        if isinstance(sigma, bool) or not isinstance(sigma, int | float):
            raise ProblemError(f"data: sigma must be a number or column names, got {sigma!r}")
        spread = np.full(values.shape, float(sigma))
    else:
        spread = None
    if spread is not None and not np.all((spread > 0.0) & np.isfinite(spread)):
        row, col = np.argwhere(~((spread > 0.0) & np.isfinite(spread)))[0]
        where = f"column {deviations[col]!r}, data row {row + 1}" if deviations else "sigma"
        raise ProblemError(f"data: {where}: sigma must be positive and finite, got "
                           f"{spread[row, col]!r}")
    return DataTable(path=path, names=observed, observed=values, sigma=spread,
                     variables={name: columns[name] for name in variables})


def _column(path: Path, rows: list[tuple[int, list[str]]], index: int, name: str) -> np.ndarray:
    values = []
    for line, row in rows:
        cell = row[index].strip() if index < len(row) else ""
        try:
            value = float(cell)
        except ValueError:
            value = math.nan
        if not math.isfinite(value):
            raise ProblemError(f"data file {str(path)!r}, line {line}, column {name!r}: {cell!r} is "
                               "not a finite number")
        values.append(value)
    return np.array(values)


class TableResiduals:
    """The objective as the calibration sees it: predictions turned into weighted residuals.

    ``predict(x)`` returns the predictions (a program run, or a Python function); calling this
    returns ``table.residuals(predict(x))``.  It pickles when ``predict`` does.
    """

    def __init__(self, predict: Callable[[np.ndarray], Any], table: DataTable) -> None:
        self.predict = predict
        self.table = table

    def __repr__(self) -> str:
        return f"TableResiduals({self.predict!r}, {self.table.path.name!r})"

    def __call__(self, x: np.ndarray) -> np.ndarray:
        return self.table.residuals(_checked(self.predict, x, self.table.predictions))

    def fingerprint(self) -> dict[str, Any]:
        """The fingerprint of ``predict`` (`directional.run.identity.fingerprint`), with the
        contents of the data file: other measurements make other residuals."""
        from directional.run.identity import content_sha256, fingerprint

        found = fingerprint(self.predict)
        found["data"] = {str(self.table.path): content_sha256(self.table.path)}
        return found

    def series(self, x: np.ndarray) -> list[dict[str, Any]]:
        """The model against the data at ``x``, for ``fit.png`` and ``residuals.png``."""
        x = np.asarray(x, dtype=float)
        return self.table.series(_checked(self.predict, x, self.table.predictions))


class SteadyLength:
    """A residual vector that must keep the length of the first one (else the evaluation fails).

    The calibration cannot mix vectors of different lengths; a program that prints a shorter
    vector once (a crashed time step, a truncated file) fails that evaluation rather than the
    whole run.  The first length seen is kept (a race between the first parallel runs is
    harmless: they are all checked against the one that won).
    """

    def __init__(self, residuals: Callable[[np.ndarray], Any]) -> None:
        self.residuals = residuals
        self.length: int | None = None

    def __repr__(self) -> str:
        return f"SteadyLength({self.residuals!r})"

    def __call__(self, x: np.ndarray) -> np.ndarray:
        return _checked(self.residuals, x, self._steady)

    def _steady(self, result: object) -> np.ndarray:
        r = np.asarray(result, dtype=float).reshape(-1)
        if self.length is None:
            self.length = r.size
        elif r.size != self.length:
            raise EvaluationFailed(
                FAILED, f"the program gave {r.size} residuals where its first run gave {self.length}"
            )
        return r


def _checked(function: Callable[..., Any], x: np.ndarray, check: Callable[[Any], Any]) -> Any:
    """``check(function(x))``; a program checks its answer before it counts as a success, so
    that the folder of a run whose answer is rejected is kept."""
    if isinstance(function, Command):
        return function(x, check=check)
    return check(function(x))
