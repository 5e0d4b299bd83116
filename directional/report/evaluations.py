"""Every evaluation of a journal as a CSV table, for a spreadsheet or pandas.

One row per evaluation, in the order they were written (interrupted ones and the failures that a
``resume --retry-failed`` made again included, so nothing is hidden): the search and its sequence
number, the session that made it, one column per parameter (by name), the value (empty when the
evaluation failed), the status, the reason it failed, the purpose, and the start and end time
(UTC, ISO 8601) with the seconds it took.

>>> import pandas                                                  # doctest: +SKIP
>>> table = pandas.read_csv("evaluations.csv", parse_dates=["started", "ended"])  # doctest: +SKIP
"""

from __future__ import annotations

import csv
import datetime
import math
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
    with path.open("w", encoding="utf-8", newline="") as stream:
        writer = csv.writer(stream)
        writer.writerow([*COLUMNS_BEFORE, *names, *COLUMNS_AFTER])
        for evaluation, session in zip(contents.evaluations, sessions):
            value = evaluation.value
            writer.writerow([
                evaluation.search,
                evaluation.sequence,
                session,
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


def _when(seconds: float) -> str:
    return datetime.datetime.fromtimestamp(seconds, tz=datetime.UTC).isoformat()
