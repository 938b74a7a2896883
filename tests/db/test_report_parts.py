"""The report: offline, escaped, aggregated in DuckDB, read-only; built from an invented database.

The invented database below is computed with plain numpy (and SciPy's brentq for IRRs and frontier
points) from invented parametric projects, independently of ratescape's engine, so the report's
DuckDB aggregations can be checked against numpy. All numbers are invented, for testing only.
"""
from __future__ import annotations

import html.parser
import json
import re
from pathlib import Path

import duckdb
import numpy as np
import polars as pl
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq

from ratescape.caution import CAUTION
from ratescape.report import charts, publish, run_data, sections
from ratescape.report import page as report_page
from ratescape.report.escaping import escape_html, json_for_script, json_script_block

# ---------------------------------------------------------------------------
# invented database
# ---------------------------------------------------------------------------

HOSTILE = '</script><script>window.__pwned=1</script><img src=x onerror="window.__pwned=2">'
RUN_ID = "run-2"
RATES = np.round(np.linspace(0.0, 0.20, 21), 10)  # nominal discount rate, fraction per year
INFLATION = np.round(np.linspace(0.0, 0.10, 11), 10)  # fraction per year
BASE = (0.08, 0.03)

# Our own DDL with the columns of the brief; used only if the store module is absent.
_FALLBACK_DDL = [
    """CREATE TABLE runs (run_id VARCHAR, status VARCHAR, started_at TIMESTAMP, finished_at TIMESTAMP,
        tool_version VARCHAR, inputs_hash VARCHAR, grid_spec VARCHAR, discount_basis VARCHAR, timing VARCHAR,
        periods_per_year DOUBLE, after_tax BOOLEAN, project_count INTEGER, scenario_count INTEGER,
        base_scenario_id INTEGER, message VARCHAR)""",
    """CREATE TABLE projects (project_key INTEGER, project_id VARCHAR, name VARCHAR, group_name VARCHAR,
        requires VARCHAR, mandatory BOOLEAN, category VARCHAR, life INTEGER)""",
    """CREATE TABLE scenarios (run_id VARCHAR, scenario_id INTEGER, discount_rate DOUBLE, real_rate DOUBLE,
        inflation DOUBLE, weight DOUBLE, is_base BOOLEAN)""",
    """CREATE TABLE results (run_id VARCHAR, project_id VARCHAR, scenario_id INTEGER, present_worth DOUBLE,
        annual_worth DOUBLE, accepted BOOLEAN)""",
    """CREATE TABLE project_summary (run_id VARCHAR, project_id VARCHAR, accept_share DOUBLE, pw_min DOUBLE,
        pw_max DOUBLE, pw_mean DOUBLE, pw_base DOUBLE, accepted_base BOOLEAN, rank_min INTEGER,
        rank_median DOUBLE, rank_max INTEGER, rank_base INTEGER)""",
    """CREATE TABLE irr_results (run_id VARCHAR, project_id VARCHAR, inflation DOUBLE, root_count INTEGER,
        irr_nominal DOUBLE, irr_real DOUBLE, status VARCHAR)""",
]

OPTIONAL_DDL = [
    """CREATE TABLE IF NOT EXISTS frontiers (run_id VARCHAR, group_name VARCHAR, alternative_a VARCHAR,
        alternative_b VARCHAR, x_axis VARCHAR, x DOUBLE, y_axis VARCHAR, y DOUBLE, segment INTEGER, point INTEGER)""",
    """CREATE TABLE IF NOT EXISTS group_decisions (run_id VARCHAR, group_name VARCHAR, scenario_id INTEGER,
        preferred VARCHAR, runner_up VARCHAR, margin DOUBLE)""",
    """CREATE TABLE IF NOT EXISTS portfolios (run_id VARCHAR, scenario_id INTEGER, objective DOUBLE,
        lp_bound DOUBLE, greedy_objective DOUBLE)""",
    """CREATE TABLE IF NOT EXISTS selections (run_id VARCHAR, scenario_id INTEGER, project_id VARCHAR)""",
    """CREATE TABLE IF NOT EXISTS sensitivity (run_id VARCHAR, project_id VARCHAR, input VARCHAR,
        worth_base DOUBLE, worth_low DOUBLE, worth_high DOUBLE)""",
    """CREATE TABLE IF NOT EXISTS spider (run_id VARCHAR, project_id VARCHAR, input VARCHAR,
        change DOUBLE, present_worth DOUBLE)""",
]


