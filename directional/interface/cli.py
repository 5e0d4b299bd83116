"""The ``directional`` command: demo, run, resume, show, check, bench.

Exit codes: 0 when the search ended at a verified minimum (verdict ``minimum``; for ``check``: the
start point evaluated), 1 when it ended without one (stopped early, interrupted by Ctrl-C, a saddle,
a flat direction, noise hiding the curvature, no check made, the objective failed), 2 for bad
input (arguments, problem file, journal), 128 + N when signal N stopped the run (143 for SIGTERM,
129 for SIGHUP: the run stops as for Ctrl-C, between evaluations, and ``resume`` continues it).
Messages go to standard error; the summary to standard output; a reader that goes away
(``| head``) changes nothing.

Heavy libraries (numpy, scipy, matplotlib) are imported where they are used, so that ``--help``
and argument errors answer at once.
"""

from __future__ import annotations

import argparse
import contextlib
import math
import os
import signal
import sys
import time
import warnings
from collections.abc import Iterator, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any, TextIO

from directional.errors import JournalError, ObjectiveError, ProblemError
from directional.run.interrupts import Interrupts

if TYPE_CHECKING:
    import numpy as np

    from directional.interface.problemfile import Problem
    from directional.solution import Solution

OK, UNVERIFIED, BAD_INPUT = 0, 1, 2
SIGNALLED = 128  # exit code 128 + N when signal N stopped the run (the shells' convention)
PLOT_SECONDS = 20.0  # by default, plots spend report-only evaluations worth about this long

