"""The plots' faults, checked on the figures' own data: scales, tick label texts, plotted arrays.

Every figure is caught as it is saved (`Figure.savefig` wrapped), drawn again with the Agg
renderer, and read back: no test here is content that a file exists.

Outside facts used: Rosenbrock's function (Rosenbrock 1960; Moré, Garbow & Hillstrom 1981,
problem 1) has its curved valley along x2 = x1**2 and its minimum 0 at (1, 1); the minimum of a
shifted quadratic is its centre (analytic).  Everything else is common practice, no source.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.collections import PathCollection, QuadMesh
from matplotlib.contour import ContourSet
from matplotlib.figure import Figure

import directional as dl
from directional.report import maps, plots
from directional.report.maps import start_map


@pytest.fixture
def figures(monkeypatch):
    """Every figure saved during the test, by file name."""
    caught: dict[str, Figure] = {}
    original = Figure.savefig

    def catching(self, fname, *args, **kwargs):
        caught[Path(fname).name] = self
        return original(self, fname, *args, **kwargs)

    monkeypatch.setattr(Figure, "savefig", catching)
    return caught


def drawn(fig: Figure):
    """Draw ``fig`` with Agg; return its renderer and its pixels (rows from the top)."""
    canvas = FigureCanvasAgg(fig)
    canvas.draw()
    return canvas.get_renderer(), np.asarray(canvas.buffer_rgba())


def labels(axis) -> list:
    return [t for t in axis.get_ticklabels() if t.get_visible() and t.get_text()]


def overlapping(texts, renderer) -> list[tuple[str, str]]:
    boxes = [(t.get_text(), t.get_window_extent(renderer)) for t in texts]
    return [(a, b) for k, (a, box) in enumerate(boxes) for b, other in boxes[k + 1:]
            if box.overlaps(other)]


def colour_bar(fig: Figure):
    """The colour bar's axes: the one whose label names the mapped value."""
    return next(ax for ax in fig.axes if ax is not fig.axes[0] and ax.get_ylabel())


# ----------------------------------------------------------------------------- colour bar labels


def raised_bowl(x):
    # a value far from zero with small rises: levels 25.5001, 25.501 ... printed with %.3g all
    # read "25.5"
    return 25.5 + (x[0] - 1.0) ** 2 + 10.0 * (x[1] - 2.0) ** 2


@pytest.mark.parametrize("extra", [0, 400])
def test_colour_bar_labels_all_differ(figures, tmp_path, extra):
    sol = dl.minimize(raised_bowl, [dl.Parameter("a", -3.0, -5.0, 5.0),
                                    dl.Parameter("b", 5.0, -5.0, 8.0)])
    plots.write_plots(sol, tmp_path, objective=raised_bowl, extra=extra)
    fig = figures["path.png"]
    renderer, _ = drawn(fig)
    texts = [t.get_text() for t in labels(colour_bar(fig).yaxis)]
    assert len(texts) >= 3
    assert len(set(texts)) == len(texts), texts


def test_start_map_colour_bar_labels_all_differ(figures, tmp_path):
    parameters = [dl.Parameter("a", 0.0, -5.0, 5.0), dl.Parameter("b", 0.0, -5.0, 8.0)]
    landscape = dl.explore(raised_bowl, parameters, starts=4, seed=1)
    for objective, name in ((None, "coarse.png"), (raised_bowl, "grid.png")):
        start_map(landscape, objective, tmp_path / name, extra=100)
        renderer, _ = drawn(figures[name])
        texts = [t.get_text() for t in labels(colour_bar(figures[name]).yaxis)]
        assert len(texts) >= 3 and len(set(texts)) == len(texts), (name, texts)


def test_level_format_prints_close_levels_differently():
    levels = np.array([25.5, 25.5001, 25.501, 25.51, 25.6])
    form = maps.level_format(levels)
    assert len({form % v for v in levels}) == 5
    assert maps.level_format(np.array([1.0, 10.0, 100.0])) == "%.3g"  # no digit more than needed


# ----------------------------------------------------------------------------- profiles' ticks