def create_tables(con) -> None:
    """The lead's schema when available, else the brief's columns."""
    try:
        from ratescape.store.schema import create_schema
    except ImportError:
        for ddl in _FALLBACK_DDL:
            con.execute(ddl)
    else:
        create_schema(con)
        # `results` is a view over the narrow result_rows table; these invented databases write
        # the view's columns directly, so stand a plain table with the same columns in its place
        con.execute("DROP VIEW results")
        con.execute("""CREATE TABLE results (run_id VARCHAR NOT NULL, project_id VARCHAR NOT NULL,
            scenario_id INTEGER NOT NULL, present_worth DOUBLE NOT NULL, annual_worth DOUBLE, accepted BOOLEAN,
            profitability_index DOUBLE, present_worth_before_tax DOUBLE, project_key INTEGER)""")


def insert_rows(con, table: str, columns: list[str], rows: list[tuple]) -> None:
    """Bulk insert through Arrow (row-by-row inserts are slow in DuckDB)."""
    import polars as pl

    frame = pl.DataFrame(rows, schema=columns, orient="row", infer_schema_length=None)
    con.register("incoming_rows", frame.to_arrow())
    con.execute(f"INSERT INTO {table} ({', '.join(columns)}) SELECT * FROM incoming_rows")
    con.unregister("incoming_rows")


def invented_projects(n: int = 40, seed: int = 7):
    """Invented parametric projects: first cost, annual benefit, life, basis of the benefit."""
    rng = np.random.default_rng(seed)
    cost = rng.uniform(50.0, 500.0, n).round(0)
    benefit = (cost * rng.uniform(0.08, 0.30, n)).round(1)
    benefit = np.where(rng.random(n) < 0.4, benefit * 2.2, benefit)
    life = rng.integers(5, 26, n)
    nominal = rng.random(n) < 0.4  # contract-fixed (then-current) benefits
    ids = [f"P{i:03d}" for i in range(n)]
    names = [f"Invented project {i}" for i in range(n)]
    names[0] = HOSTILE
    cost[0], benefit[0], life[0], nominal[0] = 100.0, 40.0, 20, False  # accepted everywhere
    return ids, names, cost, benefit, life, nominal


def pw_matrix(cost, benefit, life, nominal, rate, infl):
    """PW (P, S) of -cost at t=0 and a benefit for t=1..life; real benefits grow with (1+f)^t.

    Projects with a contract-fixed (nominal) benefit also carry a real operating cost of half the
    benefit, so their worth falls as inflation rises.
    """
    t = np.arange(1, int(np.max(life)) + 1)
    real_growth = (1.0 + infl[None, None, :]) ** t[None, :, None]
    growth = np.where(nominal[:, None, None], 1.0, real_growth)
    disc = (1.0 + rate[None, None, :]) ** -t[None, :, None]
    alive = (t[None, :] <= life[:, None])[:, :, None]
    benefit_pw = np.sum(np.where(alive, growth * disc, 0.0), axis=1)
    cost_pw = np.sum(np.where(alive, real_growth * disc, 0.0), axis=1)
    opcost = np.where(nominal, 0.5 * benefit, 0.0)
    return -cost[:, None] + benefit[:, None] * benefit_pw - opcost[:, None] * cost_pw


def scenario_grid():
    """(scenario_id, discount_rate, inflation, real_rate) over the invented grid."""
    i, f = np.meshgrid(RATES, INFLATION, indexing="xy")
    i, f = i.ravel(), f.ravel()
    return np.arange(i.size), i, f, (1 + i) / (1 + f) - 1


