"""`Solution`: what a search found, and its plain-text summary for people."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from directional.records import Curvature, Status, Stop, Verdict
from directional.run.driver import Evaluation

CAUTION = (
    "Caution: validate a calibrated model independently before any safety-relevant use, and defer "
    "to local codes and licensed practice."
)


@dataclass(frozen=True, slots=True, kw_only=True)
class Solution:
    """The best point a search found, why it stopped, and what is known about the point.

    ``point`` is in the user's coordinates; ``directions`` holds the final direction set, one unit
    row per direction, expressed in search coordinates (each parameter, or its logarithm when it is
    log-scaled); ``history`` is every evaluation in order, failed ones included.
    """

    point: np.ndarray
    value: float
    evaluations: int
    cycles: int
    stop: Stop
    verdict: Verdict
    active: tuple[str, ...]
    curvature: Curvature | None
    uncertainty: Any
    directions: np.ndarray
    names: tuple[str, ...]
    units: tuple[str, ...]
    lower: np.ndarray
    upper: np.ndarray
    reason: str = ""
    notes: tuple[str, ...] = ()
    history: tuple[Evaluation, ...] = field(default=(), repr=False)

    @property
    def named(self) -> dict[str, float]:
        """The best point as ``{name: value}``."""
        return {name: float(v) for name, v in zip(self.names, self.point)}

    @property
    def failures(self) -> int:
        """How many evaluations failed."""
        return sum(1 for e in self.history if e.status != Status.OK)

    def summary(self) -> str:
        """A plain-text table of the result, for people."""
        return "\n".join(summary_lines(self))


def summary_lines(sol: Solution) -> list[str]:
    """The lines of `Solution.summary`."""
    how = {
        Stop.CONVERGED: "converged",
        Stop.BUDGET: "stopped: budget spent",
        Stop.INTERRUPTED: "stopped: interrupted",
        Stop.STALLED: "stopped: stalled",
    }[sol.stop]
    lines = [
        f"directional: {how} after {sol.cycles} cycles and {sol.evaluations} evaluations"
        + (f" ({sol.failures} failed)" if sol.failures else ""),
    ]
    if sol.reason:
        lines.append(f"  reason: {sol.reason}")
    lines.append(f"  best value: {sol.value:.10g}")
    lines.append(f"  verdict: {sol.verdict.value}" + _verdict_hint(sol.verdict))
    if sol.active:
        lines.append(f"  on a bound: {', '.join(sol.active)} (left out of the curvature check)")
    lines.extend(_curvature_lines(sol.curvature))
    lines.append("")
    width = max(9, *(len(n) for n in sol.names))
    lines.append(f"  {'parameter':<{width}}  {'value':>14}  {'lower':>11}  {'upper':>11}  unit")
    for i, name in enumerate(sol.names):
        flag = "  (on a bound)" if name in sol.active else ""
        lines.append(
            f"  {name:<{width}}  {sol.point[i]:>14.8g}  {_bound(sol.lower[i]):>11}  "
            f"{_bound(sol.upper[i]):>11}  {sol.units[i]}{flag}"
        )
    lines.extend(_uncertainty_lines(sol))
    for note in sol.notes:
        lines.append(f"  note: {note}")
    return lines


def _curvature_lines(curvature: Curvature | None) -> list[str]:
    """The curvature check in a line or two: where the Hessian came from, its condition."""
    if curvature is None:
        return []
    cost = f", {curvature.evaluations} evaluations" if curvature.evaluations else ""
    lines = [
        f"  curvature ({curvature.source}{cost}): condition number {curvature.condition:.3g}"
    ]
    free = curvature.free
    if free is not None and free is not curvature:
        lines.append(f"  free estimate (no extra evaluation): condition number {free.condition:.3g}")
    for combination in curvature.undetermined:
        lines.append(f"  not determined: {combination}")
    return lines


def _uncertainty_lines(sol: Solution) -> list[str]:
    """The calibration table: estimates, standard errors, intervals, strongest correlations."""
    u = sol.uncertainty
    if u is None:
        return []
    width = max(9, *(len(n) for n in sol.names))
    level = f"{100 * getattr(u, 'level', 0.95):g} % interval"
    lines = [
        "",
        f"  {'parameter':<{width}}  {'estimate':>14}  {'std. error':>11}  {level:>27}",
    ]
    for i, name in enumerate(sol.names):
        low, high = u.intervals[i]
        lines.append(
            f"  {name:<{width}}  {sol.point[i]:>14.8g}  {u.standard_errors[i]:>11.5g}  "
            f"{'[' + f'{low:.6g}, {high:.6g}' + ']':>27}"
        )
    lines.append(
        f"  residual variance s² = {u.residual_variance:.6g} ({u.observations} residuals, "
        f"{u.degrees_of_freedom} degrees of freedom)"
    )
    strongest = u.strongest(3) if hasattr(u, "strongest") else []
    if strongest:
        pairs = ", ".join(f"{a}-{b} {r:+.4f}" for a, b, r in strongest)
        lines.append(f"  strongest correlations: {pairs}")
    return lines


def _verdict_hint(verdict: Verdict) -> str:
    return {
        Verdict.MINIMUM: " (the Hessian is positive definite within its error bars)",
        Verdict.SADDLE: " (negative curvature in some direction: not a minimum)",
        Verdict.MAXIMUM: " (negative curvature in every direction)",
        Verdict.FLAT: " (some parameter combination is not determined)",
        Verdict.UNCHECKED: " (no curvature check was made)",
    }[verdict]


def _bound(value: float) -> str:
    if math.isinf(value):
        return "-inf" if value < 0 else "inf"
    return f"{value:.6g}"
