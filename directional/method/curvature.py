"""Is the returned point a minimum?  Numerical Hessian, verdict with error bars, saddle escape.

Theory of operation.  Successive parabolic interpolation converges as happily to a saddle or a
maximum as to a minimum, and a derivative-free search stops wherever progress is small; so the
point it returns is checked.

1. Free estimate.  The line searches measured the curvature along each direction of the final
   set; for conjugate directions these give a Hessian estimate at no cost
   (`directions.hessian_estimate`).  It is reported, and its diagonal sizes the steps of the paid
   check.  It holds only the positive curvatures the line searches saw, so it can never reveal a
   saddle: alone it decides nothing (``check=False`` leaves the verdict UNCHECKED).
2. Paid check.  A Hessian in scaled coordinates (`directional.method.space`) over the parameters that are
   not on a bound: by numdifftools' central differences with Richardson extrapolation and its
   error estimate (``check=True``, 6 n² + 1 evaluations), or by one plain central-difference
   stencil (``check="quick"``, 2 n² + 2 n + 1).  The default (``check=True``, ESCALATING)
   measures the one stencil first and pays for the extrapolated Hessian only when an eigenvalue's
   error bar leaves its sign in doubt; a check the budget left over by the search cannot pay for
   is not begun (UNCHECKED, with the reason).  Every stencil point is known before any value is, so
   the stencil goes to the driver as one batch (an executor evaluates it in parallel); see
   `directional.method.hessian`.  Steps are never below what the noise allows; with a stated noise
   level, a stencil whose steps were sized from a curvature that the measurement belies is
   resized and evaluated again.
3. Verdict.  The Hessian is first scaled symmetrically so that each row's largest entry (or
   error, when larger) is 1 (`equilibration`; the signs of the eigenvalues do not change).  Each
   eigenvalue then gets its own error bar from the scaled error estimate plus the noise's share
   (`eigenvalue_margins`): an eigenvalue above its bar is clearly positive, one below minus its
   bar clearly negative, the rest indistinguishable from zero.  MINIMUM: all clearly positive;
   MAXIMUM: all clearly negative; SADDLE: some clearly negative; FLAT: none negative, some zero
   (the combinations of parameters along those eigenvectors are reported by name).  Before that,
   the stencil's values along each axis are tested for kinks and jumps
   (`directional.method.smoothness`); where the objective is not smooth the verdict is NONSMOOTH
   (unless the smooth rest is a saddle or flat), the break is named (`records.Break`), and the
   curvature is judged on the directions orthogonal to it only.  A direction along a kinked
   valley that still goes down is escaped along, like one of negative curvature.
   With a noise level (stated, estimated or noticed by the search) the steps grow where the noise
   hides an eigenvalue, each bar holds the eigenvalue's own noise (`hessian.eigenvalue_noise`),
   and FLAT needs the largest steps allowed; where the noise alone decided, the verdict is NOISY
   with the level in the note (`_hidden`).
4. Escape.  On SADDLE or MAXIMUM the eigenvector of most negative curvature is line-searched both
   ways, the direction-set search restarts from the better point, and the new point is checked:
   at most ``escapes`` times.  When the line search gains less than the search's own value
   tolerance (or the noise), the negative curvature is too weak to matter and the verdict
   becomes FLAT along that direction (e.g. a point 1e-9 beside a valley floor of minima).

References
----------
.. [1] J. H. Wilkinson, *The Algebraic Eigenvalue Problem*, Clarendon Press, 1965, ch. 2
   (perturbation of the eigenvalues of a symmetric matrix).
.. [2] D. Ruiz, "A scaling algorithm to equilibrate both rows and columns norms in matrices",
   Rutherford Appleton Laboratory report RAL-TR-2001-034, 2001.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Generator
from dataclasses import dataclass
from typing import Any

import numpy as np

from directional.errors import ProblemError
from directional.method.directions import DirectionSet, hessian_estimate
from directional.method.hessian import (
    EPSILON,
    NOISY_LARGEST,
    RATIO,
    STEPS,
    Measured,
    eigenvalue_noise,
    extrapolated_hessian,
    fourth_noise,
    noise_margin,
    quick_hessian,
    stencil_noise,
    step_sizes,
    truncation,
)
from directional.method.linesearch import line_search
from directional.method.search import FIRST_STEP, Settings, powell
from directional.method.smoothness import AXIS, Finding, examine
from directional.method.space import Space
from directional.records import (
    SPENT,
    Batch,
    Break,
    Check,
    Curvature,
    Halt,
    Outcome,
    Purpose,
    Request,
    Stop,
    Verdict,
)
from directional.solution import Solution

RESIZES = 2  # with a noise level: times the stencil may be resized from measured curvatures
GROWTHS = 3  # with a noise level: times the steps along hidden curvatures may grow
GROWTH = 4.0  # each growth: the noise's share of a curvature falls 16-fold
FREE_FLAT = EPSILON**0.5  # free estimate: smaller eigenvalues (relative) count as zero

Checking = Generator[Batch, np.ndarray, "Checked"]


def check_kind(check: object) -> Check | None:
    """The check the caller asked for: ESCALATING (True, the default), QUICK ("quick"),
    EXTRAPOLATED ("extrapolated"), or None (False).

    ESCALATING measures one stencil (as QUICK) and pays for the extrapolated Hessian only when
    an eigenvalue's error bar leaves its sign in doubt (`undecided`).

    Raises
    ------
    ProblemError
        For anything else.
    """
    if check is True:
        return Check.ESCALATING
    if check == Check.EXTRAPOLATED:
        return Check.EXTRAPOLATED
    if check == Check.QUICK:
        return Check.QUICK
    if check is False or check is None:
        return None
    raise ProblemError(f"check must be True, False, 'quick' or 'extrapolated', got {check!r}")


def check_cost(check: Check, free: int) -> int:
    """New evaluations a check over ``free`` parameters needs at most: one stencil of
    2 k² + 2 k + 1 points (QUICK, and the first stage of ESCALATING), numdifftools' 6 k² + 1
    (EXTRAPOLATED), less the centre, whose value the search already has.  The few points the
    smoothness check may add (`smoothness.examine`) are not counted.

    >>> check_cost(Check.QUICK, 3), check_cost(Check.EXTRAPOLATED, 3)
    (24, 54)
    """
    if check == Check.EXTRAPOLATED:
        return 6 * free * free
    return 2 * free * free + 2 * free


UNSURE = 1e-6  # escalating check: a single stencil's eigenvalues are trusted above this (relative)


def undecided(checked: Checked) -> bool:
    """Whether a single stencil's verdict is in doubt: an eigenvalue (of the equilibrated Hessian)
    within ten times its error bar, widened by ``UNSURE`` times the largest for the truncation
    error one stencil cannot measure (common practice, no source).  With no smooth part left (every
    direction broken, `smoothness.examine`) there is no eigenvalue to doubt."""
    c = checked.curvature
    if c is None or c.error is None or checked.eigenvalues is None or not len(checked.eigenvalues[0]):
        return False
    eigenvalues, margins = checked.eigenvalues
    widened = 10.0 * margins + UNSURE * float(np.max(np.abs(eigenvalues)))
    return bool(np.any(np.abs(eigenvalues) <= widened))


def escape_count(escapes: object) -> int:
    """Validate the ``escapes`` argument.

    Raises
    ------
    ProblemError
        Unless it is a whole number of at least 0.
    """
    if isinstance(escapes, bool) or not isinstance(escapes, int | np.integer) or escapes < 0:
        raise ProblemError(f"escapes must be a whole number of at least 0, got {escapes!r}")
    return int(escapes)


# ----------------------------------------------------------------------------- verdict


def equilibration(hessian: np.ndarray, *, sweeps: int = 60) -> np.ndarray:
    """Diagonal scaling ``d`` that brings the largest entry of every row of ``H / (d dᵀ)`` to 1.

    Ruiz's (2001) iteration: divide rows and columns by the square roots of the row maxima, and
    repeat; the result does not depend on how the parameters were scaled to begin with.  The
    verdict is decided on the scaled matrix: congruence keeps the signs of the eigenvalues
    (Sylvester's law of inertia), and after it the error bars of large and small entries are
    compared on an equal footing, so that a badly scaled but well-determined Hessian is not
    called FLAT because of the absolute error of its largest entry.  A row of zeros keeps 1.

    >>> equilibration(np.array([[4.0, 0.0], [0.0, 0.01]])).round(6)
    array([2. , 0.1])
    """
    a = np.abs(np.asarray(hessian, dtype=float))
    d = np.ones(len(a))
    for _ in range(sweeps if len(a) else 0):
        # the array methods, not numpy's functions: the same arithmetic without their wrappers
        # (a run's free record sweeps 5 to 9 times, checked or not)
        rows = (a / (d[:, None] * d)).max(axis=1)
        step = np.sqrt(np.where(rows > 0.0, rows, 1.0))
        d = d * step
        if (np.abs(step - 1.0) <= 1e-6).all():
            break
    return d


def classify(eigenvalues: np.ndarray, margin: float | np.ndarray) -> Verdict:
    """The verdict from eigenvalues known to within ``margin`` (one, or one per eigenvalue).

    >>> classify(np.array([-1.0, 2.0]), 0.1), classify(np.array([1e-9, 2.0]), 1e-6)
    (<Verdict.SADDLE: 'saddle'>, <Verdict.FLAT: 'flat'>)
    """
    if len(eigenvalues) == 0:
        return Verdict.UNCHECKED
    if np.all(eigenvalues > margin):
        return Verdict.MINIMUM
    if np.all(eigenvalues < -margin):
        return Verdict.MAXIMUM
    if np.any(eigenvalues < -margin):
        return Verdict.SADDLE
    return Verdict.FLAT


def eigenvalue_margins(eigenvectors: np.ndarray, error: np.ndarray) -> np.ndarray:
    """Error bar of each eigenvalue: ``|v|ᵀ |E| |v|`` for its unit eigenvector ``v``.

    To first order an error ``E`` moves the eigenvalue of ``v`` by ``vᵀ E v`` (Rayleigh quotient;
    Wilkinson 1965, ch. 2), and with only the magnitudes of the errors known that is at most
    ``|v|ᵀ |E| |v|``.  Unlike the norm of ``E`` (Weyl's bound, which holds for every eigenvalue at
    once), it does not let a badly determined parameter blur the eigenvalues it takes no part in.

    >>> eigenvalue_margins(np.eye(2), np.array([[1e-6, 0.0], [0.0, 1.0]]))
    array([1.e-06, 1.e+00])
    """
    v = np.abs(eigenvectors)
    return np.einsum("ik,ij,jk->k", v, np.abs(error), v)


def combination(vector: np.ndarray, labels: tuple[str, ...]) -> str:
    """A direction in search coordinates as a weighted sum of parameter names.

    The largest weight is made positive; weights below a tenth of it are left out.

    >>> combination(np.array([-0.6, -0.8]), ("a", "b"))
    '0.6 a + 0.8 b'
    """
    v = np.asarray(vector, dtype=float)
    v = v / np.linalg.norm(v)
    if v[np.argmax(np.abs(v))] < 0:
        v = -v
    terms = []
    for weight, label in zip(v, labels):
        if abs(weight) < 0.1 * np.max(np.abs(v)):
            continue
        sign = "-" if weight < 0 else "+"
        terms.append((sign, f"{abs(weight):.3g} {label}"))
    text = " ".join(f"{sign} {term}" for sign, term in terms)
    return text[2:] if text.startswith("+ ") else "-" + text[2:]


def labels(space: Space, free: np.ndarray) -> tuple[str, ...]:
    """Names of the free search coordinates: the parameter, or log(parameter) on a log scale."""
    return tuple(
        f"log({p.name})" if log else p.name
        for p, log, keep in zip(space.parameters, space.log, free)
        if keep
    )


def record(
    scaled: np.ndarray,
    error: np.ndarray | None,
    scale: np.ndarray,
    source: str,
    *,
    names: tuple[str, ...],
    margin: float = math.nan,
    undetermined: tuple[str, ...] = (),
    evaluations: int = 0,
    free: Curvature | None = None,
    noise: float = math.nan,
) -> Curvature:
    """A `Curvature` record in search coordinates from a Hessian in scaled coordinates."""
    inverse = 1.0 / (scale[:, None] * scale)  # `np.outer`'s products, without its wrapper
    hessian = scaled * inverse
    hessian = 0.5 * (hessian + hessian.T)
    eigenvalues, eigenvectors = np.linalg.eigh(hessian)
    magnitudes = np.abs(eigenvalues)
    top, low = magnitudes.max(), magnitudes.min()
    return Curvature(
        hessian=hessian,
        error=None if error is None else error * inverse,
        eigenvalues=eigenvalues,
        eigenvectors=eigenvectors,
        condition=math.inf if low == 0.0 else float(top / low),
        source=source,
        names=names,
        margin=margin,
        undetermined=undetermined,
        evaluations=evaluations,
        free=free,
        noise=noise,
    )


def free_estimate(space: Space, outcome: Outcome) -> np.ndarray | None:
    """The free Hessian estimate in scaled coordinates (None while a curvature is unknown)."""
    return hessian_estimate(
        DirectionSet(
            vectors=outcome.directions,
            curvatures=outcome.curvatures,
            steps=np.zeros(space.size),
        )
    )


def free_record(space: Space, scaled: np.ndarray | None) -> Curvature | None:
    """The free estimate as a `Curvature` record over every parameter."""
    if scaled is None:
        return None
    all_free = np.ones(space.size, dtype=bool)
    d = equilibration(scaled)
    margin = FREE_FLAT * float(np.abs(np.linalg.eigvalsh(scaled / (d[:, None] * d))).max())
    return record(scaled, None, space.scale, "free", names=labels(space, all_free), margin=margin)


def free_verdict(hessian: np.ndarray | None) -> Verdict:
    """What the free estimate alone would say: MINIMUM, FLAT, or UNCHECKED when there is none.

    Its curvatures are the positive ones the line searches measured, so it cannot say SADDLE;
    eigenvalues of the equilibrated matrix below ``FREE_FLAT`` = sqrt(eps) times the largest
    count as zero: a curvature from a parabola through rounded values is good to about sqrt(eps)
    relative at best (common practice, no source).  It also cannot see a flat direction that its
    directions were never conjugate to.  The matrix may be in scaled or in search coordinates: after
    `equilibration` both give the same eigenvalues.  Used by the benchmarks to see how often the
    free estimate agrees with the paid check.

    >>> free_verdict(np.array([[2.0, 0.0], [0.0, 1e-9]])), free_verdict(None)
    (<Verdict.MINIMUM: 'minimum'>, <Verdict.UNCHECKED: 'unchecked'>)
    """
    if hessian is None:
        return Verdict.UNCHECKED
    d = equilibration(hessian)
    eigenvalues = np.linalg.eigvalsh(hessian / np.outer(d, d))
    return classify(eigenvalues, FREE_FLAT * float(np.max(np.abs(eigenvalues))))


# ----------------------------------------------------------------------------- the check


@dataclass(frozen=True, slots=True, kw_only=True)
class Checked:
    """What a check found: the verdict, the record, and the escape direction (scaled, full n)."""

    verdict: Verdict
    curvature: Curvature | None
    note: str = ""
    escape: np.ndarray | None = None
    eigenvalues: tuple[np.ndarray, np.ndarray] | None = None  # equilibrated, with their error bars


def check_point(
    space: Space,
    u0: np.ndarray,
    f0: float,
    free_scaled: np.ndarray | None,
    *,
    check: Check,
    noise: float | None,
    active: np.ndarray,
    room: float = math.inf,
) -> Checking:
    """The paid check at the scaled point ``u0`` as a generator for the driver.

    With a noise level given, the free estimate's curvatures may be noise themselves (a parabola
    through points closer than the noise allows), and steps sized from them too short: when the
    measured diagonal comes out below a quarter of the curvature the steps were sized for, the
    steps are sized again from the measured one and the stencil is evaluated anew (at most
    ``RESIZES`` times).  Without a noise level the stencil is evaluated once.

    ``room`` is what is left of the budget: a check it cannot pay for is not begun (UNCHECKED,
    with the reason), and ESCALATING escalates only when the room allows.

    With a noise level given, ESCALATING stays with the one stencil (QUICK): Richardson
    extrapolation from steps ``h, h/2, h/4`` multiplies the noise's share by up to 16.  Instead,
    where an eigenvalue is hidden by the noise, the steps of the parameters taking part grow
    (``GROWTH``, at most ``GROWTHS`` times, while the budget allows) up to `NOISY_LARGEST` or the
    room to the bounds, unless the stencil's half steps show truncation along that axis
    (`hessian.truncation`): curvature the noise hides at one step may show at a larger one.
    """
    if check == Check.ESCALATING:
        k = int((~active).sum())
        first = yield from check_point(
            space, u0, f0, free_scaled, check=Check.QUICK, noise=noise, active=active, room=room
        )
        if first.curvature is None or first.curvature.source == "free" or not undecided(first):
            return first
        if noise is not None or math.isfinite(first.curvature.noise):
            return first  # extrapolating from h/4 steps amplifies the noise 16-fold
        if room - check_cost(Check.QUICK, k) < check_cost(Check.EXTRAPOLATED, k):
            note = ("an eigenvalue of the one-stencil check lies near its error bar; the budget "
                    "left cannot pay for the extrapolated check that would settle it")
            return dataclasses.replace(first, note=(first.note + "; " if first.note else "") + note)
        return (yield from check_point(
            space, u0, f0, free_scaled, check=Check.EXTRAPOLATED, noise=noise, active=active
        ))
    if room < check_cost(check, int((~active).sum())):
        return Checked(
            verdict=Verdict.UNCHECKED, curvature=free_record(space, free_scaled),
            note=(f"not checked: the budget left ({room:g} evaluations) cannot pay for the "
                  f"curvature check ({check_cost(check, int((~active).sum()))} evaluations)"),
        )
    free = ~active
    free_rec = free_record(space, free_scaled)
    if not free.any():
        return Checked(
            verdict=Verdict.UNCHECKED, curvature=free_rec,
            note="not checked: every parameter is on a bound",
        )
    reach = np.minimum(u0 - space.lower_u, space.upper_u - u0)[free]
    diagonal = np.full(int(free.sum()), np.nan) if free_scaled is None else np.diag(free_scaled)[free]
    seen: list[tuple[np.ndarray, np.ndarray]] = []  # every stencil point and value, for smoothness
    cost = check_cost(check, int(free.sum()))
    held = ""  # why the steps could not grow further (budget)
    for attempt in range(RESIZES + 1):
        steps = step_sizes(diagonal, f0, noise, reach, check)
        try:
            if check == Check.QUICK:
                measured = yield from _seen(quick_hessian(space, u0, free, steps), seen)
            else:
                measured = yield from _seen(extrapolated_hessian(space, u0, free, steps), seen)
        except Halt as halt:
            return Checked(
                verdict=Verdict.UNCHECKED, curvature=free_rec,
                note=f"the curvature check could not finish: {halt.reason}",
            )
        if measured.problem:
            return Checked(
                verdict=Verdict.UNCHECKED, curvature=free_rec,
                note=f"the curvature check failed: {measured.problem}",
            )
        found = np.abs(np.diag(measured.hessian))
        used = np.where(np.isfinite(diagonal) & (diagonal > 0.0), diagonal, np.inf)
        if noise is None or attempt == RESIZES or not np.any(found < 0.25 * used):
            break
        if room - cost * (attempt + 1) < cost:
            held = "the budget left cannot pay for a stencil with larger steps"
            break
        diagonal = np.where(found < 0.25 * used, found, diagonal)
    if noise is None and check == Check.QUICK and measured.lines is not None:
        noticed = yield from _noticed(space, u0, free, measured, reach, room - cost)
        if math.isfinite(noticed):
            checked = yield from check_point(
                space, u0, f0, free_scaled, check=check, noise=noticed, active=active,
                room=room - 2 * cost,
            )
            note = (f"noise noticed by the check: standard deviation about {noticed:.2g}, from the "
                    "fourth differences of its stencil at two scales (Moré & Wild 2011); the "
                    "steps and error bars allow for it (give noise= to state it)")
            return dataclasses.replace(
                checked, note="; ".join(n for n in (note, checked.note) if n)
            )
        seen = seen[:1]  # a stencil at larger steps said it is no noise: judge the first alone
    largest = np.minimum(NOISY_LARGEST, reach)
    paid = cost * (attempt + 1)
    for _ in range(GROWTHS if noise is not None and check == Check.QUICK and not held else 0):
        grow = _to_grow(measured, float(noise), largest)
        if not grow.any():
            break
        if room - paid < cost:
            held = "the budget left cannot pay for a stencil with larger steps"
            break
        steps = np.where(grow, np.minimum(GROWTH * measured.steps, largest), measured.steps)
        try:
            grown = yield from _seen(quick_hessian(space, u0, free, steps), seen)
        except Halt as halt:
            held = f"the stencil with larger steps was stopped: {halt.reason}"
            break
        paid += cost
        if grown.problem:
            held = f"the stencil with larger steps failed: {grown.problem}"
            break
        measured = grown
    if noise is not None and check == Check.QUICK:
        # the smoothness test reads the last stencil only: at the smaller steps of the earlier
        # ones the noise is larger than any break it could find there
        seen = seen[-1:]
    return (yield from _judged(space, u0, f0, free, measured, noise, check, free_rec, seen,
                               largest=largest, held=held))


def _noticed(
    space: Space, u0: np.ndarray, free: np.ndarray, measured: Measured, reach: np.ndarray,
    room: float,
) -> Generator[Batch, np.ndarray, float]:
    """The noise level a stencil evaluated with no level stated shows, or nan.

    Where `hessian.stencil_noise` finds the axis lines noisy, a second stencil at 16 times the
    steps tells noise from a kink or a jump along every axis: the fourth differences of noise
    keep their size, those of a kink grow with the step (16-fold) and those of a smooth function
    far faster.  The level stands when the second stencil's (`hessian.fourth_noise`) is within
    a factor 4 of the first's.  No second stencil (nan) when the room to the bounds does not
    allow one, when the budget ``room`` cannot pay for it and a check at the noise's steps after
    it, or when it is stopped.
    """
    level = stencil_noise(measured.lines)
    wide = 16.0 * measured.steps
    k = len(measured.steps)
    if not math.isfinite(level) or np.any(wide > reach) or room < 2 * check_cost(Check.QUICK, k):
        return math.nan
    try:
        wider = yield from quick_hessian(space, u0, free, wide)
    except Halt:
        return math.nan
    if wider.problem or wider.lines is None or not fourth_noise(wider.lines) <= 4.0 * level:
        return math.nan
    return level


def _to_grow(measured: Measured, noise: float, largest: np.ndarray) -> np.ndarray:
    """Axes whose steps should grow: those taking part (a tenth of the largest weight or more) in
    an eigenvector whose eigenvalue the noise hides, not yet at ``largest``, and showing no
    truncation.  None grow when some eigenvalue is clearly negative (the verdict is made)."""
    eigenvalues, margins, directions = _spectrum(measured, noise, noisy=True)
    hidden = np.abs(eigenvalues) <= margins
    if np.any(eigenvalues < -margins) or not hidden.any():
        return np.zeros(len(eigenvalues), dtype=bool)
    weights = np.abs(directions[:, hidden])
    involved = np.any(weights >= 0.1 * np.max(weights, axis=0), axis=1)
    clean = truncation(measured.spread, measured.steps, noise) == 0.0
    return involved & clean & (measured.steps < largest * (1.0 - 1e-12))


def _spectrum(
    measured: Measured, level: float, *, noisy: bool,
    basis: np.ndarray | None = None, known: dict[int, tuple[float, float]] | None = None,
    check: Check = Check.QUICK,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Eigenvalues of the equilibrated Hessian (on ``basis``, default all axes), their error bars,
    and their eigenvectors in scaled coordinates.

    Without a stated noise level (or with breaks, or numdifftools' Hessian) each bar is
    `eigenvalue_margins` of the error estimate plus three standard deviations of the noise in
    every entry (`hessian.noise_margin`).  With a stated level and the quick stencil
    (``noisy``), the noise's share is instead three standard deviations of the eigenvalue's own
    noise (`hessian.eigenvalue_noise`, which knows that the entries share the centre value and
    that an eigenvector spreads over several entries), and the truncation the stencil's half
    steps show is added on the diagonal (`hessian.truncation`).
    """
    k = len(measured.steps)
    smallest = measured.steps if check == Check.QUICK else measured.steps / RATIO ** (STEPS - 1)
    error = measured.error + noise_margin(smallest, level)
    basis = np.eye(k) if basis is None else basis
    known = known or {}
    hessian = basis.T @ measured.hessian @ basis
    reduced = np.abs(basis).T @ error @ np.abs(basis)
    for column, (curvature, bar) in known.items():
        hessian[column, column], reduced[column, column] = curvature, bar
    d = equilibration(np.maximum(np.abs(hessian), reduced))
    eigenvalues, eigenvectors = np.linalg.eigh(hessian / np.outer(d, d))
    noisy = noisy and measured.spread is not None and basis.shape == (k, k) and not known
    if noisy:
        others = measured.error + np.diag(truncation(measured.spread, measured.steps, level))
        margins = eigenvalue_margins(eigenvectors, basis.T @ others @ basis / np.outer(d, d))
        margins = margins + 3.0 * eigenvalue_noise(basis @ eigenvectors, measured.steps * d, level)
    else:
        margins = eigenvalue_margins(eigenvectors, reduced / np.outer(d, d))
    if len(eigenvalues):
        margins = margins + 64.0 * EPSILON * float(np.max(np.abs(eigenvalues)))
    return eigenvalues, margins, basis @ (eigenvectors / d[:, None])


