"""One self-contained HTML page for a run: what was fitted, the verdict, the numbers, the figures.

The page is a single file to send or archive: the figures are inline SVG (sharp at any zoom, text
selectable; a scatter of thousands of points is an image inside the SVG), the style sheet is
inline, and it has no script and loads nothing: no font, no image, no link to fetch.  A print
style sheet keeps each figure and table on one page.

Everything that comes from outside the package (the title, parameter names and units, notes, the
error texts that programs print, file names) is escaped with `html.escape` where it is written;
the page is built from small helpers (`_element`) that escape every text and attribute unless it
is a fragment the module made itself (`_Html`).  Matplotlib escapes the texts inside the SVG, and
reads no ``$...$`` as mathematics here (``text.parse_math`` off), so a name is shown as written.

Colours: the verdict is a word and a symbol first, colour second; the correlation grid runs from
blue to orange through white (a diverging scheme read correctly with the common colour-vision
deficiencies; Brewer & Harrower, ColorBrewer "PuOr"), with the number printed in every cell.
"""

from __future__ import annotations

import hashlib
import html
import math
import os
import platform
import re
import sys
import tempfile
import time
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from directional.errors import ObjectiveError
from directional.parameters import Parameter
from directional.records import Stop, Verdict
from directional.solution import CAUTION, Solution

PALETTE = {  # Okabe & Ito (2008), "Color Universal Design": safe for colour-blind readers
    "blue": "#0072B2", "orange": "#E69F00", "vermilion": "#D55E00", "green": "#009E73",
    "grey": "#6b6b6b",
}
DETAIL = 2000  # characters of one failure's error text shown (the rest is cut, and says so)


class _Html(str):
    """A fragment of HTML this module wrote; any other ``str`` is text and gets escaped."""


@dataclass(frozen=True, slots=True, kw_only=True)
class Origin:
    """How the result was obtained, for the report's last section (every field optional)."""

    problem_file: Path | None = None
    journal: Path | None = None
    command: str = ""
    started: float | None = None  # seconds since the epoch
    finished: float | None = None
    wall_seconds: float | None = None


def origin_of(
    *, problem_file: str | Path | None = None, journal: str | Path | None = None,
    history: Sequence[Any] = (), command: str = "",
) -> Origin:
    """An `Origin` from what is at hand: the journal's sessions, else the evaluations' times.

    A journal that cannot be read leaves the dates to the evaluations (never an error: the report
    is written all the same).
    """
    started = finished = wall = None
    if journal is not None and Path(journal).exists():
        from directional.errors import JournalError
        from directional.run import journal as journals

        try:
            sessions = journals.read(journal).sessions
        except JournalError:
            sessions = ()
        opened = [s["opened"] for s in sessions if s.get("opened") is not None]
        closed = [s["closed"] for s in sessions if s.get("closed") is not None]
        if opened:
            started, finished = min(opened), max(closed) if closed else None
            wall = sum(s["closed"] - s["opened"] for s in sessions
                       if s.get("closed") is not None and s.get("opened") is not None)
    times = [(e.started, e.started + e.seconds) for e in history if getattr(e, "started", 0) > 0]
    if started is None and times:
        started, finished = min(t[0] for t in times), max(t[1] for t in times)
        wall = finished - started
    return Origin(
        problem_file=None if problem_file is None else Path(problem_file),
        journal=None if journal is None else Path(journal),
        command=command, started=started, finished=finished, wall_seconds=wall,
    )


def write_html(
    result: Any,
    path: str | Path,
    *,
    title: str = "",
    parameters: Sequence[Parameter] | None = None,
    kind: str = "value",
    objective: Callable[[np.ndarray], Any] | None = None,
    fit: Callable[[np.ndarray], Any] | None = None,
    extra: int = 0,
    origin: Origin | None = None,
) -> Path:
    """Write the report of ``result`` (a `Solution` or a many-start `Landscape`) to ``path``.

    ``objective``, ``kind``, ``fit`` and ``extra`` are as for `plots.write_plots` (at most
    ``extra`` report-only evaluations for the maps and profiles, never journaled).  Returns the
    path; folders are created.

    Raises
    ------
    ObjectiveError
        For a many-start result with no minimum at all.
    """
    landscape = None if isinstance(result, Solution) else result
    if landscape is not None and not landscape.minima:
        raise ObjectiveError("no search got past its start: there is no minimum to report")
    sol = result if landscape is None else landscape.minima[0]
    figures = _figures(sol, landscape, title=title, parameters=parameters, kind=kind,
                       objective=objective, fit=fit, extra=extra)
    page = _page(sol, landscape, title=title, parameters=parameters, kind=kind, figures=figures,
                 origin=origin or origin_of(history=sol.history))
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(page, encoding="utf-8")
    return path


