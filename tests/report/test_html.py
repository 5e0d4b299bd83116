"""The HTML report, opened in a real headless Chromium: what it shows, that it runs nothing.

Reports checked: the demo's, a many-start run's (written by ``run --html`` and by ``show --html``
from its journal), an interrupted run's (``show --html``), and one whose title, units, notes,
parameter names and a failing program's standard error carry markup.  Without Chromium the
browser tests skip with the reason (``pytest -rs`` prints it); with ``CI=true`` a missing browser
is a failure.  The escaping is also checked without a browser, by Python's own HTML parser.

Outside facts used: the minimum of a shifted quadratic bowl is its centre (analytic); HTML's
parsing of text and attributes (WHATWG HTML Living Standard, sec. 13.2); the DevTools protocol's
pipe transport (Chromium, ``--remote-debugging-pipe``).  Everything else is common practice, no
source.
"""

from __future__ import annotations

import contextlib
import dataclasses
import html.parser
import io
import json
import os
import sqlite3
import sys
import textwrap
from pathlib import Path

import headless
import numpy as np
import pytest

from directional.interface import cli
from directional.interface.problemfile import Problem
from directional.interface.runs import solve
from directional.report.html import origin_of, write_html

EVIL = "<script>window.pwned=1</script></table><img src=x onerror=\"window.pwned=2\"> \"q\" 'a' &amp;"

MODEL = textwrap.dedent(
    """\
    import math
    import os

    CALLS = {"n": 0}


    def bowl(x):
        return (x[0] - 1.5) ** 2 + 4.0 * (math.log(x[1]) - math.log(3.0)) ** 2 + 2.0


    def wavy(x):
        # two valleys in a: many starts find two minima
        return (x[0] ** 2 - 4.0) ** 2 + 4.0 * (math.log(x[1]) - math.log(3.0)) ** 2 + 0.3 * x[0]


    def stopping(x):
        CALLS["n"] += 1
        if os.environ.get("REPORT_TEST_STOP") and CALLS["n"] > 25:
            raise KeyboardInterrupt  # what Ctrl-C does inside the objective
        return 100.0 * (x[1] - x[0] ** 2) ** 2 + (1.0 - x[0]) ** 2  # Rosenbrock (1960): slow
    """
)

PROBLEM = textwrap.dedent(
    """\
    title = "Two valleys"

    [[parameter]]
    name = "a"
    start = 0.5
    lower = -4.0
    upper = 4.0
    unit = "m"

    [[parameter]]
    name = "b"
    start = 1.0
    lower = 0.01
    upper = 100.0
    scale = "log"
    unit = "s"

    [objective]
    function = "report_model:{function}"

    [journal]
    path = "{journal}"
    """
)

# a program that fails where a > 1.2 (the search looks there) with markup on its standard error
PROGRAM = textwrap.dedent(
    """\
    import sys
    a, b = float(sys.argv[1]), float(sys.argv[2])
    if a > 1.2:
        sys.stderr.write(sys.argv[3] + "\\n")
        sys.exit(3)
    print((a - 1.0) ** 2 + (b - 0.5) ** 2 + 1.0)
    """
)


def problem_file(folder: Path, function: str, journal: str) -> Path:
    (folder / "report_model.py").write_text(MODEL, encoding="utf-8")
    path = folder / f"{function}.toml"
    path.write_text(PROBLEM.format(function=function, journal=journal), encoding="utf-8")
    return path


def command(*args: str) -> int:
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
        return cli.main(list(args))


@pytest.fixture(scope="module")
def chromium() -> str:
    found = headless.find()
    if found is None:
        if os.environ.get("CI") == "true":
            pytest.fail("CI=true but no Chromium is installed: .ci/run installs it with apt-get")
        pytest.skip("no Chromium installed (apt-get install chromium): the browser test of the "
                    "HTML report cannot run here")
    return found


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("demo") / "directional-demo"
    command("demo", "--folder", str(folder), "--quiet")
    assert (folder / "report.html").is_file()
    return folder


