"""The map helpers of the reports (`directional.report.maps`): levels, report-only values, grids.

Expected values are worked by hand from the definitions in the module (common practice, no
source): levels are the lowest value, then 14 levels spaced geometrically from the ``floor``
quantile of the rise above it to the highest value; a grid holds ``f`` at every pair of
coordinates, rows along the second parameter.
"""

from __future__ import annotations

import doctest
import math

import numpy as np
import pytest
from matplotlib.figure import Figure

from directional.report import maps
from directional.report.maps import (
    BACKGROUND,
    COLOURS,
    MAP,
    PALETTE,
    contour_levels,
    evaluate_grid,
    grid_map,
    report_value,
    scaled_axes,
    scattered_map,
)


def test_levels_start_at_the_lowest_value_and_grow_geometrically_to_the_highest():
    values = np.array([1.0, 2.0, 3.0, 5.0, 11.0, math.nan, math.inf])
    levels = contour_levels(values)
    assert levels[0] == 1.0 and levels[-1] == 11.0  # the finite extremes
    rises = levels[1:] - 1.0
    ratios = rises[1:] / rises[:-1]
    assert ratios == pytest.approx(np.full(ratios.size, ratios[0]), rel=1e-9)  # geometric
    # the first rise is the 2 % quantile of the rises (1, 2, 4, 10): 1 + 0.02 * 3 * (2 - 1)
    assert rises[0] == pytest.approx(1.06, rel=1e-12)


@pytest.mark.parametrize(
    "values", [np.array([1.0, 2.0, 3.0]), np.full(10, 4.0), np.array([1.0, math.nan] * 3)]
)
def test_no_levels_for_fewer_than_four_finite_values_or_a_flat_map(values):
    assert contour_levels(values) is None


def test_a_grid_holds_the_function_at_every_pair_rows_along_the_second_parameter():
    seen = []

    def f(x):
        seen.append(x.copy())
        return x[0] + 10.0 * x[2]

    grid = evaluate_grid(f, np.array([0.0, 7.0, 0.0]), (0, 2), np.array([1.0, 2.0]),
                         np.array([3.0, 4.0, 5.0]))
    assert grid.tolist() == [[31.0, 32.0], [41.0, 42.0], [51.0, 52.0]]
    assert all(x[1] == 7.0 for x in seen) and len(seen) == 6  # the others held at the centre


def test_report_values_are_numbers_or_nan_never_an_error():
    def failing(x):
        raise RuntimeError("solver diverged")

    assert report_value(lambda x: np.array([3.0, 4.0]), "residuals")(np.zeros(2)) == 25.0
    assert report_value(lambda x: 2.5, "value")(np.zeros(1)) == 2.5
    assert report_value(lambda x: np.array([2.5]), "value")(np.zeros(1)) == 2.5
    for objective, kind in [(failing, "value"), (lambda x: "text", "value"),
                            (lambda x: [1.0, 2.0], "value"), (lambda x: math.inf, "value"),
                            (lambda x: [1e200, 1e200], "residuals"), (failing, "residuals")]:
        assert math.isnan(report_value(objective, kind)(np.zeros(1)))


def test_a_report_value_gets_a_copy_of_the_point():
    point = np.array([1.0, 2.0])
    report_value(lambda x: x.fill(0.0) or 1.0, "value")(point)
    assert point.tolist() == [1.0, 2.0]


@pytest.mark.parametrize("look", [MAP, BACKGROUND])
def test_the_maps_are_drawn_or_declined(look):
    fig = Figure()
    ax = fig.add_subplot()
    g = np.linspace(-1.0, 1.0, 6)
    bowl = g[None, :] ** 2 + g[:, None] ** 2
    assert grid_map(fig, ax, g, g, bowl, look=look, label="objective")
    assert not grid_map(fig, ax, g, g, np.ones((6, 6)), look=look, label="objective")  # flat
    rng = np.random.default_rng(3)
    x, y = rng.uniform(0.1, 2.0, 30), rng.uniform(0.1, 2.0, 30)
    assert scattered_map(fig, ax, x, y, x**2 + y**2, look=look, label="s", log=(True, False))
    assert not scattered_map(fig, ax, x[:5], y[:5], x[:5], look=look, label="s")  # too few
    line = np.linspace(0.0, 1.0, 12)  # all on one line: no triangulation
    assert not scattered_map(fig, ax, line, line, line, look=look, label="s")


def test_scaled_axes_follow_the_scale_not_the_range_and_print_plain_numbers():
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    fig = Figure()
    ax = fig.add_subplot()
    scaled_axes(ax, (0.3, 0.6), (1e-5, 1.0), (True, True))  # x: less than a decade, still log
    FigureCanvasAgg(fig).draw()
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    for axis in (ax.xaxis, ax.yaxis):
        low, high = axis.get_view_interval()
        texts = [t.get_text() for t in axis.get_ticklabels()
                 if t.get_text() and low <= t.get_position()[axis is ax.yaxis] <= high]
        assert 2 <= len(texts) <= 7, texts  # matplotlib's default labels minor ticks of 0.3-0.6 too
        for text in texts:  # no exponent notation to decode
            float(text.replace("\N{MINUS SIGN}", "-"))
    fig = Figure()
    ax = fig.add_subplot()
    scaled_axes(ax, (0.3, 0.6), (-1.0, 1.0), (False, False))
    assert ax.get_xscale() == "linear" and ax.get_xlim() == (0.3, 0.6)


def test_the_start_map_colours_are_the_palette():
    # Okabe & Ito (2008): the seven colours, then a grey
    assert set(COLOURS[:7]) == set(PALETTE.values()) and len(COLOURS) == 8


def test_docstring_examples():
    assert doctest.testmod(maps).failed == 0
