"""Is the objective smooth at the checked point?  Kinks and jumps from the check's own stencil.

Theory of operation.  A Hessian assumes a twice-differentiable objective; simulation costs are
often not: an absolute error or a maximum over time has a kink, a penalty that switches on or an
event that moves from one time step to the next has a jump.  The stencil of the curvature check
tells the two apart from a smooth function by how its differences scale with the step.

Along a line through the point, with values ``f(±t)`` at steps ``t, 2t`` (and ``4t``), the central
second difference ``D(t) = (f(t) - 2 f(0) + f(-t)) / t²`` is, as ``t`` shrinks,

- nearly constant for a smooth function (``D = f'' + O(t²)``),
- doubling with each halving of ``t`` at a kink (``D ≈ (g₊ - g₋) / t``, the slopes' difference),
- growing fourfold at a jump (``D ≈ J / t²``).

So curvature that concentrates at the point, ``|D(t)| > 1.5 |D(2t)|`` beyond the noise (1.5 lies
between the ratios 1 of a smooth function and 2 of a kink), is a change that no smooth function
with the curvature measured at the larger step can make within the smaller one.  Which kind, and
whether the point is still a minimum, is then read from the one-sided differences
``Δ±(t) = f(±t) - f(0)``: a side whose change does not grow with the step (``Δ(2t) < 1.5 Δ(t)``)
holds a jump; otherwise both slopes ``Δ±(t) / t`` pointing uphill make a corner minimum.
Differences below the noise (three standard deviations) count as zero: a really flat line is
smooth, never a kink; and each side's change must grow with the step as a kink, a jump or a
smooth side does (by a factor between about 1 and 4 per doubling): changes unrelated from one
step to the next are noise the stated level does not cover, not a kink.

Every kink surface through the point is crossed by at least one coordinate axis (the slope's jump
is normal to the surface), so the axes of the stencil detect it.  When more than one axis is
affected, the surface's normal is estimated from the slopes (`crease_candidates`) and the lines
along it and across it are probed to name the combination.

Everything here is pure: `examine` is a generator that yields the few extra points it needs as
batches and receives their values; the check (`directional.method.curvature`) runs it.
"""

from __future__ import annotations

import math
from collections.abc import Generator
from dataclasses import dataclass

import numpy as np

from directional.method.space import Space
from directional.records import Batch, Purpose

# Thresholds as powers of the ratio r of two steps (for r = 2: 1.5, between the ratio 1 of a smooth
# function and the ratio 2 of a kink; common practice, no source)
CONCENTRATION = math.log2(1.5)  # |D(t)| / |D(r t)| beyond r**this: concentrated at the point
GROWTH = math.log2(1.5)  # a one-sided change growing less than r**this from t to r t: a jump
SPREAD = 1.5  # steps closer than this ratio are not compared
AXIS = 0.99  # a direction with a component beyond this is an axis (already tested)
TINY = 1e-6  # breaks below this share of the value may be unstated noise (a note says so)
EPSILON = float(np.finfo(float).eps)


@dataclass(frozen=True, slots=True, kw_only=True)
class Finding:
    """What one line says: the kind of break and the one-sided differences it rests on.

    ``kind`` is "corner" (slopes differ, both uphill: still a minimum along the line), "kink"
    (slopes differ, one side goes down), "edge" (a jump up on one side, the other side not lower:
    the point is the low edge of the jump) or "jump" (a jump with a lower side).  ``slopes`` are
    the outward one-sided slopes ``(Δ₋(t) / t, Δ₊(t) / t)`` per unit of the line parameter,
    ``change`` the size of the jump (0 for a kink), ``step`` the ``t`` they were read at.
    """

    kind: str
    slopes: tuple[float, float]
    change: float
    step: float


