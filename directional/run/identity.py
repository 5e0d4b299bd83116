"""The identity of a run: what must agree for a journal to be resumed, as canonical JSON.

The identity holds the kind of run (the entry point), the parameters, the entry point's arguments
that change the search, and the search settings; never the budget or the time limit.  It is
stored as JSON text with sorted keys and floats written by ``repr`` (exact: they read back to the
same double), ``Infinity`` for an infinite bound; its SHA-256 is stored beside it.  When two
identities differ, `difference` names the first key that does.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import os
from collections.abc import Mapping, Sequence
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