# ----------------------------------------------------------------------------- building blocks


def _text(value: Any) -> str:
    return value if isinstance(value, _Html) else html.escape(str(value), quote=True)


def _element(tag: str, *children: Any, **attributes: Any) -> _Html:
    """``<tag attributes>children</tag>``: texts and attribute values escaped, fragments kept."""
    attrs = "".join(
        f' {name.rstrip("_").replace("_", "-")}="{html.escape(str(value), quote=True)}"'
        for name, value in attributes.items() if value is not None
    )
    return _Html(f"<{tag}{attrs}>" + "".join(_text(c) for c in children) + f"</{tag}>")


def _join(parts: Iterable[Any]) -> _Html:
    return _Html("".join(_text(p) for p in parts))


def _number(value: float, digits: int = 6) -> str:
    value = float(value)
    if math.isnan(value):
        return "–"
    if math.isinf(value):
        return "−∞" if value < 0 else "∞"
    return f"{value:.{digits}g}".replace("-", "−")


def _table(head: Sequence[Any], rows: Iterable[Sequence[Any]], caption: str,
           numeric: Sequence[int] = ()) -> _Html:
    """A real table: a caption, a header row of ``th scope=col``, a first column of row heads."""
    header = _element("tr", *(_element("th", h, scope="col") for h in head))
    body = []
    for row in rows:
        cells = [_element("th", row[0], scope="row")]
        cells += [_element("td", cell, class_="num" if k + 1 in numeric else None)
                  for k, cell in enumerate(row[1:])]
        body.append(_element("tr", *cells))
    return _element("table", _element("caption", caption), _element("thead", header),
                    _element("tbody", *body))


# ----------------------------------------------------------------------------- the sections


_VERDICT = {
    Verdict.MINIMUM: ("✔", "A verified minimum", "the objective rises in every direction from "
                      "this point (the numerical Hessian is positive definite within its error "
                      "bars)."),
    Verdict.SADDLE: ("✘", "Not a minimum: a saddle point", "the objective still falls along "
                     "some direction from this point."),
    Verdict.MAXIMUM: ("✘", "Not a minimum: a maximum", "the objective falls in every "
                      "direction from this point."),
    Verdict.FLAT: ("⚠", "A minimum that is not fully determined", "some combination of the "
                   "parameters hardly changes the objective (a flat direction)."),
    Verdict.NONSMOOTH: ("⚠", "Not smooth at this point", "the objective has a kink or a jump "
                        "here, so its curvature is judged only along the smooth directions."),
    Verdict.NOISY: ("⚠", "Curvature hidden by noise", "the objective's noise is larger than the "
                    "change the curvature makes at every step the bounds allow."),
    Verdict.UNCHECKED: ("⚠", "Not verified", "no curvature check was made at this point."),
}


def _stop_words(sol: Solution) -> str:
    spent = f"{sol.evaluations} evaluations"
    if sol.failures:
        spent += f" ({sol.failures} failed)"
    return {
        Stop.CONVERGED: f"The search converged after {sol.cycles} cycles and {spent}.",
        Stop.BUDGET: f"The search stopped when its budget was spent: {spent}.",
        Stop.INTERRUPTED: f"The run was interrupted after {spent}; "
                          "directional resume continues it from its journal.",
        Stop.STALLED: f"The search stalled after {spent}: no step made progress.",
    }[sol.stop]