def build_db(path: str | Path, *, optional: bool = True, n: int = 40) -> dict:
    """Write the invented database; return the arrays used, for independent checks."""
    ids, names, cost, benefit, life, nominal = invented_projects(n)
    sid, rate, infl, real = scenario_grid()
    pw = pw_matrix(cost, benefit, life, nominal, rate, infl)
    base_sid = int(np.flatnonzero(np.isclose(rate, BASE[0]) & np.isclose(infl, BASE[1]))[0])
    group = ["G1" if k in (1, 2, 3) else None for k in range(n)]
    # alternatives of group G1: short cheap, long dear, contract-fixed benefit
    cost[1:4], benefit[1:4], life[1:4], nominal[1:4] = [100, 260, 180], [30, 38, 30], [5, 25, 15], [False, False, True]
    pw = pw_matrix(cost, benefit, life, nominal, rate, infl)
    con = duckdb.connect(str(path))
    create_tables(con)
    insert_rows(con, "projects", ["project_key", "project_id", "name", "group_name", "life"], [(k, ids[k], names[k], group[k], int(life[k])) for k in range(n)])
    con.execute("""INSERT INTO runs (run_id, status, started_at, finished_at, tool_version, inputs_hash, grid_spec,
                   discount_basis, timing, periods_per_year, after_tax, project_count, scenario_count,
                   base_scenario_id, message) VALUES
                   ('run-1', 'done', '2024-01-01 10:00', '2024-01-01 10:05', '0.1.0', 'abc', '{}', 'nominal',
                    'end', 1, false, ?, ?, ?, NULL),
                   (?, 'done', '2024-02-01 10:00', '2024-02-01 10:05', '0.1.0', 'abc',
                    '{"discount_rates": "0:0.2:21", "inflation": "0:0.1:11", "note": "<b>invented</b>"}',
                    'nominal', 'end', 1, false, ?, ?, ?, 'invented test data'),
                   ('run-3', 'running', '2024-03-01 10:00', NULL, '0.1.0', 'abc', '{}', 'nominal',
                    'end', 1, false, ?, ?, ?, NULL)""",
                [n, sid.size, base_sid, RUN_ID, n, sid.size, base_sid, n, sid.size, base_sid])
    insert_rows(con, "scenarios", ["run_id", "scenario_id", "discount_rate", "real_rate", "inflation", "weight",
                                   "is_base"], [(RUN_ID, int(s), float(rate[s]), float(real[s]), float(infl[s]), 1.0, bool(s == base_sid))
                     for s in sid])
    p_idx, s_idx = np.meshgrid(np.arange(n), sid, indexing="ij")
    import pyarrow as pa

    results = pa.table({
        "run_id": [RUN_ID] * pw.size,
        "project_id": np.array(ids)[p_idx.ravel()].tolist(),
        "scenario_id": s_idx.ravel().astype(np.int32),
        "present_worth": pw.ravel(),
        "annual_worth": pw.ravel() * 0.1,
        "accepted": (pw.ravel() >= 0.0),
    })
    con.register("incoming", results)
    con.execute("INSERT INTO results (run_id, project_id, scenario_id, present_worth, annual_worth, accepted) "
                "SELECT * FROM incoming")
    con.unregister("incoming")
    # ranks by present worth, 1 = highest, per scenario
    order = np.argsort(-pw, axis=0, kind="stable")
    ranks = np.empty_like(order)
    ranks[order, np.arange(pw.shape[1])[None, :]] = np.arange(1, n + 1)[:, None]
    insert_rows(con, "project_summary", ["run_id", "project_id", "accept_share", "pw_min", "pw_max", "pw_mean",
                                         "pw_base", "accepted_base", "rank_min", "rank_median", "rank_max",
                                         "rank_base"], [(RUN_ID, ids[k], float(np.mean(pw[k] >= 0)), float(pw[k].min()), float(pw[k].max()),
                      float(pw[k].mean()), float(pw[k, base_sid]), bool(pw[k, base_sid] >= 0),
                      int(ranks[k].min()), float(np.median(ranks[k])), int(ranks[k].max()),
                      int(ranks[k, base_sid])) for k in range(n)])
    # IRR per inflation level (conventional streams: one root at most)
    irr_rows = []
    for k in range(n):
        for f in INFLATION:
            def g(i, k=k, f=f):
                return pw_matrix(cost[k:k + 1], benefit[k:k + 1], life[k:k + 1], nominal[k:k + 1],
                                 np.array([i]), np.array([f]))[0, 0]
            if g(-0.5) * g(3.0) < 0:
                root = brentq(g, -0.5, 3.0, xtol=1e-12)
                irr_rows.append((RUN_ID, ids[k], float(f), 1, root, (1 + root) / (1 + f) - 1, "ok"))
            else:
                irr_rows.append((RUN_ID, ids[k], float(f), 0, None, None, "no-root"))
    insert_rows(con, "irr_results", ["run_id", "project_id", "inflation", "root_count", "irr_nominal", "irr_real",
                                     "status"], irr_rows)
    if optional:
        for ddl in OPTIONAL_DDL:
            con.execute(ddl)
        _write_group(con, ids, pw, rate, infl, sid, cost, benefit, life, nominal)
        _write_portfolio(con, ids, pw, cost, sid)
        _write_sensitivity(con, ids, cost, benefit, life, nominal)
    con.close()
    return {"ids": ids, "names": names, "pw": pw, "rate": rate, "inflation": infl, "base_sid": base_sid}


