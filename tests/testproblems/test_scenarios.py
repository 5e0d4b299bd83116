"""Checks of the demo scenarios' models: the batch bioreactor and the heater loop.

The models and their data are our own and invented (README, "directional demo"; each
examples/*/README.md says so); what is checked here
against the outside world is analytic: exact solutions of special cases, conservation laws,
steady states, an independent integrator, and the chi-square law of weighted residuals.
"""

from __future__ import annotations

import doctest
import math
from importlib import resources

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from scipy.integrate import solve_ivp

import directional as dl
from directional import Parameter, ProblemError, Verdict
from directional.testproblems import bioreactor, heater

TRUTH = np.array([bioreactor.TRUTH[name] for name in bioreactor.NAMES])
START = np.array([p.start for p in bioreactor.PARAMETERS])


# ----------------------------------------------------------------------------- bioreactor


def _rk4(params, times, x0, s0, step):
    """Classical fixed-step Runge-Kutta (Kutta 1901), written here independently of the module."""
    mu_max, ks, y, kd = params

    def f(state):
        x, s = state
        growth = mu_max * s / (ks + s) * x
        return np.array([growth - kd * x, -growth / y])

    out = [np.array([x0, s0])]
    state, t = np.array([x0, s0], dtype=float), 0.0
    for target in times[1:]:
        n = max(1, math.ceil((target - t) / step - 1e-9))
        h = (target - t) / n
        for _ in range(n):
            k1 = f(state)
            k2 = f(state + h / 2 * k1)
            k3 = f(state + h / 2 * k2)
            k4 = f(state + h * k3)
            state = state + h / 6 * (k1 + 2 * k2 + 2 * k3 + k4)
        t = target
        out.append(state)
    return np.array(out).T


def test_parameters_are_the_declared_ones():
    assert [p.name for p in bioreactor.PARAMETERS] == list(bioreactor.NAMES)
    assert all(isinstance(p, Parameter) for p in bioreactor.PARAMETERS)
    for p in bioreactor.PARAMETERS:
        assert p.lower < bioreactor.TRUTH[p.name] < p.upper
        if p.name in ("mu_max", "Ks", "kd"):
            assert p.scale == "log"


def test_start_is_a_guess_not_the_truth():
    ratio = np.maximum(START / TRUTH, TRUTH / START)
    assert np.all(ratio >= 1.5) and np.all(ratio <= 3.0)


def test_no_growth_gives_exponential_decay():
    # Analytic: with mu_max = 0, dX/dt = -kd X, so X = X0 exp(-kd t) and S stays at S0.
    times = np.linspace(0.0, 24.0, 13)
    kd = 0.07
    biomass, substrate = bioreactor.simulate((0.0, 2.5, 0.5, kd), times, x0=0.3, s0=12.0)
    np.testing.assert_allclose(biomass, 0.3 * np.exp(-kd * times), rtol=1e-7)
    np.testing.assert_allclose(substrate, 12.0, rtol=1e-12)


@settings(max_examples=25, deadline=None)
@given(
    mu_max=st.floats(0.01, 3.0),
    ks=st.floats(0.01, 50.0),
    y=st.floats(0.05, 1.0),
    x0=st.floats(0.01, 2.0),
    s0=st.floats(0.5, 30.0),
)
def test_mass_is_conserved_without_decay(mu_max, ks, y, x0, s0):
    # Analytic (Monod 1949 model): with kd = 0, d(X + Y S)/dt = mu X - mu X = 0.
    times = np.linspace(0.0, 24.0, 9)
    biomass, substrate = bioreactor.simulate((mu_max, ks, y, 0.0), times, x0=x0, s0=s0)
    total = x0 + y * s0
    np.testing.assert_allclose(biomass + y * substrate, total, rtol=1e-6, atol=1e-9)
    assert np.all(substrate > -1e-6 * s0)


