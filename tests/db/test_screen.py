"""Screening runs: stored values, run metadata, transactional chunks and resumption."""
import duckdb
import numpy as np
import numpy_financial as npf
import pytest

from helpers import fetch, load_csv   # tests/ is on sys.path (conftest)
from ratescape import screen_portfolio
from ratescape.run import evaluation as evaluation_module
from ratescape.run import plan as plan_module
from ratescape.run import ranks as ranks_module
from ratescape.run import read as read_module
from ratescape.run import write as write_module

PROJECTS = ["project_id,name,first_cost,annual_benefit,benefit_basis,benefit_escalation,annual_cost,cost_basis,salvage,life"]
rng = np.random.default_rng(7)
for k in range(23):
    basis = "nominal" if k % 3 == 0 else "real"
    PROJECTS.append(f"P{k:02d},Project {k},{rng.uniform(50, 150):.2f},{rng.uniform(5, 40):.2f},{basis},"
                    f"{0.02 if k % 4 == 1 else 0},{rng.uniform(0, 5):.2f},real,{rng.uniform(0, 20):.2f},{3 + k % 9}")
FLOWS = "project_id,period,amount,basis,escalation,kind\nX,0,-100,real,0,\nX,1,230,real,0,\nX,2,-132,real,0,\n"


@pytest.fixture
def db(tmp_path):
    return load_csv(tmp_path, "\n".join(PROJECTS + ["X,Two roots,,,,,,,,"]) + "\n", FLOWS)


def independent_pw(path, run_id):
    """PW recomputed per project and scenario with plain loops and numpy-financial's npv."""
    flows = fetch(path, "SELECT project_id, period, amount, basis, escalation FROM cash_flows")
    scen = fetch(path, "SELECT scenario_id, discount_rate, inflation FROM scenarios WHERE run_id = ? ORDER BY 1", [run_id])
    out = {}
    for sid, i, f in scen:
        streams = {}
        for pid, t, a, basis, e in flows:
            s = streams.setdefault(pid, np.zeros(12))
            # then-current money: real lines grow with (1+f)(1+e) a year, nominal lines with their
            # contractual escalation (1+e) a year only (issue 14, defect 3)
            s[t] += a * ((1 + f) * (1 + e)) ** t if basis == "real" else a * (1 + e) ** t
        for pid, s in streams.items():
            out[(pid, sid)] = npf.npv(i, s)   # reference library, values[0] at t = 0
    return out


def test_results_match_an_independent_computation(db):
    run_id = screen_portfolio(db, discount_rates="0:0.2:9", inflation="0:0.1:5")
    rows = fetch(db, "SELECT project_id, scenario_id, present_worth, accepted FROM results WHERE run_id = ?", [run_id])
    assert len(rows) == 24 * 45
    want = independent_pw(db, run_id)
    for pid, sid, pw, acc in rows:
        assert pw == pytest.approx(want[(pid, sid)], rel=1e-10, abs=1e-8)
        assert acc == (pw >= 0)


def test_run_metadata_and_summary(db):
    run_id = screen_portfolio(db, discount_rates="0:0.2:9", inflation="0:0.1:5", chunk_size=5)
    (status, started, finished, version, ihash, spec, chunks, done, pcount, scount) = fetch(
        db, "SELECT status, started_at, finished_at, tool_version, inputs_hash, grid_spec, chunk_count, chunks_done, "
            "project_count, scenario_count FROM runs WHERE run_id = ?", [run_id])[0]
    assert status == "done" and finished >= started and version == "0.1.0" and len(ihash) == 64
    assert chunks == done == 5 and pcount == 24 and scount == 45
    assert '"discount_basis": "nominal"' in spec
    # summary agrees with the results table
    check = fetch(db, """SELECT s.project_id, s.accept_share, s.pw_min, s.pw_max, a.share, a.mn, a.mx
                         FROM project_summary s JOIN (SELECT project_id, avg(accepted::INT) share, min(present_worth) mn,
                                                              max(present_worth) mx FROM results WHERE run_id = $1 GROUP BY 1) a
                         USING (project_id) WHERE s.run_id = $1""", [run_id])
    assert len(check) == 24
    for _, share, mn, mx, share2, mn2, mx2 in check:
        # each of share, min and max must agree (the former `... and mn == mx2 or (...)` passed on min/max alone)
        assert (share, mn, mx) == pytest.approx((share2, mn2, mx2))
    ranks = fetch(db, "SELECT min(rank_min), max(rank_max) FROM project_summary WHERE run_id = ?", [run_id])[0]
    assert ranks == (1, 24)