def _verdict(sol: Solution, landscape: Any, kind: str) -> _Html:
    symbol, head, words = _VERDICT[sol.verdict]
    good = sol.verdict is Verdict.MINIMUM
    parts = [
        _element("p", _element("span", symbol, class_="symbol", aria_hidden="true"), " ",
                 _element("strong", head), ": ", words, class_="verdict-line"),
        _element("p", _stop_words(sol)),
    ]
    if sol.reason:
        parts.append(_element("p", "Reason: ", sol.reason))
    value = "sum of squares S" if kind == "residuals" else "objective value"
    parts.append(_element("p", f"Best {value}: ", _element("strong", _number(sol.value, 10)),
                          "." if not sol.active else "",
                          f"; on a bound: {', '.join(sol.active)}." if sol.active else ""))
    if landscape is not None:
        count = len(landscape.minima)
        parts.append(_element(
            "p", f"Many starts: {len(landscape.starts)} searches found {count} distinct "
            f"minim{'um' if count == 1 else 'a'}; the best is reported here."))
    return _element("section", _element("h2", "Verdict"), *parts,
                    class_="verdict " + ("good" if good else "warn"), id="verdict")


def _parameters(sol: Solution, parameters: Sequence[Parameter] | None) -> _Html:
    by_name = {p.name: p for p in parameters or ()}
    u = sol.uncertainty
    errors = getattr(u, "standard_errors", None) if u is not None else None
    intervals = getattr(u, "intervals", None) if u is not None else None
    level = getattr(u, "level", 0.95) if u is not None else 0.95
    head = ["parameter", "unit", "scale", "start", "lower", "upper", "estimate"]
    if errors is not None:
        head += ["standard error", f"{100 * level:g} % interval"]
    rows = []
    for i, name in enumerate(sol.names):
        p = by_name.get(name)
        row = [name, sol.units[i] or "–", p.scale if p else "–",
               _number(p.start) if p else "–", _number(sol.lower[i]), _number(sol.upper[i]),
               _number(sol.point[i], 8) + (" (on a bound)" if name in sol.active else "")]
        if errors is not None:
            error = float(np.asarray(errors, dtype=float).ravel()[i])
            band = np.asarray(intervals, dtype=float).reshape(-1, 2)[i] if intervals is not None \
                else (math.nan, math.nan)
            row += [_number(error, 4),
                    "–" if not np.all(np.isfinite(band)) else
                    f"[{_number(band[0])}, {_number(band[1])}]"]
        rows.append(row)
    table = _table(head, rows, "The parameters: bounds, start and the estimate at the minimum",
                   numeric=range(3, len(head)))
    extra = []
    if u is not None and getattr(u, "residual_variance", None) is not None:
        extra.append(_element(
            "p", f"Linearized at the minimum (Bates & Watts 1988): residual variance s² = "
            f"{_number(u.residual_variance)} from {getattr(u, 'observations', '?')} residuals, "
            f"{getattr(u, 'degrees_of_freedom', '?')} degrees of freedom.", class_="small"))
    c = sol.curvature
    if c is not None:
        cost = f", {c.evaluations} evaluations" if getattr(c, "evaluations", 0) else ""
        extra.append(_element("p", f"Curvature check ({c.source}{cost}): condition number "
                                   f"{_number(c.condition, 3)}.", class_="small"))
        for combination in getattr(c, "undetermined", ()):
            extra.append(_element("p", "Not determined: ", combination, class_="small"))
    return _element("section", _element("h2", "Parameters"), table, *extra, id="parameters")


def _colour(r: float) -> tuple[str, str]:
    """Background and text colour of a correlation ``r``: blue (−1), white (0), orange (+1)."""
    if not math.isfinite(r):
        return "#eeeeee", "#000000"
    end = (0x5e, 0x3c, 0x99) if r < 0 else (0xe6, 0x61, 0x01)  # ColorBrewer PuOr ends
    t = min(abs(r), 1.0)
    rgb = [round(255 + (e - 255) * t) for e in end]
    return "#{:02x}{:02x}{:02x}".format(*rgb), "#ffffff" if t > 0.6 else "#000000"


