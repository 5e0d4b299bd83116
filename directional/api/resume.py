"""Resume a run from its journal: the one table from the kind of run to its entry point.

The journal stores what it needs to continue a run (`run.journal`): the kind of run and the
arguments of its entry point.  The table from kind to entry point lives here, above the journal,
so that the journal never reaches up into the entry points (no import by name at run time, and
nothing a journal stores can choose code other than these three functions).
"""

from __future__ import annotations

import dataclasses
import os
from collections.abc import Callable, Mapping
from typing import Any

from directional.api.calibration import calibrate
from directional.api.explore import explore
from directional.api.minimization import minimize
from directional.errors import JournalError, ProblemError
from directional.run.journal import Target, read

# The run kinds that `resume` can continue.  Each entry point is called as
# ``entry(objective, parameters, journal=path, budget=..., time_limit=..., **arguments)``.
ENTRY_POINTS: dict[str, Callable[..., Any]] = {
    "minimize": minimize,
    "calibrate": calibrate,
    "explore": explore,
}


def entry_point(kind: str, path: object = None) -> Callable[..., Any]:
    """The entry point that runs a run of ``kind`` (a key of `ENTRY_POINTS`).

    Raises
    ------
    JournalError
        When ``kind`` is not one this version knows (the journal at ``path`` names it).
    """
    try:
        return ENTRY_POINTS[kind]
    except KeyError:
        raise JournalError(f"journal {str(path)!r} holds a run of unknown kind {kind!r}") from None


def resume(
    path: str | os.PathLike[str] | Target,
    objective: object,
    *,
    budget: int | None = None,
    time_limit: float | None = None,
    retry_failed: bool = False,
    fingerprint: Mapping[str, Any] | None = None,
    **options: object,
) -> Any:
    """Continue the run kept in the journal at ``path``; return what that run returns.

    The problem (parameters, tolerances, kind of run) is rebuilt from the journal's header, the
    stored evaluations are fed back without calling ``objective`` (each requested point checked
    bit for bit against the stored one), then the run goes on live, writing the same journal.
    The result is the one the uninterrupted run would have given, and no evaluation is repeated.

    >>> import directional as dl                                    # doctest: +SKIP
    >>> sol = dl.resume("runs/culture.sqlite", misfit)              # doctest: +SKIP

    Parameters
    ----------
    objective
        The same objective as the first run.  The journal keeps a fingerprint of the objective
        (`identity.fingerprint`); when it differs, the first stored evaluation and the best are
        made again, and the run goes on (with a note) only if they reproduce their values within
        the noise; otherwise `JournalError` says what changed, and the journal is left untouched.
    budget
        Evaluations allowed in total, the journaled ones included (default: the last budget the
        journal was run with).  Give a larger one to go on after a run stopped on its budget.
    time_limit
        Seconds of wall time for this session.
    retry_failed
        Evaluate again the stored evaluations that failed or timed out, when the search asks for
        their points (after a licence server came back, say); the journal keeps both records.
    fingerprint
        Used instead of the objective's own fingerprint (the command line passes the problem
        file's, which knows the program's files and ``version``).
    options
        Other keyword arguments of the entry point that do not change the search (``progress``,
        ``workers`` for a many-start run).

    Raises
    ------
    JournalError
        When the file is not a journal, is damaged, is in use by another run, or when the run asks
        for a point other than the stored one (another objective's settings or another version).
    ProblemError
        When ``options`` tries to change an argument the journal fixes.
    """
    given = path if isinstance(path, Target) else Target(path)
    path = given.path
    header = read(path).header
    entry = entry_point(header.kind, path)
    arguments = dict(header.identity.get("arguments", {}))
    overlap = sorted(set(arguments) & set(options))
    if overlap:
        raise ProblemError(
            f"{overlap[0]!r} is fixed by the journal ({arguments[overlap[0]]!r}) and cannot be changed "
            "on resume"
        )
    target = dataclasses.replace(
        given,
        info=dict(header.info),
        objective=given.objective if fingerprint is None else fingerprint,
        retry=given.retry or bool(retry_failed),
    )
    return entry(
        objective,
        header.parameters,
        journal=target,
        budget=header.budget if budget is None else budget,
        time_limit=time_limit,
        **arguments,
        **options,
    )

