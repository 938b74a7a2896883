"""Sizes and speed of the report (issue 15, part 6); prints figures, asserts nothing.

    python bench/bench_report.py --db DIR/ratescape-demo.duckdb [--out report.html] [--runs 5]
    python bench/bench_report.py --html A.html --html B.html --runs 5     # pages already written

Measures, with the machine's load average beside each figure:

* written: seconds of ``write_report`` in this process (queries, charts, page), wall clock and CPU
  (``time.process_time``: every thread of the process, DuckDB's included; less moved by other
  people's jobs than the wall clock), and the file's size
  in bytes with the explorer data's and the chart specifications' shares.
* open to interactive, in headless Chromium (Playwright on /usr/bin/chromium, a fresh browser
  context per run, so nothing is cached between runs): from the start of navigation until BOTH
  (a) the explorer has filled its ranked table, so its controls respond (the page script's last
  step; ``#scenario-ranking`` then carries ``data-ready``), and (b) the charts of the first screen
  are drawn (``#render-status`` reaches ``data-state="done"``; with deferred charts that is the
  charts within 200 px of the 1280 x 720 window, in the demo none). Two clocks:
  - "in page": the later of the page's own ``performance.mark`` calls at (a) and (b), in ms since
    the navigation started (``performance.timeOrigin``); no Playwright round trip in it. Pages
    written before the marks existed have no such figure.
  - "outside": wall-clock seconds from before ``page.goto`` until Playwright has seen (a) and (b)
    (it polls, so it adds a few tens of ms).
  Then "controls respond": the milliseconds from choosing another inflation level until the
  table holds the new scenario (``data-scenario-id`` changed), checked, not assumed.
* print: milliseconds to draw every deferred chart (what ``beforeprint`` does), after open.

Run it at demo size on a shared machine; the 100,000-project figure needs a database made by
``bench/bench_screen.py --projects 100000 --grid 51 --dir ...`` (or bench/make_portfolio.py and
``ratescape screen``).
"""
from __future__ import annotations

import argparse
import os
import re
import statistics
import time
from pathlib import Path

ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking", "--no-first-run",
        "--disable-component-update", "--disable-sync"]

#: (a) and (b) above, for pages with and without the ``data-ready`` mark of the explorer
READY = """() => {
  const s = document.getElementById('render-status');
  if (!s || s.getAttribute('data-state') !== 'done') return false;
  const t = document.getElementById('scenario-ranking');
  if (!t) return true;                                   // a page without the explorer
  if (t.hasAttribute('data-ready')) return true;
  return t.tBodies[0].rows.length > 0;                   // pages written before data-ready
}"""

IN_PAGE = """() => {
  const m = n => (performance.getEntriesByName(n)[0] || {}).startTime;
  const a = m('ratescape-explorer-ready'), b = m('ratescape-first-charts');
  return (a === undefined || b === undefined) ? null : Math.max(a, b);
}"""


def load() -> str:
    return "load {:.2f} {:.2f} {:.2f}".format(*os.getloadavg())


def sizes(path: Path) -> str:
    page = path.read_text(encoding="utf-8")
    data = re.search(r'id="explorer-data">(.*?)</script>', page, re.S)
    specs = sum(len(m.group(1).encode()) for m in
                re.finditer(r'<script type="application/json" id="spec-\d+"[^>]*>(.*?)</script>', page, re.S))
    return (f"{len(page.encode()):,} bytes (explorer data {len(data.group(1).encode()) if data else 0:,}; "
            f"chart specifications {specs:,})")


