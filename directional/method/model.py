"""A quadratic model of the objective from the search's own evaluations, and its trust-region step.

Theory of operation.  Every value the direction-set search receives is a sample of the objective;
its line searches alone gather enough of them to determine a quadratic in ``n`` variables
(``(n + 1)(n + 2) / 2`` coefficients) after about ``n / 4`` cycles.  This module keeps those samples
(`Sample`, a capped store: the oldest points beyond the cap are dropped) and fits

    m(u + s) = c + gᵀs + ½ sᵀHs

by least squares to the ``points`` samples nearest to the centre ``u`` (regression with more points
than coefficients; Conn, Scheinberg & Vicente 2009, ch. 4), each weighted by its nearness to the
centre (locally weighted regression, Cleveland 1979): the samples the line searches left far
away still fix the coefficients, but the model is accurate where its step lands, which gives the
search a Newton-like finish instead of a further calm cycle.  Until the samples fix every
coefficient, the Hessian left free is the one nearest the last model's (least change, Powell 2004),
so that a model is useful after ``n + 1`` samples already.  The displacements are divided by the
sample's radius before the fit, so the design matrix's condition number measures the geometry of
the sample alone (its poisedness; ibid., ch. 3 and 6): a model whose scaled design is worse
conditioned than ``POISED`` is not trusted, and the search carries on without it.

A trusted model proposes the minimizer of ``m`` inside a ball of radius ``radius`` (the trust
region; Conn, Gould & Toint 2000, ch. 7), found from the eigendecomposition of ``H``: the step
``-(H + λI)⁻¹g`` with the least ``λ >= max(0, -λ_min(H))`` that keeps it inside the ball.  The
search then clips it to the bounds; it never evaluates outside them.

Cost.  A fit on ``p`` points costs ``O(p N²)`` with ``N`` the number of coefficients, so the search
fits once per cycle and after each successful model step whose point the model did not predict
well (after one it did, `refreshed` moves the model to the new point at ``O(p n²)``), on at most
``points`` samples (a multiple of ``N``), not while too few samples could determine it, nor
while they leave more coefficients free than a model step could use (`free` counts them from
one fit request to the next at a fraction of a fit's cost), and not at all above ``LARGEST``
variables: measured on the
benchmark's machine, the model adds about 20 µs of processor time per evaluation at n = 10,
0.3 ms at n = 30 and 3 ms at n = 50 (a fit there takes about 0.8 s).  It saves 3 to 11 times
the evaluations on random quadratics, so a run's own time is no larger with it up to n = 30
even for a free objective, and at n = 50 it pays once an evaluation costs more than about
0.7 ms; above 50 a fit takes seconds and its memory grows as
n⁴ (benchmarks/results/model-steps.md).

References
----------
.. [1] A. R. Conn, K. Scheinberg and L. N. Vicente, *Introduction to Derivative-Free
   Optimization*, SIAM, 2009, ch. 3-6.
.. [2] M. J. D. Powell, "Least Frobenius norm updating of quadratic models that satisfy
   interpolation conditions", *Mathematical Programming* 100 (2004) 183-215.
.. [3] A. R. Conn, N. I. M. Gould and Ph. L. Toint, *Trust-Region Methods*, SIAM, 2000, ch. 7.
.. [4] W. S. Cleveland, "Robust locally weighted regression and smoothing scatterplots",
   *Journal of the American Statistical Association* 74 (1979) 829-836.
.. [5] G. H. Golub and C. F. Van Loan, *Matrix Computations*, 4th ed., Johns Hopkins University
   Press, 2013, sec. 5.5 (rank-deficient least squares).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg
import scipy.linalg.lapack

LOCAL = 0.01  # sets the reach of the fit's weights (see `_nearness`)
POISED = 1e12  # condition number of the scaled design matrix beyond which the fit is not trusted
LARGEST = 50  # above this many variables the model is switched off (its cost outgrows its use)
FIXED = 1e-12  # a combination of coefficients counts as fixed by the sample beyond this (`free`)
MARGIN = 2  # `fit` with ``usable`` fits anyway when the sample leaves at most this many more free
FAR = 8.0  # `free` tells nothing for points farther than this many radii from its first centre
SCREENED = 5  # `fit` with ``usable`` counts with `free` from this many variables on (see `fit`)


def coefficients(n: int) -> int:
    """Number of coefficients of a quadratic in ``n`` variables.

    >>> coefficients(2)
    6
    """
    return (n + 1) * (n + 2) // 2


class Sample:
    """The evaluated points (scaled coordinates) and their finite values, at most ``capacity``."""

    def __init__(self, n: int, capacity: int) -> None:
        self.points = np.empty((capacity, n))
        self.values = np.empty(capacity)
        self.size = 0
        self.next = 0  # where the next point goes once the store is full (oldest first out)
        self.added = 0  # points ever added
        self.last: tuple[tuple[int, int, bytes], Quadratic | None] | None = None  # see `fit`
        self.unfixed: _Unfixed | None = None  # see `free`

    def add(self, u: np.ndarray, value: float) -> None:
        if not math.isfinite(value):
            return
        size, capacity = self.size, len(self.values)
        if size < capacity:
            self.points[size] = u
            self.values[size] = value
            self.size = size + 1
        else:
            i = self.next
            self.points[i] = u
            self.values[i] = value
            self.next = (i + 1) % capacity
        self.added += 1


@dataclass(frozen=True, slots=True, kw_only=True)
class Quadratic:
    """``m(centre + s) = value + gradientᵀs + ½ sᵀ hessian s``; ``radius`` spans the sample."""

    centre: np.ndarray
    value: float
    gradient: np.ndarray
    hessian: np.ndarray
    radius: float
    misfit: float  # largest weighted residual (objective units); inf when not determined
    missing: int = 0  # Hessian coefficients (combinations of them) the sample leaves free
    fitted: bool = True  # False: carried over from a fit (`refreshed`)
    # the Hessian's eigendecomposition once `eigen` made it; models sharing a Hessian share it
    spectrum: list[np.ndarray] = field(default_factory=list, repr=False, compare=False)

    def predict(self, s: np.ndarray) -> float:
        return float(self.value + self.gradient @ s + 0.5 * s @ self.hessian @ s)


def refreshed(
    model: Quadratic, sample: Sample, centre: np.ndarray, points: int
) -> Quadratic | None:
    """``model``'s Hessian with the value and gradient fitted anew at ``centre``.

    The cheap part of a refit: the ``points`` samples nearest ``centre``, weighted as `fit`
    weighs them, fix the linear part by least squares while the second derivatives, which
    change slowly from one point to the next, are kept (the idea of the updates of Powell 2004,
    which change the model least).  ``O(p n²)`` against ``O(p N²)`` for a fit; the misfit,
    radius and poisedness test are `fit`'s.  A model that has just predicted the value at its
    step's point well has little to learn from it (a refit would change the coefficients by
    about the error there times the point's leverage), so a search may step on from there
    with it, as trust-region methods that update their model one point at a time do (Powell
    2004; Conn, Scheinberg & Vicente 2009, ch. 10); and a search that has moved less than its
    tolerances since the model was fitted may ask it whether the point is settled.  None where
    the linear part is not poised; a model that was not determined stays so (infinite misfit).

    >>> sample = Sample(1, 10)
    >>> for x in (-1.0, 0.0, 1.0, 2.0, 3.0):
    ...     sample.add(np.array([x]), (x - 2.0) ** 2)
    >>> q = Quadratic(centre=np.zeros(1), value=0.0, gradient=np.zeros(1),
    ...               hessian=np.array([[2.0]]), radius=1.0, misfit=0.0)
    >>> r = refreshed(q, sample, np.array([1.0]), 5)
    >>> round(r.value, 12), r.gradient.round(12), r.misfit < 1e-12
    (1.0, array([-2.]), True)
    """
    n = sample.points.shape[1]
    if sample.size < n + 1:
        return None
    u, values, distance = _nearest(sample, centre, points)
    radius = math.sqrt(float(distance.max()))
    if not radius > 0.0:
        return None
    near = _nearness(distance)
    rest = values - 0.5 * np.einsum("ij,ij->i", u @ model.hessian, u)
    offset = float(rest.min())
    linear = np.empty((len(u), n + 1))
    linear[:, 0] = near
    np.multiply(u / radius, near[:, None], out=linear[:, 1:])
    weighted = (rest - offset) * near
    try:
        basis, triangle = _qr(linear)
        singular = _singular_values(triangle)
        if singular[-1] <= singular[0] / POISED:
            return None
        line = _solve(triangle, basis.T @ weighted)
    except np.linalg.LinAlgError:
        return None
    misfit = float(np.abs(linear @ line - weighted).max())
    if not (np.isfinite(line).all() and math.isfinite(misfit)):
        return None
    return Quadratic(
        centre=centre.copy(),
        value=offset + float(line[0]),
        gradient=line[1:] / radius,
        hessian=model.hessian,
        radius=radius,
        misfit=misfit if math.isfinite(model.misfit) else math.inf,
        missing=model.missing,
        fitted=False,
        spectrum=model.spectrum,
    )


def fit(
    sample: Sample,
    centre: np.ndarray,
    points: int,
    prior: np.ndarray | None = None,
    *,
    reuse: bool = False,
    usable: int | None = None,
) -> Quadratic | None:
    """Least-squares quadratic through the ``points`` samples nearest ``centre``.

    With fewer samples than coefficients, or samples that do not fix every second derivative,
    the Hessian is the one closest to ``prior`` (zero when None) in the Frobenius norm among
    those that fit best: the least-change model of Powell (2004), the minimum-norm model of Conn,
    Scheinberg & Vicente (2009, ch. 5).  Such a model is not determined (infinite ``misfit``), and
    its ``missing`` counts the Hessian coefficients (independent combinations of them) that the
    sample leaves to the prior.  None when fewer than
    ``n + 1`` samples or samples that do not fix the linear part (scaled condition beyond
    `POISED`).

    ``reuse``: when the last fit of ``sample`` (or the model `keep` left) had the same samples,
    centre and ``points`` and its model was determined, that model is returned without a new
    fit, whatever the prior it was fitted with (a determined least-squares fit is unique: the
    prior changes it by rounding only); a search asks again at the end of a cycle.

    ``usable``: the most coefficients a model may leave free and still serve the caller (None:
    any number).  When the samples leave more than ``usable + MARGIN`` free (`free`, which
    costs a fraction of a fit), None at once: the fit would only have said so.  Not below
    `SCREENED` variables, where the counts cost more than the fits they spare (measured on the
    overhead benchmark's quadratics, 4000 evaluations: none spared at n = 2 and 3; at n = 4, 59
    fits of 0.14 ms spared for 11 ms of counting; at n = 5, 85 of 0.16 ms for 11 ms).
    """
    n = sample.points.shape[1]
    if sample.size < n + 1:
        return None
    key = (sample.added, points, centre.tobytes())
    if reuse and sample.last is not None and sample.last[0] == key:
        last = sample.last[1]
        if last is not None and math.isfinite(last.misfit):
            return last
    if usable is not None and n >= SCREENED and sample.size <= points:
        # a count kept from before only falls as points arrive: at or below the limit, fit
        known = sample.unfixed.count if sample.unfixed is not None else math.inf
        if known > usable + MARGIN:
            count = free(sample, centre)
            if math.isfinite(count) and count > usable + MARGIN:  # inf: not known, fit
                sample.last = key, None
                return None
    model = _fit(sample, centre, points, prior)
    sample.last = key, model
    return model


def keep(sample: Sample, centre: np.ndarray, points: int, model: Quadratic) -> None:
    """Let ``model`` answer `fit`'s ``reuse`` requests for the present samples, ``centre`` and
    ``points``, as if `fit` had made it (a model `refreshed` there, say)."""
    sample.last = (sample.added, points, centre.tobytes()), model


def _nearest(
    sample: Sample, centre: np.ndarray, points: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The ``points`` samples nearest ``centre`` (all of them when there are no more): their
    offsets from it, their values and their squared distances, in no particular order."""
    u = sample.points[: sample.size] - centre
    distance = np.einsum("ij,ij->i", u, u)
    values = sample.values[: sample.size]
    if sample.size > points:
        chosen = np.argpartition(distance, points - 1)[:points]
        u, values, distance = u[chosen], values[chosen], distance[chosen]
    return u, values, distance


