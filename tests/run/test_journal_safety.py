"""A journal that never answers for another model: fingerprints, checked resumes, retries, the
default journal, workers that die with the run, SIGTERM and SIGHUP, readable failures, and the
small faults of the command line.

The test functions are bowls with a known minimum (common practice, no source): the point is the
journal's behaviour, not the search's accuracy.
"""

from __future__ import annotations

import csv
import hashlib
import importlib.util
import json
import math
import os
import re
import signal
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import directional as dl
from directional.interface import cli
from directional.report import summary as report
from directional.run import journal as jr

ROOT = Path(__file__).resolve().parents[2]
BOUNDS = [(-3.0, 3.0), (-3.0, 3.0)]
OUTAGE = {"on": False}  # a licence server that is down while "on"


def bowl(x):
    return (x[0] - 1.0) ** 2 + (x[1] - 2.0) ** 2


def other_bowl(x):
    return (x[0] + 1.0) ** 2 + (x[1] - 2.0) ** 2


def licensed_bowl(x):
    """The bowl, failing right of x0 = 0.6 while the licence server is down."""
    if OUTAGE["on"] and x[0] > 0.6:
        raise OSError("licence server unreachable")
    return (x[0] - 1.0) ** 2 + (x[1] - 2.0) ** 2


def sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def rows(path: Path) -> list[tuple]:
    with sqlite3.connect(path) as db:
        found = db.execute("SELECT point, value, status, sequence FROM evaluation ORDER BY row")
        result = found.fetchall()
    db.close()
    return result


# ----------------------------------------------------------------- problem files and the CLI

MODEL = """\
import os, time
from pathlib import Path

HERE = Path(__file__).resolve().parent


def bowl(x):
    if (HERE / "outage").exists() and x[0] > 0.6:
        raise OSError("licence server unreachable")
    if (HERE / "slow").exists():
        time.sleep(float((HERE / "slow").read_text() or "0.05"))
    return (x[0] - 1.0) ** 2 + 3.0 * (x[1] + 0.5) ** 2 + 1.0
"""

PROBLEM = """\
[[parameter]]
name = "a"
start = 0.0
lower = -2.0
upper = 3.0

[[parameter]]
name = "b"
start = 0.0
lower = -2.0
upper = 2.0

[objective]
{objective}

[search]
budget = 400
"""

SIM = """\
import sys
a, b = float(sys.argv[1]), float(sys.argv[2])
print((a - CENTRE) ** 2 + 3.0 * (b + 0.5) ** 2 + 1.0)
"""


