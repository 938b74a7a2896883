"""Group decisions read their members' amounts in blocks of project keys: the same decisions and
frontiers whatever the block size (chunk size 7 puts the members of most groups in different
blocks; the default puts the whole demo portfolio in one). The demo data are invented."""
import duckdb
import pytest

from ratescape import load_portfolio, screen_portfolio
from ratescape.demo import demo_data_dir

TABLES = {
    "group_decisions": ("group_name, scenario_id", "preferred, runner_up, margin, preferred_worth, basis"),
    "frontiers": ("group_name, y_axis, segment, point", "alternative_a, alternative_b, x, y, kind, converged"),
}


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    d = demo_data_dir()
    db = tmp_path_factory.mktemp("groups") / "plan.duckdb"
    load_portfolio(d / "projects.csv", d / "cash_flows.csv", db)
    grid = str(d / "grid.toml")
    one_block = screen_portfolio(db, grid=grid, budgets={})
    small_blocks = screen_portfolio(db, grid=grid, budgets={}, chunk_size=7)
    return db, one_block, small_blocks


@pytest.mark.parametrize("table", sorted(TABLES))
def test_group_results_do_not_depend_on_the_block_size(runs, table):
    db, one_block, small_blocks = runs
    order, columns = TABLES[table]
    con = duckdb.connect(str(db), read_only=True)
    try:
        def rows(run_id):
            return con.execute(f"SELECT {order}, {columns} FROM {table} WHERE run_id = ? ORDER BY {order}",
                               [run_id]).fetchall()
        a, b = rows(one_block), rows(small_blocks)
        groups = con.execute("SELECT count(DISTINCT group_name) FROM projects WHERE group_name <> ''").fetchone()[0]
    finally:
        con.close()
    assert groups >= 5 and len(a) > 0
    assert a == b


def test_group_decisions_inserted_in_batches_are_the_rows_gathered_whole(runs, monkeypatch, tmp_path):
    # rows are inserted every GROUP_ROWS_PER_INSERT rows (bounded memory with thousands of groups):
    # a batch smaller than one group's rows gives the same table as one insert of everything
    import ratescape.run.decisions as decisions
    db, one_block, _ = runs
    monkeypatch.setattr(decisions, "GROUP_ROWS_PER_INSERT", 100)
    batched = screen_portfolio(db, grid=str(demo_data_dir() / "grid.toml"), budgets={})
    order, columns = TABLES["group_decisions"]
    con = duckdb.connect(str(db), read_only=True)
    try:
        def rows(run_id):
            return con.execute(f"SELECT {order}, {columns}, least_cost FROM group_decisions WHERE run_id = ? "
                               f"ORDER BY {order}", [run_id]).fetchall()
        assert rows(batched) == rows(one_block) and len(rows(batched)) > 100
    finally:
        con.close()
