"""What proving the answer costs: the curvature check against the search, on the MGH problems.

``python -m benchmarks.check_cost [--quick] [--max-n N] [--out FILE]``: prints a markdown table.

For each problem of Moré, Garbow & Hillstrom (1981) in `directional.testproblems.mgh.catalogue`
(standard start, default budget), the search runs three times, identical up to the check:

- ``check=False``: the search alone; its evaluations are the reference, and the free Hessian
  estimate (the line searches' curvatures along conjugate directions, no evaluation) gives the
  verdict it would give alone (`curvature.free_verdict`: MINIMUM or FLAT, never SADDLE);
- ``check="quick"``: one central-difference stencil and the half steps along the axes that
  the smoothness test reads, at most 2 n² + 2 n + 1 evaluations;
- ``check="extrapolated"``: numdifftools' Richardson-extrapolated Hessian with error estimate;
- ``check=True`` (the default): one stencil first, the extrapolated Hessian only where an
  eigenvalue's error bar leaves its sign in doubt.

The table gives each check's cost (evaluations with purpose "hessian", escapes included) as a
share of the search's, the verdicts, and whether the free estimate agrees where both paid checks
agree.  Targets: the free estimate decides correctly wherever the paid checks agree, and
the quick check costs at most 2 n² + 1 (2 n² + 2 n + 1 with the smoothness test's half steps);
the default check costs at most one stencil (2 n² + 2 n + 1) in the median and gives
the extrapolated check's verdict on at least 34 of the 35 problems.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402

import directional as dl  # noqa: E402
from benchmarks import publish
from directional.method import curvature  # noqa: E402
from directional.testproblems import mgh  # noqa: E402


def _cost(sol: dl.Solution) -> int:
    return sum(1 for e in sol.history if e.purpose == "hessian")


def _search_cost(sol: dl.Solution) -> int:
    return sum(1 for e in sol.history if e.purpose not in ("hessian", "escape"))


def measure(problem: mgh.TestProblem) -> dict:
    """The three runs on one problem, reduced to one row of the table."""
    alone = dl.minimize(problem, problem.start, check=False)
    free = alone.curvature
    free_says = curvature.free_verdict(None if free is None else free.hessian)
    quick = dl.minimize(problem, problem.start, check="quick")
    full = dl.minimize(problem, problem.start, check="extrapolated")
    default = dl.minimize(problem, problem.start, check=True)
    return {
        "problem": problem,
        "stop": alone.stop.value,
        "search": _search_cost(alone),
        "free": free_says,
        "quick": quick.verdict,
        "quick_cost": _cost(quick),
        "quick_escapes": sum(1 for n in quick.notes if n.startswith("escape")),
        "full": full.verdict,
        "full_cost": _cost(full),
        "full_escapes": sum(1 for n in full.notes if n.startswith("escape")),
        "default": default.verdict,
        "default_cost": _cost(default),
        "condition": full.curvature.condition if full.curvature is not None else float("nan"),
        "value_gap": abs(full.value - alone.value),
    }


def table(rows: list[dict]) -> str:
    """The markdown table and its summary."""
    out = [
        "| # | problem | n | search evals | free says | quick | quick evals (share) "
        "| ≤ 2n²+2n+1 | extrapolated | extrapolated evals (share) | default | default evals "
        "| condition |",
        "|---:|---|---:|---:|---|---|---:|:---:|---|---:|---|---:|---:|",
    ]
    for r in rows:
        p = r["problem"]
        bound = 2 * p.n * (p.n + 1) + 1
        one_stencil = r["quick_cost"] <= bound if r["quick_escapes"] == 0 else None
        out.append(
            f"| {p.number} | {p.name} | {p.n} | {r['search']} | {r['free'].value} "
            f"| {r['quick'].value}{_escaped(r['quick_escapes'])} "
            f"| {r['quick_cost']} ({_share(r['quick_cost'], r['search'])}) "
            f"| {'yes' if one_stencil else ('escape' if one_stencil is None else 'NO')} "
            f"| {r['full'].value}{_escaped(r['full_escapes'])} "
            f"| {r['full_cost']} ({_share(r['full_cost'], r['search'])}) "
            f"| {r['default'].value} | {r['default_cost']} "
            f"| {r['condition']:.3g} |"
        )
    agree = [r for r in rows if r["quick"] is r["full"] and r["full"] is not dl.Verdict.UNCHECKED]
    free_right = sum(1 for r in agree if r["free"] is r["full"])
    within = sum(
        1 for r in rows
        if r["quick_escapes"] or r["quick_cost"] <= 2 * r["problem"].n * (r["problem"].n + 1) + 1
    )
    quick_shares = [r["quick_cost"] / r["search"] for r in rows if r["search"]]
    full_shares = [r["full_cost"] / r["search"] for r in rows if r["search"]]
    same = [r for r in rows if r["default"] is r["full"]]
    stencil = {id(r): 2 * r["problem"].n * (r["problem"].n + 1) + 1 for r in rows}
    bound_ratio = [r["default_cost"] / stencil[id(r)] for r in rows]
    escalated = sum(1 for r in rows if r["default_cost"] > stencil[id(r)])
    default_shares = [r["default_cost"] / r["search"] for r in rows if r["search"]]
    out += [
        "",
        f"- Problems: {len(rows)}; the two paid checks agree on {len(agree)}; on those the free "
        f"estimate gives the same verdict on {free_right} "
        f"({', '.join(_disagreements(agree)) or 'no disagreement'}).",
        f"- Quick check within 2n² + 2n + 1 evaluations (one stencil, no escape): "
        f"{within} of {len(rows)}.",
        f"- Median cost as a share of the search: quick {100 * np.median(quick_shares):.1f} %, "
        f"extrapolated {100 * np.median(full_shares):.1f} %, "
        f"default {100 * np.median(default_shares):.1f} %.",
        f"- Default check: same verdict as the extrapolated check on {len(same)} of {len(rows)} "
        f"({', '.join(_differences(rows)) or 'no difference'}); it escalated on {escalated}; "
        f"median cost {np.median(bound_ratio):.2f} × (2n² + 2n + 1).",
    ]
    return "\n".join(out)


def _disagreements(rows: list[dict]) -> list[str]:
    return [
        f"{r['problem'].name}: free {r['free'].value}, paid {r['full'].value}"
        for r in rows
        if r["free"] is not r["full"]
    ]


def _differences(rows: list[dict]) -> list[str]:
    return [
        f"{r['problem'].name}: default {r['default'].value}, extrapolated {r['full'].value}"
        for r in rows
        if r["default"] is not r["full"]
    ]


def _share(cost: int, search: int) -> str:
    return f"{100 * cost / search:.0f} %" if search else "-"


def _escaped(count: int) -> str:
    return f" after {count} escape{'s' if count > 1 else ''}" if count else ""


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="problems with n <= 3 only (smoke)")
    parser.add_argument("--max-n", type=int, default=12, help="largest n (default 12)")
    parser.add_argument("--out", type=Path, help="also write the table to this markdown file")
    args = parser.parse_args(argv)
    max_n = 3 if args.quick else args.max_n
    tick = time.perf_counter()
    rows = [measure(p) for p in mgh.catalogue(max_n)]
    text = (
        "## What the curvature check costs (MGH 1981 problems, standard starts)\n\n"
        "Written by `benchmarks/check_cost.py`. Cost: evaluations of the check (purpose "
        "\"hessian\", every check after an escape included) against the search's evaluations "
        "(`check=False`). \"free says\": the verdict of the free Hessian estimate alone, which "
        "cannot see negative curvature. Verdicts of the paid checks after escapes.\n\n"
        + table(rows)
        + f"\n\nRun time {time.perf_counter() - tick:.0f} s, numdifftools "
        f"{_version('numdifftools')}, numpy {np.__version__}.\n"
    )
    publish(text, args.out)
    return 0


def _version(name: str) -> str:
    from importlib.metadata import version

    return version(name)


if __name__ == "__main__":
    sys.exit(main())
