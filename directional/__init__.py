"""directional: derivative-free minimization of simulation outputs.

Powell's conjugate directions with safeguarded parabolic line searches, for objectives that are
runs of somebody else's code: few evaluations, bounds respected, every evaluation kept.
"""

from directional.api.calibration import calibrate
from directional.api.explore import Landscape, explore
from directional.api.minimization import estimate_noise, line_minimum, minimize
from directional.errors import JournalError, ObjectiveError, ProblemError
from directional.interface.problemfile import Problem
from directional.method.linesearch import LineResult
from directional.parameters import Parameter
from directional.records import Curvature, Stop, Verdict
from directional.run.journal import resume
from directional.solution import Solution

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
