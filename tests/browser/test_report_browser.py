"""The report in a real browser: headless Chromium, opened from disk with networking cut off.

Asserts that every chart rendered (one Vega SVG view per chart specification), that the page logged
no script errors, and that the hostile project name did not run. The invented database comes from
test_report.py.
"""
from __future__ import annotations

import re

import pytest

from browser.chromium import find_chromium, load_page, running_under_ci   # tests/ is on sys.path (conftest)
from db.test_report import DRILL, HOSTILE, build_db, parse

from ratescape.report import publish as report

pytestmark = pytest.mark.browser


@pytest.fixture(scope="module")
def chromium():
    exe = find_chromium()
    if exe is None:
        if running_under_ci():
            pytest.fail("Chromium not found under CI; .ci/install-browser.sh should have installed it")
        pytest.skip("Chromium not found (install Debian's chromium package, or run .ci/install-browser.sh)")
    return exe


@pytest.fixture(scope="module")
def rendered(chromium, tmp_path_factory):
    root = tmp_path_factory.mktemp("browser")
    build_db(root / "results.duckdb")
    out = report.write_report(root / "results.duckdb", root / "report.html", projects=DRILL)
    page = out.read_text(encoding="utf-8")
    return page, load_page(out, chromium=chromium)


def test_every_chart_renders_without_script_errors(rendered):
    page, result = rendered
    expected = len(re.findall(r'<script type="application/json" id="spec-\d+"', page))
    assert expected >= 10
    assert result.status is not None, f"no render status in the DOM; Chromium said:\n{result.log[-2000:]}"
    assert result.status["errors"] == []
    assert result.status["charts"] == expected
    assert result.status["rendered"] == expected
    # counted again from the DOM Chromium dumped: one Vega SVG view per chart container
    assert len(re.findall(r'<svg[^>]*class="marks"', result.dom)) == expected
    assert result.console_errors() == []


def test_hostile_project_name_does_not_execute(rendered):
    page, result = rendered
    # the name is on the page as text (a serialised text node escapes <, > and & but not quotes)
    as_text = HOSTILE.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    assert as_text in result.dom
    assert result.status["pwned"] == "undefined"
    elements = {tag for tag, _ in parse(result.dom).tags}  # script text is not parsed as elements
    assert "img" not in elements  # the name's <img onerror> never became an element
    assert sum(1 for tag, _ in parse(result.dom).tags if tag == "script") == sum(
        1 for tag, _ in parse(page).tags if tag == "script")  # no script element was injected