def test_irr_results_flag_several_roots(db):
    run_id = screen_portfolio(db, discount_rates="0.1", inflation="0:0.1:3")
    rows = fetch(db, "SELECT inflation, status, root_count, irr_real FROM irr_results WHERE run_id = ? AND project_id = 'X' ORDER BY 1", [run_id])
    assert [r[1] for r in rows] == ["multiple"] * 3 and all(r[3] is None for r in rows)
    roots = fetch(db, "SELECT inflation, irr_real, irr_nominal FROM irr_roots WHERE run_id = ? AND project_id = 'X' ORDER BY 1, 2", [run_id])
    # -100, 230, -132 has roots 10 % and 20 % (x^2 roots of 100x^2 - 230x + 132 = 0; common practice);
    # real-basis flows: the real IRR does not depend on inflation, the nominal one follows Fisher.
    for f, r, i in roots:
        assert min(abs(r - 0.1), abs(r - 0.2)) < 1e-9
        assert i == pytest.approx((1 + r) * (1 + f) - 1, abs=1e-9)
    # the conventional projects have a unique IRR at which PW = 0 (checked against numpy-financial)
    p0 = fetch(db, "SELECT irr_nominal FROM irr_results WHERE run_id = ? AND project_id = 'P01' AND inflation = 0", [run_id])[0][0]
    flows = fetch(db, "SELECT period, sum(amount * CASE WHEN basis = 'real' THEN power(1 + escalation, period) ELSE 1 END) "
                      "FROM cash_flows WHERE project_id = 'P01' GROUP BY 1 ORDER BY 1")
    stream = np.array([a for _, a in flows])  # then-current money at zero inflation (escalation applies)
    assert p0 == pytest.approx(npf.irr(stream), abs=1e-9)


def _table_dump(path, run_id):
    # scenario_key numbers scenarios across all runs of a database: it differs between two runs
    return {t: sorted(fetch(path, f"SELECT * EXCLUDE (run_id{', scenario_key' if t == 'scenarios' else ''}) "
                                  f"FROM {t} WHERE run_id = ?", [run_id]))
            for t in ("results", "project_summary", "irr_results", "irr_roots", "scenarios")}


def test_resumed_run_equals_an_uninterrupted_run(db):
    full = screen_portfolio(db, discount_rates="0:0.2:9", inflation="0:0.1:5", chunk_size=4)
    part = screen_portfolio(db, discount_rates="0:0.2:9", inflation="0:0.1:5", chunk_size=4, stop_after_chunks=2)
    assert fetch(db, "SELECT status, chunks_done FROM runs WHERE run_id = ?", [part])[0] == ("interrupted", 2)
    assert fetch(db, "SELECT count(*) FROM results WHERE run_id = ?", [part])[0][0] == 8 * 45
    again = screen_portfolio(db, resume=part)
    assert again == part
    assert fetch(db, "SELECT status, chunks_done FROM runs WHERE run_id = ?", [part])[0] == ("done", 6)
    assert _table_dump(db, part) == _table_dump(db, full)


def _failing_on(real, statement, nth):
    """Wrap a stage writer so that its ``nth`` call fails inside its transaction at ``statement``."""
    calls = {"n": 0}

    def failing(con, plan, *args, **kwargs):
        calls["n"] += 1
        if calls["n"] != nth:
            return real(con, plan, *args, **kwargs)

        class FailingConnection:
            def __getattr__(self, name):
                return getattr(con, name)

            def execute(self, sql, *a, **k):
                if sql.startswith(statement):
                    raise OSError("disk full (simulated)")
                return con.execute(sql, *a, **k)
        return real(FailingConnection(), plan, *args, **kwargs)
    return failing


