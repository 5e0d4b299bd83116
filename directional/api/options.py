"""The options of a run, validated once: what `minimize`, `calibrate` and `explore` were asked.

Each entry point turns its public arguments into one frozen `Options` record before anything is
evaluated, and passes only that record on: to the generator tree of the run, to the driver's
session and to the journal, whose identity (`Options.identity`) it carries.  A bad argument is
a `ProblemError` that names it, in the order the arguments are listed.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from directional.errors import ProblemError
from directional.method.curvature import check_kind, escape_count
from directional.method.noise import noise_option
from directional.method.replicates import replicate_count
from directional.method.search import Settings
from directional.method.space import Space, build_space
from directional.records import Check
from directional.run.identity import Deferred, run_identity


@dataclass(frozen=True, slots=True, kw_only=True)
class Options:
    """One run's validated options, the search settings, and its identity for the journal.

    ``kind`` names the entry point ("minimize", "calibrate", "explore"); ``budget`` caps the
    evaluations of each search (its check included), ``total_budget`` those of a many-start
    run; ``check`` is None when no paid check is made.  ``sigma`` (calibrate) divides the
    residuals; ``starts`` (explore) are the start points in scaled coordinates, and
    ``same_point``, ``same_value`` decide when two end points are one minimum.  ``replicates``
    is how many times each point is run (the search sees their mean); the budgets count runs.
    """

    kind: str
    space: Space
    settings: Settings
    budget: int
    time_limit: float | None = None
    check: Check | None = Check.ESCALATING
    escapes: int = 3
    noise: float | str | None = None
    identity: Mapping[str, Any] = field(default_factory=dict)
    sigma: np.ndarray | None = None
    starts: np.ndarray | None = None
    total_budget: int | None = None
    same_point: float = 0.0
    same_value: float = 0.0
    replicates: int = 1


def default_budget(n: int) -> int:
    """Evaluations allowed when the caller sets no budget: 1000 (n + 1)."""
    return 1000 * (n + 1)


def minimize_options(
    objective: object,
    start: object,
    bounds: object = None,
    names: Sequence[str] | None = None,
    budget: int | None = None,
    *,
    point_tolerance: float = 1e-6,
    value_tolerance: float = 1e-10,
    time_limit: float | None = None,
    check: bool | str = True,
    escapes: int = 3,
    noise: float | str | None = None,
    replicates: int = 1,
) -> Options:
    """The options of `directional.minimize`, validated before any evaluation.

    Raises
    ------
    ProblemError
        Naming the first bad argument.
    """
    return _single(
        "minimize", "objective", objective, start, bounds, names, budget,
        point_tolerance=point_tolerance, value_tolerance=value_tolerance, time_limit=time_limit,
        check=check, escapes=escapes, noise=noise, replicates=replicates,
    )


def calibrate_options(
    residuals: object,
    start: object,
    bounds: object = None,
    names: Sequence[str] | None = None,
    budget: int | None = None,
    *,
    sigma: object = None,
    point_tolerance: float = 1e-6,
    value_tolerance: float = 1e-10,
    time_limit: float | None = None,
    check: bool | str = True,
    escapes: int = 3,
    noise: float | str | None = None,
    replicates: int = 1,
) -> Options:
    """The options of `directional.calibrate`, validated before any evaluation.

    Raises
    ------
    ProblemError
        Naming the first bad argument (``sigma`` after the others).
    """
    return _single(
        "calibrate", "residuals", residuals, start, bounds, names, budget,
        point_tolerance=point_tolerance, value_tolerance=value_tolerance, time_limit=time_limit,
        check=check, escapes=escapes, noise=noise, sigma=sigma, replicates=replicates,
    )


def _single(
    kind: str,
    role: str,
    function: object,
    start: object,
    bounds: object,
    names: Sequence[str] | None,
    budget: int | None,
    **arguments: Any,
) -> Options:
    if not callable(function):
        raise ProblemError(f"{role} must be callable, got {function!r}")
    space = build_space(start, bounds, names)
    settings = search_settings(arguments["point_tolerance"], arguments["value_tolerance"])
    replicates = replicate_count(arguments["replicates"])
    allowed = budget_option(budget, space.size, replicates=replicates)
    time_limit = time_limit_option(arguments["time_limit"])
    check = check_kind(arguments["check"])
    escapes = escape_count(arguments["escapes"])
    noise = noise_option(arguments["noise"])
    extra: dict[str, Any] = replicate_identity(replicates)
    sigma = None
    if "sigma" in arguments:  # calibrate's
        sigma = sigma_option(arguments["sigma"])
        extra["sigma"] = None if sigma is None else sigma.tolist()
    identity = Deferred(functools.partial(
        run_identity, kind, space.parameters, settings,
        point_tolerance=arguments["point_tolerance"], value_tolerance=arguments["value_tolerance"],
        check=arguments["check"], escapes=escapes, noise=noise, **extra,
    ))  # made only if a journal reads it
    return Options(
        kind=kind, space=space, settings=settings, budget=allowed, time_limit=time_limit,
        check=check, escapes=escapes, noise=noise, identity=identity, sigma=sigma,
        replicates=replicates,
    )


# ----------------------------------------------------------------------------- one argument each


def search_settings(point_tolerance: object, value_tolerance: object) -> Settings:
    """The search's settings from the two tolerances.

    Raises
    ------
    ProblemError
        Unless both are positive finite numbers.
    """
    for key, value in (("point_tolerance", point_tolerance), ("value_tolerance", value_tolerance)):
        if isinstance(value, bool) or not isinstance(value, int | float) or not value > 0:
            raise ProblemError(f"{key} must be a positive number, got {value!r}")
        if not math.isfinite(value):
            raise ProblemError(f"{key} must be finite, got {value!r}")
    return Settings(
        point_tolerance=float(point_tolerance),  # type: ignore[arg-type]
        value_tolerance=float(value_tolerance),  # type: ignore[arg-type]
    )


def budget_option(budget: object, n: int, key: str = "budget", *, replicates: int = 1) -> int:
    """The budget of evaluations (runs of the objective); at least n + 1 points' worth.

    The default is 1000 (n + 1) points, each run ``replicates`` times: 1000 (n + 1) k runs.

    Raises
    ------
    ProblemError
        For anything but a whole number of at least (n + 1) k.
    """
    if budget is None:
        return default_budget(n) * replicates
    if isinstance(budget, bool) or not isinstance(budget, int | np.integer):
        raise ProblemError(f"{key} must be a whole number of evaluations, got {budget!r}")
    least = (n + 1) * replicates
    if budget < least:
        each = "" if replicates == 1 else f" points each run {replicates} times, {least}"
        raise ProblemError(
            f"{key} must allow at least n + 1 = {n + 1}{each} evaluations, got {budget!r}"
        )
    return int(budget)


def replicate_identity(replicates: int) -> dict[str, Any]:
    """The identity's entry for the replicates: none for one run per point (older journals)."""
    return {} if replicates == 1 else {"replicates": replicates}


