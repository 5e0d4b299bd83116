"""directional: derivative-free minimization of simulation outputs.

Powell's conjugate directions with safeguarded parabolic line searches, for objectives that are
runs of somebody else's code: few evaluations, bounds respected, every evaluation kept.
"""

import importlib
from typing import TYPE_CHECKING, Any

from directional.errors import JournalError, ObjectiveError, ProblemError
from directional.version import VERSION as __version__  # noqa: F401  (re-exported)

if TYPE_CHECKING:  # the names below are imported on first use (PEP 562), so that the command
    # line starts without loading numpy, scipy and matplotlib (``directional --help``)
    from directional.api.calibration import calibrate
    from directional.api.explore import Landscape, explore
    from directional.api.minimization import estimate_noise, line_minimum, minimize
    from directional.api.resume import resume
    from directional.interface.problemfile import Problem
    from directional.method.linesearch import LineResult
    from directional.parameters import Parameter
    from directional.records import Curvature, Stop, Verdict
    from directional.solution import Solution

_LAZY = {
    "calibrate": "directional.api.calibration",
    "Landscape": "directional.api.explore",
    "explore": "directional.api.explore",
    "line_minimum": "directional.api.minimization",
    "minimize": "directional.api.minimization",
    "Problem": "directional.interface.problemfile",
    "LineResult": "directional.method.linesearch",
    "estimate_noise": "directional.api.minimization",
    "Parameter": "directional.parameters",
    "Curvature": "directional.records",
    "Stop": "directional.records",
    "Verdict": "directional.records",
    "resume": "directional.api.resume",
    "Solution": "directional.solution",
}


def __getattr__(name: str) -> Any:
    if name in _LAZY:
        value = getattr(importlib.import_module(_LAZY[name]), name)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'directional' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_LAZY))


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
