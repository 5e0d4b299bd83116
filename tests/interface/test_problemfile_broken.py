"""Hardening, problem files: each kind of broken file gets exit code 2 and a message naming it.

Run through the command line's own entry point, in this process (`directional.interface.cli.main`), as
``directional check`` / ``directional run`` would; the subprocess path of the console script is
covered by tests/interface/test_cli.py.  Items already checked in tests/interface/test_problemfile.py are
listed in tests/README.md, not repeated.  The objective is an analytic bowl (minimum at its centre).
"""

from __future__ import annotations

import os
import re
import textwrap
from pathlib import Path

import pytest

import directional as dl
from directional.interface import cli
from directional.interface.problemfile import Problem
from directional.run.journal import read as read_journal

GOOD = textwrap.dedent(
    """\
    [[parameter]]
    name = "a"
    start = 0.0
    lower = -5.0
    upper = 5.0

    [objective]
    function = "model:bowl"

    [search]
    budget = 30
    check = false
    """
)

MODULES = {
    "model.py": "def bowl(x):\n    return (x[0] - 1.5) ** 2 + 2.0\n\nnot_callable = 3\n",
    "broken_syntax.py": "def bowl(x)\n    return 1.0\n",
    "missing_dependency.py": "import a_package_nobody_installed_d1r\n\ndef bowl(x):\n    return 1.0\n",
    "failing_import.py": "raise RuntimeError('licence check failed')\n",
}


@pytest.fixture()
def folder(tmp_path: Path) -> Path:
    for name, text in MODULES.items():
        (tmp_path / name).write_text(text, encoding="utf-8")
    return tmp_path


def run_cli(*argv: str, capsys) -> tuple[int, str, str]:
    code = cli.main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def line_of(message: str) -> int:
    match = re.search(r"line (\d+)", message)
    assert match, message
    return int(match.group(1))


BROKEN_FILES = [
    # (name, text, words in the message, line or None)
    ("empty", "", "missing [[parameter]]", 1),
    ("blank", "  \n# only a comment\n", "missing [[parameter]]", 1),
    ("not-toml", "this is not toml\n", "not valid TOML", None),
    ("objective-missing", GOOD.replace('[objective]\nfunction = "model:bowl"\n', ""),
     "missing [objective]", 1),
    ("syntax-error-in-module", GOOD.replace("model:bowl", "broken_syntax:bowl"),
     "broken_syntax.py failed to import: SyntaxError", 8),
    ("missing-dependency", GOOD.replace("model:bowl", "missing_dependency:bowl"),
     "No module named 'a_package_nobody_installed_d1r'", 8),
    ("module-raises", GOOD.replace("model:bowl", "failing_import:bowl"),
     "failing_import.py failed to import: RuntimeError('licence check failed')", 8),
    ("no-such-module", GOOD.replace("model:bowl", "nomodel:bowl"), "no module 'nomodel'", 8),
    ("no-such-function", GOOD.replace("model:bowl", "model:cup"), "no function 'cup'", 8),
    ("not-callable", GOOD.replace("model:bowl", "model:not_callable"),
     "no function 'not_callable'", 8),
    ("no-such-program", GOOD.replace('function = "model:bowl"',
                                     'command = ["no-such-program-d1r", "{a}"]'),
     "program 'no-such-program-d1r' not found", 8),
    ("unknown-placeholder", GOOD.replace('function = "model:bowl"',
                                         'command = ["python3", "sim.py", "{a}", "{b}"]'),
     "placeholder {b} names no parameter", 8),
    ("named-twice", GOOD + '\n[[parameter]]\nname = "a"\nstart = 1.0\n', "'a' appears twice", 15),
    ("budget-below-n-plus-1", GOOD.replace("budget = 30", "budget = 1"),
     "search.budget must allow at least n + 1 = 2 evaluations, got 1", 11),
    ("check-misspelt", GOOD.replace("check = false", 'check = "maybe"'),
     "search.check must be true, false, \"quick\" or \"extrapolated\", got 'maybe'", 12),
    ("nan-bound", GOOD.replace("upper = 5.0", "upper = nan"), "'a': upper must be a number", 5),
    ("equal-bounds", GOOD.replace("lower = -5.0", "lower = 5.0"), "lower must be below upper", 4),
    ("nested-table", GOOD + "[search.extra]\nx = 1\n", "unknown key 'extra' in [search]", 13),
    ("parameter-not-a-table", 'parameter = 3\n[objective]\nfunction = "model:bowl"\n',
     "[[parameter]] tables", 1),
]


