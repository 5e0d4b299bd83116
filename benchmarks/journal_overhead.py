"""What the journal costs per evaluation: prints a markdown table (``python -m benchmarks.journal_overhead``).

A trivial objective (the extended Rosenbrock function in n = 10 variables, Moré, Garbow &
Hillstrom 1981, problem 21; a few microseconds per call) is minimized for a fixed budget of
evaluations, so that every configuration makes exactly the same evaluations:

- without a journal;
- with the journal in its default, adaptive mode (these evaluations are fast, so every commit is
  ``synchronous=NORMAL``: safe against the death of the process);
- with ``synchronous=FULL`` on every commit (safe against a power cut: one fsync per evaluation);
- replaying the complete journal (what a resume costs before it goes on live).

The configurations are interleaved and repeated, all in one run; the fastest and the median run
are reported (on a shared machine the fastest is the least disturbed).  The ratio is time with
the journal ÷ time without; "added" is the difference per evaluation.
The target is under 50 µs added per evaluation at n = 10 in the default mode.
"""

from __future__ import annotations

import argparse
import os
import platform
import sqlite3
import statistics
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from directional.method.search import Settings, powell
from directional.method.space import build_space
from directional.run.driver import Driver, Evaluation
from directional.run.journal import Journal, run_identity

N = 10


def extended_rosenbrock(x: np.ndarray) -> float:
    """Moré, Garbow & Hillstrom 1981, problem 21 (minimum 0 at (1, ..., 1))."""
    odd, even = x[0::2], x[1::2]
    return float(np.sum(100.0 * (even - odd**2) ** 2 + (1.0 - odd) ** 2))


