"""Calibrating an external program: residual vectors, data tables, templates, parallel batches.

The programs are small Python scripts written here (started with ``sys.executable``) fitting
``y = a exp(-k t)`` to INVENTED data (made up for these tests, from no experiment).  Checks are
against an independent computation through the same program (a central-difference Jacobian),
against another route to the same numbers, and against what the journal and the file system
hold.  No timing is asserted (the speed of ``--workers`` is in ``benchmarks/``).
"""

from __future__ import annotations

import concurrent.futures as cf
import json
import sys
import textwrap
import threading
import time
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from directional.errors import ProblemError
from directional.interface.cli import main
from directional.interface.command import Command, EvaluationFailed
from directional.interface.problemfile import Problem
from directional.run import journal as journals
from directional.run.ordered import InOrder

# INVENTED measurements: y = 5 exp(-0.5 t) with made-up noise.
T = [0.0, 0.5, 1.0, 1.5, 2.0, 3.0, 4.0, 5.0]
Y = [5.03, 3.92, 3.01, 2.41, 1.80, 1.12, 0.66, 0.42]
SIGMA = [0.05, 0.05, 0.05, 0.04, 0.04, 0.03, 0.03, 0.02]

JSON_RESIDUALS = f"""
import json, math, sys
T, Y, S = {T!r}, {Y!r}, {SIGMA!r}
a, k = float(sys.argv[1]), float(sys.argv[2])
print("decay model: starting")
print(json.dumps({{"residuals": [(a * math.exp(-k * t) - y) / s for t, y, s in zip(T, Y, S)]}}))
"""

# Reads its parameters from the input deck rendered from a template; writes predictions to a CSV.
DECK_PREDICTIONS = f"""
import math, sys
T = {T!r}
values = dict(line.split("=") for line in open("deck.in") if "=" in line)
a, k = float(values["a "]), float(values["k "])
extra = 2 if len(sys.argv) > 1 and sys.argv[1] == "more" else 0
with open("out.csv", "w") as f:
    f.write("t,y\\n")
    for t in T + [9.0] * extra:
        f.write(f"{{t!r}},{{a * math.exp(-k * t)!r}}\\n")
"""

DECK = "# decay model input deck {{not a placeholder}}\na = {a:.17g}\nk = {k:.17g}\n"


def parameters() -> str:
    return textwrap.dedent("""
        [[parameter]]
        name = "a"
        start = 3.0
        lower = 0.1
        upper = 20.0

        [[parameter]]
        name = "k"
        start = 1.0
        lower = 0.01
        upper = 5.0
        """)


def json_problem(folder: Path, extra: str = "") -> Path:
    (folder / "decay.py").write_text(JSON_RESIDUALS)
    text = parameters() + textwrap.dedent(f"""
        [objective]
        command = [{json.dumps(sys.executable)}, "decay.py", "{{a}}", "{{k}}"]
        read = "json:residuals"
        kind = "residuals"
        timeout = 60
        """) + extra
    path = folder / "decay.toml"
    path.write_text(text)
    return path


def table_problem(folder: Path, objective: str = "", data: str = "") -> Path:
    (folder / "predict.py").write_text(DECK_PREDICTIONS)
    (folder / "deck.in").write_text(DECK)
    rows = "\n".join(f"{t},{y},{s}" for t, y, s in zip(T, Y, SIGMA))
    (folder / "readings.csv").write_text("# INVENTED data\ntime,y,sd\n" + rows + "\n")
    text = parameters() + textwrap.dedent(objective or f"""
        [objective]
        command = [{json.dumps(sys.executable)}, "predict.py"]
        templates = ["deck.in"]
        files = ["predict.py"]
        read = "csv:out.csv:y"
        timeout = 60
        """) + textwrap.dedent(data or """
        [data]
        file = "readings.csv"
        observed = "y"
        sigma = "sd"
        variables = "time"
        """)
    path = folder / "table.toml"
    path.write_text(text)
    return path


def run(*arguments: str) -> int:
    return main(["run", *map(str, arguments), "--quiet"])


# --- (a) standard errors of a program's residual vector ---------------------------------------