def _correlation(sol: Solution) -> _Html | None:
    u = sol.uncertainty
    matrix = getattr(u, "correlation", None) if u is not None else None
    if matrix is None:
        return None
    matrix = np.asarray(matrix, dtype=float)
    header = _element("tr", _element("td", ""), *(_element("th", n, scope="col") for n in sol.names))
    rows = []
    for i, name in enumerate(sol.names):
        cells = [_element("th", name, scope="row")]
        for j in range(len(sol.names)):
            background, ink = _colour(matrix[i, j])
            cells.append(_element("td", _number(matrix[i, j], 3) if math.isfinite(matrix[i, j])
                                  else "–", class_="num", style=f"background:{background};"
                                  f"color:{ink}"))
        rows.append(_element("tr", *cells))
    table = _element("table", _element("caption", "Correlations of the estimates (−1 blue, 0 "
                                                  "white, +1 orange)"),
                     _element("thead", header), _element("tbody", *rows), class_="grid")
    return _element("section", _element("h2", "Correlations"), table, id="correlations")


def _notes(sol: Solution, landscape: Any) -> _Html | None:
    notes = list(sol.notes) + ([] if landscape is None else list(landscape.notes))
    if sol.spread is not None and landscape is None:  # a landscape's notes carry the run's
        notes.insert(0, sol.spread.describe())
    if not notes:
        return None
    return _element("section", _element("h2", "Notes and warnings"),
                    _element("ul", *(_element("li", n) for n in notes)), id="notes")


def _failures(history: Sequence[Any]) -> _Html | None:
    """The failed evaluations grouped by what went wrong, most frequent first."""
    groups: dict[tuple[str, str], list[Any]] = {}
    for e in history:
        if e.status != "ok":
            groups.setdefault((e.status, (e.detail or "").strip()), []).append(e)
    if not groups:
        return None
    items = []
    for (status, detail), members in sorted(groups.items(), key=lambda g: -len(g[1])):
        shown = detail if len(detail) <= DETAIL else detail[:DETAIL] + " … (cut)"
        first = min(m.index for m in members) + 1
        items.append(_element(
            "li", _element("strong", f"{len(members)} × {status}"),
            f" (first at evaluation {first})", _element("pre", shown or "(no message)")))
    total = sum(len(m) for m in groups.values())
    return _element("section", _element("h2", f"Failed evaluations: {total}"),
                    _element("ul", *items, class_="failures"), id="failures")


def _minima(landscape: Any) -> _Html | None:
    if landscape is None:
        return None
    rows = [[f"#{k + 1}", _number(m.value, 10), m.verdict.value, str(count),
             ", ".join(f"{n} = {_number(v)}" for n, v in zip(m.names, m.point))]
            for k, (m, count) in enumerate(zip(landscape.minima, landscape.counts))]
    table = _table(["minimum", "value", "verdict", "starts", "point"], rows,
                   "The distinct minima, best first", numeric=(1, 3))
    return _element("section", _element("h2", "Distinct minima"), table, id="minima")


def _problem(sol: Solution, parameters: Sequence[Parameter] | None, kind: str) -> _Html:
    what = ("a calibration: the sum of squares of a residual vector is minimized" if
            kind == "residuals" else "a minimization of one objective value")
    names = ", ".join(sol.names)
    return _element("p", f"The problem: {what}, over {len(sol.names)} parameter"
                         f"{'s' if len(sol.names) != 1 else ''} ({names}).", class_="lead")


# ----------------------------------------------------------------------------- figures


@dataclass(frozen=True, slots=True)
class _Figure:
    name: str
    caption: str
    alt: str
    svg: str


def _figures(sol: Solution, landscape: Any, *, title: str, parameters: Any, kind: str,
             objective: Any, fit: Any, extra: int) -> list[_Figure]:
    import matplotlib

    from directional.report.plots import write_plots

    with tempfile.TemporaryDirectory(prefix="directional-html-") as folder, \
            matplotlib.rc_context({"svg.fonttype": "none", "text.parse_math": False}):
        written = write_plots(sol, folder, parameters=parameters, objective=objective, kind=kind,
                              fit=fit, extra=extra, title="", format="svg")
        if landscape is not None and len(sol.names) >= 2:
            from directional.report.maps import start_map

            written.append(start_map(landscape, objective, Path(folder) / "starts.svg",
                                     kind=kind, extra=extra))
        return [_Figure(p.stem, *_describe(p.stem, sol, landscape),
                        svg=p.read_text(encoding="utf-8")) for p in written]


