"""The report in Debian's Chromium driven by Playwright (no browser downloaded): the scenario controls
update the ranked table to what the database holds, the search opens any project's drill-down, names
stay inert wherever they appear, and the page makes no network request and logs no error.
One browser session per module.
"""
from __future__ import annotations

import duckdb
import pytest

from browser.chromium import find_chromium, running_under_ci   # tests/ is on sys.path (conftest)
from db.test_report import HOSTILE, PROJECTS, make_db

from ratescape.report import write_report

pytestmark = pytest.mark.browser
playwright_api = pytest.importorskip("playwright.sync_api")   # a registry package, not ours

ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking", "--no-first-run",
        "--disable-component-update", "--disable-sync"]


#: A second hostile name, on an alternative of the group "depot": decision-map legends and tooltips.
HOSTILE_ALT = '<img src=x onerror="window.__pwned=2">'
BROWSER_PROJECTS = PROJECTS + f'G3,"{HOSTILE_ALT.replace(chr(34), chr(34) * 2)}",depot,150,38,real,,,15\n'


@pytest.fixture(scope="module")
def browser():
    exe = find_chromium()
    if exe is None:
        if running_under_ci():
            pytest.fail("Chromium not found under CI; .ci/run should have installed it")
        pytest.skip("Chromium not found (install Debian's chromium package)")
    with playwright_api.sync_playwright() as p:
        b = p.chromium.launch(executable_path=exe, args=ARGS)
        yield b
        b.close()


def open_report(browser, out, explorer=True):
    """A page on the report, every request outside file:, data:, blob: and about: refused and logged;
    returned once the first-screen charts are drawn (and the explorer filled, unless ``explorer`` is False)."""
    log = {"errors": [], "requests": []}
    page = browser.new_page()
    page.on("console", lambda m: log["errors"].append(m.text) if m.type == "error" else None)
    page.on("pageerror", lambda e: log["errors"].append(str(e)))

    def guard(route):
        if not route.request.url.startswith(("file:", "data:", "blob:", "about:")):
            log["requests"].append(route.request.url)
            route.abort()
        else:
            route.continue_()
    page.route("**/*", guard)
    page.goto(out.as_uri())
    page.wait_for_selector('#render-status[data-state="done"]', state="attached", timeout=60_000)
    if explorer:
        page.wait_for_selector('#scenario-ranking[data-ready="1"]', state="attached", timeout=60_000)
        page.wait_for_selector('#project-detail:not([data-rendered="pending"])', state="attached", timeout=60_000)
    return page, log


@pytest.fixture(scope="module")
def report_file(tmp_path_factory):
    root = tmp_path_factory.mktemp("browser")
    db, run_id = make_db(root, projects=BROWSER_PROJECTS)
    out = write_report(db, root / "report.html", run_id)
    return out, db, run_id


@pytest.fixture(scope="module")
def session(browser, report_file):
    out, db, run_id = report_file
    page, log = open_report(browser, out)
    yield page, db, run_id, log
    page.close()


def drawn(page, chart):
    """Scroll the chart element ``chart`` (a selector) into view and wait until it is drawn."""
    page.locator(chart).first.scroll_into_view_if_needed()
    page.wait_for_selector(f'{chart}[data-rendered="1"]', state="attached", timeout=30_000)


@pytest.fixture(scope="module")
def real_session(browser, tmp_path_factory):
    """A real-basis run: the grid's discount axis is the real rate."""
    root = tmp_path_factory.mktemp("browser-real")
    db, run_id = make_db(root, discount_basis="real")
    out = write_report(db, root / "report.html", run_id)
    page, log = open_report(browser, out)
    yield page, db, run_id, log
    page.close()


def stored_order(db, run_id, rate, inflation):
    con = duckdb.connect(str(db), read_only=True)
    try:
        return [r[0] for r in con.execute(
            "SELECT r.project_id FROM results r JOIN scenarios s USING (run_id, scenario_id) WHERE r.run_id = ? "
            "AND abs(s.discount_rate - ?) < 1e-12 AND abs(s.inflation - ?) < 1e-12 "
            "ORDER BY r.present_worth DESC, r.project_id", [run_id, rate, inflation]).fetchall()]
    finally:
        con.close()


