"""Screening on a Dask cluster stores the same rows as a single-process run.

The cluster runs on loopback only (127.0.0.1, dashboard disabled) and is stopped by the test.
"""
import duckdb
import numpy as np
import pytest

import dask.distributed  # noqa: F401  (a test extra: missing, the test fails rather than skips)

from ratescape import load_portfolio, screen_portfolio

pytestmark = pytest.mark.heavy   # subprocesses or a cluster: run by default, deselect with -m "not heavy"

PROJECTS = ["project_id,name,first_cost,annual_benefit,benefit_basis,benefit_escalation,annual_cost,cost_basis,life"]
rng = np.random.default_rng(11)
for k in range(40):
    PROJECTS.append(f"D{k:02d},Invented project {k},{rng.uniform(50, 150):.2f},{rng.uniform(5, 40):.2f},"
                    f"{'nominal' if k % 4 == 0 else 'real'},{0.02 if k % 3 == 0 else 0},{rng.uniform(0, 5):.2f},"
                    f"{'nominal' if k % 5 == 0 else 'real'},{3 + k % 12}")


def rows(path, run_id, table, order):
    con = duckdb.connect(str(path), read_only=True)
    try:
        drop = "run_id, scenario_key" if table == "scenarios" else "run_id"   # scenario_key differs between runs
        return con.execute(f"SELECT * EXCLUDE ({drop}) FROM {table} WHERE run_id = ? ORDER BY {order}", [run_id]).fetchall()
    finally:
        con.close()


def test_cluster_run_equals_single_process_run(tmp_path):
    from dask.distributed import LocalCluster
    (tmp_path / "p.csv").write_text("\n".join(PROJECTS) + "\n")
    db = tmp_path / "plan.duckdb"
    load_portfolio(tmp_path / "p.csv", None, db)
    args = dict(discount_rates="0:0.2:11", inflation="0:0.1:6", chunk_size=7)
    single = screen_portfolio(db, **args)
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None) as cluster:
        assert cluster.scheduler_address.startswith("tcp://127.0.0.1:")
        spread = screen_portfolio(db, cluster=cluster.scheduler_address, **args)
    for table, order in (("results", "project_id, scenario_id"), ("project_summary", "project_id"),
                         ("irr_results", "project_id, inflation"), ("sensitivity", "project_id, input")):
        a, b = rows(db, single, table, order), rows(db, spread, table, order)
        assert len(a) == len(b) > 0
        for ra, rb in zip(a, b):
            for va, vb in zip(ra, rb):
                if isinstance(va, float) and va is not None and vb is not None:
                    assert vb == pytest.approx(va, rel=1e-12, abs=1e-9)   # summation order may differ
                else:
                    assert va == vb


def test_unreachable_scheduler_is_a_clear_error(tmp_path):
    from ratescape.errors import RatescapeError
    (tmp_path / "p.csv").write_text("\n".join(PROJECTS[:3]) + "\n")
    db = tmp_path / "plan.duckdb"
    load_portfolio(tmp_path / "p.csv", None, db)
    with pytest.raises(RatescapeError, match="cannot reach the Dask scheduler"):
        screen_portfolio(db, discount_rates="0.1", inflation="0", cluster="tcp://127.0.0.1:9")


def test_workers_run_ships_chunks_once_without_large_graph_warning(tmp_path):
    """Issue 16 part 4: with --workers N each chunk's arrays are scattered (sent once, as data) and
    the task graph only names them, so the scheduler's "Sending large graph" UserWarning is not
    raised even with its threshold lowered below one chunk's size; results equal a one-process run."""
    import warnings

    import dask

    (tmp_path / "p.csv").write_text("\n".join(PROJECTS) + "\n")
    db = tmp_path / "plan.duckdb"
    load_portfolio(tmp_path / "p.csv", None, db)
    args = dict(discount_rates="0:0.2:5", inflation="0:0.1:3", chunk_size=20)
    single = screen_portfolio(db, **args)
    # a chunk's amounts: 20 projects x up to 15 periods x line classes, 8 bytes each: several kB
    with dask.config.set({"distributed.admin.large-graph-warning-threshold": "2kB"}):
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            spread = screen_portfolio(db, workers=2, **args)
    large = [w for w in caught if "large graph" in str(w.message)]
    assert large == []
    for table, order in (("results", "project_id, scenario_id"), ("project_summary", "project_id")):
        a, b = rows(db, single, table, order), rows(db, spread, table, order)
        assert len(a) == len(b) > 0
        for ra, rb in zip(a, b):
            for va, vb in zip(ra, rb):
                if isinstance(va, float) and vb is not None:
                    assert vb == pytest.approx(va, rel=1e-12, abs=1e-9)
                else:
                    assert va == vb
