"""The outer loop: Powell's conjugate-direction search, written as a generator.

Theory of operation.  The search owns all decisions and does no I/O: it yields `Batch` records of
points (user coordinates) and receives their values; the driver evaluates them.  It works in the
scaled coordinates of `space.Space`, starting from the principal axes.

- A cycle line-searches each direction of the set in turn from the current point (`linesearch`),
  reusing the curvature each direction showed last time, so that on a quadratic a line search
  costs two evaluations.  A direction with no curvature measured yet starts its bracket with the
  move of the line search before it, when that is longer than its own step (at most ``SEEDED``
  times longer: a longer jump sent a NIST calibration into another basin): the first cycle then
  learns the problem's scale once instead of once per axis.  A line search refines only while
  its parabola promises more than ``WORTH`` of the decrease the cycle is expected to bring (the
  last cycle's, shrunk at the rate of the last two): far from the minimum a point a little off
  the line's minimum costs the next cycle nothing, and with a known curvature such a line often
  ends after its first probe.  Conversely, a vertex closer than the line's resolution is still
  evaluated when its parabola promises more than the whole last cycle gained: the resolution
  (a hundredth of the last cycle's move) hid the valley of Powell's badly scaled function (Moré,
  Garbow & Hillstrom 1981, no. 3), 1e-5 wide along its first variable, for two cycles: the
  parabola along it put its vertex 1.1e-5 from the point, promising 98 % of the value.
- At the end of a cycle the point extrapolated as far again along the cycle's overall step is
  evaluated.  If Powell's (1964) test accepts, the overall step becomes a new direction: it is
  line-searched (the three points on it are already known) and replaces the direction of largest
  decrease, which keeps the set from collapsing (Zangwill 1967).
- When the set nevertheless becomes nearly dependent it is reset to principal axes (Brent 1973,
  ch. 7): the eigenvectors of the free Hessian estimate when every curvature is known, else the
  coordinate axes.  Long before that, once its condition number passes ``ALIGNED``, a set whose
  curvatures are all known is replaced after the cycle by the eigenvectors of its estimate, with
  their eigenvalues as the known curvatures, unless they spread beyond ``SPREAD`` or the cycle
  cut the value by more than the share ``FALLING`` (its parabolas then spanned more than a
  quadratic describes).
- Model steps (`model`).  Every finite value the search receives is kept, and after each cycle
  a quadratic is fitted to the samples nearest the best point (least squares; until the samples
  fix every coefficient, the Hessian nearest the last model's, Powell 2004, and such a model is
  used only after a model step succeeded, or when it leaves so few coefficients free that the
  next model steps' points fix them).  Its minimizer
  inside a trust region, clipped to the bounds, is evaluated; while such steps succeed (actual
  decrease at least half the predicted) more follow (after a step whose decrease was within
  ``AGREED`` of the predicted, on the same Hessian with the value and gradient fitted again at
  the new point, without a full refit, unless only a fit's verdict may end the search), and a
  convex model that predicted well
  replaces the direction set by its eigenvectors with their eigenvalues as known curvatures, so
  that the next cycle's line searches are along conjugate directions.  The trust radius halves
  after a poor step, doubles after a good one, and is never less than the last cycle's reach.
  The model is switched off above `model.LARGEST` variables, where its fit costs more than
  it saves.
- A calm cycle (see below), or one that moved less than the point tolerance, along a nearly
  dependent set (condition beyond ``SKEWED``) proves nothing: a valley no direction points
  along can be missed, which stopped Meyer's problem (Moré, Garbow & Hillstrom 1981, no. 10)
  at f = 7665 instead of 87.95.  The set is then reset to orthogonal axes, with curvatures
  unknown, and the cycle does not count.
- The search stops when, on two consecutive cycles, the point moved less than ``point_tolerance``
  (scaled, infinity norm) and the value fell by less than ``value_tolerance * max(1, |f|)``, the
  second of them with line searches resolving moves of ``point_tolerance`` (a coarser cycle that
  saw no move only makes the next one finer: a hundredth of the larger of its move and its
  resolution, so the resolution falls a hundredfold per cycle at most); or
  after one such cycle when a model that fixes every coefficient, fits its sample to within
  ``SETTLE_MISFIT`` and is convex puts its minimizer within the point tolerance with a predicted
  decrease within the value tolerance (the last model stepped on, its value and gradient
  fitted again at the point, is asked first: a fit only when it does not say so).
  The driver ends it early by throwing `records.Halt` (budget, time, interrupt); it then returns
  its best point with that reason.
- Plateaus.  Before it stops, a direction whose last parabola saw nothing but rounding (``FLAT``),
  or saw no upward curvature at all although the point travelled along it (``TRAVELLED``), is
  probed with doubling steps on both sides, and bisected where the value rose past the
  plateau's edge; lower ground found there is line-searched and the cycles go on.  A dying
  exponential otherwise leaves the search "converged" where the value no longer depends on a
  parameter: Box's function (Moré, Garbow & Hillstrom 1981, no. 12) stopped at 0.0756, not 0.
- Noise.  When no level was stated (``Settings.notice``), the calm that would end the search is
  not believed at once unless the quadratic model fits the samples to within the value
  tolerance (rounding only): the noise is measured at the best point by a difference table (Moré & Wild
  2011, `noise`).  A level above what the value tolerance ignores puts the search in its noisy
  mode, as does a level the caller stated: line searches probe far enough for the value to change
  by several noise levels and fit least-squares parabolas (`linesearch`), a lower single value
  no longer moves the best point (only a line's fitted minimum or a model step does), and the
  search stops when the regression model over twice as many samples as it has coefficients
  predicts a decrease below the noise on ``QUIET`` cycles in a row (a model that misfits its
  sample by more than ``FITS`` noise levels, or whose sample spans less than ``HEARD``, is not
  believed: then the gain of the last ``WINDOW`` cycles decides).  A cycle that did not move,
  or a quiet one along a set conditioned worse than ``SQUARE``, restarts from the model's
  axes (or from the way the search went lately) instead of counting.  The point returned is then
  the model's minimizer inside its sample, evaluated, or else the sample point the model puts
  lowest: not the lowest single value, which the noise biases low.
  Before that, a line search whose own points scatter like noise stops refining and says so
  (`linesearch`, `noise.line_level`); the level it heard, relative to |f| since noise in a
  simulation often scales with its output (Moré & Wild 2011 treat both kinds), then limits the
  resolution of the later line searches, so that a noisy objective does not cost ten
  evaluations per line long before the calm.  Smooth lines leave it silent: of the smooth
  benchmark problems only one is searched otherwise (Moré, Garbow & Hillstrom 1981, no. 11,
  whose terms |y_i − x2|^x3 are not smooth where x2 = y_i); there the table at the calm finds
  no noise, and the search drops the level and resolves its lines finely again.  With "none"
  stated (``notice`` False) no line listens.

On a quadratic in n variables the directions become mutually conjugate, and the minimum is
reached after n cycles with exact line searches (Powell 1964); with the model, once the samples
fix the quadratic (about (n + 1)(n + 2) evaluations on random quadratics) its first step lands on
the minimum.

References
----------
.. [0] J. J. Moré and S. M. Wild, "Estimating computational noise", *SIAM Journal on Scientific
   Computing* 33(3) (2011) 1292-1314.
.. [1] M. J. D. Powell, "An efficient method for finding the minimum of a function of several
   variables without calculating derivatives", *Computer Journal* 7 (1964) 155-162.
.. [2] M. J. D. Powell, "Least Frobenius norm updating of quadratic models that satisfy
   interpolation conditions", *Mathematical Programming* 100 (2004) 183-215.
.. [3] A. R. Conn, K. Scheinberg and L. N. Vicente, *Introduction to Derivative-Free
   Optimization*, SIAM, 2009, ch. 3-6, 10.
"""

