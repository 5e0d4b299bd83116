"""The direction set of Powell's method: replacement test, degeneracy, free curvature estimate.

Each direction is a unit row vector in scaled coordinates, with the curvature (second derivative)
and the step length measured by the last line search along it.  All functions are pure: they
return a new `DirectionSet`.

References
----------
.. [1] M. J. D. Powell, "An efficient method for finding the minimum of a function of several
   variables without calculating derivatives", *Computer Journal* 7 (1964) 155-162.
.. [2] W. I. Zangwill, "Minimizing a function without calculating derivatives", *Computer
   Journal* 10 (1967) 293-296 (the set can collapse without the replacement test).
.. [3] R. P. Brent, *Algorithms for Minimization without Derivatives*, Prentice-Hall, 1973, ch. 7
   (resetting the set to principal axes).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

DEGENERATE = 1e10  # condition number of the direction matrix beyond which the set is reset


@dataclass(frozen=True, slots=True, kw_only=True)
class DirectionSet:
    """Directions (rows, unit length), their measured curvatures (nan: unknown) and step lengths."""

    vectors: np.ndarray
    curvatures: np.ndarray
    steps: np.ndarray

    def measured(self, index: int, curvature: float, step: float) -> DirectionSet:
        """The set after a line search along direction ``index`` measured these quantities."""
        curvatures = self.curvatures.copy()
        steps = self.steps.copy()
        if math.isfinite(curvature) and curvature > 0.0:
            curvatures[index] = curvature
        steps[index] = step
        return DirectionSet(vectors=self.vectors, curvatures=curvatures, steps=steps)


def principal_axes(n: int, step: float) -> DirectionSet:
    """The starting set: the coordinate axes, curvatures unknown."""
    return DirectionSet(
        vectors=np.eye(n), curvatures=np.full(n, np.nan), steps=np.full(n, float(step))
    )


def powell_accepts(f0: float, fn: float, fe: float, largest_drop: float) -> bool:
    """Powell's (1964) test: should the cycle's overall direction replace another one?

    ``f0`` is the value at the start of the cycle, ``fn`` at its end, ``fe`` at the point
    extrapolated as far again, ``largest_drop`` the largest decrease of one line search in the
    cycle.  The new direction replaces the one of largest decrease when extrapolating helps and
    the cycle's decrease is owed mostly to that one direction; otherwise the set is kept, which
    keeps it from collapsing.

    A cycle that lowered f from 10 to 4, with 3 one step further on: if one line search gave 5
    of the 6, its direction is replaced; if the decrease was spread (at most 1 per search), the
    set is kept.

    >>> powell_accepts(10.0, 4.0, 3.0, 5.0)
    True
    >>> powell_accepts(10.0, 4.0, 3.0, 1.0)
    False
    """
    if not fe < f0:
        return False
    # Both sides are cubic in value differences: scale them to order one so that nothing
    # overflows for objectives of size 1e300.
    scale = max(f0 - fe, f0 - fn, largest_drop)
    a, b, c = (f0 - 2.0 * fn + fe) / scale, (f0 - fn - largest_drop) / scale, (f0 - fe) / scale
    return bool(2.0 * a * b * b < (largest_drop / scale) * c * c)


def replaced(
    directions: DirectionSet, index: int, vector: np.ndarray, curvature: float, step: float
) -> DirectionSet:
    """Drop direction ``index`` and append ``vector`` (Powell 1964) with what was measured on it."""
    keep = np.arange(len(directions.vectors)) != index
    return DirectionSet(
        vectors=np.vstack([directions.vectors[keep], vector]),
        curvatures=np.append(
            directions.curvatures[keep], curvature if curvature > 0.0 else np.nan
        ),
        steps=np.append(directions.steps[keep], step),
    )


def degenerate(directions: DirectionSet) -> bool:
    """True when the directions are close to linearly dependent (Brent 1973 ch. 7)."""
    return condition(directions.vectors) > DEGENERATE


def condition(vectors: np.ndarray) -> float:
    """The condition number of a square matrix in the 2-norm, the largest singular value over
    the smallest: `numpy.linalg.cond` bit for bit (inf for a singular matrix), without its
    general machinery (this runs once per cycle).

    >>> condition(np.array([[2.0, 0.0], [0.0, 0.5]]))
    4.0
    """
    if not np.isfinite(vectors).all():
        return float(np.linalg.cond(vectors))
    s = np.linalg.svd(vectors, compute_uv=False)
    top, low = float(s[0]), float(s[-1])
    return top / low if low != 0.0 else math.inf


def principal_axes_of_estimate(directions: DirectionSet) -> DirectionSet | None:
    """The eigenvectors of the free Hessian estimate, as a new orthogonal set (Brent 1973, ch. 7).

    When the set is conjugate the eigenvectors are both orthogonal and conjugate, and their
    eigenvalues are the curvatures along them, so nothing learned is lost.  Directions of
    non-positive estimated curvature get an unknown curvature.  None while a curvature is unknown.
    """
    h = hessian_estimate(directions)
    if h is None:
        return None
    eigenvalues, eigenvectors = np.linalg.eigh(h)
    curvatures = np.where(eigenvalues > 0.0, eigenvalues, np.nan)
    step = float(np.median(directions.steps))
    return DirectionSet(
        vectors=eigenvectors.T.copy(),
        curvatures=curvatures,
        steps=np.full(len(curvatures), step),
    )


def hessian_estimate(directions: DirectionSet) -> np.ndarray | None:
    """The Hessian in scaled coordinates implied by conjugate directions and their curvatures.

    If the rows ``v_i`` of ``V`` are conjugate (``V H Vᵀ = diag(c)``), then
    ``H = V⁻¹ diag(c) V⁻ᵀ``.  Returns None while a curvature is unknown.  The estimate is exact
    on a quadratic once the set is conjugate, and free: it costs no evaluation.
    """
    c = directions.curvatures
    if not np.all(np.isfinite(c)):
        return None
    try:
        inverse = np.linalg.inv(directions.vectors)
    except np.linalg.LinAlgError:
        return None
    h = inverse @ np.diag(c) @ inverse.T
    return 0.5 * (h + h.T)