def line_finding(t: np.ndarray, values: np.ndarray, f0: float, noise: float) -> Finding | None:
    """The break on a line through the point, or None where it is smooth (module docstring).

    ``t`` are positive steps (any order, ideally doubling), ``values`` an array of shape
    ``(len(t), 2)``: ``f(-t)`` and ``f(+t)``; ``noise`` the absolute noise level of a value.

    >>> t = np.array([1e-3, 2e-3, 4e-3])
    >>> f = np.abs(np.column_stack([-t, t]) - 0.0) + 0.0          # |x| at 0
    >>> line_finding(t, f, 0.0, 1e-16).kind
    'corner'
    >>> line_finding(t, np.column_stack([t, t]) ** 2, 0.0, 1e-16) is None   # x² at 0
    True
    """
    order = np.argsort(t)
    t = np.asarray(t, dtype=float)[order]
    values = np.asarray(values, dtype=float)[order]
    if len(t) < 2 or not (math.isfinite(f0) and np.all(np.isfinite(values))):
        return None
    keep = [0]
    for k in range(1, len(t)):
        if t[k] >= SPREAD * t[keep[-1]]:  # steps too close together cannot show a scaling
            keep.append(k)
    t, change = t[keep], values[keep] - f0  # columns: Δ₋, Δ₊
    for k in range(len(t) - 1):
        small, large = t[k], t[k + 1]
        d_small = (change[k, 0] + change[k, 1]) / small**2
        d_large = (change[k + 1, 0] + change[k + 1, 1]) / large**2
        noise_small = 3.0 * math.sqrt(6.0) * noise / small**2
        noise_large = 3.0 * math.sqrt(6.0) * noise / large**2
        if abs(d_small) <= noise_small:
            continue
        same_sign = np.sign(d_small) == np.sign(d_large) or abs(d_large) <= noise_large
        ratio = (large / small) ** CONCENTRATION  # 1.5 for doubling steps
        beyond = abs(d_small) - ratio * abs(d_large) > noise_small + ratio * noise_large
        if same_sign and beyond and _regular(change[k:], t[k:], 3.0 * math.sqrt(2.0) * noise):
            return _kind(change[k], change[k + 1], small, 3.0 * math.sqrt(2.0) * noise,
                         large / small)
    return None


def _regular(change: np.ndarray, t: np.ndarray, noise: float) -> bool:
    """Whether each side's changes grow from one step to the next as a kink, a jump or a smooth
    side can make them: by a factor between 1/2 (a jump, ~1) and r² + 1/2 (curvature, r²), with
    the same sign, for steps in the ratio r.  Noise that the stated level does not cover makes
    the changes at successive steps unrelated; it is not called a kink (common practice, no
    source)."""
    for k in range(len(t) - 1):
        r = t[k + 1] / t[k]
        for side in (0, 1):
            inner, outer = change[k, side], change[k + 1, side]
            if abs(inner) <= noise:
                continue
            ratio = outer / inner
            if not 0.5 <= ratio <= r * r + 0.5:
                return False
    return True


def _kind(inner: np.ndarray, outer: np.ndarray, t: float, noise: float, ratio: float) -> Finding:
    """Corner, kink, edge or jump from the one-sided changes at the steps ``t`` and ``ratio t``."""
    growth = ratio**GROWTH  # 1.5 for doubling steps
    jumped = [
        abs(inner[s]) > noise
        and np.sign(outer[s]) == np.sign(inner[s])
        and abs(outer[s]) < growth * abs(inner[s]) + noise
        for s in (0, 1)
    ]
    slopes = (float(inner[0] / t), float(inner[1] / t))
    if any(jumped):
        sizes = [float(inner[s]) for s in (0, 1) if jumped[s]]
        size = max(sizes, key=abs)
        others = [float(inner[s]) for s in (0, 1) if not jumped[s]]
        low = size > 0.0 and all(v >= -noise for v in others)
        return Finding(kind="edge" if low else "jump", slopes=slopes, change=size, step=t)
    uphill = inner[0] > noise and inner[1] > noise
    return Finding(kind="corner" if uphill else "kink", slopes=slopes, change=0.0, step=t)


