"""Problem files: the schema, and one malformed file per kind of mistake, each named with its line.

The checks here are of our own file format (README, "Problem files"); the outside facts used
are TOML's own (the TOML 1.0 specification, read through the standard library's `tomllib`).
"""

from __future__ import annotations

import math
import pickle
import re
import textwrap
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import directional as dl
from directional.interface.problemfile import KeyLines, Problem

GOOD = textwrap.dedent(
    """\
    title = "A bowl"

    [[parameter]]
    name = "a"
    start = 1.0
    lower = -5
    upper = 5.0
    unit = "m"

    [[parameter]]
    name = "k"
    start = 0.5
    lower = 0.01
    upper = 10.0
    scale = "log"

    [objective]
    function = "model:bowl"
    kind = "value"

    [search]
    budget = 200
    point_tolerance = 1e-7
    check = false

    [journal]
    path = "runs/bowl.sqlite"
    """
)

MODEL = "def bowl(x):\n    return (x[0] - 2.0) ** 2 + (x[1] - 1.0) ** 2\n"


def write(folder: Path, text: str, model: str | None = MODEL) -> Path:
    path = folder / "problem.toml"
    path.write_text(text, encoding="utf-8")
    if model is not None:
        (folder / "model.py").write_text(model, encoding="utf-8")
    return path


def error_of(folder: Path, text: str) -> str:
    with pytest.raises(dl.ProblemError) as caught:
        Problem.from_file(write(folder, text))
    return str(caught.value)


def line_of(message: str) -> int:
    match = re.search(r"line (\d+)", message)
    assert match, message
    return int(match.group(1))


def test_a_good_file_reads_into_the_record(tmp_path):
    problem = Problem.from_file(write(tmp_path, GOOD))
    assert problem.title == "A bowl"
    assert problem.names == ("a", "k")
    assert problem.parameters[0] == dl.Parameter("a", 1.0, -5.0, 5.0, unit="m")
    assert problem.parameters[1].scale == "log"
    assert problem.objective.function == "model:bowl"
    assert problem.search.budget == 200
    assert problem.search.point_tolerance == 1e-7
    assert problem.search.check is False
    assert problem.journal == tmp_path / "runs" / "bowl.sqlite"  # relative to the file
    assert problem.source == tmp_path / "problem.toml"


def test_the_objective_is_found_beside_the_file_and_pickles(tmp_path, monkeypatch):
    path = write(tmp_path, GOOD)
    monkeypatch.chdir("/")  # the module is found beside the file, not in the current folder
    objective = Problem.from_file(path).make_objective()
    assert objective(np.array([2.0, 1.0])) == 0.0
    again = pickle.loads(pickle.dumps(objective))  # for worker processes
    assert again(np.array([3.0, 1.0])) == 1.0


def test_an_importable_module_is_found_too(tmp_path):
    text = GOOD.replace("model:bowl", "directional.testproblems.heater:cost")
    objective = Problem.from_file(write(tmp_path, text, model=None)).make_objective()
    assert objective(np.array([0.0, 0.0])) == pytest.approx(1.0)  # zero gains cost 1 (its doc)


def test_defaults_of_optional_tables(tmp_path):
    text = '[[parameter]]\nname = "x"\nstart = 0.0\n[objective]\nfunction = "model:bowl"\n'
    problem = Problem.from_file(write(tmp_path, text))
    assert problem.parameters[0].lower == -math.inf and problem.parameters[0].upper == math.inf
    assert problem.journal == tmp_path / "problem.journal.sqlite" and problem.journal_default
    assert problem.title == ""
    assert problem.search.budget is None and problem.search.starts == 1
    assert problem.objective.kind == "value"


def test_toml_infinities_are_bounds(tmp_path):
    text = GOOD.replace("lower = -5", "lower = -inf")
    assert Problem.from_file(write(tmp_path, text)).parameters[0].lower == -math.inf