def test_failure_in_the_middle_of_a_result_row_write_leaves_no_partial_rows(db, monkeypatch):
    """Stage 2 (result rows) fails on the third chunk after its rows were inserted: the rows roll
    back with the chunk's done mark; a resume stores them once, and no summary is duplicated."""
    monkeypatch.setattr(write_module, "write_result_rows",
                        _failing_on(write_module.write_result_rows, "INSERT INTO run_chunks", 3))
    with pytest.raises(Exception, match="disk full"):
        screen_portfolio(db, discount_rates="0:0.2:9", inflation="0:0.1:5", chunk_size=4)
    monkeypatch.undo()
    run_id, status, done = fetch(db, "SELECT run_id, status, chunks_done FROM runs")[0]
    assert status == "failed" and done == 2
    assert fetch(db, "SELECT count(*) FROM results WHERE run_id = ?", [run_id])[0][0] == 8 * 45
    assert fetch(db, "SELECT count(*) FROM result_rows")[0][0] == 8 * 45
    summarised = fetch(db, "SELECT count(*) FROM run_chunk_summaries WHERE run_id = ?", [run_id])[0][0]
    assert fetch(db, "SELECT count(*) FROM project_summary WHERE run_id = ?", [run_id])[0][0] == 4 * summarised
    screen_portfolio(db, resume=run_id)
    assert fetch(db, "SELECT count(*) FROM results WHERE run_id = ?", [run_id])[0][0] == 24 * 45
    assert fetch(db, "SELECT count(*) FROM project_summary WHERE run_id = ?", [run_id])[0][0] == 24
    assert fetch(db, "SELECT count(*), count(DISTINCT (scenario_key, project_key)) FROM result_rows")[0] == (
        24 * 45, 24 * 45)


def test_failure_in_the_middle_of_a_summaries_write_leaves_no_partial_rows(db, monkeypatch):
    """Stage 1 (per-project tables) fails on the third chunk after some of its tables were written:
    nothing of that chunk stays; the resumed run equals an uninterrupted one."""
    full = screen_portfolio(db, discount_rates="0:0.2:9", inflation="0:0.1:5", chunk_size=4)
    monkeypatch.setattr(write_module, "write_summaries",
                        _failing_on(write_module.write_summaries, "INSERT INTO run_chunk_summaries", 3))
    with pytest.raises(Exception, match="disk full"):
        screen_portfolio(db, discount_rates="0:0.2:9", inflation="0:0.1:5", chunk_size=4)
    monkeypatch.undo()
    run_id, status, done = fetch(db, "SELECT run_id, status, chunks_done FROM runs WHERE run_id <> ?", [full])[0]
    assert status == "failed" and done <= 2
    assert fetch(db, "SELECT count(*) FROM project_summary WHERE run_id = ?", [run_id])[0][0] == 8
    assert fetch(db, "SELECT count(*) FROM sensitivity WHERE run_id = ?", [run_id])[0][0] == \
        8 * fetch(db, "SELECT count(*) FROM sensitivity WHERE run_id = ?", [full])[0][0] // 24
    assert screen_portfolio(db, resume=run_id) == run_id
    assert _table_dump(db, run_id) == _table_dump(db, full)


def test_resume_stores_the_rows_of_summarised_chunks(db):
    """A run stopped between the two stages of its chunks (summaries committed, result rows not)
    stores those rows on resume from its worth files, rebuilt when they are gone (identity)."""
    import shutil
    from pathlib import Path
    args = dict(discount_rates="0:0.2:9", inflation="0:0.1:5", chunk_size=4)
    full = screen_portfolio(db, **args)
    part = screen_portfolio(db, stop_after_chunks=4, **args)
    from ratescape.store.database import connect_write
    con = connect_write(db)
    try:          # undo the rows of chunks 1 and 3, as if the process had died before storing them
        keys = "SELECT scenario_key FROM scenarios WHERE run_id = ?"
        for chunk in (1, 3):
            for table in ("result_rows_pw", "result_rows_after_tax", "result_rows_full"):
                con.execute(f"DELETE FROM {table} WHERE scenario_key IN ({keys}) AND project_key BETWEEN ? AND ?",
                            [part, 4 * chunk, 4 * chunk + 3])
            con.execute("DELETE FROM run_chunks WHERE run_id = ? AND chunk_index = ?", [part, chunk])
        con.execute("UPDATE runs SET chunks_done = 2 WHERE run_id = ?", [part])
    finally:
        con.close()
    (Path(f"{db}.scratch") / part / "pw-0000003.f8").unlink()        # one worth file lost as well
    assert fetch(db, "SELECT count(*) FROM results WHERE run_id = ?", [part])[0][0] == 8 * 45
    assert screen_portfolio(db, resume=part) == part
    assert fetch(db, "SELECT status, chunks_done FROM runs WHERE run_id = ?", [part])[0] == ("done", 6)
    assert _table_dump(db, part) == _table_dump(db, full)
    shutil.rmtree(Path(f"{db}.scratch"), ignore_errors=True)


