"""One run's session: the journal, the driver and its observers; and the `Solution` from its log.

Every entry point runs the same way: open the journal named by the caller (resumed when it
holds this run already), make the one `run.driver.Driver` with the journal and the progress bar
as its observers and the journal's evaluations as its replay, drive the run's generator tree,
note how the run ended, close everything whatever happened.
"""

from __future__ import annotations

import contextlib
import dataclasses
import math
from collections.abc import Callable, Iterator, Sequence
from typing import Any

import numpy as np

from directional.api.options import Options
from directional.errors import ObjectiveError
from directional.method.replicates import pooled
from directional.method.space import Space
from directional.records import Outcome, Status, Stop, Verdict
from directional.run.driver import Driver, Evaluation, Log, Objective, Observer
from directional.run.journal import journal_for
from directional.run.progress import Progress
from directional.solution import Solution


@contextlib.contextmanager
def session(
    objective: Objective,
    options: Options,
    journal: object,
    *,
    executor: object = None,
    workers: int | None = None,
    progress: bool = False,
    bar_total: int | None = -1,
    observers: Sequence[Observer] = (),
    combine: Callable[[np.ndarray, list[float]], float] | None = None,
) -> Iterator[tuple[Driver, Any]]:
    """The driver of a run and its open journal (or a stand-in that keeps nothing).

    ``progress`` shows a bar on standard error when it is a terminal, of ``bar_total``
    evaluations (default the budget; None: no total); ``observers`` are told of each evaluation
    too; ``combine`` makes a point's value from its replicates (`run.driver.Driver`).  The
    caller's ``executor`` is left running.

    Raises
    ------
    JournalError
        As `run.journal.journal_for`.
    """
    with journal_for(
        journal, options.identity, budget=options.budget, objective=objective
    ) as book:
        hooks = book.hooks()
        stored = tuple(hooks.get("stored", ()))
        total = options.budget if bar_total == -1 else bar_total
        bar = (
            Progress(budget=total, enabled=None, done=len(stored), replicates=options.replicates)
            if progress else None
        )
        with contextlib.ExitStack() as stack:
            if bar is not None:
                stack.callback(bar.close)
            driver = stack.enter_context(
                Driver(
                    objective=objective,
                    budget=options.budget,
                    total=options.total_budget,
                    time_limit=options.time_limit,
                    executor=executor,  # type: ignore[arg-type]
                    workers=workers,
                    observers=(*hooks.get("observers", ()), *observers, *((bar,) if bar else ())),
                    stored=stored,
                    retry=bool(hooks.get("retry", False)),
                    replicates=options.replicates,
                    combine=combine,
                )
            )
            yield driver, book


def solution(
    space: Space, log: Log, outcome: Outcome, point_tolerance: float, *, noise: float | None = None
) -> Solution:
    """The `Solution` of one search from the driver's log and the search's outcome (unchecked);
    ``noise`` is the level the search worked above (`Solution.noise`).

    Raises
    ------
    KeyboardInterrupt
        When Ctrl-C came before anything was computed (before any point had all its replicates).
    ObjectiveError
        When nothing was evaluated, the start failed, or every evaluation failed.
    """
    if not log.evaluations:
        if outcome.stop is Stop.INTERRUPTED:  # Ctrl-C before anything was computed
            raise KeyboardInterrupt(outcome.reason)
        raise ObjectiveError(f"no evaluation was made: {outcome.reason or outcome.stop.value}")
    first = log.evaluations[0]
    if first.status != Status.OK and outcome.cycles == 0 and outcome.stop is Stop.STALLED:
        raise ObjectiveError(
            f"the objective failed at the start point {first.point.tolist()!r}: "
            f"{first.detail or first.status}"
        )
    best = log.best
    if best is None and outcome.stop is Stop.INTERRUPTED and any(
        e.status == Status.OK for e in log.evaluations
    ):  # replicates: some runs made, no point's runs all in
        raise KeyboardInterrupt(outcome.reason)
    if best is None:
        raise ObjectiveError(
            f"every evaluation failed ({len(log.evaluations)}); last error: "
            f"{log.evaluations[-1].detail}"
        )
    return Solution(
        point=best.point.copy(),
        value=best.value,
        evaluations=len(log.evaluations),
        cycles=outcome.cycles,
        stop=outcome.stop,
        verdict=Verdict.UNCHECKED,
        active=active(space, best.point, point_tolerance),
        curvature=None,  # the check's record, or the free estimate, comes with the verdict
        uncertainty=None,
        directions=search_directions(space, outcome.directions),
        names=space.names,
        units=tuple(p.unit for p in space.parameters),
        lower=space.lower.copy(),
        upper=space.upper.copy(),
        reason=_with_last_error(outcome, log.evaluations),
        history=tuple(log.evaluations),
        noise=noise,
    )


def _with_last_error(outcome: Outcome, evaluations: list[Evaluation]) -> str:
    """The search's reason for stopping, with the last failure's text when it stalled on failures."""
    if outcome.stop is not Stop.STALLED or "last error" in outcome.reason:
        return outcome.reason
    failed = [e for e in evaluations if e.status != Status.OK]
    if failed:
        return f"{outcome.reason}; last error: {failed[-1].detail or failed[-1].status}"
    return outcome.reason


def active(space: Space, point: np.ndarray, point_tolerance: float) -> tuple[str, ...]:
    """Names of the parameters on a bound at ``point`` (within 10 point tolerances, scaled)."""
    flags = space.on_bound(point, 10.0 * point_tolerance)
    return tuple(name for name, flag in zip(space.names, flags) if flag)


def search_directions(space: Space, directions: np.ndarray) -> np.ndarray:
    """Unit directions from scaled to search coordinates, one per row."""
    rows = directions * space.scale
    return rows / np.linalg.norm(rows, axis=1, keepdims=True)


def with_replicates(sol: Solution, evaluations: Sequence[Evaluation], replicates: int) -> Solution:
    """``sol`` with the noise read off its replicates (`Solution.spread`) and a note on failures.

    Every point was run ``replicates`` times; the runs are grouped by point (bit for bit).  The
    note counts the points whose mean lacks some runs (they failed): their value is the mean of
    the others (`method.replicates.combined`).
    """
    if replicates < 2:
        return sol
    groups = runs_by_point(evaluations)
    spread = pooled(groups.values(), replicates)
    short = sum(1 for values in groups.values() if 0 < sum(map(math.isfinite, values)) < len(values))
    notes = sol.notes
    if short:
        notes += (
            f"{short} point{'s' if short > 1 else ''} had failed replicates: the value of such a "
            "point is the mean of its replicates that succeeded",
        )
    return dataclasses.replace(sol, spread=spread, notes=notes)


def runs_by_point(evaluations: Sequence[Evaluation]) -> dict[bytes, list[float]]:
    """The values of the evaluations grouped by point (bit for bit); failures as ``inf``."""
    groups: dict[bytes, list[float]] = {}
    for evaluation in evaluations:
        groups.setdefault(evaluation.point.tobytes(), []).append(
            evaluation.value if evaluation.status == Status.OK else math.inf
        )
    return groups
