"""Running a `Problem`: one search, a calibration or many starts, with journal and progress bar.

This is what ``directional run``, ``resume``, ``show`` and ``demo`` share.  A run keeps its
journal as a `journal.Target` whose header notes the problem file, so that ``directional resume
JOURNAL`` can rebuild the objective from the journal alone.

``show`` must not evaluate anything.  It replays a *copy* of the journal (SQLite's backup, so a
journal being written is read consistently) with a budget of exactly the stored evaluations and an
objective that refuses to run: the search takes every value from the journal and stops where the
journal ends, which gives the solution as the run had it at that moment.  A calibration replays
the same way: the journal keeps each evaluation's residual vector beside its value, so its
least-squares steps, its check and its uncertainty table are rebuilt from the journal without a
call of the objective.  Only a calibration that stopped before its end (interrupted, killed, or
still running), or one whose journal was written before the vectors were kept, is shown as its
best stored point (`_as_stored`): it replays under the budget it ran with, whose split between
its stages decides which points it asks for, so the replay runs past the journal's end, where
the objective refuses.
"""

from __future__ import annotations

import concurrent.futures as cf
import contextlib
import dataclasses
import io
import os
import sqlite3
import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

from directional.api.explore import explore
from directional.api.resume import ENTRY_POINTS
from directional.api.resume import resume as resumed
from directional.errors import JournalError, ObjectiveError, ProblemError
from directional.interface.problemfile import Problem
from directional.records import Stop, Verdict
from directional.run import journal as journals
from directional.run.identity import canonical, describe_place, difference
from directional.run.lockfile import holder
from directional.run.progress import Progress
from directional.solution import Solution

PROBLEM_KEY = "problem"  # header note: the absolute path of the problem file
WORKERS_KEY = "workers"  # header note: the processes of a many-start run, used again on resume


def run_kind(problem: Problem) -> str:
    """The kind of run ``problem`` asks for: "explore", "calibrate" or "minimize".

    Raises
    ------
    ProblemError
        For many starts of a residuals objective, which no entry point runs.
    """
    if problem.search.starts > 1:
        if problem.objective.kind == "residuals":
            raise ProblemError(
                f"{problem.where('search.starts')}: many starts of a residuals objective are not "
                "supported; use kind = \"value\" with the sum of squares, or starts = 1"
            )
        return "explore"
    return "calibrate" if problem.objective.kind == "residuals" else "minimize"


def best(result: Any) -> Solution:
    """The solution of a run: itself, or the best minimum of a many-start `Landscape`.

    Raises
    ------
    ObjectiveError
        When no search of a many-start run got past its start.
    """
    if isinstance(result, Solution):
        return result
    if not result.minima:
        raise ObjectiveError("no search got past its start: there is no minimum")
    return result.minima[0]


