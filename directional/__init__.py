"""directional: derivative-free minimization of simulation outputs.

Powell's conjugate directions with safeguarded parabolic line searches, for objectives that are
runs of somebody else's code: few evaluations, bounds respected, every evaluation kept.
"""

from directional.api.calibration import calibrate
from directional.api.explore import Landscape, explore
from directional.api.minimization import line_minimum, minimize
from directional.api.resume import resume
from directional.errors import JournalError, ObjectiveError, ProblemError
from directional.interface.problemfile import Problem
from directional.method.linesearch import LineResult
from directional.method.noise import estimate_noise
from directional.parameters import Parameter
from directional.records import Curvature, Stop, Verdict
from directional.solution import Solution
from directional.version import VERSION as __version__  # noqa: F401  (re-exported)

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
