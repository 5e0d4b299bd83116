"""Replicates from a problem file and the command line: the key, the option, ``show`` and the CSV.

Run through the command line's own entry point in this process (`directional.interface.cli.main`).
The objective is invented for these tests: a bowl (minimum at its centre, analytic) plus Gaussian
noise of a known standard deviation from a seeded generator.
"""

from __future__ import annotations

import csv
import re
import sqlite3
import textwrap
from pathlib import Path

import numpy as np
import pytest

import directional as dl
from directional.errors import ProblemError
from directional.interface import cli

PROBLEM = textwrap.dedent(
    """\
    [[parameter]]
    name = "a"
    start = 0.0
    lower = -5.0
    upper = 5.0

    [objective]
    function = "model:noisy"

    [search]
    budget = 300
    check = false
    replicates = 3
    """
)

MODEL = textwrap.dedent(
    """\
    # invented for the tests: a bowl, minimum 2 at a = 1.5, plus noise of standard deviation 0.01
    import numpy as np

    rng = np.random.default_rng(11)


    def noisy(x):
        return (x[0] - 1.5) ** 2 + 2.0 + 0.01 * rng.standard_normal()
    """
)


@pytest.fixture()
def folder(tmp_path: Path) -> Path:
    (tmp_path / "model.py").write_text(MODEL, encoding="utf-8")
    return tmp_path


def write(folder: Path, text: str) -> Path:
    path = folder / "problem.toml"
    path.write_text(text, encoding="utf-8")
    return path


def points_and_runs(path: Path) -> dict[bytes, int]:
    with sqlite3.connect(path) as db:
        runs: dict[bytes, int] = {}
        for (point,) in db.execute("SELECT point FROM evaluation ORDER BY row"):
            runs[point] = runs.get(point, 0) + 1
    return runs


@pytest.mark.parametrize(
    ("value", "words"),
    [("0", "search.replicates must be at least 1, got 0"),
     ("-2", "search.replicates must be at least 1, got -2"),
     ("2.5", "search.replicates"),
     ('"3"', "search.replicates")],
)
def test_a_bad_replicates_key_is_bad_input_naming_the_key_and_line(folder, capsys, value, words):
    path = write(folder, PROBLEM.replace("replicates = 3", f"replicates = {value}"))
    code = cli.main(["check", str(path)])
    err = capsys.readouterr().err
    assert code == cli.BAD_INPUT and words in err
    assert re.search(r"line 13\b", err), err
    with pytest.raises(ProblemError, match=r"line 13: search\.replicates"):
        dl.Problem.from_file(path)


def test_the_budget_must_hold_the_start_points_runs(folder, capsys):
    path = write(folder, PROBLEM.replace("budget = 300", "budget = 5"))
    assert cli.main(["check", str(path)]) == cli.BAD_INPUT
    err = capsys.readouterr().err
    assert "search.budget must allow at least n + 1 = 2 points each run 3 times, 6 evaluations, got 5" in err


def test_run_journals_every_replicate_and_show_lists_them(folder, capsys):
    path = write(folder, PROBLEM)
    assert cli.main(["run", str(path), "--quiet"]) in (cli.OK, 1)
    out = capsys.readouterr().out
    assert "noise from the 3 replicates of each point" in out
    journal = folder / "problem.journal.sqlite"
    runs = points_and_runs(journal)
    assert set(runs.values()) == {3}
    table = folder / "evaluations.csv"
    assert cli.main(["show", str(journal), "--evaluations", str(table)]) in (cli.OK, 1)
    assert "noise from the 3 replicates of each point" in capsys.readouterr().out
    with table.open(encoding="utf-8") as stream:
        listed = list(csv.DictReader(stream))
    assert len(listed) == 3 * len(runs)
    by_point: dict[str, list[int]] = {}
    for row in listed:
        by_point.setdefault(row["a"], []).append(int(row["replicate"]))
    assert all(numbers == [0, 1, 2] for numbers in by_point.values())
    start = [float(row["value"]) for row in listed if row["a"] == "0.0"]
    assert len(start) == 3 and len(set(start)) == 3  # three different runs of one point
    assert np.mean(start) == pytest.approx(4.25, abs=0.05)  # (0 - 1.5)² + 2, noise 0.01


def test_the_command_line_option_overrides_the_file(folder, capsys):
    path = write(folder, PROBLEM)
    assert cli.main(["run", str(path), "--quiet", "--replicates", "2"]) in (cli.OK, 1)
    assert "noise from the 2 replicates of each point" in capsys.readouterr().out
    assert set(points_and_runs(folder / "problem.journal.sqlite").values()) == {2}
    with pytest.raises(SystemExit):
        cli.main(["run", str(path), "--replicates", "0"])
    assert "--replicates" in capsys.readouterr().err


def test_a_journal_of_other_replicates_is_refused_naming_the_key(folder, capsys):
    path = write(folder, PROBLEM)
    assert cli.main(["run", str(path), "--quiet"]) in (cli.OK, 1)
    capsys.readouterr()
    write(folder, PROBLEM.replace("replicates = 3", "replicates = 4"))
    assert cli.main(["run", str(path), "--quiet"]) == cli.BAD_INPUT
    assert "replicates" in capsys.readouterr().err


@pytest.mark.parametrize("bad", [0, -1, 2.5, True, "2"])
@pytest.mark.parametrize("entry", ["minimize", "calibrate", "explore"])
def test_the_library_refuses_a_bad_count_naming_it(entry, bad):
    with pytest.raises(ProblemError, match="replicates"):
        if entry == "explore":
            dl.explore(lambda x: float(x[0] ** 2), [(-1.0, 1.0)], replicates=bad)
        else:
            getattr(dl, entry)(lambda x: np.array([x[0]]), [0.5], replicates=bad)


def test_the_library_refuses_a_budget_below_the_starts_runs():
    with pytest.raises(ProblemError, match="points each run 4 times, 12 evaluations, got 10"):
        dl.minimize(lambda x: float(x @ x), [1.0, 1.0], budget=10, replicates=4)