def test_irr_fisher_shortcut_equals_a_search_at_every_inflation_level(db):
    """Real-only projects: roots searched once and mapped by (1+i) = (1+f)(1+r) (exact Fisher relation)
    must equal a direct search of the then-current stream at each level (identity)."""
    from ratescape.evaluate.irr import irr_roots
    from ratescape.evaluate.kernel import then_current_streams
    from ratescape.settings import make_run_settings
    from ratescape.store.database import connect_write
    con = connect_write(db)
    try:
        spec = make_run_settings(discount_rates="0.1", inflation="0:0.1:6")
        plan = plan_module.make_plan(con, "probe", spec, None)
        A_by_role, _, _ = read_module.chunk_amounts(con, plan, 0, plan.project_count)
    finally:
        con.close()
    A = A_by_role.sum(axis=0)
    got = evaluation_module.irr_over_inflation(plan, A)
    streams = then_current_streams(A, plan.classes, plan.exponents, plan.inflation_levels, plan.irr_multipliers)
    F, P, T = streams.shape
    want = irr_roots(streams.reshape(F * P, T), low=-0.99, high=10.0)
    np.testing.assert_array_equal(got.count, want.count)
    k = min(got.roots.shape[1], np.asarray(want.roots).shape[1])
    np.testing.assert_allclose(got.roots[:, :k], np.asarray(want.roots)[:, :k], rtol=1e-9, atol=1e-10)
    assert (got.labels == np.asarray(want.labels)).all()


def test_rank_statistics_match_scipy_rankdata(db, monkeypatch):
    """Competition ranks (1 = largest PW, ties share the smallest rank) recomputed with
    scipy.stats.rankdata(method="min") from the stored results; small blocks force several passes."""
    from scipy.stats import rankdata
    monkeypatch.setattr(ranks_module, "RANK_BLOCK_CELLS", 24 * 7)
    run_id = screen_portfolio(db, discount_rates="0:0.2:9", inflation="0:0.1:5")
    rows = fetch(db, "SELECT project_id, scenario_id, present_worth, profitability_index FROM results WHERE run_id = ?", [run_id])
    ids = sorted({r[0] for r in rows})
    pw = np.zeros((len(ids), 45))
    pi = np.full((len(ids), 45), np.nan)
    for pid, sid, v, p in rows:
        pw[ids.index(pid), sid] = v
        pi[ids.index(pid), sid] = np.nan if p is None else p
    ranks = rankdata(-pw, method="min", axis=0)
    has_pi = np.isfinite(pi).all(axis=1)
    pi_ranks = rankdata(-pi[has_pi], method="min", axis=0)
    base = fetch(db, "SELECT scenario_id FROM scenarios WHERE run_id = ? AND is_base", [run_id])[0][0]
    summary = {r[0]: r[1:] for r in fetch(db, """SELECT project_id, rank_min, rank_median, rank_max, rank_base,
                                                 pi_rank_min, pi_rank_max FROM project_summary WHERE run_id = ?""", [run_id])}
    pi_row = dict(zip(np.array(ids)[has_pi], pi_ranks))
    for n, pid in enumerate(ids):
        lo, med, hi, rb, plo, phi = summary[pid]
        assert (lo, hi, rb) == (ranks[n].min(), ranks[n].max(), ranks[n, base])
        assert med == pytest.approx(np.median(ranks[n]))
        if pid in pi_row:
            assert (plo, phi) == (pi_row[pid].min(), pi_row[pid].max())
        else:
            assert plo is None and phi is None


