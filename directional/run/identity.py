"""The identity of a run: what must agree for a journal to be resumed, as canonical JSON.

The identity holds the kind of run (the entry point), the parameters, the entry point's arguments
that change the search, and the search settings; never the budget or the time limit.  It is
stored as JSON text with sorted keys and floats written by ``repr`` (exact: they read back to the
same double), ``Infinity`` for an infinite bound; its SHA-256 is stored beside it.  When two
identities differ, `difference` names the first key that does.
"""

from __future__ import annotations

import dataclasses
import functools
import hashlib
import inspect
import json
import math
import os
import re
from collections.abc import Callable, Iterator, Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from directional.parameters import Parameter


def run_identity(
    kind: str,
    parameters: Sequence[Parameter],
    settings: object = None,
    **arguments: object,
) -> dict[str, Any]:
    """Return the identity of a run: what must agree for its journal to be resumed.

    ``kind`` names the entry point (a key of `api.resume.ENTRY_POINTS`); ``arguments`` are the keyword
    arguments of that entry point that change the search, other than the parameters, the budget
    and the time limit (e.g. ``point_tolerance``, ``check``, ``seed``, ``starts``); ``settings``
    is the search's settings dataclass, stored in full so that a change of a default is caught.

    >>> run_identity("minimize", [Parameter("k", 1.0, 0.0, 2.0)], point_tolerance=1e-6)["kind"]
    'minimize'
    """
    identity = {
        "kind": str(kind),
        "parameters": [
            {
                "name": p.name,
                "start": p.start,
                "lower": p.lower,
                "upper": p.upper,
                "scale": p.scale,
                "unit": p.unit,
            }
            for p in parameters
        ],
        "arguments": dict(arguments),
        "settings": dataclasses.asdict(settings) if dataclasses.is_dataclass(settings) else {},
    }
    return json.loads(canonical(identity))


class Deferred(Mapping[str, Any]):
    """An identity made when it is first read (by ``make``, once): a run without a journal
    never reads it, and making one costs tens of microseconds (a JSON round trip)."""

    __slots__ = ("_make", "_made")

    def __init__(self, make: Callable[[], dict[str, Any]]) -> None:
        self._make = make
        self._made: dict[str, Any] | None = None

    def _identity(self) -> dict[str, Any]:
        if self._made is None:
            self._made = self._make()
        return self._made

    def __getitem__(self, key: str) -> Any:
        return self._identity()[key]

    def __iter__(self) -> Iterator[str]:
        return iter(self._identity())

    def __len__(self) -> int:
        return len(self._identity())

    def __repr__(self) -> str:
        return repr(self._identity())


def canonical(value: object) -> str:
    """The identity as canonical JSON text (sorted keys, exact floats; inf as ``Infinity``)."""
    return json.dumps(value, sort_keys=True, separators=(",", ":"), default=_plain)


def _plain(value: object) -> object:
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return float(value)
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, tuple | set | frozenset):
        return list(value)
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    if isinstance(value, Mapping):  # a `Deferred` identity
        return dict(value)
    return repr(value)


def digest(identity: Mapping[str, Any]) -> str:
    return hashlib.sha256(canonical(identity).encode()).hexdigest()


def difference(old: object, new: object, where: str = "") -> tuple[str, object, object] | None:
    """The first place where two JSON values differ: ``(path, old, new)``, or None."""
    if isinstance(old, dict) and isinstance(new, dict):
        for key in sorted(set(old) | set(new), key=str):
            here = f"{where}.{key}" if where else str(key)
            if key not in old or key not in new:
                return here, old.get(key, "(absent)"), new.get(key, "(absent)")
            found = difference(old[key], new[key], here)
            if found:
                return found
        return None
    if isinstance(old, list) and isinstance(new, list):
        for i, (a, b) in enumerate(zip(old, new)):
            found = difference(a, b, f"{where}[{i}]")
            if found:
                return found
        if len(old) != len(new):
            return f"{where} (length)", len(old), len(new)
        return None
    same = old == new and type(old) is type(new)
    if isinstance(old, float) and isinstance(new, float):
        same = old == new or (math.isnan(old) and math.isnan(new))
    return None if same else (where, old, new)


def describe_place(where: str, identity: Mapping[str, Any]) -> str:
    """``parameters[1].lower`` -> ``parameters[1].lower (parameter 'k')``, for people."""
    if where.startswith("parameters["):
        index = where[len("parameters[") :].split("]", 1)[0]
        if index.isdigit() and int(index) < len(identity.get("parameters", [])):
            return f"{where} (parameter {identity['parameters'][int(index)]['name']!r})"
    return where