from __future__ import annotations

import math
from collections.abc import Generator
from dataclasses import dataclass

import numpy as np

from directional.errors import ProblemError
from directional.method.directions import (
    DEGENERATE,
    DirectionSet,
    condition,
    powell_accepts,
    principal_axes,
    principal_axes_of_estimate,
    replaced,
)
from directional.method.linesearch import Found, line_search_floats
from directional.method.model import (
    LARGEST,
    Quadratic,
    Sample,
    coefficients,
    eigen,
    fit,
    keep,
    refreshed,
    trust_step,
)
from directional.method.noise import INTERRUPTED, NoiseLevel, estimate, floored, noise_like
from directional.method.space import Space
from directional.records import Batch, Halt, Outcome, Purpose, Stop

Search = Generator[Batch, np.ndarray, Outcome]
LINE = Purpose.LINE  # read once: the enum member is looked up on its class at every use

FIRST_STEP = 0.1  # first probe along an axis, in scaled units (a tenth of the problem's size)
SKEWED = 1e3  # condition of the direction set beyond which a calm cycle is not trusted
ALIGNED = 10.0  # condition beyond which the set is replaced by the principal axes of its estimate
SPREAD = 1e5  # ... unless the estimate's largest curvature exceeds its least this many times
FALLING = 0.9  # ... or the cycle lowered the value by more than this share of it
SAMPLES = 3  # the model's store holds this many times the coefficients of a quadratic
MODEL_STEPS = 8  # at most this many model steps in a row, while each is a success
SETTLE_MISFIT = 1e-3  # a model may end the search when it misfits its sample by less (relative)
NEARLY = 0.04  # a model leaving at most this share of its coefficients free (and at most
# MODEL_STEPS of them) is stepped on: each step's point fixes about one more
AGREED = 0.001  # a model step whose actual decrease is within this share of the predicted is
# followed by a step on the same Hessian, not on a refit (`model.refreshed`)
GUESSES = False  # True: step on undetermined models too (measured: more evaluations wasted on MGH)
FITTED = 2.0  # the model is fitted to this many times as many points as it has coefficients
EPSILON = float(np.finfo(float).eps)
WORTH = 0.003  # line searches stop refining below this share of the next cycle's expected decrease
SEEDED = 10.0  # a first step borrowed from the last move is at most this many times its own
FARTHEST = 1e10  # no line search goes farther, in scaled units: a descent to infinity stops there
NOISE_REACH = 8.0  # noisy probes go as far as ½ c h² = NOISE_REACH σ / 2 (a change of several σ)
QUIET = 2  # a noisy search stops after this many cycles in a row that promise less than σ
HEARD = 10.0  # a noisy model is believed when its sample's values span this many noise levels
WINDOW = 3  # without a believable model, a noisy search judges the gain of this many cycles
FITS = 5.0  # a noisy model is believed when its largest residual is below this many noise levels
BEYOND = 1e3  # nor when its step promises more than this many times its sample's span of values
SQUARE = 10.0  # a noisy search counts a quiet cycle only along directions this well conditioned
FLAT = 100.0  # a direction whose parabola saw value differences below this many roundings is flat
TRAVELLED = 1.0  # ... or one never curved upward along which the point moved this far (scaled)
REACH = 1024.0  # a flat direction is probed out to this many scaled units on each side
EDGE = 8  # ... and where the value rose, bisected this many times for a dip at the plateau's edge


@dataclass(frozen=True, slots=True, kw_only=True)
class Settings:
    """Tolerances of the direction-set search (see the module docstring)."""

    point_tolerance: float = 1e-6
    value_tolerance: float = 1e-10
    line_limit: int = 40
    # Ablations, for the benchmarks only: each switches off one idea of the method.
    parabolic: bool = True  # False: golden-section line searches
    replace_directions: bool = True  # False: keep the principal axes (no conjugate directions)
    reuse_curvature: bool = True  # False: every line search starts without a known curvature
    model_steps: bool = True  # False: no quadratic model (no model steps, no realignment)
    noise: float = 0.0  # the noise level the search works above (stated or estimated); 0: none
    notice: bool = True  # with no level: measure the noise at the first calm cycle (see above)

    @property
    def line_tolerance(self) -> float:
        """Resolution of each line search: finer than the point tolerance, so that a converged
        cycle moves less than it (common practice, no source)."""
        return 0.1 * self.point_tolerance


class _Endless(Exception):
    """A line search ran out to `FARTHEST` and was still going down."""


class _Tracker:
    """The current point and value, updated as soon as a better evaluation arrives, and the
    resolution the line searches of this cycle work to."""

    def __init__(
        self,
        u: np.ndarray,
        value: float,
        resolution: float,
        sample: Sample | None = None,
        noise: float = 0.0,
    ) -> None:
        self.u = u
        self.value = value
        self.resolution = resolution
        self.answered = 0  # finite values received in this cycle
        self.sample = sample  # every finite evaluation, for the quadratic model
        self.noise = noise  # > 0: the noisy mode (a lower single value proves nothing)
        self.heard = 0.0  # before it: the noise level relative to |f| a line's points showed
        self.hearing = False  # whether line searches read their own points' table
        self.worth = 0.0  # the least decrease worth another evaluation in a line search
        self.ample = 0.0  # the last cycle's decrease: more is not left to the resolution
        self.conditioned: tuple[np.ndarray, float] | None = None  # see `_condition`

    def seen(self, u: np.ndarray, value: float) -> None:
        """Take note of an evaluation: the new best point if it is lower (without noise), a
        sample anyway."""
        if value < self.value and self.noise == 0.0:
            self.u, self.value = u, float(value)
        if self.sample is not None:
            self.sample.add(u, float(value))


