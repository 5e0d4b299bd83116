"""Problem files: a TOML file that names the parameters, the objective, the search and the journal.

Reading is strict: an unknown key, a value of the wrong type, a missing field or a placeholder that
names no parameter raises `ProblemError` with the file, the line and the key, before anything runs.
`tomllib` reports no line numbers for keys, so `KeyLines` finds them by scanning the text.

A problem file runs code by design (a Python function or a program): run only files you trust.

The schema (every table but ``[[parameter]]`` and ``[objective]`` is optional)::

    title = "Batch culture: growth constants"

    [[parameter]]                 # one table per parameter, in order
    name = "mu_max"               # an identifier; {mu_max} in a command
    start = 0.4
    lower = 0.01                  # default -inf
    upper = 2.0                   # default inf
    scale = "log"                 # "linear" (default) or "log"
    unit = "1/h"

    [objective]
    function = "model:residuals"  # module beside this file (or importable) : callable(x)
    # command = ["python3", "sim.py", "--rate={mu_max}"]   # or a program, no shell
    # timeout = 600               # seconds a run may take (command only)
    # read = "stdout"             # or "label:NAME", "file:PATH", "json:KEY", "csv:PATH:COLUMN"
    # workdir = "runs"            # folder the program runs in, default this file's folder
    # version = "solver 4.2, tables 2024-03"   # what no hash can see (see below)
    # templates = ["deck.in"]     # input files with {name} placeholders, rendered per evaluation
    # files = ["sim.py"]          # files copied into the folder of each evaluation
    # fresh_folder = true         # each run in a new folder under workdir (default with
    #                             # templates or files; workdir then defaults to "evaluations")
    # keep_folders = false        # keep the folders of successful runs too (failed: always kept)
    kind = "residuals"            # or "value" (the default; "residuals" with a [data] table)
    # sigma = 0.05                # kind "residuals" without [data]: the residuals' standard
    #                             # deviation, one number or a list of one per residual

    [data]                        # optional: measurements; the objective returns predictions
    file = "readings.csv"         # CSV, header row; relative to this file
    observed = ["T_mid"]          # column(s) of observed values (several series: several names)
    sigma = 0.3                   # optional: one number, or one column name per series
    variables = ["time"]          # optional: independent variable column(s), for the plots

    [search]
    budget = 400                  # evaluations
    point_tolerance = 1e-6
    value_tolerance = 1e-10
    time_limit = 3600             # seconds
    check = true                  # the curvature check at the end
    noise = "estimate"            # noise level: a number, "estimate", or "none" (default: noticed)
    starts = 1                    # more than 1: many starts (dl.explore)
    workers = 1                   # processes for many starts
    seed = 0                      # of the start design
    replicates = 1                # runs of each point (a stochastic model): the search sees the mean

    [journal]                     # default: NAME.journal.sqlite beside this file NAME.toml
    path = "runs/culture.sqlite"  # relative to this file

The objective's *fingerprint* is stored in the journal (`Problem.fingerprint`): for a function,
its module, name and source; for a program, the command, ``read``, ``workdir`` and a hash of every
existing file the command names.  ``version`` adds what no hash can see (a compiled solver's data
files, a licence server's model library): change it when the model changes.

    [report]
    fit = "model:fit"             # optional: model against data, for the calibration plots
"""

from __future__ import annotations

import dataclasses
import importlib
import importlib.util
import math
import re
import sys
import tomllib
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from hashlib import sha1
from pathlib import Path
from types import MappingProxyType, ModuleType
from typing import Any

import numpy as np

from directional.errors import ProblemError
from directional.parameters import Parameter

KINDS = ("value", "residuals")

_TOP = ("title", "parameter", "objective", "data", "search", "journal", "report")
_PARAMETER = ("name", "start", "lower", "upper", "scale", "unit")
_OBJECTIVE = ("function", "command", "kind", "timeout", "read", "workdir", "templates", "files",
              "fresh_folder", "keep_folders", "version", "sigma")
