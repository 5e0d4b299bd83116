"""Replicates in `calibrate` and `explore`: the mean residual vector, every run's vector kept, a pool.

The models are invented for these tests (they say so): an exponential decay whose simulated
residuals carry Gaussian noise of known size, and a double well (minima at x = ±1, analytic) plus
noise.  What is checked is the documented contract: a calibration's search sees the sum of squares
of the mean residual vector, the journal keeps each run's own vector, a finished run resumes with
nothing evaluated or recomputed, and a process pool runs the replicates of many starts.
"""

from __future__ import annotations

import math
import sqlite3
import warnings

import numpy as np
import pytest

import directional as dl
from directional.records import Stop, Verdict

T = np.linspace(0.0, 3.0, 7)
DATA = 2.0 * np.exp(-0.5 * T)  # invented: a decay with amplitude 2 and rate 0.5, no noise in the data


class NoisyDecay:
    """Invented: residuals of a decay model whose simulation adds noise (sigma 0.01 per entry)."""

    def __init__(self) -> None:
        self.rng = np.random.default_rng(21)
        self.calls = 0

    def __call__(self, p: np.ndarray) -> np.ndarray:
        self.calls += 1
        return p[0] * np.exp(-p[1] * T) - DATA + 0.01 * self.rng.standard_normal(T.size)


def stored(path):
    with sqlite3.connect(path) as db:
        return db.execute("SELECT point, value, residuals, status FROM evaluation ORDER BY row").fetchall()


def test_a_calibration_keeps_each_runs_vector_and_fits_the_mean_vector(tmp_path):
    path = tmp_path / "fit.sqlite"
    sol = dl.calibrate(NoisyDecay(), [1.0, 1.0], names=["a", "k"], replicates=3, journal=path,
                       check=False)
    rows = stored(path)
    groups: dict[bytes, list[np.ndarray]] = {}
    for point, value, vector, status in rows:
        r = np.frombuffer(vector, dtype="<f8")
        assert status == "ok" and value == float(r @ r)  # each row its own run's vector
        groups.setdefault(point, []).append(r)
    assert {len(v) for v in groups.values()} == {3}
    assert all(len({r.tobytes() for r in v}) == 3 for v in groups.values())  # three different runs
    mean = np.array([math.fsum(c) for c in np.stack(groups[sol.point.tobytes()]).T]) / 3
    assert sol.value == float(mean @ mean)
    # the decay the data were made from (invented, known): amplitude 2, rate 0.5
    assert sol.point == pytest.approx([2.0, 0.5], abs=0.03)


def test_a_finished_calibration_resumes_with_nothing_evaluated_or_recomputed(tmp_path):
    path = tmp_path / "fit.sqlite"
    first = dl.calibrate(NoisyDecay(), [1.0, 1.0], replicates=2, journal=path, check="quick")
    model = NoisyDecay()
    again = dl.resume(path, model)
    assert model.calls == 0
    assert again.point.tobytes() == first.point.tobytes() and again.value == first.value
    assert not any("recomputed" in note for note in again.notes)
    assert again.spread == first.spread and first.spread.replicates == 2


def noisy_well(x: np.ndarray) -> float:
    """Invented: a double well, minima 0 at x0 = ±1, x1 = 0, plus noise of sigma 1e-3.

    Fresh randomness in each call (the runs happen in other processes).
    """
    return float((x[0] ** 2 - 1.0) ** 2 + x[1] ** 2 + 1e-3 * np.random.default_rng().standard_normal())


def test_explore_runs_the_replicates_of_many_starts_on_a_process_pool():
    land = dl.explore(noisy_well, [(-2.0, 2.0), (-1.0, 1.0)], starts=4, seed=3, workers=2,
                      replicates=2, check=False)
    runs: dict[bytes, int] = {}
    for e in land.history:
        runs[e.point.tobytes()] = runs.get(e.point.tobytes(), 0) + 1
    assert set(runs.values()) == {2} and land.evaluations == 2 * len(runs)
    wells = sorted({round(float(m.point[0])) for m in land.minima})
    assert wells == [-1, 1]
    for minimum in land.minima:
        assert minimum.spread.replicates == 2
        assert abs(abs(minimum.point[0]) - 1.0) < 0.05 and abs(minimum.point[1]) < 0.1
    assert any("noise from the 2 replicates" in note for note in land.notes)


def test_one_run_per_point_notices_the_residuals_noise_converges_and_is_checked():
    # with rounding-sized difference steps the first Jacobian of NoisyDecay is noise: the
    # Gauss-Newton steps measure the residuals' noise (Moré & Wild 2011) and work above it
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sol = dl.calibrate(NoisyDecay(), [1.0, 1.0], names=["a", "k"])
    assert sol.stop is Stop.CONVERGED and sol.verdict is not Verdict.UNCHECKED
    assert any("noticed" in note for note in sol.notes)
    # the decay the data were made from (invented, known): amplitude 2, rate 0.5
    assert sol.point == pytest.approx([2.0, 0.5], abs=0.03)
