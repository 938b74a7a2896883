"""Alternatives of unequal lives through the real screen: annual worth, study period, present worth.

Sources
-------
* L. T. Blank, A. J. Tarquin, Engineering Economy, 7th ed., McGraw-Hill, 2012: the "National
  Homebuilders" vendors (from memory): vendor A first cost $15,000, annual M&O $3,500, salvage
  $1,000, life 6 years; vendor B $18,000, $3,100, $2,000, 9 years; MARR 15 % a year. The text's
  answers: PW over the least common multiple (18 years) A = -$45,036, B = -$41,384; AW over one
  life cycle A = -$7,349, B = -$6,753 (from memory): vendor B.
* Every figure is cross-checked here with numpy-financial's npv and pmt, computed independently.
* The study-period figures (T = 6) are this file's own, from the same data with the straight-line
  rule stated in the README (B's terminal value 18,000 - 16,000 x 6/9 = 7,333.33): not the text's.
"""
import duckdb
import numpy as np
import numpy_financial as npf
import pytest

from ratescape import load_portfolio, screen_portfolio
from ratescape.errors import RunError

PROJECTS = """project_id,name,group,mandatory,first_cost,annual_cost,cost_basis,annual_benefit,salvage,life,terminal_value
VA,Vendor A,homes,,15000,3500,real,,1000,6,
VB,Vendor B,homes,,18000,3100,real,,2000,9,
KX,Kit short,kit,,1000,,,300,,5,
KY,Kit long,kit,,1600,,,290,,10,
"""
GRID = """
[grid]
discount_basis = "nominal"
discount_rates = { start = 0.02, stop = 0.20, count = 10 }
inflation = { values = [0.0, 0.03] }
base = { discount_rate = 0.14, inflation = 0.0 }
"""


def flows(first, annual, salvage, life):
    return np.array([-first] + [annual] * (life - 1) + [annual + salvage])


VA, VB = flows(15000, -3500, 1000, 6), flows(18000, -3100, 2000, 9)
KX, KY = flows(1000, 300, 0, 5), flows(1600, 290, 0, 10)


def annual(stream, r):
    return -npf.pmt(r, len(stream) - 1, npf.npv(r, stream))


def screened(tmp_path, grid=GRID, projects=PROJECTS, **flags):
    (tmp_path / "p.csv").write_text(projects)
    (tmp_path / "g.toml").write_text(grid)
    db = tmp_path / "plan.duckdb"
    load_portfolio(tmp_path / "p.csv", None, db)
    run_id = screen_portfolio(db, grid=tmp_path / "g.toml", **flags)
    return duckdb.connect(str(db), read_only=True), run_id


def decision(con, run_id, group, rate, inflation=0.0):
    return con.execute("""SELECT g.preferred, g.runner_up, g.margin, g.preferred_worth, g.basis, g.least_cost
        FROM group_decisions g JOIN scenarios s USING (run_id, scenario_id)
        WHERE g.run_id = ? AND g.group_name = ? AND abs(s.discount_rate - ?) < 1e-9 AND s.inflation = ?""",
                       [run_id, group, rate, inflation]).fetchone()


def test_textbook_figures_cross_checked_with_numpy_financial():
    # Blank & Tarquin (from memory) against numpy-financial: the data reproduce the text's answers.
    assert annual(VA, 0.15) == pytest.approx(-7349, abs=1)
    assert annual(VB, 0.15) == pytest.approx(-6753, abs=1)
    pw18 = lambda aw: aw * (1 - 1.15 ** -18) / 0.15
    assert pw18(annual(VA, 0.15)) == pytest.approx(-45036, abs=2)
    assert pw18(annual(VB, 0.15)) == pytest.approx(-41384, abs=2)
    # over their own lives, present worth would pick the shorter-lived A: the error this fixes
    assert npf.npv(0.15, VA) > npf.npv(0.15, VB)


def test_default_basis_is_annual_worth(tmp_path):
    con, run_id = screened(tmp_path)
    rate = 0.14
    for f in (0.0, 0.03):
        r = (1 + rate) / (1 + f) - 1                     # PW in base-year money: the real rate
        pref, runner, margin, worth, basis, least = decision(con, run_id, "homes", rate, f)
        # Blank & Tarquin's choice, vendor B, by AW; do nothing does not compete (cost-only group)
        assert (pref, runner, basis, least) == ("VB", "VA", "annual-worth", True)
        assert worth == pytest.approx(annual(VB, r), rel=1e-9)                   # numpy-financial
        assert margin == pytest.approx(annual(VB, r) - annual(VA, r), rel=1e-9)
    spec = con.execute("SELECT grid_spec FROM runs WHERE run_id = ?", [run_id]).fetchone()[0]
    assert '"alternatives_basis": "annual-worth"' in spec and '"study_period": null' in spec
    note = con.execute("SELECT note FROM run_notes WHERE run_id = ? AND topic = 'alternatives'", [run_id]).fetchone()[0]
    assert note.startswith("Alternatives whose lives differ are compared by equivalent annual worth")
    assert "group homes (lives VA 6, VB 9 periods) by equivalent annual worth" in note
    assert "least-cost choice" in note