def _write_group(con, ids, pw, rate, infl, sid, cost, benefit, life, nominal):
    alts = [1, 2, 3]
    sub = pw[alts]
    order = np.argsort(-sub, axis=0)
    pref, runner = order[0], order[1]
    margin = sub[pref, sid] - sub[runner, sid]
    insert_rows(con, "group_decisions", ["run_id", "group_name", "scenario_id", "preferred", "runner_up", "margin"],
                [(RUN_ID, "G1", int(s), ids[alts[pref[s]]], ids[alts[runner[s]]], float(margin[s])) for s in sid])
    rows = []
    for a in range(3):
        for b in range(a + 1, 3):
            point = 0
            for f in INFLATION:
                def d(i, f=f):
                    v = pw_matrix(cost[alts], benefit[alts], life[alts], nominal[alts], np.array([i]), np.array([f]))
                    return v[a, 0] - v[b, 0], v
                fine = np.linspace(RATES[0], RATES[-1], 201)
                vals = np.array([d(i)[0] for i in fine])
                for j in np.flatnonzero(np.sign(vals[:-1]) != np.sign(vals[1:])):
                    root = brentq(lambda i: d(i)[0], fine[j], fine[j + 1], xtol=1e-12)
                    v = d(root)[1][:, 0]
                    if v[a] >= np.delete(v, [a, b]).max():  # a and b are the top two here
                        rows.append((RUN_ID, "G1", ids[alts[a]], ids[alts[b]], "discount_rate", root,
                                     "inflation", float(f), 0, point))
                        point += 1
    insert_rows(con, "frontiers", ["run_id", "group_name", "alternative_a", "alternative_b", "x_axis", "x",
                                   "y_axis", "y", "segment", "point"], rows)


def _write_portfolio(con, ids, pw, cost, sid):
    budget = 1500.0
    sel_rows, port_rows = [], []
    for s in sid:
        pi = pw[:, s] / cost
        chosen, spent = [], 0.0
        for k in np.argsort(-pi):
            if pw[k, s] > 0 and spent + cost[k] <= budget:
                chosen.append(k)
                spent += cost[k]
        total = float(pw[chosen, s].sum())
        port_rows.append((RUN_ID, int(s), total, total * 1.02, total))
        sel_rows += [(RUN_ID, int(s), ids[k]) for k in chosen]
    insert_rows(con, "portfolios", ["run_id", "scenario_id", "objective", "lp_bound", "greedy_objective"], port_rows)
    insert_rows(con, "selections", ["run_id", "scenario_id", "project_id"], sel_rows)


def _write_sensitivity(con, ids, cost, benefit, life, nominal):
    spider_rows, tornado_rows = [], []
    rate, infl = np.array([BASE[0]]), np.array([BASE[1]])
    for k in range(4):
        worth = {}
        for pct in np.linspace(-0.2, 0.2, 5):
            variants = {
                "first cost": (cost[k] * (1 + pct), benefit[k], rate),
                "annual benefit": (cost[k], benefit[k] * (1 + pct), rate),
                "discount rate": (cost[k], benefit[k], rate * (1 + pct)),
            }
            for name, (c, b, r) in variants.items():
                v = pw_matrix(np.array([c]), np.array([b]), life[k:k + 1], nominal[k:k + 1], r, infl)[0, 0]
                spider_rows.append((RUN_ID, ids[k], name, float(pct), float(v)))
                worth[(name, round(float(pct), 6))] = float(v)
        for name in ("first cost", "annual benefit", "discount rate"):
            tornado_rows.append((RUN_ID, ids[k], name, worth[(name, 0.0)], worth[(name, -0.2)], worth[(name, 0.2)]))
    insert_rows(con, "spider", ["run_id", "project_id", "input", "change", "present_worth"], spider_rows)
    insert_rows(con, "sensitivity", ["run_id", "project_id", "input", "worth_base", "worth_low", "worth_high"],
                tornado_rows)


