"""directional: derivative-free minimization of simulation outputs.

Powell's conjugate directions with safeguarded parabolic line searches, for objectives that are
runs of somebody else's code: few evaluations, bounds respected, every evaluation kept.
"""

from .errors import JournalError, ObjectiveError, ProblemError
from .journal import resume
from .linesearch import LineResult
from .minimization import line_minimum, minimize
from .parameters import Parameter
from .problemfile import Problem
from .records import Curvature, Stop, Verdict
from .solution import Solution

__version__ = "0.1.0"

__all__ = [
    "Curvature",
    "JournalError",
    "LineResult",
    "ObjectiveError",
    "Parameter",
    "Problem",
    "ProblemError",
    "Solution",
    "Stop",
    "Verdict",
    "line_minimum",
    "minimize",
    "resume",
]