_DATA = ("file", "observed", "sigma", "variables")
FRESH_PARENT = "evaluations"  # default parent of the per-evaluation folders, beside the file
JOURNAL_SUFFIX = ".journal.sqlite"  # the default journal: NAME.journal.sqlite beside NAME.toml
_SEARCH = (
    "budget",
    "point_tolerance",
    "value_tolerance",
    "time_limit",
    "check",
    "noise",
    "starts",
    "workers",
    "seed",
    "replicates",
)
_JOURNAL = ("path",)
_REPORT = ("fit",)
_TABLES = {
    "objective": _OBJECTIVE,
    "data": _DATA,
    "search": _SEARCH,
    "journal": _JOURNAL,
    "report": _REPORT,
}
_REFERENCE = re.compile(r"^[A-Za-z_]\w*(\.[A-Za-z_]\w*)*:[A-Za-z_]\w*$")


# ----------------------------------------------------------------------------- line numbers


_ARRAY_HEADER = re.compile(r"^\s*\[\[\s*([^\]]+?)\s*\]\]")
_HEADER = re.compile(r"^\s*\[\s*([^\]\[]+?)\s*\]")
_KEY = re.compile(r"""^\s*("[^"]*"|'[^']*'|[A-Za-z0-9_\-]+)\s*[=.]""")


class KeyLines:
    """The line (1-based) of each table header and key of a TOML text, found by scanning it.

    A path is a tuple: ``("title",)``, ``("objective",)``, ``("objective", "kind")``,
    ``("parameter", 2)`` (the third ``[[parameter]]`` header) or ``("parameter", 2, "lower")``.
    Good enough for error messages: keys inside multi-line strings could be mistaken for keys.

    >>> lines = KeyLines('title = "x"\\n[[parameter]]\\nname = "a"\\n')
    >>> lines.line("parameter", 0, "name"), lines.line("parameter", 0, "upper"), lines.line("title")
    (3, 2, 1)
    """

    def __init__(self, text: str) -> None:
        self._lines: dict[tuple, int] = {}
        table: tuple = ()
        counts: dict[str, int] = {}
        for number, raw in enumerate(text.splitlines(), start=1):
            line = raw.split("#", 1)[0] if '"' not in raw and "'" not in raw else raw
            if match := _ARRAY_HEADER.match(line):
                name = _bare(match.group(1))
                index = counts.get(name, 0)
                counts[name] = index + 1
                table = (name, index)
            elif match := _HEADER.match(line):  # [search] or a dotted [search.extra]
                table = tuple(_bare(part) for part in match.group(1).split("."))
            elif match := _KEY.match(line):
                self._lines.setdefault((*table, _bare(match.group(1))), number)
                continue
            else:
                continue
            self._lines.setdefault(table, number)

    def line(self, *path: object) -> int:
        """The line of ``path``, else of the nearest enclosing table that was found, else 1."""
        for end in range(len(path), 0, -1):
            if path[:end] in self._lines:
                return self._lines[path[:end]]
        return 1


def _bare(key: str) -> str:
    key = key.strip()
    return key[1:-1] if len(key) >= 2 and key[0] == key[-1] and key[0] in "\"'" else key


# ----------------------------------------------------------------------------- the records


@dataclass(frozen=True, slots=True, kw_only=True)
class ObjectiveSpec:
    """How to evaluate: a Python ``module:function`` or a program, and what it returns.

    ``kind`` is ``"value"`` (one number to minimize) or ``"residuals"`` (a vector whose sum of
    squares is minimized, with calibration uncertainty).
    """

    function: str | None = None
    command: tuple[str, ...] | None = None
    kind: str = "value"
    timeout: float | None = None
    read: str = "stdout"
    workdir: Path | None = None
    version: str | None = None
    templates: tuple[Path, ...] = ()
    files: tuple[Path, ...] = ()
    fresh_folder: bool = False
    keep_folders: bool = False
    sigma: float | tuple[float, ...] | None = None  # divides the residuals (kind "residuals")


@dataclass(frozen=True, slots=True, kw_only=True)
class DataSpec:
    """The ``[data]`` table: the CSV file and its columns (see `directional.interface.datatable`)."""

    file: Path
    observed: tuple[str, ...]
    sigma: tuple[str, ...] | float | None = None
    variables: tuple[str, ...] = ()


@dataclass(frozen=True, slots=True, kw_only=True)
class SearchSpec:
    """The ``[search]`` table; None means the library's default."""

    budget: int | None = None
    point_tolerance: float = 1e-6
    value_tolerance: float = 1e-10
    time_limit: float | None = None
    check: bool | str = True
    noise: float | str | None = None
    starts: int = 1
    workers: int = 1
    seed: int = 0
    replicates: int = 1


