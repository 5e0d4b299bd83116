"""Pictures of a solution, written as PNG files with matplotlib (the Agg renderer, no window).

- ``history.png``: every evaluation's value and the best so far, against the evaluation count.
- ``path.png``: the search path over a contour map of two parameters (a slice through the minimum,
  the others held at their best values).
- ``profiles.png``: the objective along each parameter through the minimum, with the parabola of
  the Hessian's diagonal drawn over it.
- ``fit.png`` and ``residuals.png``: for a calibration, the model against the data and the
  residuals at the minimum, model minus data (divided by sigma where known), the sign of the
  residual vector the calibration minimizes.  With a problem file's ``[data]`` table the series
  come from the table and one report-only run of the objective at the minimum.

Maps and profiles need values the search never computed.  They are *report-only evaluations*:
made here by calling the objective directly, at most ``extra`` of them, never journaled and never
counted in the solution.  With ``extra=0`` (or no objective) only what the search itself recorded
is drawn.  Failed report evaluations leave gaps.

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

from directional.parameters import Parameter
from directional.report.maps import (
    MAP,
    PALETTE,
    RASTER,
    evaluate_grid,
    grid_map,
    readable_ticks,
    report_value,
    scaled_axes,
    scattered_map,
)
from directional.solution import Solution

STYLE = {
    "font.size": 11,
    "axes.titlesize": 12,
    "axes.labelsize": 11,
    "legend.fontsize": 9,
    "figure.titlesize": 13,
    "axes.grid": True,
    "grid.alpha": 0.3,
}
DPI = 120
# Colours: `maps.PALETTE` (Okabe & Ito 2008, colour-blind safe), with greys; maps in viridis.
PROFILE_POINTS = 15  # report-only evaluations per parameter (common practice, no source)
MAP_SIDE = 20  # the contour map's grid is at most MAP_SIDE x MAP_SIDE (maps: `report.maps`)


@dataclass(frozen=True, slots=True, kw_only=True)
class _Axes:
    """Search coordinates for plotting: ``y = x`` or ``ln x`` per parameter, with bounds."""

    log: np.ndarray
    lower: np.ndarray  # in y
    upper: np.ndarray

    def to_y(self, x: np.ndarray) -> np.ndarray:
        x = np.asarray(x, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(self.log, np.log(np.where(self.log, x, 1.0)), x)

    def to_x(self, y: np.ndarray, i: int) -> np.ndarray:
        return np.exp(y) if self.log[i] else np.asarray(y, dtype=float)


def write_plots(
    sol: Solution,
    folder: str | Path,
    *,
    parameters: Sequence[Parameter] | None = None,
    objective: Callable[[np.ndarray], Any] | None = None,
    kind: str = "value",
    fit: Callable[[np.ndarray], Any] | None = None,
    extra: int = 500,
    title: str = "",
    format: str = "png",
) -> list[Path]:
    """Write the PNG (or ``format``: "svg", "pdf") files for ``sol`` into ``folder``; return them.

    Parameters
    ----------
    parameters
        The problem's parameters (their scales choose log axes); None: all linear.
    objective, kind
        For report-only evaluations (maps and profiles); ``kind="residuals"`` means the objective
        returns a residual vector whose sum of squares is the value.
    fit
        For a calibration: ``fit(point)`` returns a list of series, each a mapping with ``name``,
        ``x``, ``observed``, ``predicted`` and optionally ``sigma``, ``unit``, ``x_label``,
        ``curve_x``, ``curve`` (the model on a fine grid) and ``data_label``.
    extra
        The most report-only evaluations to spend (0: none).
    format
        The files' type, as matplotlib names it; the HTML report asks for "svg".
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    axes = _coordinates(sol, parameters)
    value = report_value(objective, kind) if objective is not None and extra > 0 else None
    written = [_history(sol, folder / f"history.{format}", kind, title)]
    budget = extra
    widths = _widths(sol, axes, kind, value)
    if sol.point.size >= 1:
        profile_budget = min(budget, PROFILE_POINTS * sol.point.size)
        written.append(
            _profiles(sol, folder / f"profiles.{format}", axes, kind, value, widths, profile_budget, title)
        )
        budget -= profile_budget if value is not None else 0
    if sol.point.size >= 2:
        written.append(_path(sol, folder / f"path.{format}", axes, kind, value, widths, budget, title))
    if fit is not None:
        series = _series(fit, sol.point)
        if series:
            written.append(_fit(series, folder / f"fit.{format}", title))
            written.append(_residual_series(series, folder / f"residuals.{format}", title))
    elif kind == "residuals" and objective is not None and extra > 0:
        written.append(_residual_vector(sol, objective, folder / f"residuals.{format}", title))
    return written


