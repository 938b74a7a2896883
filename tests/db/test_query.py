"""Named queries: read-only, bound parameters, and refusal of anything that writes or reads files."""
import hashlib

import pytest

from helpers import SMALL_PROJECTS, load_csv   # tests/ is on sys.path (conftest)
from ratescape import run_query, screen_portfolio
from ratescape.errors import QueryError
from ratescape.query import list_queries

@pytest.fixture(scope="module")
def db(tmp_path_factory):
    path = load_csv(tmp_path_factory.mktemp("q"), SMALL_PROJECTS)
    # real discount axis: inflation hurts fixed-price revenue, helps fixed payments (common practice)
    screen_portfolio(path, discount_rates="0.02:0.1:5", inflation="0:0.1:11", discount_basis="real")
    return path


def test_every_bundled_query_runs_and_documents_itself(db):
    names = [q.name for q in list_queries()]
    assert {"accepted-everywhere", "fails-above-inflation", "rank-movers", "runs"} <= set(names)
    for q in list_queries():
        assert q.about, f"{q.name} has no '-- about:' line"
        frame = run_query(db, q.name)
        assert frame.width > 0


def test_accepted_everywhere_and_fails_above_inflation(db):
    assert set(run_query(db, "accepted-everywhere")["project_id"].to_list()) == {"A", "L"}
    failing = run_query(db, "fails-above-inflation", {"threshold": "0.04", "min_drop": "0.01"})
    assert failing["project_id"].to_list() == ["N"]
    row = failing.row(0, named=True)
    assert row["accept_share_above"] < row["accept_share_at_or_below"]


def test_parameters_are_bound_not_pasted(db):
    # a hostile parameter value is data, never SQL
    with pytest.raises(QueryError):
        run_query(db, "rank-movers", {"limit": "1; DROP TABLE results"})
    assert run_query(db, "rank-movers", {"limit": "2"}).height == 2
    # the hostile run id is looked up as a value: no such run (issue 17: said so, not an empty result)
    with pytest.raises(QueryError, match=r"no run \"x' OR '1'='1\" in this database"):
        run_query(db, "accepted-everywhere", {"run": "x' OR '1'='1"})


@pytest.mark.parametrize("sql,fragment", [
    ("DELETE FROM results", "DELETE statement was refused"),
    ("DROP TABLE results", "DROP statement was refused"),
    ("COPY results TO '/tmp/x.csv'", "COPY statement was refused"),
    ("ATTACH '/tmp/other.duckdb' AS o", "ATTACH statement was refused"),
    ("SELECT 1; DELETE FROM results", "exactly one statement"),
    ("SELECT * FROM read_csv('/etc/passwd')", "failed"),
    ("INSTALL httpfs", "statement was refused"),
])
def test_queries_that_write_or_read_files_are_refused(db, tmp_path, sql, fragment):
    before = hashlib.sha256(db.read_bytes()).hexdigest()
    f = tmp_path / "evil.sql"
    f.write_text(sql)
    with pytest.raises(QueryError, match=fragment):
        run_query(db, str(f))
    assert hashlib.sha256(db.read_bytes()).hexdigest() == before


def test_rank_agreement_lists_least_alike_scenarios_first(db):
    """The base scenario agrees with itself (rho = tau = 1, common practice); others sort below it."""
    frame = run_query(db, "rank-agreement", {"limit": "100"})
    rho = frame["spearman_rho"].to_list()
    assert len(rho) == 55 and rho == sorted(rho)
    assert max(rho) == pytest.approx(1.0) and max(frame["kendall_tau"].to_list()) == pytest.approx(1.0)