def _fit(
    sample: Sample, centre: np.ndarray, points: int, prior: np.ndarray | None
) -> Quadratic | None:
    """`fit` itself, with at least ``n + 1`` samples."""
    n = sample.points.shape[1]
    u, values, distance = _nearest(sample, centre, points)
    radius = math.sqrt(float(distance.max()))
    offset = float(values.min())
    span = float(values.max()) - offset
    if not (radius > 0.0 and span > 0.0):
        return None
    d = u / radius
    rows, cols, _, weight = _layout(n)
    # each sample's equation is weighted by its nearness (see `_nearness`)
    near = _nearness(distance)
    products = d[:, rows]
    products *= d[:, cols]
    products *= _halves(n)  # ½ hᵢᵢ sᵢ²: the other columns' factor is 1 (exact)
    products *= near[:, None]
    linear = np.empty((len(d), n + 1))
    linear[:, 0] = near  # 1 · near
    np.multiply(d, near[:, None], out=linear[:, 1:])
    scaled = (values - offset) / span * near
    if prior is None:
        scaled_prior = np.zeros(len(rows))
        target = scaled  # less a product with zeros: the same values (``scaled`` >= 0)
    else:
        scaled_prior = prior[rows, cols] * radius**2 / span
        target = scaled - products @ scaled_prior
    try:
        basis, triangle = _qr(linear)
        singular = _singular_values(triangle)
        if singular[-1] <= singular[0] / POISED:
            return None
        if len(d) == n + 1:  # the linear part interpolates: nothing is left (rest is rounding)
            change, rank = np.zeros(len(rows)), 0
        else:
            # the part of the data the linear terms cannot explain fixes the change of the
            # Hessian; laid out by columns, as LAPACK reads it, so it is not copied again
            unweighted = products / weight
            rest = np.empty(unweighted.shape, order="F")
            np.subtract(unweighted, basis @ (basis.T @ unweighted), out=rest)
            # a complete orthogonal factorization (LAPACK gelsy) gives the same minimum-norm
            # solution as an SVD at a quarter of its cost (Golub & Van Loan 2013, sec. 5.5)
            change, rank = _gelsy(rest, target - basis @ (basis.T @ target), 1.0 / POISED)
    except (np.linalg.LinAlgError, ValueError):
        return None
    h_coefficients = scaled_prior + change / weight
    residual = scaled - products @ h_coefficients
    line = _solve(triangle, basis.T @ residual)  # the linear part, by the same QR
    determined = rank == len(rows) and len(d) >= coefficients(n)
    misfit = span * float(np.abs(linear @ line - residual).max())
    if not (np.isfinite(h_coefficients).all() and np.isfinite(line).all()):
        return None
    # the symmetric matrix from its upper triangle (+ 0.0: a zero is +0.0, as h + hᵀ - diag made it)
    h = h_coefficients[_symmetric(n)] + 0.0
    return Quadratic(
        centre=centre.copy(),
        value=offset + span * float(line[0]),
        gradient=span * line[1:] / radius,
        hessian=span * h / radius**2,
        radius=radius,
        misfit=misfit if determined else math.inf,
        missing=len(rows) - rank,
    )


