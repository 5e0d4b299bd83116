"""Smoke test of `directional bench`: the smallest run writes RESULTS.md and the figures.

Benchmarks are not tests (their numbers go to benchmarks/RESULTS.md, written by `directional bench`;
README, "The command line"): nothing here checks a number or a time, only that the run
completes and writes what it promises.
"""

from __future__ import annotations

import numpy as np
from matplotlib import image

from directional.benchmarking import main, problems, solvers
from directional.benchmarking.runner import default_out


def test_smoke_run_writes_results_and_figures(tmp_path):
    others = tmp_path / "results"
    others.mkdir()
    (others / "journal.md").write_text("| resume | ok |\n|---|---|\n", encoding="utf-8")
    assert main(["--smoke", "--out", str(tmp_path)]) == 0
    text = (tmp_path / "RESULTS.md").read_text(encoding="utf-8")
    for heading in ("## Targets", "## 1. The Moré–Garbow–Hillstrom (1981) test set",
                    "### Quadratics", "### Optimizer overhead", "### Line search alone"):
        assert heading in text
    assert "## From `results/journal.md`" in text and "| resume | ok |" in text
    for name in ("profiles-data.png", "profiles-performance.png", "scaling.png"):
        height, width = image.imread(tmp_path / name, format="png").shape[:2]  # decoded whole
        assert height >= 300 and width >= 300, name


def test_default_output_folder(tmp_path):
    assert default_out(tmp_path) == tmp_path / "directional-bench"
    (tmp_path / "benchmarks").mkdir()
    (tmp_path / "pyproject.toml").write_text('[project]\nname = "directional"\n')
    assert default_out(tmp_path) == tmp_path / "benchmarks"


def test_every_solver_keeps_to_its_budget():
    pair = problems.pairs((1,), (1.0,))[0][0]
    for solver in solvers.solvers():
        run = solvers.record(solver, pair.problem, pair.start, 30)
        assert 0 < run.values.size <= 30, solver.name
        assert run.values[0] == pair.f0, solver.name  # every solver evaluates the start first


def test_pairs_leave_out_starts_that_fail_or_are_minimizers():
    # Moré, Garbow & Hillstrom (1981): problem 6 overflows at 100 times its start; problem 11's
    # minimizer (50, 25, 1.5) is 10 times its start.
    chosen, dropped = problems.pairs((6, 11), (1.0, 10.0, 100.0))
    labels = {(p.problem.number, p.factor) for p in chosen}
    assert (6, 100.0) not in labels and (11, 10.0) not in labels
    assert (6, 1.0) in labels and (11, 100.0) in labels
    assert len(dropped) == 2
    assert all(np.isfinite(p.f0) for p in chosen)