@pytest.mark.parametrize(
    "old, new, key, line",
    [
        ("unit = \"m\"", "unit = \"m\"\nuper = 3.0", "uper", 9),  # unknown key in a parameter
        ("budget = 200", "budget = 200\nbugdet = 3", "bugdet", 23),  # unknown key in [search]
        ("[journal]", "[jurnal]", "jurnal", 26),  # unknown table
        ("title = \"A bowl\"", "titel = \"A bowl\"", "titel", 1),  # unknown top-level key
    ],
)
def test_unknown_keys_are_named_with_their_line(tmp_path, old, new, key, line):
    message = error_of(tmp_path, GOOD.replace(old, new))
    assert repr(key) in message
    assert line_of(message) == line


@pytest.mark.parametrize(
    "old, new, key, line",
    [
        ("start = 1.0", "start = \"one\"", "start", 5),
        ("budget = 200", "budget = 2.5", "budget", 22),
        ("check = false", "check = 3", "check", 24),
        ("scale = \"log\"", "scale = true", "scale", 15),
        ("path = \"runs/bowl.sqlite\"", "path = 7", "path", 27),
        ("kind = \"value\"", "kind = \"values\"", "kind", 19),
        ("lower = -5", "lower = true", "lower", 6),  # a bool is not a number
    ],
)
def test_wrong_types_are_named_with_their_line(tmp_path, old, new, key, line):
    message = error_of(tmp_path, GOOD.replace(old, new))
    assert key in message
    assert line_of(message) == line


@pytest.mark.parametrize(
    "old, new, words, line",
    [
        ("start = 1.0\n", "", "start", 3),  # missing field: the line of its table
        ("name = \"k\"\n", "", "name", 10),
        ("function = \"model:bowl\"\n", "", "function", 17),
        ("[objective]\nfunction = \"model:bowl\"\nkind = \"value\"\n", "", "objective", 1),
    ],
)
def test_missing_fields_are_named_with_their_line(tmp_path, old, new, words, line):
    message = error_of(tmp_path, GOOD.replace(old, new))
    assert words in message
    assert line_of(message) == line


def test_a_start_outside_its_bounds_names_the_parameter_and_line(tmp_path):
    message = error_of(tmp_path, GOOD.replace("start = 0.5", "start = 50.0"))
    assert "'k'" in message and line_of(message) == 12


def test_a_log_scale_with_a_negative_bound_is_refused(tmp_path):
    message = error_of(tmp_path, GOOD.replace("lower = 0.01", "lower = -1.0"))
    assert "log" in message and "'k'" in message


def test_a_repeated_name_is_refused(tmp_path):
    message = error_of(tmp_path, GOOD.replace('name = "k"', 'name = "a"'))
    assert "twice" in message and line_of(message) == 11


def test_a_single_bracket_parameter_table_is_explained(tmp_path):
    text = '[parameter]\nname = "x"\nstart = 0.0\n[objective]\nfunction = "model:bowl"\n'
    assert "[[parameter]]" in error_of(tmp_path, text)


def test_toml_syntax_errors_carry_tomllibs_line(tmp_path):
    message = error_of(tmp_path, GOOD.replace("budget = 200", "budget = = 200"))
    assert "not valid TOML" in message and "line 22" in message


def test_function_and_command_together_are_refused(tmp_path):
    text = GOOD.replace('kind = "value"', 'kind = "value"\ncommand = ["echo", "{a}", "{k}"]')
    assert "exactly one" in error_of(tmp_path, text)


def test_a_bad_function_reference_is_refused(tmp_path):
    message = error_of(tmp_path, GOOD.replace("model:bowl", "model.bowl"))
    assert "module:function" in message and line_of(message) == 18


COMMAND = GOOD.replace(
    'function = "model:bowl"',
    'command = ["python3", "sim.py", "--a={a}",\n    "--k={k}"]\ntimeout = 30\nread = "stdout"',
)


