"""Wall time of calibrating a sleeping program serially and with ``--workers 2``.

``python -m benchmarks.program_workers [--cost SECONDS] [--out FILE]``

The program is a small Python script that sleeps ``--cost`` seconds (a simulator waiting on a
licence server or a remote queue, costing no processor time) and then prints, as JSON, the
residuals of ``y = a exp(-k t)`` against eight INVENTED measurements.  The same problem file is
run through `directional.interface.runs.solve` (what ``directional run`` does) once serially
and once with 2 workers.  Both runs make the same evaluations in the same order (checked here
from their journals), so the ratio of wall times is the parallel speed-up alone.

Two ratios are reported: for the whole run, and for the batches that hold several points (the
stencils of the Jacobian and of the Hessian, with purposes ``jacobian`` and ``hessian``): their
wall time is the span from the first start to the last end of each run of consecutive
evaluations with that purpose.  Line searches ask for one point at a time after their bracket,
so they cannot go faster; the target (at least 1.6 times the serial speed) is for the batches.
Each evaluation also starts a Python interpreter (tens of milliseconds of processor time), and
the machine is shared: its load is printed with the table.
"""

from __future__ import annotations

import argparse
import dataclasses
import itertools
import json
import os
import platform
import sys
import tempfile
import textwrap
import time
from pathlib import Path

from directional.interface.problemfile import Problem
from directional.interface.runs import solve
from directional.run import journal as journals

# INVENTED measurements (the same as tests/interface/test_program_calibration.py): y = 5 exp(-0.5 t).
T = [0.0, 0.5, 1.0, 1.5, 2.0, 3.0, 4.0, 5.0]
Y = [5.03, 3.92, 3.01, 2.41, 1.80, 1.12, 0.66, 0.42]
BATCHES = ("jacobian", "hessian")

PROGRAM = f"""
import json, math, sys, time
a, k, cost = float(sys.argv[1]), float(sys.argv[2]), float(sys.argv[3])
time.sleep(cost)
print(json.dumps({{"residuals": [a * math.exp(-k * t) - y for t, y in zip({T!r}, {Y!r})]}}))
"""


def _problem(folder: Path, cost: float) -> Problem:
    (folder / "sleepy.py").write_text(PROGRAM)
    (folder / "sleepy.toml").write_text(textwrap.dedent(f"""
        title = "A sleeping program (invented data)"
        [[parameter]]
        name = "a"
        start = 3.0
        lower = 0.1
        upper = 20.0
        [[parameter]]
        name = "k"
        start = 1.0
        lower = 0.01
        upper = 5.0
        [objective]
        command = [{json.dumps(sys.executable)}, "sleepy.py", "{{a}}", "{{k}}", "{cost!r}"]
        read = "json:residuals"
        kind = "residuals"
        timeout = 600
        """))
    return Problem.from_file(folder / "sleepy.toml")


def _batch_seconds(evaluations) -> float:
    """Wall time of the runs of consecutive evaluations whose purpose is a stencil batch."""
    total = 0.0
    for purpose, group in itertools.groupby(evaluations, key=lambda e: e.purpose):
        group = list(group)
        if purpose in BATCHES and len(group) > 1:
            total += max(e.started + e.seconds for e in group) - group[0].started
    return total


def _run(problem: Problem, workers: int, journal: Path) -> tuple[float, tuple]:
    problem = dataclasses.replace(problem, search=dataclasses.replace(problem.search,
                                                                      workers=workers))
    tick = time.perf_counter()
    solve(problem, journal=journal, quiet=True)
    return time.perf_counter() - tick, journals.read(journal).evaluations


def measure(cost: float) -> str:
    """Run both configurations; return the markdown section."""
    load_before = os.getloadavg()[0]
    with tempfile.TemporaryDirectory(prefix="directional-workers-") as name:
        folder = Path(name)
        problem = _problem(folder, cost)
        serial_time, serial = _run(problem, 1, folder / "serial.sqlite")
        parallel_time, parallel = _run(problem, 2, folder / "parallel.sqlite")
    same = len(serial) == len(parallel) and all(
        a.point.tobytes() == b.point.tobytes() and a.value == b.value and a.purpose == b.purpose
        for a, b in zip(serial, parallel)
    )
    load_after = os.getloadavg()[0]
    batch_serial, batch_parallel = _batch_seconds(serial), _batch_seconds(parallel)
    in_batches = sum(1 for p, g in itertools.groupby(serial, key=lambda e: e.purpose)
                     for _ in g if p in BATCHES)
    rows = [
        ("whole run", len(serial), serial_time, parallel_time),
        ("stencil batches (jacobian, hessian)", in_batches, batch_serial, batch_parallel),
    ]
    lines = [
        "### Calibrating a sleeping program: `--workers 2` against serial",
        "",
        f"A program that sleeps {cost:g} s and prints 8 residuals as JSON (invented data), "
        f"calibrated by `directional run` (2 parameters); {os.cpu_count()} cores, Python "
        f"{platform.python_version()}, measured in one run of `python -m "
        "benchmarks.program_workers`.",
        "",
        "| part | evaluations | serial (s) | 2 workers (s) | speed-up |",
        "| --- | ---: | ---: | ---: | ---: |",
    ]
    for part, count, one, two in rows:
        lines.append(f"| {part} | {count} | {one:.2f} | {two:.2f} | {one / two:.2f} |")
    lines += [
        "",
        "Target: at least 1.6 times the serial speed on the batches.  The journals of the two "
        f"runs hold {'the same' if same else 'DIFFERENT'} evaluations in the same order.  Line "
        "searches ask for one point at a time after their bracket, which is why the whole run "
        f"gains less.  Load average {load_before:.1f} before and {load_after:.1f} after, on a "
        "shared machine.",
    ]
    return "\n".join(lines) + "\n"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--cost", type=float, default=0.3, help="seconds each run sleeps")
    parser.add_argument("--out", type=Path, help="also write the section to this file")
    args = parser.parse_args(argv)
    text = measure(args.cost)
    print(text)
    if args.out is not None:
        args.out.write_text(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
