"""Issue 16, part 2: capital rationing at any size, streamed in blocks of scenarios from the worth files.

A streamed run (forced with a small cell limit) must store exactly what the in-memory solve stores:
the same selections, objectives and proven gaps, and the same selection shares, core portfolio and
min-max-regret portfolio. The in-memory references are the pure functions of ``decide/``
(``ration_capital``, ``selection_share``, ``core_portfolio``, ``min_max_regret``) on the whole
(P, S) worth matrix read back from the ``results`` view. Constraint checks are recomputed from the
stored cash flows (two budget periods, mutually exclusive groups, one of them mandatory, and
"requires" pairs); optimality is checked against brute-force enumeration of every portfolio
(common practice for small 0-1 programs).
"""
import itertools

import duckdb
import numpy as np
import pytest

from helpers import load_csv   # tests/ is on sys.path (conftest)
from ratescape import screen_portfolio
import ratescape.decide.rationing as rationing
import ratescape.run.rationing_stage as stage
from ratescape.decide.portfolio_stats import core_portfolio, min_max_regret, selection_share

GAP = 1e-3
RNG = np.random.default_rng(16)
P = 14
GROUP = ["g1", "g1", "g1", "g2", "g2", "g3", "g3"] + [""] * (P - 7)     # g2 is mandatory
REQUIRES = {9: 8, 12: 10}                                               # project 9 needs 8, 12 needs 10


def _projects():
    lines = ["project_id,name,group,requires,mandatory"]
    for j in range(P):
        req = f"P{REQUIRES[j]:02d}" if j in REQUIRES else ""
        lines.append(f"P{j:02d},Project {j},{GROUP[j]},{req},{'true' if GROUP[j] == 'g2' else ''}")
    return "\n".join(lines) + "\n"


def _flows():
    lines = ["project_id,period,amount,basis,escalation,kind"]
    for j in range(P):
        inv0 = round(float(RNG.uniform(20, 100)), 2)
        inv1 = round(float(RNG.uniform(0, 60)), 2) if j % 3 else 0.0
        lines.append(f"P{j:02d},0,{-inv0},real,0,investment")
        if inv1:
            lines.append(f"P{j:02d},1,{-inv1},real,0,investment")
        benefit = round((inv0 + inv1) * float(RNG.uniform(0.12, 0.3)), 2)
        for t in range(2, 2 + int(RNG.integers(4, 9))):
            lines.append(f"P{j:02d},{t},{benefit},{'real' if j % 2 else 'nominal'},0,benefit")
    return "\n".join(lines) + "\n"


GRID = """
[grid]
discount_basis = "nominal"
discount_rates = { start = 0.03, stop = 0.15, count = 6 }
inflation = { start = 0.0, stop = 0.08, count = 5 }
base = { discount_rate = 0.09, inflation = 0.04 }
[budget]
periods = { "0" = 260, "1" = 70 }
[weights]
inflation = { distribution = "normal", mean = 0.03, sd = 0.02 }
[decisions]
core_share = 0.6
"""
PROJECTS, FLOWS = _projects(), _flows()
TABLES = {
    "portfolios": "SELECT scenario_id, objective, lp_bound, mip_gap, greedy_objective, projects_selected, budget_used, "
                  "status FROM portfolios WHERE run_id = ? ORDER BY scenario_id",
    "selections": "SELECT scenario_id, project_id FROM selections WHERE run_id = ? ORDER BY 1, 2",
    "greedy_selections": "SELECT scenario_id, project_id FROM greedy_selections WHERE run_id = ? ORDER BY 1, 2",
    "summary": "SELECT project_id, selected_share, in_core, in_min_max_regret FROM portfolio_summary "
               "WHERE run_id = ? ORDER BY project_id",
    "regret": "SELECT candidate, scenarios_optimal, chosen, max_regret IS NULL FROM portfolio_regret "
              "WHERE run_id = ? ORDER BY candidate",
}


def _screen(folder, monkeypatch, cell_limit, fail_after=None):
    """Load and screen the portfolio with small solver blocks (8 scenarios, the least) and the given read limit."""
    monkeypatch.setattr(rationing, "BLOCK_SIZE", 4)
    monkeypatch.setattr(stage, "RATION_CELL_LIMIT", cell_limit)
    (folder / "grid.toml").write_text(GRID)
    db = load_csv(folder, PROJECTS, FLOWS)
    return db, screen_portfolio(db, grid=folder / "grid.toml")


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    mp = pytest.MonkeyPatch()
    try:
        whole = _screen(tmp_path_factory.mktemp("whole"), mp, 10 ** 9)
        streamed = _screen(tmp_path_factory.mktemp("streamed"), mp, P * 8)     # read blocks of 8 scenarios
    finally:
        mp.undo()
    cons = {}
    for name, (db, run_id) in (("whole", whole), ("streamed", streamed)):
        cons[name] = (duckdb.connect(str(db), read_only=True), run_id)
    yield cons
    for con, _ in cons.values():
        con.close()