class _Unfixed:
    """The quadratics that vanish on every stored point: an orthonormal basis of their
    coefficients (columns of ``basis``) in the frame ``(u - origin) / scale``, after the first
    ``seen`` points; ``top`` is the largest pivot met, the scale of `FIXED`."""

    def __init__(
        self, origin: np.ndarray, scale: float, basis: np.ndarray, seen: int, top: float
    ) -> None:
        self.origin, self.scale, self.basis, self.seen, self.top = origin, scale, basis, seen, top

    @property
    def count(self) -> int:
        return self.basis.shape[1]


def free(sample: Sample, centre: np.ndarray) -> float:
    """How many coefficients of a quadratic (independent combinations of them) all the stored
    points leave free, or ``inf`` when it cannot be told cheaply.

    The count is the dimension of the quadratics that vanish on every point: the null space of
    the design matrix of the fit, which neither the fit's centre, its radius nor its weights
    change (they multiply the design by invertible matrices), so it is kept from one call to
    the next and each new point only restricts it: ``k`` new points cost a QR factorization of
    a ``k`` × (count) matrix instead of a fit (Golub & Van Loan 2013, sec. 5.4, QR with column
    pivoting).  Where the fit's linear part is poised the count is the fit's ``missing``: on the
    random quadratics of the overhead benchmark (n = 10; 147 fit requests) the pivots of the
    combinations counted free are rounding (below 1e-16 of the largest), those counted fixed
    3.5e-9 or more, and every count equals the fit's.
    ``inf`` once a point was dropped (the store is full) or lies farther than `FAR` radii of the
    first call from its centre (the basis is then ill-scaled for it).
    """
    if sample.added != sample.size:
        sample.unfixed = None
        return math.inf
    unfixed = sample.unfixed
    if unfixed is None:
        u = sample.points[: sample.size] - centre
        scale = math.sqrt(float(np.einsum("ij,ij->i", u, u).max()))
        if not scale > 0.0:
            return math.inf
        q, pivots = _pivoted_qr(_features(u / scale).T)
        top = float(pivots[0])
        if not (math.isfinite(top) and top > 0.0):
            return math.inf
        rank = int(np.count_nonzero(pivots > FIXED * top))
        unfixed = _Unfixed(centre.copy(), scale, q[:, rank:], sample.size, top)
    elif unfixed.seen < sample.size and unfixed.count > 0:
        y = (sample.points[unfixed.seen : sample.size] - unfixed.origin) / unfixed.scale
        if not float(np.abs(y).max()) <= FAR:  # far (or not finite): start again next time
            sample.unfixed = None
            return math.inf
        features = _features(y)
        # the rows' lengths as numpy.linalg.norm(features, axis=1) computes them, without its
        # dispatch (the same arithmetic: the square root of the sums of the squares)
        lengths = np.sqrt(np.add.reduce(features * features, axis=1))
        unfixed.top = max(unfixed.top, float(lengths.max()))
        q, pivots = _pivoted_qr((features @ unfixed.basis).T)
        rank = int(np.count_nonzero(pivots > FIXED * unfixed.top))
        unfixed.basis = unfixed.basis @ q[:, rank:]
    unfixed.seen = sample.size
    sample.unfixed = unfixed
    return float(unfixed.count)