_CODES = """\
exit codes: 0 a verified minimum, 1 the search ended without one (or Ctrl-C stopped it),
            2 bad input (arguments, problem file, journal),
            143 / 129 SIGTERM / SIGHUP stopped the run (resume continues it)"""


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line with ``argv`` (default ``sys.argv[1:]``); return the exit code."""
    argv = list(sys.argv[1:] if argv is None else argv)
    if argv[:1] == ["bench"]:
        return _bench(argv[1:])
    parser = _parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return BAD_INPUT
    interrupts = Interrupts()  # SIGINT, SIGTERM, SIGHUP: one handler, joined by the driver's
    with interrupts, _quiet_when_closed():
        code = _handled(args)
        if interrupts.signal is not None and interrupts.signal != signal.SIGINT:
            code = SIGNALLED + int(interrupts.signal)
    return code


def _handled(args: argparse.Namespace) -> int:
    """Run the command; errors become a message on standard error and an exit code."""
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always", UserWarning)
            code = args.handler(args)
        for warning in caught:  # the summary's notes say the same; shown once, briefly
            print(f"directional: warning: {warning.message}", file=sys.stderr)
        return code
    except (ProblemError, JournalError) as error:
        print(f"directional: error: {error}", file=sys.stderr)
        return BAD_INPUT
    except ObjectiveError as error:
        print(f"directional: the objective failed: {error}", file=sys.stderr)
        return UNVERIFIED
    except KeyboardInterrupt:
        print("directional: interrupted", file=sys.stderr)
        return UNVERIFIED


@contextlib.contextmanager
def _quiet_when_closed() -> Iterator[None]:
    """Standard output whose reader went away (``| head``) swallows the rest, without an error.

    Python ignores SIGPIPE, so a write to a closed pipe raises `BrokenPipeError`; from then on
    standard output goes to the null device, and the exit code stays the run's own.
    """
    stream = sys.stdout
    guarded = _Unbroken(stream)
    sys.stdout = guarded  # type: ignore[assignment]
    try:
        yield
        guarded.flush()
    finally:
        sys.stdout = stream


class _Unbroken:
    """A text stream that turns a closed pipe into silence (see `_quiet_when_closed`)."""

    def __init__(self, stream: TextIO) -> None:
        self._stream = stream

    def write(self, text: str) -> int:
        try:
            return self._stream.write(text)
        except BrokenPipeError:
            self._silence()
            return len(text)

    def flush(self) -> None:
        try:
            self._stream.flush()
        except BrokenPipeError:
            self._silence()

    def _silence(self) -> None:
        with contextlib.suppress(OSError, ValueError):
            os.dup2(os.open(os.devnull, os.O_WRONLY), self._stream.fileno())

    def __getattr__(self, name: str) -> Any:
        return getattr(self._stream, name)


# ----------------------------------------------------------------------------- the parser


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="directional",
        description="Minimize the output of a simulation without derivatives, keep every "
        "evaluation in a journal, and say whether the answer is a true minimum.",
        epilog=_CODES,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"%(prog)s {_version()}")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND")

    def command(name: str, summary: str, description: str) -> argparse.ArgumentParser:
        sub = commands.add_parser(
            name, help=summary, description=description, epilog=_CODES,
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )
        return sub

    demo = command(
        "demo", "run the bundled scenario end to end",
        "Calibrate a batch-bioreactor model (Monod growth) to an invented, noisy data set and "
        "write the problem file, journal, summary, JSON, plots and an HTML report into "
        "./directional-demo/.",
    )
    demo.add_argument("--folder", default="directional-demo", help="where to write (default: %(default)s)")
    demo.add_argument("--quiet", action="store_true", help="no progress bar")
    demo.set_defaults(handler=_demo)

    run = command(
        "run", "run the search a problem file describes",
        "Run one search (or many starts) on PROBLEM.toml, keeping its journal; print the summary.",
    )
    run.add_argument("problem", metavar="PROBLEM.toml", help="the problem file")
    run.add_argument("--budget", type=_positive, metavar="N", help="most evaluations (overrides the file)")
    run.add_argument("--starts", type=_positive, metavar="K",
                     help="searches from K starts (overrides the file)")
    run.add_argument("--workers", type=_positive, metavar="W",
                     help="parallel evaluations: of many starts, or of one search's batches")
    run.add_argument("--replicates", type=_positive, metavar="K",
                     help="run each point K times, the search sees the mean (overrides the file)")
    run.add_argument("--dask", metavar="ADDRESS",
                     help="evaluate many starts on the Dask scheduler at ADDRESS (needs [dask])")
    where = run.add_mutually_exclusive_group()
    where.add_argument("--journal", metavar="FILE",
                       help="journal file (default: the problem file's [journal] path, else "
                       "NAME.journal.sqlite beside NAME.toml)")
    where.add_argument("--no-journal", action="store_true", help="keep no journal")
    _outputs(run)
    run.set_defaults(handler=_run)

    resume = command(
        "resume", "finish an interrupted run from its journal",
        "Continue the run kept in JOURNAL: stored evaluations are replayed, none is repeated.",
    )
    resume.add_argument("journal", metavar="JOURNAL.sqlite", help="the journal of the run")
    resume.add_argument("--problem", metavar="FILE", help="the problem file, if it has moved")
    resume.add_argument("--budget", type=_positive, metavar="N",
                        help="most evaluations in all, the stored ones included")
    resume.add_argument("--retry-failed", action="store_true",
                        help="evaluate again the stored evaluations that failed or timed out, "
                        "when the search asks for them (the journal keeps both records)")
    _outputs(resume)
    resume.set_defaults(handler=_resume)

    show = command(
        "show", "summary and plots from a journal",
        "Print the summary of the run kept in JOURNAL, as far as it went; evaluates nothing "
        "(plots may, see --plot-evaluations).",
    )
    show.add_argument("journal", metavar="JOURNAL.sqlite", help="the journal of the run")
    show.add_argument("--problem", metavar="FILE", help="the problem file, if it has moved")
    show.add_argument("--evaluations", metavar="FILE.csv",
                      help="write every evaluation to FILE.csv (parameters by name, value, status, "
                      "reason, purpose, start and end time), for a spreadsheet or pandas")
    _outputs(show, progress=False)
    show.set_defaults(handler=_show)

    check = command(
        "check", "validate a problem file and evaluate its start once",
        "Read PROBLEM.toml strictly (unknown keys, types, placeholders) and evaluate the start "
        "point once.",
    )
    check.add_argument("problem", metavar="PROBLEM.toml", help="the problem file")
    check.set_defaults(handler=_check)

    command(
        "bench", "run the standard test problems",
        "Run the benchmarks on the standard test problems and write their tables "
        "(directional bench --help lists their options).",
    )
    return parser


def _outputs(sub: argparse.ArgumentParser, progress: bool = True) -> None:
    sub.add_argument("--json", metavar="OUT", help="write the solution as JSON to OUT")
    sub.add_argument("--plots", metavar="DIR", help="write PNG plots into DIR")
    sub.add_argument("--html", metavar="FILE",
                     help="write the report as one self-contained HTML page to FILE")
    sub.add_argument(
        "--plot-evaluations", type=_count, default=None, metavar="N",
        help="most report-only evaluations for maps and profiles, not journaled "
        f"(default: what fits in about {PLOT_SECONDS:g} s, at most 500; 0: none)",
    )
    if progress:
        sub.add_argument("--quiet", action="store_true", help="no progress bar")


def _check_outputs(args: argparse.Namespace) -> None:
    """Refuse output paths that cannot be written, before the run rather than after it.

    Raises
    ------
    ProblemError
        Naming the option: --plots naming a file, --json or --evaluations naming a folder, or
        a path under a file.
    """
    for option, folder in (("plots", True), ("json", False), ("evaluations", False)):
        value = getattr(args, option, None)
        if value is None:
            continue
        path = Path(value)
        if folder and path.exists() and not path.is_dir():
            raise ProblemError(f"--{option} {value!r}: names a file, not a folder for the plots")
        if not folder and path.is_dir():
            raise ProblemError(f"--{option} {value!r}: names a folder, not a file")
        parent = path if folder else path.parent
        above = next((p for p in (parent, *parent.parents) if p.exists()), None)
        if above is not None and not above.is_dir():
            raise ProblemError(f"--{option} {value!r}: {str(above)!r} is a file, not a folder")


def _positive(text: str) -> int:
    value = _count(text)
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be at least 1, got {text!r}")
    return value


def _count(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"must be a whole number, got {text!r}") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"must be >= 0, got {text!r}")
    return value


def _version() -> str:
    from directional.version import VERSION

    return VERSION


# ----------------------------------------------------------------------------- the commands


def load_problem(path: str | Path) -> Problem:
    """Read a problem file (a ProblemError names the file, line and key)."""
    from directional.interface.problemfile import Problem

    return Problem.from_file(path)


def _demo(args: argparse.Namespace, out: TextIO | None = None) -> int:
    """Write the demo's problem file and data into ``args.folder``, run it, write the results."""
    from directional.interface import demo
    from directional.interface.runs import solve

    out = sys.stdout if out is None else out
    folder = Path(args.folder)
    path = demo.prepare(folder)
    problem = load_problem(path)
    print(f"directional demo: calibrating {problem.title!r}", file=out)
    print(demo.NOTICE, file=out)
    sol = solve(problem, quiet=args.quiet)
    return finish(
        sol,
        problem,
        json_path=folder / "solution.json",
        plots=folder / "plots",
        summary=folder / "summary.txt",
        journal=problem.journal,
        out=out,
        show_files=True,
        inputs=(path, folder / "data.csv"),
        html=folder / "report.html",
    )