def problem(
    folder: Path, objective: str = 'function = "model:bowl"', *, journal: bool = True
) -> Path:
    """A problem file in ``folder``; its journal ``problem.journal.sqlite`` (named in a
    [journal] table, so that a test of another fault does not depend on the default journal)."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "model.py").write_text(MODEL)
    path = folder / "problem.toml"
    table = '\n[journal]\npath = "problem.journal.sqlite"\n' if journal else ""
    path.write_text(PROBLEM.format(objective=objective) + table)
    return path


def program_problem(folder: Path, centre: float = 1.0, version: str | None = None) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "sim.py").write_text(SIM.replace("CENTRE", repr(centre)))
    objective = f'command = [{json.dumps(sys.executable)}, "sim.py", "{{a}}", "{{b}}"]'
    if version is not None:
        objective += f'\nversion = "{version}"'
    return problem(folder, objective)


def run_cli(*argv: str, capsys) -> tuple[int, str, str]:
    code = cli.main([*argv])
    out, err = capsys.readouterr()
    return code, out, err


def command_line(*argv: str, **options) -> subprocess.Popen:
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    return subprocess.Popen(
        [sys.executable, "-m", "directional.interface.cli", *argv],
        stdout=options.pop("stdout", subprocess.PIPE),
        stderr=subprocess.PIPE,
        text=True,
        env=env,
        **options,
    )


def wait_for_evaluations(path: Path, count: int, child: subprocess.Popen, seconds: float = 60) -> int:
    deadline = time.monotonic() + seconds
    found = 0
    while time.monotonic() < deadline and child.poll() is None:
        try:
            found = len(jr.read(path).evaluations)
        except dl.JournalError:
            found = 0
        if found >= count:
            return found
        time.sleep(0.05)
    raise AssertionError(f"the run made {found} evaluations, not {count}: {child.poll()}")


# ------------------------------------------------------------------ 1. the objective's identity


def test_an_edited_objective_is_refused_and_the_journal_left_as_it_was(tmp_path):
    path = tmp_path / "j.sqlite"
    first = dl.minimize(bowl, [0.0, 0.0], bounds=BOUNDS, journal=path)
    assert np.allclose(first.point, [1.0, 2.0])
    before = sha(path)
    with pytest.raises(dl.JournalError) as error:
        dl.minimize(other_bowl, [0.0, 0.0], bounds=BOUNDS, journal=path)
    message = str(error.value)
    assert "another objective" in message and "'bowl'" in message and "'other_bowl'" in message
    assert f"mv {path} {path}.old" in message  # how to start afresh, never a deletion
    assert sha(path) == before  # byte for byte
    with pytest.raises(dl.JournalError, match="another objective"):
        dl.resume(path, other_bowl)
    assert sha(path) == before


def load(path: Path, name: str):
    spec = importlib.util.spec_from_file_location(name, path)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_an_edit_that_reproduces_the_stored_values_goes_on_with_a_note(tmp_path):
    source = tmp_path / "edited.py"
    source.write_text("def f(x):\n    return (x[0] - 1.0) ** 2 + (x[1] - 2.0) ** 2\n")
    path = tmp_path / "j.sqlite"
    first = dl.minimize(load(source, "edited").f, [0.0, 0.0], bounds=BOUNDS, journal=path)
    source.write_text(
        "def f(x):\n    # the same model, reformatted\n"
        "    return (x[0] - 1.0) ** 2 + (x[1] - 2.0) ** 2\n"
    )
    calls = []

    def counted(x):
        calls.append(x.copy())
        return f(x)

    f = load(source, "edited").f
    counted.__wrapped__ = f
    again = dl.minimize(counted, [0.0, 0.0], bounds=BOUNDS, journal=path)
    assert again.point.tobytes() == first.point.tobytes() and again.value == first.value
    assert len(calls) == 2  # the first stored point and the best, nothing else
    assert any("objective changed" in note and "source" in note for note in again.notes)
    assert "note: the objective changed" in again.summary()
    third = dl.minimize(counted, [0.0, 0.0], bounds=BOUNDS, journal=path)  # now the stored one
    assert len(calls) == 2 and not any("objective changed" in n for n in third.notes)


def test_an_edited_simulator_script_is_refused_on_the_command_line(tmp_path, capsys):
    path = program_problem(tmp_path, centre=1.0)
    journal = tmp_path / "problem.journal.sqlite"
    code, out, _ = run_cli("run", str(path), "--quiet", capsys=capsys)
    assert code == cli.OK and journal.exists()
    before = sha(journal)
    (tmp_path / "sim.py").write_text(SIM.replace("CENTRE", "1.5"))  # a corrected model
    code, out, err = run_cli("run", str(path), "--quiet", capsys=capsys)
    assert code == cli.BAD_INPUT
    assert "the file 'sim.py' named by the command has changed" in err
    assert "mv " in err and sha(journal) == before
    code, _, err = run_cli("resume", str(journal), "--quiet", capsys=capsys)
    assert code == cli.BAD_INPUT and "sim.py" in err and sha(journal) == before


DECK_SIM = """\
import sys
values = dict(line.split("=") for line in open("deck.in").read().split())
a, b = float(values["a"]), float(values["b"])
print((a - CENTRE) ** 2 + 3.0 * (b + 0.5) ** 2 + 1.0)
"""


def deck_problem(folder: Path, centre: float = 1.0, deck: str = "a={a}\nb={b}\n") -> Path:
    """A program fed through an input template (``deck.in``) and a copied script (``sim.py``),
    each evaluation in its own folder."""
    folder.mkdir(parents=True, exist_ok=True)
    (folder / "sim.py").write_text(DECK_SIM.replace("CENTRE", repr(centre)))
    (folder / "deck.in").write_text(deck)
    objective = (
        f'command = [{json.dumps(sys.executable)}, "sim.py"]\n'
        'templates = ["deck.in"]\nfiles = ["sim.py"]'
    )
    return problem(folder, objective)


@pytest.mark.parametrize(
    ("edit", "said"),
    [
        ({"centre": 1.5}, "the input file 'sim.py' has changed"),
        ({"deck": "b={b}\na={a}\n"}, "the input file 'deck.in' has changed"),
    ],
)
def test_an_edited_template_or_copied_file_is_refused(tmp_path, capsys, edit, said):
    # the command names no file of its own folder: only the hashes of the template and of the
    # copied files can tell the journal that the model changed
    path = deck_problem(tmp_path)
    journal = tmp_path / "problem.journal.sqlite"
    code, first, _ = run_cli("run", str(path), "--quiet", capsys=capsys)
    assert code == cli.OK
    assert set(jr.read(journal).header.objective["inputs"]) == {"deck.in", "sim.py"}
    before = sha(journal)
    deck_problem(tmp_path, **edit)
    code, out, err = run_cli("run", str(path), "--quiet", capsys=capsys)
    if "centre" in edit:  # another model: the stored values are not reproduced
        assert code == cli.BAD_INPUT and said in err and sha(journal) == before
    else:  # the same model, its deck written in another order: reproduced, goes on with a note
        assert code == cli.OK and said in out
        assert first.split("\n")[0] == out.split("\n")[0]


def test_a_new_objective_version_that_reproduces_goes_on_with_a_note(tmp_path, capsys):
    path = program_problem(tmp_path, version="tables 2024")
    code, first, _ = run_cli("run", str(path), "--quiet", capsys=capsys)
    assert code == cli.OK
    program_problem(tmp_path, version="tables 2025")  # same program, a new version string
    code, out, _ = run_cli("run", str(path), "--quiet", capsys=capsys)
    assert code == cli.OK
    assert "objective.version is 'tables 2024' in the journal but 'tables 2025' now" in out
    assert first.split("\n")[0] == out.split("\n")[0]  # the same run, replayed


# ------------------------------------------------------------------- 2. every resume checks


def test_resume_with_another_problem_file_is_refused_and_changes_nothing(tmp_path, capsys):
    path = problem(tmp_path / "two")
    journal = tmp_path / "two" / "problem.journal.sqlite"
    code, _, _ = run_cli("run", str(path), "--quiet", capsys=capsys)
    assert code == cli.OK
    before = sha(journal)
    one = tmp_path / "one" / "problem.toml"
    one.parent.mkdir()
    (one.parent / "model.py").write_text("def bowl(x):\n    return (x[0] - 1.0) ** 2\n")
    one.write_text(
        '[[parameter]]\nname = "a"\nstart = 0.0\nlower = -2.0\nupper = 3.0\n'
        '[objective]\nfunction = "model:bowl"\n'
    )
    code, _, err = run_cli("resume", str(journal), "--problem", str(one), "--quiet", capsys=capsys)
    assert code == cli.BAD_INPUT
    assert "was not written for" in err and "parameters (length) is 2 in the journal but 1" in err
    assert sha(journal) == before
    assert all(status == "ok" for _, _, status, _ in rows(journal))


def test_resume_with_other_settings_in_the_problem_file_is_refused(tmp_path, capsys):
    path = problem(tmp_path)
    journal = tmp_path / "problem.journal.sqlite"
    run_cli("run", str(path), "--quiet", "--budget", "20", capsys=capsys)
    before = sha(journal)
    path.write_text(path.read_text().replace("upper = 2.0", "upper = 2.5"))
    code, _, err = run_cli("resume", str(journal), "--quiet", capsys=capsys)
    assert code == cli.BAD_INPUT
    assert "parameters[1].upper (parameter 'b') is 2.0 in the journal but 2.5" in err
    assert sha(journal) == before


# ------------------------------------------------------------------------ 3. retrying failures


def test_retry_failed_evaluates_the_stored_failures_again(tmp_path):
    fresh = dl.minimize(licensed_bowl, [0.0, 0.0], bounds=BOUNDS)
    path = tmp_path / "j.sqlite"
    OUTAGE["on"] = True
    try:
        down = dl.minimize(licensed_bowl, [0.0, 0.0], bounds=BOUNDS, journal=path)
    finally:
        OUTAGE["on"] = False
    failed = [(p, s) for p, v, s, _ in rows(path) if s == "failed"]
    assert down.failures > 0 and len(failed) == down.failures
    replayed = dl.resume(path, licensed_bowl)  # without the option: the failures stay
    assert replayed.point.tobytes() == down.point.tobytes()
    again = dl.resume(path, licensed_bowl, retry_failed=True)
    assert again.point.tobytes() == fresh.point.tobytes() and again.value == fresh.value
    stored = rows(path)
    retried = {p for p, _, s, _ in stored if s == "ok"} & {p for p, _ in failed}
    assert retried  # both records of a retried point are kept: the failure and the new value
    later = dl.resume(path, licensed_bowl)  # the journal now replays the retried run
    assert later.point.tobytes() == fresh.point.tobytes()
    assert len(rows(path)) == len(stored)  # nothing evaluated


def test_a_retried_run_stopped_on_its_budget_goes_on_past_the_abandoned_rows(tmp_path):
    # The retry that succeeded sent the search down a new path; the rows the failed run wrote
    # after the failure stay in the file, but a later resume must not hold the search to them.
    fresh = dl.minimize(licensed_bowl, [0.0, 0.0], bounds=BOUNDS)
    path = tmp_path / "j.sqlite"
    OUTAGE["on"] = True
    try:
        dl.minimize(licensed_bowl, [0.0, 0.0], bounds=BOUNDS, journal=path)
    finally:
        OUTAGE["on"] = False
    statuses = [status for _, _, status, _ in rows(path)]
    first = statuses.index("failed")
    assert len(statuses) > first + 1  # rows after the failure: the path the retry abandons
    cut = dl.resume(path, licensed_bowl, retry_failed=True, budget=first + 6)
    assert cut.stop is dl.Stop.BUDGET
    again = dl.resume(path, licensed_bowl, budget=fresh.evaluations + len(statuses))
    assert again.point.tobytes() == fresh.point.tobytes() and again.value == fresh.value


def test_retry_failed_on_the_command_line(tmp_path, capsys):
    path = problem(tmp_path)
    journal = tmp_path / "problem.journal.sqlite"
    (tmp_path / "outage").write_text("")
    code, out, _ = run_cli("run", str(path), "--quiet", capsys=capsys)
    assert "licence server unreachable" in out
    (tmp_path / "outage").unlink()
    code, out, _ = run_cli("resume", str(journal), "--quiet", capsys=capsys)
    assert "licence server unreachable" in out  # replayed as they were
    code, out, err = run_cli("resume", str(journal), "--quiet", "--retry-failed", capsys=capsys)
    assert code == cli.OK and "stored failures are evaluated again" in err
    document = summary_json(tmp_path, journal, capsys)
    assert document["point"]["a"] == pytest.approx(1.0, abs=1e-6)
    statuses = {}
    for point, _, status, _ in rows(journal):
        statuses.setdefault(point, set()).add(status)
    assert any(found == {"failed", "ok"} for found in statuses.values())


def summary_json(folder: Path, journal: Path, capsys) -> dict:
    out = folder / "show.json"
    run_cli("show", str(journal), "--json", str(out), "--plot-evaluations", "0", capsys=capsys)
    return json.loads(out.read_text())


def test_retry_failed_in_a_many_start_run(tmp_path):
    path = tmp_path / "j.sqlite"
    fresh = dl.explore(licensed_bowl, BOUNDS, starts=3, check=False)
    OUTAGE["on"] = True
    try:
        dl.explore(licensed_bowl, BOUNDS, starts=3, check=False, journal=path)
    finally:
        OUTAGE["on"] = False
    assert any(s == "failed" for _, _, s, _ in rows(path))
    again = dl.resume(path, licensed_bowl, retry_failed=True)
    assert again.minima[0].point == pytest.approx(fresh.minima[0].point, abs=1e-6)
    assert again.minima[0].point == pytest.approx([1.0, 2.0], abs=1e-5)


# ---------------------------------------------------------------------- 4. a journal by default


def test_run_keeps_a_journal_beside_the_problem_file_and_says_where(tmp_path, capsys):
    path = problem(tmp_path, journal=False)
    code, _, err = run_cli("run", str(path), "--quiet", capsys=capsys)
    journal = tmp_path / "problem.journal.sqlite"
    assert code == cli.OK and journal.exists()
    assert err.splitlines()[0].startswith("directional: journal ")
    assert "problem.journal.sqlite beside the problem file" in err.splitlines()[0]
    assert "--no-journal" in err
    assert len(jr.read(journal).evaluations) > 0


def test_no_journal_keeps_none(tmp_path, capsys):
    path = problem(tmp_path, journal=False)
    code, _, _ = run_cli("run", str(path), "--quiet", "--no-journal", capsys=capsys)
    assert code == cli.OK and not (tmp_path / "problem.journal.sqlite").exists()


# ------------------------------------------------------------- 5. workers die with the run


def children(parent: int) -> list[int]:
    found = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            stat = (entry / "stat").read_text()
        except OSError:
            continue
        if int(stat.rsplit(")", 1)[1].split()[1]) == parent:
            found.append(int(entry.name))
    return found


def alive(pid: int) -> bool:
    try:
        state = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()[0]
    except OSError:
        return False
    return state != "Z"


@pytest.mark.skipif(not Path("/proc").is_dir(), reason="reads /proc to find the workers")
def test_a_killed_many_start_run_leaves_no_worker_and_resumes_at_once(tmp_path):
    path = problem(tmp_path)
    (tmp_path / "slow").write_text("0.02")
    journal = tmp_path / "problem.journal.sqlite"
    child = command_line("run", str(path), "--starts", "8", "--workers", "2", "--quiet")
    workers: list[int] = []
    try:
        wait_for_evaluations(journal, 12, child)
        workers = children(child.pid)
        assert len(workers) >= 2
        child.kill()  # kill -9
        child.communicate(timeout=30)
        deadline = time.monotonic() + 5
        while any(alive(p) for p in workers) and time.monotonic() < deadline:
            time.sleep(0.05)
        assert not any(alive(p) for p in workers)  # the kernel ended them with their parent
    finally:
        for pid in workers:
            if alive(pid):
                os.kill(pid, signal.SIGKILL)
        if child.poll() is None:
            child.kill()
    (tmp_path / "slow").unlink()
    resumed = command_line("resume", str(journal), "--quiet")
    out, err = resumed.communicate(timeout=300)
    assert "in use" not in err and resumed.returncode == cli.OK, err
    assert "distinct minim" in out


# ----------------------------------------------------------------- 6. SIGTERM and SIGHUP


SLOW_SIM = """\
import os, sys, time
a, b = float(sys.argv[1]), float(sys.argv[2])
with open("pids.txt", "a") as f:
    f.write(f"{os.getpid()}\\n")