@dataclass(frozen=True, slots=True, kw_only=True)
class Problem:
    """A whole problem as read from a problem file (see the module docstring for the schema).

    Paths (journal, module folder, work folder) are absolute, resolved against the folder of the
    file.  ``lines`` maps ``"objective.function"``-style keys to their line, for later messages.

    >>> problem = Problem.from_text('''
    ... [[parameter]]
    ... name = "x"
    ... start = 1.0
    ... [objective]
    ... function = "math:cos"
    ... ''')
    >>> problem.names, problem.objective.kind
    (('x',), 'value')

    Raises
    ------
    ProblemError
        From `from_file` / `from_text`, naming the file, line and key.
    """

    title: str
    parameters: tuple[Parameter, ...]
    objective: ObjectiveSpec
    search: SearchSpec = field(default_factory=SearchSpec)
    journal: Path | None = None
    fit: str | None = None
    data: DataSpec | None = None
    source: Path | None = None
    lines: Mapping[str, int] = field(default_factory=dict, repr=False, compare=False)
    journal_default: bool = False  # the journal is the default one, not named by [journal]

    @classmethod
    def from_file(cls, path: str | Path) -> Problem:
        """Read and check the problem file at ``path``.

        Raises
        ------
        ProblemError
            When the file cannot be read, is not TOML, or breaks the schema; the message names
            the file, the line and the key.
        """
        path = Path(path)
        try:
            text = path.read_text(encoding="utf-8")
        except FileNotFoundError:
            raise ProblemError(f"{path}: no such problem file") from None
        except (OSError, UnicodeDecodeError) as error:
            raise ProblemError(f"{path}: cannot read the problem file: {error}") from None
        return cls.from_text(text, source=path.absolute())

    @classmethod
    def from_text(cls, text: str, source: str | Path | None = None) -> Problem:
        """Read a problem from TOML ``text``; relative paths are taken from ``source``'s folder.

        Raises
        ------
        ProblemError
            As `from_file`.
        """
        source = None if source is None else Path(source).absolute()
        return _Reader(text, source).problem()

    @property
    def names(self) -> tuple[str, ...]:
        """The parameter names, in order."""
        return tuple(p.name for p in self.parameters)

    @property
    def folder(self) -> Path:
        """The folder of the problem file (the current folder for a problem read from text)."""
        return Path.cwd() if self.source is None else self.source.parent

    def where(self, key: str) -> str:
        """``"FILE, line N"`` for a dotted key such as ``"objective.function"``."""
        name = "problem" if self.source is None else str(self.source)
        return f"{name}, line {self.lines.get(key, 1)}"

    def make_objective(self) -> Callable[[np.ndarray], Any]:
        """Build the objective: a callable of one float array, in the order of the parameters.

        For ``kind = "residuals"`` it returns the residual vector; with a ``[data]`` table the
        function or program returns predictions, and the callable returns the weighted residuals
        ``(predicted - observed) / sigma`` (`directional.interface.datatable.TableResiduals`).
        A Python function is loaded on its first call (so the callable pickles for worker
        processes); a program becomes a `directional.interface.command.Command` that runs in
        ``workdir`` (or in a fresh folder under it for each evaluation).

        Raises
        ------
        ProblemError
            When the module or function cannot be found, or the command is not runnable (the
            program is missing); the message names the key and its line.
        """
        spec = self.objective
        if spec.function is not None:
            function = FunctionObjective(spec.function, self.folder)
            try:
                function.load()
            except ProblemError as error:
                raise ProblemError(f"{self.where('objective.function')}: {error}") from None
            objective: Callable[[np.ndarray], Any] = function
        else:
            objective = self._command()
        from directional.interface.datatable import SteadyLength, TableResiduals

        if self.data is not None:
            return TableResiduals(objective, self.table())
        if spec.kind == "residuals" and spec.command is not None:
            return SteadyLength(objective)
        return objective

    def table(self) -> Any:
        """The ``[data]`` table read and checked (a `datatable.DataTable`), or None.

        Raises
        ------
        ProblemError
            When the file or a column is bad; the message names the key and its line.
        """
        if self.data is None:
            return None
        from directional.interface.datatable import read_table

        data = self.data
        try:
            return read_table(data.file, data.observed, data.sigma, data.variables)
        except ProblemError as error:
            raise ProblemError(f"{self.where('data.file')}: {error}") from None

    def fingerprint(self) -> dict[str, Any]:
        """What identifies the objective, for the journal (`directional.run.identity`).

        For a program, the contents of its ``templates`` and ``files`` are hashed too (under
        ``inputs``, by their path relative to this file); with a ``[data]`` table, the data file's
        contents (under ``data``), since the residuals depend on it.

        Raises
        ------
        ProblemError
            When a function cannot be loaded.
        """
        from directional.run.identity import (
            content_sha256,
            function_fingerprint,
            program_fingerprint,
        )

        spec = self.objective
        if spec.function is not None:
            function = FunctionObjective(spec.function, self.folder)
            try:
                found = function_fingerprint(function.load())
            except ProblemError as error:
                raise ProblemError(f"{self.where('objective.function')}: {error}") from None
            if spec.version is not None:
                found["version"] = spec.version
        else:
            default = self.folder / FRESH_PARENT if spec.fresh_folder else self.folder
            workdir = spec.workdir if spec.workdir is not None else default  # as `_command`
            inputs = {self._shown(path): path for path in (*spec.templates, *spec.files)}
            found = program_fingerprint(
                list(spec.command or ()), spec.read, workdir, spec.version, inputs=inputs
            )
        if self.data is not None:
            found["data"] = {self._shown(self.data.file): content_sha256(self.data.file)}
        return found

    def _shown(self, path: Path) -> str:
        """``path`` relative to this file's folder when it is inside it, else as it is."""
        try:
            return Path(path).relative_to(self.folder.absolute()).as_posix()
        except ValueError:
            return str(path)

    def make_fit(self) -> Callable[[np.ndarray], Any] | None:
        """The ``[report] fit`` function (model against data, for plots), or None.

        Raises
        ------
        ProblemError
            When it cannot be found; the message names the key and its line.
        """
        if self.fit is None:
            if self.data is None:
                return None
            return self.make_objective().series  # type: ignore[attr-defined]
        function = FunctionObjective(self.fit, self.folder)
        try:
            function.load()
        except ProblemError as error:
            raise ProblemError(f"{self.where('report.fit')}: {error}") from None
        return function

    def _command(self) -> Callable[[np.ndarray], Any]:
        from directional.interface.command import Command

        spec = self.objective
        try:
            default = self.folder / FRESH_PARENT if spec.fresh_folder else self.folder
            return Command(
                list(spec.command or ()),
                list(self.names),
                timeout=spec.timeout,
                read=spec.read,
                vector=spec.kind == "residuals",
                templates=spec.templates,
                files=spec.files,
                per_evaluation_dir=spec.fresh_folder,
                keep=spec.keep_folders,
                workdir=spec.workdir if spec.workdir is not None else default,
            )
        except ProblemError as error:
            raise ProblemError(f"{self.where('objective.command')}: objective.command: {error}") from None