def narrow(x):
    # a sharp minimum at 0.2912: the profile spans about 0.005, where matplotlib's default chose
    # eleven labels "0.2885 0.2890 ..." that ran into each other
    return 1.0 + 1e5 * (x[0] - 0.2912) ** 2 + (x[1] - 1.0) ** 2


def test_profile_tick_labels_do_not_overlap_on_a_narrow_range(figures, tmp_path):
    sol = dl.minimize(narrow, [dl.Parameter("p", 0.29, 0.0, 1.0), dl.Parameter("q", 0.0, -3, 3)])
    plots.write_plots(sol, tmp_path, objective=narrow, extra=60)
    fig = figures["profiles.png"]
    renderer, _ = drawn(fig)
    for ax in fig.axes:
        texts = labels(ax.xaxis)
        assert len(texts) >= 2
        assert overlapping(texts, renderer) == [], ax.get_xlabel()
        assert len({t.get_text() for t in texts}) == len(texts)
    assert fig.axes[0].get_xlim()[1] - fig.axes[0].get_xlim()[0] < 0.01  # the case is narrow


# ----------------------------------------------------------------------------- log axes


def rate_bowl(x):
    # k (log-scaled) sharply determined around 0.45: its profile spans far less than a decade;
    # m (log-scaled) loosely determined: its profile spans decades
    return (10.0 * math.log(x[0] / 0.45)) ** 2 + (0.2 * math.log(x[1] / 3e-3)) ** 2 + 2.0


RATES = [
    dl.Parameter("k", 0.3, 0.01, 3.0, scale="log", unit="1/h"),
    dl.Parameter("m", 1e-2, 1e-6, 1.0, scale="log"),
    dl.Parameter("c", 0.0, -1.0, 1.0),
]


def rate_objective(x):
    return rate_bowl(x) + (x[2] - 0.1) ** 2


def test_log_scaled_parameters_get_log_axes_whatever_their_range(figures, tmp_path):
    sol = dl.minimize(rate_objective, RATES)
    plots.write_plots(sol, tmp_path, parameters=RATES, objective=rate_objective, extra=200)
    profiles = figures["profiles.png"]
    renderer, _ = drawn(profiles)
    by_name = {ax.get_xlabel().split(" ")[0]: ax for ax in profiles.axes}
    assert by_name["k"].get_xscale() == "log" and by_name["m"].get_xscale() == "log"
    assert by_name["c"].get_xscale() == "linear"
    low, high = by_name["k"].get_xlim()
    assert high / low < 10.0  # less than a decade: the case that used to get a linear axis
    low, high = by_name["m"].get_xlim()
    assert high / low > 10.0
    for ax in profiles.axes:
        texts = labels(ax.xaxis)
        assert len(texts) >= 2, ax.get_xlabel()
        assert overlapping(texts, renderer) == []
        for t in texts:  # plain numbers, no exponent notation to decode
            float(t.get_text().replace("\N{MINUS SIGN}", "-"))
    path = figures["path.png"]
    drawn(path)
    ax = path.axes[0]
    scales = {ax.get_xlabel().split(" ")[0]: ax.get_xscale(),
              ax.get_ylabel().split(" ")[0]: ax.get_yscale()}
    for name, scale in scales.items():
        assert scale == ("log" if name in ("k", "m") else "linear"), scales


def test_start_map_axes_follow_the_scales(figures, tmp_path):
    parameters = RATES[:2]
    landscape = dl.explore(rate_bowl, parameters, starts=3, seed=2)
    start_map(landscape, None, tmp_path / "starts.png")
    ax = figures["starts.png"].axes[0]
    renderer, _ = drawn(figures["starts.png"])
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    assert overlapping(labels(ax.xaxis), renderer) == []


# ----------------------------------------------------------------------------- history


def fragile(x):
    if x[0] > 1.5:
        raise RuntimeError("the solver diverged")
    return (x[0] - 1.0) ** 2 + (x[1] + 2.0) ** 2 - 40.0  # negative values


