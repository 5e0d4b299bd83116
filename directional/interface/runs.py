"""Running a `Problem`: one search, a calibration or many starts, with journal and progress bar.

This is what ``directional run``, ``resume``, ``show`` and ``demo`` share.  A run keeps its
journal as a `journal.Target` whose header notes the problem file, so that ``directional resume
JOURNAL`` can rebuild the objective from the journal alone.

``show`` must not evaluate anything.  It replays a *copy* of the journal (SQLite's backup, so a
journal being written is read consistently) with a budget of exactly the stored evaluations and an
objective that refuses to run: the search takes every value from the journal and stops where the
journal ends, which gives the solution as the run had it at that moment.
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
from directional.errors import ObjectiveError, ProblemError
from directional.interface.problemfile import Problem
from directional.records import Stop
from directional.run import journal as journals
from directional.run.progress import Progress
from directional.solution import Solution

PROBLEM_KEY = "problem"  # header note: the absolute path of the problem file


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
    if path is not None:
        options["journal"] = journals.Target(path, {PROBLEM_KEY: str(problem.source or "")})
    many = problem.search.starts > 1
    if many:
        options.update(starts=spec.starts, seed=spec.seed)
        if executor is not None:
            options["executor"] = executor
        if spec.workers > 1:
            options["workers"] = spec.workers
        options["budget"] = budget
        bounds = list(problem.parameters)
        bar_total = None
    else:
        options["budget"] = budget
        bar_total = budget or 1000 * (len(problem.parameters) + 1)
        executor = batch_executor(problem, spec.workers)
        if executor is not None:
            options["executor"] = executor
    wrapped = objective
    bar = None
    in_process = not isinstance(getattr(executor, "_inner", None), cf.ProcessPoolExecutor)
    if not (many and (spec.workers > 1 or executor is not None)) and in_process:
        bar = Progress(objective, budget=bar_total, kind=problem.objective.kind,
                       enabled=False if quiet else None)
        wrapped = bar
    try:
        if many:
            return run(wrapped, bounds, **options)
        return run(wrapped, list(problem.parameters), **options)
    finally:
        if bar is not None:
            bar.close()
        if not many and executor is not None:
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
        inner = cf.ProcessPoolExecutor(workers)
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
) -> Solution:
    """Continue the run in the journal at ``path`` with ``problem``'s objective.

    Raises
    ------
    JournalError
        When the journal is not one, is damaged, in use, or the run asks for other points.
    ProblemError, ObjectiveError
        As the library function that runs the problem.
    """
    contents = journals.read(path)
    done = sum(1 for e in contents.evaluations if e.status != journals.INTERRUPTED)
    objective = problem.make_objective()
    total = budget or contents.header.budget
    bar = Progress(objective, budget=total, kind=problem.objective.kind,
                   enabled=False if quiet else None, done=done)
    try:
        return resumed(path, bar, budget=budget)
    finally:
        bar.close()


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
    stored = sum(1 for e in contents.evaluations if e.status != journals.INTERRUPTED)
    if stored == 0:
        raise ObjectiveError(f"journal {str(path)!r} holds no evaluation yet")
    with tempfile.TemporaryDirectory(prefix="directional-show-") as folder:
        copy = Path(folder) / "journal.sqlite"
        _copy_database(Path(path), copy)
        with contextlib.redirect_stderr(io.StringIO()):
            if contents.header.kind == "explore":
                arguments = dict(contents.header.identity.get("arguments", {}))
                result = explore(_refuse, contents.header.parameters, journal=copy,
                                 budget=contents.header.budget, total_budget=stored, **arguments)
            else:
                result = resumed(copy, _refuse, budget=stored)
    if isinstance(result, Solution):
        result = _ended(result, contents)
    return result, contents


def _ended(sol: Solution, contents: journals.Contents) -> Solution:
    """A replay stopped by its budget where the run itself did not: say where the journal ends."""
    last = contents.sessions[-1] if contents.sessions else {}
    if sol.stop is Stop.BUDGET and last.get("stop") != "budget":
        how = last.get("stop") or "still running, or killed"
        sol = dataclasses.replace(
            sol,
            stop=Stop.INTERRUPTED,
            reason=f"the journal ends here (last run: {how}); continue with directional resume",
        )
    return sol


def _refuse(x: np.ndarray) -> float:
    raise ObjectiveError("show evaluates nothing")  # never called: the budget ends first


def _copy_database(source: Path, target: Path) -> None:
    uri = source.resolve().as_uri() + "?mode=ro"
    with contextlib.closing(sqlite3.connect(uri, uri=True)) as src, contextlib.closing(
        sqlite3.connect(target)
    ) as dst:
        src.backup(dst)
