"""Input-file templates: an input deck with ``{name}`` placeholders filled for each evaluation.

Many simulators read their inputs from a file rather than their command line.  A template is
that file with the parameter values replaced by placeholders:

* ``{R}`` is the value of parameter ``R``, written as ``repr(float(value))`` (the shortest text
  that reads back as the same double, bit for bit);
* ``{R:.6e}`` is the value written with a Python format specification (``.6e``, ``12.4f``,
  ``g``): mind that it rounds, so the program sees a slightly different value than the search;
* ``{{`` and ``}}`` are a literal ``{`` and ``}`` (as in `str.format`).

A template is read and checked once, when the problem is loaded: a placeholder that names no
parameter, an unpaired brace, a conversion (``{R!r}``), an attribute or index (``{R.real}``) or
a format specification that does not apply to a number is a `ProblemError` naming the file and
the line.  Rendering then cannot fail.
"""

from __future__ import annotations

import string
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from directional.errors import ProblemError


@dataclass(frozen=True, slots=True)
class Template:
    """One template file, read and checked: ``name`` is the file name it is rendered to."""

    path: Path
    name: str
    text: str
    used: frozenset[str]

    @classmethod
    def read(cls, path: str | Path, names: Sequence[str]) -> Template:
        """Read and check the template at ``path`` against the parameter ``names``.

        >>> import tempfile, os
        >>> folder = tempfile.mkdtemp()
        >>> _ = open(os.path.join(folder, "deck.in"), "w").write("k = {k:.3f}  # {{not}}\\n")
        >>> Template.read(os.path.join(folder, "deck.in"), ["k"]).render({"k": 2.0})
        'k = 2.000  # {not}\\n'

        Raises
        ------
        ProblemError
            When the file cannot be read, or a placeholder is bad (file and line named).
        """
        path = Path(path)
        try:
            text = path.read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as error:
            raise ProblemError(f"template {str(path)!r} cannot be read: {error}") from None
        used = frozenset(_check(text, path, tuple(names)))
        return cls(path=path, name=path.name, text=text, used=used)

    def render(self, values: dict[str, float]) -> str:
        """The template with every placeholder replaced by its value."""
        return self.text.format_map({name: float(values[name]) for name in self.used})

    def write(self, folder: Path, names: Sequence[str], x: np.ndarray) -> Path:
        """Render at ``x`` (in the order of ``names``) into ``folder``; return the file's path."""
        target = folder / self.name
        target.write_text(self.render(dict(zip(names, map(float, x), strict=True))),
                          encoding="utf-8")
        return target


def _check(text: str, path: Path, names: tuple[str, ...]) -> set[str]:
    """The parameter names the template uses; `ProblemError` at the first bad placeholder."""
    used: set[str] = set()
    for number, line in enumerate(text.splitlines(), start=1):
        def fail(message: str, number: int = number) -> ProblemError:
            return ProblemError(f"template {str(path)!r}, line {number}: {message}")

        try:
            pieces = list(string.Formatter().parse(line))
        except ValueError as error:
            raise fail(f"{error} in {line.strip()[:120]!r} (write {{{{ and }}}} for a "
                       "literal brace)") from None
        for _, field, spec, conversion in pieces:
            if field is None:
                continue
            if conversion is not None or field not in names:
                shown = "{" + field + (f"!{conversion}" if conversion else "") + (
                    f":{spec}" if spec else "") + "}"
                if field in names:
                    raise fail(f"placeholder {shown} has a conversion; use {{{field}:SPEC}}")
                raise fail(f"placeholder {shown} names no parameter (parameters: "
                           f"{', '.join(names)}; write {{{{ and }}}} for a literal brace)")
            if "{" in (spec or ""):
                raise fail(f"placeholder {{{field}:{spec}}}: a nested placeholder is not allowed")
            try:
                format(1.0, spec or "")
            except ValueError as error:
                raise fail(f"placeholder {{{field}:{spec}}}: {error}") from None
            used.add(field)
    return used