def test_annual_worth_at_the_textbook_rate(tmp_path):
    grid = GRID.replace("{ start = 0.02, stop = 0.20, count = 10 }", "{ values = [0.10, 0.15] }").replace(
        "discount_rate = 0.14", "discount_rate = 0.15")
    con, run_id = screened(tmp_path, grid=grid)
    pref, runner, margin, worth, basis, _ = decision(con, run_id, "homes", 0.15)
    assert (pref, basis) == ("VB", "annual-worth")
    assert worth == pytest.approx(-6753, abs=1)            # Blank & Tarquin AW of vendor B (from memory)
    assert margin == pytest.approx(-6753 + 7349, abs=2)
    # the stored per-project annual worth agrees with the decision's
    aw_b = con.execute("SELECT annual_worth_base FROM project_summary WHERE run_id = ? AND project_id = 'VB'",
                       [run_id]).fetchone()[0]
    assert aw_b == pytest.approx(worth, rel=1e-12)


def test_frontier_is_where_annual_worths_are_equal(tmp_path):
    con, run_id = screened(tmp_path)
    pts = con.execute("""SELECT x, y FROM frontiers WHERE run_id = ? AND group_name = 'kit'
                         AND alternative_a IN ('KX', 'KY') AND alternative_b IN ('KX', 'KY')""", [run_id]).fetchall()
    assert pts, "the kit alternatives trade places inside the grid"
    for x, y in pts:
        r = (1 + x) / (1 + y) - 1
        assert annual(KX, r) - annual(KY, r) == pytest.approx(0.0, abs=1e-6)       # numpy-financial
        assert abs(npf.npv(r, KX) - npf.npv(r, KY)) > 10      # not where the present worths are equal
    # and the decisions on each side agree with AW (numpy-financial), not PW over own lives
    for rate in (0.06, 0.10):
        pref = decision(con, run_id, "kit", rate)[0]
        assert pref == ("KY" if annual(KY, rate) > annual(KX, rate) else "KX")
    assert decision(con, run_id, "kit", 0.10)[0] == "KX" and npf.npv(0.10, KY) > npf.npv(0.10, KX)


def test_study_period_cuts_and_puts_the_terminal_value(tmp_path):
    con, run_id = screened(tmp_path, alternatives_basis="study-period", study_period=5)
    r = 0.14
    # homes over 5 periods: A 15,000 - 14,000 x 5/6, B 18,000 - 16,000 x 5/9 (straight line, README)
    tv_a, tv_b = 15000 - 14000 * 5 / 6, 18000 - 16000 * 5 / 9
    pw_a = npf.npv(r, [-15000, -3500, -3500, -3500, -3500, -3500 + tv_a])
    pw_b = npf.npv(r, [-18000, -3100, -3100, -3100, -3100, -3100 + tv_b])
    pref, runner, margin, worth, basis, _ = decision(con, run_id, "homes", r)
    assert basis == "study-period"
    assert (pref, worth) == ("VB" if pw_b > pw_a else "VA", pytest.approx(max(pw_a, pw_b), rel=1e-9))
    assert margin == pytest.approx(abs(pw_a - pw_b), rel=1e-9)
    # kit: KX lives exactly 5 (its own flows), KY is cut at 5 with 1,600 x 5/10 = 800
    pw_y = npf.npv(r, [-1600, 290, 290, 290, 290, 290 + 800])
    row = decision(con, run_id, "kit", r)
    assert row[3] == pytest.approx(max(npf.npv(r, KX), pw_y, 0.0), rel=1e-9)
    note = con.execute("SELECT note FROM run_notes WHERE run_id = ? AND topic = 'alternatives'", [run_id]).fetchone()[0]
    assert "study period of 5 periods" in note and "VA 3,333.33, VB 9,111.11" in note


def test_study_period_uses_the_given_terminal_value(tmp_path):
    projects = "\n".join(PROJECTS.replace("2000,9,", "2000,9,9000").splitlines()[:3]) + "\n"   # homes only
    con, run_id = screened(tmp_path, projects=projects, alternatives_basis="study-period", study_period=6)
    r = 0.14
    pw_b = npf.npv(r, [-18000] + [-3100] * 5 + [-3100 + 9000])
    pw_a = npf.npv(r, VA)                   # life 6 = T: its own flows, salvage included
    _, _, margin, worth, _, _ = decision(con, run_id, "homes", r)
    assert worth == pytest.approx(max(pw_a, pw_b), rel=1e-9)
    assert margin == pytest.approx(abs(pw_a - pw_b), rel=1e-9)


