"""`Command`: an external program as the objective, one run per evaluation.

The program is given as an argument list in which ``{name}`` stands for the value of parameter
``name``.  No shell is involved at any point: each element reaches the program as one argument,
exactly as written, with the placeholders replaced by ``repr(float(value))`` (the shortest text
that reads back as the same double, bit for bit).  Input files can be rendered from templates
(`directional.interface.templates`) into a fresh folder per evaluation.  A run that exits
non-zero, gives no valid answer (`directional.interface.reading`), or runs out of time raises
`EvaluationFailed`, which the driver records as a failed evaluation.

How a run is started, watched and stopped is in `directional.interface.process`.
"""

from __future__ import annotations

import math
import os
import shutil
import signal
import string
import tempfile
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from directional.errors import ProblemError
from directional.interface import reading
from directional.interface.process import Outcome, run_program
from directional.interface.templates import Template
from directional.records import Status

FAILED = Status.FAILED
TIMED_OUT = Status.TIMED_OUT
DETAIL_LIMIT = 2000  # characters of stderr kept in EvaluationFailed.detail

class EvaluationFailed(Exception):
    """One run of the program gave no value.

    Attributes
    ----------
    status : str
        ``"failed"`` (non-zero exit, no number, a number that is not finite, the program could
        not start) or ``"timed-out"``.
    detail : str
        What went wrong: the exit code, the folder it ran in, and the end of its standard error
        (at most 2000 characters of it).
    """

    def __init__(self, status: str, detail: str) -> None:
        super().__init__(status, detail)
        self.status = status
        self.detail = detail

    def __str__(self) -> str:
        return f"{self.status}: {self.detail}"