@pytest.mark.parametrize(("text", "words", "line"), [b[1:] for b in BROKEN_FILES],
                         ids=[b[0] for b in BROKEN_FILES])
def test_a_broken_problem_file_is_exit_code_2_with_file_line_and_key(
    folder, capsys, text, words, line
):
    path = folder / "problem.toml"
    path.write_text(text, encoding="utf-8")
    code, out, err = run_cli("check", str(path), capsys=capsys)
    assert code == cli.BAD_INPUT
    assert err.startswith("directional: error: ") and str(path) in err
    assert words in err
    if line is not None:
        assert line_of(err) == line
    assert "Traceback" not in err
    code, _, err_run = run_cli("run", str(path), "--quiet", capsys=capsys)
    assert code == cli.BAD_INPUT and words in err_run


def test_a_file_that_is_not_text_is_exit_code_2(folder, capsys):
    path = folder / "problem.toml"
    path.write_bytes(b"\xff\xfe\x00garbage")
    code, _, err = run_cli("check", str(path), capsys=capsys)
    assert code == cli.BAD_INPUT and "cannot read the problem file" in err


def test_a_missing_journal_folder_is_made(folder, capsys):
    path = folder / "problem.toml"
    path.write_text(GOOD + '\n[journal]\npath = "no/such/folder/run.sqlite"\n', encoding="utf-8")
    code, out, _ = run_cli("run", str(path), "--quiet", capsys=capsys)
    assert code == cli.UNVERIFIED  # check = false: no verified minimum, but the run went through
    spent = int(re.search(r"and (\d+) evaluations", out)[1])  # as the summary reports them
    assert spent > 0
    assert len(read_journal(folder / "no/such/folder/run.sqlite").evaluations) == spent


def read_only_folder(folder: Path) -> Path:
    """A folder nobody may write in: a chmod 555 folder, or /sys for root (who ignores modes)."""
    if os.geteuid() == 0:
        return Path("/sys")
    locked = folder / "locked"
    locked.mkdir()
    locked.chmod(0o555)
    return locked


@pytest.mark.parametrize(
    ("where", "words"),
    [
        ("read-only", "cannot lock journal"),
        ("under-a-file", "cannot make the folder of journal"),
        ("a-folder", "is not a file"),
    ],
)
def test_a_journal_that_cannot_be_written_is_exit_code_2_before_any_evaluation(
    folder, capsys, where, words
):
    journal = {
        "read-only": lambda: read_only_folder(folder) / "run.sqlite",
        "under-a-file": lambda: folder / "model.py" / "run.sqlite",
        "a-folder": lambda: folder,
    }[where]()
    path = folder / "problem.toml"
    counter = folder / "calls.txt"
    (folder / "counting.py").write_text(
        "from pathlib import Path\n\ndef bowl(x):\n"
        f"    with open({str(counter)!r}, 'a') as f:\n        f.write('x')\n"
        "    return (x[0] - 1.5) ** 2\n",
        encoding="utf-8",
    )
    text = GOOD.replace("model:bowl", "counting:bowl")
    path.write_text(text + f"\n[journal]\npath = {str(journal)!r}\n", encoding="utf-8")
    code, _, err = run_cli("run", str(path), "--quiet", capsys=capsys)
    assert code == cli.BAD_INPUT
    assert words in err and str(journal) in err
    assert not counter.exists()  # refused before the first evaluation


def test_the_library_reads_the_same_file_with_the_same_errors(folder):
    path = folder / "problem.toml"
    path.write_text(GOOD.replace("budget = 30", "budget = 1"), encoding="utf-8")
    with pytest.raises(dl.ProblemError, match=r"line 11: search.budget must allow"):
        Problem.from_file(path)


def test_the_readme_says_plainly_that_problem_files_run_code():
    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    assert "run only problem files you\ntrust, like scripts" in readme or (
        "run only problem files you trust, like scripts" in " ".join(readme.split())
    )
