"""The report on databases made by the real `load` + `screen` (an invented portfolio, numbers invented
for testing only): decision brief first, assumptions with every run note, explorer data equal to the
stored rows, the one definition of failing under high inflation, the comparison of two runs, and the
chart specifications as data.
"""
from __future__ import annotations

import json
import re

import duckdb
import numpy as np
import polars as pl
import pytest

from ratescape import load_portfolio, screen_portfolio
from ratescape.caution import CAUTION
from ratescape.query import run_query
from ratescape.report import write_report
from ratescape.report.chart_style import MONEY_LABEL_EXPR, clipped_worth_domain
from ratescape.report.contours import place_contour_labels, surface_contours
from ratescape.report.drill_charts import drill_templates
from ratescape.report.explorer import decoded_worths, explorer_data, selection_bits, worth_codes
from ratescape.report.run_data import ReportError, RunContext, pick_run

HOSTILE = '</script><img src=x onerror="window.__pwned=1">'
PROJECTS = (
    "project_id,name,group,first_cost,annual_benefit,benefit_basis,annual_cost,cost_basis,life\n"
    "A,Invented harbour crane,,100,30,real,,,10\n"
    f'H,"{HOSTILE.replace(chr(34), chr(34) * 2)}",,100,45,nominal,20,real,8\n'
    "L,Invented fixed lease,,1,40,real,25,nominal,6\n"
    "Q,Invented never pays,,100,5,real,,,5\n"
    "G1,Invented depot buy,depot,300,60,real,,,15\n"
    "G2,Invented depot lease,depot,20,45,nominal,20,real,15\n"
    "M,Invented pump refit,,80,14,real,,,12\n"
)
BUDGET = ["0=250"]


def make_db(root, projects=PROJECTS, **screen):
    (root / "p.csv").write_text(projects, encoding="utf-8")
    db = root / "plan.duckdb"
    load_portfolio(root / "p.csv", None, db)
    run_id = screen_portfolio(db, discount_rates="0:0.2:11", inflation="0:0.1:6", budgets=BUDGET, **screen)
    return db, run_id


@pytest.fixture(scope="module")
def screened(tmp_path_factory):
    root = tmp_path_factory.mktemp("report")
    db, run_id = make_db(root)
    con = duckdb.connect(str(db))
    con.execute("INSERT OR REPLACE INTO run_notes VALUES (?, 'alternatives', 'Alternatives compared over a common 15-year study period.')", [run_id])
    con.execute("INSERT OR REPLACE INTO run_notes VALUES (?, 'loans', ?)", [run_id, "No loans <b>here</b>."])
    con.close()
    out = root / "report.html"
    write_report(db, out, run_id)
    return db, run_id, out.read_text(encoding="utf-8")


def explorer_block(page: str) -> dict:
    m = re.search(r'<script type="application/json" id="explorer-data">(.*?)</script>', page, re.S)
    return json.loads(m.group(1))


def test_only_done_runs_are_reported(screened, tmp_path):
    db, run_id, _ = screened
    con = duckdb.connect(str(db), read_only=True)
    try:
        assert pick_run(con, None)["run_id"] == run_id
    finally:
        con.close()
    copy = tmp_path / "copy.duckdb"
    copy.write_bytes(db.read_bytes())
    con = duckdb.connect(str(copy))
    con.execute("UPDATE runs SET status = 'finished'")   # a spelling real runs never write
    try:
        with pytest.raises(ReportError, match="no finished run"):
            pick_run(con, None)
        with pytest.raises(ReportError, match="is 'finished', not finished"):
            pick_run(con, run_id)
    finally:
        con.close()


def test_brief_comes_first_then_assumptions_with_every_run_note(screened):
    db, run_id, page = screened
    body = page[page.index("<body>"):]
    order = [body.index(s) for s in ('class="caution"', 'id="decision-brief"', 'id="assumptions"',
                                     'id="explorer"', 'id="search"', 'id="headlines"')]
    assert order == sorted(order)
    assert CAUTION in page
    brief = body[body.index('id="decision-brief"'):body.index('id="assumptions"')]
    for anchor in ("#headlines", "#budget", "#decision-maps", "#fails-high-inflation", "#explorer"):
        assert f'href="{anchor}"' in brief
    con = duckdb.connect(str(db), read_only=True)
    every, none, some = con.execute(
        "SELECT count(*) FILTER (WHERE accept_share = 1), count(*) FILTER (WHERE accept_share = 0), "
        "count(*) FILTER (WHERE accept_share > 0 AND accept_share < 1) FROM project_summary WHERE run_id = ?",
        [run_id]).fetchall()[0]
    con.close()
    assert f"Of 7 projects, {every} are accepted" in brief and f"{none} in none, and {some} depend" in brief
    assumptions = body[body.index('id="assumptions"'):body.index('id="explorer"')]
    assert "Alternatives compared over a common 15-year study period." in assumptions
    assert "No loans &lt;b&gt;here&lt;/b&gt;." in assumptions
    # raw settings only inside a collapsed block, after the sentences
    assert assumptions.index("<details") > assumptions.index("Fisher relation")
    assert "<details open" not in page


