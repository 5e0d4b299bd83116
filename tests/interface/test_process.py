"""One external program in its own process group (`directional.interface.process.run_program`).

Checked against what POSIX and Python document, with small Python programs as the partner:
the exit status, a signal's death reported as ``-N`` (Python's ``subprocess``), the bytes written
counted in full while only the last ``max_output`` are kept, an empty standard input, the working
directory and environment given, no shell between the caller and the program.  No time is
asserted: a deadline is only checked to have been reported as passed.
"""

from __future__ import annotations

import json
import os
import signal
import sys

import pytest

from directional.interface.process import run_program

PY = sys.executable


def python(code: str, **options):
    return run_program([PY, "-c", code], **options)


def test_exit_status_and_both_streams():
    done = python("import sys; print('hello'); print('trouble', file=sys.stderr); sys.exit(3)")
    assert done.returncode == 3
    assert (done.stdout, done.stderr) == ("hello\n", "trouble\n")
    assert (done.stdout_size, done.stderr_size) == (6, 8)
    assert not (done.timed_out or done.terminated or done.killed)
    assert done.directory is None


def test_a_program_ended_by_a_signal_reports_minus_its_number():
    done = python("import os, signal; os.kill(os.getpid(), signal.SIGUSR1)")
    assert done.returncode == -signal.SIGUSR1
    assert not done.terminated


def test_only_the_last_bytes_are_kept_but_all_are_counted():
    # 3 000 000 bytes of 'a' then 'END': the tail kept is the last max_output bytes
    done = python("import sys; sys.stdout.write('a' * 3_000_000 + 'END')", max_output=1000)
    assert done.stdout_size == 3_000_003
    assert 0 < len(done.stdout) <= 1000 and done.stdout.endswith("aaaEND")


def test_bytes_that_are_not_utf8_are_replaced_not_an_error():
    done = python("import sys; sys.stdout.buffer.write(b'ok \\xff\\xfe end')")
    assert done.stdout == "ok \ufffd\ufffd end"


def test_standard_input_is_empty_and_arguments_arrive_verbatim():
    words = ["; rm -rf ~", "$(whoami)", "*", "a b", "'quoted'", ""]
    code = "import json, sys; print(json.dumps([sys.stdin.read(), sys.argv[1:]]))"
    done = run_program([PY, "-c", code, *words])
    assert json.loads(done.stdout) == ["", words]  # no shell: no word split, expanded or run


def test_working_directory_and_environment(tmp_path):
    code = "import os; print(os.getcwd()); print(os.environ.get('DIRECTIONAL_PROBE'))"
    env = {**os.environ, "DIRECTIONAL_PROBE": "42"}
    done = python(code, cwd=tmp_path, env=env)
    assert done.stdout.splitlines() == [str(tmp_path.resolve()), "42"]
    assert done.directory == tmp_path


def test_a_deadline_stops_the_program_with_sigterm():
    code = "import time; print('started', flush=True); time.sleep(60)"
    done = python(code, timeout=2.0)  # ample time to start
    assert done.timed_out and done.terminated and not done.killed
    assert done.returncode == -signal.SIGTERM
    assert done.stdout == "started\n"  # output before the stop is kept


def test_a_program_that_ignores_sigterm_is_killed_after_the_grace_period():
    code = (
        "import signal, time; signal.signal(signal.SIGTERM, signal.SIG_IGN); "
        "print('deaf', flush=True); time.sleep(60)"
    )
    done = python(code, timeout=2.0, grace=0.5)  # ample time to install the handler
    assert done.timed_out and done.terminated and done.killed
    assert done.returncode == -signal.SIGKILL


def test_a_program_that_does_not_exist_is_an_oserror(tmp_path):
    with pytest.raises(FileNotFoundError):
        run_program([str(tmp_path / "no-such-program")])
    with pytest.raises(OSError):
        run_program([PY, "-c", "pass"], cwd=tmp_path / "no-such-folder")
