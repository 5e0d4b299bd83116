"""Reports of a solution for people and programs: the text summary and the JSON document.

The JSON keeps every number at full precision (Python's shortest repr of a double) and uses the
parameter names as keys; an infinite bound or a value that is not finite is written as ``null``,
since JSON has no infinity.  Plots are in `directional.report.plots`.
"""

from __future__ import annotations

import json
import math
from collections.abc import Sequence
from pathlib import Path
from typing import Any

import numpy as np

from directional.parameters import Parameter
from directional.solution import CAUTION, Solution

FORMAT = "directional-solution/1"


def summary_text(sol: Solution, title: str = "") -> str:
    """The summary table of ``sol`` (`Solution.summary`, with the uncertainty table of a
    calibration), under ``title`` when there is one."""
    text = sol.summary()
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
        "caution": CAUTION,
    }
    return document


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