def test_fails_under_high_inflation_is_the_query_s_definition(screened):
    db, run_id, page = screened
    by_query = run_query(db, "fails-above-inflation", {"run": run_id, "threshold": "0.05", "min_drop": "0.25"})
    brief = page[page.index('id="decision-brief"'):page.index('id="assumptions"')]
    assert f"{by_query.height} project(s) fail when inflation is above 5.00%" in brief
    assert "threshold=0.05, min_drop=0.25" in brief
    # independent check in numpy on the stored rows: share above vs at-or-below the threshold
    con = duckdb.connect(str(db), read_only=True)
    rows = con.sql("SELECT project_id, inflation, present_worth FROM results r JOIN scenarios s "
                   "USING (run_id, scenario_id) WHERE run_id = $1", params=[run_id]).pl()
    con.close()
    agg = rows.group_by("project_id").agg(
        (pl.col("present_worth") >= 0).filter(pl.col("inflation") > 0.05).mean().alias("hi"),
        (pl.col("present_worth") >= 0).filter(pl.col("inflation") <= 0.05).mean().alias("lo"))
    expected = set(agg.filter(pl.col("lo") - pl.col("hi") >= 0.25)["project_id"].to_list())
    assert set(by_query["project_id"].to_list()) == expected
    assert "H" in expected   # the fixed-price (nominal) benefit loses to inflation


def test_explorer_data_equals_the_stored_rows(screened):
    db, run_id, page = screened
    data = explorer_block(page)
    assert data["full"] and data["total_projects"] == 7
    worths = {int(k): decoded_worths(data["pwe"][k], v) for k, v in data["pw"].items()}
    con = duckdb.connect(str(db), read_only=True)
    try:
        for pos in (0, data["base"], len(data["sc"]["id"]) - 1):
            sid = data["sc"]["id"][pos]
            stored = con.execute("SELECT project_id, present_worth FROM results WHERE run_id = ? AND scenario_id = ? "
                                 "ORDER BY present_worth DESC, project_id", [run_id, sid]).fetchall()
            embedded = dict((data["pr"]["id"][k], v[pos]) for k, v in worths.items())
            # no outside source: the page's numbers must equal the database's own (rounding only);
            # four significant digits: relative error at most half a unit in the fourth digit
            np.testing.assert_allclose([embedded[p] for p, _ in stored], [v for _, v in stored], rtol=5e-4)
            # a negative worth never rounds to zero or above: "accepted" is the database's
            assert [embedded[p] >= 0 for p, _ in stored] == [v >= 0 for _, v in stored]
            # the page's order: rounded worths (ties by id), then the stored order where rounding differs
            shown = sorted(embedded, key=lambda p: (-embedded[p], p))
            fix = data["fix"].get(str(pos))
            if fix:
                shown[fix[0]:fix[0] + len(fix) - 1] = [data["pr"]["id"][i] for i in fix[1:]]
            assert shown == [p for p, _ in stored]
            assert data["sc"]["accepted"][pos] == sum(v >= 0 for _, v in stored)
            sel = {r[0] for r in con.execute("SELECT project_id FROM selections WHERE run_id = ? AND scenario_id = ?",
                                             [run_id, sid]).fetchall()}
            bits = data["selected"][pos]
            assert {data["pr"]["id"][i] for i in range(7) if int(bits[i >> 2], 16) >> (i & 3) & 1} == sel
            worth = con.execute("SELECT objective FROM portfolios WHERE run_id = ? AND scenario_id = ?",
                                [run_id, sid]).fetchall()[0][0]
            # no outside source: the page's portfolio worth against the stored portfolios.objective
            assert data["sc"]["worth"][pos] == pytest.approx(worth, rel=1e-8, abs=1e-6)
    finally:
        con.close()
    # controls: form elements named discount_rate and inflation, values the stored fractions
    assert re.search(r'<select name="discount_rate" data-axis="discount_rate">', page)
    assert re.search(r'<select name="inflation" data-axis="inflation">', page)
    assert '<option value="0.04" selected>' in page
    assert '<table id="scenario-ranking">' in page


def test_large_run_rule_embeds_the_top_per_scenario(screened, monkeypatch):
    """Forcing the large-run rule: each scenario lists its top projects in the database's order."""
    from ratescape.report import explorer
    db, run_id, _ = screened
    monkeypatch.setattr(explorer, "FULL_EMBED_PROJECTS", 3)
    monkeypatch.setattr(explorer, "TABLE_TOP", 3)
    monkeypatch.setattr(explorer, "MAX_EMBEDDED_DRILL", 2)
    con = duckdb.connect(str(db), read_only=True)
    try:
        ctx = RunContext(con, pick_run(con, run_id))
        data = explorer_data(ctx, ["Q"], [])
        assert not data["full"] and len(data["pw"]) == 2
        assert data["pr"]["id"][int(next(iter(data["pw"])))] == "Q"   # --project first
        for pos, sid in enumerate(data["sc"]["id"]):
            stored = con.execute("SELECT project_id FROM results WHERE run_id = ? AND scenario_id = ? "
                                 "ORDER BY present_worth DESC LIMIT 3", [run_id, sid]).fetchall()
            assert [data["pr"]["id"][i] for i in data["top"][pos]] == [r[0] for r in stored]
    finally:
        con.close()