@pytest.mark.parametrize("rate, inflation", [(0.0, 0.1), (0.12, 0.0), (0.2, 0.06)])
def test_controls_update_the_ranked_table_to_the_stored_order(session, rate, inflation):
    page, db, run_id, _ = session
    page.select_option('select[name="discount_rate"]', value=repr(rate))
    page.select_option('select[name="inflation"]', value=repr(inflation))
    ids = page.eval_on_selector_all("#scenario-ranking tbody tr", "rows => rows.map(r => r.dataset.projectId)")
    assert ids == stored_order(db, run_id, rate, inflation)
    accepted = page.inner_text("#accepted-count")
    con = duckdb.connect(str(db), read_only=True)
    n = con.execute("SELECT count(*) FROM results r JOIN scenarios s USING (run_id, scenario_id) WHERE r.run_id = ? "
                    "AND abs(s.discount_rate - ?) < 1e-12 AND abs(s.inflation - ?) < 1e-12 AND accepted",
                    [run_id, rate, inflation]).fetchall()[0][0]
    con.close()
    assert accepted == str(n)
    # a scenario whose inflation exceeds its nominal rate is marked as a negative real rate
    assert page.is_visible("#negative-real") == (inflation > rate)


def test_real_basis_run_discount_rate_control_takes_the_stored_nominal_rates(real_session):
    """Contract on a real-basis run: `inflation` first, then `discount_rate` by the stored nominal rate."""
    page, db, run_id, log = real_session
    con = duckdb.connect(str(db), read_only=True)
    picks = con.execute("""SELECT discount_rate, inflation, real_rate FROM scenarios WHERE run_id = ?
                           AND (scenario_id % 7 = 3 OR real_rate = 0) ORDER BY scenario_id LIMIT 4""",
                        [run_id]).fetchall()
    con.close()
    assert len(picks) >= 3
    for nominal, inflation, real in picks:
        page.select_option('select[name="inflation"]', value=repr(inflation))
        page.select_option('select[name="discount_rate"]', value=repr(nominal))
        ids = page.eval_on_selector_all("#scenario-ranking tbody tr", "rows => rows.map(r => r.dataset.projectId)")
        assert ids == stored_order(db, run_id, nominal, inflation)
        # the option's label names the real rate beside the nominal one
        label = page.eval_on_selector('select[name="discount_rate"]', "s => s.options[s.selectedIndex].textContent")
        assert label == f"{nominal:.2%} (real {real:.2%})".replace("%", " %")
    # every option of discount_rate is a nominal rate stored at the chosen inflation level
    values = page.eval_on_selector_all('select[name="discount_rate"] option', "os => os.map(o => o.value)")
    con = duckdb.connect(str(db), read_only=True)
    stored = sorted(repr(r[0]) for r in con.execute("SELECT discount_rate FROM scenarios WHERE run_id = ? AND "
                                                    "inflation = ?", [run_id, picks[-1][1]]).fetchall())
    con.close()
    assert sorted(values) == stored
    assert log["errors"] == [] and log["requests"] == []


def test_search_by_a_word_of_the_name_opens_the_drill_down(session):
    page, *_ = session
    page.fill("#project-search", "crane")
    page.click('#search-results button[data-project-id="A"]')
    page.wait_for_selector('#project-detail[data-project-id="A"][data-rendered="4"]', state="attached", timeout=30_000)
    assert page.inner_text("#detail-title") == "Invented harbour crane (A)"
    for chart in ("detail-curve", "detail-surface", "detail-tornado", "detail-spider"):
        assert page.locator(f"#{chart} svg.marks").count() == 1
    assert "Share of scenarios accepted" in page.inner_text("#detail-facts")


def test_hostile_name_stays_text_in_search_table_title_and_legends(session):
    page, *_ = session
    page.fill("#project-search", "onerror")
    button = page.locator('#search-results button[data-project-id="H"]')
    assert button.inner_text() == f"{HOSTILE} (H)"
    button.click()
    page.wait_for_selector('#project-detail[data-project-id="H"]:not([data-rendered="pending"])', state="attached")
    assert page.inner_text("#detail-title") == f"{HOSTILE} (H)"
    row = page.locator('#scenario-ranking tbody tr[data-project-id="H"] td').nth(1)
    assert row.inner_text() == f"{HOSTILE} (H)"
    # chart titles are SVG text, not markup
    titles = page.eval_on_selector_all("#detail-curve svg text", "ts => ts.map(t => t.textContent)")
    assert any(HOSTILE in t for t in titles)
    # tooltip of the hostile project's bar in the chart of scenario-dependent projects: text, not markup
    drawn(page, "#scenario-dependent .chart")
    tip = hover_until(page, "#scenario-dependent .vega-embed g.mark-rect path", HOSTILE)
    assert f"{HOSTILE} (H)" in tip
    assert page.evaluate("typeof window.__pwned") == "undefined"
    assert page.locator("img").count() == 0


