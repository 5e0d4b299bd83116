"""The bioreactor example's model: Monod growth fitted to the invented data in data.csv.

`residuals` is the objective (``kind = "residuals"``); `fit` feeds the calibration plots.  The
ODE model itself is `directional.testproblems.bioreactor`; replace data.csv with your own batch
(same columns, same ``# key = value`` lines) to fit it instead.
"""

from pathlib import Path

import numpy as np

from directional.testproblems import bioreactor

DATA = bioreactor.load_data(Path(__file__).with_name("data.csv"))


def residuals(x: np.ndarray) -> np.ndarray:
    """(model - data) / sigma for biomass, then substrate; x = (mu_max, Ks, Y, kd)."""
    return bioreactor.residuals(x, DATA)


def fit(x: np.ndarray) -> list[dict]:
    """The model at x against the data, one series per measured quantity (for the plots)."""
    times = DATA.times
    fine = np.linspace(0.0, float(times[-1]), 241)
    at_data = bioreactor.simulate(x, times, x0=DATA.x0, s0=DATA.s0)
    curves = bioreactor.simulate(x, fine, x0=DATA.x0, s0=DATA.s0)
    observed = (DATA.biomass, DATA.substrate)
    sigma = (DATA.sigma_biomass, DATA.sigma_substrate)
    names = ("biomass X", "substrate S")
    return [
        {"name": names[k], "unit": "g/L", "x": times, "x_label": "time [h]",
         "observed": observed[k], "predicted": at_data[k], "sigma": sigma[k],
         "curve_x": fine, "curve": curves[k], "data_label": "invented data"}
        for k in range(2)
    ]