def solve(
    problem: Problem,
    *,
    journal: Path | None | bool = True,
    budget: int | None = None,
    quiet: bool = False,
    objective: Callable[[np.ndarray], Any] | None = None,
    executor: Any = None,
) -> Any:
    """Run ``problem``; return its `Solution`, or the `Landscape` of a many-start run.

    ``executor`` (a many-start run only) evaluates the starts' points, e.g. on a Dask cluster.
    One search with ``search.workers`` above 1 evaluates the points of each batch in parallel
    (`batch_executor`); its journal is the same as a serial run's, in the same order.

    ``journal=True`` uses the problem's own journal path (if any), a path overrides it, None or
    False keeps none.  ``budget`` overrides the problem's.  The progress bar goes to standard
    error when it is a terminal and ``quiet`` is false.

    Raises
    ------
    ProblemError, ObjectiveError, JournalError
        As the library function that runs the problem.
    """
    run = ENTRY_POINTS[run_kind(problem)]
    spec = problem.search
    objective = problem.make_objective() if objective is None else objective
    path = problem.journal if journal is True else (journal or None)
    budget = spec.budget if budget is None else budget
    options: dict[str, Any] = {
        "point_tolerance": spec.point_tolerance,
        "value_tolerance": spec.value_tolerance,
        "time_limit": spec.time_limit,
        "check": spec.check,
    }
    if spec.noise is not None:
        options["noise"] = spec.noise
    if spec.replicates != 1:
        options["replicates"] = spec.replicates
    if problem.objective.sigma is not None:
        options["sigma"] = problem.objective.sigma
    if path is not None:
        options["journal"] = journals.Target(
            path,
            {PROBLEM_KEY: str(problem.source or ""), WORKERS_KEY: spec.workers},
            objective=problem.fingerprint(),
            refresh=problem.fingerprint,
        )
    many = problem.search.starts > 1
    if many:
        options.update(starts=spec.starts, seed=spec.seed, budget=budget)
        if executor is not None:
            options["executor"] = executor
        if spec.workers > 1:
            options["workers"] = spec.workers
        if spec.workers > 1 or executor is not None:  # no bar: the pool's own output is enough
            return run(objective, list(problem.parameters), **options)
        from directional.api.explore import exploration

        with Progress(budget=None, enabled=False if quiet else None,
                      replicates=spec.replicates) as bar:
            return exploration(objective, list(problem.parameters), observers=(bar,), **options)
    options["budget"] = budget
    executor = batch_executor(problem, spec.workers)
    if executor is not None:
        options["executor"] = executor
    try:
        return run(objective, list(problem.parameters), progress=not quiet, **options)
    finally:
        if executor is not None:
            executor.shutdown(wait=True, cancel_futures=True)


def batch_executor(problem: Problem, workers: int) -> Any:
    """The executor that evaluates one search's batches on ``workers``, or None for one.

    A program runs on threads of this process (each evaluation is a process of its own, so
    they run in parallel; a residual vector comes back in memory); a Python function of kind
    ``"value"`` on a process pool, one of kind ``"residuals"`` on threads (faster only where it
    releases the GIL: numpy, a wrapped compiled model).  Results are delivered in submission
    order (`directional.run.ordered.InOrder`), so the journal is that of a serial run.

    Raises
    ------
    ProblemError
        For a program that reads its answer from a file in one shared folder: parallel runs
        would overwrite each other's file (use ``fresh_folder = true``).
    """
    if workers <= 1:
        return None
    from directional.interface.reading import parse
    from directional.run.ordered import InOrder

    spec = problem.objective
    if spec.command is not None:
        if not spec.fresh_folder and parse(spec.read, vector=spec.kind == "residuals").file:
            raise ProblemError(
                f"{problem.where('objective.read')}: with {workers} workers the runs would share "
                f"one folder and overwrite each other's {spec.read!r}: set fresh_folder = true"
            )
        inner: cf.Executor = cf.ThreadPoolExecutor(workers, thread_name_prefix="directional")
    elif spec.kind == "residuals":
        inner = cf.ThreadPoolExecutor(workers, thread_name_prefix="directional")
    else:
        from directional.run.workers import process_pool

        inner = process_pool(workers)  # the workers end with this process (`run.workers`)
    return InOrder(inner, workers=workers)


def problem_of_journal(path: str | os.PathLike[str], problem_file: str | Path | None = None) -> Problem:
    """The problem a journal was written for: ``problem_file``, else the file its header notes.

    Raises
    ------
    JournalError
        When the journal cannot be read.
    ProblemError
        When the header notes no problem file (give one) or the file cannot be read.
    """
    contents = journals.read(path)
    if problem_file is None:
        noted = contents.header.info.get(PROBLEM_KEY, "")
        if not noted:
            raise ProblemError(
                f"journal {str(path)!r} does not say which problem file it belongs to: "
                "give it with --problem FILE"
            )
        problem_file = noted
    return Problem.from_file(problem_file)


