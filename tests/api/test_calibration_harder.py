"""`dl.calibrate` on the harder NIST StRD sets, from the starts where it reaches NIST's values today.

The files (tests/reference/nist-strd, MGH09, MGH10, MGH17, Rat42, Rat43) were written from memory
and are cross-checked in tests/test_recalled_reference.py (tests/reference/README.md says how).
MGH09 from start 1 with a first trust region a hundred times wider than today's leaps onto a
valley that falls towards a limit at infinity; that run must end early, naming the runaway.
"""

from __future__ import annotations

import math
import warnings

import pytest
from conftest import REFERENCE

import directional as dl
from directional.benchmarking import nist as nist_files
from directional.method import gaussnewton
from directional.records import Stop, Verdict

NIST = REFERENCE / "nist-strd"
PASSING = [("MGH09", "start1"), ("MGH09", "start2"), ("MGH10", "start1"), ("MGH10", "start2"),
           ("MGH17", "start1"), ("MGH17", "start2"), ("Rat42", "start1"), ("Rat42", "start2"),
           ("Rat43", "start1"), ("Rat43", "start2")]


def nist(name: str) -> tuple[dict, nist_files.Residuals]:
    """The NIST file ``name`` and its residuals ``f(x; b) - y`` (`directional.benchmarking.nist`)."""
    return nist_files.read(NIST / f"{name}.toml")


@pytest.mark.parametrize(("name", "start"), PASSING)
def test_certified_estimates_and_standard_deviations(name, start):
    # Source: NIST StRD nonlinear regression, data set `name`, certified values (from memory,
    # cross-checked: tests/test_recalled_reference.py).
    data, residuals = nist(name)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # correlation warnings are tested elsewhere
        sol = dl.calibrate(residuals, data[start])
    assert sol.point == pytest.approx(data["certified_estimates"], rel=1e-6)
    u = sol.uncertainty
    assert u.standard_errors == pytest.approx(data["certified_std_devs"], rel=1e-3)
    assert sol.value == pytest.approx(data["residual_sum_of_squares"], rel=1e-6)
    assert math.sqrt(u.residual_variance) == pytest.approx(data["residual_std_dev"], rel=1e-6)
    assert sol.verdict is Verdict.MINIMUM


def test_a_run_creeping_to_a_minimum_at_infinity_stalls_early_naming_the_runaway(monkeypatch):
    # Source: NIST StRD MGH09 (from memory, cross-checked), start 1.  With a first radius of
    # 100 |D x| the steps land where b1 -> 0 and b2 -> -inf with b1 b2 fixed: the model tends
    # to c x / (x^2 + b3 x + b4), whose S (about 9.45e-4) is three times the certified one; the
    # run spent its whole budget of 5000 there before the runaway test.
    monkeypatch.setattr(gaussnewton, "FIRST_RADIUS", 100.0)
    data, residuals = nist("MGH09")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sol = dl.calibrate(residuals, data["start1"], names=["b1", "b2", "b3", "b4"])
    assert sol.stop is Stop.STALLED
    assert sol.reason.startswith("b2 running away") and "limit at infinity" in sol.reason
    assert len(sol.history) < 2500
    assert sol.point[1] < -100.0 * abs(data["certified_estimates"][1])
    assert sol.value > 3.0 * data["residual_sum_of_squares"]