def test_history_caption_covers_no_failure_and_the_start_is_in_view(figures, tmp_path):
    sol = dl.minimize(fragile, [dl.Parameter("a", -6.0, -8.0, 8.0), dl.Parameter("b", 6.0)])
    assert sol.failures > 0 and sol.value < 0
    plots.write_plots(sol, tmp_path, extra=0)
    fig = figures["history.png"]
    renderer, _ = drawn(fig)
    ax = fig.axes[0]
    crosses = next(c for c in ax.collections
                   if isinstance(c, PathCollection) and c.get_label().startswith("failed"))
    centres = ax.transData.transform(crosses.get_offsets())
    assert len(centres) == sol.failures
    half = math.sqrt(crosses.get_sizes()[0]) * fig.dpi / 72.0 / 2.0
    covers = [t for t in fig.findobj(lambda a: hasattr(a, "get_text") and a.get_visible())
              if t.get_text().strip()]
    legend = ax.get_legend().get_window_extent(renderer)
    for x, y in centres:
        for box in [t.get_window_extent(renderer) for t in covers] + [legend]:
            assert not (box.x0 - half < x < box.x1 + half and box.y0 - half < y < box.y1 + half)
    # the start's value (the first evaluation, the highest here) is inside the axis
    first = next(e.value for e in sol.history if e.status == "ok")
    assert ax.get_ylim()[0] < first <= ax.get_ylim()[1]


# ----------------------------------------------------------------------------- the map


def rosenbrock(x):
    # Rosenbrock (1960); MGH 1981 problem 1: a curved valley along x2 = x1**2
    return 100.0 * (x[1] - x[0] ** 2) ** 2 + (1.0 - x[0]) ** 2


def test_path_map_is_a_whole_shading_of_the_evaluated_values(figures, tmp_path):
    sol = dl.minimize(rosenbrock, [dl.Parameter("x1", -1.2, -2.0, 2.0),
                                   dl.Parameter("x2", 1.0, -1.0, 3.0)])
    plots.write_plots(sol, tmp_path, objective=rosenbrock, extra=460)
    fig = figures["path.png"]
    _, pixels = drawn(fig)
    ax = fig.axes[0]
    mesh = next(c for c in ax.collections if isinstance(c, QuadMesh))
    assert not any(isinstance(c, ContourSet) for c in ax.collections)  # no contour beads
    nodes = mesh.get_coordinates()
    values = np.asarray(mesh.get_array()).reshape(nodes.shape[:2])
    expected = np.array([[rosenbrock(p) for p in row] for row in nodes])
    np.testing.assert_allclose(values, expected, rtol=1e-12)
    assert nodes.shape[0] >= 15 and not np.ma.is_masked(mesh.get_array())
    # no white strip or hole: inside the axes every pixel is coloured (the white start square
    # is the only white thing there, well under 1 % of the area)
    box = ax.get_window_extent()
    height = pixels.shape[0]
    inside = pixels[int(height - box.y1) + 2:int(height - box.y0) - 2,
                    int(box.x0) + 2:int(box.x1) - 2, :3].astype(int)
    white = np.all(inside > 240, axis=2).mean()
    assert white < 0.01, white


def test_start_map_is_the_same_whole_shading_as_the_path_map(figures, tmp_path):
    # one map module draws both (`maps.grid_map`): the start map's background is the Gouraud
    # shading of its report-only values too, rasterized, with no contour beads
    parameters = [dl.Parameter("x1", -1.2, -2.0, 2.0), dl.Parameter("x2", 1.0, -1.0, 3.0)]
    landscape = dl.explore(rosenbrock, parameters, starts=4, seed=1)
    start_map(landscape, rosenbrock, tmp_path / "starts.png", extra=400)
    fig = figures["starts.png"]
    drawn(fig)
    ax = fig.axes[0]
    mesh = next(c for c in ax.collections if isinstance(c, QuadMesh))
    assert not any(isinstance(c, ContourSet) for c in ax.collections)
    assert mesh.get_rasterized()
    nodes = mesh.get_coordinates()
    values = np.asarray(mesh.get_array()).reshape(nodes.shape[:2])
    expected = np.array([[rosenbrock(p) for p in row] for row in nodes])
    np.testing.assert_allclose(values, expected, rtol=1e-12)
    assert nodes.shape[:2] == (20, 20)  # the grid of at most ``extra`` evaluations