def affordable(sol: Solution, seconds: float = 20.0, most: int = 500) -> int:
    """Report-only evaluations that fit in about ``seconds``, at most ``most``.

    Estimated from the mean wall time of the run's evaluations, so that plots of a cheap Python
    model get full maps and profiles while an expensive program gets few or none.
    """
    times = [e.seconds for e in sol.history if e.status == "ok" and e.seconds > 0]
    if not times:
        return most
    return int(min(most, seconds / float(np.mean(times))))


# ----------------------------------------------------------------------------- helpers


def _coordinates(sol: Solution, parameters: Sequence[Parameter] | None) -> _Axes:
    scales = {p.name: p.scale for p in parameters or ()}
    log = np.array([scales.get(name) == "log" for name in sol.names])
    with np.errstate(divide="ignore", invalid="ignore"):
        lower = np.where(log, np.log(np.where(log, sol.lower, 1.0)), sol.lower)
        upper = np.where(log, np.log(np.where(log, sol.upper, 1.0)), sol.upper)
    return _Axes(log=log, lower=lower, upper=upper)


def _label(sol: Solution, i: int) -> str:
    unit = sol.units[i]
    return f"{sol.names[i]} [{unit}]" if unit else sol.names[i]


def _value_label(kind: str) -> str:
    return "sum of squares S" if kind == "residuals" else "objective value"


def _figure(width: float, height: float) -> Figure:
    import matplotlib

    with matplotlib.rc_context(STYLE):
        return Figure(figsize=(width, height), layout="constrained")


def _save(fig: Figure, path: Path) -> Path:
    fig.savefig(path, dpi=DPI)
    return path


def _styled(function: Callable[..., Path]) -> Callable[..., Path]:
    """Run a plotting function inside the module's style (fonts, grid)."""

    def wrapped(*args: Any, **kwargs: Any) -> Path:
        import matplotlib

        with matplotlib.rc_context(STYLE):
            return function(*args, **kwargs)

    wrapped.__name__ = function.__name__
    wrapped.__doc__ = function.__doc__
    return wrapped


def _standard_errors(sol: Solution) -> np.ndarray | None:
    u = sol.uncertainty
    errors = getattr(u, "standard_errors", None) if u is not None else None
    if errors is None:
        return None
    if isinstance(errors, dict):
        return np.array([errors[n] for n in sol.names], dtype=float)
    return np.asarray(errors, dtype=float).ravel()


def _intervals(sol: Solution) -> np.ndarray | None:
    u = sol.uncertainty
    intervals = getattr(u, "intervals", None) if u is not None else None
    if intervals is None:
        return None
    if isinstance(intervals, dict):
        return np.array([intervals[n] for n in sol.names], dtype=float)
    return np.asarray(intervals, dtype=float).reshape(len(sol.names), 2)


def _hessian(sol: Solution) -> np.ndarray:
    """The Hessian in search coordinates over all parameters, nan where it was not measured.

    The curvature check measures only the parameters off their bounds; its rows are labelled
    ``name`` or ``log(name)`` (`records.Curvature.names`).
    """
    n = sol.point.size
    full = np.full((n, n), math.nan)
    c = sol.curvature
    if c is None:
        return full
    matrix = np.asarray(c.hessian, dtype=float)
    labels = tuple(getattr(c, "names", ()) or ())
    if labels:
        index = {name: i for i, name in enumerate(sol.names)}
        rows = [index.get(_unwrapped(label), -1) for label in labels]
    else:
        rows = list(range(matrix.shape[0]))
    if len(rows) != matrix.shape[0] or min(rows, default=0) < 0 or max(rows, default=0) >= n:
        return full
    full[np.ix_(rows, rows)] = matrix
    full[~np.isfinite(full)] = math.nan
    return full