time.sleep(0.3)
print((a - 1.0) ** 2 + 3.0 * (b + 0.5) ** 2 + 1.0)
"""


def running_program(pid: int, script: Path) -> bool:
    """Process ``pid`` is alive and runs ``script`` (a pid may be reused by another process)."""
    try:
        here = Path(os.readlink(f"/proc/{pid}/cwd")) == script.parent
        return alive(pid) and here and script.name.encode() in Path(f"/proc/{pid}/cmdline").read_bytes()
    except OSError:
        return False


@pytest.mark.parametrize("signum", [signal.SIGTERM, signal.SIGHUP])
def test_sigterm_and_sighup_stop_a_run_like_ctrl_c(tmp_path, signum):
    path = problem(tmp_path, f'command = [{json.dumps(sys.executable)}, "sim.py", "{{a}}", "{{b}}"]')
    (tmp_path / "sim.py").write_text(SLOW_SIM)
    journal = tmp_path / "problem.journal.sqlite"
    child = command_line("run", str(path), "--quiet", "--plot-evaluations", "0")
    wait_for_evaluations(journal, 3, child)
    child.send_signal(signum)
    out, err = child.communicate(timeout=60)
    assert child.returncode == 128 + signum, err  # documented in the README
    assert "stopped: interrupted" in out and f"stopped by {signal.Signals(signum).name}" in out
    assert "To continue: directional resume" in out
    contents = jr.read(journal)
    assert contents.sessions[-1]["stop"] == "interrupted" and contents.sessions[-1]["closed"]
    for pid in map(int, (tmp_path / "pids.txt").read_text().split()):
        assert not running_program(pid, tmp_path / "sim.py")  # ended with its process group
    resumed = command_line("resume", str(journal), "--quiet", "--plot-evaluations", "0")
    out, err = resumed.communicate(timeout=300)
    assert resumed.returncode == cli.OK, err
    assert "converged" in out


def test_sigterm_ends_the_programs_running_in_a_many_start_pool(tmp_path):
    """The workers' running programs are ended at once, not waited for (they would run 60 s)."""
    sim = SLOW_SIM.replace("time.sleep(0.3)", "time.sleep(60)")
    path = problem(tmp_path, f'command = [{json.dumps(sys.executable)}, "sim.py", "{{a}}", "{{b}}"]')
    (tmp_path / "sim.py").write_text(sim)
    child = command_line("run", str(path), "--quiet", "--starts", "2", "--workers", "2",
                         "--plot-evaluations", "0")
    pids = tmp_path / "pids.txt"
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline and (not pids.exists() or len(pids.read_text().split()) < 2):
        time.sleep(0.05)
    child.send_signal(signal.SIGTERM)
    try:
        _, err = child.communicate(timeout=40)
    finally:
        if child.poll() is None:
            child.kill()
    assert child.returncode == 128 + signal.SIGTERM, err
    for pid in map(int, pids.read_text().split()):
        assert not running_program(pid, tmp_path / "sim.py")


