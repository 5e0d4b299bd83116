"""The ``directional`` console script, run as a user runs it: in a subprocess.

Outside facts used: the minimum of a shifted quadratic bowl is its centre (analytic); the minimum
of Rosenbrock's function is (1, 1) (Rosenbrock 1960); the PNG signature and IHDR layout are those
of the PNG specification (ISO/IEC 15948:2004, sec. 5.2 and 11.2.2).
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import struct
import subprocess
import sys
import textwrap
import time
import tomllib
from pathlib import Path

import pytest
from conftest import carries_the_caution

from directional.run import journal as journals

SCRIPT = Path(sys.executable).with_name("directional")
DIRECTIONAL = str(SCRIPT) if SCRIPT.exists() else shutil.which("directional")
SUBCOMMANDS = ("demo", "run", "resume", "show", "check", "bench")

BOWL = textwrap.dedent(
    """\
    title = "A shifted bowl"

    [[parameter]]
    name = "a"
    start = 0.0
    lower = -5.0
    upper = 5.0
    unit = "m"

    [[parameter]]
    name = "b"
    start = 1.0
    lower = 0.01
    upper = 100.0
    scale = "log"
    unit = "s"

    [objective]
    function = "model:bowl"

    [journal]
    path = "runs/bowl.sqlite"
    """
)

MODEL = textwrap.dedent(
    """\
    import math
    import time


    def bowl(x):
        return (x[0] - 1.5) ** 2 + 4.0 * (math.log(x[1]) - math.log(3.0)) ** 2 + 2.0


    def broken(x):
        raise RuntimeError("the simulator crashed")


    def slow_rosenbrock(x):
        time.sleep(0.01)
        return 100.0 * (x[1] - x[0] ** 2) ** 2 + (1.0 - x[0]) ** 2 + (x[2] - 0.5) ** 2
    """
)

SLOW = textwrap.dedent(
    """\
    [[parameter]]
    name = "x"
    start = -1.2
    lower = -3.0
    upper = 3.0

    [[parameter]]
    name = "y"
    start = 1.0
    lower = -3.0
    upper = 3.0

    [[parameter]]
    name = "z"
    start = 2.0
    lower = -3.0
    upper = 3.0

    [objective]
    function = "model:slow_rosenbrock"

    [search]
    budget = 3000

    [journal]
    path = "slow.sqlite"
    """
)


def directional(*args: str, cwd: Path, timeout: float = 120) -> subprocess.CompletedProcess:
    assert DIRECTIONAL, "the directional console script is not installed (pip install -e .)"
    return subprocess.run(
        [DIRECTIONAL, *args], cwd=cwd, capture_output=True, text=True, timeout=timeout,
        stdin=subprocess.DEVNULL,
    )


@pytest.fixture()
def bowl(tmp_path: Path) -> Path:
    (tmp_path / "model.py").write_text(MODEL, encoding="utf-8")
    path = tmp_path / "bowl.toml"
    path.write_text(BOWL, encoding="utf-8")
    return path


def png_size(path: Path) -> tuple[int, int]:
    """Width and height from the IHDR chunk (PNG specification, sec. 11.2.2)."""
    head = path.read_bytes()[:24]
    assert head[:8] == b"\x89PNG\r\n\x1a\n", f"{path} is not a PNG"
    assert head[12:16] == b"IHDR"
    return struct.unpack(">II", head[16:24])


# ----------------------------------------------------------------------------- help


def test_help_lists_every_subcommand_and_the_exit_codes(tmp_path):
    done = directional("--help", cwd=tmp_path)
    assert done.returncode == 0
    for name in SUBCOMMANDS:
        assert name in done.stdout
    assert "exit codes" in done.stdout


@pytest.mark.parametrize("name", SUBCOMMANDS)
def test_help_of_each_subcommand_is_short_and_complete(tmp_path, name):
    done = directional(name, "--help", cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    assert f"directional {name}" in done.stdout
    assert len(done.stdout.splitlines()) < 40


def test_no_subcommand_and_a_bad_option_are_bad_input(tmp_path):
    assert directional(cwd=tmp_path).returncode == 2
    assert directional("run", "--budget", "many", "x.toml", cwd=tmp_path).returncode == 2
    assert directional("frobnicate", cwd=tmp_path).returncode == 2


# ----------------------------------------------------------------------------- check


def test_check_validates_and_evaluates_the_start_once(tmp_path, bowl):
    done = directional("check", str(bowl), cwd=tmp_path)
    assert done.returncode == 0, done.stderr
    # analytic: (0 - 1.5)^2 + 4 (ln 1 - ln 3)^2 + 2 = 9.0777958...
    assert "value at the start: 9.07779584" in done.stdout


def test_check_of_a_malformed_file_names_the_line_and_exits_2(tmp_path, bowl):
    bowl.write_text(BOWL.replace('unit = "s"', 'unit = "s"\nscael = "log"'), encoding="utf-8")
    done = directional("check", str(bowl), cwd=tmp_path)
    assert done.returncode == 2
    assert "line 17" in done.stderr and "'scael'" in done.stderr


def test_check_of_a_failing_objective_exits_1(tmp_path, bowl):
    bowl.write_text(BOWL.replace("model:bowl", "model:broken"), encoding="utf-8")
    done = directional("check", str(bowl), cwd=tmp_path)
    assert done.returncode == 1
    assert "the simulator crashed" in done.stdout


def test_a_missing_problem_file_exits_2(tmp_path):
    done = directional("run", "absent.toml", cwd=tmp_path)
    assert done.returncode == 2 and "no such problem file" in done.stderr


# ----------------------------------------------------------------------------- run, show


def test_run_finds_the_minimum_writes_json_and_plots(tmp_path, bowl):
    done = directional("run", str(bowl), "--json", "out.json", "--plots", "pics", cwd=tmp_path)
    assert done.returncode == 0, done.stdout + done.stderr
    assert "verdict: minimum" in done.stdout
    assert carries_the_caution(done.stdout)  # a run of kind "value" too, not only calibrations
    document = json.loads((tmp_path / "out.json").read_text())
    assert carries_the_caution(document["caution"])
    assert set(document["point"]) == {"a", "b"}  # parameter names as keys
    assert document["point"]["a"] == pytest.approx(1.5, abs=1e-5)  # analytic
    assert document["point"]["b"] == pytest.approx(3.0, rel=1e-5)  # analytic
    assert document["value"] == pytest.approx(2.0, abs=1e-9)
    assert document["verdict"] == "minimum"
    assert document["parameters"]["b"]["unit"] == "s"
    for name in ("history", "profiles", "path"):
        width, height = png_size(tmp_path / "pics" / f"{name}.png")
        assert width >= 600 and height >= 400
    assert (tmp_path / "runs" / "bowl.sqlite").is_file()  # the journal, beside the problem file

    shown = directional("show", str(tmp_path / "runs" / "bowl.sqlite"), "--json", "shown.json",
                        cwd=tmp_path)
    assert shown.returncode == 0, shown.stderr
    assert carries_the_caution(shown.stdout)
    again = json.loads((tmp_path / "shown.json").read_text())
    assert again["point"] == document["point"]  # the journal holds the same solution, exactly
    assert again["evaluations"] == document["evaluations"]


def test_json_numbers_are_full_precision(tmp_path, bowl):
    directional("run", str(bowl), "--json", "out.json", "--no-journal", cwd=tmp_path)
    text = (tmp_path / "out.json").read_text()
    document = json.loads(text)
    value = document["point"]["a"]
    assert repr(value) in text  # written as the shortest repr that reads back bit for bit


def test_run_that_cannot_verify_exits_1(tmp_path, bowl):
    done = directional("run", str(bowl), "--budget", "4", "--no-journal", cwd=tmp_path)
    assert done.returncode == 1, done.stderr
    assert "budget" in done.stdout


def test_a_corner_minimum_exits_0_and_a_jump_edge_exits_1(tmp_path, bowl):
    # |a - 0.3| + (log b - log 3)^2: a corner minimum at a = 0.3 (analytic), a verified minimum;
    # a jump of +0.5 right of a = 0.4 on the bowl (a - 0.5)^2: the search stops on the low edge of
    # the jump, a = 0.4 (analytic), which is not a verified minimum
    (tmp_path / "model.py").write_text(
        MODEL + "\n\ndef corner(x):\n    return abs(x[0] - 0.3) + (math.log(x[1]) - math.log(3.0)) ** 2\n"
        "\n\ndef edge(x):\n    return (x[0] - 0.5) ** 2 + (math.log(x[1]) - math.log(3.0)) ** 2"
        " + 0.5 * (x[0] > 0.4)\n",
        encoding="utf-8",
    )
    bowl.write_text(BOWL.replace("model:bowl", "model:corner"), encoding="utf-8")
    done = directional("run", str(bowl), "--no-journal", cwd=tmp_path)
    assert done.returncode == 0, done.stdout + done.stderr
    assert "verdict: nonsmooth" in done.stdout and "corner" in done.stdout
    bowl.write_text(BOWL.replace("model:bowl", "model:edge"), encoding="utf-8")
    done = directional("run", str(bowl), "--no-journal", cwd=tmp_path)
    assert done.returncode == 1, done.stdout + done.stderr
    assert "verdict: nonsmooth" in done.stdout and "edge" in done.stdout


def test_run_of_a_broken_objective_exits_1(tmp_path, bowl):
    bowl.write_text(BOWL.replace("model:bowl", "model:broken"), encoding="utf-8")
    done = directional("run", str(bowl), "--no-journal", cwd=tmp_path)
    assert done.returncode == 1
    assert "the simulator crashed" in done.stderr


def test_show_of_something_that_is_not_a_journal_exits_2(tmp_path):
    (tmp_path / "junk.sqlite").write_text("not a database")
    assert directional("show", "junk.sqlite", cwd=tmp_path).returncode == 2
    assert directional("resume", "absent.sqlite", cwd=tmp_path).returncode == 2


def test_bench_runs(tmp_path):
    done = directional("bench", "--smoke", "--out", str(tmp_path / "bench"), cwd=tmp_path,
                       timeout=300)
    assert done.returncode == 0, done.stderr
    assert "not yet available" not in done.stdout + done.stderr
    results = tmp_path / "bench" / "RESULTS.md"
    assert f"wrote {results}" in done.stderr  # progress and the end go to standard error
    assert "## Targets" in results.read_text(encoding="utf-8")
    for name in ("profiles-data.png", "profiles-performance.png", "scaling.png"):
        assert png_size(tmp_path / "bench" / name)[0] > 0, name


def test_bench_without_its_benchmarks_is_an_error(monkeypatch, capsys):
    # A broken install (the benchmarks cannot be imported) must not look like a run: exit 2.
    from directional.interface import cli

    monkeypatch.setitem(sys.modules, "directional.benchmarking", None)  # import now fails
    assert cli.main(["bench", "--smoke"]) == 2
    captured = capsys.readouterr()
    assert "benchmarks cannot be imported" in captured.err
    assert captured.out == ""


# ----------------------------------------------------------------------------- Ctrl-C, resume


def test_interrupt_then_resume_gives_the_uninterrupted_result(tmp_path):
    (tmp_path / "model.py").write_text(MODEL, encoding="utf-8")
    problem = tmp_path / "slow.toml"
    problem.write_text(SLOW, encoding="utf-8")
    whole = directional("run", str(problem), "--no-journal", "--json", "whole.json",
                        cwd=tmp_path, timeout=300)
    assert whole.returncode == 0, whole.stderr  # a verified minimum (Rosenbrock 1960: at (1, 1))

    child = subprocess.Popen(
        [DIRECTIONAL, "run", str(problem), "--json", "cut.json"], cwd=tmp_path,
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, stdin=subprocess.DEVNULL,
        preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL),
    )
    journal = tmp_path / "slow.sqlite"
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        time.sleep(0.2)
        try:
            if len(journals.read(journal).evaluations) >= 40:
                break
        except Exception:  # not written yet
            continue
    os.kill(child.pid, signal.SIGINT)  # what Ctrl-C sends
    out, err = child.communicate(timeout=120)
    assert child.returncode == 1, err
    assert "interrupted" in out and "directional resume" in out
    assert carries_the_caution(out)
    cut = json.loads((tmp_path / "cut.json").read_text())
    assert cut["stop"] == "interrupted"

    resumed = directional("resume", str(journal), "--json", "resumed.json", cwd=tmp_path,
                          timeout=300)
    assert resumed.returncode == whole.returncode, resumed.stderr
    assert carries_the_caution(resumed.stdout)
    first = json.loads((tmp_path / "whole.json").read_text())
    second = json.loads((tmp_path / "resumed.json").read_text())
    assert second["point"] == first["point"]  # bit for bit
    assert second["value"] == first["value"]
    assert second["evaluations"] == first["evaluations"]  # nothing evaluated twice
    assert second["point"]["x"] == pytest.approx(1.0, abs=1e-4)  # Rosenbrock 1960


# ----------------------------------------------------------------------------- demo


def test_demo_writes_every_promised_file(tmp_path):
    done = directional("demo", "--quiet", cwd=tmp_path, timeout=300)
    assert done.returncode == 0, done.stderr
    assert "verdict: minimum" in done.stdout
    folder = tmp_path / "directional-demo"
    for name in ("problem.toml", "data.csv", "journal.sqlite", "summary.txt", "solution.json"):
        assert (folder / name).is_file(), name
        assert f"  {Path('directional-demo') / name}\n" in done.stdout  # listed under "Files:"
    assert "invented" in (folder / "data.csv").read_text().lower()
    assert "invented" in done.stdout.lower()
    for name in ("history", "profiles", "path", "fit", "residuals"):
        width, height = png_size(folder / "plots" / f"{name}.png")
        assert width >= 600 and height >= 400, name
    document = json.loads((folder / "solution.json").read_text())
    assert set(document["point"]) == {"mu_max", "Ks", "Y", "kd"}
    assert carries_the_caution(document["caution"])
    assert carries_the_caution(done.stdout)
    assert carries_the_caution((folder / "summary.txt").read_text(encoding="utf-8"))


# ----------------------------------------------------------------------------- examples

EXAMPLES = Path(__file__).resolve().parents[2] / "examples"


def with_this_interpreter(name: str, into: Path) -> Path:
    """A copy of example ``name`` whose programs run on this interpreter, not PATH's python3.

    The tests must pass when the virtual environment is not activated: then ``python3`` on PATH
    may be another Python, without `directional`.
    """
    folder = shutil.copytree(EXAMPLES / name, into / name,
                             ignore=shutil.ignore_patterns("runs", "__pycache__"))
    problem = folder / "problem.toml"
    text = problem.read_text(encoding="utf-8")
    problem.write_text(text.replace('["python3",', f"[{json.dumps(sys.executable)},"),
                       encoding="utf-8")
    command = tomllib.loads(problem.read_text(encoding="utf-8"))["objective"].get("command")
    assert command is None or command[0] == sys.executable, command
    return problem


@pytest.mark.parametrize("name", ["bioreactor", "heater", "cooling_rod"])
def test_each_example_problem_file_checks(tmp_path, name):
    problem = with_this_interpreter(name, tmp_path)
    done = directional("check", str(problem), cwd=tmp_path)
    assert done.returncode == 0, done.stdout + done.stderr
    assert "value at the start" in done.stdout
    assert (EXAMPLES / name / "README.md").is_file()


def test_every_example_readme_carries_the_caution():
    readmes = sorted(EXAMPLES.glob("*/README.md"))
    assert [p.parent.name for p in readmes] == ["bioreactor", "cooling_rod", "dask", "heater"]
    for readme in readmes:
        assert carries_the_caution(readme.read_text(encoding="utf-8")), readme.parent.name


def test_many_starts_list_the_minima_and_draw_the_start_map(tmp_path, bowl):
    done = directional("run", str(bowl), "--starts", "3", "--plots", "pics", "--json", "m.json",
                       cwd=tmp_path)
    assert done.returncode == 0, done.stdout + done.stderr
    minima = json.loads((tmp_path / "m.json").read_text())["minima"]
    assert len(minima) == 1 and minima[0]["starts"] == 3
    assert "3 starts reached 1 distinct minimum" in done.stdout  # a bowl has one minimum
    assert carries_the_caution(done.stdout)
    assert done.stdout.count("Caution") == 1  # said once, under the best minimum
    assert png_size(tmp_path / "pics" / "starts.png")[0] >= 600
    shown = directional("show", str(tmp_path / "runs" / "bowl.sqlite"), cwd=tmp_path)
    assert shown.returncode == 0 and "distinct minimum" in shown.stdout
    assert carries_the_caution(shown.stdout)


def test_many_starts_on_a_dask_scheduler(tmp_path, bowl):
    # A local Dask cluster stands in for a remote one: the CLI only sees its address.
    import distributed  # in the test extra
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                                  dashboard_address=None) as cluster:
        done = directional("run", str(bowl), "--starts", "3", "--dask", cluster.scheduler_address,
                           "--no-journal", cwd=tmp_path)
    assert done.returncode == 0, done.stdout + done.stderr
    assert "3 starts reached 1 distinct minimum" in done.stdout


def test_dask_with_one_start_is_bad_input(tmp_path, bowl):
    done = directional("run", str(bowl), "--dask", "tcp://127.0.0.1:1", cwd=tmp_path)
    assert done.returncode == 2
    assert "--starts" in done.stderr


def test_many_starts_resumed_from_their_journal_give_the_whole_run(tmp_path, bowl):
    """``directional resume`` of a many-start run (in process, with its progress bar)."""
    import numpy as np

    from directional.interface import runs
    from directional.interface.problemfile import Problem

    text = bowl.read_text(encoding="utf-8") + "\n[search]\nstarts = 3\n"
    (tmp_path / "many.toml").write_text(text, encoding="utf-8")
    problem = Problem.from_file(tmp_path / "many.toml")
    whole = runs.solve(problem, journal=None, quiet=True)
    cut = runs.solve(problem, budget=10, quiet=True)  # every search stops on its budget
    assert cut.evaluations < whole.evaluations
    done = runs.resume(tmp_path / "runs" / "bowl.sqlite", problem, budget=3000, quiet=True)
    assert done.evaluations == whole.evaluations
    assert np.array_equal(done.minima[0].point, whole.minima[0].point)
    assert done.stops == whole.stops