def test_program_residuals_give_standard_errors_of_the_central_difference_jacobian(tmp_path):
    problem = json_problem(tmp_path)
    assert run(problem, "--no-journal", "--json", tmp_path / "out.json") == 0
    solution = json.loads((tmp_path / "out.json").read_text())
    estimate = np.array([solution["point"][name] for name in ("a", "k")])
    errors = np.array([solution["uncertainty"]["standard_errors"][n] for n in ("a", "k")])
    # Independently: a central-difference Jacobian through the same program (step 1e-5 of each
    # value), s² = S / (m - p), covariance s² (JᵀJ)⁻¹ (Bates & Watts 1988, sec. 2.3).
    program = Command([sys.executable, "decay.py", "{a}", "{k}"], ["a", "k"], timeout=60,
                      read="json:residuals", vector=True, workdir=tmp_path)
    r = program(estimate)
    columns = []
    for i in range(2):
        step = np.zeros(2)
        step[i] = 1e-5 * abs(estimate[i])
        columns.append((program(estimate + step) - program(estimate - step)) / (2 * step[i]))
    jacobian = np.column_stack(columns)
    s2 = float(r @ r) / (r.size - 2)
    expected = np.sqrt(np.diag(s2 * np.linalg.inv(jacobian.T @ jacobian)))
    assert errors == pytest.approx(expected, rel=0.10)


def test_check_reports_the_residual_count(tmp_path, capsys):
    assert main(["check", str(json_problem(tmp_path))]) == 0
    assert "from 8 residuals" in capsys.readouterr().out


# --- (b) the data-table route -----------------------------------------------------------------


def test_data_table_route_gives_the_residual_route_estimates(tmp_path):
    one, two = tmp_path / "json", tmp_path / "table"
    one.mkdir()
    two.mkdir()
    assert run(json_problem(one), "--no-journal", "--json", one / "out.json") == 0
    assert run(table_problem(two), "--no-journal", "--json", two / "out.json",
               "--plots", two / "plots", "--plot-evaluations", "0") == 0
    first, second = (json.loads((f / "out.json").read_text()) for f in (one, two))
    assert second["point"] == pytest.approx(first["point"], rel=1e-9)
    for name in ("a", "k"):
        assert second["uncertainty"]["standard_errors"][name] == pytest.approx(
            first["uncertainty"]["standard_errors"][name], rel=1e-6)
    assert (two / "plots" / "fit.png").stat().st_size > 0
    assert (two / "plots" / "residuals.png").stat().st_size > 0
    assert not any((two / "evaluations").iterdir())  # successful runs leave no folder


def test_data_table_residuals_are_weighted_model_minus_data(tmp_path):
    problem = Problem.from_file(table_problem(tmp_path))
    residuals = problem.make_objective()(np.array([5.0, 0.5]))
    expected = (5.0 * np.exp(-0.5 * np.array(T)) - np.array(Y)) / np.array(SIGMA)
    assert residuals == pytest.approx(expected, rel=1e-12)
    series = problem.make_fit()(np.array([5.0, 0.5]))
    assert [s["name"] for s in series] == ["y"]
    assert series[0]["x"] == pytest.approx(T) and series[0]["sigma"] == pytest.approx(SIGMA)


def test_several_observed_series_are_concatenated(tmp_path):
    (tmp_path / "two.csv").write_text("t,u,v\n0,1,10\n1,2,20\n2,3,30\n")
    code = "print(*[1, 2, 3, 11, 22, 33])"
    text = parameters() + textwrap.dedent(f"""
        [objective]
        command = [{json.dumps(sys.executable)}, "-c", {json.dumps(code)}, "{{a}}", "{{k}}"]
        [data]
        file = "two.csv"
        observed = ["u", "v"]
        sigma = 0.5
        """)
    (tmp_path / "two.toml").write_text(text)
    problem = Problem.from_file(tmp_path / "two.toml")
    assert problem.objective.kind == "residuals"
    r = problem.make_objective()(np.array([1.0, 1.0]))
    assert r == pytest.approx(np.array([0, 0, 0, 1, 2, 3]) / 0.5)


# --- templates and folders --------------------------------------------------------------------


def test_template_is_rendered_into_a_fresh_folder_kept_when_asked(tmp_path):
    problem = Problem.from_file(table_problem(tmp_path, objective=f"""
        [objective]
        command = [{json.dumps(sys.executable)}, "predict.py"]
        templates = ["deck.in"]
        files = ["predict.py"]
        read = "csv:out.csv:y"
        keep_folders = true
        """))
    problem.make_objective()(np.array([2.0, 0.25]))
    (kept,) = (tmp_path / "evaluations").iterdir()
    deck = (kept / "deck.in").read_text()
    assert deck == "# decay model input deck {not a placeholder}\na = 2\nk = 0.25\n"
    assert (kept / "predict.py").exists() and (kept / "out.csv").exists()


def test_failed_evaluation_keeps_its_folder_and_names_it(tmp_path):
    problem = Problem.from_file(table_problem(tmp_path, objective=f"""
        [objective]
        command = [{json.dumps(sys.executable)}, "predict.py", "more"]
        templates = ["deck.in"]
        files = ["predict.py"]
        read = "csv:out.csv:y"
        """))
    objective = problem.make_objective()
    with pytest.raises(EvaluationFailed) as caught:  # "more": two rows too many
        objective(np.array([2.0, 0.25]))
    assert "gave 10 predictions" in caught.value.detail and "needs 8" in caught.value.detail
    (kept,) = (tmp_path / "evaluations").iterdir()
    assert (kept / "out.csv").exists()