def test_keep_summary_and_thinned_store_fewer_rows_with_the_same_summaries(db):
    """--keep: summaries and ranks of a run without stored rows equal those of a full run (identity)."""
    args = dict(discount_rates="0:0.2:9", inflation="0:0.1:5", chunk_size=5)
    full = screen_portfolio(db, **args)
    summary = screen_portfolio(db, keep="summary", **args)
    thinned = screen_portfolio(db, keep="thinned:2", **args)
    assert fetch(db, "SELECT count(*) FROM results WHERE run_id = ?", [summary])[0][0] == 0
    kept = fetch(db, """SELECT DISTINCT sc.discount_rate, sc.inflation FROM results r
                        JOIN scenarios sc USING (run_id, scenario_id) WHERE run_id = ?""", [thinned])
    # every 2nd of 9 rates (5) x every 2nd of 5 inflation levels (3), plus the base (0.1, 0.05) on the grid
    assert len(kept) == 5 * 3
    cols = "project_id, accept_share, pw_min, pw_max, rank_min, rank_median, rank_max, rank_base, pi_rank_min"
    want = sorted(fetch(db, f"SELECT {cols} FROM project_summary WHERE run_id = ?", [full]))
    for run_id in (summary, thinned):
        assert sorted(fetch(db, f"SELECT {cols} FROM project_summary WHERE run_id = ?", [run_id])) == want


def test_worth_files_are_removed_when_done_and_rebuilt_when_missing_on_resume(db):
    """The rank pass's per-chunk worth files live beside the database only while a run is unfinished;
    a resumed run whose files were deleted rebuilds them and ends with the same ranks (identity)."""
    import shutil
    from pathlib import Path
    args = dict(discount_rates="0:0.2:9", inflation="0:0.1:5", chunk_size=4)
    full = screen_portfolio(db, **args)
    scratch_root = Path(f"{db}.scratch")
    assert not (scratch_root / full).exists()
    part = screen_portfolio(db, stop_after_chunks=3, **args)
    names = {p.name for p in (scratch_root / part).iterdir()}
    assert {"pw-0000000.f8", "pw-0000001.f8", "pw-0000002.f8"} <= names
    assert all(f"pi-{c:07d}.f8" in names or f"pi-investment-{c:07d}.f8" in names for c in range(3))
    shutil.rmtree(scratch_root / part)                     # e.g. a cleaned temporary folder
    assert screen_portfolio(db, resume=part) == part
    assert not (scratch_root / part).exists()
    cols = "project_id, rank_min, rank_median, rank_max, rank_base, pi_rank_min, pi_rank_median, pi_rank_max, top_k_share"
    assert (sorted(fetch(db, f"SELECT {cols} FROM project_summary WHERE run_id = ?", [part]))
            == sorted(fetch(db, f"SELECT {cols} FROM project_summary WHERE run_id = ?", [full])))
    rho = "SELECT scenario_id, spearman_rho, spearman_rho_pi, kendall_tau FROM scenario_ranks WHERE run_id = ? ORDER BY 1"
    assert fetch(db, rho, [part]) == fetch(db, rho, [full])


def _stored_worths(db, run_id, scenarios):
    """The run's stored PW as a (projects in id order, scenarios) matrix, and the base scenario id."""
    rows = fetch(db, "SELECT project_id, scenario_id, present_worth FROM results WHERE run_id = ?", [run_id])
    ids = sorted({r[0] for r in rows})
    pw = np.zeros((len(ids), scenarios))
    for pid, sid, v in rows:
        pw[ids.index(pid), sid] = v
    return pw, fetch(db, "SELECT scenario_id FROM scenarios WHERE run_id = ? AND is_base", [run_id])[0][0]


def test_scenario_rank_agreement_matches_scipy(db):
    """Spearman's rho and Kendall's tau-b of each scenario's PW ranking against the base scenario's,
    recomputed from the stored rows with scipy.stats.spearmanr / kendalltau (reference library)."""
    from scipy.stats import kendalltau, spearmanr
    run_id = screen_portfolio(db, discount_rates="0:0.2:9", inflation="0:0.1:5")
    pw, base = _stored_worths(db, run_id, 45)
    got = fetch(db, "SELECT scenario_id, spearman_rho, kendall_tau FROM scenario_ranks WHERE run_id = ? ORDER BY 1", [run_id])
    for sid, rho, tau in got:
        assert rho == pytest.approx(spearmanr(pw[:, sid], pw[:, base]).statistic, abs=1e-12)
        assert tau == pytest.approx(kendalltau(pw[:, base], pw[:, sid]).statistic, abs=1e-12)