@pytest.mark.parametrize("params", [TRUTH, START, (1.2, 0.3, 0.8, 0.1)])
def test_solver_agrees_with_fixed_step_rk4(params):
    # General-purpose check: an independent RK4 with a small step (local error O(h^5)).
    times = np.array(bioreactor.SAMPLE_TIMES)
    biomass, substrate = bioreactor.simulate(params, times)
    reference = _rk4(params, times, bioreactor.X0, bioreactor.S0, step=2e-3)
    np.testing.assert_allclose(biomass, reference[0], rtol=1e-6, atol=1e-6)
    np.testing.assert_allclose(substrate, reference[1], rtol=1e-6, atol=1e-6)


def test_time_zero_only_returns_initial_values():
    biomass, substrate = bioreactor.simulate(TRUTH, [0.0, 0.0], x0=0.4, s0=9.0)
    assert biomass.tolist() == [0.4, 0.4] and substrate.tolist() == [9.0, 9.0]


def test_data_file_says_invented_and_loads():
    text = resources.files(bioreactor.__package__).joinpath(bioreactor.DATA_FILE).read_text()
    first = text.splitlines()[0]
    assert first.startswith("#") and "invented" in first.lower()
    data = bioreactor.load_data()
    assert 12 <= data.times.size <= 16
    assert data.times[0] == 0.0 and 20.0 <= data.times[-1] <= 30.0
    assert np.all(np.diff(data.times) > 0)
    assert data.biomass.shape == data.substrate.shape == data.times.shape
    assert data.truth == dict(bioreactor.TRUTH)
    assert data.sigma_biomass == bioreactor.SIGMA_BIOMASS
    assert data.sigma_substrate == bioreactor.SIGMA_SUBSTRATE
    assert (data.x0, data.s0) == (bioreactor.X0, bioreactor.S0)


def test_data_file_is_what_the_seed_makes():
    made = bioreactor._parse(bioreactor.regenerate_data(), "regenerated")
    stored = bioreactor.load_data()
    np.testing.assert_array_equal(made.times, stored.times)
    np.testing.assert_allclose(made.biomass, stored.biomass, atol=1.001e-3)
    np.testing.assert_allclose(made.substrate, stored.substrate, atol=1.001e-3)


def test_residuals_at_truth_follow_chi_square():
    # Common practice, no source: sum of squares of m standardized Gaussian residuals is
    # chi-square with m degrees of freedom; the band is its 0.1 % and 99.9 % quantiles.
    r = bioreactor.residuals(TRUTH)
    m = 2 * bioreactor.load_data().times.size
    assert r.shape == (m,)
    total = float(r @ r)
    assert stats.chi2.ppf(0.001, m) < total < stats.chi2.ppf(0.999, m)
    assert math.isclose(bioreactor.misfit(TRUTH), total, rel_tol=1e-12)
    assert bioreactor.misfit(START) > 10 * total


def test_residuals_are_model_minus_data_over_sigma():
    data = bioreactor.load_data()
    biomass, substrate = bioreactor.simulate(TRUTH, data.times)
    shifted = bioreactor.Data(
        times=data.times,
        biomass=biomass - 2 * data.sigma_biomass,
        substrate=substrate + 3 * data.sigma_substrate,
        sigma_biomass=data.sigma_biomass,
        sigma_substrate=data.sigma_substrate,
        truth=data.truth,
    )
    r = bioreactor.residuals(TRUTH, shifted)
    n = data.times.size
    np.testing.assert_allclose(r[:n], 2.0, rtol=1e-12)
    np.testing.assert_allclose(r[n:], -3.0, rtol=1e-12)


def test_mapping_and_sequence_give_the_same_residuals():
    np.testing.assert_array_equal(
        bioreactor.residuals(dict(bioreactor.TRUTH)), bioreactor.residuals(TRUTH)
    )


