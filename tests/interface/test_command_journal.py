"""An external program as the objective, through the journal: the journal says what happened.

The program is our own stand-in for a simulation (invented for this test): it logs each run to a
file, fails with exit code 3 for ``a > 1.5``, hangs for ``b > 2.3`` (stopped by the time-out), and
otherwise prints ``(a - 1)^2 + 3 (b - 1.2)^2``.
"""

from __future__ import annotations

import math
import sys

import pytest

import directional as dl
from directional.interface.command import Command
from directional.run import journal as jr

PROGRAM = """
import sys, time
a, b = float(sys.argv[1]), float(sys.argv[2])
with open(sys.argv[3], "a") as log:
    log.write(f"{a!r} {b!r}\\n")
if a > 1.5:
    sys.stderr.write("heater model: temperature out of table range\\n")
    sys.exit(3)
if b > 2.3:
    time.sleep(30)
print("misfit follows")
print((a - 1.0) ** 2 + 3.0 * (b - 1.2) ** 2)
"""

PARAMETERS = [dl.Parameter("a", 0.0, -1.0, 3.0), dl.Parameter("b", 0.0, -1.0, 3.0)]


@pytest.fixture()
def program(tmp_path):
    script = tmp_path / "sim.py"
    script.write_text(PROGRAM)
    log = tmp_path / "runs.log"
    command = Command(
        [sys.executable, "-S", str(script), "{a}", "{b}", str(log)],
        ["a", "b"],
        timeout=0.5,
        grace=0.2,
    )
    return command, log


def test_the_journal_says_what_the_program_did(tmp_path, program):
    command, log = program
    path = tmp_path / "run.sqlite"
    sol = dl.minimize(command, PARAMETERS, journal=path, check=False)
    assert sol.stop is dl.Stop.CONVERGED
    assert sol.point.tolist() == pytest.approx([1.0, 1.2], abs=1e-6)  # the quadratic's minimum
    evaluations = jr.read(path).evaluations
    runs = log.read_text().splitlines()
    assert len(runs) == len(evaluations) == sol.evaluations  # one run per evaluation
    assert [tuple(map(float, line.split())) for line in runs] == [
        tuple(e.point.tolist()) for e in evaluations
    ]  # the program got the stored point, bit for bit (repr round trip)
    statuses = {e.status for e in evaluations}
    assert statuses == {"ok", "failed", "timed-out"}
    for e in evaluations:
        a, b = e.point
        if e.status == "ok":
            assert e.value == (a - 1.0) ** 2 + 3.0 * (b - 1.2) ** 2
        elif e.status == "failed":
            assert a > 1.5 and e.value == math.inf
            assert "exit code 3" in e.detail
            assert "temperature out of table range" in e.detail
        else:
            assert b > 2.3 and e.value == math.inf
            assert "no result within 0.5 s" in e.detail
            assert 0.5 <= e.seconds < 10.0


def test_resume_runs_the_program_only_for_what_is_missing(tmp_path, program):
    command, log = program
    path = tmp_path / "run.sqlite"
    whole = dl.minimize(command, PARAMETERS, journal=tmp_path / "whole.sqlite", check=False)
    log.unlink()
    first = dl.minimize(command, PARAMETERS, journal=path, check=False, budget=10)
    assert first.stop is dl.Stop.BUDGET
    assert len(log.read_text().splitlines()) == 10
    sol = dl.resume(path, command, budget=1000)
    assert sol.point.tobytes() == whole.point.tobytes()
    assert sol.evaluations == whole.evaluations and sol.failures == whole.failures
    assert len(log.read_text().splitlines()) == whole.evaluations  # nothing ran twice
    again = dl.resume(path, command)
    assert again.point.tobytes() == whole.point.tobytes()
    assert len(log.read_text().splitlines()) == whole.evaluations  # a finished run: no run