def hover_until(page, marks, text):
    """Hover the marks one by one until Vega's tooltip element shows ``text``; its textContent."""
    paths = page.locator(marks)
    for n in range(paths.count()):
        paths.nth(n).hover(force=True)
        content = page.evaluate("(document.getElementById('vg-tooltip-element') || {}).textContent || ''")
        if text in content:
            return content
    raise AssertionError(f"no tooltip of {marks} shows {text!r}")


def test_hostile_alternative_name_stays_text_in_decision_map_legend_and_tooltip(session):
    page, *_ = session
    drawn(page, "section:has(h3:text-is('Group depot')) .chart")
    chart = page.locator("section:has(h3:text-is('Group depot')) .vega-embed").first
    assert chart.count() == 1
    legend = chart.locator("g.role-legend text").all_text_contents()
    # legend labels are SVG text: the name is there as characters (Vega may shorten a long label with "…")
    assert any(t.startswith(HOSTILE_ALT[:12]) for t in legend), legend
    tip = hover_until(page, "section:has(h3:text-is('Group depot')) .vega-embed g.mark-rect path", HOSTILE_ALT)
    assert f"{HOSTILE_ALT} (G3)" in tip
    assert page.evaluate("typeof window.__pwned") == "undefined"
    assert page.locator("img").count() == 0


def test_no_network_request_and_no_console_error(session):
    page, _, _, log = session
    assert log["requests"] == []
    assert log["errors"] == []
    assert page.evaluate("window.__ratescapeErrors") == []


# ---- deferred charts: drawn when scrolled to, opened or printed; the first screen at open

#: the chart elements of the page and their state ("0" not drawn, "1" drawn), in page order
CHART_STATES = """() => Array.from(document.querySelectorAll('script[type="application/json"][data-chart]'))
  .map(b => { const c = document.getElementById(b.dataset.chart);
              return [c.id, c.dataset.rendered, c.querySelectorAll('svg.marks').length,
                      c.getBoundingClientRect().top - window.innerHeight]; })"""


def test_a_chart_below_the_fold_is_drawn_only_when_scrolled_to(browser, report_file):
    out, *_ = report_file
    page, log = open_report(browser, out)
    try:
        states = page.evaluate(CHART_STATES)
        assert len(states) >= 3
        # every chart of this page lies more than the 200 px margin below the first screen ...
        assert all(below > 200 for *_, below in states), states
        # ... so none is drawn at open
        assert [(s[1], s[2]) for s in states] == [("0", 0)] * len(states)
        last = states[-1][0]
        drawn(page, f"#{last}")
        after = {s[0]: s for s in page.evaluate(CHART_STATES)}
        assert after[last][1:3] == ["1", 1]
        # the first chart, far above the one scrolled to, is still not drawn
        assert after[states[0][0]][1:3] == ["0", 0]
        assert log["errors"] == [] and log["requests"] == []
    finally:
        page.close()


def test_drill_down_opened_with_the_page_waits_and_a_searched_one_draws_at_once(browser, report_file):
    out, *_ = report_file
    page, log = open_report(browser, out)
    try:
        assert page.get_attribute("#project-detail", "data-rendered") == "deferred"
        assert page.locator("#detail-charts svg.marks").count() == 0
        page.fill("#project-search", "crane")
        page.click('#search-results button[data-project-id="A"]')
        page.wait_for_selector('#project-detail[data-project-id="A"][data-rendered="4"]', state="attached",
                               timeout=30_000)
        for chart in ("detail-curve", "detail-surface", "detail-tornado", "detail-spider"):
            assert page.locator(f"#{chart} svg.marks").count() == 1
        assert log["errors"] == [] and log["requests"] == []
    finally:
        page.close()


#: an init script that keeps the page from hearing that it is printed (the control of the print test)
DEAF_TO_PRINT = """(() => {
  const add = window.addEventListener;
  window.addEventListener = function (type, f, o) { if (type !== 'beforeprint') return add.call(this, type, f, o); };
  window.matchMedia = undefined;
})();"""


def pdf_paths(pdf: bytes) -> int:
    """Paths begun ('m' operators, PDF 1.7 section 8.5.2.1) in the PDF's content streams: chart lines,
    contours, marks; the text and tables of the page begin few."""
    import re
    import zlib

    count = 0
    for m in re.finditer(rb"stream\r?\n(.*?)\r?\nendstream", pdf, re.S):
        try:
            count += len(re.findall(rb"\bm\b", zlib.decompress(m.group(1))))
        except zlib.error:
            continue
    return count