def _seen(
    stencil: Generator[Batch, np.ndarray, Measured], seen: list[tuple[np.ndarray, np.ndarray]]
) -> Generator[Batch, np.ndarray, Measured]:
    """Pass a stencil's batches through unchanged, keeping each batch's points and values."""
    try:
        batch = next(stencil)
        while True:
            values = yield batch
            seen.append((batch.points, np.asarray(values, dtype=float)))
            batch = stencil.send(values)
    except StopIteration as stop:
        return stop.value


def _judged(
    space: Space,
    u0: np.ndarray,
    f0: float,
    free: np.ndarray,
    measured: Measured,
    noise: float | None,
    check: Check,
    free_rec: Curvature | None,
    seen: list[tuple[np.ndarray, np.ndarray]],
    *,
    largest: np.ndarray | None = None,
    held: str = "",
) -> Checking:
    """Smoothness first (`smoothness.examine`, a few more points), then the verdict on the smooth
    part, and an escape along a kinked valley's floor where it still goes down."""
    points = np.concatenate([p for p, _ in seen])
    values = np.concatenate([v for _, v in seen])
    try:
        found = yield from examine(
            space, u0, f0, free, (points, values), measured.hessian, noise=noise
        )
    except Halt as halt:
        return Checked(
            verdict=Verdict.UNCHECKED, curvature=free_rec,
            note=f"the smoothness check could not finish: {halt.reason}",
        )
    checked = _verdict(space, free, measured, f0, noise, check, free_rec, found.breaks,
                       (found.basis, found.known), largest=largest, held=held)
    if found.note:
        checked = dataclasses.replace(
            checked, note="; ".join(n for n in (checked.note, found.note) if n)
        )
    if checked.escape is None and found.downhill is not None:
        escape = np.zeros(space.size)
        escape[free] = found.downhill
        checked = dataclasses.replace(checked, escape=escape)
    return checked


