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


def test_a_run_stopped_after_its_groups_were_committed_resumes_to_the_same_rows(runs, monkeypatch):
    # the groups' rows are committed in batches before the run's final transaction; a run stopped
    # in that transaction has them stored but is not done, and its resume decides every group
    # again without duplicating a row
    import ratescape.run.screen as screen_module
    from ratescape.run import decisions
    db, one_block, _ = runs
    monkeypatch.setattr(decisions, "GROUP_ROWS_PER_INSERT", 1000)            # several commits

    def stop(*args, **kw):
        raise KeyboardInterrupt("test: stop in the final transaction")

    monkeypatch.setattr(screen_module, "write_overflow_note", stop)
    with pytest.raises(KeyboardInterrupt):
        screen_portfolio(db, grid=str(demo_data_dir() / "grid.toml"), budgets={})
    con = duckdb.connect(str(db))
    try:
        run_id, status = con.execute("SELECT run_id, status FROM runs ORDER BY started_at DESC LIMIT 1").fetchone()
        stored = con.execute("SELECT count(*) FROM group_decisions WHERE run_id = ?", [run_id]).fetchone()[0]
    finally:
        con.close()
    assert status != "done" and stored > 1000          # committed before the stop
    monkeypatch.undo()
    assert screen_portfolio(db, resume=run_id) == run_id
    con = duckdb.connect(str(db), read_only=True)
    try:
        def rows(table, rid):
            order, columns = TABLES[table]
            return con.execute(f"SELECT {order}, {columns} FROM {table} WHERE run_id = ? ORDER BY {order}",
                               [rid]).fetchall()
        for table in TABLES:
            assert rows(table, run_id) == rows(table, one_block), table
        keys = con.execute("SELECT count(*), count(DISTINCT (group_name, scenario_id)) FROM group_decisions "
                           "WHERE run_id = ?", [run_id]).fetchone()
        notes = con.execute("SELECT count(*) FROM run_notes WHERE run_id = ? AND topic = 'alternatives'",
                            [run_id]).fetchone()[0]
        status = con.execute("SELECT status FROM runs WHERE run_id = ?", [run_id]).fetchone()[0]
    finally:
        con.close()
    assert keys[0] == keys[1] and notes == 1 and status == "done"


def test_the_groups_and_rank_stages_show_progress_with_time_left(runs, monkeypatch, capsys):
    # off a terminal a plain line every 10 s and at the end (run/progress.py); every line at once here
    import ratescape.run.progress as progress_module
    db, _, _ = runs
    real = progress_module.Progress.__init__

    def every_update(self, *args, **kw):
        real(self, *args, **{**kw, "interval": 0.0})

    monkeypatch.setattr(progress_module.Progress, "__init__", every_update)
    capsys.readouterr()
    screen_portfolio(db, grid=str(demo_data_dir() / "grid.toml"), budgets={}, progress=True)
    err = capsys.readouterr().err
    con = duckdb.connect(str(db), read_only=True)
    try:
        groups = con.execute("SELECT count(DISTINCT group_name) FROM projects WHERE group_name <> ''").fetchone()[0]
    finally:
        con.close()
    lines = [line for line in err.splitlines() if line.startswith("alternatives: ") and " s left" in line]
    assert len(lines) == groups and lines[-1].startswith(f"alternatives: {groups}/{groups} groups, ")
    assert f"alternatives: {groups:,} groups decided over " in err
    # the rank pass over blocks of scenarios (the whole demo grid is one block)
    assert "ranks: 1/1 blocks, " in err