def one_run(budget: int, folder: Path, sync: str | None, replay: bool = False) -> tuple[float, int]:
    """Seconds for one search of ``budget`` evaluations, and the evaluations made."""
    start = np.tile([-1.2, 1.0], N // 2)
    space = build_space(start)
    settings = Settings(point_tolerance=1e-12, value_tolerance=1e-300)  # runs to its budget
    path = folder / f"{sync}.sqlite"
    if sync is None:
        tick = time.perf_counter()
        driver = Driver(objective=extended_rosenbrock, budget=budget)
        driver.run(powell(space, settings))
        return time.perf_counter() - tick, driver.spent
    if not replay:
        for suffix in ("", "-wal", "-shm", ".lock"):
            Path(str(path) + suffix).unlink(missing_ok=True)
    identity = run_identity("minimize", space.parameters, settings)
    tick = time.perf_counter()
    with Journal.open(path, identity, budget=budget, sync=sync) as journal:
        driver = Driver(objective=extended_rosenbrock, budget=budget, **journal.hooks())
        driver.run(powell(space, settings))
    seconds = time.perf_counter() - tick
    if replay:
        assert driver.replayed == driver.spent == budget, "the replay made new evaluations"
    return seconds, driver.spent


def measure(budget: int, repeats: int) -> list[tuple[str, list[float], int]]:
    """Seconds of each run of each configuration, interleaved over ``repeats`` rounds."""
    labels = {
        "no journal": (None, False),
        "journal, default (adaptive: NORMAL for fast evaluations)": ("adaptive", False),
        "journal, synchronous=FULL on every commit": ("full", False),
        "resume: replay of the complete journal": ("adaptive", True),
    }
    times: dict[str, list[float]] = {label: [] for label in labels}
    counts: dict[str, int] = {}
    with tempfile.TemporaryDirectory() as name:
        folder = Path(name)
        one_run(budget, folder, "adaptive")  # warm up, and the journal the replay reads
        for _ in range(repeats):
            for label, (sync, replay) in labels.items():
                seconds, spent = one_run(budget, folder, sync, replay)
                times[label].append(seconds)
                counts[label] = spent
    return [(label, times[label], counts[label]) for label in labels]


def append_alone(count: int) -> dict[str, np.ndarray]:
    """Seconds of each `Journal.append` (one INSERT and its commit), by sync mode."""
    identity = run_identity("minimize", build_space(np.zeros(N)).parameters)
    result = {}
    with tempfile.TemporaryDirectory() as name:
        for sync, number in (("adaptive", count), ("full", max(count // 10, 20))):
            evaluations = [
                Evaluation(index=i, point=np.full(N, 0.1 * i), value=1.0, status="ok",
                           purpose="line", started=time.time(), seconds=1e-5, sequence=i)
                for i in range(number)
            ]
            spent = np.empty(number)
            with Journal.open(Path(name) / f"append-{sync}.sqlite", identity, sync=sync) as journal:
                for i, evaluation in enumerate(evaluations):
                    tick = time.perf_counter()
                    journal.append(evaluation)
                    spent[i] = time.perf_counter() - tick
            result[sync] = spent
    return result


def session_cost(repeats: int) -> float:
    """Median seconds to create, lock, open and close an empty journal (fixed cost per run)."""
    identity = run_identity("minimize", build_space(np.zeros(N)).parameters)
    times = []
    with tempfile.TemporaryDirectory() as name:
        for round_ in range(max(repeats, 5)):
            tick = time.perf_counter()
            with Journal.open(Path(name) / f"session-{round_}.sqlite", identity):
                pass
            times.append(time.perf_counter() - tick)
    return statistics.median(times)


def table(
    rows: list[tuple[str, list[float], int]],
    alone: dict[str, np.ndarray],
    session: float,
) -> str:
    evaluations = rows[0][2]
    best0 = min(rows[0][1]) / evaluations
    median0 = statistics.median(rows[0][1]) / evaluations
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    lines = [
        f"Journal overhead, n = {N}, extended Rosenbrock (MGH 1981 problem 21), {evaluations} "
        f"evaluations per run, {len(rows[0][1])} interleaved runs of each configuration "
        f"(Python {platform.python_version()}, SQLite {sqlite3.sqlite_version}, "
        f"{platform.machine()}, {os.cpu_count()} CPUs, load average {load:.1f} at the end).  "
        "Best: the fastest run (the least disturbed by other work on the machine); median: the "
        "middle one.",
        "",
        "| configuration | µs per evaluation, best | median | added per evaluation (µs), best "
        "| median | ratio to no journal, best | median |",
        "|---|---:|---:|---:|---:|---:|---:|",
    ]
    for label, seconds, spent in rows:
        best, median = min(seconds) / spent, statistics.median(seconds) / spent
        lines.append(
            f"| {label} | {best * 1e6:.1f} | {median * 1e6:.1f} | {(best - best0) * 1e6:+.1f} "
            f"| {(median - median0) * 1e6:+.1f} | {best / best0:.2f} | {median / median0:.2f} |"
        )
    normal, full = alone["adaptive"] * 1e6, alone["full"] * 1e6
    lines += [
        "",
        f"One `Journal.append` alone (one INSERT and its commit, no search), {normal.size} "
        f"commits: synchronous=NORMAL median {np.median(normal):.1f} µs, mean {normal.mean():.1f} "
        f"µs, slowest {normal.max():.0f} µs; synchronous=FULL ({full.size} commits) median "
        f"{np.median(full):.0f} µs, mean {full.mean():.0f} µs.  Each run above also pays a fixed "
        f"cost per session (create, lock, final checkpoint with its fsyncs): median "
        f"{session * 1e3:.1f} ms, {session / evaluations * 1e6:.1f} µs per evaluation over "
        f"{evaluations} evaluations.",
    ]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--budget", type=int, default=2000, help="evaluations per run")
    parser.add_argument("--repeats", type=int, default=9, help="interleaved rounds")
    parser.add_argument("--quick", action="store_true", help="a smoke test: 200 evaluations, 1 round")
    args = parser.parse_args(argv)
    budget, repeats = (200, 1) if args.quick else (args.budget, args.repeats)
    rows = measure(budget, repeats)
    print(table(rows, append_alone(budget), session_cost(repeats)))
    return 0


if __name__ == "__main__":
    sys.exit(main())