# --- (c) --workers 2 gives the serial journal -------------------------------------------------


def test_workers_journal_is_the_serial_journal_in_order(tmp_path):
    problem = json_problem(tmp_path)
    assert run(problem, "--journal", tmp_path / "serial.sqlite") == 0
    assert run(problem, "--journal", tmp_path / "parallel.sqlite", "--workers", "2") == 0
    serial = journals.read(tmp_path / "serial.sqlite").evaluations
    parallel = journals.read(tmp_path / "parallel.sqlite").evaluations
    # enough evaluations for the order to matter (about 30 since calibrate runs Gauss-Newton steps)
    assert len(serial) == len(parallel) > 20
    for one, two in zip(serial, parallel, strict=True):
        assert one.point.tobytes() == two.point.tobytes()
        assert (one.value, one.status, one.purpose, one.sequence) == (
            two.value, two.status, two.purpose, two.sequence)
    overlap = [a.started + a.seconds > b.started for a, b in zip(parallel, parallel[1:])]
    assert any(overlap)  # some evaluations did run at the same time


def test_in_order_delivers_in_submission_order_whatever_finishes_first():
    release = threading.Event()

    def slow(k: int) -> int:
        if k == 0:
            release.wait(10)
        return k

    with InOrder(cf.ThreadPoolExecutor(3), workers=3) as pool:
        futures = [pool.submit(slow, k) for k in range(3)]
        time.sleep(0.2)
        assert not any(f.done() for f in futures)  # 1 and 2 are finished but wait for 0
        release.set()
        seen = []
        pending = set(futures)
        while pending:
            done, pending = cf.wait(pending, return_when=cf.FIRST_COMPLETED)
            assert len(done) == 1
            seen += [f.result() for f in done]
    assert seen == [0, 1, 2]


def test_workers_refuse_a_shared_folder_for_a_result_file(tmp_path):
    problem = table_problem(tmp_path, objective=f"""
        [objective]
        command = [{json.dumps(sys.executable)}, "predict.py"]
        read = "csv:out.csv:y"
        workdir = "."
        """)
    assert run(problem, "--no-journal", "--workers", "2") == 2


# --- (d) failures -----------------------------------------------------------------------------


def failing(tmp_path: Path, body: str) -> Command:
    (tmp_path / "bad.py").write_text(body)
    return Command([sys.executable, "bad.py", "{a}"], ["a"], timeout=60, read="stdout",
                   vector=True, workdir=tmp_path)


def test_wrong_length_fails_that_evaluation(tmp_path):
    problem = Problem.from_file(json_problem(tmp_path))
    objective = problem.make_objective()
    assert objective(np.array([5.0, 0.5])).size == 8
    (tmp_path / "decay.py").write_text("print('{\"residuals\": [1.0, 2.0]}')")
    with pytest.raises(EvaluationFailed, match="gave 2 residuals where its first run gave 8"):
        objective(np.array([5.0, 0.5]))


def test_nan_in_the_vector_fails_that_evaluation(tmp_path):
    with pytest.raises(EvaluationFailed, match="entry 1 of standard output is nan"):
        failing(tmp_path, "print(1.0, float('nan'), 2.0)")([1.0])


def test_missing_output_file_fails_that_evaluation(tmp_path):
    problem = Problem.from_file(table_problem(tmp_path, objective=f"""
        [objective]
        command = [{json.dumps(sys.executable)}, "-c", "pass", "{{a}}", "{{k}}"]
        read = "csv:out.csv:y"
        fresh_folder = true
        """))
    with pytest.raises(EvaluationFailed, match="wrote no file 'out.csv'"):
        problem.make_objective()(np.array([5.0, 0.5]))


def test_template_placeholder_naming_no_parameter_is_an_error_at_load(tmp_path):
    table_problem(tmp_path)
    (tmp_path / "deck.in").write_text("# deck\na = {a}\nk = {kk:.6e}\n")
    with pytest.raises(ProblemError) as caught:
        Problem.from_file(tmp_path / "table.toml")
    message = str(caught.value)
    assert "deck.in" in message and "line 3" in message and "{kk:.6e}" in message
    (tmp_path / "deck.in").write_text("a = {a}\nk = {k}\nset {x, y}\n")
    with pytest.raises(ProblemError, match=r"line 3.*\{\{ and \}\}"):
        Problem.from_file(tmp_path / "table.toml")