def _verdict(
    space: Space,
    free: np.ndarray,
    measured: Measured,
    f0: float,
    noise: float | None,
    check: Check,
    free_rec: Curvature | None,
    breaks: list[tuple[np.ndarray, Finding]] | None = None,
    smooth_part: tuple[np.ndarray, dict[int, tuple[float, float]]] | None = None,
    *,
    largest: np.ndarray | None = None,
    held: str = "",
) -> Checked:
    level = 4.0 * EPSILON * abs(f0) if noise is None else float(noise)
    smallest = measured.steps if check == Check.QUICK else measured.steps / RATIO ** (STEPS - 1)
    error = measured.error + noise_margin(smallest, level)
    breaks = breaks or []
    # the curvature is judged on the smooth part only: the directions orthogonal to the breaks
    basis, known = smooth_part or (np.eye(int(free.sum())), {})
    eigenvalues, margins, directions = _spectrum(
        measured, level, noisy=noise is not None and check == Check.QUICK, basis=basis,
        known=known, check=check,
    )
    verdict = _with_breaks(classify(eigenvalues, margins), breaks)
    margin = float(margins[0]) if len(margins) else math.nan  # the smallest eigenvalue's
    scale = space.scale[free]
    names = labels(space, free)
    zero = np.abs(eigenvalues) <= margins
    undetermined = tuple(combination(scale * directions[:, i], names) for i in np.flatnonzero(zero))
    note = ""
    if noise is not None and verdict is Verdict.FLAT:
        verdict, note = _hidden(measured, directions, eigenvalues, margins, level, scale, names,
                                largest, held)
    curvature = record(
        measured.hessian, error, scale, str(check), names=names, margin=margin,
        undetermined=undetermined, free=free_rec,
        noise=math.nan if noise is None else float(noise),
    )
    if breaks:
        curvature = dataclasses.replace(
            curvature, breaks=tuple(_break(v, f, scale, names, space, free) for v, f in breaks)
        )
    escape = None
    if verdict in (Verdict.SADDLE, Verdict.MAXIMUM):
        escape = np.zeros(space.size)
        most = directions[:, int(np.argmin(eigenvalues))]
        escape[free] = most / np.linalg.norm(most)
    return Checked(verdict=verdict, curvature=curvature, escape=escape, note=note,
                   eigenvalues=(eigenvalues, margins))


