"""The DuckDB schema of a ratescape database (see README, "Database schema")."""
from __future__ import annotations

SCHEMA_VERSION = 2

# Tables written per chunk (project_summary, irr_results, irr_roots, sensitivity, spider, result_rows_*)
# carry no PRIMARY KEY: each chunk's rows are written once, in its own transaction (run_chunks
# records it), and an index over millions of rows per chunk would cost more than the rows.
TABLES = {
    "meta": """CREATE TABLE IF NOT EXISTS meta (key VARCHAR PRIMARY KEY, value VARCHAR)""",
    "loads": """CREATE TABLE IF NOT EXISTS loads (
        load_id INTEGER PRIMARY KEY, loaded_at TIMESTAMP, projects_file VARCHAR, cash_flows_file VARCHAR,
        inputs_hash VARCHAR, project_count INTEGER, cash_flow_rows BIGINT, tool_version VARCHAR, notes VARCHAR)""",
    "projects": """CREATE TABLE IF NOT EXISTS projects (
        project_key INTEGER NOT NULL, project_id VARCHAR PRIMARY KEY, name VARCHAR, group_name VARCHAR,
        requires VARCHAR, mandatory BOOLEAN, category VARCHAR,
        first_cost DOUBLE, annual_benefit DOUBLE, benefit_basis VARCHAR, benefit_escalation DOUBLE,
        annual_cost DOUBLE, cost_basis VARCHAR, cost_escalation DOUBLE, salvage DOUBLE, life INTEGER,
        depreciation_method VARCHAR, depreciation_convention VARCHAR, service_quarter INTEGER,
        recovery_years INTEGER, depreciable_basis DOUBLE,
        loan_amount DOUBLE, loan_rate DOUBLE, loan_term INTEGER, source_line INTEGER, terminal_value DOUBLE)""",
    "cash_flows": """CREATE TABLE IF NOT EXISTS cash_flows (
        project_id VARCHAR NOT NULL, period INTEGER NOT NULL, amount DOUBLE NOT NULL, basis VARCHAR NOT NULL,
        escalation DOUBLE NOT NULL, kind VARCHAR NOT NULL, source VARCHAR, source_line INTEGER)""",
    "runs": """CREATE TABLE IF NOT EXISTS runs (
        run_id VARCHAR PRIMARY KEY, status VARCHAR NOT NULL, started_at TIMESTAMP, finished_at TIMESTAMP,
        tool_version VARCHAR, inputs_hash VARCHAR, grid_spec VARCHAR, discount_basis VARCHAR, timing VARCHAR,
        periods_per_year DOUBLE, after_tax BOOLEAN, project_count INTEGER, scenario_count INTEGER,
        base_scenario_id INTEGER, chunk_size INTEGER, chunk_count INTEGER, chunks_done INTEGER,
        process_id INTEGER, message VARCHAR)""",
    # The portfolio a run screened, as its queries and report name it: one row per project, written
    # in the run's first transaction (INSERT ... SELECT from projects), so a later load that reuses
    # the ids under new names leaves the older run's names as they were. Read through the view
    # run_project_names, which falls back to today's projects for runs made before this table.
    "run_projects": """CREATE TABLE IF NOT EXISTS run_projects (
        run_id VARCHAR NOT NULL, project_id VARCHAR NOT NULL, project_key INTEGER, name VARCHAR,
        group_name VARCHAR, category VARCHAR)""",
    "run_chunks": """CREATE TABLE IF NOT EXISTS run_chunks (
        run_id VARCHAR NOT NULL, chunk_index INTEGER NOT NULL, first_project_key INTEGER, last_project_key INTEGER,
        result_rows BIGINT, finished_at TIMESTAMP, seconds DOUBLE, PRIMARY KEY (run_id, chunk_index))""",
    # Stage 1 of a chunk (its per-project tables) committed; run_chunks marks stage 2 (its result
    # rows), i.e. the chunk done. A chunk in run_chunks needs no row here (databases written
    # before the two stages have none).
    "run_chunk_summaries": """CREATE TABLE IF NOT EXISTS run_chunk_summaries (
        run_id VARCHAR NOT NULL, chunk_index INTEGER NOT NULL, finished_at TIMESTAMP, seconds DOUBLE,
        PRIMARY KEY (run_id, chunk_index))""",
    # A block of scenarios of capital rationing committed (its portfolios, selections and greedy
    # selections): a resumed run solves only the blocks not listed.
    "run_ration_blocks": """CREATE TABLE IF NOT EXISTS run_ration_blocks (
        run_id VARCHAR NOT NULL, block_index INTEGER NOT NULL, first_scenario_id INTEGER, last_scenario_id INTEGER,
        finished_at TIMESTAMP, seconds DOUBLE, PRIMARY KEY (run_id, block_index))""",
    "scenarios": """CREATE TABLE IF NOT EXISTS scenarios (
        run_id VARCHAR NOT NULL, scenario_id INTEGER NOT NULL, discount_rate DOUBLE NOT NULL,
        real_rate DOUBLE NOT NULL, inflation DOUBLE NOT NULL, tax_rate DOUBLE, cost_multiplier DOUBLE,
        benefit_multiplier DOUBLE, weight DOUBLE, is_base BOOLEAN, scenario_key INTEGER UNIQUE,
        PRIMARY KEY (run_id, scenario_id))""",
    # One row per project and kept scenario, in one of two physical tables behind the
    # `result_rows` view (and so behind `results`): scenario_key is unique across runs, so a row
    # needs no run id; annual worth and acceptance are derived in the view.
    # * result_rows_pw: a chunk whose every PI is derived (see `results`) and that has no
    #   before-tax PW stores its rows here, present worth only;
    # * result_rows_after_tax: the same after tax, with the before-tax PW;
    # * result_rows_full: every other chunk, with its PI and before-tax PW (NULL where absent).
    # Appending an all-NULL column costs DuckDB about as much as a column of values (measured:
    # two NULL columns took 1.46 instead of 0.83 CPU-s per 10 million rows), so the common case
    # does not carry empty columns. Each column's compression is named, not analysed: a chunk
    # writes runs of one scenario_key (RLE), ascending project keys (bit packing) and discounted
    # amounts with full mantissas (ALP-RD, what DuckDB's analysis picks for them anyway); trying
    # every method on every segment cost about 15 % of the insert's CPU time.
    "result_rows_pw": """CREATE TABLE IF NOT EXISTS result_rows_pw (
        scenario_key INTEGER NOT NULL USING COMPRESSION rle,
        project_key INTEGER NOT NULL USING COMPRESSION bitpacking,
        present_worth DOUBLE NOT NULL USING COMPRESSION alprd)""",
    "result_rows_after_tax": """CREATE TABLE IF NOT EXISTS result_rows_after_tax (
        scenario_key INTEGER NOT NULL USING COMPRESSION rle,
        project_key INTEGER NOT NULL USING COMPRESSION bitpacking,
        present_worth DOUBLE NOT NULL USING COMPRESSION alprd,
        present_worth_before_tax DOUBLE NOT NULL USING COMPRESSION alprd)""",
    "result_rows_full": """CREATE TABLE IF NOT EXISTS result_rows_full (
        scenario_key INTEGER NOT NULL USING COMPRESSION rle,
        project_key INTEGER NOT NULL USING COMPRESSION bitpacking,
        present_worth DOUBLE NOT NULL USING COMPRESSION alprd,
        profitability_index DOUBLE USING COMPRESSION alprd,
        present_worth_before_tax DOUBLE USING COMPRESSION alprd)""",
    # Capital recovery factor (A/P, real rate of the scenario, horizon in years) per scenario and horizon
    "annual_factors": """CREATE TABLE IF NOT EXISTS annual_factors (
        scenario_key INTEGER NOT NULL, horizon INTEGER NOT NULL, capital_recovery DOUBLE NOT NULL,
        PRIMARY KEY (scenario_key, horizon))""",
    "project_summary": """CREATE TABLE IF NOT EXISTS project_summary (
        run_id VARCHAR NOT NULL, project_id VARCHAR NOT NULL, accept_share DOUBLE, accept_probability DOUBLE,
        pw_min DOUBLE, pw_max DOUBLE, pw_mean DOUBLE, pw_expected DOUBLE, pw_base DOUBLE, accepted_base BOOLEAN,
        annual_worth_base DOUBLE, horizon INTEGER,
        rank_min INTEGER, rank_median DOUBLE, rank_max INTEGER, rank_base INTEGER,
        pi_rank_min INTEGER, pi_rank_median DOUBLE, pi_rank_max INTEGER, top_k_share DOUBLE,
        selected_share DOUBLE, selected_probability DOUBLE,
        future_worth_base DOUBLE, bc_ratio_base DOUBLE, bc_ratio_modified_base DOUBLE, payback_periods DOUBLE,
        discounted_payback_base DOUBLE, mirr_base DOUBLE, pw_before_tax_base DOUBLE, project_key INTEGER,
        investment_worth DOUBLE, measure_status VARCHAR)""",
    "irr_results": """CREATE TABLE IF NOT EXISTS irr_results (
        run_id VARCHAR NOT NULL, project_id VARCHAR NOT NULL, inflation DOUBLE NOT NULL,
        root_count INTEGER NOT NULL, irr_nominal DOUBLE, irr_real DOUBLE, status VARCHAR NOT NULL,
        sign_changes INTEGER)""",
    "irr_roots": """CREATE TABLE IF NOT EXISTS irr_roots (
        run_id VARCHAR NOT NULL, project_id VARCHAR NOT NULL, inflation DOUBLE NOT NULL,
        root_index INTEGER NOT NULL, irr_nominal DOUBLE NOT NULL, irr_real DOUBLE NOT NULL)""",
    "sensitivity": """CREATE TABLE IF NOT EXISTS sensitivity (
        run_id VARCHAR NOT NULL, project_id VARCHAR NOT NULL, input VARCHAR NOT NULL, base_value DOUBLE,
        low_value DOUBLE, high_value DOUBLE, worth_base DOUBLE, worth_low DOUBLE, worth_high DOUBLE,
        switching_value DOUBLE, switching_change DOUBLE, switching_status VARCHAR)""",
    "spider": """CREATE TABLE IF NOT EXISTS spider (
        run_id VARCHAR NOT NULL, project_id VARCHAR NOT NULL, input VARCHAR NOT NULL, change DOUBLE NOT NULL,
        present_worth DOUBLE NOT NULL)""",
    # One row per (run_id, group_name, scenario_id), like the other per-scenario tables without an
    # index: the rows are written once, inside the run's final transaction (a resumed run starts that
    # transaction afresh). 3,333 groups x 2,601 scenarios are 8.7 million keys, whose index DuckDB
    # built at the commit (about 0.5 GB at its peak).
    "group_decisions": """CREATE TABLE IF NOT EXISTS group_decisions (
        run_id VARCHAR NOT NULL, group_name VARCHAR NOT NULL, scenario_id INTEGER NOT NULL,
        preferred VARCHAR, runner_up VARCHAR, margin DOUBLE, preferred_worth DOUBLE, basis VARCHAR,
        least_cost BOOLEAN)""",
    "frontiers": """CREATE TABLE IF NOT EXISTS frontiers (
        run_id VARCHAR NOT NULL, group_name VARCHAR NOT NULL, alternative_a VARCHAR NOT NULL,
        alternative_b VARCHAR NOT NULL, x_axis VARCHAR NOT NULL, x DOUBLE NOT NULL, y_axis VARCHAR NOT NULL,
        y DOUBLE NOT NULL, segment INTEGER NOT NULL, point INTEGER NOT NULL, kind VARCHAR, residual DOUBLE,
        converged BOOLEAN)""",
    # Assumptions and notes a run states in plain words (the report's assumptions section and the
    # `run-notes` query show them): one row per topic, e.g. "alternatives" (the comparison basis),
    # "loans" (the discount rate with debt), "tax" (what the after-tax lines assume).
    "run_notes": """CREATE TABLE IF NOT EXISTS run_notes (
        run_id VARCHAR NOT NULL, topic VARCHAR NOT NULL, note VARCHAR NOT NULL, PRIMARY KEY (run_id, topic))""",
    "scenario_ranks": """CREATE TABLE IF NOT EXISTS scenario_ranks (
        run_id VARCHAR NOT NULL, scenario_id INTEGER NOT NULL, kendall_tau DOUBLE, kendall_tau_pi DOUBLE,
        spearman_rho DOUBLE, spearman_rho_pi DOUBLE, PRIMARY KEY (run_id, scenario_id))""",
    "portfolios": """CREATE TABLE IF NOT EXISTS portfolios (
        run_id VARCHAR NOT NULL, scenario_id INTEGER NOT NULL, objective DOUBLE, lp_bound DOUBLE, mip_gap DOUBLE,
        greedy_objective DOUBLE, projects_selected INTEGER, budget_used VARCHAR, status VARCHAR,
        solve_seconds DOUBLE, PRIMARY KEY (run_id, scenario_id))""",
    "selections": """CREATE TABLE IF NOT EXISTS selections (
        run_id VARCHAR NOT NULL, scenario_id INTEGER NOT NULL, project_id VARCHAR NOT NULL)""",
    "greedy_selections": """CREATE TABLE IF NOT EXISTS greedy_selections (
        run_id VARCHAR NOT NULL, scenario_id INTEGER NOT NULL, project_id VARCHAR NOT NULL)""",
    "portfolio_summary": """CREATE TABLE IF NOT EXISTS portfolio_summary (
        run_id VARCHAR NOT NULL, project_id VARCHAR NOT NULL, selected_share DOUBLE, selected_probability DOUBLE,
        in_core BOOLEAN, in_min_max_regret BOOLEAN, PRIMARY KEY (run_id, project_id))""",
    "portfolio_regret": """CREATE TABLE IF NOT EXISTS portfolio_regret (
        run_id VARCHAR NOT NULL, candidate INTEGER NOT NULL, max_regret DOUBLE, mean_regret DOUBLE,
        scenarios_optimal INTEGER, chosen BOOLEAN, PRIMARY KEY (run_id, candidate))""",
}