def test_kendall_tau_is_left_out_above_its_project_limit(db, monkeypatch):
    """Above KENDALL_MAX_PROJECTS only Spearman's rho is stored (tau would cost a merge sort per scenario)."""
    monkeypatch.setattr(ranks_module, "KENDALL_MAX_PROJECTS", 5)
    run_id = screen_portfolio(db, discount_rates="0:0.2:3", inflation="0:0.1:2")
    rows = fetch(db, "SELECT kendall_tau, kendall_tau_pi, spearman_rho FROM scenario_ranks WHERE run_id = ?", [run_id])
    assert len(rows) == 6 and all(t is None and tp is None and r is not None for t, tp, r in rows)


def test_results_view_derives_annual_worth_and_acceptance(db):
    """annual_worth = PW x (A/P, real rate, horizon in years) and accepted = PW >= 0 (common practice),
    derived in the `results` view from the narrow stored rows."""
    from ratescape.evaluate.kernel import capital_recovery_factor
    run_id = screen_portfolio(db, discount_rates="0:0.2:5", inflation="0:0.1:3")
    rows = fetch(db, """SELECT r.present_worth, r.annual_worth, r.accepted, s.real_rate, ps.horizon
                        FROM results r JOIN scenarios s USING (run_id, scenario_id)
                        JOIN project_summary ps USING (run_id, project_id) WHERE r.run_id = ?""", [run_id])
    assert len(rows) == 24 * 15
    for pw, aw, accepted, real, horizon in rows:
        assert aw == pytest.approx(pw * capital_recovery_factor(real, horizon), rel=1e-14, abs=1e-9)
        assert accepted == (pw >= 0)


def test_default_chunk_follows_available_memory():
    """A quarter of the available memory at BYTES_PER_CELL, clamped to [1e6, DEFAULT_CELLS_PER_CHUNK] cells."""
    cells = plan_module.chunk_cells_for_memory
    assert cells(64 * 2**30) == plan_module.DEFAULT_CELLS_PER_CHUNK
    assert cells(2 * 2**30) == 2 * 2**30 // 4 // plan_module.BYTES_PER_CELL
    assert cells(100 * 2**20) == 1_000_000
    assert 1_000_000 <= cells() <= plan_module.DEFAULT_CELLS_PER_CHUNK


@pytest.mark.parametrize("chunk_size", [None, 1])     # one chunk of all three; a chunk per project
def test_stored_pi_is_derived_exactly_where_the_investment_is_fixed(tmp_path, chunk_size):
    """PI = 1 + PW / PW(investment) (Park, from memory). Where the investment's PW is the same in
    every scenario (one outlay at time 0) result_rows leaves PI NULL and the results view derives
    it; where it varies (an outlay also at period 1) the row carries it; without an investment
    there is none. Every value against numpy-financial's npv."""
    db = load_csv(
        tmp_path, "project_id,name\nFIX,Fixed outlay\nSPREAD,Outlay over two periods\nNONE,No investment\n",
        "project_id,period,amount,basis,escalation,kind\n"
        "FIX,0,-100,real,0,investment\nFIX,1,40,real,0,benefit\nFIX,2,40,real,0.02,benefit\nFIX,3,45,nominal,0,benefit\n"
        "SPREAD,0,-60,real,0,investment\nSPREAD,1,-50,real,0,investment\nSPREAD,2,70,real,0,benefit\n"
        "SPREAD,3,70,real,0,benefit\nNONE,1,10,real,0,benefit\nNONE,2,-3,real,0,\n")
    run_id = screen_portfolio(db, discount_rates="0:0.2:5", inflation="0:0.1:3", chunk_size=chunk_size)
    fixed = dict(fetch(db, "SELECT project_id, investment_worth FROM project_summary WHERE run_id = ?", [run_id]))
    assert fixed == {"FIX": 100.0, "SPREAD": None, "NONE": None}
    stored = dict(fetch(db, """SELECT ps.project_id, count(x.profitability_index) FROM result_rows x
                               JOIN project_summary ps ON ps.project_key = x.project_key AND ps.run_id = ?
                               WHERE x.scenario_key IN (SELECT scenario_key FROM scenarios WHERE run_id = ?)
                               GROUP BY 1""", [run_id, run_id]))
    assert stored == {"FIX": 0, "SPREAD": 15, "NONE": 0}
    # a chunk with nothing but derived or absent PIs stores PW only (no empty columns)
    where = dict(fetch(db, """SELECT ps.project_id, string_agg(DISTINCT t.name, ',') FROM (
                                  SELECT 'pw' AS name, project_key, scenario_key FROM result_rows_pw
                                  UNION ALL SELECT 'full', project_key, scenario_key FROM result_rows_full) t
                              JOIN project_summary ps ON ps.project_key = t.project_key AND ps.run_id = ?
                              GROUP BY 1""", [run_id]))
    assert where == ({"FIX": "pw", "SPREAD": "full", "NONE": "pw"} if chunk_size == 1 else
                     {"FIX": "full", "SPREAD": "full", "NONE": "full"})
    scen = {sid: (i, f) for sid, i, f in fetch(
        db, "SELECT scenario_id, discount_rate, inflation FROM scenarios WHERE run_id = ?", [run_id])}
    rows = fetch(db, "SELECT project_id, scenario_id, present_worth, profitability_index FROM results WHERE run_id = ?",
                 [run_id])
    assert len(rows) == 3 * 15
    for pid, sid, pw, pi in rows:
        i, f = scen[sid]
        if pid == "NONE":
            assert pi is None
            continue
        outlay = [-100.0] if pid == "FIX" else [-60.0, -50.0 * (1 + f)]      # real money inflates
        want = 1 + pw / -npf.npv(i, outlay)
        assert pi == pytest.approx(want, rel=1e-12)


