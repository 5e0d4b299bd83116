"""Cross-checks of the NIST StRD files written from memory (tests/reference/README.md).

MGH09, MGH10, MGH17, Rat42 and Rat43 in tests/reference/nist-strd carry NIST's starts and
certified values as recalled, not copied.  They are only trusted because the recalled numbers
agree with each other and with published values; this file checks that on every run:

- the certified RSS and residual standard deviation recomputed at the certified estimates;
- the certified standard deviations recomputed as NIST defines them, the square roots of the
  diagonal of s^2 (J^T J)^-1 with s^2 = RSS / (n - p) (nist-strd/README.md), J from
  numdifftools (a general-purpose reference library);
- the certified point is stationary: a Gauss–Newton step from it is tiny;
- MGH09, MGH10, MGH17: the observations and NIST's start 2 are those of Moré, Garbow & Hillstrom
  (1981) problems 15, 10 and 17 (mgh1981.toml), and the minimum the paper prints is the certified
  RSS truncated to its six digits;
- the textbook Levenberg–Marquardt baseline (written from Marquardt 1963 and Moré 1978) reaches
  the certified RSS and estimates from start 2.
"""

from __future__ import annotations

import math
import tomllib

import numdifftools as nd
import numpy as np
import pytest
from conftest import REFERENCE

from directional.benchmarking import marquardt
from directional.benchmarking import nist as nist_files

NIST = REFERENCE / "nist-strd"
RECALLED = ["MGH09", "MGH10", "MGH17", "Rat42", "Rat43"]
# NIST name -> (MGH 1981 problem number, the abscissae of the paper's data rule)
MGH = {
    "MGH09": (15, None),  # x = the paper's u_i, listed in mgh1981.toml
    "MGH10": (10, [45.0 + 5.0 * i for i in range(1, 17)]),  # t_i = 45 + 5 i
    "MGH17": (17, [10.0 * (i - 1) for i in range(1, 34)]),  # t_i = 10 (i - 1)
}


def load(name: str) -> tuple[dict, nist_files.Residuals]:
    """The NIST file ``name`` and its residuals ``f(x; b) - y`` (`directional.benchmarking.nist`)."""
    return nist_files.read(NIST / f"{name}.toml")


def test_every_recalled_file_says_so():
    found = {}
    for path in sorted(NIST.glob("*.toml")):
        with open(path, "rb") as handle:
            found[path.stem] = tomllib.load(handle)["confidence"]
    assert sorted(n for n, c in found.items() if c == "from memory") == sorted(RECALLED)
    for name in RECALLED:
        assert "FROM MEMORY" in (NIST / f"{name}.toml").read_text(encoding="utf-8")


@pytest.mark.parametrize("name", RECALLED)
def test_the_certified_values_agree_with_each_other(name):
    data, residuals = load(name)
    b = np.array(data["certified_estimates"])
    n, p = data["n_observations"], data["n_parameters"]
    r = residuals(b)
    rss = float(r @ r)
    assert rss == pytest.approx(data["residual_sum_of_squares"], rel=1e-9)
    assert math.sqrt(rss / (n - p)) == pytest.approx(data["residual_std_dev"], rel=1e-9)
    assert n - p == data["degrees_of_freedom"]
    J = nd.Jacobian(residuals, method="central", order=4)(b)
    normal = J.T @ J
    deviations = np.sqrt(np.diag(rss / (n - p) * np.linalg.inv(normal)))
    assert deviations == pytest.approx(data["certified_std_devs"], rel=1e-6)
    step = np.linalg.solve(normal, -J.T @ r)  # Gauss-Newton step from the certified point
    assert np.max(np.abs(step) / deviations) < 1e-6


@pytest.mark.parametrize("name", sorted(MGH))
def test_the_mgh_sets_are_the_papers_data(name, mgh_reference):
    # Moré, Garbow & Hillstrom 1981: problems 15 (Kowalik and Osborne), 10 (Meyer), 17 (Osborne 1)
    number, abscissae = MGH[name]
    problem = mgh_reference[number]
    data, _ = load(name)
    assert data["y"] == problem["data"]["y"]
    assert data["x"] == (problem["data"]["u"] if abscissae is None else abscissae)
    assert data["start2"] == problem["start"]  # NIST's start 2 is the paper's standard start
    # The paper prints the minimum truncated to six significant digits.
    certified, printed = data["residual_sum_of_squares"], problem["fmin"]
    unit = 10.0 ** (math.floor(math.log10(printed)) - 5)
    assert 0.0 <= certified - printed < unit
    # A reproduction's minimizer, printed to five to seven digits (mgh1981.toml, its note).
    assert data["certified_estimates"] == pytest.approx(problem["xmin_reproduction"], rel=1e-5)


@pytest.mark.parametrize("name", RECALLED)
def test_the_baseline_reaches_the_certified_values_from_start_2(name):
    data, residuals = load(name)
    fit = marquardt.levenberg_marquardt(residuals, data["start2"], budget=3000,
                                        ftol=1e-14, xtol=1e-14)
    assert fit.value == pytest.approx(data["residual_sum_of_squares"], rel=1e-9)
    assert fit.point == pytest.approx(data["certified_estimates"], rel=1e-6)