def _hidden(
    measured: Measured,
    directions: np.ndarray,
    eigenvalues: np.ndarray,
    margins: np.ndarray,
    noise: float,
    scale: np.ndarray,
    names: tuple[str, ...],
    largest: np.ndarray | None,
    held: str,
) -> tuple[Verdict, str]:
    """FLAT or NOISY, with a note, for a verdict of FLAT under a stated noise level.

    FLAT only where the curvature stays below what the noise can resolve at the largest steps
    allowed (`NOISY_LARGEST` or the room to the bounds) along every parameter of a hidden
    combination: the value changes by less than the noise across the whole range, so the
    combination is not determined.  NOISY where no eigenvalue at all stands clear of the noise,
    or where the steps could not reach the largest (truncation along an axis, or the budget):
    the noise, not the objective, decided.
    """
    hidden = np.abs(eigenvalues) <= margins
    weights = np.abs(directions[:, hidden])
    involved = np.any(weights >= 0.1 * np.max(weights, axis=0), axis=1)
    steps = measured.steps
    reached = largest is not None and bool(np.all(steps[involved] >= largest[involved] * (1 - 1e-9)))
    where = ", ".join(f"{n} ±{h:.2g}" for n, h, keep in zip(names, scale * steps, involved) if keep)
    if hidden.all():
        return Verdict.NOISY, (
            f"the noise (standard deviation {noise:.2g}) hides the curvature in every direction at "
            f"the steps taken ({where}): the check cannot tell a minimum from a saddle or a flat "
            "point" + (f"; {held}" if held else "")
        )
    if reached:
        return Verdict.FLAT, (
            f"below the noise (standard deviation {noise:.2g}) even at the largest steps allowed "
            f"({where}): the value hardly changes along the combinations not determined"
        )
    why = held or "the stencil's half steps show truncation error at larger steps"
    return Verdict.NOISY, (
        f"the noise (standard deviation {noise:.2g}) hides the curvature along "
        + "; ".join(combination(scale * directions[:, i], names) for i in np.flatnonzero(hidden))
        + f" at the steps taken ({where}), and the steps could not grow further: {why}"
    )


