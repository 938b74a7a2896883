"""The report in Debian's Chromium driven by Playwright (no browser downloaded): the scenario controls
update the ranked table to what the database holds, the search opens any project's drill-down, names
stay inert wherever they appear, and the page makes no network request and logs no error.
One browser session per module.
"""
from __future__ import annotations

import duckdb
import pytest

from browser.chromium import find_chromium, running_under_ci   # tests/ is on sys.path (conftest)
from db.test_report import HOSTILE, make_db

from ratescape.report import write_report

pytestmark = pytest.mark.browser
playwright_api = pytest.importorskip("playwright.sync_api")   # a registry package, not ours

ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking", "--no-first-run",
        "--disable-component-update", "--disable-sync"]


@pytest.fixture(scope="module")
def session(tmp_path_factory):
    exe = find_chromium()
    if exe is None:
        if running_under_ci():
            pytest.fail("Chromium not found under CI; .ci/run should have installed it")
        pytest.skip("Chromium not found (install Debian's chromium package)")
    root = tmp_path_factory.mktemp("browser")
    db, run_id = make_db(root)
    out = write_report(db, root / "report.html", run_id)
    log = {"errors": [], "requests": []}
    with playwright_api.sync_playwright() as p:
        browser = p.chromium.launch(executable_path=exe, args=ARGS)
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
        page.wait_for_selector('#project-detail:not([data-rendered="pending"])', state="attached", timeout=60_000)
        yield page, db, run_id, log
        browser.close()


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
    # tooltip of a point of the curve
    page.hover("#detail-curve svg.marks", position={"x": 120, "y": 120})
    assert page.evaluate("typeof window.__pwned") == "undefined"
    assert page.locator("img").count() == 0


def test_no_network_request_and_no_console_error(session):
    page, _, _, log = session
    assert log["requests"] == []
    assert log["errors"] == []
    assert page.evaluate("window.__ratescapeErrors") == []