RUN_PROJECT_NAMES_VIEW = """CREATE OR REPLACE VIEW run_project_names AS
        SELECT run_id, project_id, name, group_name, category, true AS from_snapshot FROM run_projects
        UNION ALL
        SELECT r.run_id, p.project_id, p.name, p.group_name, p.category, false
        FROM runs r CROSS JOIN projects p
        WHERE NOT EXISTS (SELECT 1 FROM run_projects k WHERE k.run_id = r.run_id)"""

#: For a read-only connection to a database written before run_projects: the same names, from
#: today's projects, as a temporary view (nothing is written to the file).
RUN_PROJECT_NAMES_FALLBACK = """CREATE OR REPLACE TEMP VIEW run_project_names AS
        SELECT r.run_id, p.project_id, p.name, p.group_name, p.category, false AS from_snapshot
        FROM runs r CROSS JOIN projects p"""

VIEWS = {
    # Every stored result row, whichever physical table holds it (see result_rows_pw above).
    "result_rows": """CREATE OR REPLACE VIEW result_rows AS
        SELECT scenario_key, project_key, present_worth, CAST(NULL AS DOUBLE) AS profitability_index,
               CAST(NULL AS DOUBLE) AS present_worth_before_tax
        FROM result_rows_pw
        UNION ALL
        SELECT scenario_key, project_key, present_worth, CAST(NULL AS DOUBLE), present_worth_before_tax
        FROM result_rows_after_tax
        UNION ALL
        SELECT scenario_key, project_key, present_worth, profitability_index, present_worth_before_tax
        FROM result_rows_full""",
    # Every result row with the run and project named, annual worth (base-year money per year) and
    # the acceptance flag (present worth >= 0) derived from the stored present worth.
    # A row's PI is NULL where the project's investment PW is the same in every scenario
    # (project_summary.investment_worth): it is then 1 + PW / that, computed here.
    "results": """CREATE OR REPLACE VIEW results AS
        SELECT s.run_id, ps.project_id, s.scenario_id, x.present_worth,
               x.present_worth * f.capital_recovery AS annual_worth, x.present_worth >= 0 AS accepted,
               coalesce(x.profitability_index, 1 + x.present_worth / ps.investment_worth) AS profitability_index,
               x.present_worth_before_tax, x.project_key
        FROM result_rows x
        JOIN scenarios s ON s.scenario_key = x.scenario_key
        JOIN project_summary ps ON ps.run_id = s.run_id AND ps.project_key = x.project_key
        JOIN annual_factors f ON f.scenario_key = x.scenario_key AND f.horizon = ps.horizon""",
    # The names and groups each run screened: its own snapshot (run_projects), or, for a run made
    # before snapshots were kept, today's projects (the `runs` query then says whether the
    # portfolio was reloaded since).
    "run_project_names": RUN_PROJECT_NAMES_VIEW,
}


