"""Reports: the JSON document, the plots, the progress wrapper.

Outside facts used: the minimum of a shifted quadratic is its centre (analytic); JSON (RFC 8259,
sec. 6) has no infinity or NaN; a PNG file is valid when a general-purpose decoder
(matplotlib.image.imread, through Pillow) reads it whole.
"""

from __future__ import annotations

import io
import json
import math
from pathlib import Path

import numpy as np
import pytest
from conftest import carries_the_caution
from matplotlib import image
from matplotlib.figure import Figure

import directional as dl
from directional.method.leastsquares import sum_of_squares
from directional.report import plots
from directional.report import summary as report
from directional.run.driver import Evaluation
from directional.run.progress import Progress

PARAMETERS = [
    dl.Parameter("a", 0.0, -4.0, 4.0, unit="m"),
    dl.Parameter("k", 1.0, 0.1, 10.0, scale="log", unit="1/s"),
    dl.Parameter("c", 0.0, unit="K"),
]


def bowl(x):
    return (x[0] - 1.0) ** 2 + 3.0 * (math.log(x[1]) - math.log(2.0)) ** 2 + (x[2] + 0.5) ** 2 + 1.0


@pytest.fixture(scope="module")
def solution():
    return dl.minimize(bowl, PARAMETERS)


def test_json_document_uses_names_and_full_precision(solution, tmp_path):
    path = report.write_json(solution, tmp_path / "s.json", title="bowl", parameters=PARAMETERS)
    text = path.read_text()
    document = json.loads(text)
    assert list(document["point"]) == ["a", "k", "c"]
    for name, value in zip(solution.names, solution.point):
        assert document["point"][name] == float(value)  # bit for bit through the text
    assert document["point"]["k"] == pytest.approx(2.0, rel=1e-5)  # analytic minimum
    assert document["value"] == pytest.approx(1.0, abs=1e-9)
    assert document["parameters"]["k"] == {
        "unit": "1/s", "lower": 0.1, "upper": 10.0, "start": 1.0, "scale": "log"
    }
    # RFC 8259 has no infinity: the unbounded parameter's bounds are null
    assert document["parameters"]["c"]["lower"] is None
    assert "Infinity" not in text and "NaN" not in text
    assert document["stop"] == solution.stop.value
    assert document["verdict"] == solution.verdict.value


def test_summary_text_carries_the_title(solution):
    text = report.summary_text(solution, "A bowl")
    assert text.splitlines()[0] == "A bowl" and "best value" in text


def test_the_uncertainty_table_appears_once_and_names_a_parameter_on_a_bound():
    # y = a exp(-k t) sampled exactly with a = 2, k = 0.7; a is held below 2 by its bound, so it
    # ends on the bound and only k is free (analytic: the least-squares a is 2 without the bound).
    t = np.linspace(0.0, 3.0, 12)
    y = 2.0 * np.exp(-0.7 * t)
    sol = dl.calibrate(lambda p: p[0] * np.exp(-p[1] * t) - y, [1.0, 0.3],
                       bounds=[(0.5, 1.9), (0.1, 2.0)], names=["a", "k"])
    assert sol.active == ("a",)
    text = report.summary_text(sol, "decay")
    assert text.count("std. error") == 1  # one table, not the summary's and the report's
    row = next(line for line in text.splitlines() if line.strip().startswith("a ") and "1.9" in line)
    assert "on a bound" in row and "nan" not in row


def test_every_summary_and_the_json_carry_the_caution(solution, tmp_path):
    # README, "Caution": every result a person reads says it; a minimization as well as a fit.
    assert carries_the_caution(solution.summary().split("\n\n")[-1])  # it ends the summary
    assert carries_the_caution(report.summary_text(solution, "A bowl"))
    written = report.write_summary(solution, tmp_path / "summary.txt", title="A bowl")
    assert carries_the_caution(written.read_text(encoding="utf-8"))
    document = json.loads(report.write_json(solution, tmp_path / "s.json").read_text())
    assert carries_the_caution(document["caution"])
    bounded = [*PARAMETERS[:2], dl.Parameter("c", 0.0, -3.0, 3.0, unit="K")]  # explore needs bounds
    land = dl.explore(bowl, bounded, starts=2, seed=0, check=False)
    assert carries_the_caution(land.summary().split("\n\n")[-1])


@pytest.fixture
def drawn(monkeypatch) -> dict[str, Figure]:
    """Every figure saved while the test runs, by file name (``Figure.savefig`` watched)."""
    figures: dict[str, Figure] = {}
    save = Figure.savefig

    def watched(self, fname, *args, **kwargs):
        figures[Path(fname).name] = self
        return save(self, fname, *args, **kwargs)

    monkeypatch.setattr(Figure, "savefig", watched)
    return figures


def lines(figure: Figure, label: str) -> list:
    """The lines of ``figure`` with legend label ``label``, axes by axes."""
    return [line for ax in figure.axes for line in ax.get_lines() if line.get_label() == label]


def decoded(path: Path) -> tuple[int, int]:
    """Height and width of a PNG file decoded whole, not only its signature."""
    pixels = image.imread(path, format="png")
    assert pixels.ndim == 3 and pixels.shape[2] in (3, 4), path.name
    return pixels.shape[:2]