# ----------------------------------------------------------------------------- Python functions


class FunctionObjective:
    """A ``module:function`` reference, loaded on first use; pickles as the reference alone.

    The module is looked for beside the problem file first (``folder/module.py`` or a package
    folder), then among the importable modules (``directional.testproblems.bioreactor``).  A module
    beside the file is loaded under a private name derived from its path, with its folder on
    ``sys.path`` while it loads, so that it may import its neighbours.
    """

    def __init__(self, reference: str, folder: Path) -> None:
        self.reference = reference
        self.folder = Path(folder)
        self._function: Callable[..., Any] | None = None

    def __repr__(self) -> str:
        return f"FunctionObjective({self.reference!r}, folder={str(self.folder)!r})"

    def __getstate__(self) -> dict[str, Any]:
        return {"reference": self.reference, "folder": self.folder}

    def __setstate__(self, state: dict[str, Any]) -> None:
        self.reference = state["reference"]
        self.folder = state["folder"]
        self._function = None

    def __call__(self, x: np.ndarray) -> Any:
        return self.load()(x)

    def fingerprint(self) -> dict[str, Any]:
        """The loaded function's fingerprint (`directional.run.identity.function_fingerprint`)."""
        from directional.run.identity import function_fingerprint

        return function_fingerprint(self.load())

    def load(self) -> Callable[..., Any]:
        """Import the module and return the function.

        Raises
        ------
        ProblemError
            When the module cannot be found or imported, or has no such callable.
        """
        if self._function is None:
            module_name, _, name = self.reference.partition(":")
            module = _load_module(module_name, self.folder)
            function = getattr(module, name, None)
            if not callable(function):
                raise ProblemError(f"module {module_name!r} has no function {name!r}")
            self._function = function
        return self._function


