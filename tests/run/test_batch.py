"""The `Batch` record (`directional.records`): what a batch promises the driver.

Common practice, no source: a batch is frozen and its points a read-only (k, n) float array, so
nothing the driver keeps can change under it; `Batch.row`, the search's one-point batch, keeps
the same promises as the constructor.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from directional.records import Batch, Purpose


@given(hnp.arrays(float, st.integers(1, 12), elements=st.floats(allow_nan=False, width=64)),
       st.sampled_from(list(Purpose)))
def test_a_row_is_the_batch_the_constructor_makes_of_that_point(point, purpose):
    made = Batch(points=point[None, :], purpose=purpose)
    row = Batch.row(point + 0.0, purpose)
    assert row.points.shape == made.points.shape == (1, point.size)
    assert row.points.dtype == made.points.dtype == np.float64
    assert np.array_equal(row.points, made.points)
    assert (row.purpose, row.limit) == (made.purpose, made.limit) == (purpose, None)


def test_a_row_is_frozen_and_its_points_read_only():
    row = Batch.row(np.arange(3.0) + 0.0)
    assert row.purpose == Purpose.LINE
    with pytest.raises(ValueError):
        row.points[0, 0] = 1.0
    with pytest.raises(dataclasses.FrozenInstanceError):
        row.points = np.zeros((1, 3))  # type: ignore[misc]


def test_the_constructor_copies_and_refuses_what_is_not_a_k_by_n_array():
    source = np.ones((2, 3))
    batch = Batch(points=source)
    source[0, 0] = 5.0
    assert batch.points[0, 0] == 1.0
    with pytest.raises(ValueError, match="shape"):
        Batch(points=np.ones(3))
    with pytest.raises(ValueError, match="shape"):
        Batch(points=np.ones((0, 3)))