def _reference_residuals(params, data):
    """Weighted residuals from scipy's DOP853 (Hairer, Nørsett & Wanner 1993) at rtol 1e-13."""
    result = solve_ivp(
        bioreactor._rates,
        (0.0, data.times[-1]),
        [data.x0, data.s0],
        method="DOP853",
        t_eval=data.times,
        args=tuple(params),
        rtol=1e-13,
        atol=1e-15,
    )
    return np.concatenate(
        [
            (result.y[0] - data.biomass) / data.sigma_biomass,
            (result.y[1] - data.substrate) / data.sigma_substrate,
        ]
    )


def _central_jacobian(function, point, h):
    columns = []
    for j in range(point.size):
        e = np.zeros(point.size)
        e[j] = h * point[j]
        columns.append((function(point + e) - function(point - e)) / (2 * e[j]))
    return np.array(columns).T


@pytest.mark.parametrize("point", [TRUTH, START])
def test_residuals_are_smooth_enough_for_finite_differences(point):
    # Computational noise in the sense of Moré & Wild 2011 (SIAM J. Sci. Comput. 33, 1292): how
    # much the solver's error changes between nearby points.  Measured against a much tighter
    # integration along a line of 21 points 1e-4 apart (relative); the module's tolerances keep
    # it near 1e-8 of the residual norm, the spread of scipy's LSODA near substrate depletion.
    data = bioreactor.load_data()
    direction = np.random.default_rng(0).normal(size=4)
    direction /= np.linalg.norm(direction)
    points = [point * (1 + 1e-4 * k * direction) for k in range(-10, 11)]
    error = np.array([bioreactor.residuals(q) - _reference_residuals(q, data) for q in points])
    size = np.linalg.norm(_reference_residuals(point, data))
    assert np.max(np.abs(error)) < 1e-7 * size
    assert np.max(np.ptp(error, axis=0)) < 5e-8 * size

    # So central differences with relative steps 1e-4 and 1e-5 give the Jacobian to 1e-4.
    reference = _central_jacobian(lambda q: _reference_residuals(q, data), point, 1e-5)
    for h in (1e-4, 1e-5):
        jacobian = _central_jacobian(bioreactor.residuals, point, h)
        assert np.max(np.abs(jacobian - reference)) < 1e-4 * np.max(np.abs(reference))


def test_misfit_is_finite_at_every_corner_of_the_bounds():
    corners = np.array(
        np.meshgrid(*[(p.lower, p.upper) for p in bioreactor.PARAMETERS], indexing="ij")
    ).reshape(4, -1).T
    values = [bioreactor.misfit(c) for c in corners]
    assert all(math.isfinite(v) and v > 0 for v in values)


def test_failed_integration_raises(monkeypatch):
    class Failed:
        success = False
        message = "step size too small"
        y = np.full((2, 3), np.nan)

    monkeypatch.setattr(bioreactor, "solve_ivp", lambda *args, **kwargs: Failed())
    with pytest.raises(bioreactor.IntegrationError, match="step size too small"):
        bioreactor.misfit(TRUTH)


@pytest.mark.parametrize(
    ("params", "match"),
    [
        ((0.4, 2.5, 0.5), "expected 4"),
        ((0.4, -1.0, 0.5, 0.02), "Ks"),
        ((0.4, 2.5, 0.0, 0.02), "Y"),
        ((-0.1, 2.5, 0.5, 0.02), "mu_max"),
        ((0.4, 2.5, 0.5, math.nan), "'kd'"),
        ({"mu_max": 0.4, "Ks": 2.5, "Y": 0.5}, "kd"),
    ],
)
def test_bad_parameters_are_named(params, match):
    with pytest.raises(ProblemError, match=match):
        bioreactor.simulate(params, [0.0, 1.0])


def test_bad_times_are_refused():
    with pytest.raises(ProblemError, match="times"):
        bioreactor.simulate(TRUTH, [0.0, 2.0, 1.0])