def open_once(browser, path: Path) -> dict:
    context = browser.new_context(viewport={"width": 1280, "height": 720})
    page = context.new_page()
    errors: list[str] = []
    page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
    page.on("pageerror", lambda e: errors.append(str(e)))
    before = load()
    t = time.perf_counter()
    page.goto(path.resolve().as_uri())
    page.wait_for_function(READY, polling=10, timeout=300_000)
    outside = time.perf_counter() - t
    in_page = page.evaluate(IN_PAGE)
    charts = page.evaluate("""() => {
      const blocks = document.querySelectorAll('script[type="application/json"][data-chart]');
      const drawn = Array.prototype.filter.call(blocks, b => {
        const c = document.getElementById(b.getAttribute('data-chart'));
        return c && c.querySelector('svg.marks, canvas.marks'); }).length;
      return [blocks.length, drawn, document.querySelectorAll('#detail-charts svg.marks').length];
    }""")
    rows = page.locator("#scenario-ranking tbody tr").count()
    switch = None
    if page.locator('select[name="inflation"]').count():
        was = page.get_attribute("#scenario-ranking", "data-scenario-id")
        n = page.eval_on_selector('select[name="inflation"]', "s => s.selectedIndex")
        t = time.perf_counter()
        page.select_option('select[name="inflation"]', index=0 if n else 1)
        page.wait_for_function(f"() => document.getElementById('scenario-ranking').getAttribute('data-scenario-id') !== {was!r}",
                               polling=5, timeout=60_000)
        switch = time.perf_counter() - t
    draw_all = None
    if page.evaluate("() => !!(window.__ratescapeCharts && window.__ratescapeCharts.drawAll)"):
        t = time.perf_counter()
        page.evaluate("() => window.__ratescapeCharts.drawAll()")
        draw_all = time.perf_counter() - t
    context.close()
    return {"outside": outside, "in_page": in_page, "charts": charts, "rows": rows, "switch": switch,
            "draw_all": draw_all, "errors": errors, "load_before": before, "load_after": load()}


def spread(values: list[float], unit: str, scale: float = 1.0, fmt: str = "{:.2f}") -> str:
    if not values:
        return "n/a"
    v = [x * scale for x in values]
    return (f"min {fmt.format(min(v))}, median {fmt.format(statistics.median(v))}, max {fmt.format(max(v))} {unit} "
            f"({len(v)} runs)")


def measure_pages(paths: list[Path], runs: int) -> None:
    from playwright.sync_api import sync_playwright

    results: dict[Path, list[dict]] = {p: [] for p in paths}
    with sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path="/usr/bin/chromium", args=ARGS)
        open_once(browser, paths[0])       # warm the browser process and the file cache; not counted
        for n in range(runs):              # interleaved, so the pages share the load
            for p in paths:
                r = open_once(browser, p)
                results[p].append(r)
                inp = "n/a" if r["in_page"] is None else f"{r['in_page']:.0f} ms"
                sw = "n/a" if r["switch"] is None else f"{r['switch'] * 1000:.0f} ms"
                da = "n/a" if r["draw_all"] is None else f"{r['draw_all'] * 1000:.0f} ms"
                print(f"  run {n + 1} {p.name}: open to interactive {r['outside']:.2f} s outside, {inp} in page; "
                      f"section charts drawn at open {r['charts'][1]} of {r['charts'][0]}, drill-down charts "
                      f"{r['charts'][2]}; {r['rows']} table rows; "
                      f"controls respond {sw}; print (draw every chart) {da}; errors {len(r['errors'])}; "
                      f"{r['load_before']} -> {r['load_after']}", flush=True)
        browser.close()
    for p, rs in results.items():
        print(f"{p.name}: {sizes(p)}")
        print(f"  open to interactive, outside: {spread([r['outside'] for r in rs], 's')}")
        ins = [r["in_page"] for r in rs if r["in_page"] is not None]
        print(f"  open to interactive, in page: {spread(ins, 'ms', fmt='{:.0f}')}")
        print(f"  controls respond: {spread([r['switch'] for r in rs if r['switch'] is not None], 'ms', 1000, '{:.0f}')}")
        print(f"  print (draw every chart): "
              f"{spread([r['draw_all'] for r in rs if r['draw_all'] is not None], 'ms', 1000, '{:.0f}')}")
        print(f"  load averages seen: {rs[0]['load_before']} ... {rs[-1]['load_after']}")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--db", help="write the report of this database's latest run first")
    ap.add_argument("--out", default="bench-report.html")
    ap.add_argument("--html", action="append", default=[], type=Path,
                    help="a report already written (repeatable; measured interleaved)")
    ap.add_argument("--runs", type=int, default=5)
    ap.add_argument("--browser", action=argparse.BooleanOptionalAction, default=True)
    a = ap.parse_args()
    pages = list(a.html)
    if a.db:
        from ratescape.report import write_report

        before = load()
        t, cpu = time.perf_counter(), time.process_time()
        out = write_report(a.db, a.out)
        written, cpu = time.perf_counter() - t, time.process_time() - cpu
        print(f"report written in {written:.2f} s, {cpu:.2f} s CPU of this process and its threads "
              f"({before} -> {load()}); {sizes(Path(out))}", flush=True)
        pages.insert(0, Path(out))
    if not pages:
        ap.error("give --db or --html")
    if a.browser:
        measure_pages(pages, a.runs)


if __name__ == "__main__":
    main()
