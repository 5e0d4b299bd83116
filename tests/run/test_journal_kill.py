"""Kill and Ctrl-C tests: a real search in a subprocess, ended by SIGKILL or SIGINT, then resumed.

The reference is the same search run without interruption in this process.  After a resume the
final point must be the same bit for bit, the journal must hold no point twice, and the total of
distinct evaluations must be the same: nothing lost, nothing repeated.

The objective is Wood's function, Moré, Garbow & Hillstrom 1981, problem 14 (minimum 0 at
(1, 1, 1, 1), standard start (-3, -1, -3, -1)); the default run includes the Hessian check, so
kills land in line searches, in the extrapolation of Powell's test and in the check.
"""

from __future__ import annotations

import importlib.util
import json
import os
import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

import directional as dl
from directional.run import journal as jr

START = [-3.0, -1.0, -3.0, -1.0]
ROOT = Path(__file__).resolve().parents[2]

CHILD = '''
import json, os, signal, sys, time
import directional as dl

path, mode, at, pause = sys.argv[1], sys.argv[2], int(sys.argv[3]), float(sys.argv[4])
calls = 0

def wood(x):
    global calls
    calls += 1
    if calls == at:
        os.kill(os.getpid(), signal.SIGKILL if mode == "kill" else signal.SIGINT)
    if pause:
        time.sleep(pause)
    a, b, c, d = x
    return (100 * (b - a * a) ** 2 + (1 - a) ** 2 + 90 * (d - c * c) ** 2 + (1 - c) ** 2
            + 10.1 * ((b - 1) ** 2 + (d - 1) ** 2) + 19.8 * (b - 1) * (d - 1))

import woodfunction  # beside this script: what the journal's fingerprint sees (see WOOD)
wood.__wrapped__ = woodfunction.value
sol = dl.minimize(wood, START, journal=path)
print(json.dumps({"point": sol.point.tobytes().hex(), "value": sol.value, "stop": sol.stop.value,
                  "evaluations": sol.evaluations, "calls": calls}))
'''.replace("START", repr(START), 1)


# The objective's fingerprint, the same in the child and in the test that resumes its journal: a
# module written beside the child (the journal sees through ``__wrapped__`` to it).
WOOD = """def value(x):
    a, b, c, d = x
    return float(100 * (b - a * a) ** 2 + (1 - a) ** 2 + 90 * (d - c * c) ** 2 + (1 - c) ** 2
                 + 10.1 * ((b - 1) ** 2 + (d - 1) ** 2) + 19.8 * (b - 1) * (d - 1))
"""