class Command:
    """An external program as the objective: ``cmd(x)`` runs it once and returns its value.

    Parameters
    ----------
    argv : sequence of str
        The program and its arguments.  ``{name}`` is replaced by the value of parameter
        ``name``; ``{{`` and ``}}`` stand for literal braces.  ``argv[0]`` is the program and
        takes no placeholder.  A bare name is looked up on ``PATH`` when the program runs; a
        relative path (``./sim``) is made absolute against the current directory now, so that it
        still works from a per-evaluation folder.  Other relative paths in the arguments are
        relative to the folder the program runs in.
    names : sequence of str
        The parameter names, in the order of ``x``.  Each must appear in some placeholder.
    timeout : float or None
        Seconds a run may take; then the program's process group gets SIGTERM, ``grace``
        seconds later SIGKILL, and the evaluation is ``"timed-out"``.  None waits for ever.
    read : str
        Where the answer is (`directional.interface.reading` has the details):

        * ``"stdout"``: the last non-empty line of standard output, which must be exactly one
          number (a vector: every non-empty line holds numbers only);
        * ``"label:NAME"``: the number on the last line ``NAME = 1.23`` of standard output;
        * ``"file:PATH"``: as ``"stdout"``, from the file ``PATH`` relative to the folder the
          program runs in; the file must be written by this run (a file left unchanged from
          before counts as not written);
        * ``"json:KEY"``: standard output is a JSON document (or its last line is one);
          ``KEY`` is a dotted path into it, ``"fit.misfit"``, where a whole-number part indexes
          a list, ``"residuals.0"``.  Keys containing dots cannot be reached.
        * ``"csv:PATH:COLUMN"``: a vector, the named column(s) of a CSV file the run wrote.
    vector : bool
        The answer is a flat array of numbers (residuals, or predictions for a data table)
        rather than one number.
    templates : sequence of paths
        Template files (`directional.interface.templates`) rendered at ``x`` into the folder of
        each evaluation under their own file names; they may hold the placeholders of
        parameters that the command line does not.  Needs ``per_evaluation_dir``.
    files : sequence of paths
        Files (or folders) copied into the folder of each evaluation: the script, a mesh, a
        material table.  Needs ``per_evaluation_dir``.
    workdir : str, Path or None
        The folder the program runs in (created if missing); None runs it in the caller's
        current folder.
    per_evaluation_dir : bool
        Run each evaluation in a fresh folder ``eval-XXXXXXXX`` made under ``workdir`` (under
        the system's temporary folder if ``workdir`` is None).  The folder of a failed run is
        kept for inspection and named in the failure detail; that of a successful run is
        removed unless ``keep``.  Use this whenever runs may go in parallel and the program
        writes files.
    keep : bool
        Keep the folders of successful runs too (needs ``per_evaluation_dir``).
        Templates and copied files are put in before the program starts; a folder that cannot be
        made or filled fails the evaluation, and is kept.
    grace : float
        Seconds between SIGTERM and SIGKILL when a run is stopped.
    max_output : int
        Bytes kept of each of standard output and error (the end of the stream; the rest is read
        and discarded), and bytes read from the end of a result file.
    env : mapping of str to str, or None
        Environment variables added to (overriding) the inherited environment.

    Notes
    -----
    Values are written with ``repr(float(v))``: ``0.1``, ``1e-05``, ``-0.0``,
    ``1.7976931348623157e+308``.
    A negative value is an argument starting with ``-``; a program whose option parser might take
    it for an option should be given ``--rate={rate}`` rather than ``--rate {rate}``.

    When the program ends, its process group is sent SIGKILL, so nothing it started in the
    background outlives the evaluation.  POSIX only.

    The object holds no open resource and no state between runs: it pickles, and copies of it
    may run at the same time in other threads or processes.

    >>> import sys
    >>> cmd = Command([sys.executable, "-c", "import sys; print(2 * float(sys.argv[1]))", "{a}"],
    ...               ["a"], timeout=60)
    >>> cmd.arguments([0.1])[-1]
    '0.1'
    >>> cmd([0.1])
    0.2

    Raises
    ------
    ProblemError
        At construction: an empty ``argv``, a placeholder that names no parameter (named in the
        message), a malformed brace, a placeholder with a format spec or conversion, a parameter
        that no placeholder uses, a program that cannot be found, a bad ``read`` spec, or an
        option of the wrong type or range.
    """

    def __init__(
        self,
        argv: Sequence[str],
        names: Sequence[str],
        *,
        timeout: float | None = None,
        read: str = "stdout",
        vector: bool = False,
        templates: Sequence[str | os.PathLike[str]] = (),
        files: Sequence[str | os.PathLike[str]] = (),
        workdir: str | os.PathLike[str] | None = None,
        per_evaluation_dir: bool = False,
        keep: bool = False,
        grace: float = 2.0,
        max_output: int = 1_000_000,
        env: Mapping[str, str] | None = None,
    ) -> None:
        self.names = _check_names(names)
        self.argv = _check_argv(argv)
        self.env = _check_env(env)
        self._template = tuple(_parse(i, arg, self.names) for i, arg in enumerate(self.argv))
        if not isinstance(vector, bool):
            raise ProblemError(f"vector must be True or False, got {vector!r}")
        self.vector = vector
        self.templates = tuple(Template.read(path, self.names) for path in _paths("templates", templates))
        self.files = tuple(Path(path).absolute() for path in _paths("files", files))
        for path in self.files:
            if not path.exists():
                raise ProblemError(f"files: {str(path)!r} does not exist")
        _check_names_in_folder(self.templates, self.files)
        _check_all_used(self._template, self.names, self.templates)
        self._program = _find_program(self.argv[0], self.env)
        self._read = reading.parse(read, vector=vector)
        self.read = read
        self.timeout = _check_seconds("timeout", timeout, allow_none=True)
        self.grace = _check_seconds("grace", grace, allow_zero=True)
        if isinstance(max_output, bool) or not isinstance(max_output, int) or max_output < 1:
            raise ProblemError(f"max_output must be a positive integer, got {max_output!r}")
        self.max_output = max_output
        self.workdir = _check_workdir(workdir)
        for key, flag in (("per_evaluation_dir", per_evaluation_dir), ("keep", keep)):
            if not isinstance(flag, bool):
                raise ProblemError(f"{key} must be True or False, got {flag!r}")
        if keep and not per_evaluation_dir:
            raise ProblemError("keep=True needs per_evaluation_dir=True")
        if (self.templates or self.files) and not per_evaluation_dir:
            raise ProblemError("templates and files are put in a folder of each evaluation: "
                               "they need per_evaluation_dir=True")
        self.per_evaluation_dir = per_evaluation_dir
        self.keep = keep

    def __repr__(self) -> str:
        return (
            f"Command({list(self.argv)!r}, names={list(self.names)!r}, read={self.read!r}, "
            f"timeout={self.timeout!r})"
        )

    def arguments(self, x: Sequence[float] | np.ndarray) -> list[str]:
        """Return the argument list a run at ``x`` gets, placeholders filled in.

        Raises
        ------
        ProblemError
            If ``x`` does not have one finite value per parameter.
        """
        x = np.asarray(x, dtype=float)
        if x.shape != (len(self.names),):
            raise ProblemError(f"x must have shape ({len(self.names)},), got {x.shape!r}")
        for name, value in zip(self.names, x, strict=True):
            if not math.isfinite(value):
                raise ProblemError(f"parameter {name!r}: value must be finite, got {value!r}")
        text = {name: repr(float(value)) for name, value in zip(self.names, x, strict=True)}
        args = ["".join(p if name is None else text[name] for p, name in pieces)
                for pieces in self._template]
        args[0] = self._program
        return args

    def run(self, x: Sequence[float] | np.ndarray) -> Outcome:
        """Run the program once at ``x`` and return what it did, without judging it.

        The per-evaluation folder, if any, is left in place (``outcome.directory``).

        Raises
        ------
        ProblemError
            If ``x`` does not have one finite value per parameter.
        EvaluationFailed
            If the program cannot be started (status ``"failed"``).
        """
        args = self.arguments(x)
        try:
            folder = self._folder()
        except OSError as error:
            raise EvaluationFailed(FAILED, f"cannot make the working folder: {error}") from None
        try:
            self._fill(folder, np.asarray(x, dtype=float))
        except OSError as error:
            raise EvaluationFailed(
                FAILED, f"cannot put the input files in place: {error}; folder: {folder}"
            ) from None
        try:
            return run_program(
                args,
                cwd=folder,
                env=None if self.env is None else {**os.environ, **self.env},
                timeout=self.timeout,
                grace=self.grace,
                max_output=self.max_output,
            )
        except OSError as error:
            where = "" if folder is None else f"; folder: {folder}"
            raise EvaluationFailed(FAILED, f"could not start {args[0]!r}: {error}{where}") from None

    def __call__(
        self, x: Sequence[float] | np.ndarray, check: Callable[[Any], Any] | None = None
    ) -> Any:
        """Run the program once at ``x`` and return the value (or, ``vector``, the array) it reports.

        ``check``, if given, is applied to the answer before the run counts as a success (e.g.
        the length of a vector): what it returns is returned, and an `EvaluationFailed` it raises
        fails the run like any other failure (the folder is kept and named).

        Raises
        ------
        ProblemError
            If ``x`` does not have one finite value per parameter.
        EvaluationFailed
            If the run exits non-zero, reports no finite number, or times out; ``status`` is
            ``"failed"`` or ``"timed-out"``, ``detail`` says what happened.
        """
        before = None
        if self._read.file is not None and not self.per_evaluation_dir:
            before = _stamp(self._base() / self._read.file)
        outcome = self.run(x)
        value = self._value(outcome, before)
        if check is not None:
            try:
                value = check(value)
            except EvaluationFailed as error:
                where = "" if outcome.directory is None else f"\nfolder: {outcome.directory}"
                raise EvaluationFailed(error.status, error.detail + where) from None
        if self.per_evaluation_dir and not self.keep and outcome.directory is not None:
            shutil.rmtree(outcome.directory, ignore_errors=True)
        return value

    def _base(self) -> Path:
        return Path.cwd() if self.workdir is None else self.workdir

    def _fill(self, folder: Path | None, x: np.ndarray) -> None:
        """Render the templates and copy the files into the evaluation's folder."""
        if folder is None:
            return
        for template in self.templates:
            template.write(folder, self.names, x)
        for path in self.files:
            if path.is_dir():
                shutil.copytree(path, folder / path.name, symlinks=True)
            else:
                shutil.copy2(path, folder / path.name)

    def _folder(self) -> Path | None:
        if self.workdir is not None:
            self.workdir.mkdir(parents=True, exist_ok=True)
        if not self.per_evaluation_dir:
            return self.workdir
        return Path(tempfile.mkdtemp(prefix="eval-", dir=self.workdir))

    def _value(self, outcome: Outcome, before: tuple[int, ...] | None) -> float | np.ndarray:
        """The value of a run, or EvaluationFailed saying why there is none."""
        if outcome.timed_out:
            raise EvaluationFailed(TIMED_OUT, _detail(outcome, self._stopped(outcome)))
        if outcome.returncode != 0:
            raise EvaluationFailed(FAILED, _detail(outcome, ""))
        spec = self._read
        text, where = outcome.stdout, "standard output"
        if spec.file is not None:
            text, where = self._file_text(outcome, before), f"file {spec.file!r}"
        value: float | np.ndarray | str
        if isinstance(text, _Missing):
            value = text.reason
        elif self.vector:
            value = reading.vector(spec, text, where)
        else:
            value = reading.number(spec, text, where)
        if isinstance(value, str):
            raise EvaluationFailed(FAILED, _detail(outcome, value))
        return value

    def _stopped(self, outcome: Outcome) -> str:
        if outcome.killed:
            return (f"no result within {self.timeout!r} s; still running {self.grace!r} s after "
                    f"SIGTERM, killed with SIGKILL")
        return f"no result within {self.timeout!r} s; stopped with SIGTERM"

    def _file_text(self, outcome: Outcome, before: tuple[int, ...] | None) -> str | _Missing:
        """The end of the result file, or why it cannot be read."""
        name = self._read.file
        path = (outcome.directory or Path.cwd()) / name  # type: ignore[operator]
        stamp = _stamp(path)
        if stamp is None:
            return _Missing(f"the program wrote no file {name!r}")
        if stamp == before:
            return _Missing(f"the program did not write {name!r}: it is unchanged since before the run")
        try:
            with open(path, "rb") as f:
                size = f.seek(0, os.SEEK_END)
                if self._read.source == "csv" and size > self.max_output:
                    return _Missing(f"{name!r} is larger than {self.max_output} bytes")
                f.seek(max(0, size - self.max_output))
                return f.read().decode("utf-8", errors="replace")
        except OSError as error:
            return _Missing(f"cannot read {name!r}: {error}")


