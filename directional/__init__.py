"""directional: derivative-free minimization of simulation outputs.

Powell's conjugate directions with safeguarded parabolic line searches, for objectives that are
runs of somebody else's code: few evaluations, bounds respected, every evaluation kept.
"""

from .calibration import calibrate
from .errors import JournalError, ObjectiveError, ProblemError
from .explore import Landscape, explore
from .journal import resume
from .linesearch import LineResult
from .minimization import line_minimum, minimize
from .noise import estimate_noise
from .parameters import Parameter
from .problemfile import Problem
from .records import Curvature, Stop, Verdict
from .solution import Solution

__version__ = "0.1.0"

__all__ = [
    "Curvature",
    "JournalError",
    "Landscape",
    "LineResult",
    "ObjectiveError",
    "Parameter",
    "Problem",
    "ProblemError",
    "Solution",
    "Stop",
    "Verdict",
    "calibrate",
    "estimate_noise",
    "explore",
    "line_minimum",
    "minimize",
    "resume",
]
