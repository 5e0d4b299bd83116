"""A calibration's journal holds every residual vector: resume, show and the uncertainty table
need no evaluation again, and sigma as one number works from the API and the problem file.

Check values: NIST StRD Misra1a, certified estimates and standard deviations
(tests/reference/nist-strd/Misra1a.toml); the rest compares a run with its own replay.
"""

from __future__ import annotations

import contextlib
import json
import sqlite3
import tomllib
import warnings

import numpy as np
import pytest
from conftest import REFERENCE

import directional as dl
from directional.interface import cli, runs
from directional.interface.problemfile import Problem
from directional.records import Verdict

with open(REFERENCE / "nist-strd" / "Misra1a.toml", "rb") as handle:
    MISRA1A = tomllib.load(handle)
X = np.array(MISRA1A["x"], dtype=float)
Y = np.array(MISRA1A["y"], dtype=float)


class Counted:
    """Misra1a's residuals, counting the calls (the model is NIST's: b1 (1 - exp(-b2 x)))."""

    def __init__(self, interrupt_after: int | None = None) -> None:
        self.calls = 0
        self.interrupt_after = interrupt_after  # then Ctrl-C (a KeyboardInterrupt) in a call

    def __call__(self, b: np.ndarray) -> np.ndarray:
        self.calls += 1
        if self.interrupt_after is not None and self.calls > self.interrupt_after:
            raise KeyboardInterrupt
        return b[0] * (1.0 - np.exp(-b[1] * X)) - Y


def calibrate(residuals, **options) -> dl.Solution:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # b1 and b2 are correlated beyond 0.95: warned
        return dl.calibrate(residuals, MISRA1A["start2"], names=["b1", "b2"], **options)


def certified(sol: dl.Solution) -> None:
    # NIST StRD Misra1a, certified values
    assert sol.point == pytest.approx(MISRA1A["certified_estimates"], rel=1e-6)
    assert sol.uncertainty.standard_errors == pytest.approx(MISRA1A["certified_std_devs"], rel=1e-3)
    assert sol.verdict is Verdict.MINIMUM


def test_show_and_resume_of_a_finished_calibration_evaluate_nothing(tmp_path):
    path = tmp_path / "fit.sqlite"
    objective = Counted()
    first = calibrate(objective, journal=path)
    certified(first)
    assert objective.calls == first.evaluations
    with pytest.warns(UserWarning, match="b1 and b2"):
        shown, _ = runs.replay(path)  # what `directional show` sees; its objective refuses to run
    assert shown.verdict is Verdict.MINIMUM and shown.uncertainty is not None
    assert shown.uncertainty.standard_errors.tobytes() == first.uncertainty.standard_errors.tobytes()
    again = Counted()
    with pytest.warns(UserWarning, match="b1 and b2"):  # Misra1a: b1 and b2 are correlated
        resumed = dl.resume(path, again)
    assert again.calls == 0
    assert not any("recomputed" in note for note in resumed.notes)  # SumOfSquares.recomputed == 0
    assert resumed.point.tobytes() == first.point.tobytes()
    assert resumed.uncertainty.standard_errors.tobytes() == first.uncertainty.standard_errors.tobytes()


def test_an_interrupted_calibration_resumes_without_repeating_an_evaluation(tmp_path):
    whole = calibrate(Counted())
    path = tmp_path / "fit.sqlite"
    first = Counted(interrupt_after=8)
    stopped = calibrate(first, journal=path)
    assert stopped.stop is dl.Stop.INTERRUPTED
    shown, _ = runs.replay(path)  # stopped before its check: the best stored point, no verdict
    assert shown.verdict is Verdict.UNCHECKED and shown.uncertainty is None
    assert "resume" in shown.reason
    rest = Counted()
    with pytest.warns(UserWarning, match="b1 and b2"):  # Misra1a: b1 and b2 are correlated
        resumed = dl.resume(path, rest)
    assert first.calls + rest.calls - 1 == whole.evaluations  # the interrupted one is made again
    assert not any("recomputed" in note or "changed" in note for note in resumed.notes)
    assert resumed.point.tobytes() == whole.point.tobytes()
    certified(resumed)


PROBLEM = """\
[[parameter]]
name = "b1"
start = 250.0

[[parameter]]
name = "b2"
start = 0.0005

[objective]
function = "misra:residuals"
kind = "residuals"
{sigma}
"""


def _problem(folder, sigma: str):
    (folder / "misra.py").write_text(
        "import numpy as np\n"
        f"X = np.array({MISRA1A['x']!r})\nY = np.array({MISRA1A['y']!r})\n"
        "def residuals(b):\n    return b[0] * (1.0 - np.exp(-b[1] * X)) - Y\n",
        encoding="utf-8",
    )
    path = folder / "problem.toml"
    path.write_text(PROBLEM.format(sigma=sigma), encoding="utf-8")
    return path


@pytest.mark.parametrize("sigma", ["sigma = 0.1", f"sigma = {[0.1] * 14!r}"])
def test_sigma_in_the_problem_file_as_one_number_or_one_per_residual(tmp_path, sigma, capsys):
    path = _problem(tmp_path, sigma)
    assert Problem.from_file(path).objective.sigma in (0.1, (0.1,) * 14)
    out = tmp_path / "fit.json"
    assert cli.main(["run", str(path), "--no-journal", "--quiet", "--json", str(out)]) == 0
    found = json.loads(out.read_text(encoding="utf-8"))
    # S is divided by sigma² = 0.01; the standard errors do not change (Bates & Watts 1988)
    assert found["value"] == pytest.approx(MISRA1A["residual_sum_of_squares"] / 0.01, rel=1e-6)
    errors = [found["uncertainty"]["standard_errors"][n] for n in ("b1", "b2")]
    assert errors == pytest.approx(MISRA1A["certified_std_devs"], rel=1e-3)


@pytest.mark.parametrize(
    "sigma, words",
    [("sigma = -0.1", "objective.sigma must be a positive"),
     ('sigma = "wide"', "objective.sigma must be"),
     ("sigma = [0.1, 0.0]", "entry 1")],
)
def test_a_bad_sigma_in_the_problem_file_names_the_key_and_line(tmp_path, sigma, words):
    path = _problem(tmp_path, sigma)
    with pytest.raises(dl.ProblemError, match=words) as caught:
        Problem.from_file(path)
    assert "line 12" in str(caught.value)


def test_a_sigma_of_the_wrong_length_fails_every_evaluation_and_says_why(tmp_path):
    path = _problem(tmp_path, "sigma = [0.1, 0.1]")
    with pytest.raises(dl.ObjectiveError, match="sigma has 2"):
        runs.solve(Problem.from_file(path), journal=False, quiet=True)


def test_show_of_a_journal_written_before_vectors_were_kept_says_so(tmp_path):
    path = tmp_path / "fit.sqlite"
    calibrate(Counted(), journal=path)
    with contextlib.closing(sqlite3.connect(path)) as connection:
        connection.execute("UPDATE evaluation SET residuals = NULL")
        connection.commit()
    shown, _ = runs.replay(path)
    assert shown.verdict is Verdict.UNCHECKED and shown.uncertainty is None
    assert "written before residual vectors were kept" in shown.reason
    assert shown.value == pytest.approx(MISRA1A["residual_sum_of_squares"], rel=1e-6)