def _unwrapped(label: str) -> str:
    for head in ("log(", "ln("):
        if label.startswith(head) and label.endswith(")"):
            return label[len(head):-1]
    return label


def _hessian_diagonal(sol: Solution) -> np.ndarray:
    return np.diag(_hessian(sol)).copy()


def _widths(
    sol: Solution, axes: _Axes, kind: str, value: Callable[[np.ndarray], float] | None
) -> np.ndarray:
    """Half-width of each profile in search coordinates.

    For a calibration, three conditional standard deviations: ``3 sqrt(2 s^2 / H_ii)`` with
    ``s^2 = S / (m - p)`` (Bates & Watts 1988, ch. 2; ``H = 2 J'J`` for ``S = r'r``).  For a value,
    where the parabola rises by half the value, or by one unit when the value is near zero; with
    no usable curvature, a tenth of the bounds' width.  Wide enough to show the 95 % interval of a
    calibration, which is wider than the slice suggests when parameters are correlated.
    """
    y = axes.to_y(sol.point)
    diagonal = _hessian_diagonal(sol)
    intervals = _intervals(sol)
    rise = max(0.5 * abs(sol.value), 1e-3)
    if kind == "residuals":
        variance = _residual_variance(sol)
        if math.isfinite(variance) and variance > 0:
            rise = 0.5 * 9.0 * 2.0 * variance
    widths = np.empty(y.size)
    for i in range(y.size):
        span = axes.upper[i] - axes.lower[i]
        fallback = 0.1 * span if math.isfinite(span) else 0.1 * max(abs(y[i]), 1.0)
        h = diagonal[i]
        w = math.sqrt(2.0 * rise / h) if h > 0 else fallback
        if intervals is not None and np.all(np.isfinite(intervals[i])) and intervals[i][0] > (
            0.0 if axes.log[i] else -math.inf
        ):
            lo_y, hi_y = _to_y1(axes, i, intervals[i][0]), _to_y1(axes, i, intervals[i][1])
            w = max(w, 1.15 * max(y[i] - lo_y, hi_y - y[i]))
        if math.isfinite(span):
            w = min(w, 0.5 * span)
        widths[i] = max(w, 1e-9 * max(abs(y[i]), 1.0))
    return widths


def _to_y1(axes: _Axes, i: int, x: float) -> float:
    return math.log(x) if axes.log[i] else float(x)


def _residual_variance(sol: Solution) -> float:
    """``s^2 = S / (m - p)`` from the calibration's uncertainty, nan when there is none."""
    u = sol.uncertainty
    variance = getattr(u, "residual_variance", None) if u is not None else None
    if isinstance(variance, int | float | np.integer | np.floating):
        return float(variance)
    m = getattr(u, "observations", None) if u is not None else None
    p = sol.point.size - len(sol.active)
    if isinstance(m, int | np.integer) and m > p:
        return sol.value / (int(m) - p)
    return math.nan


# ----------------------------------------------------------------------------- history


