"""Wall time of `dl.explore` on 1 worker against 2: prints a markdown table.

``python -m benchmarks.explore_speedup [--quick] [--kind cpu|sleep|both] [--out FILE]``

The problem is Himmelblau's function (Himmelblau 1972; four minima) in [-5, 5]², made to cost
50 ms per evaluation, explored from 8 starts with the default check of each minimum.  Two ways of
costing 50 ms:

- ``cpu``: 50 ms of processor time spent in a loop (a simulation that computes);
- ``sleep``: 50 ms of waiting (a simulation that runs elsewhere, or on a licence server).

Each is run, in one run of this script, on a process pool of 1 and of 2 workers, and on one Dask
``LocalCluster`` of 2 worker processes (1 thread each) with at most 1 and then 2 evaluations in
flight; the in-process sequential run is the reference.  Every configuration makes exactly the
same evaluations (the table shows their number), so the ratio 2 workers ÷ 1 worker is the
parallel speed-up alone.  The target is a ratio of at most 0.6 on a 2-core machine.  The machine
is shared: other work running at the same time slows the ``cpu`` kind most.
"""

from __future__ import annotations

import argparse
import concurrent.futures as cf
import os
import platform
import sys
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

import directional as dl
from benchmarks import publish

BOX = [(-5.0, 5.0), (-5.0, 5.0)]
STARTS = 8
COST = 0.05  # seconds per evaluation


def _himmelblau(x: np.ndarray) -> float:
    """Himmelblau's (1972) function: minima f = 0 at (3, 2) and three other points."""
    return float((x[0] ** 2 + x[1] - 11.0) ** 2 + (x[0] + x[1] ** 2 - 7.0) ** 2)


class Computing:
    """Himmelblau after ``cost`` seconds of processor time in a loop."""

    def __init__(self, cost: float) -> None:
        self.cost = cost

    def __call__(self, x: np.ndarray) -> float:
        until = time.thread_time() + self.cost
        while time.thread_time() < until:
            pass
        return _himmelblau(x)


class Waiting:
    """Himmelblau after ``cost`` seconds of sleep."""

    def __init__(self, cost: float) -> None:
        self.cost = cost

    def __call__(self, x: np.ndarray) -> float:
        time.sleep(self.cost)
        return _himmelblau(x)


def _timed(run: Callable[[], dl.Landscape]) -> tuple[float, dl.Landscape]:
    tick = time.perf_counter()
    land = run()
    return time.perf_counter() - tick, land


def measure(objective: Callable[[np.ndarray], float], starts: int) -> list[tuple[str, float, int]]:
    """(configuration, seconds, evaluations) for each way of running the same exploration."""

    def explore(**kw: object) -> dl.Landscape:
        return dl.explore(objective, BOX, starts=starts, seed=0, **kw)  # type: ignore[arg-type]

    rows = []
    seconds, land = _timed(lambda: explore())
    rows.append(("in process, sequential", seconds, land.evaluations))
    reference = [m.point.tolist() for m in land.minima]
    for workers in (1, 2):
        with cf.ProcessPoolExecutor(max_workers=workers) as pool:
            pool.submit(int).result()  # the workers are up before the clock starts
            seconds, land = _timed(lambda: explore(executor=pool, workers=workers))  # noqa: B023
        rows.append((f"process pool, {workers} worker{'s' if workers > 1 else ''}", seconds,
                     land.evaluations))
        assert [m.point.tolist() for m in land.minima] == reference
    try:
        import distributed
    except ImportError:
        return rows
    with distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0"
    ) as cluster, distributed.Client(cluster) as client:
        executor = client.get_executor()
        for workers in (1, 2):
            seconds, land = _timed(lambda: explore(executor=executor, workers=workers))  # noqa: B023
            rows.append((f"Dask LocalCluster, {workers} in flight", seconds, land.evaluations))
            assert [m.point.tolist() for m in land.minima] == reference
    return rows


def table(
    results: dict[str, list[tuple[str, float, int]]],
    starts: int,
    cost: float,
    loads: dict[str, tuple[float, float]],
) -> str:
    lines = [
        f"### Exploring from {starts} starts at {cost * 1000:.0f} ms per evaluation: "
        "1 worker against 2",
        "",
        f"Himmelblau's function in [-5, 5]², {starts} starts, each minimum checked; "
        f"{os.cpu_count()} cores, Python {platform.python_version()}, measured in one run of "
        "`python -m benchmarks.explore_speedup`.",
        "",
        "| cost | configuration | evaluations | wall time (s) | 2 workers ÷ 1 worker |",
        "| --- | --- | ---: | ---: | ---: |",
    ]
    for kind, rows in results.items():
        times = {name: seconds for name, seconds, _ in rows}
        for name, seconds, evaluations in rows:
            ratio = ""
            if name.endswith("2 workers"):
                ratio = f"{seconds / times['process pool, 1 worker']:.2f}"
            elif name.endswith("2 in flight"):
                ratio = f"{seconds / times['Dask LocalCluster, 1 in flight']:.2f}"
            lines.append(f"| {kind} | {name} | {evaluations} | {seconds:.2f} | {ratio} |")
    lines += [
        "",
        "Target: a ratio of at most 0.6.  `cpu` spends the cost as processor time, `sleep` as "
        "waiting.  The machine is shared: the load average (processes wanting a core, over the "
        "last minute) was "
        + "; ".join(f"{a:.1f} before and {b:.1f} after the `{k}` rows" for k, (a, b) in loads.items())
        + f" on {os.cpu_count()} cores.  With a load above the number of cores there is no idle "
        "core for a second worker, and the `cpu` rows cannot show a speed-up.",
    ]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="2 starts at 5 ms (a smoke test)")
    parser.add_argument("--kind", choices=("cpu", "sleep", "both"), default="both")
    parser.add_argument("--out", type=Path, help="also write the table to this file")
    args = parser.parse_args(argv)
    starts, cost = (2, 0.005) if args.quick else (STARTS, COST)
    kinds = ("cpu", "sleep") if args.kind == "both" else (args.kind,)
    makers = {"cpu": Computing, "sleep": Waiting}
    results, loads = {}, {}
    for kind in kinds:
        before = os.getloadavg()[0]
        results[kind] = measure(makers[kind](cost), starts)
        loads[kind] = (before, os.getloadavg()[0])
    text = table(results, starts, cost, loads)
    publish(text + "\n", args.out)
    return 0


if __name__ == "__main__":
    sys.exit(main())