def wood_module(folder: Path):
    path = folder / "woodfunction.py"
    if not path.exists():
        path.write_text(WOOD)
    spec = importlib.util.spec_from_file_location("woodfunction", path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


class Wood:
    """Wood's function (MGH 1981, problem 14), counting its calls and the points it saw."""

    def __init__(self, folder: Path | None = None) -> None:
        self.points: list[bytes] = []
        if folder is not None:
            self.__wrapped__ = wood_module(folder).value

    def __call__(self, x: np.ndarray) -> float:
        self.points.append(x.tobytes())
        a, b, c, d = x
        return float(
            100 * (b - a * a) ** 2 + (1 - a) ** 2 + 90 * (d - c * c) ** 2 + (1 - c) ** 2
            + 10.1 * ((b - 1) ** 2 + (d - 1) ** 2) + 19.8 * (b - 1) * (d - 1)
        )


@pytest.fixture(scope="module")
def reference() -> dl.Solution:
    return dl.minimize(Wood(), START)


def start_child(tmp_path: Path, mode: str, at: int, pause: float = 0.0) -> subprocess.Popen:
    script = tmp_path / "child.py"
    script.write_text(CHILD)
    wood_module(tmp_path)
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    return subprocess.Popen(
        [sys.executable, str(script), str(tmp_path / "run.sqlite"), mode, str(at), str(pause)],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env=env,
    )


def stored_rows(path: Path) -> list[tuple[bytes, str, int]]:
    with sqlite3.connect(path) as db:
        rows = db.execute("SELECT point, status, sequence FROM evaluation ORDER BY row").fetchall()
    db.close()
    return rows


def resume_and_compare(path: Path, reference: dl.Solution, stored: int) -> None:
    """Resume; the result and the journal must be those of the uninterrupted run."""
    objective = Wood(path.parent)
    sol = dl.resume(path, objective)
    assert sol.point.tobytes() == reference.point.tobytes()
    assert sol.value == reference.value
    assert (sol.stop, sol.cycles, sol.evaluations) == (
        reference.stop,
        reference.cycles,
        reference.evaluations,
    )
    assert sol.verdict == reference.verdict
    assert len(objective.points) == reference.evaluations - stored  # only the missing ones
    rows = [row for row in stored_rows(path) if row[1] != "interrupted"]
    assert len(rows) == reference.evaluations
    assert len({row[0] for row in rows}) == len(rows)  # no point twice in the journal
    assert [row[0] for row in rows] == [e.point.tobytes() for e in reference.history]
    assert [row[2] for row in rows] == list(range(len(rows)))


def mid_line_search(reference: dl.Solution, after: int) -> int:
    """A call number whose evaluation lies strictly inside one line search (collinear with both
    neighbours, all three asked for by line searches), at or after ``after``."""
    history = reference.history
    for i in range(after, len(history) - 1):
        a, b, c = (history[j] for j in (i - 1, i, i + 1))
        if {a.purpose, b.purpose, c.purpose} != {"line"}:
            continue
        u, v = b.point - a.point, c.point - a.point
        cosine = abs(u @ v) / (np.linalg.norm(u) * np.linalg.norm(v))
        if cosine > 1 - 1e-12:
            return i + 1
    raise AssertionError("no evaluation inside a line search")


def kill_points(reference: dl.Solution) -> dict[str, int]:
    purposes = [e.purpose for e in reference.history]
    return {
        "start": 1,
        "after-start": 2,
        "mid-line-first-cycle": mid_line_search(reference, 5),
        "extrapolation": purposes.index("extrapolate") + 1,
        "mid-line-late": mid_line_search(reference, (2 * purposes.index("hessian")) // 3),
        "hessian-check": purposes.index("hessian") + 10,
        "last": len(purposes),
    }


@pytest.mark.parametrize(
    "where",
    [
        "start",
        "after-start",
        "mid-line-first-cycle",
        "extrapolation",
        "mid-line-late",
        "hessian-check",
        "last",
    ],
)
def test_sigkill_then_resume(tmp_path, reference, where, capsys):
    at = kill_points(reference)[where]
    child = start_child(tmp_path, "kill", at)
    out, err = child.communicate(timeout=120)
    assert child.returncode == -signal.SIGKILL, err
    path = tmp_path / "run.sqlite"
    rows = stored_rows(path)
    assert len(rows) == at - 1  # every evaluation before the kill was committed
    assert all(status == "ok" for _, status, _ in rows)
    assert Path(str(path) + ".lock").exists()  # left behind, but no longer locked
    resume_and_compare(path, reference, at - 1)
    message = capsys.readouterr().err
    assert f"resuming journal {str(path)!r}: {at - 1} evaluations stored" in message
    assert "the last run did not end cleanly" in message


def test_sigkill_at_a_random_moment_then_resume(tmp_path, reference):
    """Killed from outside while it works (maybe mid-commit): the journal is a valid prefix."""
    child = start_child(tmp_path, "none", 0, pause=0.002)
    path = tmp_path / "run.sqlite"
    deadline = time.monotonic() + 60
    count = 0
    while count < 120 and time.monotonic() < deadline:
        time.sleep(0.01)
        try:
            count = len(jr.read(path).evaluations)
        except dl.JournalError:
            count = 0  # not created yet
    child.kill()
    child.communicate(timeout=60)
    assert count >= 120 and child.returncode == -signal.SIGKILL
    stored = len(stored_rows(path))
    assert 120 <= stored < reference.evaluations
    resume_and_compare(path, reference, stored)


@pytest.mark.parametrize("where", ["mid-line-first-cycle", "mid-line-late"])
def test_ctrl_c_returns_the_best_point_so_far(tmp_path, reference, where):
    at = kill_points(reference)[where]
    child = start_child(tmp_path, "int", at)
    out, err = child.communicate(timeout=120)
    assert child.returncode == 0, err
    result = json.loads(out)
    assert result["stop"] == "interrupted"
    assert result["evaluations"] == at - 1
    best = min(reference.history[: at - 1], key=lambda e: e.value)
    assert result["point"] == best.point.tobytes().hex() and result["value"] == best.value
    path = tmp_path / "run.sqlite"
    rows = stored_rows(path)
    assert [status for _, status, _ in rows] == ["ok"] * (at - 1) + ["interrupted"]
    assert not Path(str(path) + ".lock").exists()  # a clean end releases the lock
    assert jr.read(path).sessions[0]["stop"] == "interrupted"
    resume_and_compare(path, reference, at - 1)


def test_ctrl_c_from_outside_at_a_random_moment(tmp_path, reference):
    child = start_child(tmp_path, "none", 0, pause=0.002)
    path = tmp_path / "run.sqlite"
    deadline = time.monotonic() + 60
    count = 0
    while count < 80 and time.monotonic() < deadline:
        time.sleep(0.01)
        try:
            count = len(jr.read(path).evaluations)
        except dl.JournalError:
            count = 0
    child.send_signal(signal.SIGINT)
    out, err = child.communicate(timeout=60)
    assert child.returncode == 0, err
    result = json.loads(out)
    assert result["stop"] == "interrupted"
    rows = stored_rows(path)
    ok = [row for row in rows if row[1] == "ok"]
    assert len(ok) == result["evaluations"]
    assert [row[1] for row in rows[len(ok) :]] in ([], ["interrupted"])
    resume_and_compare(path, reference, len(ok))