def _run(args: argparse.Namespace) -> int:
    import dataclasses

    from directional.interface.runs import solve

    problem = load_problem(args.problem)
    search = problem.search
    if args.starts is not None or args.workers is not None or args.replicates is not None:
        search = dataclasses.replace(
            search,
            starts=search.starts if args.starts is None else args.starts,
            workers=search.workers if args.workers is None else args.workers,
            replicates=search.replicates if args.replicates is None else args.replicates,
        )
        problem = dataclasses.replace(problem, search=search)
    journal: Path | bool | None = True
    if args.no_journal:
        journal = None
    elif args.journal:
        journal = Path(args.journal).absolute()
    _check_outputs(args)
    kept = problem.journal if journal is True else journal
    if kept is not None:
        how = "beside the problem file (no [journal] table; --no-journal: none)" if (
            journal is True and problem.journal_default) else ""
        print(f"directional: journal {_shown(kept)} {how}".rstrip(), file=sys.stderr)
    with _dask_executor(args.dask, problem) as executor:
        result = solve(
            problem, journal=journal, budget=args.budget, quiet=args.quiet, executor=executor
        )
    used = problem.journal if journal is True else journal
    return finish(result, problem, json_path=args.json, plots=args.plots, journal=used,
                  extra=args.plot_evaluations, html=args.html)


