"""Reports of a solution for people and programs: the text summary and the JSON document.

The JSON keeps every number at full precision (Python's shortest repr of a double) and uses the
parameter names as keys; an infinite bound or a value that is not finite is written as ``null``,
since JSON has no infinity.  Plots are in `directional.report.plots`.

Failed evaluations are grouped by their reason (the first line of the error text, with the
status), most frequent first, each with its count and the first point that failed that way: the
summary shows the table, the JSON lists it under ``failures``.  Every evaluation, one row each, is
exported by `directional.report.evaluations`.
"""

from __future__ import annotations

import json
import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from directional.parameters import Parameter
from directional.solution import CAUTION, Solution

FORMAT = "directional-solution/1"


FAILURE_GROUPS = 10  # reasons shown in the summary; the JSON lists them all


@dataclass(frozen=True, slots=True, kw_only=True)
class FailureGroup:
    """Failed evaluations that share a reason: how many, and the first point that failed so."""

    status: str
    reason: str
    count: int
    example: tuple[float, ...]


def failure_groups(history: Iterable[Any]) -> list[FailureGroup]:
    """The failed evaluations of ``history`` grouped by status and reason, most frequent first."""
    counts: dict[tuple[str, str], int] = {}
    examples: dict[tuple[str, str], tuple[float, ...]] = {}
    for evaluation in history:
        if evaluation.status == "ok":
            continue
        key = (evaluation.status, _reason(evaluation.detail) or evaluation.status)
        counts[key] = counts.get(key, 0) + 1
        examples.setdefault(key, tuple(float(v) for v in np.asarray(evaluation.point).ravel()))
    order = sorted(counts, key=lambda key: -counts[key])  # stable: first seen first among equals
    return [
        FailureGroup(status=key[0], reason=key[1], count=counts[key], example=examples[key])
        for key in order
    ]


def _reason(detail: str) -> str:
    """The first non-empty line of an error text, at most 200 characters."""
    line = next((line.strip() for line in str(detail).splitlines() if line.strip()), "")
    return line if len(line) <= 200 else line[:197] + "..."


def failure_lines(history: Iterable[Any], names: Sequence[str]) -> list[str]:
    """The failure table: count, status and reason, and an example point by name."""
    groups = failure_groups(history)
    if not groups:
        return []
    total = sum(g.count for g in groups)
    lines = ["", f"  failures ({total}), by reason:"]
    for group in groups[:FAILURE_GROUPS]:
        point = ", ".join(f"{n}={v:.6g}" for n, v in zip(names, group.example))
        lines.append(f"  {group.count:>6}  {group.status}: {group.reason}")
        lines.append(f"          e.g. at {point}")
    if len(groups) > FAILURE_GROUPS:
        rest = sum(g.count for g in groups[FAILURE_GROUPS:])
        lines.append(f"  {rest:>6}  in {len(groups) - FAILURE_GROUPS} other groups (see the JSON)")
    return lines


def summary_text(sol: Solution, title: str = "", *, failures: bool = True) -> str:
    """The summary table of ``sol``, under ``title`` when there is one.

    `Solution.summary` (with the uncertainty table of a calibration); with ``failures``, the
    failed evaluations grouped by reason (`failure_lines`).  A solution replayed
    from the journal of a run still going says "running" (its reason says so).
    """
    text = sol.summary()
    if sol.reason.startswith("running,"):
        text = text.replace("stopped: interrupted", "running: so far", 1)
    if failures and sol.failures:  # the failure table goes above the caution, which ends it
        table = "\n".join(["", *failure_lines(sol.history, sol.names)])
        body = text.removesuffix(CAUTION)
        text = body.rstrip() + table + (f"\n\n{CAUTION}" if body != text else "")
    if title:
        text = f"{title}\n{'=' * len(title)}\n{text}"
    return text


def solution_document(
    sol: Solution, *, title: str = "", parameters: Sequence[Parameter] | None = None
) -> dict[str, Any]:
    """The solution as a JSON-ready dictionary, parameters by name.

    ``parameters`` adds each parameter's start and scale.  The uncertainty block is present for a
    calibration (None otherwise); its fields are read by name, so a field the solution lacks is
    simply left out.
    """
    names = list(sol.names)
    by_name = {p.name: p for p in parameters or ()}
    document: dict[str, Any] = {
        "format": FORMAT,
        "title": title,
        "value": _number(sol.value),
        "noise": _number(sol.noise) if sol.noise else None,  # the ± of the value, when noisy
        "point": {name: _number(v) for name, v in zip(names, sol.point)},
        "stop": sol.stop.value,
        "verdict": sol.verdict.value,
        "reason": sol.reason,
        "evaluations": int(sol.evaluations),
        "failed": int(sol.failures),
        "cycles": int(sol.cycles),
        "active": list(sol.active),
        "parameters": {
            name: {
                "unit": sol.units[i],
                "lower": _number(sol.lower[i]),
                "upper": _number(sol.upper[i]),
                **(
                    {"start": by_name[name].start, "scale": by_name[name].scale}
                    if name in by_name
                    else {}
                ),
            }
            for i, name in enumerate(names)
        },
        "curvature": _curvature(sol, by_name),
        "uncertainty": _uncertainty(sol),
        "directions": _matrix(sol.directions),
        "notes": list(sol.notes),
        "failures": failures_document(sol.history, names),
        "caution": CAUTION,
    }
    if sol.spread is not None:  # each point run several times: the noise their scatter shows
        spread = sol.spread
        document["replicates"] = {
            "runs_per_point": spread.replicates, "noise_of_one_run": _number(spread.run),
            "noise_of_the_mean": _number(spread.mean), "points": spread.points,
            "degrees_of_freedom": spread.degrees_of_freedom,
        }
    return document