def _rows(con, run_id, sql):
    return con.execute(sql, [run_id]).fetchall()


def test_the_streamed_run_reads_several_blocks_and_the_whole_run_one(runs):
    con, run_id = runs["streamed"]
    blocks = _rows(con, run_id, "SELECT first_scenario_id, last_scenario_id FROM run_ration_blocks "
                                "WHERE run_id = ? ORDER BY block_index")
    assert blocks == [(0, 7), (8, 15), (16, 23), (24, 29)]
    con, run_id = runs["whole"]
    assert _rows(con, run_id, "SELECT first_scenario_id, last_scenario_id FROM run_ration_blocks WHERE run_id = ?") \
        == [(0, 29)]


@pytest.mark.parametrize("table", sorted(TABLES))
def test_streamed_and_in_memory_runs_store_the_same_rationing(runs, table):
    """Selections, objectives, gaps, shares, core and regret candidates: identical row for row."""
    a = _rows(*runs["whole"], TABLES[table])
    b = _rows(*runs["streamed"], TABLES[table])
    assert a == b and len(a) > 0


def test_stored_rationing_equals_the_pure_in_memory_functions(runs):
    """The streamed run against ration_capital, selection_share, core_portfolio and min_max_regret on
    the whole worth matrix (the reference computation, in memory)."""
    con, run_id = runs["streamed"]
    ids = [r[0] for r in con.execute("SELECT project_id FROM projects ORDER BY project_key").fetchall()]
    S = con.execute("SELECT count(*) FROM scenarios WHERE run_id = ?", [run_id]).fetchall()[0][0]
    pw = np.zeros((P, S))
    for sid, pid, v in con.execute("SELECT scenario_id, project_id, present_worth FROM results WHERE run_id = ?",
                                   [run_id]).fetchall():
        pw[ids.index(pid), sid] = v
    inflation = np.array([r[0] for r in con.execute(
        "SELECT inflation FROM scenarios WHERE run_id = ? ORDER BY scenario_id", [run_id]).fetchall()])
    weights = np.array([r[0] for r in con.execute(
        "SELECT weight FROM scenarios WHERE run_id = ? ORDER BY scenario_id", [run_id]).fetchall()])
    levels, cls = np.unique(inflation, return_inverse=True)
    inv = np.zeros((levels.size, 2, P))
    for pid, t, amount in con.execute("SELECT project_id, period, amount FROM cash_flows WHERE kind = 'investment'"
                                      ).fetchall():
        inv[:, t, ids.index(pid)] = -amount * (1 + levels) ** t          # real lines: then-current money
    group = np.array([{"g1": 0, "g2": 1, "g3": 2}.get(g, -1) for g in GROUP])
    mandatory = np.array([False, True, False])
    req = np.array([(d, p) for d, p in REQUIRES.items()])
    budgets = np.array([260.0, 70.0])
    old = rationing.BLOCK_SIZE
    rationing.BLOCK_SIZE = 4
    try:
        ref = rationing.ration_capital(pw, inv, budgets, scenario_class=cls, group_index=group,
                                       group_mandatory=mandatory, requires=req, mip_rel_gap=GAP)
    finally:
        rationing.BLOCK_SIZE = old
    stored = np.zeros((S, P), dtype=bool)
    for sid, pid in _rows(con, run_id, TABLES["selections"]):
        stored[sid, ids.index(pid)] = True
    np.testing.assert_array_equal(stored, ref.selected)
    obj = np.array([r[1] if r[1] is not None else np.nan for r in _rows(con, run_id, TABLES["portfolios"])])
    np.testing.assert_allclose(obj, ref.objective, rtol=1e-12)
    share = dict(_rows(con, run_id, "SELECT project_id, selected_share FROM portfolio_summary WHERE run_id = ?"))
    prob = dict(_rows(con, run_id, "SELECT project_id, selected_probability FROM portfolio_summary WHERE run_id = ?"))
    core = dict(_rows(con, run_id, "SELECT project_id, in_core FROM portfolio_summary WHERE run_id = ?"))
    best = dict(_rows(con, run_id, "SELECT project_id, in_min_max_regret FROM portfolio_summary WHERE run_id = ?"))
    np.testing.assert_array_equal([share[p] for p in ids], selection_share(ref.selected))
    np.testing.assert_allclose([prob[p] for p in ids], selection_share(ref.selected, weights), rtol=1e-12)
    np.testing.assert_array_equal([core[p] for p in ids], core_portfolio(ref.selected, 0.6))
    regret = min_max_regret(pw, ref.selected, ref.objective, inv, budgets, scenario_class=cls)
    np.testing.assert_array_equal([best[p] for p in ids], regret.best_selected)
    rows = _rows(con, run_id, "SELECT max_regret, mean_regret, scenarios_optimal, chosen FROM portfolio_regret "
                              "WHERE run_id = ? ORDER BY candidate")
    assert len(rows) == len(regret.portfolios)
    np.testing.assert_allclose([np.inf if r[0] is None else r[0] for r in rows], regret.max_regret, rtol=1e-9,
                               atol=1e-9)
    mean = np.where(regret.feasible, regret.regret, np.nan).mean(axis=1)
    np.testing.assert_allclose([np.nan if r[1] is None else r[1] for r in rows], mean, rtol=1e-9, atol=1e-9)
    assert [r[2] for r in rows] == regret.optimal_in.tolist()
    assert [r[3] for r in rows] == (np.arange(len(rows)) == regret.best).tolist()