def test_a_command_reads_with_its_timeout_and_folder(tmp_path):
    problem = Problem.from_file(write(tmp_path, COMMAND))
    assert problem.objective.command == ("python3", "sim.py", "--a={a}", "--k={k}")
    assert problem.objective.timeout == 30.0
    assert problem.objective.read == "stdout"


def test_a_placeholder_that_names_no_parameter_is_named_with_its_line(tmp_path):
    message = error_of(tmp_path, COMMAND.replace("{k}", "{kk}"))
    assert "{kk}" in message and "names no parameter" in message
    assert line_of(message) == 18


def test_a_parameter_no_placeholder_uses_is_refused(tmp_path):
    message = error_of(tmp_path, COMMAND.replace('"--k={k}"', '"--k=1"'))
    assert "'k'" in message and "no placeholder" in message


def test_command_only_keys_are_refused_for_a_function(tmp_path):
    message = error_of(tmp_path, GOOD.replace('kind = "value"', 'kind = "value"\ntimeout = 5'))
    assert "timeout" in message and line_of(message) == 20


def test_a_missing_module_is_reported_when_the_objective_is_made(tmp_path):
    problem = Problem.from_file(write(tmp_path, GOOD.replace("model:bowl", "nomodel:bowl")))
    with pytest.raises(dl.ProblemError, match=r"line 18: .*no module 'nomodel'"):
        problem.make_objective()


def test_a_missing_function_is_reported_when_the_objective_is_made(tmp_path):
    problem = Problem.from_file(write(tmp_path, GOOD.replace("model:bowl", "model:cup")))
    with pytest.raises(dl.ProblemError, match=r"line 18: .*no function 'cup'"):
        problem.make_objective()


def test_a_missing_file_is_a_problem_error(tmp_path):
    with pytest.raises(dl.ProblemError, match="no such problem file"):
        Problem.from_file(tmp_path / "absent.toml")


@settings(max_examples=40, deadline=None)
@given(
    st.lists(st.from_regex(r"[a-z][a-z0-9_]{0,8}", fullmatch=True), min_size=1, max_size=5,
             unique=True)
)
def test_key_lines_find_every_key_of_every_table(keys):
    # Invariant: whatever the keys, each is found on the line it was written on.
    lines = ["[[parameter]]"] + [f"{k} = 1" for k in keys] + ["[search]"] + [f"{k} = 2" for k in keys]
    found = KeyLines("\n".join(lines))
    for i, k in enumerate(keys):
        assert found.line("parameter", 0, k) == i + 2
        assert found.line("search", k) == len(keys) + 3 + i


def test_check_may_be_quick_or_extrapolated_but_no_other_word(tmp_path):
    # our own format (README, "Problem files")
    quick = Problem.from_file(write(tmp_path, GOOD.replace("check = false", 'check = "quick"')))
    assert quick.search.check == "quick"
    full = Problem.from_file(write(tmp_path, GOOD.replace("check = false", 'check = "extrapolated"')))
    assert full.search.check == "extrapolated"
    plain = Problem.from_file(write(tmp_path, GOOD))
    assert plain.search.check is False
    message = error_of(tmp_path, GOOD.replace("check = false", 'check = "thorough"'))
    assert "search.check" in message and line_of(message) == 24


def test_a_budget_below_n_plus_one_is_refused(tmp_path):
    message = error_of(tmp_path, GOOD.replace("budget = 200", "budget = 2"))
    assert "n + 1 = 3" in message and line_of(message) == 22


def test_noise_is_a_level_or_estimate(tmp_path):
    read = Problem.from_file(write(tmp_path, GOOD.replace("check = false", 'noise = "estimate"')))
    assert read.search.noise == "estimate"
    level = Problem.from_file(write(tmp_path, GOOD.replace("check = false", "noise = 0.01")))
    assert level.search.noise == 0.01
    off = Problem.from_file(write(tmp_path, GOOD.replace("check = false", 'noise = "none"')))
    assert off.search.noise == "none"
    message = error_of(tmp_path, GOOD.replace("check = false", 'noise = "loud"'))
    assert "search.noise" in message and line_of(message) == 24
