"""The project reads nothing outside its own folder: published check data lives in tests/reference/.

A fresh clone must pass its tests with nothing beside it (README, "The command line" and the
set-up commands).  This file checks that the reference data is there with its provenance, and
that no Python file of the project names a path outside the repository.
"""

from __future__ import annotations

import ast
import subprocess
import tomllib
from pathlib import Path

import pytest
from conftest import REFERENCE

ROOT = Path(__file__).resolve().parents[1]
FOLDERS = ("directional", "tests", "benchmarks", "examples")
# Text that can only mean a place outside the project: the folder of reference data that lay
# beside it once, and the machine's own paths.  The folder's name is written in two parts so that
# a plain search of the repository for it finds only real readers, not this guard.
SHARED = "sha" "red"
OUTSIDE_WORDS = (f"../{SHARED}", f'"{SHARED}"', f"'{SHARED}'", f"{SHARED}/reference", "/work/")


def python_files() -> list[Path]:
    """The project's tracked ``.py`` files (every one under its folders when git is not at hand)."""
    try:
        listed = subprocess.run(
            ["git", "ls-files", "-z", "--", "*.py"], cwd=ROOT, capture_output=True, check=True,
            timeout=30,
        ).stdout.decode()
        files = [ROOT / name for name in listed.split("\0") if name]
    except (OSError, subprocess.SubprocessError):
        files = []
    if not files:  # an exported copy without .git
        files = [p for folder in FOLDERS for p in sorted((ROOT / folder).rglob("*.py"))]
    return [p for p in files if p.is_file()]


def _levels_up(node: ast.AST) -> int | None:
    """How many folders ``Path(__file__)...parent/.parents[k]`` climbs, or None if it is not one."""
    climbed = 0
    while True:
        if isinstance(node, ast.Attribute) and node.attr == "parent":
            climbed, node = climbed + 1, node.value
        elif (isinstance(node, ast.Subscript) and isinstance(node.value, ast.Attribute)
              and node.value.attr == "parents" and isinstance(node.slice, ast.Constant)
              and isinstance(node.slice.value, int)):
            climbed, node = climbed + node.slice.value + 1, node.value.value
        elif (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)
              and node.func.attr in ("resolve", "absolute")):
            node = node.func.value
        elif (isinstance(node, ast.Call) and isinstance(node.func, ast.Name)
              and node.func.id == "Path" and len(node.args) == 1
              and isinstance(node.args[0], ast.Name) and node.args[0].id == "__file__"):
            return climbed
        else:
            return None


def outside_paths(source: str, depth: int) -> list[str]:
    """What in ``source`` (a file ``depth`` folders below the root) names a path outside it."""
    found = [word for word in OUTSIDE_WORDS if word in source]
    for node in ast.walk(ast.parse(source)):
        climbed = _levels_up(node)
        # a file `depth` folders down reaches the root after depth + 1 steps from itself
        if climbed is not None and climbed > depth + 1:
            found.append(f"line {node.lineno}: {ast.unparse(node)}")
    return found


@pytest.mark.parametrize(
    ("source", "depth", "outside"),
    [
        # the lines that once read the reference data from beside the project
        (f'R = Path(__file__).resolve().parents[1].parent / "{SHARED}" / "reference"', 1, True),
        ("R = Path(__file__).resolve().parents[2]", 1, True),
        ("R = Path(__file__).parent.parent.parent", 1, True),
        (f'R = Path("../{SHARED}/reference/mgh1981.toml")', 1, True),
        # what stays inside: the root itself, the file's own folder, the package's data
        ("R = Path(__file__).resolve().parents[1]", 1, False),
        ('R = Path(__file__).resolve().parent / "reference"', 1, False),
        ("R = Path(__file__).parent.parent", 2, False),
        ('R = Path(dl.__file__).parent / "method"', 1, False),
    ],
)
def test_the_detector_tells_inside_from_outside(source, depth, outside):
    assert bool(outside_paths(source, depth)) is outside


def test_no_python_file_names_a_path_outside_the_repository():
    files = python_files()
    assert any(p.name == "conftest.py" for p in files) and len(files) > 50
    offenders = {}
    for path in files:
        if path == Path(__file__).resolve():
            continue  # this file names the forbidden words to look for them
        relative = path.relative_to(ROOT)
        found = outside_paths(path.read_text(encoding="utf-8"), len(relative.parts) - 1)
        if found:
            offenders[str(relative)] = found
    assert offenders == {}


def test_the_reference_data_is_inside_the_project_with_its_provenance():
    assert REFERENCE == ROOT / "tests" / "reference"
    assert "Moré" in (REFERENCE / "README.md").read_text(encoding="utf-8")
    assert "NIST" in (REFERENCE / "nist-strd" / "README.md").read_text(encoding="utf-8")
    with open(REFERENCE / "mgh1981.toml", "rb") as handle:
        problems = tomllib.load(handle)["problem"]
    assert [p["number"] for p in problems] == list(range(1, 36))  # the paper's 35 problems
    assert all(p["sources"] and p["confidence"] for p in problems)
    for path in sorted((REFERENCE / "nist-strd").glob("*.toml")):
        with open(path, "rb") as handle:
            data = tomllib.load(handle)
        assert data["sources"] and data["confidence"], path.name
        assert len(data["x"]) == len(data["y"]) == data["n_observations"], path.name