def _with_breaks(smooth: Verdict, breaks: list[tuple[np.ndarray, Finding]]) -> Verdict:
    """The verdict when the objective is not smooth along ``breaks``: negative curvature of the
    smooth part still wins (it can be escaped), then a combination not determined, then NONSMOOTH.
    With every direction broken the smooth part is empty (UNCHECKED from `classify`)."""
    if not breaks:
        return smooth
    if smooth in (Verdict.SADDLE, Verdict.MAXIMUM, Verdict.FLAT):
        return smooth
    return Verdict.NONSMOOTH


def _break(
    v: np.ndarray, found: Finding, scale: np.ndarray, names: tuple[str, ...], space: Space,
    free: np.ndarray,
) -> Break:
    """A `Break` record in search coordinates for the unit direction ``v`` (scaled, free)."""
    w = scale * v
    length = float(np.linalg.norm(w))
    sign = 1.0 if w[np.argmax(np.abs(w))] > 0 else -1.0  # as `combination` writes it
    slopes = np.array(found.slopes) / length
    if sign < 0:
        slopes = slopes[::-1]
    involved = np.abs(w) >= 0.1 * np.max(np.abs(w))
    parameters = tuple(str(n) for n, keep in zip(np.array(space.names)[free], involved) if keep)
    axis = np.abs(v) > AXIS
    return Break(
        along=names[int(np.argmax(axis))] if axis.any() else combination(w, names),
        kind=found.kind, parameters=parameters, slopes=(float(slopes[0]), float(slopes[1])),
        change=found.change, step=found.step * length,
    )