class _Trust:
    """The model's trust-region radius (scaled units), nan until the first trusted model."""

    def __init__(self) -> None:
        self.radius = math.nan
        self.hessian: np.ndarray | None = None  # the last model's, for the least-change fit
        self.ahead: Quadratic | None = None  # the model for the row's next step, when no fit
        self.carried: Quadratic | None = None  # the last determined model stepped on


def powell(space: Space, settings: Settings, start: np.ndarray | None = None) -> Search:
    """Minimize over ``space`` from its start (or ``start``, scaled coordinates)."""
    n = space.size
    u = np.zeros(n) if start is None else np.array(start, dtype=float)
    origin = u
    directions = principal_axes(n, FIRST_STEP)
    cycles = 0
    try:
        values = yield Batch(points=space.to_user(u)[None, :], purpose=Purpose.START)
    except Halt as halt:  # halted at the start point (-inf there, time up, Ctrl-C)
        return _outcome(_Tracker(u, math.inf, 0.0), halt.stop, cycles, directions, halt.reason)
    modelled = settings.model_steps and 1 < n <= LARGEST
    sample = Sample(n, SAMPLES * coefficients(n)) if modelled else None
    best = _Tracker(u, float(values[0]), _resolution(settings, FIRST_STEP), sample, settings.noise)
    if not math.isfinite(best.value):
        return _outcome(best, Stop.STALLED, cycles, directions, "the start point failed")
    if sample is not None:
        sample.add(u, best.value)
    trust = _Trust()
    listening = settings.notice and settings.noise == 0.0
    best.hearing = listening
    try:
        calm, fresh, quiet = 0, True, 0
        ends: list[float] = []  # the best value after each noisy cycle
        anchors: list[np.ndarray] = []  # and the best point
        realigned = False  # the last noisy cycle was quiet along a skewed set: axes taken
        last_drop = math.nan  # how much the cycle before lowered the value
        while True:
            cycles += 1
            best.answered = 0
            begun = best.u.copy()
            worked_at = best.resolution
            directions, moved, dropped = yield from _cycle(space, settings, best, directions)
            best.worth, last_drop = WORTH * _expected(dropped, last_drop), dropped
            best.ample = dropped  # a vertex promising more is never hidden by the resolution
            if best.answered == 0:
                reason = "every evaluation of a whole cycle failed: the best point is walled in"
                return _outcome(best, Stop.STALLED, cycles, directions, reason)
            settled = False
            if sample is not None:
                before = best.u.copy(), best.value
                # the model may go at least as far as the line searches just went
                trust.radius = max(trust.radius, _length(best.u - begun))
                for _ in range(MODEL_STEPS):
                    # whether the model's verdict may end the search (the cycle and the row
                    # so far moved less than the tolerances): then it comes from a fit
                    decisive = max(moved, float(np.abs(best.u - before[0]).max())) <= (
                        settings.point_tolerance
                    ) and dropped + before[1] - best.value <= settings.value_tolerance * max(
                        1.0, abs(best.value)
                    )
                    directions, settled, gained = yield from _model_step(
                        space, settings, best, directions, trust, decisive
                    )
                    if settled or not gained:
                        break
                trust.ahead = None  # the next row's model is fitted to the cycle's points too
                moved = max(moved, float(np.abs(best.u - before[0]).max()))
                dropped += before[1] - best.value
            small = moved <= settings.point_tolerance and dropped <= (
                settings.value_tolerance * max(1.0, abs(best.value))
            )
            if best.noise > 0.0:
                if moved == 0.0 and not fresh:
                    # stuck on a value the noise picked out, along directions grown too short:
                    # start again from the axes, at the first step's scale (does not count)
                    directions, fresh = _fresh_axes(best, anchors), True
                    continue
                fresh = moved == 0.0
                ends.append(best.value)
                anchors.append(best.u.copy())
                still = _promise(space, best, ends) <= best.noise
                if still and not realigned and condition(directions.vectors) > SQUARE:
                    # as without noise, a quiet cycle along a skewed set proves nothing; with
                    # noise the set skews more easily (a noisy step passes Powell's test).  Once
                    # in a row: the next quiet cycle counts, so the search ends.
                    directions, fresh, quiet = _fresh_axes(best, anchors), True, 0
                    realigned = True
                    continue
                realigned = realigned and still
                quiet = quiet + 1 if still else 0
                if quiet >= QUIET:
                    yield from _finish(space, settings, best)
                    break
                best.resolution = _resolution(settings, moved)
                continue
            ending = small and settled  # the model agrees: nothing left beyond the tolerances
            # a cycle whose line searches could not see a move of the point tolerance proves
            # nothing about the point: it may count towards the calm, never end the search alone
            resolved = worked_at <= settings.point_tolerance
            crawl = moved <= settings.point_tolerance and resolved
            # how far the set is from orthogonal, for the two resets below (once per cycle)
            skew = math.inf if ending else _condition(best, directions.vectors)
            if crawl and not ending and not fresh and skew > SKEWED:
                # A calm cycle along a nearly dependent set proves nothing: it may have missed a
                # valley that no direction points along.  Nor does one that still lowers the
                # value by creeping less than the point tolerance (Meyer's problem without the
                # model crept so for 3000 cycles).  Start again from orthogonal axes, measuring
                # their curvatures afresh: those the skewed set implies are the ones that missed
                # the valley (with them Meyer's problem stopped at 89.13 instead of 87.95).
                axes = principal_axes_of_estimate(directions) or principal_axes(n, FIRST_STEP)
                directions = DirectionSet(
                    vectors=axes.vectors, curvatures=np.full(n, math.nan), steps=axes.steps
                )
                fresh, calm = True, 0
                continue
            falling = dropped > FALLING * abs(best.value + dropped)
            if not ending and not falling and skew > ALIGNED:
                # the principal axes of the Hessian the set implies, once every curvature is
                # known and the estimate is positive definite (else a curvature is nan and the
                # test below fails): orthogonal, and conjugate as far as the estimate is right (Brent 1973,
                # ch. 7, resets to them regularly, from memory); a set that skews along a curved
                # valley otherwise keeps line-searching across it.  Not where the estimate's
                # curvatures spread beyond SPREAD: there its flat axes are the least certain,
                # and the skewed set knows the valley better (Meyer's problem, MGH 10, took
                # 5673 evaluations instead of 3067 with such resets).  Nor after a cycle that
                # cut the value more than tenfold: its parabolas spanned more than a quadratic
                # describes, so their curvatures are no Hessian yet (such resets made Powell's
                # singular function, MGH 13, and Brown and Dennis, MGH 16, from 10 times their
                # starts miss 20 (n + 1) evaluations at a relative decrease of 1e-7)
                axes = principal_axes_of_estimate(directions)
                if axes is not None and axes.curvatures.max() <= SPREAD * axes.curvatures.min():
                    directions = axes
            if not ending:
                fresh = fresh and small
                calm = calm + 1 if small else 0
                # a cycle that moved less than its resolution makes the next one 100 times finer,
                # not at once as fine as the end needs (which cost cycles of long line searches)
                best.resolution = _resolution(settings, max(moved, best.resolution))
                ending = calm >= 2
            if ending and listening and not _rounding_only(settings, best):
                # before believing the calm, ask whether it is the noise's
                listening = False
                level = yield from _listen(space, settings, best, cycles)
                if level is not None:  # from now on the noisy mode
                    settings, best.noise, calm, fresh = floored(settings, level), level, 0, True
                    # curvatures measured by parabolas through noise are not to be reused
                    directions = DirectionSet(
                        vectors=directions.vectors, curvatures=np.full(n, math.nan),
                        steps=directions.steps,
                    )
                    continue
            if ending and best.heard > 0.0:
                # a line heard noise the table at the calm does not confirm (a kink): the line
                # searches resolved no finer than it, so the calm proves nothing yet; go on
                # without listening to lines
                best.heard, best.hearing, calm = 0.0, False, 0
                continue
            if ending and (resolved or settled):
                if best.noise == 0.0:
                    directions, escaped, flat = yield from _leave_plateau(
                        space, settings, best, directions, origin
                    )
                    if escaped:  # lower ground beyond a plateau: the search goes on from there
                        calm, fresh = 0, True
                        best.resolution = _resolution(settings, FIRST_STEP)
                        continue
                    if flat:
                        return _outcome(best, Stop.CONVERGED, cycles, directions, flat)
                break
    except Halt as halt:
        return _outcome(best, halt.stop, cycles, directions, halt.reason)
    except _Endless:
        reason = (
            f"the objective kept decreasing out to {FARTHEST:g} scaled units along a line: its "
            "minimum lies at infinity, or it is unbounded below"
        )
        return _outcome(best, Stop.STALLED, cycles, directions, reason)
    return _outcome(best, Stop.CONVERGED, cycles, directions, "")