# ---------------------------------------------------------------- 7. failures you can read


def two_ways_to_fail(x):
    if x[0] > 1.5:
        raise RuntimeError("mesh did not converge")
    if x[1] < -1.0:
        return math.nan
    return (x[0] - 1.0) ** 2 + (x[1] + 0.5) ** 2


def test_failures_are_grouped_by_reason_in_the_summary_and_the_json(tmp_path):
    sol = dl.minimize(two_ways_to_fail, [0.0, 0.0], bounds=[(-3, 3), (-3, 3)], names=["a", "b"])
    groups = report.failure_groups(sol.history)
    assert sum(g.count for g in groups) == sol.failures > 0
    reasons = {g.reason for g in groups}
    assert "RuntimeError: mesh did not converge" in reasons
    mesh = next(g for g in groups if g.reason.startswith("RuntimeError"))
    assert mesh.example[0] > 1.5  # the example point failed that way
    text = report.summary_text(sol)
    assert f"failures ({sol.failures}), by reason:" in text
    assert f"{mesh.count:>6}  failed: RuntimeError: mesh did not converge" in text
    document = report.solution_document(sol)
    assert sum(item["count"] for item in document["failures"]) == document["failed"]
    first = document["failures"][0]
    assert set(first["example"]) == {"a", "b"} and first["status"] == "failed"