def axis_lines(
    offsets: np.ndarray, values: np.ndarray, *, tolerance: float = 1e-12
) -> list[tuple[np.ndarray, np.ndarray]]:
    """The points of a stencil that lie on each coordinate axis, symmetric pairs only.

    ``offsets`` (m, k) are the evaluated steps from the point in scaled coordinates over the free
    parameters, ``values`` their values.  For axis i: the steps ``t > 0`` at which both ``-t e_i``
    and ``+t e_i`` were evaluated, and the values there, as `line_finding` takes them.
    """
    offsets = np.asarray(offsets, dtype=float)
    values = np.asarray(values, dtype=float)
    lines = []
    for i in range(offsets.shape[1]):
        others = np.delete(offsets, i, axis=1)
        on = np.all(np.abs(others) <= tolerance, axis=1) & (np.abs(offsets[:, i]) > tolerance)
        steps, found = offsets[on, i], values[on]
        order = np.argsort(np.abs(steps))
        groups: list[dict[int, tuple[float, float]]] = []
        for j in order:
            size = abs(float(steps[j]))
            if not groups or size > (1.0 + 1e-6) * next(iter(groups[-1].values()))[0]:
                groups.append({})
            groups[-1][1 if steps[j] > 0 else 0] = (size, float(found[j]))
        pairs = [g for g in groups if len(g) == 2]
        ts = np.array([0.5 * (g[0][0] + g[1][0]) for g in pairs])
        lines.append((ts, np.array([[g[0][1], g[1][1]] for g in pairs]).reshape(-1, 2)))
    return lines


def crease_candidates(
    findings: list[Finding | None], hessian: np.ndarray
) -> list[tuple[np.ndarray, np.ndarray]]:
    """Candidate normals of one kink surface through the point, each with its tangents (rows).

    Across a surface ``λ |n·u|`` the outward slopes along axis i add up to ``2 λ |n_i|``, so the
    flagged axes give the normal's components up to their signs.  The signs are those of the
    measured Hessian's cross terms (the stencil's cross differences carry ``sign(n_i n_j)``);
    with two axes flagged both sign patterns are tried, since a stencil straddling the kink may
    blur them.  The tangents span the rest of the flagged axes.  Fewer than two flagged axes:
    no candidate (the axis itself names the break).
    """
    k = len(findings)
    index = [i for i, f in enumerate(findings) if f is not None]
    if len(index) < 2:
        return []
    size = np.array([max(sum(findings[i].slopes), 0.0) for i in index])
    if not np.all(size > 0.0) or not np.all(np.isfinite(hessian)):
        return []
    cross = np.sign([hessian[index[0], i] for i in index[1:]])
    patterns = [np.concatenate([[1.0], np.where(cross == 0.0, 1.0, cross)])]
    if len(index) == 2:
        patterns.append(patterns[0] * np.array([1.0, -1.0]))
    candidates = []
    for signs in patterns:
        normal = np.zeros(k)
        normal[index] = signs * size
        normal /= np.linalg.norm(normal)
        _, _, vt = np.linalg.svd(normal[index][None, :], full_matrices=True)
        tangents = np.zeros((len(index) - 1, k))
        tangents[:, index] = vt[1:]
        candidates.append((normal, tangents))
    return candidates


def complement(directions: np.ndarray, k: int) -> np.ndarray:
    """An orthonormal basis (columns) of the directions orthogonal to the rows of ``directions``.

    Axis-aligned rows give the remaining axes themselves, so that the smooth part of a Hessian
    keeps its parameters as coordinates.
    """
    directions = np.asarray(directions, dtype=float).reshape(-1, k)
    if len(directions) == 0:
        return np.eye(k)
    axes = np.abs(directions) > AXIS
    if np.all(axes.sum(axis=1) == 1):
        keep = ~axes.any(axis=0)
        return np.eye(k)[:, keep]
    _, singular, vt = np.linalg.svd(directions, full_matrices=True)
    rank = int(np.sum(singular > 1e-10 * max(1.0, float(singular[0]))))
    return vt[rank:].T