@dataclass(frozen=True, slots=True)
class _Missing:
    """Why a result file gives no text."""

    reason: str


def _paths(key: str, paths: object) -> list[Path]:
    if isinstance(paths, str | os.PathLike) or not isinstance(paths, Sequence):
        raise ProblemError(f"{key} must be a list of file paths, got {paths!r}")
    for path in paths:
        if not isinstance(path, str | os.PathLike) or not os.fspath(path):
            raise ProblemError(f"{key}: each entry must be a file path, got {path!r}")
    return [Path(path) for path in paths]


def _check_names_in_folder(templates: tuple[Template, ...], files: tuple[Path, ...]) -> None:
    """Two inputs may not land on the same name in the evaluation's folder."""
    seen: set[str] = set()
    for name in [t.name for t in templates] + [p.name for p in files]:
        if name in seen:
            raise ProblemError(f"two templates or files would both be {name!r} in the folder of "
                               "an evaluation")
        seen.add(name)


def _check_names(names: Sequence[str]) -> tuple[str, ...]:
    if isinstance(names, str) or not isinstance(names, Sequence):
        raise ProblemError(f"names must be a sequence of parameter names, got {names!r}")
    for name in names:
        if not isinstance(name, str) or not name.isidentifier():
            raise ProblemError(f"parameter name must be an identifier, got {name!r}")
    seen = set()
    for name in names:
        if name in seen:
            raise ProblemError(f"parameter name {name!r} appears twice")
        seen.add(name)
    return tuple(names)