def test_show_exports_every_evaluation_as_csv(tmp_path, capsys):
    path = problem(tmp_path)
    (tmp_path / "outage").write_text("")
    run_cli("run", str(path), "--quiet", capsys=capsys)
    journal = tmp_path / "problem.journal.sqlite"
    table = tmp_path / "out" / "evaluations.csv"
    code, out, _ = run_cli("show", str(journal), "--evaluations", str(table), capsys=capsys)
    assert "failures (" in out and "licence server unreachable" in out
    with table.open(newline="") as stream:
        found = list(csv.DictReader(stream))
    stored = jr.read(journal).evaluations
    assert len(found) == len(stored)
    assert list(found[0]) == ["search", "sequence", "session", "a", "b", "value", "status",
                              "reason", "purpose", "started", "ended", "seconds"]
    for row, evaluation in zip(found, stored):
        assert [float(row["a"]), float(row["b"])] == evaluation.point.tolist()  # exact
        assert row["status"] == evaluation.status and row["purpose"] == evaluation.purpose
        if evaluation.status == "ok":
            assert float(row["value"]) == evaluation.value
        else:
            assert row["value"] == "" and "licence server unreachable" in row["reason"]
        assert row["started"] <= row["ended"] and row["started"].endswith("+00:00")


# ------------------------------------------------------------------------ 9. smaller faults