def _cycle(
    space: Space, settings: Settings, best: _Tracker, directions: DirectionSet
) -> Generator[Batch, np.ndarray, tuple[DirectionSet, float, float]]:
    """One cycle: a line search along each direction, then Powell's replacement test."""
    u0, f0 = best.u.copy(), best.value
    largest, largest_drop = 0, 0.0
    last = 0.0  # the move of the cycle's last line search
    # what the line searches measure, as `DirectionSet.measured` records it, on the cycle's own
    # lists of plain floats (the line search's scalar arithmetic is then Python's, not numpy's:
    # the same doubles, a fraction of the time): one set is built per cycle, not one per line
    curvatures, steps = directions.curvatures.tolist(), directions.steps.tolist()
    reuse = settings.reuse_curvature
    for i, d in enumerate(directions.vectors):
        before = best.value
        measured = curvatures[i]
        step = steps[i]
        if math.isnan(measured):  # nothing measured here: the last move is
            step = max(step, min(last, SEEDED * step))  # a better guess of the scale
        result = yield from _line(space, settings, best, d, step, measured if reuse else math.nan)
        last = abs(result.point)
        if math.isfinite(result.curvature) and result.curvature > 0.0:
            curvatures[i] = result.curvature
        steps[i] = _next_step(result, settings)
        if before - best.value > largest_drop:
            largest, largest_drop = i, before - best.value
    directions = DirectionSet(
        vectors=directions.vectors, curvatures=np.array(curvatures), steps=np.array(steps)
    )
    overall = best.u - u0
    length = _length(overall)
    if settings.replace_directions and length > settings.line_tolerance:
        directions = yield from _replace(
            space, settings, best, directions, overall / length, length, f0, largest, largest_drop
        )
    if _condition(best, directions.vectors) > DEGENERATE:  # `directions.degenerate`
        directions = principal_axes_of_estimate(directions) or principal_axes(space.size, FIRST_STEP)
    moved = float(np.abs(best.u - u0).max())  # np.max's reduction, without its dispatch
    return directions, moved, f0 - best.value


def _replace(
    space: Space,
    settings: Settings,
    best: _Tracker,
    directions: DirectionSet,
    d: np.ndarray,
    length: float,
    f0: float,
    largest: int,
    largest_drop: float,
) -> Generator[Batch, np.ndarray, DirectionSet]:
    """Powell's test on the cycle's overall step ``length * d``; line search and swap if accepted."""
    lo, hi = space.segment(best.u, d)
    if hi < length:
        return directions  # the extrapolated point is infeasible: keep the set
    fn = best.value
    extrapolated = best.u + length * d
    values = yield Batch(points=space.to_user(extrapolated)[None, :], purpose=Purpose.EXTRAPOLATE)
    fe = float(values[0])
    if not powell_accepts(f0, fn, fe, largest_drop):
        best.seen(extrapolated, fe)
        return directions
    if best.sample is not None:
        best.sample.add(extrapolated, fe)
    known = {-length: f0, 0.0: fn, length: fe}
    result = yield from _line(space, settings, best, d, length, math.nan, known=known)
    return replaced(directions, largest, d, result.curvature, _next_step(result, settings))


