"""``python -m benchmarks.noisy [--smoke] [--streams K] [--out FILE]``: the benchmarks under noise.

Runs `directional` and the baselines on the MGH set under relative noise 1e-3 (data profiles at
τ = 1e-1 and 1e-3, judged on true values) and on smooth functions of our own plus Gaussian noise
(final true gap in units of σ, verdict, evaluations), checks its targets and writes
``results/noise.md`` (default ``benchmarks/results/noise.md``) and the figure
``noise-profiles.png`` beside RESULTS.md.  The smooth MGH numbers are read from RESULTS.md, so
run ``python -m benchmarks`` first; the block of RESULTS.md that includes ``results/noise.md``
is then brought up to date in place (the next full run includes the file as it is).
``--record-before`` stores the smooth numbers of the current RESULTS.md as the reference the
"no worse than before" target compares with (done once, before the noise work).

The implementation lives in `directional.benchmarking.noisystudy` and ``noisywriteup``.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")

from directional.benchmarking import noisy, plots, problems, profiles, writeup  # noqa: E402
from directional.benchmarking import noisystudy as study  # noqa: E402
from directional.benchmarking import noisywriteup as text  # noqa: E402
from directional.benchmarking.study import DATA_BUDGETS  # noqa: E402

HERE = Path(__file__).resolve().parent
BEFORE = HERE / "smooth-before.json"
FIGURE = "noise-profiles.png"


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", type=Path, default=HERE / "results" / "noise.md",
                        help="the markdown file to write (default benchmarks/results/noise.md)")
    parser.add_argument("--results", type=Path, default=None,
                        help="the RESULTS.md of the full run (default: the one two folders "
                        "above --out when it lies in a results/ folder, else none)")
    parser.add_argument("--smoke", action="store_true",
                        help="three problems, two functions, two seeds: checks it runs")
    parser.add_argument("--streams", type=int, default=3,
                        help="noise streams per MGH pair (default 3: each pair under three "
                        "random streams, so that one stream's luck on a few pairs does not "
                        "decide a budget)")
    parser.add_argument("--record-before", action="store_true",
                        help=f"store the smooth numbers of RESULTS.md in {BEFORE.name} and stop")
    args = parser.parse_args(argv)
    results = args.results
    if results is None and args.out.parent.name == "results":
        results = args.out.parent.parent / "RESULTS.md"
    if args.record_before:
        return _record(results)

    tick = time.perf_counter()
    say = _printer()
    numbers, factors, units = ((1, 7, 13), (1.0,), 20) if args.smoke else (None, (1.0, 10.0,
                                                                                   100.0), 100)
    chosen, dropped = problems.pairs(numbers, factors)
    say(f"noisy MGH: {len(chosen)} pairs, budget {units} (n + 1)")
    mgh = study.run_noisy_mgh(chosen, dropped, study.profile_solvers(), units,
                              streams=args.streams, progress=say)
    functions = noisy.smooth_functions()[:2] if args.smoke else noisy.smooth_functions()
    seeds = study.SEEDS[:2] if args.smoke else study.SEEDS
    say(f"smooth plus Gaussian: {len(functions)} functions, {len(seeds)} seeds")
    rows = study.run_gaussian(functions, study.table_solvers(), seeds, progress=say)

    folder = results.parent if results is not None else args.out.parent
    folder.mkdir(parents=True, exist_ok=True)
    _figure(folder / FIGURE, mgh)
    smooth = text.smooth_target(
        text.read_before(BEFORE), text.read_now(results) if results is not None else None)
    page = text.document(mgh, rows, smooth, seconds=time.perf_counter() - tick,
                         stamp=writeup.stamp(), commit=_commit(), figure=FIGURE)
    args.out.parent.mkdir(parents=True, exist_ok=True)
    args.out.write_text(page, encoding="utf-8")
    say(f"wrote {args.out}")
    if results is not None and results.is_file():
        results.write_text(text.include(results.read_text(encoding="utf-8"), args.out.name,
                                        page), encoding="utf-8")
        say(f"brought its block in {results} up to date")
    print(page)
    return 0


def _record(results: Path | None) -> int:
    if results is None or not results.is_file():
        print("no RESULTS.md to read: give --results", file=sys.stderr)
        return 2
    numbers = text.smooth_numbers(results.read_text(encoding="utf-8"))
    if not numbers["data"]:
        print(f"{results} has no data-profile table of the MGH set", file=sys.stderr)
        return 2
    BEFORE.write_text(json.dumps(numbers, indent=1, ensure_ascii=False) + "\n", encoding="utf-8")
    print(f"stored the smooth numbers of {numbers['run']} in {BEFORE}", file=sys.stderr)
    return 0


def _figure(path: Path, mgh: study.NoisyStudy) -> None:
    sizes = [p.n for p in mgh.pairs]
    plots.profiles(
        path, f"Data profiles, MGH set under relative noise {study.LEVEL:g} "
        f"({len(mgh.pairs)} pairs, true values)", mgh.names, DATA_BUDGETS,
        {tau: profiles.data_profile(mgh.counts(tau), sizes, DATA_BUDGETS)
         for tau in study.NOISY_TAUS},
        xlabel="budget, units of n + 1 evaluations",
    )


def _commit() -> str:
    try:
        done = subprocess.run(["git", "rev-parse", "--short", "HEAD"], capture_output=True,
                              text=True, timeout=5, cwd=HERE)
    except (OSError, subprocess.SubprocessError):
        return ""
    if done.returncode != 0:
        return ""
    edited = subprocess.run(  # the code only: the results this script writes do not count
        ["git", "status", "--porcelain", "--untracked-files=no", "--", ":/directional",
         ":/benchmarks/*.py"], capture_output=True, text=True, timeout=5, cwd=HERE)
    return done.stdout.strip() + (" with local edits" if edited.stdout.strip() else "")


def _printer():
    def say(line: str) -> None:
        print(line, file=sys.stderr, flush=True)

    return say


if __name__ == "__main__":
    sys.exit(main())
