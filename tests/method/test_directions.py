"""The direction set of Powell's method (`directional.method.directions`), by hand computation.

Powell's (1964) replacement test: the cycle's direction replaces the one of largest decrease
``D`` unless ``f_E >= f_0`` or ``2 (f_0 - 2 f_N + f_E) (f_0 - f_N - D)² >= D (f_0 - f_E)²``
(Powell 1964, sec. 3; the expected answers below are that inequality evaluated by hand).  For a
quadratic with Hessian ``H`` and conjugate unit directions ``v_i`` (``v_iᵀ H v_j = 0``), the
curvatures ``c_i = v_iᵀ H v_i`` give back ``H = V⁻¹ diag(c) V⁻ᵀ`` (linear algebra, no source).
"""

from __future__ import annotations

import doctest
import math

import numpy as np
import pytest

from directional.method import directions
from directional.method.directions import (
    DirectionSet,
    degenerate,
    hessian_estimate,
    powell_accepts,
    principal_axes,
    principal_axes_of_estimate,
    replaced,
)

H = np.array([[2.0, 1.0], [1.0, 4.0]])
V1 = np.array([1.0, 0.0])
V2 = np.array([1.0, -2.0]) / math.sqrt(5.0)  # H v1 = (2, 1) is orthogonal to (1, -2): conjugate
CONJUGATE = DirectionSet(
    vectors=np.vstack([V1, V2]), curvatures=np.array([2.0, 14.0 / 5.0]), steps=np.array([0.1, 0.2])
)


@pytest.mark.parametrize(
    ("f0", "fn", "fe", "drop", "accept"),
    [
        (10.0, 4.0, 3.0, 5.0, True),  # 2*5*1**2 = 10 < 5*7**2 = 245
        (10.0, 4.0, 3.0, 1.0, False),  # 2*5*5**2 = 250 >= 1*7**2 = 49
        (10.0, 4.0, 10.0, 5.0, False),  # f_E >= f_0: extrapolating does not help
        (10.0, 4.0, 12.0, 5.0, False),
        (10.0, 6.0, 2.0, 3.0, True),  # 2*0*1 = 0 < 3*8**2: the line is straight
    ],
)
def test_powells_replacement_test(f0, fn, fe, drop, accept):
    assert powell_accepts(f0, fn, fe, drop) is accept


@pytest.mark.parametrize("size", [1e-300, 1e300])
def test_the_replacement_test_does_not_depend_on_the_size_of_the_values(size):
    # both sides are cubic in the values: at 1e300 they overflow unless scaled first
    assert powell_accepts(10.0 * size, 4.0 * size, 3.0 * size, 5.0 * size) is True
    assert powell_accepts(10.0 * size, 4.0 * size, 3.0 * size, 1.0 * size) is False


def test_the_hessian_of_a_quadratic_from_conjugate_directions():
    assert V1 @ H @ V2 == pytest.approx(0.0, abs=1e-15)
    assert hessian_estimate(CONJUGATE) == pytest.approx(H, rel=1e-14)


def test_no_estimate_while_a_curvature_is_unknown():
    assert hessian_estimate(principal_axes(2, 0.1)) is None
    assert principal_axes_of_estimate(principal_axes(2, 0.1)) is None


def test_principal_axes_of_the_estimate_are_the_eigenvectors_of_the_hessian():
    reset = principal_axes_of_estimate(CONJUGATE)
    # eigenvalues of [[2, 1], [1, 4]]: 3 -+ sqrt(2)
    assert np.sort(reset.curvatures) == pytest.approx([3.0 - math.sqrt(2.0), 3.0 + math.sqrt(2.0)])
    assert reset.vectors @ reset.vectors.T == pytest.approx(np.eye(2), abs=1e-14)
    for v, c in zip(reset.vectors, reset.curvatures):
        assert v @ H @ v == pytest.approx(c, rel=1e-14)
    assert reset.steps == pytest.approx([0.15, 0.15])  # the median of the steps before


def test_the_starting_set_is_the_coordinate_axes():
    start = principal_axes(3, 0.25)
    assert start.vectors.tolist() == np.eye(3).tolist()
    assert np.isnan(start.curvatures).all() and start.steps.tolist() == [0.25] * 3


def test_a_measurement_returns_a_new_set_and_keeps_only_positive_curvatures():
    start = principal_axes(2, 0.1)
    after = start.measured(1, 5.0, 0.3)
    assert after.curvatures[1] == 5.0 and after.steps[1] == 0.3
    assert np.isnan(start.curvatures).all() and start.steps.tolist() == [0.1, 0.1]  # unchanged
    assert after.measured(1, -2.0, 0.4).curvatures[1] == 5.0  # negative: not a curvature to keep
    assert after.measured(0, math.nan, 0.4).steps[0] == 0.4


def test_replacement_drops_one_direction_and_appends_the_new_one_last():
    new = np.array([1.0, 1.0]) / math.sqrt(2.0)
    out = replaced(CONJUGATE, 0, new, 3.0, 0.5)
    assert out.vectors.tolist() == [V2.tolist(), new.tolist()]
    assert out.curvatures.tolist() == [2.8, 3.0] and out.steps.tolist() == [0.2, 0.5]
    assert math.isnan(replaced(CONJUGATE, 1, new, 0.0, 0.5).curvatures[-1])


def test_a_set_of_nearly_dependent_directions_is_degenerate():
    assert not degenerate(principal_axes(3, 0.1))
    assert not degenerate(CONJUGATE)
    nearly = np.array([[1.0, 0.0], [1.0, 1e-12]])
    assert degenerate(DirectionSet(vectors=nearly, curvatures=np.ones(2), steps=np.ones(2)))


def test_docstring_examples():
    assert doctest.testmod(directions).failed == 0
