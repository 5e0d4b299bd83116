"""The scaled coordinates of the search (`directional.method.space`), against hand computation.

Each parameter is searched in ``u = (y - y0) / s`` with ``y = x`` or ``ln x`` (log scale), ``y0``
the start and ``s`` the width of the bounds in ``y`` (else ``|y0|``, else 1): the expected values
below are that formula worked by hand (common practice, no source).
"""

from __future__ import annotations

import doctest
import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import directional as dl
from directional.method import space as space_module
from directional.method.space import build_space, space_from_parameters

A = dl.Parameter("a", 1.0, 0.0, 4.0)  # linear, width 4
K = dl.Parameter("k", 1.0, 0.1, 10.0, scale="log")  # log, width ln 100
C = dl.Parameter("c", -2.0)  # unbounded: scale |start| = 2
Z = dl.Parameter("z", 0.0)  # unbounded at 0: scale 1


def test_the_scale_is_the_width_of_the_bounds_else_the_start_else_one():
    space = space_from_parameters([A, K, C, Z])
    assert space.scale == pytest.approx([4.0, math.log(100.0), 2.0, 1.0], rel=1e-15)
    assert space.lower_u == pytest.approx([-0.25, -0.5, -math.inf, -math.inf])
    assert space.upper_u == pytest.approx([0.75, 0.5, math.inf, math.inf])
    assert space.names == ("a", "k", "c", "z") and space.size == 4


def test_points_map_by_hand():
    space = space_from_parameters([A, K, C, Z])
    x = np.array([3.0, 10.0, 0.0, -5.0])
    # (3 - 1) / 4, ln 10 / ln 100, (0 + 2) / 2, -5 / 1
    assert space.to_scaled(x) == pytest.approx([0.5, 0.5, 1.0, -5.0], rel=1e-14)
    assert space.to_user(np.array([0.5, -0.5, 1.0, -5.0])) == pytest.approx(
        [3.0, 0.1, 0.0, -5.0], rel=1e-14, abs=1e-15
    )


def test_mapping_back_is_clipped_to_the_bounds_and_keeps_the_start_exactly():
    start = 0.1  # exp(ln 0.1) is not 0.1 in floating point: the start must come back bit for bit
    space = space_from_parameters([dl.Parameter("k", start, 1e-3, 10.0, scale="log"), A])
    assert space.to_user(np.zeros(2))[0] == start
    far = space.to_user(np.array([[5.0, -3.0], [-5.0, 3.0]]))
    assert far.tolist() == [[10.0, 0.0], [1e-3, 4.0]]


@settings(max_examples=60, deadline=None)
@given(
    lower=st.floats(-1e3, 1e3),
    width=st.floats(1e-3, 1e3),
    fraction=st.floats(0.0, 1.0),
    log=st.booleans(),
)
def test_scaled_and_user_coordinates_are_inverse(lower, width, fraction, log):
    if log:
        lower = abs(lower) + 1e-3
    parameter = dl.Parameter("p", lower + 0.5 * width, lower, lower + width,
                             scale="log" if log else "linear")
    space = space_from_parameters([parameter])
    x = np.array([lower + fraction * width])
    assert space.to_user(space.to_scaled(x)) == pytest.approx(x, rel=1e-12, abs=1e-12 * width)
    assert space.lower_u[0] <= space.to_scaled(x)[0] + 1e-12 <= space.upper_u[0] + 2e-12


def test_the_feasible_segment_of_a_line():
    space = space_from_parameters([A, dl.Parameter("b", 0.0, -1.0, 1.0)])  # u in [-.25,.75] x [-.5,.5]
    u = np.zeros(2)
    assert space.segment(u, np.array([1.0, 1.0])) == pytest.approx((-0.25, 0.5))
    assert space.segment(u, np.array([1.0, -2.0])) == pytest.approx((-0.25, 0.25))
    assert space.segment(u, np.array([0.0, 0.0])) == (-math.inf, math.inf)
    # from a point on the upper bound of b, the segment still contains t = 0
    assert space.segment(np.array([0.0, 0.5]), np.array([0.0, 1.0])) == pytest.approx((-1.0, 0.0))