# Root ignores file modes: the command then runs as "nobody" (uid 65534), after importing what it
# needs while it may still read the interpreter's files.
AS_NOBODY = """
import os, sys
import directional.api.explore, directional.api.minimization, directional.interface.cli as cli
import directional.interface.runs, directional.report.plots, directional.report.summary
if os.geteuid() == 0:
    os.setegid(65534)
    os.seteuid(65534)
sys.exit(cli.main(sys.argv[1:]))
"""


def test_show_reads_a_journal_it_cannot_write(tmp_path):
    folder = Path(tempfile.mkdtemp(prefix="directional-ro-"))
    try:
        path = problem(folder)
        child = command_line("run", str(path), "--quiet", "--plot-evaluations", "0")
        child.communicate(timeout=300)
        journal = folder / "problem.journal.sqlite"
        for item in folder.iterdir():
            item.chmod(0o444)
        folder.chmod(0o555)
        shown = subprocess.run(
            [sys.executable, "-c", AS_NOBODY, "show", str(journal), "--plot-evaluations", "0"],
            capture_output=True, text=True, timeout=300, cwd=ROOT,
        )
        out, err = shown.stdout, shown.stderr
        assert shown.returncode == cli.OK, err
        assert "cannot write" not in err and "converged" in out
    finally:
        folder.chmod(0o755)
        for item in folder.iterdir():
            item.chmod(0o644)


