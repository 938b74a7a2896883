"""Sizes and speed of the report (issue 15, part 6); prints figures, asserts nothing.

    python bench/bench_report.py --db DIR/ratescape-demo.duckdb [--out report.html]

Measures: seconds to write the report, its size in bytes (and the explorer data's share), and in
headless Chromium (Playwright on /usr/bin/chromium) the seconds from navigation until the charts are
drawn and the scenario explorer and first drill-down are filled (interactive). Run it at demo size on
a shared machine; the 100,000-project figure needs a database made by bench/make_portfolio.py.
"""
from __future__ import annotations

import argparse
import re
import time
from pathlib import Path

from ratescape.report import write_report

ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking", "--no-first-run",
        "--disable-component-update", "--disable-sync"]


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--db", required=True)
    ap.add_argument("--out", default="bench-report.html")
    ap.add_argument("--browser", action=argparse.BooleanOptionalAction, default=True)
    a = ap.parse_args()
    t = time.perf_counter()
    out = write_report(a.db, a.out)
    written = time.perf_counter() - t
    page = Path(out).read_text(encoding="utf-8")
    data = re.search(r'id="explorer-data">(.*?)</script>', page, re.S)
    print(f"report written in {written:.2f} s; {len(page.encode()):,} bytes "
          f"(explorer data {len(data.group(1).encode()) if data else 0:,} bytes)")
    if not a.browser:
        return
    from playwright.sync_api import sync_playwright
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path="/usr/bin/chromium", args=ARGS)
        pg = browser.new_page()
        t = time.perf_counter()
        pg.goto(Path(out).resolve().as_uri())
        pg.wait_for_selector('#render-status[data-state="done"]', state="attached", timeout=120_000)
        pg.wait_for_selector('#project-detail:not([data-rendered="pending"])', state="attached", timeout=120_000)
        interactive = time.perf_counter() - t
        rows = pg.locator("#scenario-ranking tbody tr").count()
        t = time.perf_counter()
        pg.select_option('select[name="inflation"]', index=0)
        switch = time.perf_counter() - t
        browser.close()
    print(f"open to interactive in headless Chromium: {interactive:.2f} s ({rows} table rows); "
          f"one scenario change: {switch * 1000:.0f} ms")


if __name__ == "__main__":
    main()