# ----------------------------------------------------------------------------- escape


@dataclass(frozen=True, slots=True, kw_only=True)
class Escaped:
    """Where a line search along a direction of negative curvature ended (scaled point)."""

    point: np.ndarray
    value: float
    halted: bool = False


def escape(
    space: Space, settings: Settings, u0: np.ndarray, f0: float, direction: np.ndarray
) -> Generator[Batch, np.ndarray, Escaped]:
    """Line-search both ways along ``direction`` from ``u0`` (purpose "escape").

    Both probes ``u0 ± h d`` go out as one batch; the line search then goes on from the lower
    side (the three known points make it extend the bracket that way).
    """
    d = direction / np.linalg.norm(direction)
    lo, hi = space.segment(u0, d)
    h = FIRST_STEP
    ts = [t for t in (min(h, hi), max(-h, lo)) if t != 0.0]
    best = Escaped(point=u0, value=f0)
    if not ts:
        return best
    try:
        values = yield Batch(points=space.to_user(u0 + np.array(ts)[:, None] * d), purpose=Purpose.ESCAPE)
        known = {0.0: f0, **{t: float(v) for t, v in zip(ts, values)}}
        for t, v in known.items():
            if v < best.value:
                best = Escaped(point=u0 + t * d, value=v)
        search = line_search(
            known, lo, hi, step=h, tolerance=settings.line_tolerance, limit=settings.line_limit
        )
        try:
            ts_next = next(search)
            while True:
                values = yield Batch(points=space.to_user(u0 + ts_next[:, None] * d), purpose=Purpose.ESCAPE)
                for t, v in zip(ts_next, values):
                    if v < best.value:
                        best = Escaped(point=u0 + t * d, value=float(v))
                ts_next = search.send(values)
        except StopIteration:
            pass
    except Halt:
        return dataclasses.replace(best, halted=True)
    return best