def resume(
    path: str | os.PathLike[str],
    problem: Problem,
    *,
    budget: int | None = None,
    quiet: bool = False,
    retry_failed: bool = False,
) -> Any:
    """Continue the run in the journal at ``path`` with ``problem``'s objective.

    The problem must be the one the journal was written for (`check_problem`), and its objective
    the same or one that reproduces the stored values (`journal.Journal.open`); a refused resume
    leaves the journal as it was.  ``retry_failed`` evaluates the stored failures again.

    Raises
    ------
    JournalError
        When the journal is not one, is damaged, in use, belongs to another problem, or the run
        asks for other points.
    ProblemError, ObjectiveError
        As the library function that runs the problem.
    """
    contents = journals.read(path)
    header = contents.header
    check_problem(path, problem, header)
    objective = problem.make_objective()
    options: dict[str, Any] = {"fingerprint": problem.fingerprint(), "retry_failed": retry_failed}
    if header.kind != "explore":
        return resumed(path, objective, budget=budget, progress=not quiet, **options)
    workers = header.info.get(WORKERS_KEY, 1)
    if isinstance(workers, int) and workers > 1:
        return resumed(path, objective, budget=budget, workers=workers, **options)
    from directional.api.explore import exploration  # as `api.resume.resume` would, with a bar

    arguments = dict(header.identity.get("arguments", {}))
    target = journals.Target(
        path, dict(header.info), objective=problem.fingerprint(), retry=bool(retry_failed),
        refresh=problem.fingerprint,
    )
    replicates = arguments.get("replicates", 1)
    with Progress(budget=None, enabled=False if quiet else None, replicates=replicates) as bar:
        return exploration(
            objective, header.parameters, journal=target,
            budget=header.budget if budget is None else budget, observers=(bar,), **arguments,
        )


_KINDS = {"minimize": "value", "explore": "value", "calibrate": "residuals"}


def check_problem(path: str | os.PathLike[str], problem: Problem, header: journals.Header) -> None:
    """Refuse a problem other than the one the journal at ``path`` was written for.

    The parameters (names, starts, bounds, scales, units), the kind of objective and the search
    settings the problem file sets must agree with the journal's; the number of starts may
    differ (``run --starts`` overrides the file, the journal keeps what was run).

    Raises
    ------
    JournalError
        Naming the first difference, before anything is evaluated or written.
    """
    where = problem.source or "the problem"
    mine = journals.run_identity("", problem.parameters)["parameters"]
    found = difference(header.identity.get("parameters", []), mine, "parameters")
    if found is None and _KINDS.get(header.kind, problem.objective.kind) != problem.objective.kind:
        found = ("objective.kind", _KINDS[header.kind], problem.objective.kind)
    spec = problem.search
    arguments = header.identity.get("arguments", {})
    for key, value in (("point_tolerance", spec.point_tolerance),
                       ("value_tolerance", spec.value_tolerance), ("check", spec.check),
                       ("noise", spec.noise), ("seed", spec.seed),
                       ("replicates", spec.replicates)):
        if found is None and key in arguments and canonical(arguments[key]) != canonical(value):
            found = (f"search.{key}", arguments[key], value)
    if found is not None:
        place, old, new = found
        raise JournalError(
            f"journal {str(path)!r} was not written for {str(where)!r}: "
            f"{describe_place(place, header.identity)} is {old!r} in the journal but {new!r} in "
            "the problem file; give the problem file the journal was written for (--problem FILE)"
        )


def replay(path: str | os.PathLike[str]) -> tuple[Any, journals.Contents]:
    """The result held in the journal at ``path``, evaluating nothing (see the module docstring).

    A `Solution`, or the `Landscape` of a many-start run (replayed with a total budget of the
    stored evaluations).

    Raises
    ------
    JournalError
        When the journal cannot be read or does not replay.
    """
    contents = journals.read(path)
    stored = len(contents.stored)
    if stored == 0:
        raise ObjectiveError(f"journal {str(path)!r} holds no evaluation yet")
    with tempfile.TemporaryDirectory(prefix="directional-show-") as folder:
        copy = Path(folder) / "journal.sqlite"
        journals.snapshot(Path(path), copy)
        target = journals.Target(copy, verify=False)
        with contextlib.redirect_stderr(io.StringIO()):
            if contents.header.kind == "explore":
                arguments = dict(contents.header.identity.get("arguments", {}))
                result = explore(_refuse, contents.header.parameters, journal=target,
                                 budget=contents.header.budget, total_budget=stored, **arguments)
            else:
                # A calibration replays under the budget it ran with (its check and Jacobian come
                # after the search), from the residual vectors its journal keeps; other runs
                # replay up to their last stored evaluation.
                calibration = contents.header.kind == "calibrate"
                budget = contents.header.budget if calibration and contents.header.budget else stored
                try:
                    result = resumed(target, _refuse, budget=max(budget, stored))
                except _Refused:  # a calibration that stopped early asks past the journal's end
                    result = _as_stored(contents, vectors=_keeps_vectors(copy))
    if isinstance(result, Solution):
        result = _ended(result, contents, holder(Path(path)), stored)
    return result, contents


