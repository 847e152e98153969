"""The offline HTML report in a real browser: headless Chromium opens it from disk.

What html.parser cannot tell (test_html.py) is checked here by the browser that
a reader would use: the embedded Vega runtime draws every chart under the
page's Content-Security-Policy, nothing is fetched from anywhere, hostile labels
stay text once the scripts have run, and the tables sort when a heading is
clicked. Debian's ``chromium`` is driven through Playwright; the test is skipped
(with the reason) only where that browser is missing or cannot be started.
"""

from __future__ import annotations

import json
import re
import shutil

import pandas as pd
import pytest

from tests.report.report_data import ACTORS, CLOSER, HOSTILE, make_tables
from tracker.report.html import build_report

pytestmark = pytest.mark.browser

#: A relation label that would end the chart script and open markup if spliced raw.
RELATION = "</script><b>rel</b>"

_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run"]

# Every chart container holds Vega's drawing (an <svg class="marks"> or a
# canvas) or the report's own failure text; waiting for either lets a chart that
# fails to draw fail the test with its message instead of a timeout.
_SETTLED = """() => Array.from(document.querySelectorAll("div.chart")).every(
    d => d.querySelector("svg.marks, canvas")
         || d.textContent.startsWith("This chart could not be drawn"))"""

_CHARTS = """() => Array.from(document.querySelectorAll("div.chart")).map(d => {
    const drawn = d.querySelectorAll("svg.marks, canvas");
    const box = drawn.length ? drawn[0].getBoundingClientRect() : {width: 0, height: 0};
    return {id: d.id, drawn: drawn.length, width: box.width, height: box.height,
            marks: d.querySelectorAll("svg.marks path, svg.marks rect, svg.marks text").length,
            text: d.textContent};
})"""


@pytest.fixture(scope="module")
def browser():
    executable = shutil.which("chromium")
    if executable is None:
        pytest.skip("chromium is not installed (apt-get install chromium); "
                    "the real-browser report test needs it")
    sync_api = pytest.importorskip(
        "playwright.sync_api", reason="playwright is not installed (pip install '.[test]')"
    )
    try:
        runner = sync_api.sync_playwright().start()
    except Exception as error:  # the driver itself could not start
        pytest.skip(f"playwright could not start: {error}")
    try:
        chromium = runner.chromium.launch(executable_path=executable, args=_ARGS)
    except Exception as error:
        runner.stop()
        pytest.skip(f"playwright could not start {executable}: {str(error).splitlines()[0]}")
    yield chromium
    chromium.close()
    runner.stop()


@pytest.fixture(scope="module")
def reports(tmp_path_factory):
    """The plain and the anonymised report written to disk, and the moves table."""
    tables, periods, meta = make_tables()
    for name in ("summary", "blocks", "structures"):
        tables[name] = tables[name].assign(relation=RELATION)
    meta["relations"] = [RELATION]
    folder = tmp_path_factory.mktemp("report")
    out = {"moves": tables["moves"]}
    for key, anonymise in (("plain", False), ("anon", True)):
        out[key] = folder / f"{key}.html"
        out[key].write_text(build_report(tables, periods, meta, anonymise=anonymise),
                            encoding="utf-8")
    return out


class _Watched:
    """A page with everything it logs, raises, fetches or pops up recorded."""

    def __init__(self, browser):
        self.context = browser.new_context(viewport={"width": 1280, "height": 900})
        self.page = self.context.new_page()
        self.errors: list[str] = []
        self.requests: list[str] = []
        self.dialogs: list[str] = []
        self.page.on("console", lambda m: m.type == "error" and self.errors.append(m.text))
        self.page.on("pageerror", lambda e: self.errors.append(f"uncaught: {e}"))
        self.page.on("request", lambda r: self.requests.append(r.url))
        self.page.on("dialog", self._dialog)

    def _dialog(self, dialog):
        self.dialogs.append(f"{dialog.type}: {dialog.message}")
        dialog.dismiss()

    def foreign_requests(self) -> list[str]:
        return [u for u in self.requests if not re.match(r"(?:file|data):", u, re.I)]


