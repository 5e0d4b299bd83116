"""The three error families of the public API.

`ProblemError` is the caller's mistake (bad start, bounds, names, problem file); `ObjectiveError` is
what the objective did (every evaluation failed, a wrong return type); `JournalError` is a journal
that does not belong to the problem or is damaged.  Messages name the parameter, key or line.
"""

from __future__ import annotations


class ProblemError(ValueError):
    """The problem as given cannot be searched: the message names the parameter, key or line."""


class ObjectiveError(RuntimeError):
    """The objective misbehaved: it failed everywhere, or returned something that is not a number."""


class JournalError(RuntimeError):
    """A journal that belongs to another problem, or a file that is not a readable journal."""