def test_plots_without_report_evaluations_use_only_the_history(solution, tmp_path, drawn):
    calls = []

    def counted(x):
        calls.append(x)
        return bowl(x)

    written = plots.write_plots(solution, tmp_path, parameters=PARAMETERS, objective=counted,
                                extra=0)
    assert {p.name for p in written} == {"history.png", "profiles.png", "path.png"}
    assert calls == []  # extra=0: nothing evaluated
    for path in written:
        height, width = decoded(path)
        assert height >= 300 and width >= 300, path.name
    # history: the best value so far after each evaluation of the run, in order
    (best,) = lines(drawn["history.png"], "best so far")
    values = [e.value for e in solution.history]
    assert list(best.get_xdata()) == list(range(1, len(values) + 1))
    assert list(best.get_ydata()) == list(np.minimum.accumulate(values))
    # profiles: one panel per parameter with the minimum and no report-only curve
    assert len(drawn["profiles.png"].axes) == 3
    assert lines(drawn["profiles.png"], "objective (report-only)") == []
    marks = lines(drawn["profiles.png"], "minimum")
    assert [m.get_xdata()[0] for m in marks] == list(solution.point)
    # path: every evaluation of the run, and no map (nothing to draw it from in 3 dimensions)
    evaluations = [c for ax in drawn["path.png"].axes for c in ax.collections
                   if c.get_label() == "evaluations"]
    assert len(evaluations) == 1 and len(evaluations[0].get_offsets()) == len(values)
    assert len(drawn["path.png"].axes) == 1  # no colour bar: no map


def test_plots_spend_at_most_the_report_budget(solution, tmp_path, drawn):
    calls = []

    def counted(x):
        calls.append(x.copy())
        return bowl(x)

    plots.write_plots(solution, tmp_path, parameters=PARAMETERS, objective=counted, extra=120)
    assert 0 < len(calls) <= 120
    # every report point stays inside the bounds
    points = np.array(calls)
    assert np.all(points[:, 0] >= -4.0) and np.all(points[:, 0] <= 4.0)
    assert np.all(points[:, 1] >= 0.1) and np.all(points[:, 1] <= 10.0)
    # the profiles are made of these calls: each curve is the objective along its parameter,
    # through the minimum (the other parameters at their best values)
    curves = lines(drawn["profiles.png"], "objective (report-only)")
    assert len(curves) == 3
    profiled = 0
    for i, curve in enumerate(curves):
        xs, fs = np.asarray(curve.get_xdata()), np.asarray(curve.get_ydata())
        for x, f in zip(xs, fs):
            moved = solution.point.copy()
            moved[i] = x
            assert f == pytest.approx(bowl(moved), rel=1e-12)
        profiled += len(xs) - 1  # the minimum itself is drawn from the run, not evaluated
    # the rest drew the map of the path plot: a square grid, with its colour bar
    side = math.isqrt(len(calls) - profiled)
    assert side**2 == len(calls) - profiled and side >= 5
    assert len(drawn["path.png"].axes) == 2


def test_a_failing_objective_leaves_gaps_not_errors(solution, tmp_path, drawn):
    def broken(x):
        if x[0] > 1.3:
            raise RuntimeError("no licence")
        return bowl(x)

    written = plots.write_plots(solution, tmp_path, parameters=PARAMETERS, objective=broken,
                                extra=50)
    assert [p.name for p in written] == ["history.png", "profiles.png", "path.png"]
    for path in written:
        decoded(path)
    along_a = lines(drawn["profiles.png"], "objective (report-only)")[0]
    xs, fs = np.asarray(along_a.get_xdata()), np.asarray(along_a.get_ydata())
    assert np.any(xs > 1.3) and np.any(xs <= 1.3)  # the profile crosses the failing region
    assert np.array_equal(np.isnan(fs), xs > 1.3)  # a gap exactly where the evaluation failed


def test_affordable_follows_the_evaluation_time(solution):
    assert plots.affordable(solution, seconds=20.0, most=500) <= 500
    slow = [e for e in solution.history]
    mean = float(np.mean([e.seconds for e in slow if e.status == "ok" and e.seconds > 0]))
    assert plots.affordable(solution, seconds=mean * 10, most=500) in (9, 10, 11)


def _evaluation(value, status="ok"):
    return Evaluation(index=0, point=np.zeros(1), value=value, status=status, seconds=0.01)


def test_progress_counts_every_evaluation_and_tracks_the_best():
    stream = io.StringIO()
    bar = Progress(budget=10, enabled=True, stream=stream)
    for value, status in ((5.0, "ok"), (3.0, "ok"), (math.inf, "failed"), (4.0, "ok")):
        bar(_evaluation(value, status))
    assert bar.count == 4 and bar.best == 3.0
    bar.cycle = 2
    assert "best 3" in bar.status() and "cycle 2" in bar.status()
    shown = str(bar._bar)  # the line tqdm draws now
    assert "4/10" in shown and "best 3" in shown
    bar.close()
    assert stream.getvalue().startswith("\r")


def test_progress_is_off_when_not_a_terminal():
    stream = io.StringIO()
    bar = Progress(budget=10, stream=stream)
    bar(_evaluation(1.0))
    bar.close()
    assert stream.getvalue() == "" and bar.count == 1


def test_progress_does_not_count_an_evaluation_cut_by_ctrl_c():
    bar = Progress(budget=3, enabled=False, done=2)
    bar(_evaluation(math.inf, "interrupted"))
    assert bar.count == 2 and bar.best == math.inf


def test_sum_of_squares_of_residuals():
    assert sum_of_squares([3.0, 4.0]) == 25.0  # 3-4-5 triangle
    assert math.isnan(sum_of_squares("text"))
