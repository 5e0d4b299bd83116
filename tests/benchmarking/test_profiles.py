"""Checks of the data and performance profiles against their published definitions.

Moré & Wild (2009), "Benchmarking derivative-free optimization algorithms", SIAM J. Optim. 20:
convergence test eq. (2.2), data profile eq. (2.7).  Dolan & Moré (2002), "Benchmarking
optimization software with performance profiles", Math. Program. 91: performance profile
(their eq. 1 and the properties stated after it).  The small matrices below are worked by hand.
"""

from __future__ import annotations

import math

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from directional.benchmarking import profiles

counts_matrices = hnp.arrays(
    float,
    hnp.array_shapes(min_dims=2, max_dims=2, min_side=1, max_side=6),
    elements=st.one_of(st.integers(1, 500).map(float), st.just(math.inf)),
)


def test_convergence_test_by_hand():
    # Moré & Wild (2009) eq. 2.2: f0 - f >= (1 - tau)(f0 - fL).  f0 = 10, fL = 0, tau = 0.1:
    # need f <= 1.0; the history reaches 0.5 at the 4th evaluation.
    history = profiles.best_so_far([10.0, 4.0, 1.5, 0.5, 0.0])
    assert profiles.solved_after(history, 10.0, 0.0, 1e-1) == 4.0
    assert profiles.solved_after(history, 10.0, 0.0, 1e-3) == 5.0
    assert profiles.solved_after(history[:4], 10.0, 0.0, 1e-3) == math.inf


def test_no_improvement_by_anyone_counts_as_solved_at_once():
    # Moré & Wild (2009) eq. 2.2 with f0 = fL: the right-hand side is 0, met by the start.
    assert profiles.solved_after(np.array([3.0, 3.0]), 3.0, 3.0, 1e-7) == 1.0


def test_failures_never_count():
    history = profiles.best_so_far([math.nan, math.inf, 2.0])
    assert history[:2].tolist() == [math.inf, math.inf]
    assert profiles.solved_after(history, 5.0, 2.0, 1e-1) == 3.0


def test_solve_counts_take_f_low_from_the_best_solver():
    # Two solvers on one pair, f0 = 8: solver 0 ends at 4, solver 1 at 0, so fL = 0 and for
    # tau = 0.5 a solver must reach 4 (Moré & Wild 2009, eq. 2.2).
    h0 = profiles.best_so_far([8.0, 6.0, 4.0])
    h1 = profiles.best_so_far([8.0, 7.0, 5.0, 0.0])
    counts = profiles.solve_counts([[h0, h1]], [8.0], 0.5)
    assert counts.tolist() == [[3.0, 4.0]]


def test_data_profile_by_hand():
    # Moré & Wild (2009) eq. 2.7: d_s(alpha) = share of pairs with t_ps / (n_p + 1) <= alpha.
    counts = np.array([[3.0, 9.0], [4.0, math.inf], [12.0, 2.0]])
    sizes = [2, 1, 3]  # n + 1 = 3, 2, 4
    d = profiles.data_profile(counts, sizes, [1, 2, 3])
    assert d.tolist() == [[1 / 3, 1 / 3], [2 / 3, 1 / 3], [1.0, 2 / 3]]


def test_performance_profile_by_hand():
    # Dolan & Moré (2002): rho_s(alpha) = share of pairs with t_ps / min_s t_ps <= alpha.
    counts = np.array([[10.0, 20.0, math.inf], [30.0, 15.0, 15.0], [math.inf] * 3])
    rho = profiles.performance_profile(counts, [1.0, 2.0, math.inf])
    assert rho.tolist() == [[1 / 3, 1 / 3, 1 / 3], [2 / 3, 2 / 3, 1 / 3], [2 / 3, 2 / 3, 1 / 3]]


@settings(max_examples=60, deadline=None)
@given(counts_matrices)
def test_profiles_are_shares_that_grow_with_the_budget(counts):
    sizes = [1 + (p % 4) for p in range(counts.shape[0])]
    budgets = [0.5, 1, 2, 5, 10, 100, 1000]
    d = profiles.data_profile(counts, sizes, budgets)
    assert np.all((0 <= d) & (d <= 1))
    assert np.all(np.diff(d, axis=0) >= 0)
    factors = [1, 1.5, 2, 8, 64, math.inf]
    rho = profiles.performance_profile(counts, factors)
    assert np.all(np.diff(rho, axis=0) >= 0)
    # Dolan & Moré (2002): rho_s at infinity is the share of pairs solver s solves at all ...
    assert np.allclose(rho[-1], np.mean(np.isfinite(counts), axis=0))
    # ... and at alpha = 1 some solver is fastest on every pair anyone solves.
    anyone = np.mean(np.any(np.isfinite(counts), axis=1))
    assert rho[0].sum() >= anyone - 1e-12


@settings(max_examples=60, deadline=None)
@given(
    st.lists(st.floats(-1e6, 1e6, allow_nan=False), min_size=1, max_size=30),
    st.sampled_from(profiles.TAUS),
)
def test_solved_after_is_the_first_evaluation_that_passes(values, tau):
    history = profiles.best_so_far(values)
    f0, f_low = values[0], float(np.min(values))
    k = profiles.solved_after(history, f0, f_low, tau)
    passes = [f0 - h >= (1 - tau) * (f0 - f_low) for h in history]
    assert k == passes.index(True) + 1  # the best value itself always passes


def test_docstring_examples():
    import doctest

    from directional.benchmarking import baselines, scaling, solvers

    for module in (profiles, baselines, scaling, solvers):
        failed, attempted = doctest.testmod(module)
        assert attempted > 0, f"{module.__name__} has no examples"
        assert failed == 0, module.__name__