def test_on_bound_within_a_scaled_tolerance():
    space = space_from_parameters([A, K])
    assert space.on_bound(np.array([4.0, 1.0]), 1e-9).tolist() == [True, False]
    assert space.on_bound(np.array([8e-9, 0.1]), 1e-9).tolist() == [False, True]  # 2e-9 scaled
    assert space.on_bound(np.array([8e-9, 0.1]), 1e-8).tolist() == [True, True]


def test_build_space_from_numbers_names_bounds_and_open_ends():
    space = build_space([1.0, 2.0], [(None, 3.0), (0.0, math.inf)], names=["p", "q"])
    assert space.names == ("p", "q")
    assert space.lower.tolist() == [-math.inf, 0.0] and space.upper.tolist() == [3.0, math.inf]
    assert build_space(5.0).names == ("x0",)  # a scalar start is one parameter


@pytest.mark.parametrize(
    ("start", "bounds", "names", "message"),
    [
        ([], None, None, "shape"),
        ([[1.0, 2.0]], None, None, "flat list"),
        ("1.0", None, None, "numbers or a list of Parameter"),
        ([1.0, 2.0], [(0.0, 1.0)], None, "bounds has 1 pairs but start has 2"),
        ([1.0], [(0.0, 1.0, 2.0)], None, "parameter 'x0': bounds must be a .lower, upper. pair"),
        ([1.0, 2.0], None, ["a"], "names has 1 entries but start has 2"),
        ([1.0, 2.0], None, ["a", "a"], "'a' appears twice"),
        ([A], [(0.0, 1.0)], None, "inside each Parameter"),
    ],
)
def test_bad_arguments_name_the_culprit(start, bounds, names, message):
    with pytest.raises(dl.ProblemError, match=message):
        build_space(start, bounds, names)


def test_docstring_examples():
    assert doctest.testmod(space_module).failed == 0


@settings(max_examples=200, deadline=None)
@given(
    st.lists(
        st.tuples(  # no start so small that a unit scale of |start| overflows the division
            st.one_of(st.sampled_from([0.0, -0.0]), st.floats(1e-6, 1e6), st.floats(-1e6, -1e-6)),
            st.one_of(st.none(), st.floats(0.0, 1e3)),
            st.one_of(st.none(), st.floats(1e-3, 1e3)),
        ),
        min_size=1,
        max_size=6,
    )
)
def test_linear_parameters_skip_the_logs_with_the_same_bits(rows):
    """With no log-scaled parameter the space is built without the log selections; every field
    must be what the general selections give, bit for bit (a start of -0.0 included)."""
    parameters = [
        dl.Parameter(f"p{i}", start, -math.inf if below is None else start - below,
                     math.inf if above is None else start + above)
        for i, (start, below, above) in enumerate(rows)
    ]
    space = space_from_parameters(parameters)
    start = np.array([p.start for p in parameters])
    lower = np.array([p.lower for p in parameters])
    upper = np.array([p.upper for p in parameters])
    log = np.zeros(len(parameters), dtype=bool)
    with np.errstate(divide="ignore"):
        ylo = np.where(log, np.log(np.where(log, lower, 1.0)), lower)
        yhi = np.where(log, np.log(np.where(log, upper, 1.0)), upper)
    origin = np.where(log, np.log(np.where(log, start, 1.0)), start)
    width = yhi - ylo
    scale = np.where(np.isfinite(width), width, np.where(origin != 0.0, np.abs(origin), 1.0))
    for got, expected in ((space.origin, origin), (space.scale, scale),
                          (space.lower_u, (ylo - origin) / scale),
                          (space.upper_u, (yhi - origin) / scale)):
        assert got.tobytes() == expected.tobytes()