def test_a_database_from_before_investment_worth_is_migrated_in_place(db):
    """A schema-2 database written before ``investment_worth`` and before the split of the result
    rows (one physical ``result_rows`` table, every row carrying its PI, the old view reading it)
    gains the column, the two tables and the new views on the next write; its runs read the same,
    and a new run is stored beside them."""
    from ratescape.store.database import connect_write
    from ratescape.store.schema import VIEWS
    run_id = screen_portfolio(db, discount_rates="0:0.2:9", inflation="0:0.1:5")
    want = sorted(fetch(db, "SELECT project_id, scenario_id, profitability_index FROM results WHERE run_id = ?",
                        [run_id]))
    con = duckdb.connect(str(db))
    try:       # make it look like the older layout
        con.execute("""CREATE TABLE old_rows AS SELECT x.scenario_key, x.project_key, x.present_worth,
                           coalesce(x.profitability_index, 1 + x.present_worth / ps.investment_worth)
                               AS profitability_index, x.present_worth_before_tax
                       FROM result_rows x JOIN scenarios s USING (scenario_key)
                       JOIN project_summary ps ON ps.project_key = x.project_key AND ps.run_id = s.run_id""")
        con.execute("DROP VIEW results")
        con.execute("DROP VIEW result_rows")
        con.execute("DROP TABLE result_rows_pw")
        con.execute("DROP TABLE result_rows_after_tax")
        con.execute("DROP TABLE result_rows_full")
        con.execute("ALTER TABLE old_rows RENAME TO result_rows")
        con.execute("ALTER TABLE project_summary DROP COLUMN investment_worth")
        con.execute(VIEWS["results"].replace("CREATE OR REPLACE VIEW", "CREATE VIEW").replace(
            "coalesce(x.profitability_index, 1 + x.present_worth / ps.investment_worth)", "x.profitability_index"))
    finally:
        con.close()
    assert sorted(fetch(db, "SELECT project_id, scenario_id, profitability_index FROM results WHERE run_id = ?",
                        [run_id])) == want
    connect_write(db).close()
    assert fetch(db, "SELECT count(*) FROM project_summary WHERE investment_worth IS NOT NULL")[0][0] == 0
    got = sorted(fetch(db, "SELECT project_id, scenario_id, profitability_index FROM results WHERE run_id = ?",
                       [run_id]))
    assert got == want
    assert "investment_worth" in fetch(db, "SELECT sql FROM duckdb_views() WHERE view_name = 'results'")[0][0]
    kinds = dict(fetch(db, "SELECT table_name, table_type FROM information_schema.tables"))
    assert (kinds["result_rows"], kinds["result_rows_pw"], kinds["result_rows_full"]) == ("VIEW", "BASE TABLE",
                                                                                         "BASE TABLE")
    assert fetch(db, "SELECT count(*) FROM result_rows_full")[0][0] == len(want)
    again = screen_portfolio(db, discount_rates="0:0.2:9", inflation="0:0.1:5")
    assert sorted(fetch(db, "SELECT project_id, scenario_id, profitability_index FROM results WHERE run_id = ?",
                        [again])) == want

