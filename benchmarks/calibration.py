"""What a calibration costs: `dl.calibrate` against a textbook Levenberg–Marquardt, on NIST StRD.

``python -m benchmarks.calibration [--quick] [--out FILE]``: prints a markdown section (and writes
it to FILE, e.g. ``benchmarks/results/calibration.md``, which RESULTS.md includes verbatim).

Every NIST StRD nonlinear-regression set in ``tests/reference/nist-strd`` is fitted from both of
NIST's starts by ``dl.calibrate`` (defaults: the check and the uncertainty included) and by the
baseline `directional.benchmarking.marquardt.levenberg_marquardt` (Marquardt 1963, Moré 1978,
forward-difference Jacobian, its default tolerances).  For each run: the evaluations until ``S``
first came within 1e-6 (relative) of NIST's certified residual sum of squares, and until the run
stopped; for `calibrate` the evaluations by purpose (``sol.history``), whether the certified
estimates (1e-6 relative) and standard deviations (1e-3 relative) were reached, the verdict and
the stop.  The demo (``directional demo``'s problem, `directional.interface.demo`) is run as the
command line runs it, without a journal.

The targets are computed from the runs, never typed:

- evaluations to the certified S, median over the runs of the sets in the tests (the seven
  NIST files copied from NIST's own, both starts) that the baseline solves, of the ratio
  `calibrate` / baseline: at most 1.0; a run `calibrate` never brings to the certified S counts
  as an infinite ratio;
- evaluations until the run stops, same runs, median ratio: at most 1.5;
- certified estimates and standard deviations with verdict ``minimum`` on every run of every
  set, the harder ones (files recalled from memory, see tests/reference/README.md) included;
- no run stops at an iteration cap: every run's stop is ``converged``, no note says a
  Levenberg–Marquardt loop ran out of steps, and none says the budget left could not pay for the
  check (the budget is a cap too);
- the demo: at most 250 evaluations, the same S as a tightly converged baseline run to 1e-8
  (relative), verdict ``minimum``.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import time
import warnings
from dataclasses import dataclass
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

import numpy as np  # noqa: E402

import directional as dl  # noqa: E402
from benchmarks import publish
from directional.benchmarking import nist as nist_files
from directional.benchmarking.marquardt import Fit, levenberg_marquardt  # noqa: E402
from directional.records import Purpose, Stop  # noqa: E402

NIST = Path(__file__).resolve().parents[1] / "tests" / "reference" / "nist-strd"
# The sets whose files were copied from NIST's (tests/api/test_calibration.py tests them).
TESTED = ("Misra1a", "Chwirut2", "DanWood", "Misra1b", "Kirby2", "Hahn1", "BoxBOD")
STARTS = ("start1", "start2")
REACHED = 1e-6  # relative distance to the certified S that counts as reaching it
ESTIMATES, DEVIATIONS = 1e-6, 1e-3  # relative tolerances on the certified values (our targets)
LM_BUDGET = 5000  # the baseline's budget: far above what it spends where it converges
DEMO_LIMIT, DEMO_SAME = 250, 1e-8


def sets() -> list[str]:
    """Names of the NIST files: those in the tests first, then the harder ones, by name."""
    found = sorted(path.stem for path in NIST.glob("*.toml"))
    return [n for n in TESTED if n in found] + [n for n in found if n not in TESTED]


def load(name: str) -> tuple[dict, nist_files.Residuals]:
    """The NIST file ``name`` and its residuals ``f(x; b) - y`` (`directional.benchmarking.nist`)."""
    return nist_files.read(NIST / f"{name}.toml")


@dataclass(slots=True, kw_only=True)
class Row:
    """One set from one start: what `calibrate` and the baseline spent and reached."""

    name: str
    start: str
    tested: bool
    calibrate_to: int | None
    calibrate_total: int
    phases: dict[str, int]  # evaluations by purpose
    before: dict[str, int]  # the same, of the evaluations until the certified S (all if never)
    estimates: bool
    deviations: bool
    verdict: str
    stop: str
    capped: str  # the cap that ended the run, "" for none
    lm_to: int | None
    lm_total: int
    lm_reason: str
    seconds: float

    @property
    def solved(self) -> bool:
        """All the calibration target asks of this run."""
        return self.estimates and self.deviations and self.verdict == "minimum"


def evaluations_to(values: list[float], target: float) -> int | None:
    """The count of evaluations after which a value first was at most ``target``, or None.

    >>> evaluations_to([5.0, 3.0, 1.0, 0.5], 1.0), evaluations_to([5.0], 1.0)
    (3, None)
    """
    for k, value in enumerate(values, start=1):
        if value <= target:
            return k
    return None


def close(a: object, b: object, rel: float) -> bool:
    """Every entry of ``a`` within ``rel`` (relative) of the same entry of ``b``."""
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    return bool(a.shape == b.shape and np.all(np.abs(a - b) <= rel * np.abs(b)))


def capped(sol: dl.Solution) -> str:
    """Which cap ended the run ("" for none): a stop other than ``converged``, a loop out of
    steps, or a budget that ran out before the check could be paid for (a note says "budget
    left")."""
    words = ("no convergence in", "iteration cap", "step cap")
    if any(w in text for text in (sol.reason, *sol.notes) for w in words):
        return "step cap"
    if sol.stop is not Stop.CONVERGED:
        return sol.stop.value
    if any("budget left" in text for text in sol.notes):
        return "budget spent"
    return ""


def phases(sol: dl.Solution, first: int | None = None) -> dict[str, int]:
    """Evaluations by purpose (the strings the journal stores), in the order they first appear;
    only the ``first`` ones when given."""
    counts: dict[str, int] = {}
    for e in sol.history[:first]:
        counts[str(e.purpose)] = counts.get(str(e.purpose), 0) + 1
    return counts


def columns(counts: list[dict[str, int]]) -> list[str]:
    """The purposes met in any run: those of `Purpose` in its order, then any other by name."""
    seen = {name for c in counts for name in c}
    known = [str(p) for p in Purpose if str(p) in seen]
    return known + sorted(seen - set(known))


def measure(name: str, start: str) -> Row:
    """`calibrate` and the baseline on one NIST set from one of its starts."""
    data, residuals = load(name)
    target = data["residual_sum_of_squares"] * (1.0 + REACHED)
    names = [f"b{i + 1}" for i in range(data["n_parameters"])]
    tick = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # correlation and identifiability warnings
        sol = dl.calibrate(residuals, data[start], names=names)
    seconds = time.perf_counter() - tick
    lm = levenberg_marquardt(residuals, data[start], budget=LM_BUDGET)
    errors = None if sol.uncertainty is None else sol.uncertainty.standard_errors
    reached = evaluations_to([e.value for e in sol.history], target)
    return Row(
        name=name, start=start, tested=name in TESTED, calibrate_to=reached,
        calibrate_total=len(sol.history), phases=phases(sol), before=phases(sol, reached),
        estimates=close(sol.point, data["certified_estimates"], ESTIMATES),
        deviations=errors is not None and close(errors, data["certified_std_devs"], DEVIATIONS),
        verdict=sol.verdict.value, stop=sol.stop.value, capped=capped(sol),
        lm_to=lm.evaluations_to(target), lm_total=lm.evaluations, lm_reason=lm.reason,
        seconds=seconds,
    )


@dataclass(frozen=True, slots=True, kw_only=True)
class Demo:
    """The demo's calibration against a tightly converged baseline run."""

    evaluations: int
    value: float
    verdict: str
    phases: dict[str, int]
    lm: Fit
    reference: Fit
    plain: Fit
    seconds: float


def demo() -> Demo:
    """Run the demo's problem file as ``directional run`` does (no journal) and the baseline."""
    from directional.interface import demo as scenario
    from directional.interface.problemfile import Problem
    from directional.interface.runs import solve
    from directional.testproblems.bioreactor import RTOL

    problem = Problem.from_text(scenario.PROBLEM)
    tick = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        sol = solve(problem, journal=None, quiet=True)
    seconds = time.perf_counter() - tick
    start = np.array([p.start for p in problem.parameters], dtype=float)
    # The residuals are as accurate as the ODE solver's relative tolerance: the baseline's
    # difference steps are sized from it (Dennis & Schnabel 1983, section 5.4).
    lm = levenberg_marquardt(scenario.residuals, start, budget=LM_BUDGET, precision=RTOL)
    tight = levenberg_marquardt(scenario.residuals, start, budget=LM_BUDGET, precision=RTOL,
                                ftol=1e-14, xtol=1e-14)
    plain = levenberg_marquardt(scenario.residuals, start, budget=LM_BUDGET)
    return Demo(evaluations=len(sol.history), value=sol.value, verdict=sol.verdict.value,
                phases=phases(sol), lm=lm, reference=tight, plain=plain, seconds=seconds)


# ---------------------------------------------------------------------------- the write-up


def _count(n: int | None) -> str:
    return "never" if n is None else str(n)


def _shown_ratio(a: int | None, b: int | None) -> str:
    return "-" if b is None else f"{_ratio(a, b):.2f}"


def _ratio(a: int | None, b: int | None) -> float:
    if b is None:
        return math.nan
    return math.inf if a is None else a / b


def _yes(flag: bool) -> str:
    return "yes" if flag else "**no**"


def run_table(rows: list[Row]) -> list[str]:
    out = [
        "| set | from | `calibrate` to S | baseline to S | ratio | `calibrate` total "
        "| baseline total | ratio | estimates | std devs | verdict | stop | baseline stop |",
        "|---|---|---:|---:|---:|---:|---:|---:|:---:|:---:|---|---|---|",
    ]
    for r in rows:
        cap = f" ({r.capped})" if r.capped else ""
        out.append(
            f"| {r.name}{'' if r.tested else ' (harder)'} | {r.start[-1]} "
            f"| {_count(r.calibrate_to)} | {_count(r.lm_to)} "
            f"| {_shown_ratio(r.calibrate_to, r.lm_to)} | {r.calibrate_total} | {r.lm_total} "
            f"| {r.calibrate_total / r.lm_total:.2f} | {_yes(r.estimates)} "
            f"| {_yes(r.deviations)} | {r.verdict} | {r.stop}{cap} "
            f"| {r.lm_reason} |"
        )
    return out


def phase_table(rows: list[Row], shown: Demo | None) -> list[str]:
    labels = columns([r.phases for r in rows] + ([shown.phases] if shown else []))
    out = ["| set | from | " + " | ".join(labels) + " | total |",
           "|---|---|" + "---:|" * (len(labels) + 1)]
    for r in rows:
        out.append(f"| {r.name} | {r.start[-1]} | "
                   + " | ".join(str(r.phases.get(label, 0)) for label in labels)
                   + f" | {r.calibrate_total} |")
    if shown is not None:
        out.append("| demo | - | "
                   + " | ".join(str(shown.phases.get(label, 0)) for label in labels)
                   + f" | {shown.evaluations} |")
    return out


def shares(rows: list[Row], part: str = "phases") -> str:
    """Median share of each purpose in `calibrate`'s evaluations over ``rows`` (``part``:
    "phases" for all of a run's, "before" for those until the certified S)."""
    counts = [getattr(r, part) for r in rows]
    counts = [c for c in counts if sum(c.values())]
    if not counts:
        return "-"
    labels = columns(counts)
    median = {label: float(np.median([c.get(label, 0) / sum(c.values()) for c in counts]))
              for label in labels}
    ranked = sorted(labels, key=lambda label: -median[label])
    return ", ".join(f"{label} {100 * median[label]:.0f} %" for label in ranked)


def targets(rows: list[Row], shown: Demo | None) -> list[tuple[str, str, bool, str]]:
    """(target, measured, met, note) for each target, computed from the runs."""
    solved = [r for r in rows if r.tested and r.lm_to is not None]
    to = [_ratio(r.calibrate_to, r.lm_to) for r in solved]
    total = [r.calibrate_total / r.lm_total for r in solved]
    out = []
    median_to = float(np.median(to)) if to else math.nan
    out.append(("evaluations to the certified S: median ratio to the baseline ≤ 1.0",
                f"{median_to:.2f} (range {min(to):.2f}–{max(to):.2f}, {len(to)} runs)",
                median_to <= 1.0, _miss(median_to, 1.0)))
    median_total = float(np.median(total)) if total else math.nan
    out.append(("evaluations until the stop: median ratio to the baseline ≤ 1.5",
                f"{median_total:.2f} (range {min(total):.2f}–{max(total):.2f})",
                median_total <= 1.5, _miss(median_total, 1.5)))
    good = [r for r in rows if r.solved]
    bad = [f"{r.name} {r.start[-1]}" for r in rows if not r.solved]
    out.append(("certified estimates (1e-6) and std devs (1e-3), verdict minimum, every run",
                f"{len(good)} of {len(rows)}", len(good) == len(rows),
                "missed: " + ", ".join(bad) if bad else ""))
    caps = [f"{r.name} {r.start[-1]} ({r.capped})" for r in rows if r.capped]
    out.append(("no run stops at an iteration cap (or the budget)",
                f"{len(caps)} of {len(rows)} do", not caps, ", ".join(caps)))
    if shown is not None:
        gap = abs(shown.value - shown.reference.value) / shown.reference.value
        out += [
            ("the demo: ≤ 250 evaluations in all", str(shown.evaluations),
             shown.evaluations <= DEMO_LIMIT, _miss(shown.evaluations / DEMO_LIMIT, 1.0)),
            ("the demo: the same S as a tight baseline run to 1e-8 (relative)",
             f"{gap:.1e} ({shown.value:.10g} vs {shown.reference.value:.10g})",
             gap <= DEMO_SAME, ""),
            ("the demo: verdict minimum", shown.verdict, shown.verdict == "minimum", ""),
        ]
    return out


def _miss(ratio: float, limit: float) -> str:
    return "" if ratio <= limit else f"{ratio / limit:.1f} × over"


def write_up(rows: list[Row], shown: Demo | None, seconds: float) -> str:
    tested = [r for r in rows if r.tested]
    baseline_reached = sum(1 for r in tested if r.lm_to is not None)
    out = [
        "## Calibration: `dl.calibrate` against a textbook Levenberg–Marquardt (NIST StRD)",
        "",
        "Written by `benchmarks/calibration.py`. Each NIST StRD nonlinear-regression set in "
        "`tests/reference/nist-strd` from both of NIST's starts. \"to S\": evaluations until the "
        "sum of squares first came within 1e-6 (relative) of NIST's certified value (\"never\": "
        "it did not); \"total\": until the run stopped, for `calibrate` its check and "
        "uncertainty included. Baseline: `directional.benchmarking.marquardt` (Marquardt 1963 "
        "damping, Moré 1978 trust region and stopping tests, forward-difference Jacobian: p "
        "evaluations each, default tolerances). Estimates to 1e-6 and std devs to 1e-3 "
        "(relative) against NIST's certified values; \"(harder)\": a set whose file was "
        "recalled from memory (tests/reference/README.md), not in the tests of `calibrate`.",
        "",
        "### Targets",
        "",
        "| target | measured | met | note |",
        "|---|---|:---:|---|",
    ]
    out += [f"| {t} | {m} | {'met' if ok else '**not met**'} | {note} |"
            for t, m, ok, note in targets(rows, shown)]
    out += ["", "### Runs", "", *run_table(rows), "",
            f"The baseline reaches the certified S on {baseline_reached} of {len(tested)} runs of "
            f"the sets in the tests and on "
            f"{sum(1 for r in rows if not r.tested and r.lm_to is not None)} of "
            f"{len(rows) - len(tested)} runs of the harder ones; the ratios of the first target "
            "are taken over the former.",
            "", "### `calibrate` phase by phase (evaluations by purpose in `sol.history`)", "",
            "One column per purpose (`directional.records.Purpose`; the journal's strings): "
            "start, line and extrapolate are the direction-set search, model its model steps, "
            "noise the noise estimate, jacobian every difference Jacobian (the least-squares "
            "steps' and the uncertainty's), gauss-newton the least-squares trial steps, hessian, "
            "smoothness and escape the curvature check.", "", *phase_table(rows, shown),
            "", "Where the evaluations go, median share by purpose over the runs of the sets "
            f"in the tests: until the certified S, {shares(tested, 'before')}; in all, "
            f"{shares(tested)}."]
    if shown is not None:
        out += ["", f"The demo (`directional demo`'s problem file, no journal): `calibrate` "
                f"{shown.evaluations} evaluations, S = {shown.value:.10g}, verdict "
                f"{shown.verdict}, {shown.seconds:.1f} s; the baseline {shown.lm.evaluations} "
                f"evaluations (S = {shown.lm.value:.10g}, {shown.lm.reason}; to within 1e-8 of "
                f"the tight run's S after "
                f"{_count(shown.lm.evaluations_to(shown.reference.value * (1 + DEMO_SAME)))}); "
                f"a tight baseline run (ftol = xtol = 1e-14) {shown.reference.evaluations} "
                f"evaluations, S = {shown.reference.value:.10g}. The baseline's difference steps "
                "are sized from the ODE solver's relative tolerance (1e-10), which it is told; "
                f"with steps sized for machine precision it stops after {shown.plain.evaluations} "
                f"evaluations at S = {shown.plain.value:.10g} ({shown.plain.reason}), "
                f"{(shown.plain.value - shown.reference.value) / shown.reference.value:.1e} "
                "(relative) above the tight run's."]
    out += ["", f"Run time {seconds:.0f} s (`calibrate` "
            f"{sum(r.seconds for r in rows):.0f} s of it), numpy {np.__version__}."]
    return "\n".join(out) + "\n"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true",
                        help="the sets in the tests only, no demo (smoke)")
    parser.add_argument("--sets", nargs="+", help="only these NIST sets")
    parser.add_argument("--out", type=Path, help="also write the section to this markdown file")
    args = parser.parse_args(argv)
    names = args.sets or [n for n in sets() if not args.quick or n in TESTED]
    tick = time.perf_counter()
    rows = []
    for name in names:
        for start in STARTS:
            rows.append(measure(name, start))
            print(f"  {name} {start}: {rows[-1].seconds:.1f} s", file=sys.stderr)
    shown = None if args.quick or args.sets else demo()
    text = write_up(rows, shown, time.perf_counter() - tick)
    publish(text, args.out)
    return 0


if __name__ == "__main__":
    sys.exit(main())
