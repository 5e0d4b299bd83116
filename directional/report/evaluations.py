"""Every evaluation of a journal as a CSV table, for a spreadsheet or pandas.

One row per evaluation, in the order they were written (interrupted ones and the failures that a
``resume --retry-failed`` made again included, so nothing is hidden): the search and its sequence
number, the session that made it, one column per parameter (by name), the value (empty when the
evaluation failed), the status, the reason it failed, the purpose, and the start and end time
(UTC, ISO 8601) with the seconds it took.  A run made with replicates (each point run k times)
has a ``replicate`` column after ``session``: 0, 1, ... for the runs of one point in the order
they were written (an interrupted run has the number of the run made again in its place).

>>> import pandas                                                  # doctest: +SKIP
>>> table = pandas.read_csv("evaluations.csv", parse_dates=["started", "ended"])  # doctest: +SKIP
"""

from __future__ import annotations

import csv
import datetime
import math
from collections.abc import Sequence
from pathlib import Path
from typing import Any

COLUMNS_BEFORE = ("search", "sequence", "session")
COLUMNS_AFTER = ("value", "status", "reason", "purpose", "started", "ended", "seconds")


def write_csv(contents: Any, path: str | Path) -> Path:
    """Write the evaluations of a journal's `Contents` to ``path`` (folders made); return it.

    Numbers are written with Python's shortest exact repr, so they read back to the same double.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    names = [p.name for p in contents.header.parameters]
    sessions = contents.made_by or (0,) * len(contents.evaluations)
    replicated = contents.header.identity.get("arguments", {}).get("replicates", 1) != 1
    numbers = replicate_numbers(contents.evaluations) if replicated else None
    with path.open("w", encoding="utf-8", newline="") as stream:
        writer = csv.writer(stream)
        writer.writerow([*COLUMNS_BEFORE, *(["replicate"] if numbers else []), *names,
                         *COLUMNS_AFTER])
        for i, (evaluation, session) in enumerate(zip(contents.evaluations, sessions)):
            value = evaluation.value
            writer.writerow([
                evaluation.search,
                evaluation.sequence,
                session,
                *([numbers[i]] if numbers else []),
                *(repr(float(v)) for v in evaluation.point),
                repr(value) if math.isfinite(value) else "",
                evaluation.status,
                evaluation.detail,
                evaluation.purpose,
                _when(evaluation.started),
                _when(evaluation.started + evaluation.seconds),
                repr(evaluation.seconds),
            ])
    return path


def replicate_numbers(evaluations: Sequence[Any]) -> list[int]:
    """Each evaluation's place among the runs of its point, in the order written (0, 1, ...).

    An interrupted run takes the number of the run that is made again in its place.

    >>> import numpy as np
    >>> from types import SimpleNamespace as E
    >>> rows = [E(point=np.array([p]), status=s) for p, s in [(0., "ok"), (1., "ok"), (0., "ok")]]
    >>> replicate_numbers(rows)
    [0, 0, 1]
    """
    made: dict[bytes, int] = {}
    numbers = []
    for evaluation in evaluations:
        key = evaluation.point.tobytes()
        numbers.append(made.get(key, 0))
        if evaluation.status != "interrupted":
            made[key] = made.get(key, 0) + 1
    return numbers


def _when(seconds: float) -> str:
    return datetime.datetime.fromtimestamp(seconds, tz=datetime.UTC).isoformat()