def _check_argv(argv: Sequence[str]) -> tuple[str, ...]:
    if isinstance(argv, str) or not isinstance(argv, Sequence):
        raise ProblemError(f"argv must be a list of strings (no shell command line), got {argv!r}")
    if len(argv) == 0:
        raise ProblemError("argv is empty: it must name at least the program")
    for i, arg in enumerate(argv):
        if not isinstance(arg, str):
            raise ProblemError(f"argv[{i}] must be a string, got {arg!r}")
    if argv[0] == "":
        raise ProblemError("argv[0] is empty: it must name the program")
    return tuple(argv)


def _check_env(env: Mapping[str, str] | None) -> dict[str, str] | None:
    if env is None:
        return None
    if not isinstance(env, Mapping):
        raise ProblemError(f"env must be a mapping of names to strings, got {env!r}")
    for key, value in env.items():
        if not isinstance(key, str) or not key or "=" in key:
            raise ProblemError(f"env: bad variable name {key!r}")
        if not isinstance(value, str):
            raise ProblemError(f"env[{key!r}] must be a string, got {value!r}")
    return dict(env)


def _parse(index: int, arg: str, names: tuple[str, ...]) -> tuple[tuple[str, str | None], ...]:
    """Split one argument into (literal, name-or-None) pieces, checking each placeholder."""
    try:
        fields = list(string.Formatter().parse(arg))
    except ValueError as error:
        raise ProblemError(f"argv[{index}] {arg!r}: {error}") from None
    pieces = []
    for literal, field, spec, conversion in fields:
        if literal:
            pieces.append((literal, None))
        if field is None:
            continue
        shown = "{" + field + (f"!{conversion}" if conversion else "")
        shown += (f":{spec}" if spec else "") + "}"
        if field not in names:
            raise ProblemError(
                f"argv[{index}] {arg!r}: placeholder {shown} names no parameter "
                f"(parameters: {', '.join(names) or 'none'})"
            )
        if index == 0:
            raise ProblemError(f"argv[0] {arg!r}: the program cannot contain a placeholder")
        if spec or conversion:
            raise ProblemError(
                f"argv[{index}] {arg!r}: placeholder {shown} may not have a format; "
                "values are always written exactly, as repr(float)"
            )
        pieces.append(("", field))
    return tuple(pieces)