def test_compare_to_reports_new_removed_and_changed_projects(tmp_path):
    db, first = make_db(tmp_path)
    changed = (PROJECTS.replace("M,Invented pump refit,,80,14,real,,,12\n", "")
               .replace("A,Invented harbour crane,,100,30,real,,,10", "A,Invented harbour crane,,100,12,real,,,10")
               + "N,Invented new berth,,50,20,real,,,10\n")
    (tmp_path / "p.csv").write_text(changed, encoding="utf-8")
    load_portfolio(tmp_path / "p.csv", None, db)
    second = screen_portfolio(db, discount_rates="0:0.2:11", inflation="0:0.1:6", budgets=BUDGET)
    frame = run_query(db, "run-changes", {"run": second, "before": first})
    why = dict(zip(frame["project_id"].to_list(), frame["why"].to_list()))
    assert why["N"] == "new project" and why["M"] == "removed project"
    assert why["A"] == "inputs changed (base-scenario worth differs)"
    out = write_report(db, tmp_path / "r.html", second, compare_to=first)
    page = out.read_text(encoding="utf-8")
    assert f"What changed since run {first}" in page
    assert "1 new, 1 removed" in page
    with pytest.raises(ReportError, match="is the run being reported"):
        write_report(db, tmp_path / "x.html", second, compare_to=second)


def test_drill_templates_as_data():
    t = drill_templates("discount_rate")
    json.loads(json.dumps(t))   # round trip
    names = {layer["data"]["name"] for layer in t["surface"]["layer"]}
    assert names == {"cells", "lines", "labels", "zero_real"}
    colour = t["surface"]["layer"][0]["encoding"]["color"]
    assert colour["scale"]["clamp"] is True and colour["scale"]["domain"] == [-1.0, 0.0, 1.0]
    assert t["curve"]["layer"][0]["encoding"]["x"]["title"] == "Discount rate, nominal (per year)"
    assert drill_templates("real_rate")["curve"]["layer"][0]["encoding"]["x"]["title"] == "Discount rate, real (per year)"
    for kind in ("curve", "tornado", "spider"):
        text = json.dumps(t[kind])
        assert MONEY_LABEL_EXPR.replace("'", "\\'") in text or MONEY_LABEL_EXPR in text
        assert '"~s"' not in text



def test_money_labels_never_use_si_giga():
    """Evaluate the label expression's branches in Python (the Vega expression is plain arithmetic)."""
    def label(v):
        a = abs(v)
        return (f"{v / 1e6:,.4g} M" if a >= 1e6 else f"{v / 1e3:,.4g} k" if a >= 1e3 else f"{v:,.4g}")
    assert "1e6" in MONEY_LABEL_EXPR and "' M'" in MONEY_LABEL_EXPR and "G" not in MONEY_LABEL_EXPR
    assert label(1.2e9) == "1,200 M" and label(-25_000) == "-25 k"


def test_colour_clip_rule_and_spaced_contour_labels():
    # symmetric clipping at the 2nd-98th percentile: numpy's percentile is the reference
    v = np.r_[np.linspace(-100, 300, 200), 5e4]
    m, beyond = clipped_worth_domain(v)
    lo, hi = np.percentile(v, [2, 98])
    assert m == pytest.approx(max(abs(lo), abs(hi))) and beyond == np.count_nonzero(np.abs(v) > m)
    x, y = np.linspace(0, 0.2, 21), np.linspace(0, 0.1, 11)
    xx, yy = np.meshgrid(x, y)
    frame = pl.DataFrame({"x": xx.ravel(), "y": yy.ravel(), "pw": (1000 * (0.1 - xx + yy)).ravel()})
    lines = surface_contours(frame, x="x", y="y", value="pw", levels=np.arange(-100, 101, 10.0))
    labels = place_contour_labels(lines, x_span=0.2, y_span=0.1, min_gap=0.14)
    u, w = labels["x"].to_numpy() / 0.2, labels["y"].to_numpy() / 0.1
    d = np.hypot(u[:, None] - u[None, :], w[:, None] - w[None, :]) + np.eye(len(u)) * 9
    assert len(u) >= 2 and d.min() >= 0.14


def test_worth_codes_keep_four_digits_and_the_sign():
    """Rounding to four significant digits, as Python's own '%.4g' formatting rounds (the reference)."""
    v = np.array([19_228_835.0, -0.3456, 1234.56, -98_765.4, 0.0, np.nan, -1e-9])
    e, codes = worth_codes(v)
    back = decoded_worths(e, codes)
    ref = np.array([float(f"{a:.4g}") for a in v])
    np.testing.assert_allclose(back[:5], ref[:5], rtol=1e-12)
    assert codes[5] is None and back[6] < 0           # a tiny loss stays a loss
    assert codes[0] == 1923 and e == 4                 # the largest worth as a 4-digit integer
    assert selection_bits([0, 1, 6], 7) == "34"        # bits 0 and 1 -> 3; bit 6 -> 4 in the second digit