def _line(
    space: Space,
    settings: Settings,
    best: _Tracker,
    d: np.ndarray,
    step: float,
    curvature: float,
    known: dict[float, float] | None = None,
) -> Generator[Batch, np.ndarray, Found]:
    """Line search from the current point along ``d``; moves ``best`` to its minimum."""
    base = best.u
    if space.unbounded:  # what the general case gives, without its calls
        lo, hi = -FARTHEST, FARTHEST
    else:
        lo, hi = space.segment(base, d)
        lo, hi = max(lo, -FARTHEST), min(hi, FARTHEST)
    tolerance = best.resolution
    if best.noise > 0.0 and curvature > 0.0:
        # probe far enough that the value changes by several noise levels; resolve no finer
        # than a change of a quarter of one (common practice, no source)
        reach = math.sqrt(NOISE_REACH * best.noise / curvature)
        step, tolerance = max(step, reach), max(tolerance, 0.25 * reach)
    heard = best.heard * abs(best.value) if best.noise == 0.0 else 0.0
    if heard > 0.0 and curvature > 0.0:  # as above, without the longer probes
        tolerance = max(tolerance, 0.25 * math.sqrt(NOISE_REACH * heard / curvature))
    search = line_search_floats(
        known if known is not None else {0.0: best.value},
        lo,
        hi,
        step=step,
        curvature=curvature,
        tolerance=tolerance,
        limit=settings.line_limit,
        parabolic=settings.parabolic,
        noise=best.noise,
        heard=heard,
        listen=best.hearing,
        worth=best.worth,
        ample=best.ample,
        finest=settings.line_tolerance,
    )
    evaluated: dict[float, np.ndarray] = {}  # t -> its point, so the minimum's is not made again
    # read once per line: nothing else runs while the line's generators wait
    to_user, row, send, isfinite = space.to_user, Batch.row, search.send, math.isfinite
    try:
        ts = next(search)
        while True:
            if len(ts) == 1:  # the rule: one point, without the loop over rows
                # a float times a vector costs less than a numpy scalar times it (the same product)
                t = ts[0]
                u = base + t * d
                # mapped as a vector (a new one nobody else holds), made the batch's row uncopied
                values = yield row(to_user(u), LINE)
                value = float(values[0])
                best.answered += isfinite(value)
                best.seen(u, value)
                evaluated[t] = u
                ts = send([value])
            else:
                us = base + np.array(ts)[:, None] * d
                values = yield Batch(points=space.to_user(us), purpose=Purpose.LINE)
                floats = values.tolist()
                for t, u, value in zip(ts, us, floats):
                    best.answered += math.isfinite(value)
                    best.seen(u, value)
                    evaluated[t] = u
                ts = search.send(floats)
    except StopIteration as stop:
        result: Found = stop.value
    if math.isfinite(result.heard) and result.value != 0.0:  # the noise follows |f| from here
        best.heard = result.heard / abs(result.value)
    if result.value <= best.value or best.noise > 0.0:  # noisy: the fitted minimum, even if higher
        # base + t d, the same product and sum as where it was evaluated
        u = evaluated.get(result.point)
        best.u, best.value = base + result.point * d if u is None else u, result.value
    if abs(result.point) >= 0.5 * FARTHEST:
        raise _Endless
    return result


def _flat(
    directions: DirectionSet, value: float, travelled: np.ndarray | None = None
) -> list[int]:
    """The directions along which the last line search could not tell its points apart: the
    parabola through points ``step`` apart changed by no more than ``FLAT`` roundings of the
    value (curvature * step² <= FLAT * eps * |f|), flattest first; then, given ``travelled``
    (the best point's offset from the start), those with no positive curvature measured along
    which the point has moved at least ``TRAVELLED`` scaled units.

    Such a direction is a plateau, not a minimum: the search stopped there because every value
    along it looked the same, e.g. where an exponential term of the objective has died out
    (Box's three-dimensional function, Moré, Garbow & Hillstrom 1981, no. 12, from its standard
    start: x2 runs out to 353, where exp(-t x2) no longer counts; there the values along x2 are
    equal to the last bit, so its parabola has no positive curvature at all).  A direction whose
    curvature was never measured (nan) and along which the point never moved is not taken for
    one: the zero columns of MGH 34 are flat for good.
    """
    rounding = FLAT * EPSILON * abs(value)
    spread = directions.curvatures * directions.steps**2
    flat = [int(i) for i in np.argsort(spread) if np.isfinite(spread[i]) and spread[i] <= rounding]
    if travelled is not None:
        moved = np.abs(directions.vectors @ travelled)
        flat += [
            int(i) for i in np.argsort(-moved)
            if np.isnan(spread[i]) and moved[i] >= TRAVELLED
        ]
    return flat


def _leave_plateau(
    space: Space, settings: Settings, best: _Tracker, directions: DirectionSet, origin: np.ndarray
) -> Generator[Batch, np.ndarray, tuple[DirectionSet, bool, str]]:
    """Look along each flat direction (`_flat`) for a value below what the value tolerance
    ignores (`_lower_ground`); line-search from the first such point.  Returns the direction set
    (that direction measured afresh), whether a lower point was found, and when none was, a
    note for the outcome that the point is not determined along a flat direction ("" when
    there was none).

    A smooth function's calm point with a flat direction is either on a plateau that stretches
    without end, or near the edge of one: the value sinks again farther out (Box's function sinks
    back to its minimum 0 when x2 returns to about 10; Box 1966)."""
    floor = settings.value_tolerance * max(1.0, abs(best.value))
    flat = _flat(directions, best.value, best.u - origin)
    for i in flat:
        d = directions.vectors[i]
        base, f0 = best.u.copy(), best.value
        found = yield from _lower_ground(space, best, d, f0 - floor, f0 + floor)
        if found is not None:
            # the best point is now the one found, at t along d from the plateau's point; the
            # line search goes on from it, knowing that point too
            t, value = found
            assert best.value == value and np.array_equal(best.u, base + t * d)
            result = yield from _line(
                space, settings, best, d, abs(t), math.nan, known={0.0: value, -t: f0}
            )
            directions = directions.measured(i, result.curvature, _next_step(result, settings))
            return directions, True, ""
    if not flat:
        return directions, False, ""
    note = (
        f"on a plateau: along {len(flat)} direction(s) of the set the value changes by no more "
        f"than rounding near the point, and no lower value was found out to {REACH:g} scaled "
        "units on either side; the point is not determined along them (the minimum may lie at "
        "infinity)"
    )
    return directions, False, note