# A word each view's current definition has and its earlier ones lack: a stored view without it
# is replaced (databases written before investment_worth, or before result_rows_after_tax).
VIEW_MARKERS = {"result_rows": "result_rows_after_tax", "results": "investment_worth",
                "run_project_names": "from_snapshot"}


# Columns added within schema version 2 (table, column, type): a database written before gains them, empty.
ADDED_COLUMNS = (
    ("project_summary", "investment_worth", "DOUBLE"),
    ("project_summary", "measure_status", "VARCHAR"),     # 'cost-only': ratio, IRR, MIRR, PI, payback NULL
    ("group_decisions", "basis", "VARCHAR"),              # what margin and preferred_worth measure
    ("group_decisions", "least_cost", "BOOLEAN"),         # every alternative cost-only: a least-cost choice
    ("projects", "terminal_value", "DOUBLE"),             # value at the end of a study period (base-year money)
)


def create_schema(con) -> None:
    """Create every table that does not exist yet (idempotent); refuse a database of another schema version."""
    if table_exists(con, "meta"):
        row = con.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchall()
        if row and row[0][0] != str(SCHEMA_VERSION):
            from ..errors import RatescapeError
            raise RatescapeError(f"this database has schema version {row[0][0]}, this ratescape writes version "
                                 f"{SCHEMA_VERSION}. Fix: load the portfolio into a new database file")
    kinds = dict(con.execute("SELECT table_name, table_type FROM information_schema.tables").fetchall())
    if kinds.get("result_rows") == "BASE TABLE":
        # Split within schema version 2: the one physical table of a database written before
        # keeps every row and becomes result_rows_full; `result_rows` becomes the view over both.
        con.execute("ALTER TABLE result_rows RENAME TO result_rows_full")
        kinds.pop("result_rows")
    for ddl in TABLES.values():
        con.execute(ddl)
    # Added within schema version 2: a database written before gains the column (empty) and the
    # view that reads it. Nothing is written when both are already there (opening stays read-only
    # in effect when a command then refuses to run).
    for table, column, kind in ADDED_COLUMNS:
        columns = {r[0] for r in con.execute("SELECT column_name FROM information_schema.columns "
                                             "WHERE table_name = ?", [table]).fetchall()}
        if column not in columns:
            con.execute(f"ALTER TABLE {table} ADD COLUMN {column} {kind}")
    views = dict(con.execute("SELECT view_name, sql FROM duckdb_views() WHERE NOT internal").fetchall())
    for name, ddl in VIEWS.items():
        if name not in views or VIEW_MARKERS[name] not in views[name]:
            con.execute(ddl)
    con.execute("INSERT OR REPLACE INTO meta VALUES ('schema_version', ?)", [str(SCHEMA_VERSION)])


def table_exists(con, name: str) -> bool:
    return bool(con.execute(
        "SELECT count(*) FROM information_schema.tables WHERE table_name = ?", [name]).fetchone()[0])