def _describe(name: str, sol: Solution, landscape: Any) -> tuple[str, str]:
    """The caption and the alternative text of a figure."""
    names = ", ".join(sol.names)
    texts = {
        "history": ("Every evaluation's value and the best so far.",
                    f"Objective value against evaluation number for {sol.evaluations} "
                    f"evaluations; the best value so far falls to {_number(sol.value)}"
                    + (f"; {sol.failures} failed evaluations marked as crosses on the bottom "
                       "edge." if sol.failures else ".")),
        "profiles": ("The objective through the minimum along each parameter, with the parabola "
                     "of the Hessian; shaded: the interval of a calibration.",
                     f"One panel per parameter ({names}): the objective against the parameter "
                     "near the minimum, the Hessian's parabola dashed, the minimum as a star."),
        "path": ("The search path over a map of the objective on two parameters (the others at "
                 "their best values).",
                 "A colour map of the objective over two parameters, dark where it is low, with "
                 "the search path from the start square to the minimum star."),
        "fit": ("The fitted model against the data.",
                "The data as points with error bars and the fitted model as a line, one panel "
                "per observed quantity."),
        "residuals": ("Residuals at the minimum: model minus data.",
                      "Residuals, model minus data, against time or index; most should lie "
                      "in the shaded band and show no pattern."),
        "starts": ("The start map: each start coloured by the minimum its search reached.",
                   f"{0 if landscape is None else len(landscape.starts)} start points, "
                   f"coloured by which of the {0 if landscape is None else len(landscape.minima)}"
                   " distinct minima (stars) their search reached."),
    }
    return texts.get(name, (name, name))


_PROLOGUE = re.compile(r"\A.*?(?=<svg\b)", re.S)
_METADATA = re.compile(r"<metadata>.*?</metadata>", re.S)
_SIZE = re.compile(r'\s(width|height)="[^"]*"')


def _inline(figure: _Figure, number: int) -> _Html:
    """The SVG as an inline element with a title for screen readers, sized by the page."""
    svg = _METADATA.sub("", _PROLOGUE.sub("", figure.svg, count=1), count=1)
    end = svg.index(">")
    root = _SIZE.sub("", svg[:end])
    label = f"figure-{number}-alt"
    svg = (f'{root} role="img" aria-labelledby="{label}" class="plot">'
           f'<title id="{label}">{html.escape(figure.alt)}</title>' + svg[end + 1:])
    return _element("figure", _Html(svg),
                    _element("figcaption", f"Figure {number}. ", figure.caption),
                    id=f"figure-{figure.name}")


# ----------------------------------------------------------------------------- provenance


def _provenance(sol: Solution, landscape: Any, origin: Origin) -> _Html:
    from directional import __version__

    rows: list[list[Any]] = [["package", f"directional {__version__}"]]
    if origin.problem_file is not None:
        rows.append(["problem file", str(origin.problem_file)])
        try:
            digest = hashlib.sha256(origin.problem_file.read_bytes()).hexdigest()
            rows.append(["problem file SHA-256", digest])
        except OSError:
            rows.append(["problem file SHA-256", "(the file cannot be read now)"])
    if origin.journal is not None:
        rows.append(["journal", str(origin.journal)])
    if origin.command:
        rows.append(["command", origin.command])
    if origin.started is not None:
        rows.append(["started", _when(origin.started)])
    if origin.finished is not None:
        rows.append(["finished", _when(origin.finished)])
    if landscape is not None:  # the whole run's, every search included
        rows.append(["evaluations", f"{landscape.evaluations} ({landscape.failures} failed), "
                                    f"{len(landscape.starts)} searches"])
    else:
        rows.append(["evaluations", f"{sol.evaluations} ({sol.failures} failed)"])
    if origin.wall_seconds is not None:
        rows.append(["wall time", f"{origin.wall_seconds:.3g} s"])
    rows.append(["report written", _when(time.time())])
    rows.append(["machine", f"{platform.node() or '?'}: {platform.platform()}, "
                            f"{os.cpu_count()} cores, Python {sys.version.split()[0]}"])
    return _element("section", _element("h2", "How it was obtained"),
                    _table(["what", "value"], rows, "Provenance"), id="provenance")


def _when(seconds: float) -> str:
    return time.strftime("%Y-%m-%d %H:%M:%S UTC", time.gmtime(seconds))


# ----------------------------------------------------------------------------- the page