@contextlib.contextmanager
def _dask_executor(address: str | None, problem: Problem) -> Iterator[Any]:
    """An executor on the Dask scheduler at ``address`` for a many-start run (None: no Dask)."""
    if address is None:
        yield None
        return
    if problem.search.starts < 2:
        raise ProblemError("--dask runs many starts: give --starts K with K of 2 or more")
    try:
        import distributed
    except ImportError:
        raise ProblemError(
            "--dask needs the Dask extra: pip install 'directional[dask]'"
        ) from None
    try:
        client = distributed.Client(address, timeout=30)
    except (OSError, TimeoutError) as error:
        raise ProblemError(f"--dask: cannot reach the scheduler at {address!r}: {error}") from None
    try:
        yield client.get_executor()
    finally:
        client.close()


def _resume(args: argparse.Namespace) -> int:
    from directional.interface.runs import problem_of_journal, resume

    problem = problem_of_journal(args.journal, args.problem)
    _check_outputs(args)
    result = resume(args.journal, problem, budget=args.budget, quiet=args.quiet,
                    retry_failed=args.retry_failed)
    return finish(result, problem, json_path=args.json, plots=args.plots,
                  journal=Path(args.journal), extra=args.plot_evaluations, html=args.html)


def _show(args: argparse.Namespace) -> int:
    from directional.interface.runs import PROBLEM_KEY, replay

    _check_outputs(args)
    if args.evaluations is not None:
        from directional.report.evaluations import write_csv
        from directional.run.journal import read

        written = write_csv(read(args.journal), args.evaluations)
        print(f"directional: {_shown(written)}: every evaluation of the journal", file=sys.stderr)
    result, contents = replay(args.journal)
    problem = None
    noted = args.problem or contents.header.info.get(PROBLEM_KEY)
    if noted:
        try:
            problem = load_problem(noted)
        except ProblemError as error:
            print(f"directional: note: {error}; plots without report-only evaluations",
                  file=sys.stderr)
    parameters = contents.header.parameters
    return finish(result, problem, json_path=args.json, plots=args.plots,
                  journal=Path(args.journal), extra=args.plot_evaluations, parameters=parameters,
                  html=args.html)


def _check(args: argparse.Namespace) -> int:
    import numpy as np

    from directional.run.driver import call

    problem = load_problem(args.problem)
    objective = problem.make_objective()
    start = np.array([p.start for p in problem.parameters])
    print(f"{args.problem}: the problem file is valid")
    print(f"  title: {problem.title or '(none)'}")
    print(f"  parameters: {', '.join(problem.names)}")
    spec = problem.objective
    what = spec.function if spec.function else " ".join(spec.command or ())
    print(f"  objective ({spec.kind}): {what}")
    if problem.journal is not None:
        print(f"  journal: {problem.journal}")
    if problem.data is not None:
        table = problem.table()
        rows, series = table.observed.shape
        print(f"  data: {table.path.name}, {rows} rows x {series} series "
              f"({', '.join(table.names)}): the objective must give {table.size} predictions")
    tick = time.perf_counter()
    if spec.kind == "residuals":
        value, status, detail, count = _residuals_once(objective, start)
    else:
        value, status, detail = call(objective, start)
        count = None
    seconds = time.perf_counter() - tick
    if status != "ok":
        print(f"  the start point failed ({status}) after {seconds:.3g} s: {detail}")
        return UNVERIFIED
    extra = f" from {count} residuals" if count is not None else ""
    print(f"  value at the start: {value!r}{extra} ({seconds:.3g} s)")
    return OK