def test_printing_draws_every_chart(browser, report_file):
    """page.pdf() prints as "save as PDF" does: beforeprint draws every chart before the page is laid out."""
    out, *_ = report_file
    page, log = open_report(browser, out)
    try:
        printed = pdf_paths(page.pdf())
        states = page.evaluate(CHART_STATES)
        assert [(s[1], s[2]) for s in states] == [("1", 1)] * len(states)
        assert page.get_attribute("#project-detail", "data-rendered") == "4"
        assert log["errors"] == [] and log["requests"] == []
    finally:
        page.close()
    # reference: every chart drawn first and waited for; control: a page deaf to printing
    page, _ = open_report(browser, out)
    page.evaluate("() => window.__ratescapeCharts.drawAll()")
    page.locator("#detail-charts").scroll_into_view_if_needed()
    page.wait_for_selector('#project-detail[data-rendered="4"]', state="attached", timeout=30_000)
    reference = pdf_paths(page.pdf())
    page.close()
    deaf = browser.new_page()
    deaf.add_init_script(DEAF_TO_PRINT)
    deaf.goto(out.as_uri())
    deaf.wait_for_selector('#render-status[data-state="done"]', state="attached", timeout=60_000)
    control = pdf_paths(deaf.pdf())
    deaf.close()
    assert control < reference / 2, (control, reference)     # the charts are most of the paths
    assert printed == reference, (printed, reference)


def test_a_chart_in_the_first_screen_is_drawn_at_open(browser, tmp_path):
    import altair as alt
    import polars as pl

    from ratescape.report import charts

    chart = alt.Chart(pl.DataFrame({"x": [1, 2, 3], "y": [3.0, 1.0, 2.0]})).mark_bar().encode(x="x:O", y="y:Q")
    out = charts.save_chart(chart, tmp_path / "one.html")
    page, log = open_report(browser, out, explorer=False)
    try:
        assert page.get_attribute("#chart-1", "data-rendered") == "1"
        assert page.locator("#chart-1 svg.marks").count() == 1
        status = page.evaluate("JSON.parse(document.getElementById('render-status').textContent)")
        assert (status["charts"], status["first_screen"], status["deferred"]) == (1, 1, 0)
        assert log["errors"] == [] and log["requests"] == []
    finally:
        page.close()


def test_without_javascript_the_brief_and_tables_are_there(browser, report_file):
    out, *_ = report_file
    context = browser.new_context(java_script_enabled=False)
    page = context.new_page()
    try:
        page.goto(out.as_uri())
        assert page.is_visible("noscript >> p.noscript") or page.is_visible("p.noscript")
        assert page.locator("#decision-brief ul.brief li").count() >= 3
        assert page.is_visible("#decision-brief ul.brief li >> nth=0")
        assert page.locator("#accepted-everywhere table tbody tr").count() >= 1
        # no space is kept for charts that cannot be drawn
        heights = page.eval_on_selector_all("div.chart", "cs => cs.map(c => c.getBoundingClientRect().height)")
        assert heights and all(h == 0 for h in heights), heights
    finally:
        context.close()


def test_a_chart_in_a_closed_block_is_drawn_when_the_block_is_opened(browser, tmp_path):
    """A chart inside a closed <details> in the first screen has no box, so it waits until the block opens."""
    import altair as alt
    import polars as pl

    from ratescape.report.page import Section, build_report_html

    chart = alt.Chart(pl.DataFrame({"x": [1, 2, 3], "y": [3.0, 1.0, 2.0]})).mark_bar().encode(x="x:O", y="y:Q")
    html = build_report_html([Section("Folded", chart=chart), Section("Open", chart=chart)], title="T")
    folded = '<div class="chart" id="chart-1"></div>'
    assert html.count(folded) == 1
    html = html.replace(folded, f'<details id="fold"><summary>Show the chart</summary>{folded}</details>')
    out = tmp_path / "folded.html"
    out.write_text(html, encoding="utf-8")
    page, log = open_report(browser, out, explorer=False)
    try:
        # both are in the first screen; only the visible one is drawn at open
        assert page.get_attribute("#chart-2", "data-rendered") == "1"
        assert page.get_attribute("#chart-1", "data-rendered") == "0"
        assert page.locator("#chart-1 svg.marks").count() == 0
        page.click("#fold summary")
        page.wait_for_selector('#chart-1[data-rendered="1"]', state="attached", timeout=30_000)
        assert page.locator("#chart-1 svg.marks").count() == 1
        assert log["errors"] == [] and log["requests"] == []
    finally:
        page.close()