def test_show_of_a_live_run_says_it_is_running(tmp_path):
    path = problem(tmp_path)
    (tmp_path / "slow").write_text("0.5")  # the run outlasts the start of show
    journal = tmp_path / "problem.journal.sqlite"
    child = command_line("run", str(path), "--quiet")
    try:
        wait_for_evaluations(journal, 5, child)
        shown = command_line("show", str(journal), "--plot-evaluations", "0")
        out, err = shown.communicate(timeout=120)
    finally:
        child.kill()
        child.communicate(timeout=30)
    assert "running: so far" in out and "evaluations so far (process" in out, (out, err)
    assert "To continue" not in out and "directional resume" not in out


def test_a_spent_budget_says_how_to_go_further(tmp_path, capsys):
    path = problem(tmp_path)
    journal = tmp_path / "problem.journal.sqlite"
    code, out, _ = run_cli("run", str(path), "--quiet", "--budget", "8", capsys=capsys)
    assert "stopped: budget spent" in out
    assert f"directional resume {journal} --budget 16" in out
    code, out, _ = run_cli("resume", str(journal), "--quiet", capsys=capsys)
    assert "stopped: budget spent" in out and "--budget 16" in out
    code, out, _ = run_cli("resume", str(journal), "--quiet", "--budget", "20", capsys=capsys)
    # the search converged within 20, but the budget left cannot pay for the check: the hint
    # names a budget that covers the evaluations made and the check's stated cost
    cost = re.search(r"cannot pay for the curvature check \((\d+) evaluations\)", out)
    made = re.search(r"after \d+ cycles and (\d+) evaluations", out)
    assert cost and made, out
    assert f"--budget {max(2 * int(made.group(1)), int(made.group(1)) + int(cost.group(1)))}" in out
    code, out, _ = run_cli("resume", str(journal), "--quiet", "--budget", "400", capsys=capsys)
    assert code == cli.OK and "converged" in out