@pytest.fixture
def watched(browser):
    w = _Watched(browser)
    yield w
    w.context.close()


def _open_report(watched: _Watched, path) -> list[dict]:
    """Open the report from disk, wait for the charts, return one record per chart."""
    page = watched.page
    page.goto(path.as_uri())  # returns after the load event: every inline script has run
    # A script the page broke (say, a label that ended a script element) stops
    # the charts for good; say so now rather than after the wait below times out.
    assert not [e for e in watched.errors if e.startswith("uncaught")], watched.errors
    page.wait_for_function(_SETTLED, timeout=15_000)
    return page.evaluate(_CHARTS)


def _assert_charts_drawn(page, charts: list[dict]) -> None:
    specs = json.loads(page.evaluate('document.getElementById("chart-specs").textContent'))
    # one container per specification carried in the page, each drawn once
    assert len(specs) >= 9  # the nine views of the report all have data here
    assert sorted(c["id"] for c in charts) == sorted(f"{k}-view" for k in specs)
    failed = [(c["id"], c["text"][:200]) for c in charts if not c["drawn"]]
    assert not failed
    assert sum(c["drawn"] for c in charts) == len(specs)
    assert all(c["width"] > 50 and c["height"] > 20 and c["marks"] > 5 for c in charts), charts


def _assert_quiet(watched: _Watched) -> None:
    assert watched.errors == []
    assert watched.dialogs == []
    assert watched.foreign_requests() == []
    assert any(u.startswith("file:") for u in watched.requests)  # the listener is live


def test_watcher_sees_what_it_guards_against(watched, tmp_path):
    # Control: the same listeners on a page that is hostile on purpose must record
    # the dialog, the outside request and the error, or the checks below prove nothing.
    bad = tmp_path / "bad.html"
    bad.write_text(
        "<!DOCTYPE html><body><img src=x onerror=alert(1)>"
        "<script>new Image().src = 'http://127.0.0.1:9/x.png'; undefinedCall();</script>",
        encoding="utf-8",
    )
    watched.page.goto(bad.as_uri())
    watched.page.wait_for_timeout(300)
    assert watched.dialogs == ["alert: 1"]
    assert watched.foreign_requests() == ["http://127.0.0.1:9/x.png"]
    assert any("undefinedCall" in e for e in watched.errors)


def test_report_draws_every_chart_offline_and_keeps_labels_as_text(watched, reports):
    page = watched.page
    charts = _open_report(watched, reports["plain"])
    _assert_charts_drawn(page, charts)
    _assert_quiet(watched)

    text = page.locator("body").inner_text()
    for label in (HOSTILE, CLOSER, RELATION):
        assert label in text, label
    # the labels went through Vega as data and came out as SVG text
    timeline = next(c["text"] for c in charts if c["id"] == "chart-timeline-view")
    assert HOSTILE in timeline and CLOSER in timeline
    matrix = next(c["text"] for c in charts if c["id"] == "chart-matrix-density-view")
    assert RELATION in matrix
    # ...and never became markup: no image, no bold, no extra script element
    assert page.locator("img[src=x]").count() == 0
    assert page.locator("img").count() == 0
    assert page.locator("b").count() == 0  # the report itself uses no <b>
    assert page.locator("script").count() == 3  # specs, runtime, table sorter
    assert page.title().startswith("Demo " + HOSTILE)


def _column(page, table: str, index: int, attribute: str | None = None) -> list[str]:
    cells = page.locator(f"{table} tbody tr td:nth-child({index})")
    if attribute:
        return [cells.nth(i).get_attribute(attribute) for i in range(cells.count())]
    return [t.strip() for t in cells.all_inner_texts()]