def test_bad_data_file_names_the_line(tmp_path):
    path = tmp_path / "culture.csv"
    good = bioreactor.regenerate_data().splitlines()
    bad = good[:14] + ["3,abc,1.0"] + good[15:]
    path.write_text("\n".join(bad) + "\n")
    with pytest.raises(ProblemError, match="line 15"):
        bioreactor.load_data(path)
    path.write_text("\n".join(line for line in good if "sigma_biomass" not in line) + "\n")
    with pytest.raises(ProblemError, match="sigma_biomass"):
        bioreactor.load_data(path)


# ----------------------------------------------------------------------------- heater


def test_zero_gains_stay_at_ambient():
    # Analytic: no power, no heat; the block stays at ambient and the error is the whole step.
    t, temperature, power = heater.simulate((0.0, 0.0))
    assert np.all(temperature == heater.HEATER.ambient)
    assert np.all(power == 0.0)
    assert t[-1] == heater.HEATER.duration
    assert heater.cost((0.0, 0.0)) == 1.0


@settings(max_examples=30, deadline=None)
@given(
    power=st.floats(0.0, 200.0),
    capacity=st.floats(10.0, 5000.0),
    loss=st.floats(0.05, 10.0),
    fraction=st.sampled_from([0.01, 0.05, 0.2]),
    lag=st.integers(0, 100),
)
def test_open_loop_matches_first_order_solution(power, capacity, loss, fraction, lag):
    # Analytic (Seborg et al. 2011, ch. 5-6): first order plus dead time under a power step,
    # T = Ta + (P/G) (1 - exp(-(t - theta) G / C)) for t >= theta; steady state Ta + gain * P.
    tau = capacity / loss
    step = fraction * tau
    plant = heater.Heater(
        capacity=capacity, loss=loss, step=step, delay=lag * step, duration=(lag + 3000) * step
    )
    t, temperature = heater.open_loop(power, plant)
    assert t.size == lag + 3001
    expected = plant.ambient + power / loss * -np.expm1(-np.clip(t - plant.delay, 0.0, None) / tau)
    np.testing.assert_allclose(temperature, expected, rtol=1e-9, atol=1e-9 * (1 + power / loss))
    if fraction >= 0.05:  # 150 or more time constants: exp(-150) is below rounding
        assert math.isclose(
            temperature[-1], plant.ambient + plant.gain * power, rel_tol=1e-12, abs_tol=1e-12
        )


def test_proportional_control_leaves_the_textbook_offset():
    # Analytic (Seborg et al. 2011, ch. 8): P-only control of a process with static gain K settles
    # at a fraction K Kp / (1 + K Kp) of the setpoint step; the dead time does not change it.
    kp = 0.5
    plant = heater.Heater(duration=40 * heater.HEATER.time_constant)
    _, temperature, power = heater.simulate((kp, 0.0), plant)
    loop = plant.gain * kp
    rise = (plant.setpoint - plant.ambient) * loop / (1 + loop)
    assert math.isclose(temperature[-1], plant.ambient + rise, rel_tol=1e-9)
    assert power.max() < plant.max_power  # never clipped, so the linear result applies


def test_integral_action_removes_the_offset():
    # Common practice, no source: integral action drives a stable loop's steady error to zero.
    plant = heater.Heater(duration=20 * heater.HEATER.time_constant)
    _, temperature, _ = heater.simulate((1.0, 0.005), plant)
    assert abs(temperature[-1] - plant.setpoint) < 1e-6


@settings(max_examples=30, deadline=None)
@given(kp=st.floats(0.0, 50.0), ki=st.floats(0.0, 1.0))
def test_power_stays_within_the_actuator_range(kp, ki):
    _, temperature, power = heater.simulate((kp, ki))
    assert np.all(power >= 0.0) and np.all(power <= heater.HEATER.max_power)
    assert np.all(np.isfinite(temperature))


def test_cost_is_finite_over_the_bounds():
    grids = [np.geomspace(p.lower, p.upper, 7) for p in heater.PARAMETERS]
    values = np.array([[heater.cost((kp, ki)) for ki in grids[1]] for kp in grids[0]])
    assert np.all(np.isfinite(values)) and np.all(values > 0)
    assert heater.cost([p.start for p in heater.PARAMETERS]) < 1.0