@_styled
def _history(sol: Solution, path: Path, kind: str, title: str) -> Path:
    """Every evaluation's value and the best so far, against the evaluation number."""
    history = sol.history
    fig = _figure(8.0, 4.8)
    ax = fig.add_subplot()
    if not history:
        ax.text(0.5, 0.5, "no evaluations recorded", ha="center", transform=ax.transAxes)
        return _save(fig, path)
    count = np.arange(1, len(history) + 1)
    values = np.array([e.value if e.status == "ok" else math.inf for e in history])
    ok = np.isfinite(values)
    best = np.minimum.accumulate(np.where(ok, values, math.inf))
    groups = np.array([_group(e.purpose) for e in history])
    finite = values[ok]
    log = bool(finite.size and finite.min() > 0 and finite.max() / finite.min() > 30)
    for group, color in _GROUPS:
        chosen = ok & (groups == group)
        if np.any(chosen):
            ax.scatter(count[chosen], values[chosen], s=9, color=color, label=group, zorder=2,
                       rasterized=len(history) > RASTER)
    shown = np.isfinite(best)
    ax.step(count[shown], best[shown], where="post", color=PALETTE["blue"], lw=2,
            label="best so far", zorder=3)
    if log:
        ax.set_yscale("log")
        readable_ticks(ax.yaxis, True)
    elif finite.size:
        # the top follows most values, but never cuts off the start (the first value that counted)
        low, high = float(finite.min()), max(float(np.quantile(finite, 0.9)), float(finite[0]))
        pad = 0.05 * (high - low) if high > low else max(abs(low), 1.0) * 0.05
        ax.set_ylim(low - pad, high + pad)
    failed = ~ok
    if np.any(failed):
        bottom = ax.get_ylim()[0]
        ax.scatter(count[failed], np.full(failed.sum(), bottom), marker="x", color=PALETTE["vermilion"],
                   s=25, label=f"failed ({failed.sum()})", zorder=4, clip_on=False)
    ax.set_xlabel("evaluation")
    ax.set_ylabel(_value_label(kind) + (" (log scale)" if log else ""))
    # the caption and the legend stand outside the axes, where they cover no point (the failed
    # evaluations' crosses sit on the bottom edge)
    heading = (
        f"Best value against evaluations\nbest {sol.value:.6g} after {sol.evaluations} "
        f"evaluations; stop: {sol.stop.value}, verdict: {sol.verdict.value}"
    )
    ax.set_title(f"{title}\n{heading}" if title else heading)
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), borderaxespad=0.0)
    return _save(fig, path)


_GROUPS = (
    ("search", "0.6"),
    ("least-squares steps", PALETTE["purple"]),
    ("curvature check", PALETTE["orange"]),
)


def _group(purpose: str) -> str:
    """Which kind of work an evaluation's purpose belongs to, for the history's colours."""
    if any(word in purpose for word in ("jacobian", "gauss", "marquardt")):
        return "least-squares steps"
    if any(word in purpose for word in ("hessian", "check", "curvature", "noise", "escape")):
        return "curvature check"
    return "search"


# ----------------------------------------------------------------------------- profiles


@_styled
def _profiles(
    sol: Solution,
    path: Path,
    axes: _Axes,
    kind: str,
    value: Callable[[np.ndarray], float] | None,
    widths: np.ndarray,
    budget: int,
    title: str,
) -> Path:
    """The objective through the minimum along each parameter, and the Hessian's parabola."""
    n = sol.point.size
    cols = 1 if n == 1 else 2
    rows = math.ceil(n / cols)
    fig = _figure(5.2 * cols, 3.6 * rows + 0.6)
    diagonal = _hessian_diagonal(sol)
    errors = _standard_errors(sol)
    intervals = _intervals(sol)
    y_best = axes.to_y(sol.point)
    per = budget // n if value is not None and n else 0
    for i in range(n):
        ax = fig.add_subplot(rows, cols, i + 1)
        active = sol.names[i] in sol.active
        lo = max(y_best[i] - widths[i], axes.lower[i])
        hi = min(y_best[i] + widths[i], axes.upper[i])
        if per >= 2 and hi > lo:
            ys = np.linspace(lo, hi, per)
            fs = np.array([value(_moved(sol.point, i, axes.to_x(t, i))) for t in ys])
            xs = axes.to_x(ys, i)
            order = np.argsort(np.append(xs, sol.point[i]))
            ax.plot(np.append(xs, sol.point[i])[order], np.append(fs, sol.value)[order],
                    "o-", color=PALETTE["blue"], ms=4, lw=1.5, label="objective (report-only)")
        fine = np.linspace(lo, hi, 200)
        h = diagonal[i]
        if h > 0 and not active:
            ax.plot(axes.to_x(fine, i), sol.value + 0.5 * h * (fine - y_best[i]) ** 2, "--",
                    color=PALETTE["orange"], lw=1.5, label="Hessian parabola")
        if intervals is not None and np.all(np.isfinite(intervals[i])):
            ax.axvspan(intervals[i][0], intervals[i][1], color=PALETTE["green"], alpha=0.12,
                       label="95 % interval")
        ax.plot([sol.point[i]], [sol.value], "*", color=PALETTE["vermilion"], ms=12, label="minimum",
                zorder=5)
        log = bool(axes.log[i])  # by the parameter's scale, as in every figure (`maps.scaled_axes`)
        if log:
            ax.set_xscale("log")
        ax.set_xlim(axes.to_x(lo, i), axes.to_x(hi, i))
        readable_ticks(ax.xaxis, log)
        ax.set_xlabel(_label(sol, i) + (" (log scale)" if log else ""))
        ax.set_ylabel(_value_label(kind))
        head = f"{sol.names[i]} = {sol.point[i]:.5g}"
        if errors is not None and math.isfinite(errors[i]):
            head += f" ± {errors[i]:.2g}"
        if active:
            head += " (on a bound)"
        ax.set_title(head)
    _figure_legend(fig)
    heading = "Profiles through the minimum (the other parameters held at their best values)"
    if intervals is not None:
        heading += "\nshaded: the 95 % interval, which lets the other parameters move (wider when correlated)"
    fig.suptitle(f"{title}\n{heading}" if title else heading)
    return _save(fig, path)