def test_plots_naming_a_file_is_refused_before_the_run(tmp_path, capsys):
    path = problem(tmp_path)
    taken = tmp_path / "plots.png"
    taken.write_text("not a folder")
    code, _, err = run_cli("run", str(path), "--quiet", "--plots", str(taken), capsys=capsys)
    assert code == cli.BAD_INPUT and "--plots" in err and "not a folder" in err
    assert not (tmp_path / "problem.journal.sqlite").exists()  # nothing ran
    code, _, err = run_cli("run", str(path), "--quiet", "--json", str(tmp_path), capsys=capsys)
    assert code == cli.BAD_INPUT and "--json" in err


def test_a_closed_pipe_exits_with_the_runs_own_code(tmp_path):
    path = problem(tmp_path)
    child = command_line("run", str(path), "--quiet", "--no-journal")
    child.stdout.close()  # the reader went away at once (| head -0)
    _, err = child.communicate(timeout=300)
    assert child.returncode == cli.OK, err
    assert "Traceback" not in err and "Exception ignored" not in err


def test_help_imports_no_heavy_library():
    code = (
        "import sys, contextlib, io\n"
        "from directional.interface.cli import main\n"
        "with contextlib.redirect_stdout(io.StringIO()), contextlib.suppress(SystemExit):\n"
        "    main(['--help'])\n"
        "heavy = ('numpy', 'scipy', 'matplotlib', 'numdifftools', 'tqdm')\n"
        "print(sorted(m for m in sys.modules if m.split('.')[0] in heavy))\n"
    )
    found = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True,
                           cwd=ROOT)
    assert found.stdout.strip() == "[]"


def test_one_signal_handler_in_the_package():
    """SIGINT, SIGTERM and SIGHUP have one handler (run/interrupts.py); worker processes set
    theirs in run/workers.py.  No other module installs one."""
    package = ROOT / "directional"
    installing = sorted(
        str(p.relative_to(package)) for p in package.rglob("*.py")
        if "signal.signal(" in p.read_text(encoding="utf-8")
        and p.parent.name != "testproblems"  # a simulated program that ignores SIGTERM, on purpose
    )
    assert installing == ["run/interrupts.py", "run/workers.py"]


# ------------------------------------------------------------------- the retried rows' place


def row(index: int, sequence: int, value: float, status: str = "ok") -> jr.Evaluation:
    return jr.Evaluation(index=index, point=np.array([float(index)]), value=value, status=status,
                         sequence=sequence)


@settings(max_examples=200, deadline=None)
@given(
    failed=st.lists(st.booleans(), min_size=1, max_size=12),
    same=st.booleans(),
    more=st.integers(0, 5),
)
def test_a_retried_row_takes_the_failures_place_and_a_new_value_ends_the_old_tail(
    failed, same, more
):
    """Invariant of `journal.effective` (common practice for an append-only log, no source): the
    replayed rows of a search are numbered 0, 1, 2, ... and are the first session's up to the
    retried failure, the retry, then the old tail if the retry gave the same value (it failed
    again) or the new session's rows if it did not."""
    first = [row(i, i, math.inf if bad else float(i), "failed" if bad else "ok")
             for i, bad in enumerate(failed)]
    if not any(failed):
        assert jr.effective(first) == tuple(first)
        return
    k = failed.index(True)
    retry = row(len(first), k, math.inf if same else -1.0, "failed" if same else "ok")
    after = [row(len(first) + 1 + j, k + 1 + j, float(j)) for j in range(0 if same else more)]
    kept = jr.effective([*first, retry, *after])
    expected = first[:k] + [retry] + (first[k + 1 :] if same else after)
    assert [e.index for e in kept] == sorted(e.index for e in expected)
    assert sorted(e.sequence for e in kept) == list(range(len(expected)))