def test_best_gains_sit_on_the_kp_bound():
    # A coarse grid over the bounds (log spaced, as the parameters are searched), then a finer
    # scan of Ki at the best Kp: the minimum has Kp on its upper bound and Ki inside its bounds.
    kp_param, ki_param = heater.PARAMETERS
    kps = np.geomspace(kp_param.lower, kp_param.upper, 15)
    kis = np.geomspace(ki_param.lower, ki_param.upper, 15)
    grid = np.array([[heater.cost((kp, ki)) for ki in kis] for kp in kps])
    i, j = np.unravel_index(np.argmin(grid), grid.shape)
    assert i == len(kps) - 1
    assert 0 < j < len(kis) - 1
    fine = np.geomspace(kis[j - 1], kis[j + 1], 21)
    along = [heater.cost((kp_param.upper, ki)) for ki in fine]
    best_ki = fine[int(np.argmin(along))]
    assert fine[0] < best_ki < fine[-1]
    at_bound = heater.cost((kp_param.upper, best_ki))
    assert heater.cost((0.97 * kp_param.upper, best_ki)) > at_bound
    assert heater.cost((0.9 * kp_param.upper, best_ki)) > at_bound


@pytest.mark.parametrize("ki", [0.005, 0.012845468, 0.03])
def test_cost_is_continuous_in_kp(ki):
    # Common practice, no source: a continuous function sampled ten times more finely changes ten
    # times less between neighbours (a jump keeps its size).  The old all-or-nothing anti-windup
    # made the cost jump by 4.6e-5 between Kp = 2.4991 and 2.4992 at Ki = 0.012845468.
    coarse = np.array([heater.cost((kp, ki)) for kp in np.linspace(2.40, 2.50, 101)])
    fine = np.array([heater.cost((kp, ki)) for kp in np.linspace(2.49, 2.50, 101)])
    assert np.max(np.abs(np.diff(fine))) < 0.3 * np.max(np.abs(np.diff(coarse)))


def test_one_search_and_six_starts_tell_the_same_story():
    # The example's claim (examples/heater/README.md): Kp ends on its upper bound 2.5, Ki inside
    # its bounds, the same from one start and from six, with a verdict of minimum.
    one = dl.minimize(heater.cost, heater.PARAMETERS)
    many = dl.explore(heater.cost, heater.PARAMETERS, starts=6)
    for sol in (one, many.best):
        assert sol.named["Kp"] == heater.PARAMETERS[0].upper
        assert sol.active == ("Kp",)
        assert sol.verdict is Verdict.MINIMUM
    assert len(many.minima) == 1
    assert many.best.named["Ki"] == pytest.approx(one.named["Ki"], rel=1e-4)
    assert many.best.value == pytest.approx(one.value, rel=1e-9)


@pytest.mark.parametrize(
    ("params", "match"),
    [((1.0,), "expected 2"), ((-1.0, 0.0), "'Kp'"), ((1.0, math.inf), "'Ki'"), ({"Kp": 1}, "Ki")],
)
def test_bad_gains_are_named(params, match):
    with pytest.raises(ProblemError, match=match):
        heater.cost(params)


@pytest.mark.parametrize(
    ("field", "value"),
    [
        ("capacity", 0.0),
        ("loss", -1.0),
        ("delay", -5.0),
        ("step", math.nan),
        ("setpoint", 20.0),
        ("delay", 2.5),
        ("duration", 1800.5),
    ],
)
def test_bad_plant_is_named(field, value):
    with pytest.raises(ProblemError, match=field):
        heater.Heater(**{field: value})


@pytest.mark.parametrize("module", [bioreactor, heater])
def test_docstring_examples(module):
    failures, attempted = doctest.testmod(module)
    assert attempted > 0, f"{module.__name__} has no examples"
    assert failures == 0