def failures_document(history: Iterable[Any], names: Sequence[str]) -> list[dict[str, Any]]:
    """The failure groups, JSON-ready: status, reason, count and an example point by name."""
    return [
        {
            "status": g.status,
            "reason": g.reason,
            "count": g.count,
            "example": {n: _number(v) for n, v in zip(names, g.example)},
        }
        for g in failure_groups(history)
    ]


def write_json(
    sol: Solution,
    path: str | Path,
    *,
    title: str = "",
    parameters: Sequence[Parameter] | None = None,
    landscape: Any = None,
) -> Path:
    """Write `solution_document` to ``path`` (folders created); return the path.

    With the `Landscape` of a many-start run, ``minima`` lists every distinct minimum too.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    document = solution_document(sol, title=title, parameters=parameters)
    if landscape is not None:
        document["failed"] = int(landscape.failures)
        document["failures"] = failures_document(landscape.history, list(landscape.names))
        document["minima"] = [
            {"value": _number(m.value), "point": {n: _number(v) for n, v in zip(m.names, m.point)},
             "verdict": m.verdict.value, "starts": int(count)}
            for m, count in zip(landscape.minima, landscape.counts)
        ]
    path.write_text(json.dumps(document, indent=2, allow_nan=False) + "\n", encoding="utf-8")
    return path


def write_summary(sol: Solution, path: str | Path, *, title: str = "") -> Path:
    """Write `summary_text` to ``path`` (folders created); return the path."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(summary_text(sol, title) + "\n", encoding="utf-8")
    return path


def _curvature(sol: Solution, by_name: dict[str, Parameter]) -> dict[str, Any] | None:
    """The Hessian block; its coordinates are the parameters, or their logs when log-scaled."""
    c = sol.curvature
    if c is None:
        return None
    log = {name for name, p in by_name.items() if p.scale == "log"}
    labels = list(getattr(c, "names", ()) or ())
    return {
        "source": c.source,
        "coordinates": labels or [f"log({n})" if n in log else n for n in sol.names],
        "hessian": _matrix(c.hessian),
        "error": None if c.error is None else _matrix(c.error),
        "eigenvalues": [_number(v) for v in np.asarray(c.eigenvalues).ravel()],
        "eigenvectors": _matrix(c.eigenvectors),
        "condition": _number(c.condition),
        "noise": _number(getattr(c, "noise", math.nan)),
        "undetermined": list(getattr(c, "undetermined", ())),
        "breaks": [
            {"along": b.along, "kind": b.kind, "parameters": list(b.parameters),
             "slopes": [_number(v) for v in b.slopes], "change": _number(b.change)}
            for b in getattr(c, "breaks", ())
        ],
    }


def _uncertainty(sol: Solution) -> dict[str, Any] | None:
    u = sol.uncertainty
    if u is None:
        return None
    names = list(sol.names)
    out: dict[str, Any] = {}
    errors = getattr(u, "standard_errors", None)
    if errors is not None:
        out["standard_errors"] = _by_name(names, errors)
    intervals = getattr(u, "intervals", None)
    if intervals is not None:
        rows = np.asarray(intervals, dtype=float).reshape(len(names), 2) if not isinstance(
            intervals, dict
        ) else np.array([intervals[n] for n in names], dtype=float)
        out["intervals"] = {n: [_number(lo), _number(hi)] for n, (lo, hi) in zip(names, rows)}
    correlation = getattr(u, "correlation", None)
    if correlation is not None:
        out["correlation"] = _matrix(correlation)
    covariance = getattr(u, "covariance", None)
    if covariance is not None:
        out["covariance"] = _matrix(covariance)
    for key in ("level", "degrees_of_freedom", "residual_variance", "observations"):
        value = getattr(u, key, None)
        if isinstance(value, int | float | np.integer | np.floating):
            out[key] = _number(value)
    undetermined = getattr(u, "undetermined", None)
    if undetermined is not None:
        out["undetermined"] = list(undetermined)
    rough = getattr(u, "rough", None)
    if rough:
        out["not_smooth"] = list(rough)
    source = getattr(u, "jacobian", "")
    if source:
        out["jacobian"] = source
    fixed = getattr(u, "fixed", ())
    if fixed:
        out["fixed_on_bound"] = list(fixed)
    confounded = getattr(u, "confounded", ())
    if confounded:
        out["not_separable"] = [
            {"parameter": j, "on_bound": b, "error_growth": _number(g)} for j, b, g in confounded
        ]
    return out


def _by_name(names: list[str], values: Any) -> dict[str, float | None]:
    if isinstance(values, dict):
        return {n: _number(values[n]) for n in names}
    return {n: _number(v) for n, v in zip(names, np.asarray(values, dtype=float).ravel())}


def _matrix(a: Any) -> list[list[float | None]]:
    return [[_number(v) for v in row] for row in np.atleast_2d(np.asarray(a, dtype=float))]


def _number(v: Any) -> float | int | None:
    if isinstance(v, bool | np.bool_):
        return bool(v)
    if isinstance(v, int | np.integer):
        return int(v)
    v = float(v)
    return v if math.isfinite(v) else None