@pytest.fixture(scope="module")
def many(tmp_path_factory) -> dict[str, Path]:
    folder = tmp_path_factory.mktemp("many")
    problem = problem_file(folder, "wavy", "wavy.sqlite")
    assert command("run", str(problem), "--starts", "6", "--quiet", "--html",
                   str(folder / "run.html")) in (0, 1)
    assert command("show", str(folder / "wavy.sqlite"), "--html", str(folder / "show.html")) in (0, 1)
    assert (folder / "run.html").is_file() and (folder / "show.html").is_file()
    return {"run": folder / "run.html", "show": folder / "show.html"}


@pytest.fixture(scope="module")
def interrupted(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("cut")
    problem = problem_file(folder, "stopping", "cut.sqlite")
    sys.modules.pop("report_model", None)  # a fresh call counter
    os.environ["REPORT_TEST_STOP"] = "1"  # the run is interrupted; the report's own calls are not
    try:
        assert command("run", str(problem), "--quiet") == 1
    finally:
        del os.environ["REPORT_TEST_STOP"]
    assert command("show", str(folder / "cut.sqlite"), "--html", str(folder / "cut.html")) == 1
    assert (folder / "cut.html").is_file()
    return folder / "cut.html"


@pytest.fixture(scope="module")
def hostile(tmp_path_factory) -> tuple[Path, Problem]:
    """A report whose outside texts all carry markup (a program's stderr among them)."""
    folder = tmp_path_factory.mktemp("hostile")
    (folder / "sim.py").write_text(PROGRAM, encoding="utf-8")
    text = textwrap.dedent(
        f"""\
        title = {json.dumps("Title " + EVIL)}

        [[parameter]]
        name = "a"
        start = 0.0
        lower = -3.0
        upper = 3.0
        unit = {json.dumps("m " + EVIL)}

        [[parameter]]
        name = "b"
        start = 0.0
        unit = {json.dumps(EVIL)}

        [objective]
        command = [{json.dumps(sys.executable)}, "sim.py", "{{a}}", "{{b}}", {json.dumps(EVIL)}]
        """
    )
    path = folder / "hostile.toml"
    path.write_text(text, encoding="utf-8")
    problem = Problem.from_file(path)
    sol = solve(problem, journal=None, quiet=True)
    assert sol.failures > 0  # the program did fail, with EVIL on its stderr
    # parameter names must be identifiers (dl.Parameter refuses markup); the report escapes them
    # all the same: a solution renamed behind the Parameter's back
    sol = dataclasses.replace(sol, names=(f"a{EVIL}", "b"), notes=sol.notes + (f"note {EVIL}",))
    out = write_html(sol, folder / "hostile.html", title=problem.title,
                     parameters=problem.parameters, objective=problem.make_objective(), extra=40,
                     origin=origin_of(problem_file=path, history=sol.history))
    return out, problem


# ----------------------------------------------------------------------------- in the browser

FACTS = """
(async () => {
  const out = {text: document.body.innerText, scripts: document.scripts.length,
               images: document.images.length, title: document.title,
               pwned: typeof window.pwned, figures: [], decoded: []};
  for (const svg of document.querySelectorAll('figure > svg')) {
    const box = svg.getBoundingClientRect();
    const title = svg.querySelector('title');
    out.figures.push({width: box.width, height: box.height,
                      alt: title ? title.textContent : '',
                      marks: svg.querySelectorAll('path, use, text, image').length});
  }
  for (const element of document.querySelectorAll('svg image, img')) {
    const source = element.getAttribute('href') || element.getAttribute('xlink:href')
                   || element.getAttribute('src') || '';
    const picture = new Image();
    picture.src = source;
    try {
      await picture.decode();
      out.decoded.push({ok: true, width: picture.naturalWidth, height: picture.naturalHeight,
                        inline: source.startsWith('data:')});
    } catch (error) {
      out.decoded.push({ok: false, source: source.slice(0, 80)});
    }
  }
  return out;
})()
"""


PRINT = """
({figure: getComputedStyle(document.querySelector('figure')).breakInside,
  table: getComputedStyle(document.querySelector('table')).breakInside,
  nav: getComputedStyle(document.querySelector('nav')).display})
"""


def look(executable: str, path: Path) -> tuple[dict, bytes, list[str], list[str]]:
    """Open ``path``: its facts (FACTS), a screenshot, console errors and requested URLs."""
    with headless.Browser(executable) as browser:
        browser.open(path)
        facts = browser.evaluate(FACTS)
        shot = browser.screenshot()
        browser.send("Emulation.setEmulatedMedia", {"media": "print"})
        facts["print"] = browser.evaluate(PRINT)
        return facts, shot, browser.errors(), browser.requests()


def not_blank(png: bytes) -> float:
    """The share of pixels of the screenshot that are not white (page background)."""
    import matplotlib.image

    pixels = matplotlib.image.imread(io.BytesIO(png), format="png")[..., :3]
    assert pixels.shape[0] >= 600 and pixels.shape[1] >= 1000
    return float(np.mean(np.any(pixels < 0.9, axis=2)))


def check_page(facts: dict, shot: bytes, errors: list[str], requests: list[str], path: Path,
               *, figures: int) -> None:
    assert errors == []
    own = path.resolve().as_uri()
    assert all(url == own or url.startswith("data:") for url in requests), requests
    assert facts["scripts"] == 0 and facts["images"] == 0 and facts["pwned"] == "undefined"
    assert len(facts["figures"]) >= figures
    for figure in facts["figures"]:
        assert figure["width"] > 300 and figure["height"] > 150, figure
        assert figure["marks"] > 20 and len(figure["alt"]) > 20, figure
    assert all(d["ok"] and d["width"] > 0 and d["height"] > 0 and d["inline"]
               for d in facts["decoded"]), facts["decoded"]
    assert "Caution: validate" in facts["text"]
    # printed: no figure or table split across pages, no table of contents
    assert facts["print"] == {"figure": "avoid", "table": "avoid", "nav": "none"}
    assert not_blank(shot) > 0.03  # text, tables, the verdict's band: not an empty page


def test_demo_report_in_a_browser(chromium, demo):
    path = demo / "report.html"
    assert path.stat().st_size < 3e6  # "a few MB at most"
    facts, shot, errors, requests = look(chromium, path)
    check_page(facts, shot, errors, requests, path, figures=4)
    document = json.loads((demo / "solution.json").read_text())
    text = facts["text"]
    verdict = {"minimum": "A verified minimum", "flat": "not fully determined",
               "saddle": "a saddle point", "unchecked": "Not verified"}[document["verdict"]]
    assert verdict in text and "The search converged" in text
    for name in ("mu_max", "Ks", "Y", "kd"):
        assert name in text
        error = document["uncertainty"]["standard_errors"][name]
        assert f"{error:.4g}" in text  # its standard error, as the table prints it
    assert "standard error" in text and "95 % interval" in text and "Correlations" in text
    for word in ("SHA-256", "journal.sqlite", "wall time", "directional 0"):
        assert word in text


def test_demo_notes_do_not_repeat_the_value_as_news(demo):
    # the fault once seen: "reached S = 21.03734853, below the 21.03734853"
    document = json.loads((demo / "solution.json").read_text())
    printed = f"{document['value']:.10g}"
    assert not any(note.count(printed) for note in document["notes"]), document["notes"]
    assert not any("below the" in note for note in document["notes"])


@pytest.mark.parametrize("which", ["run", "show"])
def test_many_start_report_in_a_browser(chromium, many, which):
    path = many[which]
    facts, shot, errors, requests = look(chromium, path)
    check_page(facts, shot, errors, requests, path, figures=4)
    text = facts["text"]
    assert "6 searches found 2 distinct minima" in text and "Distinct minima" in text
    assert "a" in text and "b" in text and "Two valleys" in text
    assert any("start points" in f["alt"] for f in facts["figures"])  # the start map


def test_interrupted_run_report_in_a_browser(chromium, interrupted):
    facts, shot, errors, requests = look(chromium, interrupted)
    check_page(facts, shot, errors, requests, interrupted, figures=3)
    assert "interrupted" in facts["text"] and "directional resume" in facts["text"]


def test_outside_text_is_shown_as_text_and_runs_nothing(chromium, hostile):
    path, _ = hostile
    facts, shot, errors, requests = look(chromium, path)
    check_page(facts, shot, errors, requests, path, figures=3)
    text = facts["text"]
    assert facts["title"].startswith("Title <script>")
    for where in ("Title ", "m ", "a", "note "):  # the title, a unit, a name, a note
        assert where + EVIL in text, where
    assert text.count("</table>") >= 5  # title, two units, a name, a note, the stderr
    assert "Failed evaluations" in text and EVIL in text


# ----------------------------------------------------------------------------- without a browser


class Elements(html.parser.HTMLParser):
    """Every start tag and every text, as Python's HTML parser reads the page."""

    def __init__(self) -> None:
        super().__init__()
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):
        self.text.append(data)