# ----------------------------------------------------------------------------- the objective
#
# The identity above says which search a journal holds; the *fingerprint* says which objective
# made its values.  It is kept beside the identity, not in it: a changed fingerprint does not
# refuse a journal outright but sends `journal.Journal.open` to evaluate a few stored points again
# (a comment added to a script must not cost a run its journal).


def fingerprint(objective: object) -> dict[str, Any]:
    """Return what identifies ``objective``: a JSON-ready dict.

    A Python function: its module, qualified name and the SHA-256 of its source and of its
    module's file (so that an edit of a helper or of the data beside it is seen too); where no
    source is available, of its code object.  A wrapper is seen through: one made by this package
    (progress bar, sum of squares, a problem file's function) and anything with ``__wrapped__``
    (`functools.wraps`).  An object with a ``fingerprint()`` method gives its own; a program (an
    object with ``argv``, ``read`` and ``workdir``) is described by `program_fingerprint`, with the
    contents of its ``templates`` and ``files`` when it has them.
    Anything else: its class, as a function.

    >>> fingerprint(len)["name"]
    'len'
    """
    own = getattr(objective, "fingerprint", None)
    if callable(own):
        return json.loads(canonical(own()))
    inner = _wrapped(objective)
    if inner is not None:
        return fingerprint(inner)
    if all(hasattr(objective, key) for key in ("argv", "read", "workdir")):
        argv = [str(a) for a in objective.argv]  # type: ignore[attr-defined]
        inputs = {
            str(path): path
            for path in (
                *(getattr(t, "path", t) for t in getattr(objective, "templates", ())),
                *getattr(objective, "files", ()),
            )
        }
        return program_fingerprint(
            argv, objective.read, objective.workdir, inputs=inputs  # type: ignore[attr-defined]
        )
    return function_fingerprint(objective)


def _wrapped(objective: object) -> object | None:
    """The callable a wrapper forwards to: ``__wrapped__`` (set by `functools.wraps`, or by a
    counting wrapper of one's own), a partial's function, a bound method's function, or what a
    wrapper of this package holds."""
    inner = getattr(objective, "__wrapped__", None)
    if callable(inner) and inner is not objective:
        return inner
    if isinstance(objective, functools.partial):
        return objective.func
    if inspect.ismethod(objective):
        return objective.__func__
    module = type(objective).__module__ or ""
    if module.startswith("directional."):
        for key in ("objective", "residuals", "function"):
            inner = getattr(objective, key, None)
            if callable(inner):
                return inner
    return None


_PRIVATE_MODULE = re.compile(r"^_directional_problem_[0-9a-f]+_")  # problemfile's file modules


def function_fingerprint(function: object) -> dict[str, Any]:
    """Module, qualified name and SHA-256 of the source (or code) of a Python callable."""
    target = function if inspect.isroutine(function) or inspect.isclass(function) else type(function)
    module = str(getattr(target, "__module__", "") or "")
    plain_module = _PRIVATE_MODULE.sub("", module)
    found: dict[str, Any] = {
        "type": "python",
        "module": plain_module,
        "name": str(getattr(target, "__qualname__", getattr(target, "__name__", repr(target)))),
    }
    try:
        found["source"] = _sha256(inspect.getsource(target).encode())
    except (OSError, TypeError):
        code = getattr(target, "__code__", None)
        if code is not None:
            found["code"] = _sha256(code.co_code + repr((code.co_consts, code.co_names)).encode())
    try:
        path = inspect.getsourcefile(target)
    except TypeError:
        path = None
    if path and os.path.isfile(path):
        found["module_source"] = file_sha256(path)
    return found


def program_fingerprint(
    argv: Sequence[str],
    read: str,
    workdir: object,
    version: str | None = None,
    *,
    inputs: Mapping[str, object] | None = None,
) -> dict[str, Any]:
    """The command, ``read``, ``workdir`` and the SHA-256 of every existing file it names.

    An argument names a file when, taken as a path (relative to ``workdir``), it is an existing
    file; so is the part after ``=`` of an ``--option=FILE`` argument.  Arguments with a
    ``{parameter}`` placeholder change with every evaluation and name no fixed file.
    ``inputs`` (a name -> path mapping: the input templates and the files copied into each
    evaluation's folder) are hashed by content under ``inputs``; a folder by the names and
    contents of the files in it.  Unlike the files the command names, they are never taken for
    the program's outputs (`outputs_seen`).
    """
    folder = Path(os.fspath(workdir)) if workdir is not None else Path.cwd()
    files: dict[str, str] = {}
    for argument in argv:
        if "{" in argument:
            continue
        for candidate in {argument, argument.partition("=")[2]} - {""}:
            path = folder / candidate
            if path.is_file():
                files[candidate] = file_sha256(path)
    found: dict[str, Any] = {
        "type": "program",
        "command": list(argv),
        "read": str(read),
        "workdir": str(folder),
        "files": files,
    }
    if inputs:
        found["inputs"] = {name: content_sha256(path) for name, path in inputs.items()}
    if version is not None:
        found["version"] = version
    return found