# ----------------------------------------------------------------------------- residuals


TIMES = np.array([0.0, 1.0, 2.0, 3.0, 4.0, 6.0, 8.0])
DATA = np.array([10.2, 6.0, 3.9, 2.1, 1.4, 0.55, 0.16])  # invented for this test


def model(x, t=TIMES):
    return x[0] * np.exp(-x[1] * t)


def test_residuals_are_model_minus_data(figures, tmp_path):
    def residuals(x):
        return (model(x) - DATA) / 0.1

    def fit(x):
        return [{"name": "amount", "x": TIMES, "observed": DATA, "predicted": model(x),
                 "sigma": 0.1}]

    parameters = [dl.Parameter("a", 5.0, 0.1, 50.0), dl.Parameter("k", 0.1, 1e-3, 5.0, scale="log")]
    sol = dl.calibrate(residuals, parameters)
    plots.write_plots(sol, tmp_path, parameters=parameters, objective=residuals,
                      kind="residuals", fit=fit, extra=50)
    ax = figures["residuals.png"].axes[0]
    dots = next(line for line in ax.get_lines() if line.get_label() == "residual")
    np.testing.assert_allclose(dots.get_ydata(), residuals(sol.point), rtol=1e-12)
    assert "model − data" in ax.get_ylabel()


# ----------------------------------------------------------------------------- colours

# Okabe & Ito (2008), "Color Universal Design": black, orange, sky blue, bluish green, yellow,
# blue, vermilion, reddish purple
OKABE_ITO = ("#000000", "#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00",
             "#CC79A7")


def test_every_drawn_colour_is_colour_blind_safe(figures, tmp_path):
    from matplotlib.colors import to_hex, to_rgba_array
    from matplotlib.lines import Line2D
    from matplotlib.patches import Polygon, Rectangle

    def residuals(x):
        return (model(x) - DATA) / 0.1

    def fit(x):
        return [{"name": "amount", "x": TIMES, "observed": DATA, "predicted": model(x),
                 "sigma": 0.1}]

    parameters = [dl.Parameter("a", 5.0, 0.1, 50.0), dl.Parameter("k", 0.1, 1e-3, 5.0, scale="log")]
    sol = dl.calibrate(residuals, parameters)
    plots.write_plots(sol, tmp_path, parameters=parameters, objective=residuals,
                      kind="residuals", fit=fit, extra=100)
    failing = dl.minimize(fragile, [dl.Parameter("a", -6.0, -8.0, 8.0), dl.Parameter("b", 6.0)])
    plots.write_plots(failing, tmp_path / "failing", extra=0)  # the failures' crosses too
    landscape = dl.explore(raised_bowl, [dl.Parameter("a", 0.0, -5.0, 5.0),
                                         dl.Parameter("b", 0.0, -5.0, 8.0)], starts=4, seed=1)
    start_map(landscape, None, tmp_path / "starts.png")
    assert {"history.png", "profiles.png", "path.png", "fit.png", "residuals.png",
            "starts.png"} <= set(figures)
    seen = set()
    for fig in figures.values():
        for artist in fig.findobj():
            if getattr(artist, "get_cmap", None) and artist.get_array() is not None:
                continue  # a colour map (viridis, greys): a scale of its own, not a label colour
            colours = []
            if isinstance(artist, Line2D):
                colours += [artist.get_color(), artist.get_markerfacecolor()]
            elif isinstance(artist, Rectangle | Polygon) and artist.axes is not None:
                if artist is artist.axes.patch:
                    continue
                colours.append(artist.get_facecolor())
            elif hasattr(artist, "get_facecolor") and hasattr(artist, "get_offsets"):
                colours += list(to_rgba_array(artist.get_facecolor()))
            for colour in colours:
                if colour is None or (isinstance(colour, str) and colour == "none"):
                    continue
                rgba = to_rgba_array(colour)[0]
                if rgba[3] == 0 or np.ptp(rgba[:3]) < 0.01:  # invisible, or a grey
                    continue
                seen.add(to_hex(rgba[:3]).upper())
    assert seen and seen <= set(OKABE_ITO), seen - set(OKABE_ITO)
