"""An ODE calibration: a batch culture with Monod growth, integrated by scipy's solve_ivp.

The model, the "true" constants and the data are invented for this test (the data are the model
at the true constants plus Gaussian noise from a fixed seed).  The solver's tolerance makes each
residual vector a little noisy; the parameters are well determined (standard errors of a few per
cent).  The reference for the uncertainty is analytic: the Jacobian of the residuals from the
forward sensitivity equations ``s' = (∂f/∂z) s + ∂f/∂p`` integrated with the model at a tight
tolerance (the variational equations; Hairer, Nørsett & Wanner 1993, "Solving Ordinary
Differential Equations I", sec. I.14, from memory), and ``s² (JᵀJ)⁻¹`` from it (Bates & Watts
1988, sec. 2.3).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from scipy.integrate import solve_ivp

import directional as dl
from directional.records import Verdict

TIMES = np.linspace(1.0, 16.0, 16)  # hours (invented)
START = (0.1, 10.0)  # biomass and substrate, g/L (invented)
TRUE = (0.5, 2.0, 0.45)  # mu_max 1/h, Ks g/L, Y g/g (invented)

def rates(t, z, mu, ks, y):
    x, s = z[0], z[1]
    g = mu * s / (ks + s) * x
    return [g, -g / y]

def simulate(p, rtol):
    solution = solve_ivp(rates, (0.0, TIMES[-1]), START, t_eval=TIMES, args=tuple(p),
                         rtol=rtol, atol=rtol * 1e-3, method="LSODA")
    return np.concatenate([solution.y[0], solution.y[1]])

def sensitivities(p):
    """d(biomass, substrate)/d(mu, Ks, Y) at TIMES, from the variational equations."""
    mu, ks, y = p

    def extended(t, w):
        x, s = w[0], w[1]
        sens = w[2:].reshape(2, 3)
        g = mu * s / (ks + s) * x
        dg_dz = np.array([mu * s / (ks + s), mu * ks * x / (ks + s) ** 2])
        dg_dp = np.array([s * x / (ks + s), -mu * s * x / (ks + s) ** 2, 0.0])
        fz = np.vstack([dg_dz, -dg_dz / y])
        fp = np.vstack([dg_dp, -dg_dp / y + np.array([0.0, 0.0, g / y**2])])
        return np.concatenate([[g, -g / y], (fz @ sens + fp).ravel()])

    w0 = np.concatenate([START, np.zeros(6)])
    solution = solve_ivp(extended, (0.0, TIMES[-1]), w0, t_eval=TIMES, rtol=1e-12, atol=1e-14,
                         method="LSODA")
    sens = solution.y[2:].reshape(2, 3, -1)  # (state, parameter, time)
    return np.vstack([sens[0].T, sens[1].T])

DATA = simulate(TRUE, 1e-10) + np.random.default_rng(7).normal(0.0, 0.05, 2 * TIMES.size)
PARAMETERS = [
    dl.Parameter("mu_max", 0.3, 0.01, 3.0, scale="log", unit="1/h"),
    dl.Parameter("Ks", 1.0, 0.01, 50.0, scale="log", unit="g/L"),
    dl.Parameter("Y", 0.3, 0.05, 1.0, unit="g/g"),
]

@pytest.mark.parametrize(("rtol", "noise"), [(1e-6, None), (1e-8, None), (1e-6, "estimate")])
def test_an_ode_calibration_is_a_minimum_never_flat(rtol, noise):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # mu_max and Ks are correlated (r = 0.99): warned
        sol = dl.calibrate(lambda p: simulate(p, rtol) - DATA, PARAMETERS, noise=noise)
    assert sol.verdict in (Verdict.MINIMUM, Verdict.NOISY)
    assert sol.verdict is not Verdict.FLAT and not sol.curvature.undetermined
    # the check and the uncertainty share one central-difference Jacobian: 2p + 1 evaluations
    assert sol.curvature.source == "gauss-newton" and sol.curvature.evaluations <= 2 * 3 + 1
    assert not [e for e in sol.history if e.purpose == "hessian"]
    jacobian = sensitivities(sol.point)
    s2 = sol.value / (DATA.size - 3)
    reference = np.sqrt(np.diag(s2 * np.linalg.inv(jacobian.T @ jacobian)))
    assert sol.uncertainty.standard_errors == pytest.approx(reference, rel=1e-3)
    assert np.all(sol.uncertainty.standard_errors < 0.1 * sol.point)  # well determined
    assert "central-difference Jacobian" in sol.summary()