def _residuals_once(objective, start: np.ndarray) -> tuple[float, str, str, int | None]:
    import numpy as np

    try:
        r = np.asarray(objective(start.copy()), dtype=float).ravel()
    except Exception as error:  # the objective's failure is what check reports
        return math.inf, "failed", f"{type(error).__name__}: {error}", None
    if r.size == 0 or not np.all(np.isfinite(r)):
        return math.inf, "failed", f"the residuals are empty or not finite: {r[:10]!r}", None
    return float(r @ r), "ok", "", int(r.size)


def _bench(argv: list[str]) -> int:
    """Hand the arguments to `directional.benchmarking.main` as they are."""
    try:
        from directional.benchmarking import main as bench_main
    except ImportError as error:  # a damaged install: say so, do not pretend it ran
        print(f"directional: error: the benchmarks cannot be imported ({error}); reinstall "
              "directional", file=sys.stderr)
        return BAD_INPUT
    try:
        return int(bench_main(argv) or 0)
    except SystemExit as done:  # its own argument parser: --help, or a bad option
        return int(done.code or 0)


# ----------------------------------------------------------------------------- reports


def exit_code(sol: Solution) -> int:
    """0 for a verified minimum, else 1.

    A point where the objective is not smooth but every break is a corner (both one-sided slopes
    rise away from it) and the smooth directions curve upward is a minimum too: verdict
    ``nonsmooth`` with only corners exits 0.  A ``noisy`` verdict (the noise hides the
    curvature) is not a verified minimum: 1.
    """
    from directional.records import Verdict

    if sol.verdict is Verdict.MINIMUM:
        return OK
    breaks = getattr(sol.curvature, "breaks", ()) if sol.curvature is not None else ()
    corners = bool(breaks) and all(b.kind == "corner" for b in breaks)
    return OK if sol.verdict is Verdict.NONSMOOTH and corners else UNVERIFIED


def finish(
    result: Any,
    problem: Problem | None,
    *,
    json_path: str | Path | None = None,
    plots: str | Path | None = None,
    summary: str | Path | None = None,
    journal: Path | None = None,
    extra: int | None = None,
    parameters: Sequence | None = None,
    out: TextIO | None = None,
    show_files: bool = False,
    inputs: Sequence[Path] = (),
    html: str | Path | None = None,
) -> int:
    """Print the summary, write the requested files, say where they are; return the exit code.

    ``result`` is a `Solution`, or the `Landscape` of a many-start run: then its table of
    distinct minima comes first, the best minimum's summary and files follow, and the plots
    include the start map.
    """
    from directional.interface.runs import best
    from directional.records import Stop
    from directional.report import summary as report
    from directional.solution import CAUTION, Solution

    out = sys.stdout if out is None else out
    title = problem.title if problem is not None else ""
    parameters = list(problem.parameters) if problem is not None else parameters
    landscape = None if isinstance(result, Solution) else result
    if landscape is not None:
        # the caution ends the best minimum's summary below: said once
        table = landscape.summary().removesuffix(CAUTION).rstrip()
        print(table + "\n\nThe best minimum:\n", file=out)
    sol = best(result)
    print(report.summary_text(sol, title, failures=landscape is None), file=out)
    if landscape is not None:
        print("\n".join(report.failure_lines(landscape.history, landscape.names)), file=out)
    if journal is not None and not sol.reason.startswith("running,"):
        if sol.stop is Stop.INTERRUPTED:
            print(f"\nTo continue: directional resume {_quoted(journal)}", file=out)
        elif (sol.stop is Stop.BUDGET and "time limit" not in sol.reason) or any(
            "the budget of" in note or "the budget left" in note for note in sol.notes
        ):
            if landscape is None:
                print(f"\nTo go further, give a larger budget (it counts the {sol.evaluations} "
                      f"evaluations made): directional resume {_quoted(journal)} --budget "
                      f"{_larger_budget(sol)}", file=out)
            else:
                print(f"\nTo go further: directional resume {_quoted(journal)} --budget N, with N "
                      "above the budget of each search", file=out)
    written: list[Path] = list(inputs)
    if journal is not None and show_files:
        written.append(Path(journal))
    if summary is not None:
        written.append(report.write_summary(sol, summary, title=title))
    if json_path is not None:
        written.append(report.write_json(sol, json_path, title=title, parameters=parameters,
                                         landscape=landscape))
    # both the PNG plots and the page: their report-only evaluations are the same points, made once
    made = _Remembered(problem) if problem is not None and plots and html else None
    if plots is not None:
        written += _plots(sol, problem, Path(plots), extra, parameters, landscape, made)
    if html is not None:
        written.append(_html(result, sol, problem, Path(html), extra, parameters, journal, made))
    if written:
        print("\nFiles:", file=out)
        for path in written:
            print(f"  {_shown(path)}", file=out)
    return exit_code(sol)