def content_sha256(path: object) -> str:
    """The SHA-256 of a file's bytes; of a folder, of the sorted names and hashes of its files;
    ``"missing"`` when there is nothing at ``path``."""
    place = Path(os.fspath(path))  # type: ignore[arg-type]
    if place.is_file():
        return file_sha256(place)
    if place.is_dir():
        digest_ = hashlib.sha256()
        for item in sorted(p for p in place.rglob("*") if p.is_file()):
            digest_.update(item.relative_to(place).as_posix().encode() + b"\0")
            digest_.update(file_sha256(item).encode() + b"\n")
        return digest_.hexdigest()
    return "missing"


def comparable(stored: Mapping[str, Any] | None, new: Mapping[str, Any]) -> dict[str, Any]:
    """``new`` as the journal would store it: the files the run itself wrote (``outputs`` of the
    stored fingerprint, see `outputs_seen`) are not compared."""
    found = dict(new)
    outputs = list((stored or {}).get("outputs", ()))
    if outputs and isinstance(found.get("files"), dict):
        found["files"] = {k: v for k, v in found["files"].items() if k not in outputs}
        found["outputs"] = outputs
    return found


def outputs_seen(before: Mapping[str, Any], after: Mapping[str, Any]) -> dict[str, Any]:
    """The fingerprint ``before`` a run, without the files that changed, appeared or went during
    it (``after``): those are the program's outputs (a log, a result file named in the command),
    not its inputs; they are listed under ``outputs`` and no longer compared."""
    old, new = before.get("files"), after.get("files")
    if not isinstance(old, dict) or not isinstance(new, dict):
        return dict(before)
    changed = {k for k in set(old) | set(new) if old.get(k) != new.get(k)}
    if not changed:
        return dict(before)
    found = dict(before)
    found["files"] = {k: v for k, v in old.items() if k not in changed}
    found["outputs"] = sorted(changed | set(before.get("outputs", ())))
    return found


def file_sha256(path: str | os.PathLike[str]) -> str:
    """The SHA-256 of a file's bytes, read in chunks."""
    digest_ = hashlib.sha256()
    with open(path, "rb") as stream:
        for chunk in iter(lambda: stream.read(1 << 20), b""):
            digest_.update(chunk)
    return digest_.hexdigest()


def _sha256(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def describe_change(old: Mapping[str, Any] | None, new: Mapping[str, Any]) -> str:
    """What differs between two fingerprints, in words (every key that differs)."""
    if not old:
        return "the journal does not record its objective (written by an older version)"
    words = []
    for key in sorted(set(old) | set(new), key=lambda k: (k not in _LABELS, k)):
        before, after = old.get(key, "(absent)"), new.get(key, "(absent)")
        if key == "outputs" or difference(before, after) is None:
            continue
        if key == "files" and isinstance(before, dict) and isinstance(after, dict):
            for name in sorted(set(before) | set(after)):
                if name not in before or name not in after:
                    words.append(f"the command names other files ({name!r} is new or gone)")
                elif before[name] != after[name]:
                    words.append(f"the file {name!r} named by the command has changed")
        elif key in ("inputs", "data") and isinstance(before, dict) and isinstance(after, dict):
            role = "input file" if key == "inputs" else "data file"
            for name in sorted(set(before) | set(after)):
                if name not in before or name not in after:
                    words.append(f"the {role}s differ ({name!r} is new or gone)")
                elif before[name] != after[name]:
                    words.append(f"the {role} {name!r} has changed")
        elif key in ("source", "module_source", "code"):
            words.append(f"{_LABELS[key]} has changed ({_short(before)} -> {_short(after)})")
        else:
            words.append(f"{_LABELS.get(key, key)} is {before!r} in the journal but {after!r} now")
    return "; ".join(words) or "nothing"


_LABELS = {
    "type": "the kind of objective (function or program)",
    "module": "the function's module",
    "name": "the function's name",
    "source": "the function's source",
    "module_source": "the file of the function's module",
    "code": "the function's code",
    "command": "the command",
    "read": "objective.read",
    "workdir": "objective.workdir",
    "files": "the files named by the command",
    "inputs": "the templates and files copied for each evaluation",
    "data": "the [data] file",
    "version": "objective.version",
}


def _short(value: object) -> str:
    return str(value)[:12] if isinstance(value, str) else repr(value)
