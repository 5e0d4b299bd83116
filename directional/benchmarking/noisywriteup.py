"""The text of the noisy benchmarks (``results/noise.md``), their targets, and the smooth check.

The targets are computed from the runs, never typed.  "Smooth results no worse than before"
compares the smooth MGH numbers of the full run (read from the RESULTS.md it wrote: the data
profile of `directional` and the median quadratic ratios) with a snapshot of the same numbers
taken before the noise work (``benchmarks/smooth-before.json``, written by
``python -m benchmarks.noisy --record-before``).
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Sequence
from pathlib import Path

import numpy as np

from directional.benchmarking import profiles
from directional.benchmarking.noisy import Smooth
from directional.benchmarking.noisystudy import (
    HEADLINE,
    LEVEL,
    NOISY_TAUS,
    GaussianRow,
    NoisyStudy,
    behind,
)
from directional.benchmarking.study import DATA_BUDGETS
from directional.benchmarking.writeup import TABLE_BUDGETS, percent, table, target_table, whole

Target = tuple[str, str, bool, str]


# ---------------------------------------------------------------------------- smooth numbers


def smooth_numbers(results: str) -> dict:
    """The smooth numbers of a RESULTS.md written by the full run: `directional`'s row of the MGH
    data-profile table for each τ, the median quadratic ratio for each n, and the run's stamp.

    >>> text = ("Written by `directional bench` (full run, 1 s) on 2026-01-01 00:00 UTC. x\\n"
    ...         "| quadratics n = 20: ... ≤ 2.5 (median) | 2.02 median, 2.03 worst | yes | 5 |\\n"
    ...         "## 1. The Moré\\nData profiles: fraction\\n\\n| τ | solver | 1 | 2 |\\n|---|\\n"
    ...         "| 1e-01 | directional | 27 % | 37 % |\\n| 1e-01 | Nelder-Mead | 2 % | 4 % |\\n\\n")
    >>> smooth_numbers(text)["data"], smooth_numbers(text)["quadratic"]
    ({'1e-01': {'1': 27, '2': 37}}, {'20': 2.02})
    """
    stamp = re.search(r"^Written by `directional bench` \(([^)]*)\) on ([^.]*)\.", results, re.M)
    commit = re.search(r"^- Code: commit (\w+)", results, re.M)
    quadratic = {n: float(r) for n, r in re.findall(
        r"^\| quadratics n = (\d+):[^|]*\| ([\d.]+) median", results, re.M)}
    section = results.find("## 1. ")
    start = results.find("Data profiles:", max(section, 0))
    data: dict[str, dict[str, int]] = {}
    if section >= 0 and start >= 0:
        lines = results[start:].splitlines()[2:]
        header = [c.strip() for c in lines[0].strip("|").split("|")]
        for line in lines[2:]:
            if not line.startswith("|"):
                break
            cells = [c.strip() for c in line.strip("|").split("|")]
            if cells[1] == "directional":
                data[cells[0]] = {b: int(c.rstrip(" %")) for b, c in zip(header[2:], cells[2:])}
    return {
        "run": f"{stamp.group(1)}, {stamp.group(2)}" if stamp else "unknown run",
        "commit": commit.group(1) if commit else "",
        "data": data,
        "quadratic": quadratic,
    }


def smooth_target(before: dict | None, now: dict | None) -> Target:
    """Every entry of the smooth data profile at least as high, every quadratic ratio at most as
    high, as before the noise work."""
    name = ("smooth MGH no worse than before: `directional`'s data profile (every τ and budget of "
            "the table) and the median quadratic ratios")
    if before is None or now is None or not now["data"]:
        missing = "the snapshot" if before is None else "the full run's RESULTS.md"
        return name, f"not measured: {missing} not found", False, "—"
    if (before["run"], before["commit"]) == (now["run"], now["commit"]):
        return (name, "not measured: RESULTS.md still holds the run the snapshot was taken from "
                "(rerun `python -m benchmarks` first)", False, f"{before['run']}")
    worse, compared = [], 0
    for tau, row in before["data"].items():
        for budget, was in row.items():
            is_ = now["data"].get(tau, {}).get(budget)
            if is_ is None:
                continue
            compared += 1
            if is_ < was:
                worse.append(f"τ = {tau}, {budget} (n + 1): {was} → {is_} %")
    for n, was in before["quadratic"].items():
        is_ = now["quadratic"].get(n)
        if is_ is not None:
            compared += 1
            if is_ > was:
                worse.append(f"quadratic ratio n = {n}: {was:.2f} → {is_:.2f}")
    measured = ("; ".join(worse) if worse else "no entry worse") + (
        f" ({compared} numbers compared)")
    basis = (f"before: {before['run']} (commit {before['commit']}); now: {now['run']}"
             + (f" (commit {now['commit']})" if now["commit"] else ""))
    return name, measured, compared > 0 and not worse, basis


def read_before(path: Path) -> dict | None:
    return json.loads(path.read_text(encoding="utf-8")) if path.is_file() else None


def read_now(path: Path) -> dict | None:
    return smooth_numbers(path.read_text(encoding="utf-8")) if path.is_file() else None


# ---------------------------------------------------------------------------- targets


def noisy_target(study: NoisyStudy) -> Target:
    """Ahead of (never behind) every baseline at every budget at τ = 1e-3."""
    sizes = [p.n for p in study.pairs]
    d = profiles.data_profile(study.counts(HEADLINE), sizes, DATA_BUDGETS)
    ours = study.names.index("directional")
    lagging = behind(d, list(DATA_BUDGETS), ours)
    words = []
    for s, budgets in lagging.items():
        gap = max(row[s] - row[ours] for row in d)
        words.append(f"{study.names[s]} ahead at {len(budgets)} of {len(DATA_BUDGETS)} budgets "
                     f"(by up to {100 * gap:.0f} points)")
    measured = (f"{percent(d[-1, ours])} solved at {DATA_BUDGETS[-1]} (n + 1); "
                + ("; ".join(words) if words else "never behind a baseline"))
    return (f"noisy MGH (relative noise {LEVEL:g}), τ = {HEADLINE:.0e}: not behind any baseline "
            f"at any budget 0 to {DATA_BUDGETS[-1]} (n + 1)", measured, not lagging,
            _instances(study))


def _instances(study: NoisyStudy) -> str:
    if study.streams == 1:
        return f"{len(study.pairs)} pairs"
    return f"{len(study.pairs)} (pair, noise stream) runs, {study.streams} streams"


def gaussian_targets(rows: Sequence[GaussianRow]) -> list[Target]:
    """Per function: final true gap ≤ 10 σ on at least 4 seeds of 5, and never `flat`."""
    out = []
    for row in rows:
        if row.solver != "directional":
            continue
        seeds = len(row.gaps)
        flat = sum(1 for v in row.verdicts if v == "flat")
        other = sum(1 for v in row.verdicts if v not in ("flat", "minimum"))
        need = seeds - 1
        out.append((f"{row.function.name} (n = {row.function.n}, σ = {row.function.sigma:g}): "
                    f"gap ≤ 10 σ on ≥ {need} of {seeds} seeds, never flat",
                    f"{row.within()} of {seeds} within 10 σ (median {_g(np.median(row.gaps))} σ)"
                    f"; flat on {flat}" + (f", neither flat nor minimum on {other}" if other
                                           else ""),
                    row.within() >= need and flat == 0, f"{seeds} seeds, default settings"))
    return out


# ---------------------------------------------------------------------------- document


def document(study: NoisyStudy, rows: Sequence[GaussianRow], smooth: Target, *, seconds: float,
             stamp: str, commit: str, figure: str | None) -> str:
    """The whole of ``results/noise.md``."""
    lines = [
        "### Noisy objectives: the MGH set under relative noise, smooth functions plus Gaussian "
        "noise",
        "",
        f"Written by `python -m benchmarks.noisy` ({seconds:.0f} s) on {stamp}"
        + (f", code commit {commit}" if commit else "") + ". Do not edit by hand: rerun it "
        "(after `python -m benchmarks`, whose smooth numbers it compares). Every random "
        "number comes from a fixed seed, so the evaluation counts are deterministic.",
        "",
        "#### Targets",
        "",
        *target_table([noisy_target(study), *gaussian_targets(rows), smooth]),
        "",
        *_mgh_section(study, figure),
        "",
        *_gaussian_section(rows),
    ]
    return "\n".join(lines).rstrip() + "\n"


def _mgh_section(study: NoisyStudy, figure: str | None) -> list[str]:
    sizes = [p.n for p in study.pairs]
    lines = [
        f"#### Noisy MGH: relative noise {LEVEL:g}",
        "",
        f"The pairs of the smooth profiles (same problems, starts and budget, "
        f"{study.units} (n + 1) evaluations; {_instances(study)}), each value returned as "
        f"f(x)(1 + {LEVEL:g} ε) with ε "
        "uniform on [−1, 1] and drawn anew at every evaluation. Moré & Wild (2009) perturb "
        "their test functions by the same relative level 1e-3 through a deterministic "
        "oscillating factor of x in [−1, 1] (from memory, details not checked against the "
        "paper); here ε is stochastic instead, on the same range (our choice: a simulation "
        "whose noise changes from run to run). Every solver on a pair sees the same "
        "random stream. **Judged on true values:** after k evaluations a solver has reached the "
        "least noise-free value among the points it evaluated; the test f(x0) − f ≥ (1 − τ)(f(x0) "
        "− f_L) (Moré & Wild 2009, eq. 2.2) is applied to that, f(x0) and f_L (the least true "
        "value any solver evaluated) noise-free too. A noisy value never counts, since the lowest "
        "one is biased low. Because this credits a good point even when the noise hid it from the "
        "solver, the second table judges instead the point each solver *returned* after its "
        "run (`directional`: the solution's point; a baseline: its lowest noisy value). "
        "`directional` runs without the curvature check, as in the smooth profiles.",
        "",
    ]
    if study.dropped:
        lines += ["Left out: " + "; ".join(study.dropped) + ".", ""]
    if figure:
        lines += [f"![noisy data profiles]({figure})", ""]
    rows = []
    for tau in NOISY_TAUS:
        d = profiles.data_profile(study.counts(tau), sizes, TABLE_BUDGETS)
        rows += [[f"{tau:.0e}", name, *[percent(x) for x in d[:, s]]]
                 for s, name in enumerate(study.names)]
    lines += ["Data profiles (true values): fraction of pairs solved within the budget (units of "
              "n + 1 evaluations).", "",
              *table(["τ", "solver", *[str(b) for b in TABLE_BUDGETS]], rows), ""]
    rows = []
    for tau in NOISY_TAUS:
        ok = study.returned_solved(tau)
        rows += [[f"{tau:.0e}", name, percent(float(np.mean(ok[:, s])))]
                 for s, name in enumerate(study.names)]
    spent = [whole(float(np.median([row[s].true_values.size / (p.n + 1)
                                    for row, p in zip(study.runs, study.pairs)])))
             for s in range(len(study.names))]
    lines += ["The returned point: share of pairs where its true value passes the test, and the "
              "median evaluations each solver spent (units of n + 1; it may stop before the "
              "budget).", "",
              *table(["τ", "solver", "returned point passes"], rows), "",
              *table(["solver", "median evaluations spent, n + 1"],
                     [[name, spent[s]] for s, name in enumerate(study.names)]), ""]
    lines += ["<details><summary>Where the point `directional` returned misses τ = "
              f"{HEADLINE:.0e} and a baseline's passes</summary>", "", *_missed(study), "",
              "</details>"]
    return lines


def _missed(study: NoisyStudy) -> list[str]:
    ok = study.returned_solved(HEADLINE)
    lowest = study.lowest()
    ours = study.names.index("directional")
    rows = []
    for p, (pair, row) in enumerate(zip(study.pairs, study.runs)):
        others = [s for s in range(len(study.names)) if s != ours and ok[p, s]]
        if ok[p, ours] or not others:
            continue
        best = min(others, key=lambda s: row[s].returned_value)
        rows.append([pair.label.strip(), f"{pair.f0:.4g}", f"{lowest[p]:.6g}",
                     f"{row[ours].returned_value:.6g}",
                     whole(row[ours].true_values.size / (pair.n + 1)),
                     f"{study.names[best]}: {row[best].returned_value:.6g}"])
    if not rows:
        return ["None."]
    return table(["pair", "f(x0)", "f_L (true)", "directional returned (true value)",
                  "its evaluations, n + 1", "best baseline returned (true value)"], rows)


def _gaussian_section(rows: Sequence[GaussianRow]) -> list[str]:
    functions: list[Smooth] = []
    for row in rows:
        if row.function not in functions:
            functions.append(row.function)
    lines = [
        "#### Smooth functions plus Gaussian noise",
        "",
        "Functions of our own, each with minimum 0 at a known point and a well-determined "
        "curvature there (so `flat` is always wrong), with Gaussian noise of standard deviation "
        "σ added at every evaluation (five seeds each). `directional.minimize` with its default "
        "settings (budget 1000 (n + 1), curvature check on, no noise level given); the baselines "
        "with the same budget. Gap: the true (noise-free) value at the returned point (a "
        "baseline's lowest noisy value), in units of σ.",
        "",
        *table(["function", "n", "σ", "start", "minimizer"],
               [[f"{f.name}: {f.formula}", f.n, f"{f.sigma:g}", _vector(f.start),
                 _vector(f.minimizer)] for f in functions]),
        "",
        *table(["function", "solver", "gap / σ, per seed", "median", "≤ 10 σ", "verdicts",
                "evaluations (median)"],
               [[r.function.name, r.solver, ", ".join(_g(g) for g in r.gaps),
                 _g(float(np.median(r.gaps))), f"{r.within()} of {len(r.gaps)}",
                 _verdicts(r.verdicts), whole(float(np.median(r.evaluations)))] for r in rows]),
    ]
    return lines


def _g(x: float) -> str:
    if not math.isfinite(x):
        return "inf"
    return f"{x:.2g}" if abs(x) < 10 else f"{x:.0f}"


def _vector(x: np.ndarray) -> str:
    return "(" + ", ".join(f"{v:g}" for v in np.round(x, 4)) + ")"


def _verdicts(verdicts: Sequence[str]) -> str:
    if not any(verdicts):
        return "—"
    counts: dict[str, int] = {}
    for v in verdicts:
        counts[v] = counts.get(v, 0) + 1
    return ", ".join(f"{v} × {k}" for v, k in counts.items())


# ---------------------------------------------------------------------------- RESULTS.md


def include(results: str, name: str, text: str) -> str:
    """``results`` (a RESULTS.md) with the block of ``results/<name>`` replaced by ``text``, or
    inserted in name order, laid out as the full run lays out the files it includes.

    >>> page = "# R\\n\\n## From `results/a.md`\\n\\nold a\\n\\n\\n## From `results/c.md`\\n\\nc\\n"
    >>> include(page, "b.md", "b").count("## From")
    3
    >>> include(page, "a.md", "new a") == page.replace("old a", "new a")
    True
    """
    heading = re.compile(r"^## From `results/([^`]+)`$", re.M)
    found = [(m.start(), m.group(1)) for m in heading.finditer(results)]
    block = f"## From `results/{name}`\n\n{text.rstrip()}\n"
    for k, (at, other) in enumerate(found):
        if other >= name:
            end = at if other > name else (found[k + 1][0] if k + 1 < len(found) else None)
            tail = "" if end is None else "\n\n" + results[end:]
            return results[:at] + block + tail
    return results.rstrip() + "\n\n\n" + block