def time_limit_option(time_limit: object) -> float | None:
    """Seconds of wall time, or None.

    Raises
    ------
    ProblemError
        For anything but a positive number.
    """
    if time_limit is not None and (
        isinstance(time_limit, bool)
        or not (isinstance(time_limit, int | float) and time_limit > 0)
    ):
        raise ProblemError(f"time_limit must be a positive number of seconds, got {time_limit!r}")
    return time_limit  # type: ignore[return-value]


def sigma_option(sigma: object) -> np.ndarray | None:
    """The standard deviations that divide the residuals, or None.

    One number (a 0-d array: every residual has that standard deviation) or one per residual
    (a flat array).

    >>> sigma_option(0.05), sigma_option([1, 2])
    (array(0.05), array([1., 2.]))

    Raises
    ------
    ProblemError
        Unless it is one positive finite number or a flat sequence of them.
    """
    if sigma is None:
        return None
    if isinstance(sigma, bool | str | bytes):
        raise ProblemError(f"sigma must be a positive number or one per residual, got {sigma!r}")
    try:
        deviations = np.array(sigma, dtype=float)
    except (TypeError, ValueError):
        raise ProblemError(
            f"sigma must be a positive number or one per residual, got {sigma!r}"
        ) from None
    flat = deviations.reshape(-1)
    bad = np.flatnonzero(~(np.isfinite(flat) & (flat > 0.0)))
    if bad.size or deviations.ndim > 1 or flat.size == 0:
        where = f" (entry {bad[0]}: {flat[bad[0]]!r})" if bad.size and deviations.ndim else (
            f", got {flat[0]!r}" if bad.size else "")
        raise ProblemError(
            f"sigma must be a positive finite number or one per residual{where}"
        )
    return deviations
