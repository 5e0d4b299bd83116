"""Tests of `directional.interface.command`: an external program as the objective.

The programs run here are our own cooling-rod script (`directional.testproblems.cooling_rod`,
invented data) and a few one-line Python programs.  Checks are against what the operating system
reports (exit codes, which processes still exist, files present) and against the same model run
in this process; no timing is asserted.
"""

from __future__ import annotations

import json
import math
import multiprocessing
import os
import pickle
import sys
import time
import tracemalloc
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from directional.errors import ProblemError
from directional.interface import reading
from directional.interface.command import Command, EvaluationFailed
from directional.testproblems import cooling_rod

ROD = str(Path(cooling_rod.__file__).resolve())
TRUE = (cooling_rod.TRUE["conductivity"], cooling_rod.TRUE["coefficient"])


def rod(*extra: str, **options) -> Command:
    """The cooling-rod script as a command with parameters k and h (it prints "misfit VALUE")."""
    options.setdefault("read", "label:misfit")
    argv = [sys.executable, ROD, "--conductivity", "{k}", "--coefficient", "{h}", *extra]
    return Command(argv, ["k", "h"], **options)


def python(code: str, *args: str, names=("a",), **options) -> Command:
    """A one-line Python program as a command."""
    return Command([sys.executable, "-c", code, *args], list(names), **options)