def _moved(point: np.ndarray, i: int, value: float) -> np.ndarray:
    x = np.array(point, dtype=float)
    x[i] = value
    return x


# ----------------------------------------------------------------------------- path over a map


def _pair(sol: Solution, axes: _Axes) -> tuple[int, int]:
    """The two parameters to map: the most correlated pair, else the two that moved most."""
    n = sol.point.size
    correlation = None
    u = sol.uncertainty
    if u is not None and getattr(u, "correlation", None) is not None:
        correlation = np.asarray(u.correlation, dtype=float)
    else:
        hessian = _hessian(sol)
        known = np.all(np.isfinite(hessian), axis=0)
        if known.sum() >= 2:
            try:
                inverse = np.linalg.inv(hessian[np.ix_(known, known)])
                d = np.sqrt(np.abs(np.diag(inverse)))
                correlation = np.full((n, n), math.nan)
                correlation[np.ix_(known, known)] = inverse / np.outer(d, d)
            except np.linalg.LinAlgError:
                correlation = None
    if correlation is not None and correlation.shape == (n, n):
        off = np.abs(correlation)
        off[~np.isfinite(off)] = -1.0
        np.fill_diagonal(off, -1.0)
        if off.max() >= 0.0:
            i, j = np.unravel_index(int(np.argmax(off)), off.shape)
            return (int(min(i, j)), int(max(i, j)))
    points = np.array([e.point for e in sol.history]) if sol.history else sol.point[None, :]
    ys = axes.to_y(points)
    span = np.where(np.isfinite(axes.upper - axes.lower), axes.upper - axes.lower, 1.0)
    moved = (ys.max(axis=0) - ys.min(axis=0)) / span
    i, j = np.argsort(moved)[::-1][:2]
    return (int(min(i, j)), int(max(i, j)))


def _improvements(sol: Solution) -> np.ndarray:
    """The points at which the best value improved, in order (the search path)."""
    path, best = [], math.inf
    for e in sol.history:
        if e.status == "ok" and e.value < best:
            best = e.value
            path.append(e.point)
    return np.array(path) if path else sol.point[None, :]