def test_a_database_from_before_the_after_tax_table_gains_it_on_the_next_write(db):
    """A database whose result_rows view reads two tables (written before result_rows_after_tax)
    gets the table and the three-table view on its next write; its rows read the same."""
    from ratescape.store.database import connect_write
    run_id = screen_portfolio(db, discount_rates="0:0.2:9", inflation="0:0.1:5")
    want = sorted(fetch(db, "SELECT * FROM result_rows"))
    con = duckdb.connect(str(db))
    try:
        con.execute("DROP TABLE result_rows_after_tax")
        con.execute("""CREATE OR REPLACE VIEW result_rows AS
            SELECT scenario_key, project_key, present_worth, CAST(NULL AS DOUBLE) AS profitability_index,
                   CAST(NULL AS DOUBLE) AS present_worth_before_tax FROM result_rows_pw
            UNION ALL SELECT scenario_key, project_key, present_worth, profitability_index,
                   present_worth_before_tax FROM result_rows_full""")
    finally:
        con.close()
    assert sorted(fetch(db, "SELECT * FROM result_rows")) == want
    connect_write(db).close()
    assert "result_rows_after_tax" in fetch(db, "SELECT sql FROM duckdb_views() WHERE view_name = 'result_rows'")[0][0]
    assert sorted(fetch(db, "SELECT * FROM result_rows")) == want
    assert fetch(db, "SELECT count(*) FROM results WHERE run_id = ?", [run_id])[0][0] == len(want)


def test_kendall_limit_is_a_decisions_setting(db, tmp_path):
    """``[decisions] kendall_max_projects`` moves the limit both ways: 0 leaves tau out for this
    portfolio of 24 projects; a limit of 24 keeps it (equal to scipy.stats.kendalltau, reference)."""
    from scipy.stats import kendalltau
    grid = tmp_path / "grid.toml"
    grid.write_text("[decisions]\nkendall_max_projects = 0\n")
    off = screen_portfolio(db, grid=grid, discount_rates="0:0.2:3", inflation="0:0.1:2")
    assert all(t is None for (t,) in fetch(db, "SELECT kendall_tau FROM scenario_ranks WHERE run_id = ?", [off]))
    grid.write_text("[decisions]\nkendall_max_projects = 24\n")
    on = screen_portfolio(db, grid=grid, discount_rates="0:0.2:3", inflation="0:0.1:2")
    pw, base = _stored_worths(db, on, 6)
    for sid, tau in fetch(db, "SELECT scenario_id, kendall_tau FROM scenario_ranks WHERE run_id = ?", [on]):
        assert tau == pytest.approx(kendalltau(pw[:, base], pw[:, sid]).statistic, abs=1e-12)


@pytest.mark.parametrize("setting, message", [
    ("kendall_max_projects = -1", "kendall_max_projects must be a whole number"),
    ("kendall_max_projects = 2.5", "kendall_max_projects must be a whole number"),
    ("kendall_max_projects = inf", "kendall_max_projects must be a whole number"),
    ("top_k = 0", "top_k must be a whole number"),
    ("core_share = 1.5", "core_share must be a share"),
    ("kendal_max = 3", "unknown key 'kendal_max'"),
])
def test_decisions_settings_are_checked(db, tmp_path, setting, message):
    from ratescape.errors import RatescapeError
    grid = tmp_path / "grid.toml"
    grid.write_text(f"[decisions]\n{setting}\n")
    with pytest.raises(RatescapeError, match=message):
        screen_portfolio(db, grid=grid, discount_rates="0:0.2:3", inflation="0:0.1:2")


def test_an_infinite_profitability_index_is_named_in_the_measure_status():
    """A PI too large for a double in any scenario (a vanishing investment) is stored NULL, and the
    project's measure_status names it (issue 17, item 6: never a silent NULL). Common practice: a
    ratio with a zero denominator has no value."""
    from ratescape.run.write import overflow_status
    pi = np.array([[1.5, np.nan, 2.0], [np.inf, np.nan, 3.0]])          # (S, P): project 0 overflows once
    summary = {"pw_base": np.array([1.0, 2.0, 3.0]), "mirr_base": np.array([0.1, np.inf, 0.2]),
               "measure_status": np.array([None, "cost-only", None], dtype=object)}
    status = overflow_status(summary, 3, {"profitability_index": pi})
    assert status.tolist() == ["overflow: profitability_index", "cost-only; overflow: mirr_base", None]
