"""Reading a program's answer: one number, or a vector of numbers, from its output.

What a program prints is text meant for people as often as for us, so reading is strict: a
value is taken only from where the problem file says it is, and anything else there is an error
that quotes the offending line.  The answer of `read` is the number (or array), or a `str`
saying why there is none; the caller turns that into a failed evaluation.

The ``read`` specification (a plain string, parsed once by `parse`):

============================  ==================================================================
``"stdout"``                  one number: the last non-empty line of standard output must be
                              exactly one number.  A vector: every non-empty line holds only
                              numbers (separated by spaces, tabs or commas), read in order.
``"label:NAME"``              one number, from the last line of standard output of the form
                              ``NAME = 1.23``, ``NAME: 1.23`` or ``NAME 1.23`` (the whole line).
``"file:PATH"``               as ``"stdout"``, from the file PATH (relative to the folder the
                              program ran in), which the run must have written.
``"json:KEY"``                standard output is a JSON document (or its last line is one);
                              KEY is a dotted path into it (``fit.misfit``; a whole-number part
                              indexes a list).  One number, or a flat array of numbers.
``"csv:PATH:COLUMN[,COL2]"``  a vector: the named column(s) of the CSV file PATH (a header row,
                              then numbers), one column after the other.
============================  ==================================================================

Every number must be finite: a NaN or an infinity fails the evaluation and names its place.
Numbers are the usual decimal / exponent notation (common practice, no source).
"""

from __future__ import annotations

import csv
import io
import json
import math
import re
from dataclasses import dataclass

import numpy as np

from directional.errors import ProblemError

SOURCES = ("stdout", "label", "file", "json", "csv")
USAGE = "read must be 'stdout', 'label:NAME', 'file:PATH', 'json:KEY' or 'csv:PATH:COLUMN'"

# One number as a whole token: sign, digits, point, exponent; or inf / infinity / nan.
_NUMBER = r"[-+]?(?:(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?|inf(?:inity)?|nan)"
_ONE = re.compile(rf"\s*({_NUMBER})\s*", re.IGNORECASE)
_SEPARATOR = re.compile(r"[\s,;]+")
_TOKEN = re.compile(rf"{_NUMBER}", re.IGNORECASE)


@dataclass(frozen=True, slots=True)
class ReadSpec:
    """A parsed ``read`` string: ``source`` (one of `SOURCES`), ``name`` (file, key or label)
    and ``columns`` (for ``csv``)."""

    source: str
    name: str = ""
    columns: tuple[str, ...] = ()

    @property
    def file(self) -> str | None:
        """The file the answer is in, or None for standard output."""
        return self.name if self.source in ("file", "csv") else None


def parse(read: object, *, vector: bool = False) -> ReadSpec:
    """Return the `ReadSpec` of a ``read`` string, for one number or (``vector``) many.

    >>> parse("csv:out.csv:T1,T2", vector=True)
    ReadSpec(source='csv', name='out.csv', columns=('T1', 'T2'))

    Raises
    ------
    ProblemError
        For a string of no known form, an empty name, a label used for a vector or a CSV column
        used for one number.
    """
    if not isinstance(read, str):
        raise ProblemError(f"{USAGE}, got {read!r}")
    if read == "stdout":
        return ReadSpec("stdout")
    source, colon, rest = read.partition(":")
    if not colon or source not in SOURCES[1:]:
        raise ProblemError(f"{USAGE}, got {read!r}")
    if source == "label":
        if vector:
            raise ProblemError(f"read {read!r}: a label picks one number; a vector needs "
                               "'stdout', 'file:PATH', 'json:KEY' or 'csv:PATH:COLUMN'")
        if not re.fullmatch(r"[^\s=:]+", rest):
            raise ProblemError(f"read {read!r}: the label must be one word without '=' or ':'")
        return ReadSpec("label", rest)
    if source == "file":
        if not rest.strip():
            raise ProblemError(f"read {read!r}: the file name is missing")
        return ReadSpec("file", rest)
    if source == "json":
        if not rest or any(part == "" for part in rest.split(".")):
            raise ProblemError(f"read {read!r}: the key must be a dotted path like 'fit.misfit'")
        return ReadSpec("json", rest)
    path, colon, columns = rest.rpartition(":")
    names = tuple(c.strip() for c in columns.split(","))
    if not colon or not path.strip() or not all(names):
        raise ProblemError(f"read {read!r}: give 'csv:PATH:COLUMN' (columns separated by commas)")
    if not vector:
        raise ProblemError(f"read {read!r}: a CSV column is a vector; kind = \"residuals\" reads "
                           "one, one number is read with 'stdout', 'label:NAME', 'file:PATH' or "
                           "'json:KEY'")
    return ReadSpec("csv", path, names)


def number(spec: ReadSpec, text: str, where: str) -> float | str:
    """One finite number from ``text`` as ``spec`` says, or why there is none.

    >>> number(ReadSpec("stdout"), "step 1000\\n2.5\\n", "standard output")
    2.5
    >>> number(ReadSpec("label", "cost"), "cost = 1.25\\ndone in 3 s\\n", "standard output")
    1.25
    """
    if spec.source == "json":
        return _finite(_json_at(text, spec.name), f"JSON {spec.name!r}", vector=False)
    if spec.source == "label":
        return _labelled(text, spec.name, where)
    line = _last_line(text)
    if line is None:
        return f"{where} is empty: the program printed no number"
    match = _ONE.fullmatch(line)
    if match is None:
        return (f"the last line of {where} must be exactly one number, got {line.strip()[:200]!r} "
                "(print the value last, or pick it by its label: read = \"label:NAME\")")
    return _finite(float(match.group(1)), f"the last line of {where}", vector=False)


