"""Reports: the JSON document, the plots, the progress wrapper.

Outside facts used: the minimum of a shifted quadratic is its centre (analytic); JSON (RFC 8259,
sec. 6) has no infinity or NaN; the PNG signature (ISO/IEC 15948:2004, sec. 5.2).
"""

from __future__ import annotations

import io
import json
import math

import numpy as np
import pytest

import directional as dl
from directional.report import plots
from directional.report import summary as report
from directional.run.driver import Evaluation
from directional.run.progress import Progress, sum_of_squares

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


def test_plots_without_report_evaluations_use_only_the_history(solution, tmp_path):
    calls = []

    def counted(x):
        calls.append(x)
        return bowl(x)

    written = plots.write_plots(solution, tmp_path, parameters=PARAMETERS, objective=counted,
                                extra=0)
    assert {p.name for p in written} == {"history.png", "profiles.png", "path.png"}
    assert calls == []  # extra=0: nothing evaluated
    for path in written:
        assert path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_plots_spend_at_most_the_report_budget(solution, tmp_path):
    calls = []

    def counted(x):
        calls.append(x)
        return bowl(x)

    plots.write_plots(solution, tmp_path, parameters=PARAMETERS, objective=counted, extra=120)
    assert 0 < len(calls) <= 120
    # every report point stays inside the bounds
    points = np.array(calls)
    assert np.all(points[:, 0] >= -4.0) and np.all(points[:, 0] <= 4.0)
    assert np.all(points[:, 1] >= 0.1) and np.all(points[:, 1] <= 10.0)


def test_a_failing_objective_leaves_gaps_not_errors(solution, tmp_path):
    def broken(x):
        raise RuntimeError("no licence")

    written = plots.write_plots(solution, tmp_path, parameters=PARAMETERS, objective=broken,
                                extra=50)
    assert len(written) == 3


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