def test_outside_text_is_escaped_everywhere(hostile):
    path, _ = hostile
    parser = Elements()
    parser.feed(path.read_text(encoding="utf-8"))
    names = {tag for tag, _ in parser.tags}
    assert "script" not in names and "img" not in names
    assert not any(key.startswith("on") for _, attrs in parser.tags for key in attrs)
    text = "".join(parser.text)
    assert text.count(EVIL) >= 5  # shown as text: title, units, a name, a note, the stderr
    # nothing outside: no src or href that leaves the file
    for _, attrs in parser.tags:
        for key in ("src", "href", "xlink:href"):
            value = attrs.get(key)
            assert value is None or value.startswith(("#", "data:")), (key, value)


def test_show_of_a_calibration_journal_in_a_browser(chromium, demo, tmp_path):
    # the journal keeps each evaluation's residual vector: show replays the whole calibration,
    # least-squares steps, check and uncertainty included, evaluating nothing
    path = tmp_path / "show.html"
    assert command("show", str(demo / "journal.sqlite"), "--html", str(path)) == 0
    facts, shot, errors, requests = look(chromium, path)
    check_page(facts, shot, errors, requests, path, figures=4)
    text = facts["text"]
    assert "A verified minimum" in text and "cannot be replayed" not in text
    saved = json.loads((demo / "solution.json").read_text())
    assert f"{saved['value']:.10g}" in text  # the run's best value, from the journal
    assert saved["verdict"] == "minimum"