def build_big_db(path: str | Path, n: int = 100_000) -> None:
    """n invented projects over a 3 x 3 grid, generated in SQL (for the size check)."""
    con = duckdb.connect(str(path))
    create_tables(con)
    con.execute(f"""INSERT INTO projects (project_key, project_id, name)
                    SELECT i, 'B' || i, 'Invented bulk project ' || i FROM range({n}) t(i)""")
    con.execute("""INSERT INTO runs (run_id, status, started_at, finished_at, discount_basis, base_scenario_id,
                   project_count, scenario_count) VALUES ('big', 'done', '2024-01-01', '2024-01-02', 'nominal', 4, ?, 9)""",
                [n])
    con.execute("""INSERT INTO scenarios (run_id, scenario_id, discount_rate, real_rate, inflation, weight, is_base)
                   SELECT 'big', a * 3 + b, 0.04 + 0.04 * b, (1.04 + 0.04 * b) / (1.0 + 0.03 * a) - 1,
                          0.03 * a, 1.0, a * 3 + b = 4 FROM range(3) x(a), range(3) y(b)""")
    con.execute(f"""INSERT INTO results (run_id, project_id, scenario_id, present_worth, annual_worth, accepted)
                    SELECT 'big', 'B' || i, s, pw, pw * 0.1, pw >= 0 FROM (
                      SELECT i, s, ((hash(i) % 2000)::DOUBLE - 600.0) - 80.0 * (s % 3) + 30.0 * (s // 3) AS pw
                      FROM range({n}) t(i), range(9) u(s))""")
    con.execute("""INSERT INTO project_summary (run_id, project_id, accept_share, pw_min, pw_max, pw_mean, pw_base,
                   accepted_base, rank_min, rank_median, rank_max, rank_base)
                   SELECT 'big', project_id, avg(accepted::INT), min(present_worth), max(present_worth),
                          avg(present_worth), max(present_worth) FILTER (WHERE scenario_id = 4),
                          bool_or(accepted) FILTER (WHERE scenario_id = 4),
                          min(rk), median(rk), max(rk), max(rk) FILTER (WHERE scenario_id = 4)
                   FROM (SELECT *, rank() OVER (PARTITION BY scenario_id ORDER BY present_worth DESC) AS rk
                         FROM results) GROUP BY project_id""")
    con.close()


# ---------------------------------------------------------------------------
# fixtures
# ---------------------------------------------------------------------------

DRILL = ["P000", "P001", "P002"]  # P000 carries the hostile name; P001, P002 are alternatives of group G1


@pytest.fixture(scope="module")
def full_db(tmp_path_factory):
    path = tmp_path_factory.mktemp("full") / "results.duckdb"
    info = build_db(path)
    return path, info


@pytest.fixture(scope="module")
def full_report(full_db, tmp_path_factory):
    path = tmp_path_factory.mktemp("report") / "report.html"
    publish.write_report(full_db[0], path, projects=DRILL)
    return path, path.read_text(encoding="utf-8")


class Tags(html.parser.HTMLParser):
    """Every start tag with its attributes, and the text of table cells."""

    def __init__(self):
        super().__init__()
        self.tags: list[tuple[str, dict]] = []
        self.cells: list[str] = []
        self._in_cell = False

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        self._in_cell = tag in ("td", "th")

    def handle_endtag(self, tag):
        if tag in ("td", "th"):
            self._in_cell = False

    def handle_data(self, data):
        if self._in_cell:
            self.cells.append(data)


def parse(page: str) -> Tags:
    p = Tags()
    p.feed(page)
    return p


