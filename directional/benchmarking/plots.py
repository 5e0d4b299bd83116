"""PNG figures of the benchmark: data and performance profiles, and the scaling measurements."""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import numpy as np

STYLES = {  # one look per solver, kept across figures
    "directional": dict(color="black", linewidth=2.2, linestyle="-"),
    "Nelder-Mead": dict(color="tab:blue", linestyle="--"),
    "Hooke-Jeeves": dict(color="tab:orange", linestyle="-."),
    "coordinate search": dict(color="tab:green", linestyle=":"),
    "golden section only": dict(color="tab:red", linestyle="--"),
    "no direction replacement": dict(color="tab:purple", linestyle="-."),
    "no curvature reuse": dict(color="tab:brown", linestyle=":"),
    "driver + search": dict(color="tab:gray", linestyle="--"),
    "search alone": dict(color="tab:olive", linestyle=":"),
    "no model steps": dict(color="tab:pink", linestyle="--"),
    "search alone, no model": dict(color="tab:cyan", linestyle="-."),
    "driver alone": dict(color="tab:gray", linestyle=":"),
}


def _pyplot():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def profiles(
    path: Path,
    title: str,
    names: Sequence[str],
    xs: np.ndarray,
    curves: dict[float, np.ndarray],
    *,
    xlabel: str,
    log2: bool = False,
) -> None:
    """One panel per accuracy level ``tau``; ``curves[tau]`` has shape ``(len(xs), solvers)``."""
    plt = _pyplot()
    taus = sorted(curves, reverse=True)
    fig, axes = plt.subplots(1, len(taus), figsize=(4.2 * len(taus), 3.8), sharey=True)
    axes = np.atleast_1d(axes)
    for ax, tau in zip(axes, taus):
        for s, name in enumerate(names):
            ax.step(xs, curves[tau][:, s], where="post", label=name, **STYLES.get(name, {}))
        ax.set_title(f"τ = {tau:.0e}")
        ax.set_xlabel(xlabel)
        if log2:
            ax.set_xscale("log", base=2)
        ax.set_ylim(-0.02, 1.02)
        ax.grid(True, alpha=0.3)
    axes[0].set_ylabel("fraction of (problem, start) pairs solved")
    axes[-1].legend(loc="lower right", fontsize=8)
    fig.suptitle(title)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def scaling(
    path: Path,
    quadratic: Sequence[tuple[int, float]],
    overhead: Sequence[tuple[str, int, float]],
    line: dict[str, Sequence[float]],
) -> None:
    """Three panels: quadratic ratio by n, optimizer time per evaluation by n, line-search errors.

    ``quadratic`` holds ``(n, ratio)``, ``overhead`` ``(solver, n, microseconds)``, ``line`` the
    errors of successive points per method on one function.
    """
    plt = _pyplot()
    fig, (a, b, c) = plt.subplots(1, 3, figsize=(13.5, 3.8))
    if quadratic:
        n, ratio = np.array(quadratic, dtype=float).T
        a.plot(n, ratio, "o", color="black", label="directional")
        grid = np.linspace(n.min(), n.max(), 100)
        ideal = 2 * grid * (2 * grid + 3) / ((grid + 1) * (grid + 2))
        a.plot(grid, ideal, color="tab:gray", label="n cycles of 2(n+1)+1")
        a.axhline(4.0, color="tab:red", linestyle="--", label="target 4")
        a.legend(fontsize=8)
    a.set_xlabel("n")
    a.set_ylabel("evaluations / ((n+1)(n+2)/2)")
    a.set_title("random quadratics, condition 1e3")
    a.grid(True, alpha=0.3)
    for solver in sorted({o[0] for o in overhead}):
        rows = [(o[1], o[2]) for o in overhead if o[0] == solver]
        n, micro = np.array(rows, dtype=float).T
        b.plot(n, micro, "o-", label=solver, **_line_style(solver))
    b.plot([10, 100], [30, 300], "v", color="tab:red", label="targets")
    b.set_xscale("log")
    b.set_yscale("log")
    sizes = sorted({o[1] for o in overhead} | {10, 100})
    b.set_xticks(sizes, [str(k) for k in sizes])
    b.minorticks_off()
    b.set_xlabel("n")
    b.set_ylabel("processor µs per evaluation, outside the objective")
    b.set_title("optimizer overhead")
    b.grid(True, alpha=0.3)
    if overhead:
        b.legend(fontsize=8)
    for method, errors in line.items():
        errors = np.maximum(np.asarray(errors, dtype=float), 1e-17)
        c.semilogy(np.arange(1, len(errors) + 1), errors, "o-", label=method, markersize=3)
    c.axhline(1e-8, color="tab:red", linestyle="--", linewidth=1)
    c.set_xlabel("evaluation")
    c.set_ylabel("|t - t*|")
    c.set_title("line search on (t-1)^2 (1+t^2)")
    c.grid(True, alpha=0.3)
    if line:
        c.legend(fontsize=8)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)


def _line_style(name: str) -> dict:
    style = dict(STYLES.get(name, {}))
    style.pop("linestyle", None)
    return style