def _load_module(name: str, folder: Path) -> ModuleType:
    parts = name.split(".")
    candidates = [folder.joinpath(*parts).with_suffix(".py"), folder.joinpath(*parts, "__init__.py")]
    for path in candidates:
        if path.is_file():
            return _module_from_file(path, folder)
    try:
        return importlib.import_module(name)
    except ModuleNotFoundError as error:
        if error.name is not None and name.startswith(error.name):
            raise ProblemError(
                f"no module {name!r}: neither {candidates[0].name} in {str(folder)!r} "
                "nor an importable module"
            ) from None
        raise ProblemError(f"module {name!r} failed to import: {error}") from None
    except Exception as error:  # the module's own code failed
        raise ProblemError(f"module {name!r} failed to import: {error!r}") from None


def _module_from_file(path: Path, folder: Path) -> ModuleType:
    digest = sha1(str(path.resolve()).encode()).hexdigest()[:12]
    unique = f"_directional_problem_{digest}_{path.stem}"
    if unique in sys.modules:
        return sys.modules[unique]
    spec = importlib.util.spec_from_file_location(unique, path)
    if spec is None or spec.loader is None:
        raise ProblemError(f"cannot load {str(path)!r} as a module")
    module = importlib.util.module_from_spec(spec)
    sys.modules[unique] = module
    sys.path.insert(0, str(folder))
    try:
        spec.loader.exec_module(module)
    except Exception as error:  # the module's own code failed
        del sys.modules[unique]
        raise ProblemError(f"{path.name} failed to import: {error!r}") from None
    finally:
        try:
            sys.path.remove(str(folder))
        except ValueError:
            pass
    return module


# ----------------------------------------------------------------------------- the reader