def _ended(
    sol: Solution, contents: journals.Contents, running: int | None = None, stored: int = 0
) -> Solution:
    """A replay stopped by its budget where the run itself did not: say where the journal ends.

    ``running`` is the process id of a run still writing the journal (`lockfile.holder`).
    """
    last = contents.sessions[-1] if contents.sessions else {}
    if running is not None:
        return dataclasses.replace(
            sol,
            stop=Stop.INTERRUPTED,
            reason=f"running, {stored} evaluations so far (process {running}); this is where the "
            "run stands now",
        )
    if sol.stop is Stop.BUDGET and last.get("stop") != "budget":
        how = last.get("stop") or "still running, or killed"
        sol = dataclasses.replace(
            sol,
            stop=Stop.INTERRUPTED,
            reason=f"the journal ends here (last run: {how}); continue with directional resume",
        )
    return sol


class _Refused(ObjectiveError):
    """The replay asked the objective itself for something the journal does not hold."""


def _refuse(x: np.ndarray) -> float:
    # The budget ends the replay before any evaluation, and a finished calibration takes its
    # residual vectors from the journal; only one that stopped early asks for a new point.
    raise _Refused("show evaluates nothing")


def _keeps_vectors(path: Path) -> bool:
    """Whether the journal at ``path`` holds residual vectors (one written before they were kept
    does not)."""
    try:
        with contextlib.closing(sqlite3.connect(path)) as connection:
            row = connection.execute(
                "SELECT 1 FROM evaluation WHERE residuals IS NOT NULL LIMIT 1"
            ).fetchone()
    except sqlite3.Error:  # no such column: written before the vectors were kept
        return False
    return row is not None


def _as_stored(contents: journals.Contents, *, vectors: bool = True) -> Solution:
    """The run as its journal holds it, without replaying the search: the best stored point.

    For a journal whose replay would need evaluations (a calibration that stopped before its
    end, or one written before the journal kept residual vectors, ``vectors`` false): the best
    value and point, every evaluation, the stop of the last session; no verdict, no uncertainty,
    and a reason that says so.
    """
    parameters = contents.header.parameters
    history = tuple(e for e in contents.evaluations if e.status != journals.INTERRUPTED)
    done = [e for e in history if e.status == "ok"]
    if not done:
        raise ObjectiveError("every evaluation in the journal failed: there is no best point")
    best = min(done, key=lambda e: e.value)
    last = contents.sessions[-1] if contents.sessions else {}
    stops = {stop.value: stop for stop in Stop}
    return Solution(
        point=np.array(best.point, dtype=float), value=float(best.value),
        evaluations=len(history), cycles=0,
        stop=stops.get(str(last.get("stop")), Stop.INTERRUPTED), verdict=Verdict.UNCHECKED,
        active=(), curvature=None, uncertainty=None, directions=np.eye(len(parameters)),
        names=tuple(p.name for p in parameters), units=tuple(p.unit for p in parameters),
        lower=np.array([p.lower for p in parameters], dtype=float),
        upper=np.array([p.upper for p in parameters], dtype=float),
        reason="the best point the journal holds; the calibration stopped before its check, so "
        "no verdict and no uncertainty are shown: directional resume finishes the run (no "
        "stored evaluation is repeated)" if vectors else
        "the best point the journal holds; its least-squares steps cannot be replayed without "
        "evaluating (this journal was written before residual vectors were kept), so no verdict "
        "and no uncertainty are shown: directional resume recomputes them",
        history=history,
    )