STYLE = """
:root { --ink: #1a1a1a; --soft: #555; --rule: #d0d0d0; --good: #0072B2; --warn: #D55E00; }
body { font: 16px/1.5 system-ui, -apple-system, "Segoe UI", "DejaVu Sans", sans-serif;
       color: var(--ink); max-width: 62rem; margin: 0 auto; padding: 1rem 1.5rem 3rem; }
h1 { font-size: 1.7rem; margin: 0.5rem 0 0.2rem; }
h2 { font-size: 1.25rem; border-bottom: 1px solid var(--rule); padding-bottom: 0.2rem; }
.lead, .small { color: var(--soft); } .small { font-size: 0.9rem; }
.verdict { border-left: 0.5rem solid var(--good); padding: 0.2rem 1rem; background: #f3f7fb; }
.verdict.warn { border-left-color: var(--warn); background: #fdf3ee; }
.verdict h2 { border: 0; } .symbol { font-size: 1.3rem; }
table { border-collapse: collapse; margin: 0.6rem 0; font-size: 0.92rem; }
caption { text-align: left; color: var(--soft); padding-bottom: 0.3rem; }
th, td { border: 1px solid var(--rule); padding: 0.25rem 0.55rem; text-align: left; }
thead th { background: #f2f2f2; } td.num { text-align: right; font-variant-numeric: tabular-nums; }
table.grid td { min-width: 4.5rem; text-align: center; }
figure { margin: 1.2rem 0; } svg.plot { width: 100%; height: auto; display: block; }
figcaption { color: var(--soft); font-size: 0.92rem; }
pre { white-space: pre-wrap; word-break: break-word; background: #f6f6f6; padding: 0.4rem;
      font-size: 0.85rem; max-height: 12rem; overflow: auto; }
.caution { border: 1px solid var(--warn); padding: 0.5rem 1rem; }
nav ul { padding-left: 1.2rem; columns: 2; }
@media print {
  body { max-width: none; font-size: 11pt; padding: 0; } nav { display: none; }
  figure, table, .verdict, .caution, li { break-inside: avoid; page-break-inside: avoid; }
  h2 { break-after: avoid; page-break-after: avoid; } pre { max-height: none; overflow: visible; }
  .verdict, td { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
}
"""  # the colours: PALETTE["blue"] and PALETTE["vermilion"]


def _page(sol: Solution, landscape: Any, *, title: str, parameters: Any, kind: str,
          figures: list[_Figure], origin: Origin) -> str:
    heading = title or "Report of a directional run"
    sections = [
        _verdict(sol, landscape, kind),
        _parameters(sol, parameters),
        _correlation(sol),
        _minima(landscape),
        _notes(sol, landscape),
        _failures(sol.history if landscape is None else landscape.history),
    ]
    if figures:
        sections.append(_element("section", _element("h2", "Figures"),
                                 *(_inline(f, k + 1) for k, f in enumerate(figures)),
                                 id="figures"))
    sections.append(_provenance(sol, landscape, origin))
    sections.append(_element("section", _element("h2", "Caution"), _element("p", CAUTION),
                             class_="caution", id="caution"))
    present = [s for s in sections if s is not None]
    contents = _element("nav", _element("ul", *(
        _element("li", _element("a", _heading_of(s), href=f"#{_id_of(s)}")) for s in present)),
        aria_label="Contents")
    # the verdict first, then the table of contents, then the rest
    body = _element("body", _element("header", _element("h1", heading),
                                     _problem(sol, parameters, kind)),
                    _element("main", present[0], contents, *present[1:]))
    head = _element("head", _Html('<meta charset="utf-8">'),
                    _Html('<meta name="viewport" content="width=device-width, initial-scale=1">'),
                    _Html("<meta http-equiv=\"Content-Security-Policy\" content=\"default-src "
                          "'none'; style-src 'unsafe-inline'; img-src data:\">"),
                    _element("title", heading), _element("style", _Html(STYLE)))
    return "<!DOCTYPE html>\n" + _element("html", head, body, lang="en") + "\n"


def _id_of(section: str) -> str:
    match = re.search(r'\sid="([^"]+)"', section[: section.index(">") + 1])
    return match.group(1) if match else ""


def _heading_of(section: str) -> str:
    match = re.search(r"<h2>(.*?)</h2>", section, re.S)
    return html.unescape(match.group(1)) if match else ""