class _Reader:
    """One pass over a parsed problem file, collecting errors with their lines."""

    def __init__(self, text: str, source: Path | None) -> None:
        self.source = source
        self.name = "problem" if source is None else str(source)
        self.keys = KeyLines(text)
        self.lines: dict[str, int] = {}
        try:
            self.data = tomllib.loads(text)
        except tomllib.TOMLDecodeError as error:
            raise ProblemError(f"{self.name}: not valid TOML: {error}") from None

    @property
    def folder(self) -> Path:
        return Path.cwd() if self.source is None else self.source.parent

    def fail(self, path: tuple, message: str) -> ProblemError:
        return ProblemError(f"{self.name}, line {self.keys.line(*path)}: {message}")

    def problem(self) -> Problem:
        data = self.data
        self._known(data, _TOP, (), "the top level")
        title = self._get(data, ("title",), str, "")
        parameters = self._parameters()
        data = self._data()
        objective = self._objective(parameters, data is not None)
        search = self._search()
        least = (len(parameters) + 1) * search.replicates
        if search.budget is not None and search.budget < least:
            each = (
                "" if search.replicates == 1
                else f" points each run {search.replicates} times, {least}"
            )
            raise self.fail(
                ("search", "budget"),
                f"search.budget must allow at least n + 1 = {len(parameters) + 1}{each} "
                f"evaluations, got {search.budget!r}",
            )
        journal = self._table("journal")
        path = self._get(journal, ("journal", "path"), str, None)
        report = self._table("report")
        fit = self._get(report, ("report", "fit"), str, None)
        if fit is not None and not _REFERENCE.match(fit):
            raise self.fail(("report", "fit"), f"report.fit must be 'module:function', got {fit!r}")
        keys = ("title", "journal.path", "report.fit", *(f"objective.{k}" for k in _OBJECTIVE),
                *(f"data.{k}" for k in _DATA))
        for key in keys:
            self.lines[key] = self.keys.line(*key.split("."))
        default = path is None and self.source is not None
        if default:
            path = self.source.name.removesuffix(self.source.suffix) + JOURNAL_SUFFIX
        return Problem(
            title=title,
            parameters=parameters,
            objective=objective,
            search=search,
            journal_default=default,
            journal=None if path is None else (self.folder / path).absolute(),
            fit=fit,
            data=data,
            source=self.source,
            lines=MappingProxyType(dict(self.lines)),
        )

    def _known(self, table: Mapping[str, Any], known: tuple[str, ...], path: tuple, what: str) -> None:
        for key in table:
            if key not in known:
                raise self.fail(
                    (*path, key), f"unknown key {key!r} in {what} (known: {', '.join(known)})"
                )

    def _table(self, name: str) -> Mapping[str, Any]:
        table = self.data.get(name, {})
        if not isinstance(table, dict):
            raise self.fail((name,), f"{name} must be a table [{name}], got {table!r}")
        self._known(table, _TABLES[name], (name,), f"[{name}]")
        return table

    def _get(self, table: Mapping[str, Any], path: tuple, kind: type | tuple, default: Any) -> Any:
        """``table[path[-1]]`` checked against ``kind`` (int accepted for float, bool never)."""
        key = path[-1]
        label = ".".join(str(p) for p in path if not isinstance(p, int))
        if key not in table:
            if default is _REQUIRED:
                raise self.fail(path[:-1] or path, f"missing {label!r}")
            return default
        value = table[key]
        kinds = kind if isinstance(kind, tuple) else (kind,)
        if float in kinds and isinstance(value, int) and not isinstance(value, bool):
            value = float(value)
        ok = isinstance(value, kinds) and (bool in kinds or not isinstance(value, bool))
        if not ok:
            wanted = " or ".join(_TYPE_NAMES[k] for k in kinds)
            raise self.fail(path, f"{label} must be {wanted}, got {value!r}")
        return value

    def _parameters(self) -> tuple[Parameter, ...]:
        rows = self.data.get("parameter")
        if rows is None:
            raise self.fail((), "missing [[parameter]]: name at least one parameter")
        if not isinstance(rows, list) or not all(isinstance(r, dict) for r in rows):
            raise self.fail(("parameter",), "parameters are [[parameter]] tables (double brackets)")
        parameters: list[Parameter] = []
        for i, row in enumerate(rows):
            where = ("parameter", i)
            self._known(row, _PARAMETER, where, f"[[parameter]] number {i + 1}")
            name = self._get(row, (*where, "name"), str, _REQUIRED)
            values = {
                "start": self._get(row, (*where, "start"), float, _REQUIRED),
                "lower": self._get(row, (*where, "lower"), float, -math.inf),
                "upper": self._get(row, (*where, "upper"), float, math.inf),
                "scale": self._get(row, (*where, "scale"), str, "linear"),
                "unit": self._get(row, (*where, "unit"), str, ""),
            }
            if any(p.name == name for p in parameters):
                raise self.fail((*where, "name"), f"parameter name {name!r} appears twice")
            try:
                parameters.append(Parameter(name, **values))
            except ProblemError as error:
                key = _blamed_key(str(error))
                raise self.fail((*where, key) if key else where, str(error)) from None
        return tuple(parameters)

    def _data(self) -> DataSpec | None:
        if "data" not in self.data:
            return None
        table = self._table("data")
        at = ("data",)
        file = self._get(table, (*at, "file"), str, _REQUIRED)
        observed = self._names(table, (*at, "observed"), _REQUIRED)
        sigma = self._get(table, (*at, "sigma"), (float, str, list), None)
        if isinstance(sigma, str | list):
            sigma = self._names(table, (*at, "sigma"), None)
        elif sigma is not None and not (0.0 < sigma < math.inf):
            raise self.fail((*at, "sigma"), f"data.sigma must be a positive number, got {sigma!r}")
        variables = self._names(table, (*at, "variables"), ())
        path = (self.folder / file).absolute()
        if not path.is_file():
            raise self.fail((*at, "file"), f"data.file: no such file {str(path)!r}")
        spec = DataSpec(file=path, observed=observed, sigma=sigma, variables=variables)
        from directional.interface.datatable import read_table

        try:
            read_table(spec.file, spec.observed, spec.sigma, spec.variables)
        except ProblemError as error:
            raise self.fail((*at, "file"), str(error)) from None
        return spec

    def _names(self, table: Mapping[str, Any], path: tuple, default: Any) -> Any:
        """A column name or a list of them, as a tuple."""
        value = self._get(table, path, (str, list), default)
        if value is default:
            return default
        names = (value,) if isinstance(value, str) else tuple(value)
        if not names or not all(isinstance(n, str) and n for n in names):
            raise self.fail(path, f"{'.'.join(path)} must be a column name or a list of them, "
                            f"got {value!r}")
        return names

    def _objective(self, parameters: tuple[Parameter, ...], data: bool = False) -> ObjectiveSpec:
        if "objective" not in self.data:
            raise self.fail((), "missing [objective]: give function = \"module:function\" or command")
        table = self._table("objective")
        at = ("objective",)
        function = self._get(table, (*at, "function"), str, None)
        command = self._get(table, (*at, "command"), list, None)
        kind = self._get(table, (*at, "kind"), str, "residuals" if data else "value")
        timeout = self._get(table, (*at, "timeout"), float, None)
        read = self._get(table, (*at, "read"), str, "stdout")
        workdir = self._get(table, (*at, "workdir"), str, None)
        version = self._get(table, (*at, "version"), str, None)
        if (function is None) == (command is None):
            raise self.fail(at, "[objective] needs exactly one of 'function' and 'command'")
        if kind not in KINDS:
            raise self.fail((*at, "kind"), f"objective.kind must be 'value' or 'residuals', got {kind!r}")
        if data and kind != "residuals":
            raise self.fail((*at, "kind"), "a [data] table needs objective.kind = \"residuals\": "
                            "the objective returns predictions, one per measurement")
        sigma = self._sigma(table, kind, data)
        if function is not None:
            if not _REFERENCE.match(function):
                raise self.fail(
                    (*at, "function"),
                    f"objective.function must be 'module:function', got {function!r}",
                )
            for key in ("timeout", "read", "workdir", "templates", "files", "fresh_folder",
                        "keep_folders"):
                if key in table:
                    raise self.fail((*at, key), f"objective.{key} applies to a command only")
            return ObjectiveSpec(function=function, kind=kind, version=version, sigma=sigma)
        spec = self._command(table, command, kind, timeout, read, workdir, parameters)
        return dataclasses.replace(spec, version=version, sigma=sigma)

    def _sigma(self, table: Mapping[str, Any], kind: str, data: bool) -> float | tuple[float, ...] | None:
        """``objective.sigma``: one positive number or a list of them, for kind "residuals"."""
        path = ("objective", "sigma")
        if "sigma" not in table:
            return None
        if kind != "residuals" or data:
            raise self.fail(path, "objective.sigma applies to kind = \"residuals\" without a [data] "
                            "table (a [data] table has its own data.sigma)")
        value = self._get(table, path, (float, list), None)
        from directional.api.options import sigma_option

        try:
            sigma = sigma_option(value)
        except ProblemError as error:
            raise self.fail(path, f"objective.{error}") from None
        return None if sigma is None else (float(sigma) if sigma.ndim == 0 else tuple(sigma.tolist()))

    def _command(self, table, command, kind, timeout, read, workdir, parameters) -> ObjectiveSpec:
        at = ("objective", "command")
        if not command or not all(isinstance(a, str) for a in command):
            raise self.fail(at, f"objective.command must be a non-empty list of strings, got {command!r}")
        decks = self._paths(table, "templates")
        files = self._paths(table, "files")
        fresh = self._get(table, ("objective", "fresh_folder"), bool, bool(decks or files))
        keep = self._get(table, ("objective", "keep_folders"), bool, False)
        if (decks or files) and not fresh:
            raise self.fail(("objective", "fresh_folder"), "templates and files are put in a "
                            "fresh folder for each evaluation: fresh_folder cannot be false")
        if keep and not fresh:
            raise self.fail(("objective", "keep_folders"), "keep_folders needs fresh_folder = true")
        if timeout is not None and not (timeout > 0):
            raise self.fail(
                ("objective", "timeout"), f"objective.timeout must be > 0 seconds, got {timeout!r}"
            )
        names = [p.name for p in parameters]
        used = _check_placeholders(command, names, lambda message: self.fail(at, message))
        from directional.interface import reading
        from directional.interface.templates import Template

        for path in decks:
            try:
                used |= Template.read(path, names).used
            except ProblemError as error:
                raise self.fail(("objective", "templates"), str(error)) from None
        for name in names:
            if name not in used:
                raise self.fail(at, f"parameter {name!r} appears in no placeholder of "
                                "objective.command" + (" or a template" if decks else ""))
        try:
            reading.parse(read, vector=kind == "residuals")
        except ProblemError as error:
            raise self.fail(("objective", "read"), f"objective.{error}") from None
        return ObjectiveSpec(
            command=tuple(command),
            kind=kind,
            timeout=None if timeout is None or math.isinf(timeout) else timeout,
            read=read,
            workdir=None if workdir is None else (self.folder / workdir).absolute(),
            templates=decks,
            files=files,
            fresh_folder=fresh,
            keep_folders=keep,
        )

    def _paths(self, table: Mapping[str, Any], key: str) -> tuple[Path, ...]:
        """``objective.templates`` or ``objective.files``: existing paths beside this file."""
        at = ("objective", key)
        entries = self._get(table, at, list, [])
        paths = []
        for entry in entries:
            if not isinstance(entry, str) or not entry:
                raise self.fail(at, f"objective.{key} must be a list of file paths, got {entries!r}")
            path = (self.folder / entry).absolute()
            if not path.exists():
                raise self.fail(at, f"objective.{key}: no such file {str(path)!r}")
            paths.append(path)
        return tuple(paths)

    def _search(self) -> SearchSpec:
        table = self._table("search")
        at = ("search",)
        budget = self._get(table, (*at, "budget"), int, None)
        tolerances = {
            key: self._get(table, (*at, key), float, default)
            for key, default in (("point_tolerance", 1e-6), ("value_tolerance", 1e-10))
        }
        time_limit = self._get(table, (*at, "time_limit"), float, None)
        check = self._get(table, (*at, "check"), (bool, str), True)
        counts = {
            key: self._get(table, (*at, key), int, 1) for key in ("starts", "workers", "replicates")
        }
        seed = self._get(table, (*at, "seed"), int, 0)
        if budget is not None and budget < 1:
            raise self.fail(
                (*at, "budget"), f"search.budget must be a positive number of evaluations, got {budget!r}"
            )
        for key, value in tolerances.items():
            if not (0 < value < math.inf):
                raise self.fail((*at, key), f"search.{key} must be a positive number, got {value!r}")
        if time_limit is not None and not time_limit > 0:
            raise self.fail((*at, "time_limit"), f"search.time_limit must be > 0 seconds, got {time_limit!r}")
        for key, value in counts.items():
            if value < 1:
                raise self.fail((*at, key), f"search.{key} must be at least 1, got {value!r}")
        if seed < 0:
            raise self.fail((*at, "seed"), f"search.seed must be >= 0, got {seed!r}")
        noise = self._get(table, (*at, "noise"), (float, str), None)
        if isinstance(noise, str) and noise not in ("estimate", "none"):
            raise self.fail(
                (*at, "noise"),
                f"search.noise must be a number, \"estimate\" or \"none\", got {noise!r}",
            )
        if isinstance(noise, float) and not (0 <= noise < math.inf):
            raise self.fail((*at, "noise"), f"search.noise must be a number >= 0, got {noise!r}")
        if isinstance(check, str) and check not in ("quick", "extrapolated"):
            raise self.fail(
                (*at, "check"),
                f"search.check must be true, false, \"quick\" or \"extrapolated\", got {check!r}",
            )
        return SearchSpec(
            budget=budget,
            time_limit=time_limit,
            check=check,
            noise=noise,
            seed=seed,
            **tolerances,
            **counts,
        )