def test_study_period_longer_than_a_life_is_refused_before_anything_is_written(tmp_path):
    with pytest.raises(RunError) as err:
        screened(tmp_path, alternatives_basis="study-period", study_period=7)
    assert str(err.value).startswith(
        "--study-period: the study period of 7 periods is longer than the life of alternative 'VA' of group "
        "'homes' (6 periods; the group's lives are VA=6, VB=9).")
    assert "Fix: give a study period of at most 6 periods" in str(err.value)
    con = duckdb.connect(str(tmp_path / "plan.duckdb"), read_only=True)
    assert con.execute("SELECT count(*) FROM runs").fetchone()[0] == 0
    assert con.execute("SELECT count(*) FROM scenarios").fetchone()[0] == 0


def test_present_worth_over_own_lives_on_request_gets_a_note(tmp_path, capfd):
    con, run_id = screened(tmp_path, alternatives_basis="present-worth")
    pref, _, _, worth, basis, _ = decision(con, run_id, "homes", 0.14)
    assert (pref, basis) == ("VA", "present-worth")             # the own-life answer, as asked
    assert worth == pytest.approx(npf.npv(0.14, VA), rel=1e-9)
    note = con.execute("SELECT note FROM run_notes WHERE run_id = ? AND topic = 'alternatives'", [run_id]).fetchone()[0]
    assert "NOTE: group homes has different lives (VA 6, VB 9 periods) but is compared by present worth" in note
    assert "alternatives: group 'homes' has different lives (VA 6, VB 9 periods)" in capfd.readouterr().err


def test_zero_real_rate_annual_worth_is_the_average_cost(tmp_path):
    # (A/P, 0, N) = 1/N: AW is the undiscounted total over the life divided by the life
    grid = GRID.replace("{ start = 0.02, stop = 0.20, count = 10 }", "{ values = [0.0, 0.1] }").replace(
        "discount_rate = 0.14", "discount_rate = 0.0")
    con, run_id = screened(tmp_path, grid=grid)
    _, _, margin, worth, _, _ = decision(con, run_id, "homes", 0.0)
    # computed independently: (A/P, 0, N) = 1/N, so AW = undiscounted total / life (Blank & Tarquin, from memory)
    assert worth == pytest.approx(max(VA.sum() / 6, VB.sum() / 9), rel=1e-12)
    assert margin == pytest.approx(abs(VA.sum() / 6 - VB.sum() / 9), rel=1e-12)


def test_equal_lives_decide_as_today_under_every_basis(tmp_path):
    """Equal lives: present worth over the common life whatever the basis (and a study period unused)."""
    projects = ("project_id,name,group,first_cost,annual_cost,annual_benefit,life\n"
                "E1,Equal one,eq,1000,,260,7\nE2,Equal two,eq,1500,,330,7\nE3,Equal three,eq,400,,90,7\n")
    got = []
    for k, flags in enumerate(({}, {"alternatives_basis": "present-worth"},
                               {"alternatives_basis": "study-period", "study_period": 4})):
        d = tmp_path / str(k)
        d.mkdir()
        con, run_id = screened(d, projects=projects, **flags)
        got.append(con.execute("""SELECT scenario_id, preferred, runner_up, margin, preferred_worth, basis
                                  FROM group_decisions WHERE run_id = ? ORDER BY scenario_id""", [run_id]).fetchall())
        base_id = con.execute("SELECT scenario_id FROM scenarios WHERE run_id = ? AND is_base", [run_id]).fetchone()[0]
        con.close()
    assert got[0] == got[1] == got[2]
    assert {row[-1] for row in got[0]} == {"present-worth"}
    # numpy-financial at the base scenario (14 %, no inflation)
    pws = [npf.npv(0.14, [-c] + [b] * 7) for c, b in ((1000, 260), (1500, 330), (400, 90))]
    base = [row for row in got[0] if row[0] == base_id][0]
    assert base[4] == pytest.approx(max(max(pws), 0.0), rel=1e-9)


def test_terminal_value_outside_a_group_is_refused(tmp_path):
    from ratescape.errors import ValidationError
    (tmp_path / "p.csv").write_text(PROJECTS + "LONE,Alone,,,100,,,,,5,40\n")
    with pytest.raises(ValidationError) as err:
        load_portfolio(tmp_path / "p.csv", None, tmp_path / "x.duckdb")
    text = str(err.value)
    assert "p.csv" in text and "line 6" in text and "terminal_value" in text and "40" in text
    assert "a terminal value on a project outside any group" in text
    assert "leave terminal_value blank, or give the project its group of alternatives" in text
    assert not (tmp_path / "x.duckdb").exists()