def _pivoted_qr(a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The square orthogonal factor of the QR factorization of ``a`` with column pivoting, and
    the magnitudes of the diagonal of its triangle (non-increasing): LAPACK's geqp3 and orgqr,
    as ``scipy.linalg.qr(a, pivoting=True)`` calls them (the same factors bit for bit), without
    its checks and work-size queries."""
    m, n = a.shape
    factor, form, factor_work, form_work = _qr_routines(m, n)
    reflectors, _, tau, _, info = factor(a, factor_work)
    if info != 0:
        raise ValueError(f"LAPACK geqp3 failed: {info}")
    k = min(m, n)
    square = np.zeros((m, m), order="F")
    square[:, :k] = reflectors[:, :k]
    q, _, info = form(square, tau[:k], form_work, True)
    if info != 0:
        raise ValueError(f"LAPACK orgqr failed: {info}")
    return q, np.abs(np.diagonal(reflectors))


@functools.lru_cache(maxsize=64)
def _qr_routines(m: int, n: int) -> tuple[object, object, int, int]:
    """LAPACK's double-precision geqp3 and orgqr and their work sizes for an ``m`` × ``n``
    matrix and its ``m`` × ``m`` orthogonal factor (queried as `scipy.linalg.qr` does)."""
    probe = np.empty((1, 1))
    factor, form = scipy.linalg.lapack.get_lapack_funcs(("geqp3", "orgqr"), (probe,))
    k = min(m, n)
    factor_work = int(factor(np.zeros((m, n), order="F"), -1)[3][0])
    form_work = int(form(np.zeros((m, m), order="F"), np.zeros(k), -1)[1][0])
    return factor, form, max(factor_work, 1), max(form_work, 1)


def _features(y: np.ndarray) -> np.ndarray:
    """Rows ``(1, y, products of y as in the fit)``: the fit's design matrix, unweighted."""
    n = y.shape[1]
    rows, cols, _, _ = _layout(n)
    # the products are made in a contiguous array and copied in: the same values, written
    # into the strided columns of ``out`` once instead of three times
    products = y[:, rows]
    products *= y[:, cols]
    products *= _halves(n)
    out = np.empty((len(y), 1 + n + len(rows)))
    out[:, 0] = 1.0
    out[:, 1 : n + 1] = y
    out[:, n + 1 :] = products
    return out


def _gelsy(a: np.ndarray, b: np.ndarray, cond: float) -> tuple[np.ndarray, int]:
    """The minimum-norm least-squares solution of ``a x = b`` and the rank, by LAPACK's gelsy:
    the routine, arguments and work size of ``scipy.linalg.lstsq(a, b, cond,
    lapack_driver="gelsy")``, so the same result bit for bit, without its checks and look-ups
    (a fit spends as long in them as in the factorization at n = 10)."""
    m, n = a.shape
    routine, lwork = _gelsy_routine(m, n, cond)
    if m < n:  # LAPACK writes the n unknowns over b
        b = np.concatenate((b, np.zeros(n - m)))
    # ``a`` is overwritten when it is laid out by columns (then it is not copied): the fit's is
    # a scratch array
    _, x, _, rank, info = routine(a, b, np.zeros((n, 1), dtype=np.int32), cond, lwork, True, False)
    if info < 0:
        raise ValueError(f"illegal value in argument {-info} of LAPACK gelsy")
    return x[:n], int(rank)


@functools.lru_cache(maxsize=64)
def _gelsy_routine(m: int, n: int, cond: float) -> tuple[object, int]:
    """LAPACK's double-precision gelsy and its work size for an ``m`` × ``n`` system (as
    `scipy.linalg.lstsq` computes it); cached, the fits of one run having few distinct shapes."""
    routine, query = scipy.linalg.lapack.get_lapack_funcs(
        ("gelsy", "gelsy_lwork"), (np.empty((1, 1)), np.empty(1))
    )
    work, info = query(m, n, 1, cond)
    if info != 0:
        raise ValueError(f"LAPACK gelsy's work size query failed: {info}")
    return routine, int(work)


def _nearness(distance: np.ndarray) -> np.ndarray:
    """Weights of the samples in the fit, from their squared distances to the centre.

    Locally weighted least squares (Cleveland 1979): ``(1 + d² / (LOCAL · median d²))⁻²``, 1 at
    the centre and about ``LOCAL²`` at the median distance, so that the model is accurate where
    its step lands even when the far samples see the objective's higher-order terms.  The weight
    falls as ``d⁻⁴``, faster than a far sample's quadratic terms grow (``d²``): a weight falling
    only as ``d⁻²`` left the far samples as much say in the Hessian as the near ones.  The weights
    change neither which coefficients the sample determines nor a quadratic's fit.  Measured on
    the MGH benchmark (n ≤ 11): ``LOCAL`` = 0.01 lowered the tail and the evaluations spent;
    0.1 and 1 helped less (benchmarks/results/model-steps.md).
    """
    reach = LOCAL * _median(distance)
    if not reach > 0.0:
        return np.ones_like(distance)
    return (1.0 + distance / reach) ** -2.0


@functools.cache
def _layout(n: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Rows and columns of the Hessian's upper triangle, which of them lie on the diagonal, and
    the column weights of the fit: the Frobenius norm counts an off-diagonal coefficient twice,
    so its column is weighted by 1/sqrt(2).  Cached: the same for every fit in ``n`` variables."""
    rows, cols = np.triu_indices(n)
    diagonal = rows == cols
    weight = np.where(diagonal, 1.0, math.sqrt(2.0))
    for array in (rows, cols, diagonal, weight):
        array.flags.writeable = False
    return rows, cols, diagonal, weight


@functools.cache
def _symmetric(n: int) -> np.ndarray:
    """For each entry ``(i, j)`` of an ``n`` × ``n`` symmetric matrix, the index of its
    coefficient among the upper triangle's (`_layout`).  Cached, like `_layout`."""
    rows, cols, _, _ = _layout(n)
    index = np.empty((n, n), dtype=np.intp)
    index[rows, cols] = np.arange(len(rows))
    index[cols, rows] = np.arange(len(rows))
    index.flags.writeable = False
    return index


@functools.cache
def _halves(n: int) -> np.ndarray:
    """The factor of each product column of the fit's design (`_layout`'s order): ½ on the
    diagonal (½ hᵢᵢ sᵢ²), 1 elsewhere, so one multiplication scales them all (by 1: exactly)."""
    _, _, diagonal, _ = _layout(n)
    halves = np.where(diagonal, 0.5, 1.0)
    halves.flags.writeable = False
    return halves


# numpy's small dense linear algebra (qr, svd, solve, eigh) calls LAPACK through general
# machinery that costs more than the work itself at the model's sizes (about 4 to 10 µs a call
# at n = 10).  The helpers below call the same LAPACK routines with the same arguments and work
# sizes through scipy (bit for bit with numpy where the two packages' LAPACK builds agree, as
# here; a test holds them to numpy's results to rounding, since each package ships its own).


@functools.lru_cache(maxsize=64)
def _reduced_qr_routines(m: int, k: int) -> tuple[object, object, int, int]:
    """LAPACK's geqrf and orgqr for an ``m`` × ``k`` matrix (``m >= k``) and their work sizes."""
    probe = np.empty((1, 1))
    factor, form = scipy.linalg.lapack.get_lapack_funcs(("geqrf", "orgqr"), (probe,))
    factor_work = int(factor(np.zeros((m, k), order="F"), lwork=-1)[2][0])
    form_work = int(form(np.zeros((m, k), order="F"), np.zeros(k), lwork=-1)[1][0])
    return factor, form, max(factor_work, 1), max(form_work, 1)


def _qr(a: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``numpy.linalg.qr(a)`` (reduced; ``a`` has at least as many rows as columns) bit for bit:
    the orthonormal ``m`` × ``k`` factor and the upper triangle."""
    m, k = a.shape
    factor, form, factor_work, form_work = _reduced_qr_routines(m, k)
    reflectors, tau, _, info = factor(a, factor_work)
    if info != 0:
        raise np.linalg.LinAlgError(f"LAPACK geqrf failed: {info}")
    triangle = np.ascontiguousarray(reflectors[:k])
    triangle[_below(k)] = 0.0  # numpy.triu's zeros (+0.0)
    basis, _, info = form(reflectors, tau, form_work, True)
    if info != 0:
        raise np.linalg.LinAlgError(f"LAPACK orgqr failed: {info}")
    # laid out by rows, as numpy returns them: the products that follow read them so
    return np.ascontiguousarray(basis), triangle


@functools.lru_cache(maxsize=64)
def _below(k: int) -> tuple[np.ndarray, np.ndarray]:
    """The indices of the strictly lower triangle of a ``k`` × ``k`` matrix."""
    rows, cols = np.tril_indices(k, -1)
    rows.flags.writeable = cols.flags.writeable = False
    return rows, cols


@functools.lru_cache(maxsize=64)
def _svd_routine(k: int) -> tuple[object, int]:
    routine, query = scipy.linalg.lapack.get_lapack_funcs(
        ("gesdd", "gesdd_lwork"), (np.empty((1, 1)),)
    )
    work, info = query(k, k, compute_uv=0)
    if info != 0:
        raise np.linalg.LinAlgError(f"LAPACK gesdd's work size query failed: {info}")
    return routine, max(int(work), 1)


def _singular_values(a: np.ndarray) -> np.ndarray:
    """``numpy.linalg.svd(a, compute_uv=False)`` of a square matrix, bit for bit (gesdd)."""
    routine, work = _svd_routine(a.shape[0])
    _, singular, _, info = routine(a, 0, 0, work)
    if info != 0:
        raise np.linalg.LinAlgError("SVD did not converge")
    return singular


def _solve(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``numpy.linalg.solve(a, b)`` for one right-hand side, bit for bit (gesv)."""
    _, _, x, info = _solve_routine()(a, b)
    if info > 0:
        raise np.linalg.LinAlgError("Singular matrix")
    if info < 0:
        raise ValueError(f"illegal value in argument {-info} of LAPACK gesv")
    return x


@functools.cache
def _solve_routine() -> object:
    return scipy.linalg.lapack.get_lapack_funcs("gesv", (np.empty((1, 1)),))


@functools.lru_cache(maxsize=64)
def _eigh_routine(n: int) -> tuple[object, int, int]:
    routine, query = scipy.linalg.lapack.get_lapack_funcs(
        ("syevd", "syevd_lwork"), (np.empty((1, 1)),)
    )
    work, iwork, info = query(n, compute_v=1, lower=1)
    if info != 0:
        raise np.linalg.LinAlgError(f"LAPACK syevd's work size query failed: {info}")
    return routine, max(int(work), 1), max(int(iwork), 1)


def eigen(model: Quadratic) -> tuple[np.ndarray, np.ndarray]:
    """The eigenvalues (ascending) and eigenvectors (columns) of ``model``'s Hessian:
    ``numpy.linalg.eigh``'s bit for bit (LAPACK syevd on the lower triangle), made once per
    Hessian and kept with the model (read-only); a model `refreshed` from it shares them.

    >>> q = Quadratic(centre=np.zeros(2), value=0.0, gradient=np.zeros(2),
    ...               hessian=np.diag([3.0, 1.0]), radius=1.0, misfit=0.0)
    >>> eigen(q)[0]
    array([1., 3.])
    """
    if not model.spectrum:
        n = len(model.hessian)
        routine, work, iwork = _eigh_routine(n)
        eigenvalues, vectors, info = routine(model.hessian, 1, 1, work, iwork)
        if info != 0:
            raise np.linalg.LinAlgError("Eigenvalues did not converge")
        vectors = np.ascontiguousarray(vectors)  # by rows, as numpy's (the products read it so)
        eigenvalues.flags.writeable = False
        vectors.flags.writeable = False
        model.spectrum[:] = [eigenvalues, vectors]
    return model.spectrum[0], model.spectrum[1]


def _median(x: np.ndarray) -> float:
    """``numpy.median`` of a non-empty 1-d array, bit for bit, without its general machinery:
    the middle order statistic, or the mean of the two middle ones; nan when ``x`` holds one."""
    size = len(x)
    half = size // 2
    if size % 2:
        part = np.partition(x, [half, size - 1])
        middle = float(part[half])
    else:
        part = np.partition(x, [half - 1, half, size - 1])
        middle = float((part[half - 1] + part[half]) / 2)
    return math.nan if math.isnan(part[-1]) else middle


def trust_step(model: Quadratic, radius: float) -> np.ndarray:
    """The minimizer of the model inside the ball ``|s| <= radius`` (see the module docstring).

    >>> q = Quadratic(centre=np.zeros(2), value=0.0, gradient=np.array([-2.0, 0.0]),
    ...               hessian=np.diag([1.0, 4.0]), radius=1.0, misfit=0.0)
    >>> trust_step(q, 10.0), trust_step(q, 1.0).round(6)
    (array([2., 0.]), array([1., 0.]))
    """
    eigenvalues, vectors = eigen(model)
    g = vectors.T @ model.gradient

    def step(shift: float) -> np.ndarray:
        return -g / (eigenvalues + shift)

    low = max(0.0, -float(eigenvalues[0]))
    tiny = 1e-12 * max(1.0, float(np.abs(eigenvalues).max()))
    if low == 0.0 and eigenvalues[0] > tiny:
        s = step(0.0)
        if _length(s) <= radius:
            return vectors @ s
    # the boundary solution: |s(λ)| = radius, |s| falls as λ grows (bisection on a log scale)
    lo, hi = low + tiny, low + tiny + _length(g) / radius + tiny
    s = step(lo)
    if _length(s) <= radius:  # the hard case: g has no part along the lowest vector
        rest = math.sqrt(max(radius**2 - float(s @ s), 0.0))
        s[0] += rest
        return vectors @ s
    # step(mid) and its length inline, in one scratch vector: the same operations, in fewer
    # calls and no new arrays (the bisection takes about 45 of them)
    minus, add, divide, dot, sqrt = -g, np.add, np.divide, s.dot, math.sqrt
    for _ in range(100):
        mid = sqrt(lo * hi) if lo > 0.0 else 0.5 * (lo + hi)
        add(eigenvalues, mid, out=s)
        divide(minus, s, out=s)
        if sqrt(dot(s)) > radius:
            lo = mid
        else:
            hi = mid
        if hi - lo <= 1e-12 * hi:
            break
    return vectors @ step(hi)


def _length(v: np.ndarray) -> float:
    """The Euclidean length of a vector: ``numpy.linalg.norm`` bit for bit (the square root of
    ``v.dot(v)``, as it computes it), without its general machinery (the bisection of
    `trust_step` takes it up to a hundred times)."""
    return math.sqrt(v.dot(v))