@_styled
def _path(
    sol: Solution,
    path: Path,
    axes: _Axes,
    kind: str,
    value: Callable[[np.ndarray], float] | None,
    widths: np.ndarray,
    budget: int,
    title: str,
) -> Path:
    """The search path projected on two parameters, over a map of the objective there."""
    i, j = _pair(sol, axes)
    walk = _improvements(sol)
    y_walk = axes.to_y(walk)
    y_best = axes.to_y(sol.point)
    box = []
    for k in (i, j):
        lo = min(float(y_walk[:, k].min()), y_best[k] - widths[k])
        hi = max(float(y_walk[:, k].max()), y_best[k] + widths[k])
        pad = 0.08 * (hi - lo)
        box.append((max(lo - pad, axes.lower[k]), min(hi + pad, axes.upper[k])))
    fig = _figure(7.6, 6.2)
    ax = fig.add_subplot()
    side = min(MAP_SIDE, int(math.sqrt(max(budget, 0)))) if value is not None else 0
    if side >= 5:
        gx = axes.to_x(np.linspace(*box[0], side), i)
        gy = axes.to_x(np.linspace(*box[1], side), j)
        grid = evaluate_grid(value, sol.point, (i, j), gx, gy)
        grid_map(fig, ax, gx, gy, grid, look=MAP, label=_value_label(kind))
    elif sol.point.size == 2 and _scattered(fig, ax, sol, axes, kind):
        ax.text(0.5, 0.97, "map drawn from the search's own evaluations (coarse)",
                transform=ax.transAxes, ha="center", va="top", fontsize=9, color="0.3")
    else:
        ax.text(0.5, 0.97, "no map: too few report-only evaluations (--plot-evaluations)",
                transform=ax.transAxes, ha="center", va="top", fontsize=9, color="0.3")
    points = np.array([e.point for e in sol.history]) if sol.history else sol.point[None, :]
    ax.scatter(points[:, i], points[:, j], s=6, color="0.35", alpha=0.35, label="evaluations",
               zorder=3, rasterized=len(points) > RASTER)
    ax.plot(walk[:, i], walk[:, j], "-o", color=PALETTE["vermilion"], ms=3.5, lw=1.5,
            label="search path (each new best)", zorder=4, clip_on=False)
    ax.plot(walk[0, i], walk[0, j], "s", color="white", mec="black", ms=9, label="start", zorder=5,
            clip_on=False)
    ax.plot(sol.point[i], sol.point[j], "*", color=PALETTE["yellow"], mec="black", ms=16, label="minimum",
            zorder=6, clip_on=False)
    logs = (bool(axes.log[i]), bool(axes.log[j]))
    scaled_axes(ax, (axes.to_x(box[0][0], i), axes.to_x(box[0][1], i)),
                (axes.to_x(box[1][0], j), axes.to_x(box[1][1], j)), logs)
    ax.set_xlabel(_label(sol, i) + (" (log scale)" if logs[0] else ""))
    ax.set_ylabel(_label(sol, j) + (" (log scale)" if logs[1] else ""))
    heading = f"Search path over the objective: {sol.names[i]} and {sol.names[j]}"
    if sol.point.size > 2:
        heading += "\n(map: a slice through the minimum, other parameters at their best values)"
    ax.set_title(f"{title}\n{heading}" if title else heading)
    _figure_legend(fig)
    return _save(fig, path)


def _scattered(fig: Figure, ax: Any, sol: Solution, axes: _Axes, kind: str) -> bool:
    """A map of a two-parameter objective from the evaluations already made (no new ones)."""
    ok = [e for e in sol.history if e.status == "ok"]
    if not ok:
        return False
    points = np.array([e.point for e in ok])
    values = np.array([e.value for e in ok])
    return scattered_map(fig, ax, points[:, 0], points[:, 1], values, look=MAP,
                         label=_value_label(kind), log=(bool(axes.log[0]), bool(axes.log[1])),
                         fewest=10)



def _figure_legend(fig: Figure) -> None:
    """One legend below the panels, each label once."""
    seen: dict[str, Any] = {}
    for ax in fig.axes:
        for handle, label in zip(*ax.get_legend_handles_labels()):
            seen.setdefault(label, handle)
    if seen:
        fig.legend(list(seen.values()), list(seen), loc="outside lower center",
                   ncols=min(len(seen), 4), frameon=False)


# ----------------------------------------------------------------------------- calibration


def _series(fit: Callable[[np.ndarray], Any], point: np.ndarray) -> list[dict[str, Any]]:
    try:
        series = list(fit(np.array(point, dtype=float)))
    except Exception:  # the report's fit function failed: no fit plots
        return []
    return [dict(s) for s in series]