def _lower_ground(
    space: Space, best: _Tracker, d: np.ndarray, below: float, above: float
) -> Generator[Batch, np.ndarray, tuple[float, float] | None]:
    """The first point ``(t, value)`` along ``d`` from ``best`` with a value below ``below``
    (the lower of the two sides when both are), or None.

    Doubling steps on both sides at once, from one scaled unit out to ``REACH``; a side ends at
    its bound or where the value rises above ``above``.  A side that rose is then bisected
    ``EDGE`` times between its last flat point and the risen one, for a dip at the plateau's edge
    (Box's function from 100 times its start: the plateau is x2 > 100 and the first step, to
    x2 = 0.4, passes the dip at 10 < x2 < 100).  Lower ground at a distance D costs about
    2 log2(D) evaluations; a plateau of no end 2 log2(REACH) + 2 = 22, and 2 EDGE more
    where both sides rose."""
    lo, hi = space.segment(best.u, d)
    ends = {-1.0: -lo, 1.0: hi}
    base = best.u.copy()
    flat_at = {-1.0: 0.0, 1.0: 0.0}
    risen_at: dict[float, float] = {}
    sides = [side for side in (-1.0, 1.0) if ends[side] > 0.0]
    t = 1.0
    while sides and t <= REACH:
        ts = [side * min(t, ends[side]) for side in sides]
        values = yield from _probe(space, best, base, d, ts)
        lowest = int(np.argmin(values))
        if values[lowest] < below:
            return ts[lowest], values[lowest]
        for side, x, value in zip(sides, ts, values):
            if value > above:
                risen_at[side] = x
            else:
                flat_at[side] = x
        sides = [side for side in sides if side not in risen_at and abs(flat_at[side]) < ends[side]]
        t *= 2.0
    for side, high in risen_at.items():
        low = flat_at[side]
        for _ in range(EDGE):
            middle = 0.5 * (low + high)
            (value,) = yield from _probe(space, best, base, d, [middle])
            if value < below:
                return middle, value
            low, high = (middle, high) if value <= above else (low, middle)
    return None


def _probe(
    space: Space, best: _Tracker, base: np.ndarray, d: np.ndarray, ts: list[float]
) -> Generator[Batch, np.ndarray, list[float]]:
    """Evaluate ``base + t d`` for each ``t`` (one batch); every value is seen by ``best``."""
    us = base + np.asarray(ts)[:, None] * d
    values = yield Batch(points=space.to_user(us), purpose=Purpose.LINE)
    for u, value in zip(us, values.tolist()):
        best.answered += math.isfinite(value)
        best.seen(u, value)
    return values.tolist()


def _condition(best: _Tracker, vectors: np.ndarray) -> float:
    """`directions.condition` of ``vectors``, kept with the set it was computed for (the
    arrays of a set are never changed in place): the end of a cycle and the loop after it ask
    about the same set, and an SVD costs more than the rest of a line search at n = 10."""
    known = best.conditioned
    if known is not None and known[0] is vectors:
        return known[1]
    value = condition(vectors)
    best.conditioned = vectors, value
    return value


def _length(v: np.ndarray) -> float:
    """`numpy.linalg.norm` of a vector bit for bit (the square root of its dot product with
    itself, as numpy computes it), without its checks (asked once or twice a cycle)."""
    return math.sqrt(float(v.dot(v)))


def _resolution(settings: Settings, moved: float) -> float:
    """Line-search resolution for the next cycle: a hundredth of the last cycle's move, never
    finer than the final resolution.  Far from the minimum a line search need not be exact
    (common practice, no source); near it the resolution reaches ``settings.line_tolerance``."""
    return max(settings.line_tolerance, 0.01 * moved)


def _expected(dropped: float, before: float) -> float:
    """The decrease the next cycle may be expected to bring: the last cycle's, shrunk by the
    ratio of the last two (linear convergence at the rate they showed), never more than the
    last; 0 (no expectation) after the first cycle or a cycle that gained nothing.

    The first cycle's decrease says nothing of the second's (on MGH 24 from its start the first
    cut the value from 2.34 to 0.0167, the second by 0.0145): line searches tied to it stopped far
    from their minima (common practice, no source)."""
    if not (dropped > 0.0 and before > 0.0):
        return 0.0
    return min(dropped, dropped * dropped / before)


def _next_step(result: Found, settings: Settings) -> float:
    """Probe length for the next search along the same direction: the last move, not too small."""
    return max(abs(result.point), 100.0 * settings.line_tolerance)


def _outcome(
    best: _Tracker, stop: Stop, cycles: int, directions: DirectionSet, reason: str
) -> Outcome:
    return Outcome(
        point=best.u.copy(),
        value=best.value,
        stop=stop,
        cycles=cycles,
        directions=directions.vectors.copy(),
        curvatures=directions.curvatures.copy(),
        reason=reason,
        noise=best.noise if best.noise > 0.0 else None,
    )


