"""The solvers the benchmarks compare, behind one signature, and the recorder of their evaluations.

Every solver is called as ``run(objective, start, budget)``.  The benchmark hands it a `Recorder`
around the test function, which keeps every value returned (in order) and the time spent inside
the objective, so that all solvers are measured the same way from the outside.

- ``directional``: the method itself, through the public `directional.minimize` (no final
  curvature check, which is not part of the search).
- Ablations of the method, through the same search with one idea switched off in its `Settings`:
  golden section only (no parabolic steps), no direction replacement (the set stays the axes),
  no curvature reuse (every line search measures its curvature afresh), no model steps (no
  quadratic model: neither its steps nor its realignment of the directions, nor its stop).  They
  run only where the installed `directional.method.search.Settings` has the switch.
- The baselines of `baselines` (Nelder–Mead, Hooke–Jeeves, coordinate search by golden section).
"""

from __future__ import annotations

import dataclasses
import math
import time
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from directional.api.minimization import minimize
from directional.benchmarking import baselines
from directional.errors import ObjectiveError
from directional.method.search import Settings, powell
from directional.method.space import build_space
from directional.run.driver import Driver

Objective = Callable[[np.ndarray], float]


class Recorder:
    """Wraps an objective: keeps each value returned (failures as ``+inf``) and the time inside it
    (wall time, and processor time, which other processes on a shared machine do not inflate).

    >>> r = Recorder(lambda x: float(x[0] ** 2))
    >>> r(np.array([3.0])), r.values
    (9.0, [9.0])
    """

    def __init__(self, objective: Objective) -> None:
        self.objective = objective
        self.values: list[float] = []
        self.seconds = 0.0  # wall time inside the objective
        self.cpu_seconds = 0.0  # processor time of this process inside the objective

    def __call__(self, x: np.ndarray) -> float:
        tick, cpu = time.perf_counter(), time.process_time()
        try:
            value = self.objective(x)
        except Exception:
            self.values.append(math.inf)
            raise
        finally:
            self.seconds += time.perf_counter() - tick
            self.cpu_seconds += time.process_time() - cpu
        number = float(value)
        self.values.append(number if math.isfinite(number) else math.inf)
        return value


@dataclass(frozen=True, slots=True, kw_only=True)
class Solver:
    """A named solver: ``run(objective, start, budget)`` spends at most ``budget`` evaluations."""

    name: str
    group: str  # "method", "baseline" or "ablation"
    run: Callable[[Objective, np.ndarray, int], None]


def _ours(objective: Objective, start: np.ndarray, budget: int) -> None:
    try:
        minimize(objective, start, budget=budget, check=False)
    except ObjectiveError:  # the start failed: nothing to compare, the recorder has the values
        pass


def _ablated(**switches: bool) -> Callable[[Objective, np.ndarray, int], None]:
    def run(objective: Objective, start: np.ndarray, budget: int) -> None:
        space = build_space(start)
        Driver(objective=objective, budget=budget).run(powell(space, Settings(**switches)))

    return run


def _baseline(method: Callable[..., baselines.BaselineResult]) -> Callable:
    def run(objective: Objective, start: np.ndarray, budget: int) -> None:
        method(objective, start, budget=budget)

    return run


ABLATIONS = {
    "golden section only": {"parabolic": False},
    "no direction replacement": {"replace_directions": False},
    "no curvature reuse": {"reuse_curvature": False},
    "no model steps": {"model_steps": False},
}


def ablations_available() -> dict[str, bool]:
    """Which ablations the installed search supports (its `Settings` has the switch)."""
    fields = {f.name for f in dataclasses.fields(Settings)}
    return {name: set(switches) <= fields for name, switches in ABLATIONS.items()}


def solvers() -> list[Solver]:
    """The method, the baselines, and the ablations the installed search supports, in that order."""
    chosen = [
        Solver(name="directional", group="method", run=_ours),
        Solver(name="Nelder-Mead", group="baseline", run=_baseline(baselines.nelder_mead)),
        Solver(name="Hooke-Jeeves", group="baseline", run=_baseline(baselines.hooke_jeeves)),
        Solver(
            name="coordinate search",
            group="baseline",
            run=_baseline(baselines.coordinate_search),
        ),
    ]
    for name, available in ablations_available().items():
        if available:
            chosen.append(Solver(name=name, group="ablation", run=_ablated(**ABLATIONS[name])))
    return chosen


@dataclass(frozen=True, slots=True, kw_only=True)
class Run:
    """What one solver did from one start: every value in order, and where the time went."""

    values: np.ndarray
    seconds: float  # wall time of the whole run
    objective_seconds: float  # of which inside the objective


def record(solver: Solver, objective: Objective, start: np.ndarray, budget: int) -> Run:
    """Run ``solver`` on ``objective`` from ``start`` and return what it evaluated.

    Values beyond ``budget`` (a baseline finishing its last step) are cut off.
    """
    recorder = Recorder(objective)
    tick = time.perf_counter()
    solver.run(recorder, np.array(start, dtype=float), budget)
    seconds = time.perf_counter() - tick
    values = np.array(recorder.values[:budget], dtype=float)
    return Run(values=values, seconds=seconds, objective_seconds=recorder.seconds)
