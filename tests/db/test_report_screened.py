"""The report on a database written by the screen itself (rows in result_rows, `results` a view)."""
import duckdb
import pytest

from helpers import SMALL_PROJECTS, load_csv   # tests/ is on sys.path (conftest)
from ratescape import screen_portfolio
from ratescape.report import write_report
from ratescape.report.run_data import RunContext, pick_run

@pytest.fixture(scope="module")
def screened(tmp_path_factory):
    db = load_csv(tmp_path_factory.mktemp("screened"), SMALL_PROJECTS)
    run_id = screen_portfolio(db, discount_rates="0:0.2:6", inflation="0:0.1:5")
    return db, run_id


def test_narrow_rows_equal_the_results_view(screened):
    """The report's fast relation over result_rows holds exactly the rows of the results view (identity)."""
    db, run_id = screened
    con = duckdb.connect(str(db), read_only=True)
    try:
        ctx = RunContext(con, pick_run(con, run_id))
        assert ctx.narrow
        rows, params = ctx.rows()
        fast = sorted(con.execute(f"SELECT scenario_id, project_id, present_worth, accepted FROM {rows}", params).fetchall())
        view = sorted(con.execute("SELECT scenario_id, project_id, present_worth, accepted FROM results WHERE run_id = ?",
                                  [run_id]).fetchall())
        assert fast == view and len(fast) == 4 * 30
        rows, params = ctx.rows(projects=["N"])
        assert {r[0] for r in con.execute(f"SELECT project_id FROM {rows}", params).fetchall()} == {"N"}
        # the plane through the base scenario keeps every scenario of a two-axis grid
        count = con.execute(f"SELECT count(*) FROM scenarios s WHERE run_id = ? AND {ctx.plane_filter}",
                            [run_id, *ctx.plane_params]).fetchall()[0][0]
        assert count == 30
    finally:
        con.close()


def test_report_of_a_screened_run_charts_every_inflation_level(screened, tmp_path):
    db, run_id = screened
    out = tmp_path / "r.html"
    write_report(db, out, run_id)
    html = out.read_text()
    for level in ("0.025", "0.05", "0.075"):
        assert level in html
    assert "Acceptance against inflation" in html