def _model_step(
    space: Space,
    settings: Settings,
    best: _Tracker,
    directions: DirectionSet,
    trust: _Trust,
    decisive: bool = False,
    fresh: bool = False,
) -> Generator[Batch, np.ndarray, tuple[DirectionSet, bool, bool]]:
    """Fit the quadratic model around the best point and evaluate its trust-region minimizer.

    Returns the direction set (realigned with the model's eigenvectors when the model predicted
    its step well and is convex), whether the model says the point is settled (its minimizer
    lies within the point tolerance and its predicted decrease within the value tolerance), and
    whether another model step may pay (this one succeeded, or completed a nearly determined
    model further).

    No fit is made when the last step agreed with its model (``trust.ahead``, see `AGREED`), nor,
    when the search moved less than its tolerances so far (``decisive``: the verdict may end it),
    when the last model stepped on (``trust.carried``), refreshed at the point, calls the point
    settled; ``fresh`` asks for a fit whatever they say (`model.refreshed` for both).
    """
    assert best.sample is not None
    n = space.size
    points = int(FITTED * coefficients(n))
    model, trust.ahead = (None if fresh else trust.ahead), None
    ahead = model is not None and bool((model.centre == best.u).all())  # numpy.array_equal's test
    verdict = False  # the model is only asked whether the point is settled
    if not ahead and decisive and not fresh and trust.carried is not None and best.noise == 0.0:
        # the cycle moved less than the tolerances: the last model with its linear part fitted
        # again here may say the point is settled without a fit (`model.refreshed`)
        model = refreshed(trust.carried, best.sample, best.u, points)
        ahead = verdict = model is not None
    if not ahead:
        if best.sample.size < coefficients(n) and trust.hessian is None and not GUESSES:
            return directions, False, False  # the fit could not be determined: it would not be used
        # the most coefficients a model may leave free and still be stepped on (`_nearly`): a
        # sample that leaves more is not fitted (`model.fit`)
        usable = None if trust.hessian is not None or GUESSES else (
            int(min(NEARLY * coefficients(n), MODEL_STEPS)) if best.noise == 0.0 else 0
        )
        model = fit(best.sample, best.u, points, trust.hessian, usable=usable)
    # a model the samples do not determine is stepped on only after a model predicted well, or
    # when it is nearly determined (`_nearly`)
    nearly = model is not None and _nearly(model, best, n)
    if model is None or not (
        math.isfinite(model.misfit) or trust.hessian is not None or GUESSES or nearly
    ):
        return directions, False, False
    if not math.isfinite(trust.radius):
        trust.radius = model.radius
    with np.errstate(all="ignore"):  # a model of values near overflow gives no usable step
        s = trust_step(model, trust.radius)
    if not np.isfinite(s).all():
        return directions, False, False
    target = np.clip(best.u + s, space.lower_u, space.upper_u)
    s = target - best.u
    predicted = -(model.gradient @ s + 0.5 * s @ model.hessian @ s)
    eigenvalues, vectors = eigen(model)  # trust_step's: made once per Hessian
    floor = settings.value_tolerance * max(1.0, abs(best.value))
    # only a model that fixes every coefficient (finite misfit) may help end the search
    convex = bool(eigenvalues[0] > 0.0) and model.misfit <= max(floor, SETTLE_MISFIT * abs(best.value))
    if float(np.abs(s).max()) <= settings.line_tolerance or not predicted > 0.0:
        if ahead and decisive and not (convex and predicted <= floor):
            # the verdict may end the search: a fit to the samples nearest the point gives it
            return (yield from _model_step(space, settings, best, directions, trust, decisive, True))
        if verdict:
            keep(best.sample, best.u, points, model)  # for `_rounding_only`
        return directions, convex and predicted <= floor, False
    if verdict:  # the refreshed model would step: the step is a fit's
        return (yield from _model_step(space, settings, best, directions, trust, decisive, True))
    if math.isfinite(model.misfit):
        trust.carried = model
    before = best.value
    values = yield Batch(points=space.to_user(target)[None, :], purpose="model")
    value = float(values[0])
    best.answered += math.isfinite(value)
    best.seen(target, value)
    if best.noise > 0.0 and value < before:
        best.u, best.value = target, value
    ratio = (before - value) / predicted if math.isfinite(value) else -math.inf
    length = math.sqrt(s.dot(s))  # numpy.linalg.norm's arithmetic
    if ratio >= 0.75 and length >= 0.5 * trust.radius:
        trust.radius = 2.0 * trust.radius
    elif ratio < 0.25:
        trust.radius = 0.5 * length
    trust.hessian = model.hessian if ratio >= 0.5 else None
    if abs(ratio - 1.0) <= AGREED and math.isfinite(model.misfit) and best.noise == 0.0:
        # the step's point agrees with the model: the next step is taken on the same model,
        # its linear part fitted again at that point, instead of a full refit (`model.refreshed`)
        trust.ahead = refreshed(model, best.sample, target, points)
    settled = convex and ratio > 0.0 and length <= settings.point_tolerance and predicted <= floor
    if ratio >= 0.5 and convex:
        directions = DirectionSet(
            vectors=vectors.T.copy(),
            curvatures=eigenvalues.copy(),
            steps=np.full(n, max(length, 100.0 * settings.line_tolerance)),
        )
    # a nearly determined model's step is worth following even when it predicted poorly: its
    # point completes the sample, so that the next fit may be determined
    return directions, settled, ratio >= 0.5 or (nearly and math.isfinite(value))


def _nearly(model: Quadratic, best: _Tracker, n: int) -> bool:
    """Whether a model the samples do not determine leaves so few of its coefficients free that
    a few model steps complete it: at most ``NEARLY`` of them, and no more than ``MODEL_STEPS``.

    The line searches' points lie on a few lines through a few points, which fix about one new
    coefficient per two evaluations; a model step's point lies off those lines (in general
    position) and fixes about one per evaluation (Conn, Scheinberg & Vicente 2009, ch. 3, on
    poised sets).  Stepping on such a model, and on again while the steps add points, completes
    it within the row of model steps instead of after another cycle: on random quadratics
    (n = 10 and 20, condition 1e3) the ratio of the evaluations to f <= 1e-8 f(x0) to the
    coefficients fell from 2.14 and 2.04 to 1.86 and 1.88 (benchmarks/results/model-steps.md).
    Not in the noisy mode, where a model is believed only as a regression over more points than
    coefficients (with it, a noisy quadratic in 6 variables spent its whole budget); and not
    below 6 variables, where ``NEARLY`` leaves no coefficient free (stepping on every
    undetermined model took a minimum at infinity for converged: same notes).
    """
    return best.noise == 0.0 and 0 < model.missing <= min(NEARLY * coefficients(n), MODEL_STEPS)


def _rounding_only(settings: Settings, best: _Tracker) -> bool:
    """True when the quadratic model of the samples nearest the best point fits them to within
    what the value tolerance ignores: the scatter of the values about it leaves no room for
    noise the search would need to know of, and no table is made."""
    if best.sample is None:
        return False
    n = best.sample.points.shape[1]
    # the cycle's last model step fitted the same samples, as a rule: its model serves
    model = fit(best.sample, best.u, int(FITTED * coefficients(n)), reuse=True)
    if model is not None and not model.fitted:  # a fit may yet find a closer quadratic
        if model.misfit <= settings.value_tolerance * max(1.0, abs(best.value)):
            return True
        model = fit(best.sample, best.u, int(FITTED * coefficients(n)))
    if model is None:
        return False
    return model.misfit <= settings.value_tolerance * max(1.0, abs(best.value))


def _listen(
    space: Space, settings: Settings, best: _Tracker, cycles: int
) -> Generator[Batch, np.ndarray, float | None]:
    """The noise level at the best point when it is above what the value tolerance ignores,
    else None (Moré & Wild 2011; the directions of the tables are drawn from the cycle count,
    so a replay draws the same).

    A jump or a kink along the table also gives a level; noise shows in most of the differences
    of the order the level came from, a kink or a jump in one or two (`noise.noise_like`).  A level
    whose differences do not look like noise is measured once more along another direction
    (noise fails the test about once in a hundred tables, a kink every time).  No retries with
    other steps: at the search's calm point a table that fails is rounding, not noise worth
    the name.
    """
    ignored = settings.value_tolerance * max(1.0, abs(best.value))
    for attempt in range(2):
        measured = yield from _table(space, best.u, np.random.default_rng([cycles, attempt]))
        if measured is None:
            return None
        found, values = measured
        if found.status == INTERRUPTED or not (found.detected and found.level > ignored):
            return None
        if noise_like(np.diff(values, n=found.order)):
            return float(found.level)
    return None


