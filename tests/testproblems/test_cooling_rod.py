"""Tests of the cooling-rod model (`directional.testproblems.cooling_rod`, our own scenario)."""

from __future__ import annotations

import numpy as np
import pytest

from directional.testproblems import cooling_rod as rod


def series(conductivity: float, coefficient: float, t: float, x: float, terms: int = 400) -> float:
    """Temperature from the Fourier-series solution of the same problem.

    Slab ``0 < x < L`` at uniform excess ``u0``, face ``x = 0`` held at zero, face ``x = L``
    insulated (half of the symmetric slab of Carslaw & Jaeger 1959, Conduction of Heat in Solids,
    ch. 3, from memory)::

        u = sum_n 4 u0 / ((2n+1) pi) sin(l_n x) exp(-alpha l_n^2 t),  l_n = (2n+1) pi / (2L),

    times ``exp(-beta t)`` for the uniform lateral loss ``-beta u`` (the substitution
    ``u = v exp(-beta t)``; common practice, no source).
    """
    alpha = conductivity / rod.HEAT_CAPACITY
    beta = 4.0 * coefficient / (rod.DIAMETER * rod.HEAT_CAPACITY)
    n = np.arange(terms)
    wave = (2 * n + 1) * np.pi / (2 * rod.LENGTH)
    u0 = rod.START - rod.AIR
    terms_ = 4 * u0 / ((2 * n + 1) * np.pi) * np.sin(wave * x) * np.exp(-alpha * wave**2 * t)
    return rod.AIR + np.exp(-beta * t) * float(np.sum(terms_))


@pytest.mark.parametrize(("k", "h"), [(170.0, 12.0), (120.0, 20.0), (250.0, 5.0), (60.0, 40.0)])
def test_matches_the_series_solution(k, h):
    exact = np.array([[series(k, h, t, x) for x in rod.POSITIONS] for t in rod.TIMES])
    # Backward Euler with 0.25 s steps: error about 0.07 K, below the 0.3 K sensor noise.
    assert np.abs(rod.simulate(k, h) - exact).max() < 0.15


def test_error_shrinks_with_the_time_step():
    # Backward Euler is first order in time (Smith 1985, ch. 2): halving the step halves the
    # error while the time error dominates.
    exact = np.array([[series(170.0, 12.0, t, x) for x in rod.POSITIONS] for t in rod.TIMES])
    errors = [np.abs(rod.simulate(170.0, 12.0, step=s) - exact).max() for s in (2.0, 1.0)]
    assert errors[1] / errors[0] == pytest.approx(0.5, abs=0.05)


@pytest.mark.parametrize(("k", "h"), [(0.0, 12.0), (170.0, -1.0), (float("nan"), 12.0)])
def test_rejects_non_positive_parameters(k, h):
    with pytest.raises(ValueError, match="must be positive"):
        rod.simulate(k, h)


def test_main_prints_the_misfit_last(capsys):
    assert rod.main(["--conductivity", "160", "--coefficient", "13"]) == 0
    last = capsys.readouterr().out.strip().splitlines()[-1]
    assert last == f"misfit {rod.misfit(160.0, 13.0)!r}"


def test_main_fails_above(capsys):
    assert rod.main(["--conductivity", "160", "--coefficient", "13", "--fail-above", "100"]) == 3
    assert "parameter above 100.0" in capsys.readouterr().err


def test_measurements_have_the_documented_shape():
    # Invented data, sanity check: one row per time, one column per thermocouple, all between
    # the air temperature and the oven temperature.
    data = np.array(rod.MEASURED)
    assert data.shape == (len(rod.TIMES), len(rod.POSITIONS))
    assert np.all((data > rod.AIR) & (data < rod.START))