# ----------------------------------------------------------------------------- the examination


Line = tuple[np.ndarray, np.ndarray]  # steps t > 0 and the values f(-t), f(+t) at them


@dataclass(frozen=True, slots=True, kw_only=True)
class Examined:
    """What `examine` found: the breaks (unit direction over the free parameters, finding), the
    basis and probe-measured curvatures of the smooth part (`_smooth_part`), a smooth direction
    that still goes down (or None), and a note for people ("" when there is nothing to say)."""

    breaks: list[tuple[np.ndarray, Finding]]
    basis: np.ndarray
    known: dict[int, tuple[float, float]]
    downhill: np.ndarray | None = None
    note: str = ""


def examine(
    space: Space,
    u0: np.ndarray,
    f0: float,
    free: np.ndarray,
    stencil: tuple[np.ndarray, np.ndarray],
    hessian: np.ndarray,
    *,
    noise: float | None,
) -> Generator[Batch, np.ndarray, Examined]:
    """Test the check's stencil for kinks and jumps, as a generator for the driver.

    ``stencil`` holds the points the check evaluated (user coordinates, rows) and their values;
    ``hessian`` the Hessian measured from them (scaled coordinates, free parameters).  The
    stencil's points on the axes are used as they are; an axis with one step only gets the half
    step (one batch); when more than one axis shows a break, the candidate normals of a kink
    surface and the lines along it (`crease_candidates`) are probed at two steps each way (one
    batch, purpose "smoothness").  Breaks below ``TINY`` of the value with no noise level stated
    are taken for unstated noise: left out, with a note.  `records.Halt` passes through.
    """
    level = 4.0 * EPSILON * abs(f0) if noise is None else float(noise)
    points, values = stencil
    offsets = (space.to_scaled(points) - u0)[:, free]
    lines = axis_lines(offsets, values)
    k = int(free.sum())
    short = [i for i, (t, _) in enumerate(lines) if len(t) == 1]
    if short:
        axes = np.eye(k)[short]
        halves = np.array([0.5 * lines[i][0][0] for i in short])
        extra = yield from _probe(space, u0, free, axes, halves, (1.0,))
        for i, line in zip(short, extra):
            lines[i] = (np.concatenate([line[0], lines[i][0]]),
                        np.concatenate([line[1], lines[i][1]]))
    findings = [line_finding(t, v, f0, level) for t, v in lines]
    flagged = np.array([f is not None for f in findings])
    breaks = [(np.eye(k)[i], f) for i, f in enumerate(findings) if f is not None]
    candidates = crease_candidates(findings, hessian)
    smooth: list[tuple[np.ndarray, Line]] = []  # probed directions found smooth
    if candidates:
        probes = np.vstack([np.vstack([n[None, :], t]) for n, t in candidates])
        smallest = np.array([t[0] if len(t) else np.nan for t, _ in lines])
        used = np.abs(probes) > 0.0
        sizes = np.array([1.0 / np.linalg.norm(v[u] / smallest[u]) for v, u in zip(probes, used)])
        extra = yield from _probe(space, u0, free, probes, sizes, (1.0, 2.0))
        found = [line_finding(*line, f0, level) for line in extra]
        row = 0
        for normal, tangents in candidates:
            first, rest = row, range(row + 1, row + 1 + len(tangents))
            row += 1 + len(tangents)
            if found[first] is not None and all(found[r] is None for r in rest):
                breaks = [(normal, found[first])]
                smooth = [(probes[r], extra[r]) for r in rest]
                break
    note = ""
    if breaks and noise is None and all(_tiny(f, f0) for _, f in breaks):
        largest = max(abs(f.change) or max(map(abs, f.slopes)) * f.step for _, f in breaks)
        note = (
            f"the values around the point jump or kink by up to {largest:.2g}, below a millionth "
            "of the value: taken for noise that was not stated and left out of the verdict (give "
            "noise=, a level or \"estimate\", to have the check judge it)"
        )
        breaks, smooth, flagged = [], [], np.zeros(k, dtype=bool)
    basis, known = _smooth_part(breaks, smooth, flagged, f0, level)
    return Examined(breaks=breaks, basis=basis, known=known,
                    downhill=_downhill(smooth, f0, level), note=note)


