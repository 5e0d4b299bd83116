"""What the curvature check says on smooth functions plus Gaussian noise.

``python -m benchmarks.noisy_check [--out FILE]``: prints a markdown table.

The functions are smooth with known minima, plus independent Gaussian noise of known standard
deviation sigma from a seeded generator (invented for this benchmark):

- a curved valley in three variables, (x0 - 1)² + 10 (x1 - x0²)² + (x2 + 0.5)², sigma = 1e-3
  (Hessian at the minimum (1, 1, -0.5): eigenvalues 0.394, 2 and 101.6, analytic);
- a rotated 6-variable quadratic with eigenvalues 1 ... 100 (condition 1e2), sigma = 1e-2;
- a rotated 4-variable quadratic with eigenvalues 1 ... 1e4 (condition 1e4), sigma = 1e-3.

Each runs with five seeds and three noise settings: the default (no level stated: the check
notices the noise itself), ``noise=sigma`` and ``noise="estimate"``.  For each, the check's
verdict at the point the search returns and at the true minimum (the check alone, default
``check=True``), and the check's evaluations (median).  Target: never
``flat``; ``minimum`` where the noise allows, ``noisy`` where it does not.  The search's own
final gaps are another item's and are shown only for context.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from collections import Counter
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402

import directional as dl  # noqa: E402
from benchmarks import publish
from directional.method import curvature  # noqa: E402
from directional.method.space import build_space  # noqa: E402
from directional.records import Check  # noqa: E402
from directional.run.driver import Driver  # noqa: E402

SEEDS = range(5)


def valley(x: np.ndarray) -> float:
    return float((x[0] - 1) ** 2 + 10 * (x[1] - x[0] ** 2) ** 2 + (x[2] + 0.5) ** 2)


def rotated_quadratic(n: int, condition: float, centre: float):
    q, r = np.linalg.qr(np.random.default_rng(0).standard_normal((n, n)))
    q = q * np.sign(np.diag(r))
    h = q @ np.diag(np.logspace(0.0, np.log10(condition), n)) @ q.T

    def f(x: np.ndarray) -> float:
        d = np.asarray(x, dtype=float) - centre
        return float(0.5 * d @ h @ d)

    return f


PROBLEMS = {
    "curved valley, n = 3": (valley, 1e-3, [-1.2, 2.0, 0.5], [1.0, 1.0, -0.5]),
    "quadratic, n = 6, condition 1e2": (
        rotated_quadratic(6, 1e2, 1.0), 1e-2, [3.0, -1.0, 2.0, 0.0, 2.5, -0.5], [1.0] * 6),
    "quadratic, n = 4, condition 1e4": (
        rotated_quadratic(4, 1e4, 0.5), 1e-3, [2.0, -1.0, 1.5, 0.0], [0.5] * 4),
}


def noisy(smooth, sigma: float, seed: int):
    rng = np.random.default_rng(seed)
    return lambda x: smooth(np.asarray(x, dtype=float)) + sigma * float(rng.standard_normal())


def at_minimum(f, minimum: list[float], noise: float | None) -> str:
    """The default check alone at the true minimum: its verdict."""
    space = build_space(list(minimum))
    driver = Driver(objective=f, budget=100_000)
    x = np.asarray(minimum, dtype=float)
    checked = driver.run(curvature.check_point(
        space, space.to_scaled(x), f(x), None, check=Check.ESCALATING, noise=noise,
        active=np.zeros(space.size, bool),
    ))
    return checked.verdict.value


def measure(name: str, setting: str) -> dict[str, object]:
    smooth, sigma, start, minimum = PROBLEMS[name]
    noise = {"default": None, "given": sigma, "estimate": "estimate"}[setting]
    found, there, costs, gaps = Counter(), Counter(), [], []
    for seed in SEEDS:
        sol = dl.minimize(noisy(smooth, sigma, seed), start, noise=noise)
        found[sol.verdict.value] += 1
        costs.append(sum(1 for e in sol.history if e.purpose == "hessian"))
        gaps.append(smooth(np.asarray(sol.point)) / sigma)
        level = sigma if setting == "given" else None  # "estimate" is a search-time option
        there[at_minimum(noisy(smooth, sigma, 100 + seed), minimum, level)] += 1
    return {"problem": name, "sigma": sigma, "setting": setting, "found": found,
            "there": there, "cost": float(np.median(costs)), "gap": float(np.median(gaps))}


def _counts(counter: Counter) -> str:
    return ", ".join(f"{verdict} {count}" for verdict, count in sorted(counter.items()))


def table(rows: list[dict[str, object]]) -> str:
    lines = [
        "| problem | sigma | noise | verdicts where the search stopped | verdicts at the minimum "
        "| check evaluations (median) | search's gap / sigma (median) |",
        "|---|---|---|---|---|---|---|",
    ]
    for r in rows:
        lines.append(
            f"| {r['problem']} | {r['sigma']:g} | {r['setting']} | {_counts(r['found'])} | "
            f"{_counts(r['there'])} | {r['cost']:.0f} | {r['gap']:.3g} |"
        )
    flat = sum(r["found"]["flat"] + r["there"]["flat"] for r in rows)
    lines += ["", f"`flat` in {flat} of {10 * len(rows)} checks (target: none)."]
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, help="also write the table to this markdown file")
    args = parser.parse_args(argv)
    tick = time.perf_counter()
    rows = [measure(name, setting) for name in PROBLEMS for setting in ("default", "given",
                                                                          "estimate")]
    text = (
        "## The curvature check on smooth functions plus Gaussian noise (five seeds each)\n\n"
        "Written by `benchmarks/noisy_check.py`. Invented functions with known minima plus "
        "Gaussian noise of standard deviation sigma; noise \"default\": none stated (the check "
        "notices it), \"given\": `noise=sigma`, \"estimate\": `noise=\"estimate\"` (at the "
        "minimum the check alone runs with no level stated for \"default\" and \"estimate\"). "
        "Check evaluations: purpose \"hessian\", escapes included.\n\n"
        + table(rows)
        + f"\n\nRun time {time.perf_counter() - tick:.0f} s.\n"
    )
    publish(text, args.out)
    return 0


if __name__ == "__main__":
    sys.exit(main())