def test_show_of_a_calibration_journal_without_vectors_in_a_browser(chromium, demo, tmp_path):
    # a journal written before residual vectors were kept: show reports the best stored point and
    # says why there is no verdict, rather than failing
    old = tmp_path / "old.sqlite"
    with contextlib.closing(sqlite3.connect(demo / "journal.sqlite")) as source, \
            contextlib.closing(sqlite3.connect(old)) as target:
        source.backup(target)
        target.execute("UPDATE evaluation SET residuals = NULL")
        target.commit()
    path = tmp_path / "show.html"
    assert command("show", str(old), "--html", str(path)) == 1
    facts, shot, errors, requests = look(chromium, path)
    check_page(facts, shot, errors, requests, path, figures=4)
    text = facts["text"]
    assert "Not verified" in text and "cannot be replayed without evaluating" in text
    best = json.loads((demo / "solution.json").read_text())["value"]
    assert f"{best:.10g}" in text  # the run's best value, from the journal


def test_every_verdict_has_a_heading_in_the_report():
    # A verdict missing from the table used to raise KeyError for a nonsmooth run's report.
    from directional.records import Verdict
    from directional.report import html as report
    from directional.solution import _verdict_hint

    assert set(report._VERDICT) == set(Verdict)
    assert all(_verdict_hint(v).startswith(" (") for v in Verdict)
