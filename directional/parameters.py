"""`Parameter`: one named, bounded, optionally log-scaled input of the objective."""

from __future__ import annotations

import math
from dataclasses import dataclass

from directional.errors import ProblemError

SCALES = ("linear", "log")


@dataclass(frozen=True, slots=True)
class Parameter:
    """One input of the objective: its name, start value, bounds, search scale and unit.

    ``scale="log"`` searches the parameter in log coordinates, which suits rate constants and other
    positive quantities known only to a factor; it needs positive bounds and a positive start.

    >>> Parameter("mu_max", 0.4, 0.01, 2.0, scale="log", unit="1/h").name
    'mu_max'

    Raises
    ------
    ProblemError
        At construction, for a name that is not an identifier, a non-finite start, ``lower >= upper``,
        a start outside the bounds, or a log scale with a non-positive bound or start.
    """

    name: str
    start: float
    lower: float = -math.inf
    upper: float = math.inf
    scale: str = "linear"
    unit: str = ""

    def __post_init__(self) -> None:
        if not isinstance(self.name, str) or not self.name.isidentifier():
            raise ProblemError(f"parameter name must be an identifier, got {self.name!r}")
        name = self.name
        for key in ("start", "lower", "upper"):
            value = getattr(self, key)
            try:
                number = float(value)
            except (TypeError, ValueError):
                raise ProblemError(f"parameter {name!r}: {key} must be a number, got {value!r}") from None
            if isinstance(value, bool) or math.isnan(number):
                raise ProblemError(f"parameter {name!r}: {key} must be a number, got {value!r}")
            object.__setattr__(self, key, number)
        if not math.isfinite(self.start):
            raise ProblemError(f"parameter {name!r}: start must be finite, got {self.start!r}")
        if not self.lower < self.upper:
            raise ProblemError(
                f"parameter {name!r}: lower must be below upper, got [{self.lower!r}, {self.upper!r}]"
            )
        if not self.lower <= self.start <= self.upper:
            raise ProblemError(
                f"parameter {name!r}: start {self.start!r} lies outside "
                f"[{self.lower!r}, {self.upper!r}]"
            )
        if self.scale not in SCALES:
            raise ProblemError(
                f"parameter {name!r}: scale must be 'linear' or 'log', got {self.scale!r}"
            )
        if self.scale == "log" and self.lower <= 0:
            raise ProblemError(
                f"parameter {name!r}: a log scale needs a positive lower bound, got {self.lower!r}"
            )
        if not isinstance(self.unit, str):
            raise ProblemError(f"parameter {name!r}: unit must be a string, got {self.unit!r}")