def spec_blocks(page: str) -> list[dict]:
    return [json.loads(m) for m in re.findall(r'<script type="application/json" id="spec-\d+"[^>]*>(.*?)</script>',
                                              page, re.S)]


def sections_of(db_path, **kw):
    con = duckdb.connect(str(db_path), read_only=True)
    try:
        return sections.report_sections(con, **kw)
    finally:
        con.close()


# ---------------------------------------------------------------------------
# escaping helpers
# ---------------------------------------------------------------------------

json_values = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats(allow_nan=False, allow_infinity=False)
    | st.text(alphabet=st.sampled_from(list("<>&/'\"\u2028\u2029 scriptSCRIPT!-\\é")) | st.characters()),
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=5), inner, max_size=4),
    max_leaves=20,
)


@settings(max_examples=200, deadline=None)
@given(json_values)
def test_json_for_script_round_trips_and_has_no_markup_characters(value):
    out = json_for_script(value)
    assert json.loads(out) == value
    assert not set(out) & {"<", ">", "&", "\u2028", "\u2029"}


def test_json_for_script_hostile_name():
    out = json_for_script({"name": HOSTILE})
    assert "</script" not in out.lower() and "\\u003c/script\\u003e" in out
    assert json_for_script(float("nan")) == "null"


def test_escape_html_and_script_block():
    assert escape_html(HOSTILE) == ("&lt;/script&gt;&lt;script&gt;window.__pwned=1&lt;/script&gt;"
                                    "&lt;img src=x onerror=&quot;window.__pwned=2&quot;&gt;")
    block = json_script_block([HOSTILE], "spec-1", chart="chart-1")
    assert block.count("</script>") == 1 and block.endswith("</script>")
    with pytest.raises(ValueError):
        json_script_block([], 'x" onload="alert(1)')


# ---------------------------------------------------------------------------
# page assembly
# ---------------------------------------------------------------------------

def test_build_report_html_is_offline_and_escapes_everything():
    table = pl.DataFrame({"project_id": ["P1"], "name": [HOSTILE], "pw_base": [1234.5]})
    chart = charts.acceptance_share_bars(pl.DataFrame({"project_id": ["P1"], "name": [HOSTILE],
                                                       "accept_share": [0.5]}))
    page = report_page.build_report_html(
        [report_page.Section(f"Section {HOSTILE}", HOSTILE, table=table, chart=chart),
         report_page.Section("Later", unavailable="Not available: no table.")],
        title=f"Title {HOSTILE}", metadata={"Run id": HOSTILE})
    tags = parse(page)
    scripts = [a for t, a in tags.tags if t == "script"]
    # error hook, Vega bundle, one spec, render script: nothing else is a script, nothing has src
    assert len(scripts) == 4
    assert all("src" not in a for a in scripts)
    assert [a.get("type") for a in scripts] == [None, None, "application/json", None]
    assert not [t for t, _ in tags.tags if t in ("img", "link", "iframe", "object", "embed")]
    for tag, attrs in tags.tags:
        for key in ("src", "href"):
            assert not str(attrs.get(key, "")).startswith(("http://", "https://", "//")), (tag, attrs)
    assert HOSTILE in tags.cells  # shown as text in the table and metadata
    assert page.count(escape_html(HOSTILE)) >= 4  # title tag, h1, h2, paragraph, cell, metadata
    assert "</script><script>window" not in page
    (spec,) = spec_blocks(page)
    assert spec == json.loads(json.dumps(chart.to_dict()))
    assert "actions: false" in page and CAUTION in page
    assert "Not available: no table." in page


# ---------------------------------------------------------------------------
# the report of an invented database
# ---------------------------------------------------------------------------

def test_missing_required_table_and_missing_file(tmp_path):
    db = tmp_path / "empty.duckdb"
    duckdb.connect(str(db)).close()
    # an empty DuckDB file has no ratescape schema version: refused on opening (issue 17, item 2)
    from ratescape.errors import RatescapeError
    with pytest.raises(RatescapeError, match="is not a ratescape database .it has no ratescape schema version"):
        publish.write_report(db, tmp_path / "r.html")
    with pytest.raises(run_data.ReportError, match="no database at"):
        publish.write_report(tmp_path / "absent.duckdb", tmp_path / "r.html")