# ----------------------------------------------------------------------------- the whole settle


@dataclass(frozen=True, slots=True, kw_only=True)
class Settled:
    """The search's final outcome after checks and escapes, and what to tell the user."""

    outcome: Outcome
    verdict: Verdict
    curvature: Curvature | None
    notes: tuple[str, ...]
    escapes: int
    point: np.ndarray | None = None  # the outcome's point in user coordinates


Restart = Callable[[np.ndarray], Generator[Request, Any, Outcome]]


def settle(
    space: Space,
    settings: Settings,
    outcome: Outcome,
    *,
    check: Check | None,
    escapes: int,
    noise: float | None,
    restart: Restart | None = None,
    budget: int | None = None,
) -> Generator[Request, Any, Settled]:
    """Check the search's point, escape saddles and maxima, and check again (at most ``escapes``).

    A generator for the driver, joined to the search with ``yield from``.  ``restart(u)`` is the
    search from an escape point (default: `search.powell` from ``u``); its outcome replaces the
    old one, with the cycles added up.  The cost of each check is asked of the driver (`SPENT`);
    ``budget`` (None: no cap) is the search's budget, which the check may not overrun: what is
    left of it after the search decides whether a check is begun (`check_point`'s ``room``).
    """
    if restart is None:

        def restart(u: np.ndarray) -> Generator[Batch, np.ndarray, Outcome]:
            return powell(space, settings, start=u)

    notes: list[str] = []
    escaped = 0
    while True:
        free_scaled = free_estimate(space, outcome)
        curvature = free_record(space, free_scaled)
        if check is None:
            return _settled(space, outcome, verdict=Verdict.UNCHECKED, curvature=curvature,
                           notes=tuple(notes), escapes=escaped)
        if outcome.stop is not Stop.CONVERGED:
            notes.append(f"not checked: the search stopped before converging ({outcome.stop.value})")
            return _settled(space, outcome, verdict=Verdict.UNCHECKED, curvature=curvature,
                           notes=tuple(notes), escapes=escaped)
        before = yield SPENT
        active = space.on_bound(space.to_user(outcome.point), 10.0 * settings.point_tolerance)
        room = math.inf if budget is None else budget - before
        checked = yield from check_point(
            space, outcome.point, outcome.value, free_scaled, check=check, noise=noise,
            active=active, room=room,
        )
        curvature = checked.curvature
        if curvature is not None and curvature.source != "free":
            curvature = dataclasses.replace(curvature, evaluations=(yield SPENT) - before)
        if checked.note:
            notes.append(checked.note)
        if checked.escape is None or escaped >= escapes:
            if checked.escape is not None and escapes > 0:
                notes.append(f"still a {checked.verdict.value} after {escaped} escapes")
            return _settled(space, outcome, verdict=checked.verdict, curvature=curvature,
                           notes=tuple(notes), escapes=escaped)
        moved = yield from escape(space, settings, outcome.point, outcome.value, checked.escape)
        where = _describe(space, outcome.point)
        along = combination(space.scale * checked.escape, labels(space, np.ones(space.size, bool)))
        # a gain the search itself would call no progress does not count as an escape
        floor = max(
            settings.value_tolerance * max(1.0, abs(outcome.value)),
            4.0 * EPSILON * abs(outcome.value) if noise is None else float(noise),
        )
        if moved.halted:
            notes.append(f"{checked.verdict.value} at {where}: the escape along {along} was stopped")
            return _settled(space, outcome, verdict=checked.verdict, curvature=curvature,
                            notes=tuple(notes), escapes=escaped)
        if not moved.value < outcome.value - floor and checked.verdict is Verdict.NONSMOOTH:
            return _settled(space, outcome, verdict=checked.verdict, curvature=curvature,
                            notes=tuple(notes), escapes=escaped)  # the slope along it was tiny
        if not moved.value < outcome.value - floor:
            notes.append(
                f"{checked.verdict.value} at {where}: no appreciably lower point along {along}; "
                "the negative curvature is too weak to matter, the point counts as flat"
            )
            if curvature is not None:
                curvature = dataclasses.replace(
                    curvature, undetermined=tuple(curvature.undetermined) + (along,)
                )
            return _settled(space, outcome, verdict=Verdict.FLAT, curvature=curvature,
                            notes=tuple(notes), escapes=escaped)
        escaped += 1
        notes.append(
            f"escape {escaped}: {checked.verdict.value} at {where} (f = {outcome.value:.6g}); "
            f"along {along} to f = {moved.value:.6g} (lower by {outcome.value - moved.value:.2g}), "
            "then the search went on"
        )
        cycles = outcome.cycles
        outcome = yield from restart(moved.point)
        outcome = dataclasses.replace(outcome, cycles=cycles + outcome.cycles)


