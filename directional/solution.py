"""`Solution`: what a search found, and its plain-text summary for people."""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from directional.records import Break, Curvature, Status, Stop, Verdict
from directional.run.driver import Evaluation

# Ends every summary a person reads (and is a field of the JSON): results can be used to decide
# things that hurt someone when they are wrong.
CAUTION = (
    "Caution: validate a calibrated or tuned model independently before any safety-relevant use, "
    "and defer to local codes and licensed professional practice."
)


@dataclass(frozen=True, slots=True, kw_only=True)
class Solution:
    """The best point a search found, why it stopped, and what is known about the point.

    ``point`` is in the user's coordinates; ``directions`` holds the final direction set, one unit
    row per direction, expressed in search coordinates (each parameter, or its logarithm when it is
    log-scaled); ``history`` is every evaluation in order, failed ones included.  ``spread``
    (`method.replicates.Spread`, when each point was run several times) is the noise of one run
    and of the mean, read off the scatter of the replicates;
    ``noise`` is the noise level the search worked above (stated, or measured; None for
    rounding only): the standard deviation of ``value``, which is a single evaluation (or the
    mean of the replicates).
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
    spread: Any = None
    noise: float | None = None  # the noise level the search worked above: the ± of ``value``

    @property
    def named(self) -> dict[str, float]:
        """The best point as ``{name: value}``."""
        return {name: float(v) for name, v in zip(self.names, self.point)}

    @property
    def failures(self) -> int:
        """How many evaluations failed."""
        return sum(1 for e in self.history if e.status != Status.OK)

    def summary(self) -> str:
        """A plain-text table of the result, for people, ending with the caution."""
        return "\n".join([*summary_lines(self), "", CAUTION])


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
    if sol.noise:
        lines.append(f"  best value: {sol.value:.10g} ± {sol.noise:.2g} (one evaluation; the noise level)")
    else:
        lines.append(f"  best value: {sol.value:.10g}")
    lines.append(f"  verdict: {sol.verdict.value}" + _verdict_hint(sol.verdict, sol.curvature))
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
    if sol.spread is not None:
        lines.append(f"  {sol.spread.describe()}")
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
    noise = getattr(curvature, "noise", math.nan)
    if math.isfinite(noise):
        lines.append(f"  noise: standard deviation {noise:.3g} (the check's steps and error bars "
                     "allow for it)")
    for combination in curvature.undetermined:
        lines.append(f"  not determined: {combination}")
    lines.extend(f"  not smooth: {describe_break(b)}" for b in curvature.breaks)
    return lines


def describe_break(b: Break) -> str:
    """One line for people: where the objective is not smooth and what the point is there."""
    back, forward = b.slopes
    if b.kind == "corner":
        return (f"{b.along}, a corner minimum (it rises both ways: slopes {back:.3g} backward and "
                f"{forward:.3g} forward)")
    if b.kind == "kink":
        return (f"{b.along}, a kink that is not a minimum (slopes {back:.3g} backward and "
                f"{forward:.3g} forward)")
    if b.kind == "edge":
        return (f"{b.along}, the edge of a jump of {b.change:+.3g} within {b.step:.2g}: the point "
                "is on the lower side, not at a smooth minimum")
    return f"{b.along}, a jump of {b.change:+.3g} within {b.step:.2g}, with a lower side"


def _uncertainty_lines(sol: Solution) -> list[str]:
    """The calibration table: estimates, standard errors, intervals, strongest correlations.

    Linearized at the minimum (Bates & Watts 1988, sec. 2.3): read it as a local statement.  A
    parameter on a bound has no standard error (it is not free to move); it says so.
    """
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
        if name in sol.active:
            lines.append(f"  {name:<{width}}  {sol.point[i]:>14.8g}  {'on a bound':>11}")
            continue
        low, high = u.intervals[i]
        if name in getattr(u, "rough", ()):
            lines.append(f"  {name:<{width}}  {sol.point[i]:>14.8g}  {'—':>11}  {'not smooth':>27}")
            continue
        partners = [b for j, b, _ in getattr(u, "confounded", ()) if j == name]
        if partners:
            text = "not separable from " + ", ".join(partners)
            lines.append(f"  {name:<{width}}  {sol.point[i]:>14.8g}  {'—':>11}  {text:>27}")
            continue
        lines.append(
            f"  {name:<{width}}  {sol.point[i]:>14.8g}  {u.standard_errors[i]:>11.5g}  "
            f"{'[' + f'{low:.6g}, {high:.6g}' + ']':>27}"
        )
    lines.append(
        f"  residual variance s² = {u.residual_variance:.6g} ({u.observations} residuals, "
        f"{u.degrees_of_freedom} degrees of freedom)"
    )
    if getattr(u, "jacobian", ""):
        lines.append(f"  standard errors from {u.jacobian}")
    fixed = [f"{name} fixed at its {_side(sol, name)} bound" for name in getattr(u, "fixed", ())]
    if fixed and len(fixed) < len(sol.names):
        lines.append(f"  the errors and intervals hold with {', '.join(fixed)}")
    strongest = u.strongest(3) if hasattr(u, "strongest") else []
    if strongest:
        pairs = ", ".join(f"{a}-{b} {r:+.4f}" for a, b, r in strongest)
        lines.append(f"  strongest correlations: {pairs}")
    return lines


def _side(sol: Solution, name: str) -> str:
    i = sol.names.index(name)
    return "lower" if abs(sol.point[i] - sol.lower[i]) <= abs(sol.upper[i] - sol.point[i]) else "upper"


def _verdict_hint(verdict: Verdict, curvature: Curvature | None = None) -> str:
    if curvature is not None and curvature.source == "gauss-newton":  # a calibration's check
        gauss_newton = {
            Verdict.MINIMUM: " (JᵀJ is positive definite within its error bars and the residuals' "
            "curvature is small against it)",
            Verdict.FLAT: " (JᵀJ is singular within its error bars: some parameter combination is "
            "not determined by the data)",
            Verdict.NOISY: " (the noise hides a direction of JᵀJ at every step the bounds allow: "
            "see below)",
        }
        if verdict in gauss_newton:
            return gauss_newton[verdict]
    return {
        Verdict.MINIMUM: " (the Hessian is positive definite within its error bars)",
        Verdict.SADDLE: " (negative curvature in some direction: not a minimum)",
        Verdict.MAXIMUM: " (negative curvature in every direction)",
        Verdict.FLAT: " (some parameter combination is not determined)",
        Verdict.NONSMOOTH: " (the objective has a kink or a jump at the point: see below)",
        Verdict.NOISY: " (the noise hides the curvature, not a verified minimum: see below)",
        Verdict.UNCHECKED: " (no curvature check was made)",
    }[verdict]


def _bound(value: float) -> str:
    if math.isinf(value):
        return "-inf" if value < 0 else "inf"
    return f"{value:.6g}"