def test_crashing_program_fails_and_the_search_steps_around_it(tmp_path):
    crash = JSON_RESIDUALS.replace(
        'print("decay model: starting")',
        'import os\nif 4.4 < a < 4.6: os.abort()\nprint("decay model: starting")')
    problem = json_problem(tmp_path)
    (tmp_path / "decay.py").write_text(crash)
    assert run(problem, "--journal", tmp_path / "j.sqlite", "--json", tmp_path / "o.json") in (0, 1)
    evaluations = journals.read(tmp_path / "j.sqlite").evaluations
    crashed = [e for e in evaluations if e.status == "failed"]
    assert crashed and all(4.4 < e.point[0] < 4.6 for e in crashed)
    assert all("SIGABRT" in e.detail for e in crashed)
    point = json.loads((tmp_path / "o.json").read_text())["point"]
    assert point["a"] == pytest.approx(5.03, abs=0.1)  # the fit, beyond the band that crashes


# --- residual vectors in the journal ---------------------------------------------------------


def test_show_gives_the_uncertainty_from_stored_residual_vectors(tmp_path):
    problem = json_problem(tmp_path)
    journal = tmp_path / "j.sqlite"
    assert run(problem, "--journal", journal, "--json", tmp_path / "run.json") == 0
    (tmp_path / "decay.py").write_text("raise SystemExit(9)")  # show must not run the program
    assert main(["show", str(journal), "--json", str(tmp_path / "show.json"),
                 "--plot-evaluations", "0"]) == 0
    ran, shown = (json.loads((tmp_path / f).read_text()) for f in ("run.json", "show.json"))
    assert shown["point"] == ran["point"]
    assert shown["uncertainty"]["standard_errors"] == ran["uncertainty"]["standard_errors"]
    assert not any("recomputed" in note for note in shown["notes"])


def test_a_journal_without_the_residual_column_still_opens(tmp_path):
    import sqlite3

    import directional as dl

    identity = journals.run_identity("calibrate", [dl.Parameter("a", 1.0)])
    path = tmp_path / "old.sqlite"
    with journals.Journal.open(path, identity):
        pass
    with sqlite3.connect(path) as connection:  # as written before the column existed
        connection.execute("ALTER TABLE evaluation DROP COLUMN residuals")
    assert journals.read(path).evaluations == ()
    with journals.Journal.open(path, identity) as journal:
        assert journal.stored_vectors() == {}


def test_check_verifies_the_length_of_the_first_answer(tmp_path, capsys):
    problem = table_problem(tmp_path, objective=f"""
        [objective]
        command = [{json.dumps(sys.executable)}, "predict.py", "more"]
        templates = ["deck.in"]
        files = ["predict.py"]
        read = "csv:out.csv:y"
        """)
    assert main(["check", str(problem)]) == 1
    out = capsys.readouterr().out
    assert "must give 8 predictions" in out and "gave 10 predictions" in out


@pytest.mark.parametrize(
    ("spec", "text", "expected"),
    [
        ("csv:o.csv:u,v", "t,u,v\n0,1,4\n1,2,5\n", [1, 2, 4, 5]),
        ("csv:o.csv:v", "t,u,v\n0,1,x\n", "data row 1, column 'v': 'x' is not a number"),
        ("csv:o.csv:w", "t,u,v\n0,1,2\n", "no column 'w' (columns: t, u, v)"),
        ("stdout", "1, 2\n\n3\n", [1, 2, 3]),
        ("stdout", "1 2\nresidual 3\n", "line 2 of test is not a row of numbers"),
        ("json:r", '{"r": [1, true]}', "entry 1 of JSON 'r' is True, not a number"),
        ("json:r", '{"r": 7}', [7]),
    ],
)
def test_vectors_are_read_strictly(spec, text, expected):
    # Common practice, no source: CSV with a header row, numbers in the usual notation.
    from directional.interface import reading

    got = reading.vector(reading.parse(spec, vector=True), text, "test")
    if isinstance(expected, str):
        assert isinstance(got, str) and expected in got
    else:
        assert got.tolist() == expected


@settings(max_examples=200, deadline=None)
@given(value=st.floats(allow_nan=False, allow_infinity=False))
def test_template_values_read_back_bit_for_bit(tmp_path_factory, value):
    # Common practice, no source: repr and 17 significant digits round-trip a double.
    from directional.interface.templates import Template

    path = tmp_path_factory.mktemp("deck") / "deck.in"
    path.write_text("a = {a}\nb = {a:.17g}\n")
    text = Template.read(path, ["a"]).render({"a": value})
    first, second = (float(line.split("=")[1]) for line in text.splitlines())
    assert np.float64(first).tobytes() == np.float64(value).tobytes()
    assert np.float64(second).tobytes() == np.float64(value).tobytes()