def test_moves_table_sorts_on_click(watched, reports):
    page = watched.page
    page.goto(reports["plain"].as_uri())
    table = "#moves table.sortable"
    rows = page.locator(f"{table} tbody tr")
    before = rows.all_inner_texts()
    assert len(before) == len(reports["moves"])
    heading = page.locator(f"{table} thead th", has_text="Confidence")

    heading.locator("button").click()
    after = rows.all_inner_texts()
    keys = [float(v) for v in _column(page, table, 6, "data-sort")]
    assert keys == sorted(keys)  # Python's sort is the reference
    assert keys == sorted(reports["moves"]["confidence"].astype(float).tolist())
    assert after != before  # the fixture's moves are not already in this order
    assert sorted(after) == sorted(before)  # rows moved whole
    assert heading.get_attribute("aria-sort") == "ascending"

    heading.locator("button").click()
    keys = [float(v) for v in _column(page, table, 6, "data-sort")]
    assert keys == sorted(keys, reverse=True)
    assert heading.get_attribute("aria-sort") == "descending"

    page.locator(f"{table} thead th", has_text="Actor").locator("button").click()
    actors = _column(page, table, 1)
    assert actors == sorted(actors, key=str.lower)
    assert sorted(actors) == sorted(reports["moves"]["actor"])
    assert heading.get_attribute("aria-sort") is None  # one sorted column at a time
    assert watched.errors == []


def test_anonymised_report_names_no_actor(watched, reports):
    page = watched.page
    charts = _open_report(watched, reports["anon"])
    _assert_charts_drawn(page, charts)
    _assert_quiet(watched)

    # Everything the reader can reach: visible text, SVG text, the actor list of
    # the trajectory chart, the page title and the chart data behind the tooltips.
    shown = page.locator("body").inner_text()
    everything = page.evaluate("document.documentElement.textContent")
    data = json.dumps(
        json.loads(page.evaluate('document.getElementById("chart-specs").textContent')),
        ensure_ascii=False,
    )
    options = page.locator("#chart-trajectory-view select option").all_inner_texts()
    for label in ACTORS:
        for where, haystack in (("text", shown), ("document", everything), ("charts", data),
                                ("title", page.title()), ("list", "\n".join(options))):
            assert label not in haystack, (label, where)
    codes = set(re.findall(r"\bA\d{3}\b", shown))
    assert len(codes) == len(ACTORS)  # every actor is still there, under a code
    assert options and all(re.fullmatch(r"A\d{3}", o.strip()) for o in options)
    assert page.locator("img").count() == 0 and page.locator("b").count() == 0


def test_flow_band_tooltip_names_its_actors(watched, tmp_path):
    # Vega's tooltip on an area shows the datum of the point nearest the pointer
    # along x (measured here: the middle point of 17), so every point of a band
    # must carry its names. Two bands that do not overlap: a00-a09 stay in T1,
    # a10-a19 move from T1 to T2.
    periods = ["2001", "2002"]
    members = pd.DataFrame({"period": ["2001"] * 20 + ["2002"] * 20,
                            "actor": [f"a{i:02d}" for i in range(20)] * 2,
                            "track": [1] * 20 + [1] * 10 + [2] * 10})
    members["position"] = members["track"]
    path = tmp_path / "flow.html"
    path.write_text(build_report({"memberships": members}, periods, {"study": "Flow"}),
                    encoding="utf-8")
    page = watched.page
    _open_report(watched, path)
    bands = page.locator("#chart-flow-view svg.marks g.mark-area path")
    assert bands.count() == 2
    shown = []
    for i in range(2):
        bands.nth(i).hover(force=True)  # the middle of an S-shaped band lies inside it
        tip = page.locator("#vg-tooltip-element.visible")
        tip.wait_for(timeout=5_000)
        shown.append(tip.inner_text())
        page.mouse.move(0, 0)
    assert any(", ".join(f"a{i:02d}" for i in range(10)) in t for t in shown), shown
    assert any(", ".join(f"a{i:02d}" for i in range(10, 20)) in t for t in shown), shown
    assert watched.errors == []
