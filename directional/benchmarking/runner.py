"""`directional bench`: run the benchmarks, write RESULTS.md and the figures.

Three sizes of run share one code path: ``full`` (the default; a few minutes on two cores),
``--quick`` (a subset, under two minutes) and ``--smoke`` (a few seconds, for the test suite).
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from directional.benchmarking import plots, profiles, scaling, writeup
from directional.benchmarking.problems import pairs
from directional.benchmarking.solvers import ABLATIONS, ablations_available, solvers
from directional.benchmarking.study import DATA_BUDGETS, PERFORMANCE_FACTORS, Study, run_study

RESULTS = "RESULTS.md"


@dataclass(frozen=True, slots=True, kw_only=True)
class Plan:
    """How much of each benchmark a run does."""

    name: str
    problems: tuple[int, ...] | None  # None: all 35
    factors: tuple[float, ...]
    units: int  # budget per pair, in units of n + 1 evaluations
    quadratic_sizes: tuple[int, ...]
    quadratic_seeds: tuple[int, ...]
    overhead_sizes: tuple[int, ...]
    overhead_evaluations: int
    overhead_rounds: int  # each overhead row is the fastest of this many
    line_functions: int  # how many of the line-search test functions


PLANS = {
    "full": Plan(
        name="full", problems=None, factors=(1.0, 10.0, 100.0), units=100,
        quadratic_sizes=(2, 3, 5, 10, 20, 30, 50), quadratic_seeds=(0, 1, 2, 3, 4),
        overhead_sizes=(2, 10, 30, 100), overhead_evaluations=4000, overhead_rounds=3,
        line_functions=7,
    ),
    "quick": Plan(
        name="quick", problems=None, factors=(1.0, 10.0), units=100,
        quadratic_sizes=(2, 5, 10, 20), quadratic_seeds=(0,),
        overhead_sizes=(2, 10, 30), overhead_evaluations=1500, overhead_rounds=1,
        line_functions=7,
    ),
    "smoke": Plan(
        name="smoke", problems=(1, 7, 13), factors=(1.0,), units=20,
        quadratic_sizes=(2, 5), quadratic_seeds=(0,),
        overhead_sizes=(2, 10), overhead_evaluations=200, overhead_rounds=1,
        line_functions=2,
    ),
}


def default_out(cwd: Path) -> Path:
    """``benchmarks/`` when run from the project's own tree, else ``./directional-bench/``."""
    project = cwd / "pyproject.toml"
    if (cwd / "benchmarks").is_dir() and project.is_file():
        if 'name = "directional"' in project.read_text(encoding="utf-8", errors="replace"):
            return cwd / "benchmarks"
    return cwd / "directional-bench"


def parse(argv: list[str]) -> argparse.Namespace:
    parser = argparse.ArgumentParser(
        prog="directional bench",
        description="Benchmark directional on the Moré-Garbow-Hillstrom test set against "
        "reference baselines, measure how it scales, and write RESULTS.md with the figures.",
    )
    size = parser.add_mutually_exclusive_group()
    size.add_argument("--quick", action="store_true", help="a subset, in under two minutes")
    size.add_argument("--smoke", action="store_true", help="a few seconds: checks it runs")
    parser.add_argument("--out", type=Path, default=None,
                        help="folder for RESULTS.md and the figures (default: benchmarks/ of "
                        "the project when run from it, else ./directional-bench/)")
    return parser.parse_args(argv)