def _check_all_used(template: tuple, names: tuple[str, ...], decks: tuple[Template, ...]) -> None:
    used = {name for pieces in template for _, name in pieces if name is not None}
    used.update(*(deck.used for deck in decks))
    for name in names:
        if name not in used:
            raise ProblemError(
                f"parameter {name!r} appears in no placeholder of the command or a template: "
                "the program would never see it"
            )


def _find_program(program: str, env: dict[str, str] | None) -> str:
    path = os.environ.get("PATH") if env is None else env.get("PATH", os.environ.get("PATH"))
    found = shutil.which(program, path=path)
    if found is None:
        raise ProblemError(f"program {program!r} not found (not an executable file, nor on PATH)")
    if os.sep in program or (os.altsep and os.altsep in program):
        return os.path.abspath(program)
    return program


def _check_seconds(key: str, value, *, allow_none: bool = False, allow_zero: bool = False):
    if value is None and allow_none:
        return None
    if isinstance(value, bool) or not isinstance(value, int | float) or math.isnan(value):
        raise ProblemError(f"{key} must be a number of seconds, got {value!r}")
    if value < 0 or (value == 0 and not allow_zero) or (math.isinf(value) and not allow_none):
        least = ">= 0" if allow_zero else "> 0"
        raise ProblemError(f"{key} must be {least} seconds, got {value!r}")
    return None if math.isinf(value) else float(value)


def _check_workdir(workdir: str | os.PathLike[str] | None) -> Path | None:
    if workdir is None:
        return None
    if not isinstance(workdir, str | os.PathLike) or str(workdir) == "":
        raise ProblemError(f"workdir must be a folder path, got {workdir!r}")
    path = Path(workdir).absolute()
    if path.exists() and not path.is_dir():
        raise ProblemError(f"workdir {str(path)!r} exists and is not a folder")
    return path


def _stamp(path: Path) -> tuple[int, ...] | None:
    """Identity and modification stamp of a file, None if it does not exist."""
    try:
        s = path.stat()
    except OSError:
        return None
    return (s.st_ino, s.st_size, s.st_mtime_ns, s.st_ctime_ns)


def _detail(outcome: Outcome, problem: str) -> str:
    """Exit code, problem, folder and the end of stderr, for EvaluationFailed.detail."""
    code = outcome.returncode
    head = f"exit code {code}"
    if code < 0:
        try:
            head += f" ({signal.Signals(-code).name})"
        except ValueError:
            pass
    lines = [head + (f"; {problem}" if problem else "")]
    if outcome.directory is not None:
        lines.append(f"folder: {outcome.directory}")
    stderr = outcome.stderr[-DETAIL_LIMIT:]
    if stderr.strip():
        lines.append("stderr (end):\n" + stderr)
    return "\n".join(lines)