@_styled
def _fit(series: list[dict[str, Any]], path: Path, title: str) -> Path:
    """The model against the data, one panel per observed quantity."""
    n = len(series)
    fig = _figure(5.4 * n, 4.4)
    for k, s in enumerate(series):
        ax = fig.add_subplot(1, n, k + 1)
        x = np.asarray(s["x"], dtype=float)
        observed = np.asarray(s["observed"], dtype=float)
        sigma = s.get("sigma")
        label = s.get("data_label", "data")
        if sigma is not None:
            ax.errorbar(x, observed, yerr=np.broadcast_to(sigma, x.shape), fmt="o", ms=4,
                        color="black", ecolor="0.5", capsize=2, label=f"{label} (± 1 sigma)")
        else:
            ax.plot(x, observed, "o", ms=4, color="black", label=label)
        if "curve_x" in s and "curve" in s:
            ax.plot(s["curve_x"], s["curve"], "-", color=PALETTE["blue"], lw=2, label="fitted model")
        else:
            ax.plot(x, s["predicted"], "-", color=PALETTE["blue"], lw=2, label="fitted model")
        unit = s.get("unit", "")
        ax.set_ylabel(f"{s['name']} [{unit}]" if unit else s["name"])
        ax.set_xlabel(s.get("x_label", "x"))
        ax.set_title(s["name"])
        ax.legend(loc="best")
    heading = "The fitted model against the data"
    fig.suptitle(f"{title}\n{heading}" if title else heading)
    return _save(fig, path)


@_styled
def _residual_series(series: list[dict[str, Any]], path: Path, title: str) -> Path:
    """Model minus data at the minimum (the README's sign), in units of sigma when known."""
    n = len(series)
    fig = _figure(5.4 * n, 3.8)
    for k, s in enumerate(series):
        ax = fig.add_subplot(1, n, k + 1)
        x = np.asarray(s["x"], dtype=float)
        r = np.asarray(s["predicted"], dtype=float) - np.asarray(s["observed"], dtype=float)
        sigma = s.get("sigma")
        unit = s.get("unit", "")
        if sigma is not None:
            r = r / np.broadcast_to(np.asarray(sigma, dtype=float), r.shape)
            ax.axhspan(-2.0, 2.0, color=PALETTE["green"], alpha=0.1, label="± 2 sigma")
            ax.set_ylabel("(model − data) / sigma")
        else:
            ax.set_ylabel(f"model − data [{unit}]" if unit else "model − data")
        ax.axhline(0.0, color="black", lw=0.8)
        ax.vlines(x, 0.0, r, color=PALETTE["blue"], lw=1.2)
        ax.plot(x, r, "o", color=PALETTE["blue"], ms=4, label="residual")
        ax.set_xlabel(s.get("x_label", "x"))
        ax.set_title(f"{s['name']}: residuals")
        ax.legend(loc="best")
    heading = "Residuals at the minimum"
    fig.suptitle(f"{title}\n{heading}" if title else heading)
    return _save(fig, path)


@_styled
def _residual_vector(
    sol: Solution, objective: Callable[[np.ndarray], Any], path: Path, title: str
) -> Path:
    """The residual vector at the minimum against its index (one report-only evaluation)."""
    fig = _figure(8.0, 4.0)
    ax = fig.add_subplot()
    try:
        r = np.asarray(objective(np.array(sol.point, dtype=float)), dtype=float).ravel()
    except Exception:  # a failed report evaluation: an empty plot that says so
        r = np.array([])
    if r.size:
        index = np.arange(r.size)
        dof = r.size - sol.point.size
        s = math.sqrt(float(r @ r) / dof) if dof > 0 else math.nan
        if math.isfinite(s):
            ax.axhspan(-2 * s, 2 * s, color=PALETTE["green"], alpha=0.1, label="± 2 s")
        ax.axhline(0.0, color="black", lw=0.8)
        ax.vlines(index, 0.0, r, color=PALETTE["blue"], lw=1.2)
        ax.plot(index, r, "o", color=PALETTE["blue"], ms=4, label="residual")
        ax.legend(loc="best")
    else:
        ax.text(0.5, 0.5, "the residuals could not be evaluated", ha="center",
                transform=ax.transAxes)
    ax.set_xlabel("residual index")
    ax.set_ylabel("residual")
    heading = "Residuals at the minimum"
    ax.set_title(f"{title}\n{heading}" if title else heading)
    return _save(fig, path)
