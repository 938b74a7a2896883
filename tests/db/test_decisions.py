"""Decision stage of a run, checked against independent computations.

Sources: numpy-financial (npv, irr) as the reference library; brute-force enumeration of every
portfolio for the capital-rationing optimum (common practice for small 0-1 programs).
"""
import itertools

import duckdb
import numpy as np
import numpy_financial as npf
import pytest

from helpers import load_csv   # tests/ is on sys.path (conftest)
from ratescape import screen_portfolio

PROJECTS = """project_id,name,group,requires,mandatory,first_cost,annual_benefit,benefit_basis,benefit_escalation,annual_cost,cost_basis,life
A,Pump retrofit,,,,100,30,real,0.02,,,6
B,Fixed-price supply,,,,120,34,nominal,0,,,6
C,Depot buy,depot,,,300,70,real,0,,,8
D,Depot lease,depot,,,0.01,70,real,0,60,nominal,8
E,Fibre backbone,,,,80,15,real,0,,,10
F,SCADA upgrade,,E,,60,40,real,0,,,5
G,Marginal kiosk,,,,50,12,real,0,,,5
H,Losing idea,,,,90,5,real,0,,,5
"""
FLOWS = "project_id,period,amount,basis,escalation,kind\n"
GRID = """
[grid]
discount_basis = "nominal"
discount_rates = { start = 0.02, stop = 0.16, count = 8 }
inflation = { start = 0.0, stop = 0.08, count = 5 }
base = { discount_rate = 0.08, inflation = 0.04 }
[budget]
periods = { "0" = 300 }
[weights]
inflation = { distribution = "normal", mean = 0.03, sd = 0.02 }
[decisions]
top_k = 3
core_share = 0.5
"""


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    d = tmp_path_factory.mktemp("dec")
    (d / "grid.toml").write_text(GRID)
    db = load_csv(d, PROJECTS)
    run_id = screen_portfolio(db, grid=d / "grid.toml")
    con = duckdb.connect(str(db), read_only=True)
    yield con, run_id
    con.close()


def streams(con, inflation):
    """Then-current cash flows per project at an inflation rate (real lines grow, nominal fixed)."""
    out = {}
    for pid, t, a, basis, e in con.execute("SELECT project_id, period, amount, basis, escalation FROM cash_flows").fetchall():
        s = out.setdefault(pid, np.zeros(11))
        s[t] += a * ((1 + inflation) * (1 + e)) ** t if basis == "real" else a
    return out


def test_group_decisions_match_the_best_present_worth(run):
    con, run_id = run
    rows = con.execute("""SELECT g.scenario_id, g.preferred, g.margin, sc.discount_rate, sc.inflation
                          FROM group_decisions g JOIN scenarios sc USING (run_id, scenario_id)
                          WHERE run_id = ?""", [run_id]).fetchall()
    assert len(rows) == 40
    for sid, preferred, margin, i, f in rows:
        s = streams(con, f)
        worth = {"C": npf.npv(i, s["C"]), "D": npf.npv(i, s["D"]), "do nothing": 0.0}
        ordered = sorted(worth.items(), key=lambda kv: -kv[1])
        assert preferred == ordered[0][0]
        assert margin == pytest.approx(ordered[0][1] - ordered[1][1], rel=1e-9, abs=1e-9)


def test_frontier_points_are_indifference_points(run):
    con, run_id = run
    pts = con.execute("SELECT alternative_a, alternative_b, x_axis, x, y_axis, y FROM frontiers WHERE run_id = ?",
                      [run_id]).fetchall()
    assert len(pts) >= 5
    for a, b, x_axis, x, y_axis, y in pts:
        assert (x_axis, y_axis) == ("discount_rate", "inflation")
        s = streams(con, y)
        wa = npf.npv(x, s[a]) if a != "do nothing" else 0.0
        wb = npf.npv(x, s[b]) if b != "do nothing" else 0.0
        scale = max(abs(wa), abs(wb), 1.0)   # do-nothing is exactly 0: 1 currency unit floor
        assert abs(wa - wb) <= 1e-9 * scale, (a, b, x, y, wa, wb)