def main(argv: list[str] | None = None) -> int:
    """Run the benchmarks and write ``RESULTS.md`` and the PNG figures; returns the exit code."""
    argv = sys.argv[1:] if argv is None else list(argv)
    args = parse(argv[1:] if argv[:1] == ["--"] else argv)  # "--" as passed on by a caller
    plan = PLANS["quick" if args.quick else "smoke" if args.smoke else "full"]
    out = args.out if args.out is not None else default_out(Path.cwd())
    out.mkdir(parents=True, exist_ok=True)
    say = _printer()
    load = os.getloadavg() if hasattr(os, "getloadavg") else None
    began = time.perf_counter()

    chosen, dropped = pairs(plan.problems, plan.factors)
    say(f"profiles: {len(chosen)} pairs, {len(solvers())} solvers, budget {plan.units} (n + 1)")
    study = run_study(chosen, dropped, solvers(), plan.units, progress=say)
    _profile_figures(out, study)

    say("scaling: quadratics")
    quadratics = scaling.quadratics(plan.quadratic_sizes, plan.quadratic_seeds)
    quadratics.append(scaling.rosenbrock())
    say("scaling: optimizer overhead")
    overhead = scaling.overhead(plan.overhead_sizes, plan.overhead_evaluations,
                                rounds=plan.overhead_rounds)
    say("scaling: line search")
    functions = scaling.line_functions()[: plan.line_functions]
    line = scaling.line_counts(functions)
    errors = {fn.name: scaling.errors_of_parabolic_steps(fn) for fn in functions}
    orders = {name: scaling.convergence_order(e) for name, e in errors.items()}
    asymmetric = [errors[fn.name] for fn in functions if not fn.symmetric]
    order, order_pairs = scaling.pooled_order(asymmetric)
    _scaling_figure(out, quadratics, overhead, functions[0])

    text = _document(plan, study, quadratics, overhead, line, orders, order, order_pairs, load,
                     time.perf_counter() - began, out)
    (out / RESULTS).write_text(text, encoding="utf-8")
    say(f"wrote {out / RESULTS} ({time.perf_counter() - began:.0f} s)")
    return 0


def _printer() -> Callable[[str], None]:
    def say(text: str) -> None:
        print(text, file=sys.stderr, flush=True)

    return say


# ---------------------------------------------------------------------------- figures

FIGURES = {
    "baseline": ("profiles-data.png", "profiles-performance.png", ["method", "baseline"]),
    "ablation": ("ablations-data.png", "ablations-performance.png", ["method", "ablation"]),
}


def _profile_figures(out: Path, study: Study) -> None:
    sizes = [p.n for p in study.pairs]
    for kind, (data_name, performance_name, groups) in FIGURES.items():
        chosen = study.select(groups)
        if kind == "ablation" and len(chosen) < 2:
            continue
        names = [study.names[i] for i in chosen]
        counts = {tau: study.counts(tau)[:, chosen] for tau in profiles.TAUS}
        plots.profiles(
            out / data_name, f"Data profiles, MGH 1981 set ({len(study.pairs)} pairs)", names,
            DATA_BUDGETS,
            {tau: profiles.data_profile(c, sizes, DATA_BUDGETS) for tau, c in counts.items()},
            xlabel="budget, units of n + 1 evaluations",
        )
        plots.profiles(
            out / performance_name, "Performance profiles, MGH 1981 set", names,
            PERFORMANCE_FACTORS,
            {tau: profiles.performance_profile(c, PERFORMANCE_FACTORS)
             for tau, c in counts.items()},
            xlabel="α (evaluations / fewest of any solver)", log2=True,
        )


def _scaling_figure(out: Path, quadratics, overhead, function) -> None:
    line_errors = {
        "parabolic (directional)": scaling.errors_of_parabolic_steps(function, tolerance=1e-8)
    }
    golden: list[float] = []

    def traced(t: float) -> float:
        golden.append(t)
        return function.f(t)

    width = function.upper - function.lower
    scaling.baselines.golden_section(
        traced, function.lower, function.upper,
        tolerance=lambda t: scaling.LINE_TOLERANCE * (abs(t) + width / 1000.0),
    )
    line_errors["golden section"] = np.abs(np.array(golden) - function.minimizer)
    plots.scaling(
        out / "scaling.png",
        [(c.n, c.ratio) for c in quadratics
         if c.label.startswith("quadratic") and np.isfinite(c.reached)],
        [(o.solver, o.n, o.cpu_per_evaluation * 1e6) for o in overhead],
        line_errors,
    )


# ---------------------------------------------------------------------------- RESULTS.md


