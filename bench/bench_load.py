"""Measure `ratescape load` against DuckDB reading and expanding the same file natively, in one run.

Usage:
  PYTHONPATH=src .venv/bin/python bench/bench_load.py --projects 1000000 --dir /tmp/bench-load
      a parametric projects file of N projects (bench/make_portfolio.py), expanded to cash-flow lines
  PYTHONPATH=src .venv/bin/python bench/bench_load.py --long-form 1250000 --dir /tmp/bench-load
      N projects with a long-form cash-flow file of about N x 40 lines (50 million for 1,250,000)

Each side runs in its own child process; wall time from the parent, peak resident memory of that
child alone and its CPU time (user + system, less sensitive than wall time to other jobs on a busy
machine) from os.wait4. The anchor ("native") is DuckDB's own CSV reader into a
new database plus, for the parametric file, the SQL expansion to the same cash-flow lines; it
checks nothing. Both databases are counted afterwards to show they hold the same number of
lines. The input files are written once and kept in --dir. Prints the load average beside the
figures (the machine is shared; see bench/RESULTS.md).
"""
from __future__ import annotations

import argparse
import os
import subprocess
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

NATIVE = r"""
import sys, duckdb
kind, projects, flows, db = sys.argv[1:5]
con = duckdb.connect(db)
con.execute("SET enable_progress_bar = false")
if kind == "parametric":
    con.execute(f'''CREATE TABLE projects AS SELECT * FROM read_csv('{projects}', header = true, columns = {{
        'project_id': 'VARCHAR', 'name': 'VARCHAR', 'first_cost': 'DOUBLE', 'annual_benefit': 'DOUBLE',
        'benefit_basis': 'VARCHAR', 'benefit_escalation': 'DOUBLE', 'annual_cost': 'DOUBLE', 'life': 'INTEGER'}})''')
    con.execute('''CREATE TABLE cash_flows AS
        SELECT project_id, 0 AS period, -first_cost AS amount, 'real' AS basis, 0.0 AS escalation, 'investment' AS kind
        FROM projects WHERE first_cost <> 0
        UNION ALL
        SELECT project_id, unnest(range(1, life + 1)), annual_benefit, benefit_basis, benefit_escalation, 'benefit'
        FROM projects WHERE annual_benefit <> 0
        UNION ALL
        SELECT project_id, unnest(range(1, life + 1)), -annual_cost, 'real', 0.0, 'cost'
        FROM projects WHERE annual_cost <> 0''')
else:
    con.execute(f"CREATE TABLE projects AS SELECT * FROM read_csv('{projects}', header = true, "
                "columns = {'project_id': 'VARCHAR', 'name': 'VARCHAR'})")
    con.execute(f'''CREATE TABLE cash_flows AS SELECT * FROM read_csv('{flows}', header = true, columns = {{
        'project_id': 'VARCHAR', 'period': 'INTEGER', 'amount': 'DOUBLE', 'basis': 'VARCHAR',
        'escalation': 'DOUBLE', 'kind': 'VARCHAR'}})''')
con.close()
"""


def load_average() -> str:
    return " ".join(Path("/proc/loadavg").read_text().split()[:3])


def measure(cmd: list[str], env=None) -> tuple[float, float, float, int]:
    """(wall seconds, peak RSS in MB of that child, its CPU seconds (user + system), exit code)."""
    start = time.monotonic()
    proc = subprocess.Popen(cmd, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.monotonic() - start
    out = proc.stdout.read().decode()
    err = proc.stderr.read().decode()
    code = os.waitstatus_to_exitcode(status)
    if code:
        print(out, err, file=sys.stderr)
    else:
        for line in (out + err).strip().splitlines()[-3:]:
            print("   ", line)
    return wall, usage.ru_maxrss / 1024, usage.ru_utime + usage.ru_stime, code


def count_lines(db: Path) -> tuple[int, int]:
    import duckdb
    con = duckdb.connect(str(db), read_only=True)
    try:
        return (con.execute("SELECT count(*) FROM projects").fetchone()[0],
                con.execute("SELECT count(*) FROM cash_flows").fetchone()[0])
    finally:
        con.close()


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--projects", type=int, help="parametric projects file of N projects")
    ap.add_argument("--long-form", type=int, help="N projects with a long-form cash-flow file (~40 N lines)")
    ap.add_argument("--dir", required=True)
    ap.add_argument("--skip-native", action="store_true")
    a = ap.parse_args()
    from make_portfolio import write_long_form, write_portfolio
    work = Path(a.dir)
    work.mkdir(parents=True, exist_ok=True)
    if a.projects:
        kind, projects, flows = "parametric", work / f"parametric_{a.projects}.csv", None
        if not projects.exists():
            write_portfolio(a.projects, str(projects))
    elif a.long_form:
        kind = "long-form"
        projects, flows = work / f"long_projects_{a.long_form}.csv", work / f"long_flows_{a.long_form}.csv"
        if not flows.exists():
            write_long_form(a.long_form, str(projects), str(flows))
    else:
        ap.error("give --projects or --long-form")
    size = sum(p.stat().st_size for p in (projects, flows) if p)
    print(f"{kind}: {size / 2**20:.0f} MB of CSV; load average before: {load_average()}")
    env = dict(os.environ)
    env["PYTHONPATH"] = str(HERE.parent / "src") + os.pathsep + env.get("PYTHONPATH", "")
    rs_db, native_db = work / "ratescape.duckdb", work / "native.duckdb"
    figures = {}
    for name, db, cmd in (
            ("ratescape load", rs_db, [sys.executable, "-m", "ratescape", "load", "--projects", str(projects)]
             + (["--cash-flows", str(flows)] if flows else []) + ["--db", str(rs_db)]),
            ("DuckDB native read + SQL expansion", native_db,
             [sys.executable, "-c", NATIVE, kind, str(projects), str(flows or ""), str(native_db)])):
        if a.skip_native and db == native_db:
            continue
        for path in (db, Path(f"{db}.wal")):
            path.unlink(missing_ok=True)
        print(f"{name} ...")
        wall, rss, cpu, code = measure(cmd, env)
        counts = count_lines(db) if code == 0 else None
        figures[name] = (wall, rss, cpu)
        print(f"  {name}: {wall:.1f} s, CPU {cpu:.1f} s, peak RSS {rss:,.0f} MB, exit {code}, projects and cash-flow lines "
              f"{counts}, database {db.stat().st_size / 2**20:,.0f} MB; load average {load_average()}")
    if len(figures) == 2:
        (w1, r1, c1), (w2, r2, c2) = figures.values()
        print(f"ratio of times ratescape / native: {w1 / w2:.2f} (target at most 2), of CPU times {c1 / c2:.2f}; "
              f"peak RSS ratescape {r1:,.0f} MB (target about 1,500 MB at most)")


if __name__ == "__main__":
    main()
