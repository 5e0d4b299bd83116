"""Invariants of the search, checked by driving the generator directly (no driver) or via budgets."""

from __future__ import annotations

import ast
import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import directional as dl
from directional.method.search import Settings, powell
from directional.method.space import build_space
from directional.records import Batch

PURE = ["method/search.py", "method/linesearch.py", "method/directions.py", "method/space.py", "records.py"]
FORBIDDEN = {"sqlite3", "concurrent", "time", "os", "subprocess", "socket", "threading", "random"}


@pytest.mark.parametrize("module", PURE)
def test_the_algorithm_modules_do_no_io(module):
    # The method does no I/O (directional/method/__init__.py and the theory of operation at the
    # top of directional/method/search.py): it imports no clock, disk, pool or network.
    tree = ast.parse((Path(dl.__file__).parent / module).read_text())
    imported = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            imported |= {alias.name.split(".")[0] for alias in node.names}
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            imported.add(node.module.split(".")[0])
    assert not imported & FORBIDDEN


def trace(objective, space, budget=2000):
    """Drive the search with a plain function; return all batches and the outcome."""
    gen = powell(space, Settings())
    batches = []
    try:
        batch = next(gen)
        while len(batches) < budget:
            assert isinstance(batch, Batch)
            batches.append(batch.points.copy())
            batch = gen.send(np.array([objective(x) for x in batch.points]))
    except StopIteration as done:
        return batches, done.value
    raise AssertionError("the search did not stop within the budget")


def problems():
    """Random smooth problems with random boxes: a shifted, rotated quartic bowl."""
    return st.tuples(
        st.integers(1, 4),
        st.integers(0, 2**31),
        st.floats(0.1, 10),
    )


def make(n, seed, width):
    rng = np.random.default_rng(seed)
    centre = rng.uniform(-2, 2, size=n)
    q, _ = np.linalg.qr(rng.normal(size=(n, n)))
    lower = rng.uniform(-3, 0, size=n)
    upper = lower + rng.uniform(0.5, 3, size=n) * width
    start = lower + rng.uniform(0, 1, size=n) * (upper - lower)

    def f(x):
        y = q @ (x - centre)
        return float(np.sum(y**2) + 0.1 * np.sum(y**4) + y[0])

    return f, start, list(zip(lower, upper))


@settings(max_examples=30, deadline=None)
@given(problems())
def test_no_evaluation_outside_the_bounds(problem):
    f, start, bounds = make(*problem)
    seen = []
    dl.minimize(lambda x: seen.append(x.copy()) or f(x), start, bounds, check=False)
    lower = np.array([b[0] for b in bounds])
    upper = np.array([b[1] for b in bounds])
    assert all(np.all(lower <= x) and np.all(x <= upper) for x in seen)


@settings(max_examples=15, deadline=None)
@given(problems(), st.lists(st.integers(2, 120), min_size=3, max_size=6, unique=True))
def test_the_best_value_never_rises(problem, budgets):
    # Halting the same search after more evaluations never gives a worse answer.
    f, start, bounds = make(*problem)
    n = len(start)
    values = [
        dl.minimize(f, start, bounds, budget=max(b, n + 1), check=False).value
        for b in sorted(budgets)
    ]
    assert all(later <= earlier for earlier, later in zip(values, values[1:]))


@settings(max_examples=15, deadline=None)
@given(problems())
def test_two_runs_give_bit_identical_traces(problem):
    f, start, bounds = make(*problem)
    space = build_space(start, bounds)
    first, a = trace(f, space)
    second, b = trace(f, space)
    assert len(first) == len(second)
    assert all(np.array_equal(p, q) for p, q in zip(first, second))
    assert a.value == b.value and np.array_equal(a.point, b.point)


@settings(max_examples=15, deadline=None)
@given(problems(), st.floats(1e-3, 1e3))
def test_scaling_a_parameter_does_not_change_the_solution(problem, factor):
    f, start, bounds = make(*problem)
    scaled_start = np.array(start, dtype=float)
    scaled_start[0] *= factor
    scaled_bounds = [(bounds[0][0] * factor, bounds[0][1] * factor), *bounds[1:]]

    def g(x):
        y = np.array(x, dtype=float)
        y[0] /= factor
        return f(y)

    plain = dl.minimize(f, start, bounds, check=False)
    scaled = dl.minimize(g, scaled_start, scaled_bounds, check=False)
    assert scaled.point[0] / factor == pytest.approx(plain.point[0], abs=1e-4)
    assert scaled.value == pytest.approx(plain.value, abs=1e-8 * max(1.0, abs(plain.value)))


def test_a_failed_evaluation_reaches_the_search_as_infinity():
    # Driving the generator by hand: +inf values are treated as infeasible, never chosen.
    space = build_space([0.0, 0.0], [(-2, 2), (-2, 2)])

    def f(x):
        return math.inf if x[0] > 0.5 else (x[0] - 1) ** 2 + x[1] ** 2

    _, outcome = trace(f, space)
    assert math.isfinite(outcome.value)
    assert space.to_user(outcome.point)[0] <= 0.5


def test_the_first_cycle_learns_the_problems_scale_once():
    # Σ (x_i - 10)⁴ from 0: the same one-variable problem on every axis (analytic minimizer 10,
    # a hundred first steps away).  The first axis must find that scale from the first step;
    # every later axis starts from the move the one before it made, so (the problems being
    # identical) each later line search costs fewer evaluations than the first.
    n = 6
    space = build_space(np.zeros(n))
    batches, _ = trace(lambda x: float(np.sum((x - 10.0) ** 4)), space)
    points = np.vstack(batches)
    begins = [int(np.argmax(points[:, i] != 0.0)) for i in range(n)]  # first probe of axis i
    costs = np.diff(begins)
    assert costs[0] > 0
    assert np.all(costs[1:] < costs[0]), costs.tolist()
