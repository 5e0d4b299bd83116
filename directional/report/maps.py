"""Contour maps of the objective over two parameters: the one map module of the reports.

Two kinds of map, drawn by the same helpers:

- a *grid map* from report-only evaluations on a square grid (`evaluate_grid`, `grid_map`): a
  slice through a point, the other parameters held there;
- a *scattered map* from evaluations already made (`scattered_map`): a triangulation of the
  evaluated points, free but coarse where the searches did not go.

Levels are spaced geometrically above the lowest value (`contour_levels`), so that valleys and
slopes both show; a grid map is a smooth (Gouraud) shading coloured by the log of the rise above
the lowest value, a scattered map filled contours at those levels; colour bars print every level
differently (`level_format`).  Two looks: `MAP` (colour, the map is the picture: the search path
in `plots`) and `BACKGROUND` (grey, the map is behind the markers: the start map here).  A failed
report-only evaluation is a gap in the map, never an error.

What every figure of the reports shares lives here too: the colours (`PALETTE`, Okabe & Ito
2008), log axes exactly for log-scaled parameters with plain-number ticks (`scaled_axes`,
`readable_ticks`), and scatters of many points drawn as an image inside a vector file (`RASTER`).

The start map of an exploration (`start_map`): which start led to which minimum, over a map of
the objective.  Each start is drawn coloured by the minimum its search reached (a cross in black
when its first evaluation failed), joined by a thin line to where its search ended; the distinct
minima are stars, numbered best first.  Where the colours change from one start to its neighbour
the answer depends on the start: the picture users need before they trust one minimum.  With an
``objective`` its map is a grid map of at most ``extra`` report-only evaluations (never journaled,
never counted in the landscape); without one, a scattered map of the exploration's evaluations.

Figures are built with `matplotlib.figure.Figure`, not pyplot, so nothing global changes.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from matplotlib.figure import Figure

from directional.api.explore import Landscape
from directional.errors import ProblemError
from directional.method.leastsquares import sum_of_squares

DPI = 120
START_MAP_STYLE = {"font.size": 11, "axes.titlesize": 12, "legend.fontsize": 9, "axes.grid": False}
# The Okabe & Ito (2008) palette, told apart with the common colour-vision deficiencies; what is
# not told apart by colour is drawn in greys, and the maps' colour maps (viridis, greys) are safe too.
PALETTE = {
    "blue": "#0072B2", "orange": "#E69F00", "vermilion": "#D55E00", "green": "#009E73",
    "purple": "#CC79A7", "sky": "#56B4E9", "yellow": "#F0E442",
}
# the start map's minima, in this order (best first), a grey after the seven colours
COLOURS = tuple(PALETTE[name] for name in ("vermilion", "blue", "orange", "green", "purple", "sky",
                                           "yellow")) + ("#7f7f7f",)
RASTER = 2000  # more points than this in one scatter are drawn as an image inside a vector file


@dataclass(frozen=True, slots=True)
class Look:
    """How a map is drawn: colour map and opacity."""

    colours: str
    alpha: float


MAP = Look(colours="viridis", alpha=0.9)
BACKGROUND = Look(colours="Greys_r", alpha=0.55)


# ----------------------------------------------------------------------------- the map helpers


def contour_levels(values: np.ndarray, floor: float = 0.02) -> np.ndarray | None:
    """Levels spaced geometrically above the lowest value, so valleys and slopes both show.

    The first level above the lowest is the ``floor`` quantile of the rise above it.  None when
    fewer than four values are finite or they are all equal.

    >>> contour_levels(np.array([1.0, 2.0, 3.0, 5.0]))[[0, -1]]
    array([1., 5.])
    """
    finite = values[np.isfinite(values)]
    if finite.size < 4:
        return None
    low, high = float(finite.min()), float(finite.max())
    if not high > low:
        return None
    rise = finite - low
    smallest = max(float(np.quantile(rise[rise > 0], floor)), (high - low) * 1e-9)
    levels = low + np.concatenate(([0.0], np.geomspace(smallest, high - low, 14)))
    levels[-1] = high
    return np.unique(levels)


def level_format(levels: np.ndarray, least: int = 3) -> str:
    """The shortest ``%.Ng`` format, N >= ``least``, that prints every level differently.

    Levels close together above a large value ("25.5001, 25.501, 25.51") would otherwise carry one
    label over and over on the colour bar.

    >>> level_format(np.array([25.5, 25.5001, 25.501]))
    '%.6g'
    """
    for digits in range(least, 17):
        if len({f"{v:.{digits}g}" for v in levels}) == len(levels):
            return f"%.{digits}g"
    return "%.17g"


def readable_ticks(axis: Any, log: bool, most: int = 5) -> None:
    """At most about ``most`` + 1 major ticks on ``axis``, labelled as plain numbers.

    Call after the limits are set.  A linear axis gets "nice" steps; a log axis over a decade or
    more gets powers of ten (and 2, 5 between them when there is room), a narrower one gets nice
    linear steps, which a log axis places correctly too.  Minor ticks carry no label, so labels
    never crowd a narrow panel (matplotlib's default chooses up to nine ticks and labels the minor
    ticks of a short log axis).
    """
    from matplotlib import ticker

    low, high = sorted(axis.get_view_interval())
    plain = ticker.FuncFormatter(lambda v, _: f"{v:.6g}")
    if log and low > 0 and high / low >= 10.0:
        decades = math.log10(high / low)
        subs = (1.0,) if decades > 2.5 else (1.0, 2.0, 5.0)
        axis.set_major_locator(ticker.LogLocator(base=10.0, subs=subs, numticks=most + 2))
        axis.set_major_formatter(plain)
        axis.set_minor_formatter(ticker.NullFormatter())
    else:
        axis.set_major_locator(ticker.MaxNLocator(nbins=most, steps=[1, 2, 2.5, 5, 10]))
        if log:
            axis.set_major_formatter(plain)
            axis.set_minor_locator(ticker.NullLocator())
            axis.set_minor_formatter(ticker.NullFormatter())


def scaled_axes(
    ax: Any, x: tuple[float, float], y: tuple[float, float], log: tuple[bool, bool]
) -> None:
    """Limits ``x`` and ``y`` on ``ax``, a log axis exactly where ``log`` says, readable ticks.

    ``log`` follows each parameter's scale, whatever the range drawn, so that the same parameter
    reads the same way in every figure; `readable_ticks` keeps a narrow log range legible.
    """
    if log[0]:
        ax.set_xscale("log")
    if log[1]:
        ax.set_yscale("log")
    ax.set_xlim(*x)
    ax.set_ylim(*y)
    readable_ticks(ax.xaxis, log[0])
    readable_ticks(ax.yaxis, log[1])


def report_value(objective: Callable[[np.ndarray], Any], kind: str) -> Callable[[np.ndarray], float]:
    """The objective as a plain number for report-only evaluations, nan when it fails.

    ``kind="residuals"``: the objective returns a residual vector; its sum of squares is the value.
    """

    def value(x: np.ndarray) -> float:
        try:
            result = objective(np.array(x, dtype=float))
        except Exception:  # a failed report evaluation leaves a gap
            return math.nan
        if kind == "residuals":
            v = sum_of_squares(result)
        else:
            try:
                v = float(np.asarray(result, dtype=float).reshape(()))
            except (TypeError, ValueError):
                return math.nan
        return v if math.isfinite(v) else math.nan

    return value


def evaluate_grid(
    value: Callable[[np.ndarray], float],
    centre: np.ndarray,
    pair: tuple[int, int],
    xs: np.ndarray,
    ys: np.ndarray,
) -> np.ndarray:
    """``value`` on the grid ``xs`` x ``ys`` of parameters ``pair``, the others held at ``centre``.

    Returns an array (len(ys), len(xs)), as matplotlib's contour functions want it.
    """
    i, j = pair
    grid = np.full((len(ys), len(xs)), math.nan)
    for a, x in enumerate(xs):
        for b, y in enumerate(ys):
            point = np.array(centre, dtype=float)
            point[i], point[j] = x, y
            grid[b, a] = value(point)
    return grid


def grid_map(
    fig: Figure, ax: Any, gx: np.ndarray, gy: np.ndarray, grid: np.ndarray, *, look: Look, label: str
) -> bool:
    """A smooth shading of ``grid`` (rows along ``gy``) and a colour bar; False if flat.

    Colours follow ``log(f - f_min + d)`` (``d`` the first rise of `contour_levels`), so the valley
    and the slopes both show whatever the range.  A shading interpolated between the grid nodes
    (Gouraud) rather than filled contours: contours of a valley narrower than a grid cell break up
    into beads, and their lines crowd into white strips on steep slopes.  A failed evaluation
    leaves a gap around its node only.  Rasterized: small in a vector file.
    """
    levels = contour_levels(grid.ravel())
    if levels is None:
        return False
    from matplotlib.colors import FuncNorm

    low, d = float(levels[0]), float(levels[1] - levels[0])

    def forward(v: Any) -> Any:
        return np.log(np.maximum(np.asarray(v, dtype=float) - low, 0.0) + d)

    def inverse(t: Any) -> Any:
        return np.exp(t) - d + low

    norm = FuncNorm((forward, inverse), vmin=low, vmax=float(levels[-1]))
    shaded = ax.pcolormesh(gx, gy, np.ma.masked_invalid(grid), shading="gouraud",
                           cmap=look.colours, norm=norm, alpha=look.alpha, zorder=1,
                           rasterized=True)
    fig.colorbar(shaded, ax=ax, ticks=levels[::2], format=level_format(levels[::2]), label=label)
    return True


def scattered_map(
    fig: Figure,
    ax: Any,
    x: np.ndarray,
    y: np.ndarray,
    values: np.ndarray,
    *,
    look: Look,
    label: str,
    log: tuple[bool, bool] = (False, False),
    floor: float = 0.02,
    fewest: int = 8,
) -> bool:
    """Filled contours through evaluated points themselves (no new evaluation); False if none.

    The triangulation is made in search coordinates (the logarithm of a log-scaled parameter), so
    that its triangles are not slivers on a log axis; points equal to 12 decimals there are one.
    """
    from matplotlib.tri import Triangulation

    if len(values) < fewest:
        return False
    tx, ty = (np.log(x) if log[0] else x), (np.log(y) if log[1] else y)
    _, keep = np.unique(np.round(np.column_stack([tx, ty]), 12), axis=0, return_index=True)
    levels = contour_levels(values[keep], floor=floor)
    if levels is None or keep.size < 4:
        return False
    try:
        triangles = Triangulation(tx[keep], ty[keep]).triangles
    except (ValueError, RuntimeError):  # all points on a line: no map
        return False
    mesh = Triangulation(x[keep], y[keep], triangles)
    from matplotlib.colors import BoundaryNorm

    filled = ax.tricontourf(mesh, values[keep], levels=levels, cmap=look.colours,
                            norm=BoundaryNorm(levels, 256), alpha=look.alpha, zorder=1)
    fig.colorbar(filled, ax=ax, format=level_format(levels), label=label)
    return True


# ----------------------------------------------------------------------------- the start map


def start_map(
    landscape: Landscape,
    objective: Callable[[np.ndarray], Any] | None,
    path: str | Path,
    *,
    pair: Sequence[int] | None = None,
    kind: str = "value",
    extra: int = 400,
    title: str = "",
) -> Path:
    """Write the start map of ``landscape`` as a PNG at ``path``; return the path.

    Parameters
    ----------
    objective
        For the contour map's report-only evaluations (None: the map is drawn from the
        evaluations the exploration made, no new ones).
    pair
        The two parameters to draw, by index (default the first two).
    kind
        "residuals" when ``objective`` returns a residual vector (its sum of squares is mapped).
    extra
        The most report-only evaluations (a square grid of at most this many points; 0: none).

    Raises
    ------
    ProblemError
        When the landscape has fewer than two parameters, or ``pair`` does not name two of them.
    """
    i, j = _pair(landscape, pair)
    import matplotlib

    with matplotlib.rc_context(START_MAP_STYLE):
        fig = Figure(figsize=(7.6, 7.6), layout="constrained")
        ax = fig.add_subplot()
        log = [landscape.scales[k] == "log" for k in (i, j)]
        grid = _grid(landscape, objective, (i, j), log, kind, extra)
        if grid is not None:
            grid_map(fig, ax, *grid, look=BACKGROUND, label="objective")
            where = "map: a slice through the best minimum"
        else:
            drawn = _scattered(fig, ax, landscape, (i, j), log)
            where = "map: the evaluations made, seen along the other parameters" if drawn else ""

        _starts(ax, landscape, i, j)
        scaled_axes(ax, (landscape.lower[i], landscape.upper[i]),
                    (landscape.lower[j], landscape.upper[j]), (log[0], log[1]))
        ax.set_xlabel(landscape.names[i] + (" (log scale)" if log[0] else ""))
        ax.set_ylabel(landscape.names[j] + (" (log scale)" if log[1] else ""))
        count = len(landscape.minima)
        heading = (
            f"Start map: {len(landscape.starts)} starts, {count} distinct "
            f"minim{'um' if count == 1 else 'a'}\n"
            "each start coloured by the minimum its search reached"
        )
        if len(landscape.names) > 2 and where:
            heading += f"\n({where})"
        ax.set_title(f"{title}\n{heading}" if title else heading)
        ax.legend(loc="upper center", bbox_to_anchor=(0.5, -0.11), ncol=2, framealpha=0.9)
        path = Path(path)
        path.parent.mkdir(parents=True, exist_ok=True)
        fig.savefig(path, dpi=DPI)
    return path


def _pair(landscape: Landscape, pair: Sequence[int] | None) -> tuple[int, int]:
    n = len(landscape.names)
    if n < 2:
        raise ProblemError("a start map needs at least two parameters, got one")
    if pair is None:
        return 0, 1
    try:
        i, j = (int(k) for k in pair)
    except (TypeError, ValueError):
        raise ProblemError(f"pair must be two parameter indexes, got {pair!r}") from None
    if i == j or not (0 <= i < n and 0 <= j < n):
        raise ProblemError(f"pair must be two different indexes below {n}, got {pair!r}")
    return i, j


def _axis(landscape: Landscape, k: int, log: bool, side: int) -> np.ndarray:
    lo, hi = landscape.lower[k], landscape.upper[k]
    return np.geomspace(lo, hi, side) if log else np.linspace(lo, hi, side)


def _grid(
    landscape: Landscape,
    objective: Callable[[np.ndarray], Any] | None,
    pair: tuple[int, int],
    log: list[bool],
    kind: str,
    extra: int,
) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """The report-only grid ``(x, y, values)``, or None when no evaluation is allowed."""
    side = int(math.isqrt(max(int(extra), 0)))
    if objective is None or side < 5 or not landscape.minima:
        return None
    i, j = pair
    gx, gy = _axis(landscape, i, log[0], side), _axis(landscape, j, log[1], side)
    values = evaluate_grid(report_value(objective, kind), landscape.best.point, pair, gx, gy)
    return gx, gy, values


def _scattered(
    fig: Figure, ax: Any, landscape: Landscape, pair: tuple[int, int], log: list[bool]
) -> bool:
    """A map from the evaluations the exploration made; most sit near the minima (floor 0.3)."""
    i, j = pair
    seen = [e for e in landscape.history if e.status == "ok"]
    if not seen:
        return False
    points = np.array([e.point for e in seen])
    values = np.array([e.value for e in seen])
    return scattered_map(fig, ax, points[:, i], points[:, j], values, look=BACKGROUND,
                         label="objective (from the evaluations made)", log=(log[0], log[1]),
                         floor=0.3)


def _starts(ax: Any, landscape: Landscape, i: int, j: int) -> None:
    starts, ends = landscape.starts, landscape.ends
    many = len(starts) > RASTER
    for g, (sol, count) in enumerate(zip(landscape.minima, landscape.counts)):
        colour = COLOURS[g % len(COLOURS)]
        members = [s for s, r in enumerate(landscape.reached) if r == g]
        for s in members:
            ax.plot([starts[s, i], ends[s, i]], [starts[s, j], ends[s, j]], "-", color=colour,
                    lw=0.8, alpha=0.7, zorder=3)
        ax.scatter(starts[members, i], starts[members, j], s=38, color=colour, edgecolor="black",
                   linewidth=0.5, zorder=4, rasterized=many)
        ax.plot(sol.point[i], sol.point[j], "*", color=colour, mec="black", ms=17, zorder=5,
                label=f"#{g + 1}: f = {sol.value:.4g}, {count} start{'s' if count != 1 else ''}")
    lost = [s for s, r in enumerate(landscape.reached) if r < 0]
    if lost:
        ax.scatter(starts[lost, i], starts[lost, j], marker="x", s=40, color="black", zorder=4,
                   label=f"start failed ({len(lost)})", rasterized=many)
