"""Batch culture with Monod growth: the model behind the bundled calibration demo.

A batch bioreactor holds biomass ``X`` [g/L] growing on one limiting substrate ``S`` [g/L].  Growth
follows Monod's saturating rate law (Monod 1949) and the cells die or decay at a first-order rate
(the maintenance/decay term of Herbert 1958)::

    mu(S)  = mu_max * S / (Ks + S)
    dX/dt  = mu(S) * X - kd * X
    dS/dt  = -mu(S) * X / Y

with ``mu_max`` the largest specific growth rate [1/h], ``Ks`` the half-saturation constant [g/L],
``Y`` the biomass yield on substrate [g/g] and ``kd`` the decay rate [1/h].  With ``kd = 0`` the sum
``X + Y*S`` is conserved; with ``mu_max = 0`` biomass decays as ``X0 * exp(-kd * t)``.

The four constants are fitted to an invented data set (``bioreactor_data.csv``, made once from the
true values in its header plus Gaussian noise; see `regenerate_data`).  Inoculum ``X0`` and initial
substrate ``S0`` are known from the recipe and are not fitted.  ``Ks`` is the weakest of the four:
it shows only in the hour or two in which the substrate runs out, and it is strongly correlated
with ``mu_max``, a well-known property of Monod fits to batch data (Holmberg 1982).

The equations are integrated with LSODA (Petzold 1983) through `scipy.integrate.solve_ivp` with
the analytic Jacobian and tight tolerances (rtol 1e-10).  Measured against DOP853 at rtol 1e-13,
the residuals are accurate to about 1e-8 of their norm and change smoothly between nearby points
to the same level (the spread comes from the hours in which the substrate runs out), so central
differences with relative steps 1e-4 to 1e-5 give the Jacobian to better than 1e-5.  LSODA
switches to a stiff method on its own, which matters near the bounds (large ``mu_max`` with tiny
``Ks`` makes the substrate equation stiff once ``S`` runs out).

This module does no optimization; it is the objective of the demo.

References
----------
1. Monod, J. (1949). The growth of bacterial cultures. Annual Review of Microbiology 3, 371-394.
2. Herbert, D. (1958). Some principles of continuous culture. In: Recent Progress in
   Microbiology, 7th Int. Congr. Microbiol., 381-396.
3. Holmberg, A. (1982). On the practical identifiability of microbial growth models incorporating
   Michaelis-Menten type nonlinearities. Mathematical Biosciences 62, 23-43.
4. Petzold, L. (1983). Automatic selection of methods for solving stiff and nonstiff systems of
   ordinary differential equations. SIAM J. Sci. Stat. Comput. 4, 136-148.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from importlib import resources
from pathlib import Path
from types import MappingProxyType

import numpy as np
from scipy.integrate import solve_ivp

from directional.errors import ProblemError
from directional.parameters import Parameter
from directional.testproblems import named_values

NAMES = ("mu_max", "Ks", "Y", "kd")
X0 = 0.2  # g/L, inoculum
S0 = 15.0  # g/L, initial substrate
RTOL = 1e-10
ATOL = 1e-12
DATA_FILE = "bioreactor_data.csv"

# The invented experiment: the true values, the noise and the seed that made the data file.
TRUTH = MappingProxyType({"mu_max": 0.45, "Ks": 2.5, "Y": 0.5, "kd": 0.02})
SIGMA_BIOMASS = 0.15  # g/L
SIGMA_SUBSTRATE = 0.2  # g/L
SEED = 1949
SAMPLE_TIMES = (
    0.0, 2.0, 4.0, 5.0, 6.0, 7.0, 8.0, 9.0, 10.0, 11.0,
    12.0, 14.0, 16.0, 18.0, 21.0, 24.0,
)

# A user's first guess: each value 1.7 to 2.5 times off the truth.
PARAMETERS = [
    Parameter("mu_max", 0.2, 0.01, 3.0, scale="log", unit="1/h"),
    Parameter("Ks", 6.0, 0.01, 50.0, scale="log", unit="g/L"),
    Parameter("Y", 0.3, 0.05, 1.0, scale="linear", unit="g/g"),
    Parameter("kd", 0.05, 1e-4, 0.5, scale="log", unit="1/h"),
]

_UNITS = MappingProxyType({"mu_max": "1/h", "Ks": "g/L", "Y": "g/g", "kd": "1/h"})
_KEY_LINE = re.compile(r"^#\s*(?P<key>[A-Za-z_]\w*)\s*=\s*(?P<value>\S+)(\s+\S+)?\s*$")


class IntegrationError(RuntimeError):
    """The ODE solver gave up for these parameters (the objective failed at this point)."""


@dataclass(frozen=True, slots=True, kw_only=True)
class Data:
    """Measured biomass and substrate of one batch, with their noise and (invented) truth."""

    times: np.ndarray  # h
    biomass: np.ndarray  # g/L
    substrate: np.ndarray  # g/L
    sigma_biomass: float  # g/L
    sigma_substrate: float  # g/L
    truth: dict[str, float]
    x0: float = X0
    s0: float = S0


def _constants(params: Sequence[float] | Mapping[str, float] | np.ndarray) -> tuple[float, ...]:
    """Return ``(mu_max, Ks, Y, kd)`` as floats, checked."""
    out = named_values(params, NAMES, "bioreactor parameters")
    mu_max, ks, y, kd = out
    if mu_max < 0 or kd < 0:
        raise ProblemError(f"bioreactor rates must be >= 0, got mu_max={mu_max!r}, kd={kd!r}")
    if ks <= 0 or y <= 0:
        raise ProblemError(f"bioreactor Ks and Y must be > 0, got Ks={ks!r}, Y={y!r}")
    return out


def _rates(t: float, state: np.ndarray, mu_max: float, ks: float, y: float, kd: float) -> list:
    biomass, substrate = state
    growth = mu_max * substrate / (ks + substrate) * biomass
    return [growth - kd * biomass, -growth / y]


def _jacobian(t: float, state: np.ndarray, mu_max: float, ks: float, y: float, kd: float) -> list:
    biomass, substrate = state
    mu = mu_max * substrate / (ks + substrate)
    dmu = mu_max * ks / (ks + substrate) ** 2
    return [[mu - kd, dmu * biomass], [-mu / y, -dmu * biomass / y]]


def simulate(
    params: Sequence[float] | Mapping[str, float] | np.ndarray,
    times: Sequence[float] | np.ndarray,
    x0: float = X0,
    s0: float = S0,
) -> tuple[np.ndarray, np.ndarray]:
    """Return biomass and substrate [g/L] at ``times`` [h] for ``params = (mu_max, Ks, Y, kd)``.

    The batch starts at ``t = 0`` from ``x0`` and ``s0``; ``times`` must be non-negative and
    non-decreasing.  ``params`` is a sequence in the order of `NAMES` or a mapping by name.

    >>> biomass, substrate = simulate((0.45, 2.5, 0.5, 0.0), [0.0, 24.0])
    >>> round(float(biomass[-1] + 0.5 * substrate[-1]), 6)   # X + Y*S is conserved when kd = 0
    7.7

    Raises
    ------
    ProblemError
        For a wrong number of parameters, non-finite or negative rates, ``Ks <= 0``, ``Y <= 0``,
        bad times or initial values.
    IntegrationError
        When the solver does not reach the last time or returns non-finite values.
    """
    mu_max, ks, y, kd = _constants(params)
    t = np.asarray(times, dtype=float).ravel()
    if t.size == 0 or not np.all(np.isfinite(t)) or t[0] < 0 or np.any(np.diff(t) < 0):
        raise ProblemError("bioreactor times must be finite, non-negative and non-decreasing")
    if not (math.isfinite(x0) and math.isfinite(s0) and x0 >= 0 and s0 >= 0):
        raise ProblemError(f"bioreactor x0 and s0 must be >= 0, got x0={x0!r}, s0={s0!r}")
    if t[-1] == 0.0:
        return np.full(t.size, float(x0)), np.full(t.size, float(s0))
    result = solve_ivp(
        _rates,
        (0.0, float(t[-1])),
        [float(x0), float(s0)],
        method="LSODA",
        t_eval=t,
        args=(mu_max, ks, y, kd),
        jac=_jacobian,
        rtol=RTOL,
        atol=ATOL,
    )
    if not result.success or result.y.shape[1] != t.size or not np.all(np.isfinite(result.y)):
        raise IntegrationError(
            f"bioreactor integration failed for mu_max={mu_max!r}, Ks={ks!r}, Y={y!r}, kd={kd!r}: "
            f"{result.message}"
        )
    return result.y[0].copy(), result.y[1].copy()


def residuals(
    params: Sequence[float] | Mapping[str, float] | np.ndarray, data: Data | None = None
) -> np.ndarray:
    """Return the weighted residuals, model minus data over sigma, biomass then substrate.

    With ``data=None`` the bundled invented data set is used.  At the true parameters the sum of
    squares is a chi-square draw with ``2 * len(data.times)`` degrees of freedom.

    Raises
    ------
    ProblemError, IntegrationError
        As `simulate`.
    """
    if data is None:
        data = load_data()
    biomass, substrate = simulate(params, data.times, x0=data.x0, s0=data.s0)
    return np.concatenate(
        [
            (biomass - data.biomass) / data.sigma_biomass,
            (substrate - data.substrate) / data.sigma_substrate,
        ]
    )


def misfit(params: Sequence[float] | Mapping[str, float] | np.ndarray) -> float:
    """Return the sum of squared weighted residuals against the bundled data (a "value" objective).

    Raises
    ------
    ProblemError, IntegrationError
        As `simulate`.
    """
    r = residuals(params)
    return float(r @ r)


def load_data(path: str | Path | None = None) -> Data:
    """Return the data set in ``path``, or the bundled invented one when ``path`` is None.

    The file is CSV with ``#`` comment lines; comment lines of the form ``# key = value [unit]``
    give ``true_<name>``, ``x0``, ``s0``, ``sigma_biomass`` and ``sigma_substrate``.  The first
    non-comment line is the header ``time_h,biomass_g_per_L,substrate_g_per_L``.

    Raises
    ------
    ProblemError
        For a missing key, a bad header or a line that is not three numbers; the message names
        the line.
    """
    if path is None:
        text = resources.files(__package__).joinpath(DATA_FILE).read_text(encoding="utf-8")
        where = DATA_FILE
    else:
        text = Path(path).read_text(encoding="utf-8")
        where = str(path)
    return _parse(text, where)


def _parse(text: str, where: str) -> Data:
    keys: dict[str, float] = {}
    rows: list[tuple[float, float, float]] = []
    header_seen = False
    for number, line in enumerate(text.splitlines(), start=1):
        stripped = line.strip()
        if not stripped:
            continue
        if stripped.startswith("#"):
            match = _KEY_LINE.match(stripped)
            if match:
                try:
                    keys[match["key"]] = float(match["value"])
                except ValueError:
                    raise ProblemError(f"{where}, line {number}: bad value in {line!r}") from None
            continue
        if not header_seen:
            if stripped.replace(" ", "") != "time_h,biomass_g_per_L,substrate_g_per_L":
                raise ProblemError(f"{where}, line {number}: unexpected header {line!r}")
            header_seen = True
            continue
        try:
            t, x, s = (float(field) for field in stripped.split(","))
        except ValueError:
            raise ProblemError(
                f"{where}, line {number}: expected three numbers, got {line!r}"
            ) from None
        rows.append((t, x, s))
    needed = [f"true_{name}" for name in NAMES] + ["x0", "s0", "sigma_biomass", "sigma_substrate"]
    missing = [key for key in needed if key not in keys]
    if missing or not rows:
        raise ProblemError(f"{where}: missing {missing or 'data rows'!r}")
    table = np.array(rows)
    return Data(
        times=table[:, 0],
        biomass=table[:, 1],
        substrate=table[:, 2],
        sigma_biomass=keys["sigma_biomass"],
        sigma_substrate=keys["sigma_substrate"],
        truth={name: keys[f"true_{name}"] for name in NAMES},
        x0=keys["x0"],
        s0=keys["s0"],
    )


def regenerate_data(seed: int = SEED) -> str:
    """Return the text of the invented data file, made from `TRUTH` plus Gaussian noise.

    Run once to write ``bioreactor_data.csv`` (``python -m directional.testproblems.bioreactor``);
    the bundled file is the output for the default seed.  Values are rounded to 3 decimals, the
    resolution of a typical dry-weight or glucose assay (common practice, no source).
    """
    times = np.array(SAMPLE_TIMES)
    biomass, substrate = simulate(TRUTH, times)
    rng = np.random.default_rng(seed)
    noisy_biomass = biomass + rng.normal(0.0, SIGMA_BIOMASS, times.size)
    noisy_substrate = substrate + rng.normal(0.0, SIGMA_SUBSTRATE, times.size)
    lines = [
        "# Invented data for the directional demo: a batch culture with Monod growth, "
        "not measurements.",
        f"# Made by directional.testproblems.bioreactor.regenerate_data(seed={seed}): the model at "
        "the true values below plus Gaussian noise of the stated sigmas.",
        "# Negative substrate readings near zero are that noise, kept so the noise stays Gaussian.",
    ]
    lines += [f"# true_{name} = {TRUTH[name]!r} {_UNITS[name]}" for name in NAMES]
    lines += [
        f"# x0 = {X0!r} g/L",
        f"# s0 = {S0!r} g/L",
        f"# sigma_biomass = {SIGMA_BIOMASS!r} g/L",
        f"# sigma_substrate = {SIGMA_SUBSTRATE!r} g/L",
        "time_h,biomass_g_per_L,substrate_g_per_L",
    ]
    lines += [
        f"{t:g},{x:.3f},{s:.3f}"
        for t, x, s in zip(times, noisy_biomass, noisy_substrate, strict=True)
    ]
    return "\n".join(lines) + "\n"


if __name__ == "__main__":
    Path(__file__).with_name(DATA_FILE).write_text(regenerate_data(), encoding="utf-8")
