"""The start map of an exploration: which start led to which minimum, over a map of the objective.

Each start is drawn coloured by the minimum its search reached (a cross in black when its first
evaluation failed), joined by a thin line to where its search ended; the distinct minima are
stars, numbered best first.  Where the colours change from one start to its neighbour the answer
depends on the start: the picture users need before they trust one minimum.

The map behind is a contour map of two parameters (the others held at the best minimum: a slice).
With an ``objective`` it is drawn from a grid of *report-only evaluations* (at most ``extra``,
never journaled, never counted in the landscape, failures left as gaps), as the other plots of a
run are; without one, from the evaluations the exploration already made (a triangulation of the
evaluated points: free, but coarse where the searches did not go).

Figures are built with `matplotlib.figure.Figure`, not pyplot, so nothing global changes.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any

import numpy as np
from matplotlib.figure import Figure

from directional.api.explore import Landscape
from directional.errors import ProblemError
from directional.report.plots import contour_levels, level_format, readable_ticks

DPI = 120
STYLE = {"font.size": 11, "axes.titlesize": 12, "legend.fontsize": 9, "axes.grid": False}
COLOURS = (  # Okabe & Ito (2008), told apart with the common colour-vision deficiencies
    "#D55E00", "#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#F0E442", "#7f7f7f",
)


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

    with matplotlib.rc_context(STYLE):
        fig = Figure(figsize=(7.6, 7.6), layout="constrained")
        ax = fig.add_subplot()
        log = [landscape.scales[k] == "log" for k in (i, j)]
        grid = _grid(landscape, objective, (i, j), log, kind, extra)
        if grid is not None:
            _contours(fig, ax, *grid)
            where = "map: a slice through the best minimum"
        else:
            drawn = _scattered(fig, ax, landscape, (i, j), log)
            where = "map: the evaluations made, seen along the other parameters" if drawn else ""

        _starts(ax, landscape, i, j)
        if log[0]:
            ax.set_xscale("log")
        if log[1]:
            ax.set_yscale("log")
        ax.set_xlim(landscape.lower[i], landscape.upper[i])
        ax.set_ylim(landscape.lower[j], landscape.upper[j])
        readable_ticks(ax.xaxis, log[0])
        readable_ticks(ax.yaxis, log[1])
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
    values = np.full((side, side), math.nan)
    for a, x in enumerate(gx):
        for b, y in enumerate(gy):
            point = landscape.best.point.copy()
            point[i], point[j] = x, y
            values[b, a] = _value(objective, point, kind)
    return gx, gy, values


def _value(objective: Callable[[np.ndarray], Any], point: np.ndarray, kind: str) -> float:
    """One report-only evaluation; NaN when it fails (a gap in the map)."""
    try:
        result = np.asarray(objective(point.copy()), dtype=float)
    except Exception:  # a failed report evaluation is a gap, never an error
        return math.nan
    value = float(np.sum(result**2)) if kind == "residuals" else float(result.reshape(-1)[0])
    return value if math.isfinite(value) else math.nan


def _contours(fig: Figure, ax: Any, gx: np.ndarray, gy: np.ndarray, values: np.ndarray) -> None:
    levels = contour_levels(values)
    if levels is None:
        return
    from matplotlib.colors import BoundaryNorm

    masked = np.ma.masked_invalid(values)
    norm = BoundaryNorm(levels, 256)
    filled = ax.contourf(gx, gy, masked, levels=levels, cmap="Greys_r", norm=norm, alpha=0.55)
    ax.contour(gx, gy, masked, levels=levels, colors="0.35", linewidths=0.4)
    fig.colorbar(filled, ax=ax, format=level_format(levels), label="objective")


def _scattered(
    fig: Figure, ax: Any, landscape: Landscape, pair: tuple[int, int], log: list[bool]
) -> bool:
    """Contours through the evaluated points themselves (no new evaluation); False if none."""
    from matplotlib.tri import Triangulation

    i, j = pair
    seen = [e for e in landscape.history if e.status == "ok"]
    if len(seen) < 8:
        return False
    points = np.array([e.point for e in seen])
    values = np.array([e.value for e in seen])
    x, y = points[:, i], points[:, j]
    tx, ty = (np.log(x) if log[0] else x), (np.log(y) if log[1] else y)
    _, keep = np.unique(np.round(np.column_stack([tx, ty]), 12), axis=0, return_index=True)
    levels = contour_levels(values[keep], floor=0.3)  # most evaluations sit near the minima
    if levels is None or keep.size < 4:
        return False
    try:
        triangles = Triangulation(tx[keep], ty[keep]).triangles
    except (ValueError, RuntimeError):  # all points on a line: no map
        return False
    mesh = Triangulation(x[keep], y[keep], triangles)
    from matplotlib.colors import BoundaryNorm

    filled = ax.tricontourf(
        mesh, values[keep], levels=levels, cmap="Greys_r", norm=BoundaryNorm(levels, 256),
        alpha=0.55,
    )
    fig.colorbar(filled, ax=ax, format=level_format(levels),
                 label="objective (from the evaluations made)")
    return True


def _starts(ax: Any, landscape: Landscape, i: int, j: int) -> None:
    starts, ends = landscape.starts, landscape.ends
    for g, (sol, count) in enumerate(zip(landscape.minima, landscape.counts)):
        colour = COLOURS[g % len(COLOURS)]
        members = [s for s, r in enumerate(landscape.reached) if r == g]
        for s in members:
            ax.plot([starts[s, i], ends[s, i]], [starts[s, j], ends[s, j]], "-", color=colour,
                    lw=0.8, alpha=0.7, zorder=3)
        ax.scatter(starts[members, i], starts[members, j], s=38, color=colour, edgecolor="black",
                   linewidth=0.5, zorder=4)
        ax.plot(sol.point[i], sol.point[j], "*", color=colour, mec="black", ms=17, zorder=5,
                label=f"#{g + 1}: f = {sol.value:.4g}, {count} start{'s' if count != 1 else ''}")
    lost = [s for s, r in enumerate(landscape.reached) if r < 0]
    if lost:
        ax.scatter(starts[lost, i], starts[lost, j], marker="x", s=40, color="black", zorder=4,
                   label=f"start failed ({len(lost)})")