def test_rationing_is_optimal_by_brute_force_and_respects_constraints(run):
    con, run_id = run
    ids = [r[0] for r in con.execute("SELECT project_id FROM projects ORDER BY project_key").fetchall()]
    scen = con.execute("SELECT scenario_id, discount_rate, inflation FROM scenarios WHERE run_id = ? ORDER BY 1",
                       [run_id]).fetchall()
    port = {r[0]: r[1:] for r in con.execute(
        "SELECT scenario_id, objective, lp_bound, greedy_objective FROM portfolios WHERE run_id = ?", [run_id]).fetchall()}
    sel = {}
    for sid, pid in con.execute("SELECT scenario_id, project_id FROM selections WHERE run_id = ?", [run_id]).fetchall():
        sel.setdefault(sid, set()).add(pid)
    for sid, i, f in scen[::3]:
        s = streams(con, f)
        pw = {p: npf.npv(i, s[p]) for p in ids}
        outlay = {p: max(-s[p][0], 0.0) for p in ids}
        best = 0.0
        for mask in itertools.product([0, 1], repeat=len(ids)):
            chosen = {p for p, m in zip(ids, mask) if m}
            if ("C" in chosen and "D" in chosen) or ("F" in chosen and "E" not in chosen):
                continue
            if sum(outlay[p] for p in chosen) > 300 + 1e-9:
                continue
            best = max(best, sum(pw[p] for p in chosen))
        objective, lp_bound, greedy = port[sid]
        assert objective == pytest.approx(best, rel=1e-3)          # solver tolerance 0.1 % (documented)
        assert lp_bound >= objective - 1e-9 and greedy <= objective + 1e-9
        chosen = sel.get(sid, set())
        assert sum(pw[p] for p in chosen) == pytest.approx(objective, rel=1e-9)
        assert sum(outlay[p] for p in chosen) <= 300 + 1e-6
        assert not {"C", "D"} <= chosen and ("F" not in chosen or "E" in chosen)


def test_rank_stability_and_kendall_tau(run):
    con, run_id = run
    base = con.execute("SELECT scenario_id FROM scenarios WHERE run_id = ? AND is_base", [run_id]).fetchone()[0]
    tau = dict(con.execute("SELECT scenario_id, kendall_tau FROM scenario_ranks WHERE run_id = ?", [run_id]).fetchall())
    assert tau[base] == pytest.approx(1.0)
    assert all(-1 <= t <= 1 for t in tau.values())
    rows = con.execute("SELECT rank_min, rank_median, rank_max, top_k_share FROM project_summary WHERE run_id = ?", [run_id]).fetchall()
    for lo, med, hi, top in rows:
        assert 1 <= lo <= med <= hi <= 8 and 0 <= top <= 1


def test_weighted_scenarios(run):
    con, run_id = run
    w = con.execute("SELECT sum(weight), min(weight) FROM scenarios WHERE run_id = ?", [run_id]).fetchone()
    assert w[0] == pytest.approx(1.0) and w[1] > 0
    check = con.execute("""SELECT s.project_id, s.accept_probability, s.pw_expected,
                                  sum(sc.weight * r.accepted::INT), sum(sc.weight * r.present_worth)
                           FROM project_summary s JOIN results r USING (run_id, project_id)
                           JOIN scenarios sc USING (run_id, scenario_id)
                           WHERE s.run_id = ? GROUP BY ALL""", [run_id]).fetchall()
    for _, p, e, p2, e2 in check:
        assert p == pytest.approx(p2) and e == pytest.approx(e2)


def test_switching_value_of_the_discount_rate_is_the_irr(run):
    con, run_id = run
    v = con.execute("SELECT switching_value FROM sensitivity WHERE run_id = ? AND project_id = 'A' AND input = 'discount_rate'",
                    [run_id]).fetchone()[0]
    # base inflation 4 %: then-current stream of A, IRR by numpy-financial
    assert v == pytest.approx(npf.irr(streams(con, 0.04)["A"]), abs=1e-9)


def test_frontier_on_the_discount_rate_by_cost_multiplier_plane(tmp_path):
    """A decision map against an extra axis: buy (first cost x m) versus lease; independent check with
    numpy-financial: buy - lease = -(300 - 0.01) m + 60 (P/A, i, 8) (the lease's token first cost of 0.01
    scales with m too; the real benefits are the same)."""
    db = load_csv(tmp_path, PROJECTS)
    grid = tmp_path / "g.toml"
    grid.write_text("""
[grid]
discount_rates = { start = 0.02, stop = 0.16, count = 8 }
inflation = { values = [0.0, 0.04] }
cost_multiplier = { values = [0.8, 1.0, 1.2, 1.4] }
base = { discount_rate = 0.08, inflation = 0.04, cost_multiplier = 1.0 }
""")
    run_id = screen_portfolio(db, grid=grid)
    con = duckdb.connect(str(db), read_only=True)
    pts = con.execute("""SELECT alternative_a, alternative_b, x, y FROM frontiers
                         WHERE run_id = ? AND group_name = 'depot' AND y_axis = 'cost_multiplier'""",
                      [run_id]).fetchall()
    con.close()
    assert len(pts) >= 3
    for a, b, i, m in pts:
        assert {a, b} == {"C", "D"}
        buy_minus_lease = -(300 - 0.01) * m + 60 * npf.pv(i, 8, -1.0)   # P/A(i, 8) from numpy-financial's pv
        assert abs(buy_minus_lease) <= 1e-9 * 300 * m, (i, m, buy_minus_lease)
