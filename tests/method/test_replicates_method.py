"""The pure side of replicates: the mean a point gets, the pooled spread, the option's checks.

Sources: the pooled variance of a one-way layout (common practice, e.g. D. C. Montgomery, *Design
and Analysis of Experiments*, ch. 3) is checked against numpy's own variance; the rest is the
project's documented policy (`directional.method.replicates`).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from directional.errors import ProblemError
from directional.method.replicates import (
    combined,
    combined_vector,
    pooled,
    replicate_count,
)

finite = st.floats(min_value=-1e6, max_value=1e6, allow_nan=False)


def test_the_mean_of_the_runs_that_succeeded():
    """The documented policy: failures left out, all failed is a failure, -inf wins."""
    assert combined([1.0, 2.0, 4.0]) == pytest.approx(7.0 / 3.0, rel=1e-15)
    assert combined([1.0, math.inf, 4.0]) == 2.5
    assert combined([math.inf, math.inf]) == math.inf
    assert combined([1.0, -math.inf, math.inf]) == -math.inf


@settings(max_examples=60, deadline=None)
@given(st.lists(finite, min_size=2, max_size=8), st.randoms(use_true_random=False))
def test_the_mean_does_not_depend_on_the_order_of_the_runs(values, random):
    """Replay compares points bit for bit: the runs may come back in any order."""
    shuffled = list(values)
    random.shuffle(shuffled)
    assert combined(shuffled) == combined(values)
    assert combined(values) == math.fsum(values) / len(values)  # correctly rounded sum


@settings(max_examples=40, deadline=None)
@given(st.lists(st.lists(finite, min_size=3, max_size=3), min_size=2, max_size=6),
       st.randoms(use_true_random=False))
def test_the_mean_vector_does_not_depend_on_the_order(rows, random):
    vectors = [np.array(r) for r in rows]
    shuffled = list(vectors)
    random.shuffle(shuffled)
    assert combined_vector(shuffled).tobytes() == combined_vector(vectors).tobytes()
    np.testing.assert_allclose(combined_vector(vectors), np.mean(vectors, axis=0), rtol=1e-12,
                               atol=1e-9)


def test_the_mean_vector_leaves_out_failed_runs():
    good = np.array([1.0, 2.0])
    assert combined_vector([good, np.array([np.nan, 1.0]), None, 3 * good]).tolist() == [2.0, 4.0]
    assert combined_vector([None, np.array([np.inf, 0.0])]) is None


def test_the_pooled_spread_is_the_pooled_variance():
    """Against numpy: sum of the groups' (n - 1) s² over the sum of (n - 1)."""
    rng = np.random.default_rng(5)
    groups = [rng.normal(size=n) for n in (2, 3, 5, 4)]
    expected = sum((g.size - 1) * np.var(g, ddof=1) for g in groups) / sum(g.size - 1 for g in groups)
    found = pooled([g.tolist() for g in groups], 4)
    assert found.run == pytest.approx(math.sqrt(expected), rel=1e-13)
    assert found.mean == pytest.approx(found.run / 2.0, rel=1e-15)
    assert (found.points, found.degrees_of_freedom) == (4, 10)


def test_groups_with_fewer_than_two_good_runs_add_nothing():
    assert pooled([[1.0], [2.0, math.inf]], 2) is None
    found = pooled([[1.0, 3.0, math.inf], [5.0]], 3)
    assert (found.run, found.points, found.degrees_of_freedom) == (math.sqrt(2.0), 1, 1)


@pytest.mark.parametrize("bad", [0, -2, 2.5, True, "3", None])
def test_a_bad_count_is_refused_naming_the_key(bad):
    with pytest.raises(ProblemError, match="replicates"):
        replicate_count(bad)
    with pytest.raises(ProblemError, match=r"search\.replicates"):
        replicate_count(bad, "search.replicates")


def test_a_good_count_is_kept():
    assert replicate_count(np.int64(3)) == 3
    assert replicate_count(1) == 1