def _settled(space: Space, outcome: Outcome, **fields: object) -> Settled:
    return Settled(outcome=outcome, point=space.to_user(outcome.point), **fields)  # type: ignore[arg-type]


def _describe(space: Space, u: np.ndarray) -> str:
    x = space.to_user(u)
    return "(" + ", ".join(f"{name}={value:.6g}" for name, value in zip(space.names, x)) + ")"


def settled_solution(solution: Solution, settled: Settled, notes: tuple[str, ...] = ()) -> Solution:
    """The solution with the verdict, the curvature record and the notes of the check.

    Its point becomes the one the verdict is about (the search's), even where a stencil point of
    the check came out lower (at a saddle, or a point not quite converged): the notes say so.
    """
    notes = tuple(solution.notes) + tuple(notes) + settled.notes
    point, value = solution.point, solution.value
    if settled.point is not None and math.isfinite(settled.outcome.value):
        point, value = settled.point, settled.outcome.value
        if solution.value < value:
            # the best value is printed beside the notes: say by how much it was beaten, not again
            # what it is (two values equal to ten digits would read as no news)
            notes += (
                f"an evaluation of the check came out lower by {value - solution.value:.2g} "
                f"(relative {(value - solution.value) / max(abs(value), 1e-300):.1g}) at "
                + "(" + ", ".join(f"{n}={v:.6g}" for n, v in zip(solution.names, solution.point))
                + ")",
            )
    return dataclasses.replace(
        solution, point=point, value=value, verdict=settled.verdict, curvature=settled.curvature,
        notes=notes,
    )