_REQUIRED = object()
_TYPE_NAMES = {str: "a string", float: "a number", int: "a whole number", bool: "true or false",
               list: "a list"}


def _blamed_key(message: str) -> str | None:
    """Which key a `Parameter` error is about, from its message (for the line number)."""
    for key in ("start", "lower", "upper", "scale", "unit", "name"):
        if f": {key} " in message or f"{key} must" in message or f"{key} {{" in message:
            return key
    if "outside" in message:
        return "start"
    if "log scale" in message:
        return "scale"
    return None


def _check_placeholders(
    command: list[str], names: list[str], fail: Callable[[str], ProblemError]
) -> set[str]:
    """Every ``{name}`` names a parameter and the program has none; the names used."""
    import string

    used: set[str] = set()
    for i, arg in enumerate(command):
        try:
            fields = [f for _, f, _, _ in string.Formatter().parse(arg) if f is not None]
        except ValueError as error:
            raise fail(f"objective.command[{i}] {arg!r}: {error}") from None
        for name in fields:
            if name not in names:
                raise fail(
                    f"objective.command[{i}] {arg!r}: placeholder {{{name}}} names no parameter "
                    f"(parameters: {', '.join(names)})"
                )
            if i == 0:
                raise fail(f"objective.command[0] {arg!r}: the program cannot hold a placeholder")
            used.add(name)
    return used