def _table(
    space: Space, u: np.ndarray, rng: np.random.Generator
) -> Generator[Batch, np.ndarray, tuple[NoiseLevel, np.ndarray] | None]:
    """One difference table at ``u`` (`noise.estimate`) and its values; None when the bounds
    leave no room for it.  The search's own step is tiny beside its scale, so the 10 % spread
    test of the table is left out: it would only reject a minimum whose value is of the size
    of the noise."""
    try:
        table = estimate(space, u, seed=rng, spread=None, retries=0)
        batch = next(table)
    except ProblemError:
        return None
    values = np.empty(0)
    try:
        while True:
            try:
                values = yield batch
            except Halt as halt:
                batch = table.throw(halt)
            else:
                batch = table.send(values)
    except StopIteration as done:
        return done.value, values


def _regression(best: _Tracker) -> tuple[Quadratic, np.ndarray] | None:
    """The least-squares quadratic over `FITTED` times as many samples as it has coefficients
    nearest the best point, when the samples fix every coefficient."""
    if best.sample is None:
        return None
    n = best.sample.points.shape[1]
    count = int(FITTED * coefficients(n))
    model = fit(best.sample, best.u, count)
    if model is None or not math.isfinite(model.misfit):
        return None
    # a sample that spans no more than the noise fixes nothing: its model is the noise's
    values = best.sample.values[: best.sample.size]
    distance = np.linalg.norm(best.sample.points[: best.sample.size] - best.u, axis=1)
    nearest = values[np.argsort(distance)[:count]]
    if float(np.ptp(nearest)) < HEARD * best.noise:
        return None
    if model.misfit > FITS * best.noise:
        return None  # the quadratic does not describe the sample: its promise is worth nothing
    with np.errstate(all="ignore"):
        s = trust_step(model, model.radius)
    if not np.all(np.isfinite(s)):
        return None
    # inside the region its sample spans, a quadratic that promises a thousand times more than
    # the sample's values differ by is extrapolating along what the sample leaves (nearly)
    # undetermined (common practice, no source); believed, one kept a search cycling over known
    # points for ever, promising a decrease of 4e7 on values of about 1e-3
    if -(model.gradient @ s + 0.5 * s @ model.hessian @ s) > BEYOND * float(np.ptp(nearest)):
        return None
    return model, s


def _promise(space: Space, best: _Tracker, ends: list[float]) -> float:
    """The decrease still to be had, by the regression model's step inside its sample (clipped
    to the bounds).  Where there is no such model, what the last ``WINDOW`` noisy cycles
    gained together (one cycle's gain is as noisy as two values; infinite until there are as
    many)."""
    found = _regression(best)
    if found is None:
        return ends[-WINDOW - 1] - ends[-1] if len(ends) > WINDOW else math.inf
    model, s = found
    s = np.clip(best.u + s, space.lower_u, space.upper_u) - best.u
    return float(-(model.gradient @ s + 0.5 * s @ model.hessian @ s))


def _finish(space: Space, settings: Settings, best: _Tracker) -> Generator[Batch, np.ndarray, None]:
    """Move ``best`` to the noisy search's answer: the regression model's minimizer inside its
    sample, evaluated, when the model is convex; else the sample point the model puts lowest."""
    found = _regression(best)
    if found is None:
        return
    model, s = found
    assert best.sample is not None
    if np.linalg.eigvalsh(model.hessian)[0] > 0.0:
        target = np.clip(best.u + s, space.lower_u, space.upper_u)
        if float(np.max(np.abs(target - best.u))) > settings.line_tolerance:
            values = yield Batch(points=space.to_user(target)[None, :], purpose="model")
            if math.isfinite(values[0]):
                best.sample.add(target, float(values[0]))
                best.u, best.value = target, float(values[0])
        return
    size = best.sample.size
    points = best.sample.points[:size]
    near = np.linalg.norm(points - best.u, axis=1) <= model.radius
    heights = np.where(
        near, [model.predict(p - best.u) for p in points], math.inf
    )
    k = int(np.argmin(heights))
    best.u, best.value = points[k].copy(), float(best.sample.values[k])


def _fresh_axes(best: _Tracker, anchors: list[np.ndarray]) -> DirectionSet:
    """Orthogonal directions for a noisy search that stalled or whose set skewed: the axes of
    the regression model (`_model_axes`) when the samples determine it, else `_way_axes`."""
    found = _model_axes(best)
    if found is not None:
        return found
    return _way_axes(best, anchors)


def _model_axes(best: _Tracker) -> DirectionSet | None:
    """The eigenvectors of the regression model's Hessian, with its positive eigenvalues as
    known curvatures (the idea of Brent 1973, ch. 7, for the free estimate); None while the
    samples do not fix every coefficient.  Along a curved valley the flattest of them points
    down the valley, which no coordinate axis does."""
    if best.sample is None:
        return None
    n = best.sample.points.shape[1]
    model = fit(best.sample, best.u, int(FITTED * coefficients(n)))
    if model is None or not math.isfinite(model.misfit):
        return None
    eigenvalues, vectors = np.linalg.eigh(model.hessian)
    return DirectionSet(
        vectors=vectors.T.copy(),
        curvatures=np.where(eigenvalues > 0.0, eigenvalues, math.nan),
        steps=np.full(n, FIRST_STEP),
    )


def _way_axes(best: _Tracker, anchors: list[np.ndarray]) -> DirectionSet:
    """Orthogonal directions for a noisy search that stalled: the way the best point went over
    the last `WINDOW` cycles first (along a curved valley it points down the valley: Powell's
    overall step over several cycles), completed to an orthogonal set; the axes when it has not
    moved."""
    n = best.u.size
    axes = principal_axes(n, FIRST_STEP)
    if not anchors:
        return axes
    way = best.u - anchors[max(0, len(anchors) - 1 - WINDOW)]
    length = float(np.linalg.norm(way))
    if not length > 0.0:
        return axes
    basis, _ = np.linalg.qr(np.column_stack([way / length, np.eye(n)]))
    return DirectionSet(
        vectors=basis[:, :n].T.copy(), curvatures=np.full(n, math.nan),
        steps=np.full(n, max(length, FIRST_STEP * 0.1)),
    )