def _document(plan: Plan, study: Study, quadratics, overhead, line, orders, order, order_pairs,
              load, seconds: float, out: Path) -> str:
    lines = [
        "# Benchmark results",
        "",
        f"Written by `directional bench` ({plan.name} run, {seconds:.0f} s) on "
        f"{writeup.stamp()}. Do not edit by hand: run `directional bench` (or "
        "`python -m benchmarks` from the project folder) to rewrite it.",
        "",
        *writeup.machine(load),
        "",
        "## Targets",
        "",
    ]
    targets = [writeup.profile_target(study), writeup.tail_target(study)]
    targets += writeup.quadratic_target(quadratics)
    targets += writeup.overhead_target(overhead)
    targets += writeup.line_target(line, order, order_pairs)
    lines += writeup.target_table(targets)
    lines += ["", *_profiles_section(plan, study), "", *_scaling_section(
        quadratics, overhead, line, orders, order, order_pairs), ""]
    lines += _others(out)
    return "\n".join(lines).rstrip() + "\n"


def _profiles_section(plan: Plan, study: Study) -> list[str]:
    problems_used = sorted({p.problem.number for p in study.pairs})
    lines = [
        "## 1. The Moré–Garbow–Hillstrom (1981) test set",
        "",
        f"{len(study.pairs)} (problem, start) pairs: problems {_span(problems_used)} of Moré, "
        f"Garbow & Hillstrom (1981) at their standard sizes (problems 21 and 22 at n = 10 and "
        f"8, so as not to repeat problems 1 and 13), from {', '.join(f'{f:g}' for f in plan.factors)} "
        "times the standard start. Each solver gets "
        f"{plan.units} (n + 1) evaluations per pair. A pair counts as solved at accuracy τ once "
        "f(x0) − f(x) ≥ (1 − τ)(f(x0) − f_L), f_L the least value any solver (ablations "
        "included) found on it (Moré & Wild 2009); performance profiles after Dolan & Moré "
        "(2002). Baselines (`benchmarks/baselines.py`, written from the papers, not part of the "
        "method): Nelder–Mead (1965) with its standard coefficients, Hooke–Jeeves (1961) pattern "
        "search, coordinate search with golden-section line searches.",
        "",
    ]
    if study.dropped:
        lines += ["Left out: " + "; ".join(study.dropped) + ".", ""]
    lines += ["![data profiles](profiles-data.png)", "",
              "![performance profiles](profiles-performance.png)", ""]
    lines += writeup.profile_tables(study, ["method", "baseline"])
    lines += ["", "### Where `directional` does not solve a pair (τ = 1e-5)", ""]
    lines += writeup.unsolved(study)
    lines += ["", "### Where a baseline is more than 3 times faster (τ = 1e-5)", ""]
    lines += writeup.slower(study)
    lines += ["", "### Solvers overall", "", *writeup.solver_summary(study), ""]
    lines += ["### Ablations of the method", ""]
    available = ablations_available()
    missing = [name for name, ok in available.items() if not ok]
    if missing:
        lines += [
            "Not run, because `directional.method.search.Settings` has no switch for them yet: "
            + "; ".join(f"{name} (`{', '.join(ABLATIONS[name])}`)" for name in missing) + ".",
            "",
        ]
    if any(available.values()):
        lines += ["![ablation data profiles](ablations-data.png)", "",
                  "![ablation performance profiles](ablations-performance.png)", ""]
        lines += writeup.profile_tables(study, ["method", "ablation"])
    lines += ["", "<details><summary>Every pair: evaluations to solve at τ = 1e-5 "
              "(— : not within the budget)</summary>", "", *writeup.pair_table(study), "",
              "</details>"]
    return lines