def _quoted(path: Path | str) -> str:
    import shlex

    return shlex.quote(str(path))


def _shown(path: Path) -> str:
    """``path`` relative to the current folder when it lies inside it."""
    path = Path(path)
    try:
        return str(path.absolute().relative_to(Path.cwd()))
    except ValueError:
        return str(path)


def _plots(
    sol: Solution,
    problem: Problem | None,
    folder: Path,
    extra: int | None,
    parameters: Sequence | None,
    landscape: Any = None,
    made: Any = None,
) -> list[Path]:
    from directional.report.plots import affordable, write_plots

    if extra is None:
        extra = affordable(sol, PLOT_SECONDS)
    objective = fit = None
    kind = "value"
    if problem is not None:
        kind = problem.objective.kind
        if extra > 0:
            objective = made if made is not None else problem.make_objective()
        fit = problem.make_fit()
    title = problem.title if problem is not None else ""
    written = write_plots(
        sol, folder, parameters=parameters, objective=objective, kind=kind, fit=fit,
        extra=extra, title=title,
    )
    if landscape is not None and len(sol.names) >= 2:
        from directional.report.maps import start_map

        written.append(start_map(landscape, objective, folder / "starts.png", kind=kind,
                                 extra=extra, title=title))
    return written


class _Remembered:
    """The problem's objective, built on first use, remembering its result at each point."""

    def __init__(self, problem: Problem) -> None:
        self.problem = problem
        self.objective: Any = None
        self.seen: dict[bytes, Any] = {}

    def __call__(self, x: np.ndarray) -> Any:
        key = np.asarray(x, dtype=float).tobytes()
        if key not in self.seen:
            if self.objective is None:
                self.objective = self.problem.make_objective()
            self.seen[key] = self.objective(np.array(x, dtype=float))
        return self.seen[key]


def _html(
    result: Any,
    sol: Solution,
    problem: Problem | None,
    path: Path,
    extra: int | None,
    parameters: Sequence | None,
    journal: Path | None,
    made: Any = None,
) -> Path:
    """The HTML report (`directional.report.html`), its figures made as for ``--plots``."""
    from directional.report.html import origin_of, write_html
    from directional.report.plots import affordable
    from directional.solution import Solution

    if extra is None:
        extra = affordable(sol, PLOT_SECONDS)
    objective = fit = None
    kind = "value"
    if problem is not None:
        kind = problem.objective.kind
        if extra > 0:
            objective = made if made is not None else problem.make_objective()
        fit = problem.make_fit()
    history = sol.history if isinstance(result, Solution) else result.history
    origin = origin_of(problem_file=problem.source if problem is not None else None,
                       journal=journal, history=history)
    return write_html(result, path, title=problem.title if problem is not None else "",
                      parameters=parameters, kind=kind, objective=objective, fit=fit,
                      extra=extra, origin=origin)


if __name__ == "__main__":
    sys.exit(main())


def _larger_budget(sol: Any) -> int:
    """A budget that lets a resumed run go further: twice what was spent, and at least enough for
    a curvature check that the budget left could not pay for (its cost is named in the note)."""
    import re

    larger = 2 * sol.evaluations
    for note in sol.notes:
        cost = re.search(r"curvature check \((\d+) evaluations\)", note)
        if cost:
            larger = max(larger, sol.evaluations + int(cost.group(1)))
    return larger