def _tiny(found: Finding, f0: float) -> bool:
    """A break whose size (the jump, or the slopes times the step) is below 1e-6 of the value."""
    size = abs(found.change) or max(abs(v) for v in found.slopes) * found.step
    return size < TINY * abs(f0)


def _downhill(smooth: list[tuple[np.ndarray, Line]], f0: float, level: float) -> np.ndarray | None:
    """The probed smooth direction along a crease that still goes down, if any (unit, free).

    A direction-set search can stop on a kinked valley whose floor no direction of its set
    follows: every line across the floor has its minimum on it.  Along the floor the objective is
    smooth, and a slope there whose parabola puts the minimum beyond the probe's step (or a
    curvature that is not positive) says the point is not a minimum: the check then escapes
    along it like along a direction of negative curvature.
    """
    best, steepest = None, 0.0
    for v, (t, values) in smooth:
        a, (back, forward) = float(t[0]), values[0]
        slope = (forward - back) / (2.0 * a)
        curvature = (forward + back - 2.0 * f0) / a**2
        if abs(forward - back) <= 3.0 * math.sqrt(2.0) * level:
            continue
        if curvature > 0.0 and abs(slope) <= curvature * a:
            continue
        if abs(slope) > steepest:
            best, steepest = -math.copysign(1.0, slope) * v, abs(slope)
    return best


def _smooth_part(
    breaks: list[tuple[np.ndarray, Finding]],
    smooth: list[tuple[np.ndarray, Line]],
    flagged: np.ndarray,
    f0: float,
    level: float,
) -> tuple[np.ndarray, dict[int, tuple[float, float]]]:
    """A basis (columns) of the directions the curvature is judged on, and the curvatures the
    probes measured along some of them, ``{column: (curvature, error)}``.

    Without breaks: every axis.  With breaks along axes: the other axes.  With breaks along
    probed combinations: the probed directions found smooth, and the axes no break touched.  A
    stencil whose points straddle a break mixes it into every entry it touches, so along a probed
    direction its own second difference is used, with ``|D(t) - D(2t)|`` plus the noise's share
    as the error bar.
    """
    k = len(flagged)
    if not breaks:
        return np.eye(k), {}
    if not smooth:
        return complement(np.array([v for v, _ in breaks]), k), {}
    columns = [v for v, _ in smooth] + [np.eye(k)[i] for i in np.flatnonzero(~flagged)]
    known = {}
    for column, (_, (t, values)) in enumerate(smooth):
        d = (values[:, 0] + values[:, 1] - 2.0 * f0) / t**2
        noise = 3.0 * math.sqrt(6.0) * level / t[0] ** 2
        known[column] = (float(d[0]), float(abs(d[0] - d[-1]) + noise))
    return np.array(columns).T, known


def _probe(
    space: Space,
    u0: np.ndarray,
    free: np.ndarray,
    directions: np.ndarray,
    sizes: np.ndarray,
    multiples: tuple[float, ...],
) -> Generator[Batch, np.ndarray, list[Line]]:
    """Evaluate ``u0 ± m s d`` for each direction d (rows, free coordinates) of size s, multiple m."""
    rows = [
        sign * m * s * d for d, s in zip(directions, sizes) for m in multiples for sign in (-1.0, 1.0)
    ]
    u = np.repeat(u0[None, :], len(rows), axis=0)
    u[:, free] += np.array(rows)
    values = yield Batch(points=space.to_user(u), purpose=Purpose.SMOOTHNESS)
    values = np.asarray(values, dtype=float).reshape(len(directions), len(multiples), 2)
    return [(np.array(multiples) * s, v) for s, v in zip(sizes, values)]