def gone(pid: int) -> bool:
    """True if no live process has this pid (a zombie waiting for its reaper counts as gone)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True
    try:
        stat = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return True
    return stat.rsplit(")", 1)[1].split()[0] in ("Z", "X")


def wait_gone(pids: list[int], seconds: float = 10.0) -> list[int]:
    """Wait (up to ``seconds``) for the processes to disappear; return those still alive."""
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        alive = [p for p in pids if not gone(p)]
        if not alive:
            return []
        time.sleep(0.05)
    return [p for p in pids if not gone(p)]


def read_pids(path: Path) -> list[int]:
    return [int(p) for p in path.read_text().split()]


# --- reading the value ------------------------------------------------------------------------


def test_stdout_value_is_picked_by_its_label():
    # The script prints a temperature table, then "misfit <value>"; the same model in-process.
    assert rod(timeout=60)(TRUE) == pytest.approx(cooling_rod.misfit(*TRUE), rel=1e-12)


def test_module_invocation_and_workdir(tmp_path):
    argv = [sys.executable, "-m", "directional.testproblems.cooling_rod",
            "--conductivity", "{k}", "--coefficient", "{h}", "--out", "m.txt"]
    cmd = Command(argv, ["k", "h"], timeout=60, workdir=tmp_path, read="label:misfit")
    assert cmd([150.0, 14.0]) == pytest.approx(cooling_rod.misfit(150.0, 14.0), rel=1e-12)
    assert (tmp_path / "m.txt").exists()  # the program ran in workdir


def test_value_read_from_file(tmp_path):
    cmd = rod("--out", "out.txt", read="file:out.txt", workdir=tmp_path, timeout=60)
    assert cmd([160.0, 11.0]) == pytest.approx(cooling_rod.misfit(160.0, 11.0), rel=1e-12)
    assert (tmp_path / "out.txt").read_text() == f"{cooling_rod.misfit(160.0, 11.0)!r}\n"


def test_stale_file_is_not_read(tmp_path):
    (tmp_path / "out.txt").write_text("42\n")
    cmd = rod(read="file:out.txt", workdir=tmp_path, timeout=60)  # the script writes no file
    with pytest.raises(EvaluationFailed) as caught:
        cmd(TRUE)
    assert caught.value.status == "failed"
    assert "unchanged" in caught.value.detail


def test_missing_file_fails(tmp_path):
    cmd = rod(read="file:nothing.txt", workdir=tmp_path, timeout=60)
    with pytest.raises(EvaluationFailed, match="wrote no file 'nothing.txt'"):
        cmd(TRUE)


def test_per_evaluation_folders(tmp_path):
    plain = rod("--out", "out.txt", read="file:out.txt", workdir=tmp_path,
                per_evaluation_dir=True, timeout=60)
    assert plain(TRUE) == pytest.approx(cooling_rod.misfit(*TRUE), rel=1e-12)
    assert list(tmp_path.iterdir()) == []  # removed after success
    kept = rod("--out", "out.txt", read="file:out.txt", workdir=tmp_path,
               per_evaluation_dir=True, keep=True, timeout=60)
    kept(TRUE)
    kept(TRUE)
    folders = sorted(tmp_path.iterdir())
    assert len(folders) == 2
    assert all(f.name.startswith("eval-") and (f / "out.txt").exists() for f in folders)


def test_failed_run_keeps_its_folder(tmp_path):
    cmd = rod("--fail-above", "100", workdir=tmp_path, per_evaluation_dir=True, timeout=60)
    with pytest.raises(EvaluationFailed) as caught:
        cmd(TRUE)
    (folder,) = tmp_path.iterdir()
    assert f"folder: {folder}" in caught.value.detail


def test_json_dotted_key():
    residuals = cooling_rod.residuals(*TRUE)
    fit = rod("--json", read="json:fit.misfit", timeout=60)(TRUE)
    assert fit == pytest.approx(cooling_rod.misfit(*TRUE), rel=1e-12)
    first = rod("--json", read="json:residuals.0", timeout=60)(TRUE)
    assert first == pytest.approx(residuals[0], rel=1e-12, abs=1e-12)


def test_json_missing_key_is_named():
    with pytest.raises(EvaluationFailed) as caught:
        rod("--json", read="json:fit.chi2", timeout=60)(TRUE)
    assert "'fit.chi2'" in caught.value.detail
    assert "misfit" in caught.value.detail  # the keys that exist are listed


def test_json_on_the_last_line():
    # Braces meant for the program are doubled: a single brace starts a placeholder.
    cmd = python("print('log line 7'); print('{{\"v\": {{\"w\": 2.5}}}}')", "{a}",
                 read="json:v.w", timeout=60)
    assert cmd([1.0]) == 2.5


def test_env_is_added():
    code = "import os, sys; print(float(os.environ['ROD_SCALE']) * float(sys.argv[1]))"
    cmd = python(code, "{a}", env={"ROD_SCALE": "3"}, timeout=60)
    assert cmd([0.5]) == 1.5


STDOUT = reading.ReadSpec("stdout")


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("12.5\n", 12.5),
        ("log line 1\n  -2.5e+3  \n\n", -2500.0),
        ("step 1000\n.5", 0.5),
        ("1E-3", 1e-3),
    ],
)
def test_last_line_one_number(text, expected):
    # Common practice, no source: a number is the usual decimal / exponent notation.
    assert reading.number(STDOUT, text, "test") == expected


@pytest.mark.parametrize(
    "text",
    [
        "misfit 3.5\ndone in 3 s, 1000 steps",  # was once read as 1000
        "step42 done", "version 1.2.3", "12.5e", "", "infinite", "1 2", "misfit 12.5",
    ],
)
def test_anything_but_one_number_on_the_last_line_fails_quoting_it(text):
    reason = reading.number(STDOUT, text, "test")
    assert isinstance(reason, str)
    last = [line for line in text.splitlines() if line.strip()]
    if last:
        assert repr(last[-1].strip()) in reason


@pytest.mark.parametrize("text", ["nan", "-inf", "Infinity"])
def test_non_finite_number_is_a_failure(text):
    assert "not a finite value" in reading.number(STDOUT, text, "test")


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("cost = 1.25\ndone in 3 s, 1000 steps\n", 1.25),
        ("cost: -2e-3\n", -2e-3),
        ("cost 7\ncost = 8\nother = 9", 8.0),  # the last labelled line
        ("  cost=0.5  ", 0.5),
    ],
)
def test_value_picked_by_label(text, expected):
    assert reading.number(reading.ReadSpec("label", "cost"), text, "test") == expected


@pytest.mark.parametrize("text", ["costs = 1", "cost = 1 s", "total cost = 2", "cost = nan", ""])
def test_label_needs_a_whole_line(text):
    assert isinstance(reading.number(reading.ReadSpec("label", "cost"), text, "test"), str)


def test_program_ending_with_a_count_fails_with_the_line_quoted():
    # A program that prints "done in 3 s, 1000 steps" after its value once had 1000 stored.
    code = "print(2.5 * float(__import__('sys').argv[1])); print('done in 3 s, 1000 steps')"
    with pytest.raises(EvaluationFailed) as caught:
        python(code, "{a}", timeout=60)([1.0])
    assert "'done in 3 s, 1000 steps'" in caught.value.detail
    labelled = "print('cost =', 2.5 * float(__import__('sys').argv[1])); print('done, 1000 steps')"
    assert python(labelled, "{a}", timeout=60, read="label:cost")([2.0]) == 5.0


# --- validation at construction ---------------------------------------------------------------


@pytest.mark.parametrize(
    ("argv", "names", "options", "message"),
    [
        (["{prog}", "--k", "{kk}"], ["k"], {}, "{kk}"),
        (["{prog}", "--k", "{}"], ["k"], {}, "{}"),
        (["{prog}", "--k", "{0}"], ["k"], {}, "{0}"),
        (["{prog}", "--k", "{k.real}"], ["k"], {}, "{k.real}"),
        (["{prog}", "--k", "{k:.3f}"], ["k"], {}, "{k:.3f}"),
        (["{prog}", "--k", "{k!r}"], ["k"], {}, "{k!r}"),
        (["{prog}", "--k", "{k"], ["k"], {}, "argv[2]"),
        (["{prog}", "--k", "{k}"], ["k", "h"], {}, "'h'"),
        ([], ["k"], {}, "empty"),
        ("python sim.py {k}", ["k"], {}, "list of strings"),
        (["no-such-program-d1r3ct10nal", "{k}"], ["k"], {}, "no-such-program-d1r3ct10nal"),
        (["{k}", "{k}"], ["k"], {}, "argv[0]"),
        (["{prog}", "{k}"], ["k", "k"], {}, "twice"),
        (["{prog}", "{k}"], ["k-1"], {}, "'k-1'"),
        (["{prog}", "{k}"], "k", {}, "names"),
        (["{prog}", "{k}"], ["k"], {"read": "xml:misfit"}, "read must be"),
        (["{prog}", "{k}"], ["k"], {"read": "stdout:last"}, "read must be"),
        (["{prog}", "{k}"], ["k"], {"read": "file:"}, "file name"),
        (["{prog}", "{k}"], ["k"], {"read": "json:fit..misfit"}, "dotted"),
        (["{prog}", "{k}"], ["k"], {"read": "json:"}, "dotted"),
        (["{prog}", "{k}"], ["k"], {"read": "label:a b"}, "one word"),
        (["{prog}", "{k}"], ["k"], {"read": "label:x", "vector": True}, "one number"),
        (["{prog}", "{k}"], ["k"], {"read": "csv:out.csv:T"}, "vector"),
        (["{prog}", "{k}"], ["k"], {"read": "csv:out.csv", "vector": True}, "csv:PATH:COLUMN"),
        (["{prog}"], ["k"], {"files": ["/no/such/file"]}, "does not exist"),
        (["{prog}", "{k}"], ["k"], {"timeout": 0}, "timeout"),
        (["{prog}", "{k}"], ["k"], {"timeout": "60"}, "timeout"),
        (["{prog}", "{k}"], ["k"], {"grace": -1.0}, "grace"),
        (["{prog}", "{k}"], ["k"], {"max_output": 0}, "max_output"),
        (["{prog}", "{k}"], ["k"], {"max_output": True}, "max_output"),
        (["{prog}", "{k}"], ["k"], {"keep": True}, "per_evaluation_dir"),
        (["{prog}", "{k}"], ["k"], {"env": {"A": 1}}, "env['A']"),
    ],
)
def test_bad_construction_is_named(argv, names, options, message):
    if isinstance(argv, list) and argv and argv[0] == "{prog}":
        argv = [sys.executable, *argv[1:]]
    with pytest.raises(ProblemError) as caught:
        Command(argv, names, **options)
    assert message in str(caught.value)
    assert isinstance(caught.value, ValueError)


def test_workdir_that_is_a_file(tmp_path):
    (tmp_path / "f").write_text("")
    with pytest.raises(ProblemError, match="not a folder"):
        Command([sys.executable, "{k}"], ["k"], workdir=tmp_path / "f")


def test_literal_braces_are_allowed():
    cmd = Command([sys.executable, "-c", "{{}}", "{{k}}={k}"], ["k"])
    assert cmd.arguments([2.0])[2:] == ["{}", "{k}=2.0"]


@pytest.mark.parametrize("x", [[1.0], [1.0, 2.0, 3.0], [math.nan, 1.0], [1.0, math.inf]])
def test_bad_point(x):
    with pytest.raises(ProblemError):
        rod().arguments(x)


def test_relative_program_path_is_made_absolute(tmp_path, monkeypatch):
    script = tmp_path / "sim"
    script.write_text(f"#!{sys.executable}\nimport sys\nprint(float(sys.argv[1]) + 1)\n")
    script.chmod(0o755)
    monkeypatch.chdir(tmp_path)
    cmd = Command(["./sim", "{a}"], ["a"], workdir=tmp_path / "runs", per_evaluation_dir=True)
    assert cmd.arguments([1.0])[0] == str(script)
    assert cmd([1.0]) == 2.0


def test_program_that_vanished(tmp_path):
    script = tmp_path / "sim"
    script.write_text(f"#!{sys.executable}\nprint(1)\n")
    script.chmod(0o755)
    cmd = Command([str(script), "{a}"], ["a"])
    script.unlink()
    with pytest.raises(EvaluationFailed) as caught:
        cmd([1.0])
    assert caught.value.status == "failed"
    assert "could not start" in caught.value.detail


# --- no shell; exact values -------------------------------------------------------------------

ECHO = (
    "import json, sys, pathlib; "
    "pathlib.Path('argv.json').write_text(json.dumps(sys.argv[1:])); print(0.5)"
)


def test_arguments_reach_the_program_verbatim(tmp_path):
    # Shell metacharacters are plain text without a shell (POSIX exec semantics; common
    # practice, no source).  A shell would have created the PWNED files or globbed "*".
    template = [";", "touch PWNED1", "$(touch PWNED2)", "`touch PWNED3`", "&&", "|", "*",
                "$HOME", "> redirected", "'{a}'", "{a}; touch PWNED4", "{{a}}"]
    cmd = Command([sys.executable, "-c", ECHO, *template], ["a"], workdir=tmp_path, timeout=60)
    assert cmd([0.1]) == 0.5
    received = json.loads((tmp_path / "argv.json").read_text())
    expected = [";", "touch PWNED1", "$(touch PWNED2)", "`touch PWNED3`", "&&", "|", "*",
                "$HOME", "> redirected", "'0.1'", "0.1; touch PWNED4", "{a}"]
    assert received == expected
    assert sorted(p.name for p in tmp_path.iterdir()) == ["argv.json"]


def test_values_reach_the_program_bit_for_bit(tmp_path):
    x = [0.1 + 0.2, 5e-324, -0.0, 1.7976931348623157e308, 1.0 / 3.0, -2.5e-17]
    names = ["a", "b", "c", "d", "e", "f"]
    cmd = Command([sys.executable, "-c", ECHO, *(f"{{{n}}}" for n in names)], names,
                  workdir=tmp_path, timeout=60)
    cmd(x)
    received = [float(s) for s in json.loads((tmp_path / "argv.json").read_text())]
    assert [v.hex() for v in received] == [v.hex() for v in x]
    assert math.copysign(1.0, received[2]) == -1.0


@settings(max_examples=300, deadline=None)
@given(st.lists(st.floats(allow_nan=False, allow_infinity=False), min_size=2, max_size=2))
def test_formatted_values_round_trip(x):
    # repr(float) is the shortest string that reads back to the same double (Python
    # documentation of repr for floats; Steele & White 1990).
    args = rod().arguments(np.array(x))
    back = [float(args[3]), float(args[5])]
    assert [v.hex() for v in back] == [float(v).hex() for v in x]


# --- stopping a run ---------------------------------------------------------------------------


def test_timeout_kills_the_process_group(tmp_path):
    pid_file = tmp_path / "pids"
    cmd = rod("--hang", "--pid-file", str(pid_file), timeout=1.5, grace=5.0)
    with pytest.raises(EvaluationFailed) as caught:
        cmd(TRUE)
    assert caught.value.status == "timed-out"
    assert "SIGTERM" in caught.value.detail
    pids = read_pids(pid_file)  # the program and the child it started
    assert len(pids) == 2
    assert wait_gone(pids) == []


def test_sigterm_ignored_then_sigkill(tmp_path):
    pid_file = tmp_path / "pids"
    cmd = rod("--ignore-term", "--pid-file", str(pid_file), timeout=1.5, grace=0.5)
    outcome = cmd.run(TRUE)
    assert outcome.timed_out and outcome.terminated and outcome.killed
    assert outcome.returncode == -9  # ended by SIGKILL, not by SIGTERM
    assert wait_gone(read_pids(pid_file)) == []
    with pytest.raises(EvaluationFailed) as caught:
        cmd._value(outcome, None)
    assert caught.value.status == "timed-out"
    assert "SIGKILL" in caught.value.detail


def test_child_left_holding_stdout_is_stopped(tmp_path):
    # The program finishes normally but leaves a child that keeps the output pipe open.
    pid_file = tmp_path / "pids"
    cmd = rod("--leave-child", "--pid-file", str(pid_file), timeout=60, grace=5.0)
    outcome = cmd.run(TRUE)
    assert outcome.returncode == 0 and not outcome.timed_out and outcome.terminated
    assert cmd._value(outcome, None) == pytest.approx(cooling_rod.misfit(*TRUE), rel=1e-12)
    assert wait_gone(read_pids(pid_file)) == []


def test_flood_of_output_is_bounded():
    cmd = rod("--flood", max_output=100_000, timeout=120)
    outcome = cmd.run(TRUE)
    assert outcome.stdout_size > 200_000_000  # what the script wrote
    assert len(outcome.stdout.encode()) <= 100_000  # what was kept: the end
    assert outcome.stdout.rstrip().splitlines()[-1].startswith("misfit ")
    tracemalloc.start()
    try:
        value = cmd(TRUE)
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert value == pytest.approx(cooling_rod.misfit(*TRUE), rel=1e-12)
    assert peak < 10_000_000  # Python allocations while 200 MB went through the pipe


# --- failures ---------------------------------------------------------------------------------


def test_nonzero_exit_is_a_failure_with_stderr():
    with pytest.raises(EvaluationFailed) as caught:
        rod("--fail-above", "100", timeout=60)(TRUE)
    assert caught.value.status == "failed"
    assert caught.value.detail.startswith("exit code 3")
    assert "parameter above 100.0" in caught.value.detail


def test_garbage_is_a_failure():
    with pytest.raises(EvaluationFailed) as caught:
        rod("--garbage", timeout=60, read="stdout")(TRUE)
    assert caught.value.status == "failed"
    assert "exactly one number" in caught.value.detail and "'no result today'" in caught.value.detail
    with pytest.raises(EvaluationFailed, match="no line of standard output reads 'misfit = "):
        rod("--garbage", timeout=60)(TRUE)


def test_stderr_in_detail_is_bounded():
    code = "import sys; sys.stderr.write('A' * 5000 + 'THE END'); print(1.0); sys.exit(1)"
    with pytest.raises(EvaluationFailed) as caught:
        python(code, "{a}", timeout=60)([1.0])
    detail = caught.value.detail
    stderr = detail.split("stderr (end):\n", 1)[1]
    assert len(stderr) == 2000 and stderr.endswith("THE END")
    assert detail.startswith("exit code 1")


# --- pickling and other processes -------------------------------------------------------------


def test_pickle_round_trip():
    cmd = rod(timeout=60)
    copy = pickle.loads(pickle.dumps(cmd))
    assert repr(copy) == repr(cmd)
    assert "cooling_rod.py" in repr(cmd) and "{k}" in repr(cmd)
    assert copy(TRUE) == cmd(TRUE)
    error = pickle.loads(pickle.dumps(EvaluationFailed("timed-out", "exit code -15")))
    assert (error.status, error.detail) == ("timed-out", "exit code -15")


def test_runs_in_a_process_pool():
    cmd = rod(timeout=60)
    points = [TRUE, (150.0, 14.0)]
    context = multiprocessing.get_context("spawn")  # a fresh interpreter unpickles the command
    with ProcessPoolExecutor(max_workers=2, mp_context=context) as pool:
        values = list(pool.map(cmd, points))
        failure = pool.submit(rod("--fail-above", "1", timeout=60), TRUE).exception()
    assert values == [pytest.approx(cooling_rod.misfit(*p), rel=1e-12) for p in points]
    assert isinstance(failure, EvaluationFailed)
    assert failure.status == "failed" and "exit code 3" in failure.detail


# --- the scenario -----------------------------------------------------------------------------


def test_cooling_rod_misfit_is_small_at_the_true_values():
    # Invented data, sanity check: the "measurements" were made from the model at TRUE with
    # sigma = 0.3 K noise, so the misfit there is about 30 x 0.09 K2; elsewhere it is far larger.
    cmd = rod(timeout=60)
    at_true = cmd(TRUE)
    assert at_true < 30 * 0.3**2 * 3
    for point in [(150.0, 12.0), (190.0, 12.0), (170.0, 10.0), (170.0, 14.0), (120.0, 20.0)]:
        assert cmd(point) > 50 * at_true