def _scaling_section(quadratics, overhead, line, orders, order, order_pairs) -> list[str]:
    jarratt = scaling.jarratt_order()
    return [
        "## 2. Scaling",
        "",
        "![scaling](scaling.png)",
        "",
        "### Quadratics",
        "",
        "Random convex quadratics, condition number 1e3 (eigenvalues spaced geometrically, random "
        "rotation, start at 0, minimizer standard normal), and Rosenbrock's function from "
        "(−1.2, 1): evaluations until f − f* ≤ 1e-8 (f(x0) − f*), divided by (n + 1)(n + 2)/2, "
        "the number of values that determine a quadratic. With exact line searches Powell's "
        "method needs n cycles, each of n + 1 line searches and one extrapolated point; a line "
        "search that reuses a measured curvature costs 2 evaluations, so the ideal count is "
        "about n(2n + 3), a ratio of 2n(2n + 3)/((n + 1)(n + 2)) that tends to 4 (3.72 at "
        "n = 20, 3.88 at n = 50). A higher ratio means more cycles than n (directions "
        "replaced too rarely, so the set is not yet conjugate) or more than 2 evaluations per "
        "line search (curvature not reused, or line searches refined beyond what the cycle "
        "needs). The last two columns show which: a conjugate-direction cycle should cost about "
        "2(n + 1) + 1 evaluations.",
        "",
        *writeup.quadratic_table(quadratics),
        "",
        "### Optimizer overhead",
        "",
        "Total time minus the time inside the objective, per evaluation, as processor time of "
        "the benchmark process (what the targets use: other processes on the shared machine "
        "do not inflate it) and as wall time, on random convex "
        "quadratics (condition 1e3, one matrix-vector product per evaluation), runs repeated "
        "until the evaluations are spent; a run stops on its own or when the evaluations left "
        "are spent, so at small n many short runs carry their start-up cost. The time inside "
        "the objective is measured by evaluating each run's points again in a plain loop after "
        "it, not by reading clocks around each call (a processor-time read is a system call of "
        "about 0.6 µs, and those reads would count to the optimizer); the copy of each point "
        "kept for that counts to the optimizer. To show where the "
        "time goes, the same search is also timed inside a bare driver (cache, records, "
        "budget; no solution built) and driven by a plain loop with no driver at all; 'driver "
        "alone' is the driver running a generator that asks for random points one at a time "
        "(the driver's own cost, plus making each batch). Nelder–Mead (the pure-Python "
        "baseline, unchanged since the targets were set) is the yardstick: the machine's speed "
        "drifts between runs by a third or more, so each row is also given as a multiple of "
        "Nelder–Mead's time at the same n in this run, and the targets are judged that way "
        "(30 µs at n = 10 was 1.24 times Nelder–Mead's time in the run that set it). The full "
        "run times the solvers one after another in three rounds at each size, and each row is "
        "its fastest round, the least disturbed by other work on the machine.",
        "",
        *writeup.overhead_table(overhead),
        "",
        "### Line search alone",
        "",
        "`directional.line_minimum` (bracketing, then Brent's safeguarded parabolic steps) "
        "against golden section on smooth functions of one variable, each with minimum 0 at a "
        "known point (invented for this benchmark). 'to 1e-8': evaluations until a point "
        "within 1e-8 of the minimizer has been evaluated; 'to stop': until the method stops on "
        "its own tolerance (1e-8 relative, as `line_minimum` documents). The order of "
        "convergence is the least-squares slope of log e(k+1) against log e(k) for the "
        "errors between 1e-12 and 1e-2 of the line search run to a tolerance of 1e-14; "
        f"successive parabolic interpolation has order {jarratt:.4f} (Jarratt 1967). The two "
        "symmetric functions (third derivative 0 at the minimum) converge faster and are left "
        "out of the pooled order.",
        "",
        *writeup.line_table(line, orders),
        "",
        f"Pooled order over the asymmetric functions: **{order:.3f}** from {order_pairs} "
        f"consecutive pairs (Jarratt: {jarratt:.4f}).",
    ]


def _span(numbers: list[int]) -> str:
    if numbers == list(range(numbers[0], numbers[-1] + 1)):
        return f"{numbers[0]}–{numbers[-1]}"
    return ", ".join(str(n) for n in numbers)


def _others(out: Path) -> list[str]:
    """Tables written by other parts of the project into ``results/*.md``, verbatim."""
    folder = out / "results"
    files = sorted(folder.glob("*.md")) if folder.is_dir() else []
    lines: list[str] = []
    for path in files:
        lines += ["", f"## From `results/{path.name}`", "",
                  path.read_text(encoding="utf-8").rstrip(), ""]
    return lines