def vector(spec: ReadSpec, text: str, where: str) -> np.ndarray | str:
    """A flat array of finite numbers from ``text`` as ``spec`` says, or why there is none.

    >>> vector(ReadSpec("stdout"), "1.5 2\\n-3e-1\\n", "standard output")
    array([ 1.5,  2. , -0.3])
    """
    if spec.source == "json":
        return _finite(_json_at(text, spec.name), f"JSON {spec.name!r}", vector=True)
    if spec.source == "csv":
        return _columns(text, spec.columns, where)
    values: list[float] = []
    for number_, line in enumerate(text.splitlines(), start=1):
        if not line.strip():
            continue
        tokens = [t for t in _SEPARATOR.split(line.strip()) if t]
        if not all(_TOKEN.fullmatch(t) for t in tokens):
            return (f"line {number_} of {where} is not a row of numbers: {line.strip()[:200]!r} "
                    "(a vector is read from lines holding numbers only; use json:KEY or "
                    "csv:PATH:COLUMN for output with other text)")
        values.extend(float(t) for t in tokens)
    if not values:
        return f"{where} holds no numbers"
    return _finite(values, where, vector=True)


def _last_line(text: str) -> str | None:
    for line in reversed(text.splitlines()):
        if line.strip():
            return line
    return None


def _labelled(text: str, label: str, where: str) -> float | str:
    pattern = re.compile(rf"\s*{re.escape(label)}\s*(?:[=:]\s*|\s)({_NUMBER})\s*", re.IGNORECASE)
    found = None
    for line in text.splitlines():
        if (match := pattern.fullmatch(line)) is not None:
            found = match
    if found is None:
        return (f"no line of {where} reads '{label} = NUMBER'; it ends with "
                f"{text.strip()[-200:]!r}")
    return _finite(float(found.group(1)), f"{label!r} in {where}", vector=False)


def _finite(value: object, where: str, *, vector: bool) -> float | np.ndarray | str:
    """Check that ``value`` is one finite number (or, ``vector``, a flat list of them)."""
    if isinstance(value, str):
        return value  # already a reason
    if vector:
        if isinstance(value, int | float) and not isinstance(value, bool):
            value = [value]
        if not isinstance(value, list) or not value:
            return f"{where} is {_short(value)}, not a list of numbers"
        bad = [i for i, v in enumerate(value)
               if isinstance(v, bool) or not isinstance(v, int | float)]
        if bad:
            return f"entry {bad[0]} of {where} is {_short(value[bad[0]])}, not a number"
        array = np.array(value, dtype=float)
        off = np.flatnonzero(~np.isfinite(array))
        if off.size:
            return f"entry {off[0]} of {where} is {float(array[off[0]])!r}, not a finite value"
        return array
    if isinstance(value, bool) or not isinstance(value, int | float):
        return f"{where} is {_short(value)}, not a number"
    if not math.isfinite(value):
        return f"{where} is {value!r}, not a finite value"
    return float(value)


def _short(value: object) -> str:
    text = repr(value)
    return text if len(text) <= 80 else text[:77] + "..."


def _json_at(text: str, key: str) -> object:
    """The node at dotted ``key`` of the JSON document in ``text``, or a `str` saying why not."""
    try:
        document = json.loads(text)
    except ValueError:
        line = _last_line(text)
        try:
            document = json.loads(line) if line is not None else None
        except ValueError:
            document = None
        if document is None:
            return f"standard output is not a JSON document; it ends with {text[-200:]!r}"
    node, path = document, []
    for part in key.split("."):
        path.append(part)
        if isinstance(node, dict) and part in node:
            node = node[part]
        elif isinstance(node, list) and part.isdigit() and int(part) < len(node):
            node = node[int(part)]
        else:
            there = ("keys: " + ", ".join(map(str, node))) if isinstance(node, dict) else (
                type(node).__name__)
            return f"JSON output has no {'.'.join(path)!r} ({there})"
    return node


def _columns(text: str, columns: tuple[str, ...], where: str) -> np.ndarray | str:
    rows = [row for row in csv.reader(io.StringIO(text)) if any(cell.strip() for cell in row)]
    if not rows:
        return f"{where} is empty"
    header = [cell.strip() for cell in rows[0]]
    missing = [c for c in columns if c not in header]
    if missing:
        return f"{where} has no column {missing[0]!r} (columns: {', '.join(header)})"
    values: list[float] = []
    for column in columns:
        index = header.index(column)
        for count, row in enumerate(rows[1:], start=1):
            cell = row[index].strip() if index < len(row) else ""
            if not _TOKEN.fullmatch(cell):
                return f"{where}, data row {count}, column {column!r}: {cell!r} is not a number"
            values.append(float(cell))
    if not values:
        return f"{where} has a header but no rows"
    return _finite(values, where, vector=True)
