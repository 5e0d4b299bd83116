"""The curvature check: verdicts against analytic Hessians, saddle and maximum escape, bounds.

Every expected verdict, eigenvalue, minimizer and minimum value below is analytic (worked out in
the comment beside it); the functions are textbook examples, not data.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import directional as dl
from directional.method import curvature, differences, hessian
from directional.method.search import Settings
from directional.method.space import build_space
from directional.records import Outcome, Stop, Verdict
from directional.run.driver import Driver

# --------------------------------------------------------------------------- helpers


def quadratic(hessian: np.ndarray, centre: np.ndarray):
    """f(x) = ½ (x - c)ᵀ H (x - c): its Hessian is H everywhere (analytic)."""

    def f(x: np.ndarray) -> float:
        d = x - centre
        return float(0.5 * d @ hessian @ d)

    return f


def rotation(n: int, seed: int) -> np.ndarray:
    q, r = np.linalg.qr(np.random.default_rng(seed).standard_normal((n, n)))
    return q * np.sign(np.diag(r))


def check_at(f, centre, method="extrapolated", names=None, noise=None):
    """Run the paid check at ``centre`` through a driver; centre entries of size 1 make the
    scaled coordinates equal the parameters (`directional.method.space`: scale = |start|)."""
    space = build_space(list(centre), names=names)
    driver = Driver(objective=f, budget=10_000)
    u0 = np.zeros(space.size)
    checked = driver.run(
        curvature.check_point(
            space, u0, f(np.asarray(centre, float)), None, check=method, noise=noise,
            active=np.zeros(space.size, bool),
        )
    )
    return checked, driver


def converged_at(point, value):
    """A converged outcome sitting at ``point`` (scaled coordinates), as a search would return."""
    n = len(point)
    return Outcome(
        point=np.asarray(point, float), value=value, stop=Stop.CONVERGED, cycles=1,
        directions=np.eye(n), curvatures=np.full(n, np.nan),
    )


# --------------------------------------------------------------------------- saddle and maximum


@pytest.mark.parametrize("check", [True, "quick"])
def test_a_saddle_trap_ends_at_a_minimum(check):
    # f = x² - y² + y⁴/4: grad = (2x, -2y + y³) = 0 at (0, 0) (saddle, Hessian diag(2, -2)) and
    # at (0, ±√2) where the Hessian is diag(2, 4) and f = -2 + 1 = -1 (analytic).
    f = lambda v: v[0] ** 2 - v[1] ** 2 + v[1] ** 4 / 4  # noqa: E731
    sol = dl.minimize(f, [1.0, 0.0], check=check)
    assert sol.verdict is Verdict.MINIMUM
    assert sol.point[0] == pytest.approx(0.0, abs=1e-6)
    assert abs(sol.point[1]) == pytest.approx(math.sqrt(2.0), abs=1e-6)
    assert sol.value == pytest.approx(-1.0, abs=1e-12)
    assert np.sort(sol.curvature.eigenvalues) == pytest.approx([2.0, 4.0], rel=1e-5)


def _diagonal_saddle(v: np.ndarray) -> float:
    # f = x² + y² - 3xy + (x + y)⁴/16.  With s = (x + y)/√2, d = (x - y)/√2:
    # f = -s²/2 + 5d²/2 + s⁴/4, a saddle at 0 (f = 0) whose negative curvature lies along the
    # diagonal while both axes see +2, and minima at d = 0, s = ±1: x = y = ±1/√2, f = -1/4.
    x, y = v
    return x * x + y * y - 3 * x * y + (x + y) ** 4 / 16


def test_search_alone_stops_on_the_diagonal_saddle():
    # Along either axis through 0 the function is t² + t⁴/16, minimal at 0: the line searches
    # cannot leave the saddle, so the unchecked search stops there.
    sol = dl.minimize(_diagonal_saddle, [0.0, 0.0], check=False)
    assert sol.verdict is Verdict.UNCHECKED
    assert sol.point == pytest.approx([0.0, 0.0], abs=1e-12)


@pytest.mark.parametrize("check", [True, "quick"])
def test_check_escapes_the_diagonal_saddle(check):
    sol = dl.minimize(_diagonal_saddle, [0.0, 0.0], check=check)
    assert sol.verdict is Verdict.MINIMUM
    assert sol.value == pytest.approx(-0.25, abs=1e-12)
    assert np.abs(sol.point) == pytest.approx([1 / math.sqrt(2)] * 2, abs=1e-6)
    assert sol.point[0] * sol.point[1] > 0
    assert any(note.startswith("escape 1: saddle") for note in sol.notes)
    # the Hessian at the minimum: -1/2·... in (s, d): diag(-1 + 3, 5) = diag(2, 5) (analytic)
    assert np.sort(sol.curvature.eigenvalues) == pytest.approx([2.0, 5.0], rel=1e-5)
    assert "escape 1" in sol.summary()


def test_no_escape_allowed_leaves_the_saddle_verdict():
    sol = dl.minimize(_diagonal_saddle, [0.0, 0.0], escapes=0)
    assert sol.verdict is Verdict.SADDLE
    assert sol.point == pytest.approx([0.0, 0.0], abs=1e-12)
    # eigenvalues of [[2, -3], [-3, 2]]: -1 and 5 (analytic)
    assert np.sort(sol.curvature.eigenvalues) == pytest.approx([-1.0, 5.0], rel=1e-6)


def _ring(v: np.ndarray) -> float:
    # f = (x² + y² - 1)²: a local maximum at 0 inside a ring of minima x² + y² = 1, f = 0, which
    # is flat along the ring (analytic).
    return (v[0] ** 2 + v[1] ** 2 - 1.0) ** 2


def _four_wells(v: np.ndarray) -> float:
    # f = (x² - 1)² + (y² - 1)²: a local maximum at 0 (f = 2, Hessian -4 I) and isolated minima
    # at (±1, ±1) with f = 0 and Hessian 8 I (analytic).
    return (v[0] ** 2 - 1.0) ** 2 + (v[1] ** 2 - 1.0) ** 2


@pytest.mark.parametrize("check", ["extrapolated", "quick"])
def test_a_maximum_is_recognised_and_escaped(check):
    space = build_space([0.0, 0.0])
    driver = Driver(objective=_four_wells, budget=5000)
    settled = driver.run(curvature.settle(
        space, Settings(), converged_at([0.0, 0.0], 2.0), check=check, escapes=3,
        noise=None,
    ))
    assert settled.escapes == 1
    assert settled.notes[0].startswith("escape 1: maximum at (x0=0, x1=0)")
    assert "(lower by " in settled.notes[0]  # the gain, not only two values that may print alike
    assert settled.verdict is Verdict.MINIMUM
    assert np.abs(settled.point) == pytest.approx([1.0, 1.0], abs=1e-6)
    assert settled.outcome.value == pytest.approx(0.0, abs=1e-12)
    assert settled.curvature.eigenvalues == pytest.approx([8.0, 8.0], rel=1e-5)


def test_a_maximum_with_no_escape_is_reported_as_maximum():
    space = build_space([0.0, 0.0])
    driver = Driver(objective=_four_wells, budget=5000)
    settled = driver.run(curvature.settle(
        space, Settings(), converged_at([0.0, 0.0], 2.0), check="quick", escapes=0,
        noise=None,
    ))
    assert settled.verdict is Verdict.MAXIMUM
    assert settled.curvature.eigenvalues == pytest.approx([-4.0, -4.0], rel=1e-5)
    assert settled.notes == ()


def test_minimize_from_a_local_maximum_ends_in_a_well():
    sol = dl.minimize(_four_wells, [0.0, 0.0])
    assert sol.verdict is Verdict.MINIMUM
    assert np.abs(sol.point) == pytest.approx([1.0, 1.0], abs=1e-6)
    assert sol.value == pytest.approx(0.0, abs=1e-12)


def test_escaping_a_maximum_onto_a_ring_of_minima_ends_flat_or_minimum():
    # Beside the ring, at distance d, the curvature along it is 8 d (analytic): positive just
    # outside, negative just inside; inside, the escape along the ring gains next to nothing
    # and the point counts as flat.  Either way the point lies on the ring with f = 0.
    space = build_space([0.0, 0.0])
    driver = Driver(objective=_ring, budget=5000)
    settled = driver.run(curvature.settle(
        space, Settings(), converged_at([0.0, 0.0], 1.0), check="extrapolated",
        escapes=3, noise=None,
    ))
    assert settled.notes[0].startswith("escape 1: maximum at (x0=0, x1=0)")
    assert np.hypot(*settled.point) == pytest.approx(1.0, abs=1e-6)
    assert settled.verdict in (Verdict.FLAT, Verdict.MINIMUM)


def test_a_ring_minimum_is_flat_along_the_ring():
    # on the ring the Hessian is 8 x xᵀ: zero curvature along the ring's tangent (analytic)
    checked, _ = check_at(_ring, [1.0, 0.0])
    assert checked.verdict is Verdict.FLAT
    assert checked.curvature.undetermined == ("1 x1",)


# --------------------------------------------------------------------------- analytic Hessians


@pytest.mark.parametrize(
    ("eigenvalues", "verdict"),
    [
        ([1.0, 3.0, 10.0], Verdict.MINIMUM),
        ([-1.0, 3.0, 10.0], Verdict.SADDLE),
        ([-1.0, -3.0, -10.0], Verdict.MAXIMUM),
        ([0.0, 3.0, 10.0], Verdict.FLAT),
    ],
)
@pytest.mark.parametrize("method", ["extrapolated", "quick"])
def test_verdicts_of_quadratics_with_chosen_eigenvalues(eigenvalues, verdict, method):
    q = rotation(3, seed=7)
    hessian = q @ np.diag(eigenvalues) @ q.T
    centre = np.array([1.0, -1.0, 1.0])
    checked, _ = check_at(quadratic(hessian, centre), centre, method=method)
    assert checked.verdict is verdict
    assert checked.curvature.hessian == pytest.approx(hessian, abs=1e-6)
    assert np.sort(checked.curvature.eigenvalues) == pytest.approx(sorted(eigenvalues), abs=1e-6)


def test_flat_names_the_undetermined_combination():
    # f = (k1 - k2)²: H = [[2, -2], [-2, 2]], null vector (1, 1)/√2: only k1 - k2 is determined
    f = lambda v: (v[0] - v[1]) ** 2  # noqa: E731
    checked, _ = check_at(f, [1.0, 1.0], names=["k1", "k2"])
    assert checked.verdict is Verdict.FLAT
    assert checked.curvature.undetermined == ("0.707 k1 + 0.707 k2",)


def test_flat_in_three_parameters_names_the_null_vector():
    # H = I - n nᵀ with n = (1, 2, -2)/3 has eigenvalues (0, 1, 1); its null vector is n
    n = np.array([1.0, 2.0, -2.0]) / 3.0
    hessian = np.eye(3) - np.outer(n, n)
    centre = np.array([1.0, 1.0, -1.0])
    checked, _ = check_at(quadratic(hessian, centre), centre, names=["a", "b", "c"])
    assert checked.verdict is Verdict.FLAT
    assert checked.curvature.undetermined == ("0.333 a + 0.667 b - 0.667 c",) or (
        checked.curvature.undetermined == ("-0.333 a - 0.667 b + 0.667 c",)
    )


@settings(max_examples=25, deadline=None)
@given(
    n=st.integers(1, 4),
    seed=st.integers(0, 10_000),
    magnitudes=st.lists(st.floats(0.2, 50.0), min_size=4, max_size=4),
    signs=st.lists(st.sampled_from([-1.0, 1.0]), min_size=4, max_size=4),
    method=st.sampled_from(["extrapolated", "quick"]),
)
def test_verdict_follows_the_signs_of_the_eigenvalues(n, seed, magnitudes, signs, method):
    # Sylvester's law of inertia: the signs of the eigenvalues decide the verdict (analytic)
    eigenvalues = np.array(magnitudes[:n]) * np.array(signs[:n])
    q = rotation(n, seed)
    hessian = q @ np.diag(eigenvalues) @ q.T
    centre = np.where(np.arange(n) % 2 == 0, 1.0, -1.0)
    checked, _ = check_at(quadratic(hessian, centre), centre, method=method)
    expected = (
        Verdict.MINIMUM if np.all(eigenvalues > 0)
        else Verdict.MAXIMUM if np.all(eigenvalues < 0)
        else Verdict.SADDLE
    )
    assert checked.verdict is expected
    assert np.sort(checked.curvature.eigenvalues) == pytest.approx(np.sort(eigenvalues), rel=1e-6)


# --------------------------------------------------------------------------- bounds, costs, batches


def test_a_parameter_on_its_bound_is_left_out_and_listed_active():
    # f = (x - 2)² + 3 (y - 1)² with x <= 1: the minimum is at (1, 1) with x on its bound;
    # the curvature of the free parameter y is 6 (analytic).
    f = lambda v: (v[0] - 2) ** 2 + 3 * (v[1] - 1) ** 2  # noqa: E731
    sol = dl.minimize(f, [0.0, 0.0], bounds=[(-1, 1), (-5, 5)], names=["x", "y"])
    assert sol.active == ("x",)
    assert sol.verdict is Verdict.MINIMUM
    assert sol.curvature.names == ("y",)
    assert sol.curvature.hessian == pytest.approx(np.array([[6.0]]), rel=1e-6)
    assert "on a bound: x" in sol.summary()


@pytest.mark.parametrize("n", [1, 2, 3, 5])
def test_the_quick_check_costs_at_most_2n2_plus_2n_plus_1(n):
    # a plain central-difference stencil, 2n² + 1 points, and the half steps along the axes that
    # the smoothness test reads (2n): common practice, no source
    f = lambda v: float(np.sum(np.arange(1, n + 1) * (v - 0.5) ** 2))  # noqa: E731
    sol = dl.minimize(f, np.zeros(n), check="quick")
    spent = sum(1 for e in sol.history if e.purpose == "hessian")
    assert 0 < spent <= 2 * n * n + 2 * n + 1
    assert sol.curvature.evaluations == spent
    assert sol.verdict is Verdict.MINIMUM


def test_the_stencil_goes_out_as_one_batch():
    # drive the check by hand (a fake partner, no driver): one batch, then the verdict
    hessian = np.array([[3.0, 1.0], [1.0, 2.0]])
    centre = np.array([1.0, 1.0])
    f = quadratic(hessian, centre)
    space = build_space(list(centre))
    for method, size in (("extrapolated", 6 * 4 + 1), ("quick", 2 * 4 + 2 * 2 + 1)):
        gen = curvature.check_point(
            space, np.zeros(2), 0.0, None, check=method, noise=None, active=np.zeros(2, bool)
        )
        batch = next(gen)
        assert batch.purpose == "hessian"
        assert len(batch.points) == size
        assert len({p.tobytes() for p in batch.points}) == size
        with pytest.raises(StopIteration) as done:
            gen.send(np.array([f(p) for p in batch.points]))
        assert done.value.value.verdict is Verdict.MINIMUM


def test_a_failed_stencil_point_leaves_the_point_unchecked():
    # the objective fails just beyond the minimum at x = 0.5: the stencil cannot be completed
    def f(v):
        if v[0] > 0.5 + 1e-9:
            raise RuntimeError("solver diverged")
        return (v[0] - 0.5) ** 2 + v[1] ** 2

    checked, _ = check_at(f, [0.5, 1.0])
    assert checked.verdict is Verdict.UNCHECKED
    assert "stencil evaluations failed" in checked.note


def test_check_false_keeps_the_free_estimate_and_spends_nothing():
    # on a quadratic the free estimate from conjugate directions is the Hessian (Powell 1964)
    hessian = np.array([[4.0, 1.0], [1.0, 2.0]])
    f = quadratic(hessian, np.array([0.3, -0.2]))
    sol = dl.minimize(f, [1.0, 1.0], check=False)
    assert sol.verdict is Verdict.UNCHECKED
    assert not any(e.purpose == "hessian" for e in sol.history)
    assert sol.curvature.source == "free"
    assert sol.curvature.hessian == pytest.approx(hessian, rel=1e-3)


def test_paid_check_keeps_the_free_estimate_beside_it():
    hessian = np.array([[4.0, 1.0], [1.0, 2.0]])
    sol = dl.minimize(quadratic(hessian, np.array([0.3, -0.2])), [1.0, 1.0])
    assert sol.curvature.source == "quick"  # the default's one stencil decides a clear minimum
    assert sol.curvature.free is not None and sol.curvature.free.source == "free"
    assert curvature.free_verdict(sol.curvature.free.hessian) is Verdict.MINIMUM


def test_log_scaled_parameters_are_reported_in_log_coordinates():
    # f = (ln k - ln 2)² + (m - 1)²: in search coordinates (ln k, m) the Hessian is diag(2, 2)
    f = lambda v: (math.log(v[0]) - math.log(2.0)) ** 2 + (v[1] - 1.0) ** 2  # noqa: E731
    start = [dl.Parameter("k", 1.0, 0.01, 100.0, scale="log"), dl.Parameter("m", 0.0, -5, 5)]
    sol = dl.minimize(f, start)
    assert sol.verdict is Verdict.MINIMUM
    assert sol.curvature.names == ("log(k)", "m")
    assert sol.curvature.hessian == pytest.approx(np.diag([2.0, 2.0]), abs=1e-5)


# --------------------------------------------------------------------------- steps and noise


@settings(max_examples=50, deadline=None)
@given(
    c=st.floats(1e-6, 1e8), noise=st.floats(1e-14, 1e-1), value=st.floats(-1e6, 1e6),
    method=st.sampled_from(["extrapolated", "quick"]),
)
def test_steps_never_go_below_what_the_noise_allows(c, noise, value, method):
    h = hessian.step_sizes(np.array([c]), value, noise, np.array([np.inf]), method)[0]
    smallest = h if method == "quick" else h / hessian.RATIO ** (hessian.STEPS - 1)
    capped = h >= hessian.NOISY_LARGEST * (1 - 1e-12)  # with a stated noise: the problem's size
    # 3 sigma of the noise in a second difference, sqrt(6) noise / h², is at most 1 % of c: the
    # difference f(x + h) - 2 f(x) + f(x - h) of values with independent noise of standard
    # deviation sigma has variance (1 + 4 + 1) sigma² (common practice, no source)
    assert capped or 3 * math.sqrt(6) * noise / smallest**2 <= 0.01 * c * (1 + 1e-9)


def test_a_stated_noise_level_makes_the_check_trustworthy():
    # x² + 2y² plus noise of standard deviation 1e-6: steps sized for the noise give MINIMUM
    rng = np.random.default_rng(3)
    f = lambda v: v[0] ** 2 + 2 * v[1] ** 2 + 1e-6 * rng.standard_normal()  # noqa: E731
    checked, _ = check_at(f, [1.0, -1.0], method="quick", noise=1e-6)
    assert checked.verdict is Verdict.MINIMUM
    assert np.sort(checked.curvature.eigenvalues) == pytest.approx([2.0, 4.0], rel=0.05)


# --------------------------------------------------------------------------- numdifftools adapter


def test_the_adapter_calls_numdifftools_once_per_stencil_point():
    calls = []

    def counting(v):
        calls.append(np.array(v))
        return float(v[0] ** 2 + 3 * v[0] * v[1])

    matrix, error = differences.hessian(counting, np.array([1e-2, 1e-2]))
    assert matrix == pytest.approx(np.array([[2.0, 3.0], [3.0, 0.0]]), abs=1e-8)
    assert error.shape == (2, 2)
    assert len(calls) == 6 * 4 + 1  # three stencils of 2n² points and the centre (n = 2)


def test_the_adapter_reads_both_result_shapes():
    class Info:
        error_estimate = np.ones((1, 1))

    class Named:
        estimate = np.full((1, 1), 2.0)
        error_estimate = np.zeros((1, 1))

    assert differences.fields((np.full((1, 1), 5.0), Info()))[0][0, 0] == 5.0
    assert differences.fields(Named())[0][0, 0] == 2.0


# --------------------------------------------------------------------------- arguments, summary


@pytest.mark.parametrize(
    ("key", "value"), [("check", "fast"), ("check", 2), ("escapes", -1), ("escapes", 1.5),
                       ("noise", -1.0), ("noise", "lots"), ("noise", math.inf)]
)
def test_bad_arguments_are_refused_before_any_evaluation(key, value):
    calls = []
    with pytest.raises(dl.ProblemError, match=key):
        dl.minimize(lambda v: calls.append(1) or 0.0, [1.0], **{key: value})
    assert not calls


def test_summary_shows_verdict_active_bounds_and_condition():
    f = lambda v: (v[0] - 2) ** 2 + 100 * (v[1] - 1) ** 2 + (v[2] + 1) ** 2  # noqa: E731
    sol = dl.minimize(f, [0.0, 0.0, 0.0], bounds=[(-1, 1), (-5, 5), (-5, 5)])
    text = sol.summary()
    assert "verdict: minimum" in text
    assert "on a bound: x0" in text
    # curvatures 200 and 2 of the free parameters: condition number 100 (analytic)
    assert "condition number 100" in text


@settings(max_examples=60, deadline=None)
@given(
    n=st.integers(min_value=1, max_value=6),
    seed=st.integers(min_value=0, max_value=2**32 - 1),
    zeros=st.booleans(),
)
def test_equilibration_brings_every_row_maximum_to_one(n, seed, zeros):
    """Ruiz (2001): after the scaling the largest entry of every nonzero row of |H| / (d dᵀ) is
    1, to the iteration's tolerance, whatever the scales of the entries; a zero row keeps 1.  And
    the sweeps are the plain ones, ``max(|H| / outer(d, d))`` row by row, bit for bit."""
    rng = np.random.default_rng(seed)
    h = rng.standard_normal((n, n)) * 10.0 ** rng.uniform(-6, 6, (n, n))
    h = h + h.T
    if zeros:
        h[0, :] = h[:, 0] = 0.0
    d = curvature.equilibration(h)
    rows = np.max(np.abs(h) / np.outer(d, d), axis=1)
    nonzero = np.any(h != 0.0, axis=1)
    assert np.allclose(rows[nonzero], 1.0, rtol=1e-5)
    assert np.all(d[~nonzero] == 1.0)
    plain = np.ones(n)
    for _ in range(60):
        step = np.sqrt(np.where((m := np.max(np.abs(h) / np.outer(plain, plain), axis=1)) > 0, m, 1))
        plain = plain * step
        if np.all(np.abs(step - 1.0) <= 1e-6):
            break
    assert np.array_equal(d, plain)