def test_streamed_selections_are_optimal_within_the_gap_and_feasible(runs):
    """Brute force over all 2^14 portfolios (groups, mandatory group, requires, two then-current budgets)."""
    con, run_id = runs["streamed"]
    ids = [r[0] for r in con.execute("SELECT project_id FROM projects ORDER BY project_key").fetchall()]
    X = np.array(list(itertools.product([False, True], repeat=P)), dtype=bool)
    ok = np.ones(len(X), dtype=bool)
    for g, mandatory in (("g1", False), ("g2", True), ("g3", False)):
        n = X[:, [j for j in range(P) if GROUP[j] == g]].sum(axis=1)
        ok &= (n == 1) if mandatory else (n <= 1)
    for d, p in REQUIRES.items():
        ok &= ~X[:, d] | X[:, p]
    scen = _rows(con, run_id, "SELECT scenario_id, inflation FROM scenarios WHERE run_id = ? ORDER BY 1")
    pw = {}
    for sid, pid, v in _rows(con, run_id, "SELECT scenario_id, project_id, present_worth FROM results WHERE run_id = ?"):
        pw.setdefault(sid, np.zeros(P))[ids.index(pid)] = v
    flows = con.execute("SELECT project_id, period, amount FROM cash_flows WHERE kind = 'investment'").fetchall()
    ports = {r[0]: r[1:] for r in _rows(con, run_id, "SELECT scenario_id, objective, mip_gap, lp_bound "
                                                     "FROM portfolios WHERE run_id = ?")}
    chosen = {}
    for sid, pid in _rows(con, run_id, TABLES["selections"]):
        chosen.setdefault(sid, np.zeros(P, dtype=bool))[ids.index(pid)] = True
    for sid, f in scen:
        out = np.zeros((2, P))
        for pid, t, amount in flows:
            out[t, ids.index(pid)] = -amount * (1 + f) ** t
        fits = ok & np.all(X.astype(float) @ out.T <= np.array([260.0, 70.0]) + 1e-7, axis=1)
        best = np.max(np.where(fits, X.astype(float) @ pw[sid], -np.inf))
        objective, gap, bound = ports[sid]
        x = chosen.get(sid, np.zeros(P, dtype=bool))
        assert fits[int(np.flatnonzero((X == x).all(axis=1))[0])]          # the stored selection is feasible
        assert objective == pytest.approx(pw[sid][x].sum(), rel=1e-12)
        assert best - GAP * abs(objective) - 1e-9 <= objective <= best + 1e-9
        assert 0.0 <= gap <= GAP and bound >= best - 1e-9


def test_an_interrupted_rationing_resumes_to_the_same_rows(runs, tmp_path, monkeypatch):
    """Interrupted after two committed blocks, the resumed run solves the rest and stores what the
    uninterrupted streamed run stored."""
    calls = []
    real = stage._store_block

    def store_then_stop(*args, **kw):
        if len(calls) == 2:
            raise KeyboardInterrupt("test: stop during rationing")
        calls.append(args[2])
        return real(*args, **kw)

    monkeypatch.setattr(stage, "_store_block", store_then_stop)
    with pytest.raises(KeyboardInterrupt):
        _screen(tmp_path, monkeypatch, P * 8)
    con = duckdb.connect(str(tmp_path / "plan.duckdb"))
    run_id, status = con.execute("SELECT run_id, status FROM runs").fetchall()[0]
    assert status == "interrupted"
    assert con.execute("SELECT count(*) FROM run_ration_blocks WHERE run_id = ?", [run_id]).fetchall()[0][0] == 2
    con.close()
    monkeypatch.setattr(stage, "_store_block", real)
    assert screen_portfolio(tmp_path / "plan.duckdb", resume=run_id) == run_id
    con = duckdb.connect(str(tmp_path / "plan.duckdb"), read_only=True)
    try:
        for sql in TABLES.values():
            assert _rows(con, run_id, sql) == _rows(*runs["streamed"], sql)
    finally:
        con.close()


def test_progress_of_the_rationing_stage_shows_time_left(tmp_path, monkeypatch, capsys):
    """Off a terminal the stage prints plain progress lines with the time left (run/progress.py)."""
    monkeypatch.setattr(rationing, "BLOCK_SIZE", 4)
    monkeypatch.setattr(stage, "RATION_CELL_LIMIT", P * 8)
    (tmp_path / "grid.toml").write_text(GRID)
    db = load_csv(tmp_path, PROJECTS, FLOWS)
    capsys.readouterr()
    screen_portfolio(db, grid=tmp_path / "grid.toml", progress=True)
    err = capsys.readouterr().err
    assert ("capital rationing: 14 projects x 30 scenarios in 4 block(s) of up to 8 scenarios read from the "
            "worth files (4 to solve;") in err
    assert "capital rationing: 30/30 scenarios, " in err and " s left" in err
    # the summary's two passes over the 4 blocks (selections, then worths for the regret)
    assert "capital rationing summary: 8/8 blocks, " in err


def test_a_portfolio_whose_rationing_cannot_fit_is_refused_before_the_run_starts(tmp_path, monkeypatch):
    """The estimate is compared with the memory available before anything of the run is written."""
    from ratescape.errors import RunError
    (tmp_path / "grid.toml").write_text(GRID)
    db = load_csv(tmp_path, PROJECTS, FLOWS)
    monkeypatch.setattr(stage, "available_memory", lambda: 1_000_000)
    need = stage.rationing_memory(P, 30, 30, periods=2)
    with pytest.raises(RunError) as err:
        screen_portfolio(db, grid=tmp_path / "grid.toml")
    assert str(err.value) == (
        f"capital rationing of 14 projects x 30 scenarios needs about {need / 1e9:.1f} GB of memory (blocks of 30 "
        "scenarios read, 30 solved at a time), and 0.0 GB is available. Fix: free memory or use a machine "
        "with more, or screen without --budget (rationing is then not run)")
    con = duckdb.connect(str(db), read_only=True)
    try:
        assert con.execute("SELECT count(*) FROM runs").fetchall() == [(0,)]
    finally:
        con.close()


def test_a_resume_whose_blocks_differ_is_refused(tmp_path, monkeypatch):
    """Stored blocks that do not match the blocks of the resuming code are never mixed with new ones."""
    from ratescape.errors import RunError
    real = stage._store_block
    calls = []

    def store_then_stop(*args, **kw):
        if calls:
            raise KeyboardInterrupt("test: stop during rationing")
        calls.append(1)
        return real(*args, **kw)

    monkeypatch.setattr(stage, "_store_block", store_then_stop)
    with pytest.raises(KeyboardInterrupt):
        _screen(tmp_path, monkeypatch, P * 8)
    monkeypatch.setattr(stage, "_store_block", real)
    monkeypatch.setattr(stage, "RATION_CELL_LIMIT", P * 16)                   # blocks of 16: another split
    con = duckdb.connect(str(tmp_path / "plan.duckdb"))
    run_id = con.execute("SELECT run_id FROM runs").fetchall()[0][0]
    con.close()
    with pytest.raises(RunError) as err:
        screen_portfolio(tmp_path / "plan.duckdb", resume=run_id)
    assert str(err.value) == (f"run {run_id} stored capital rationing in blocks of scenarios other than this version "
                              "of ratescape uses, so it cannot be resumed. Fix: start a new run with `ratescape screen`")
