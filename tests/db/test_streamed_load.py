"""The streamed load (issue 16, part 1): `ratescape load` checks the files block by block, stages
them in a scratch database and replaces the portfolio in one transaction.

Oracles: the in-memory path (:func:`ratescape.load.read_portfolio` + ``store_portfolio``, which
expands parametric projects with Polars, not SQL), Python's csv module for the rows of the files,
and line numbers counted independently of the reader.
"""
from __future__ import annotations

import csv
import io
import re
from pathlib import Path

import pytest

from helpers import digest, fetch, run_cli
from ratescape import api
from ratescape.errors import RatescapeError, ValidationError
from ratescape.load import read_portfolio, reader
from ratescape.store import portfolio_writer
from ratescape.store.database import connect_write

# Invented projects: parametric ones of every shape (nominal benefit, escalations, annual cost,
# salvage, a cost-only one), groups, requires, and projects described by cash-flow lines.
PROJECTS = ("project_id,name,group,requires,first_cost,annual_benefit,benefit_basis,benefit_escalation,"
            "annual_cost,cost_basis,cost_escalation,salvage,life\n"
            + "".join(f"P{k:03d},Invented parametric {k},{'g' + str(k % 5) if k % 3 == 0 else ''},"
                      f"{'P' + format(k - 1, '03d') if k % 7 == 1 and k > 1 else ''},"
                      f"{1000 + k},{(100 + k) if k % 11 else ''},{'nominal' if k % 4 == 0 else 'real'},"
                      f"{0.01 if k % 2 else 0},{(k % 9) * 3 or ''},{'nominal' if k % 5 == 0 else ''},"
                      f"{0.02 if k % 6 == 0 else ''},{(k % 4) * 50 or ''},{3 + k % 17}\n" for k in range(120))
            + "".join(f"F{k:02d},\"Invented, long form {k}\",,,,,,,,,,,\n" for k in range(30)))


def _flows(n: int = 4000) -> str:
    out = ["project_id,period,amount,basis,escalation,kind"]
    for k in range(n):
        pid = f"F{k % 30:02d}"
        out.append(f'{pid},{k % 25},"{-(k % 7) - 1}.5",real,0.01,' if k % 3 == 0 else
                   f"{pid},{k % 25},{k % 13 + 1},nominal,0,{'other' if k % 10 == 0 else ''}")
        if k % 97 == 50:
            out.append("")
    return "\n".join(out) + "\n"


FLOWS = _flows()
TABLES = {"projects": "SELECT * FROM projects ORDER BY project_key",
          "cash_flows": "SELECT * FROM cash_flows ORDER BY ALL"}


@pytest.fixture
def inputs(tmp_path):
    (tmp_path / "p.csv").write_text(PROJECTS)
    (tmp_path / "c.csv").write_text(FLOWS)
    return tmp_path / "p.csv", tmp_path / "c.csv"


def _tables(db: Path) -> dict:
    return {name: fetch(db, sql) for name, sql in TABLES.items()}


def _in_memory_db(db: Path, p: Path, c: Path) -> Path:
    con = connect_write(db)
    try:
        portfolio_writer.store_portfolio(con, read_portfolio(p, c))
    finally:
        con.close()
    return db


def test_streamed_load_in_many_blocks_equals_one_block_and_the_in_memory_load(inputs, tmp_path, monkeypatch):
    p, c = inputs
    one = tmp_path / "one.duckdb"
    api.load_portfolio(p, c, one)                      # default blocks: each file is one block
    monkeypatch.setattr(reader, "BLOCK_BYTES", 512)    # ~70 blocks of the cash-flow file, ~30 of the projects
    monkeypatch.setattr(portfolio_writer, "STAGE_ROWS", 7)
    many = tmp_path / "many.duckdb"
    info = api.load_portfolio(p, c, many)
    memory = _in_memory_db(tmp_path / "memory.duckdb", p, c)
    a, b, m = _tables(one), _tables(many), _tables(memory)
    assert a == b == m
    # the oracle for the file's rows: Python's csv module
    rows = [r for r in csv.reader(io.StringIO(FLOWS)) if r][1:]
    from_file = [r for r in a["cash_flows"] if r[6] == "c.csv"]
    assert len(from_file) == len(rows) == 4000
    assert sorted(r[2] for r in from_file) == sorted(float(r[2]) for r in rows)
    # the oracle for the expansion: the parametric columns worked out by hand, row by row
    expected = 0
    for r in csv.DictReader(io.StringIO(PROJECTS)):
        if r["life"]:
            life = int(r["life"])
            expected += (r["first_cost"] != "") + (r["salvage"] != "") + life * (r["annual_benefit"] != "") \
                + life * (r["annual_cost"] != "")
    assert len(a["cash_flows"]) - 4000 == expected == info["cash_flow_rows"] - 4000
    assert [r[:2] for r in a["projects"]][:3] == [(0, "P000"), (1, "P001"), (2, "P002")]   # keys in file order
    assert fetch(one, "SELECT project_count, cash_flow_rows, inputs_hash FROM loads") == \
        fetch(many, "SELECT project_count, cash_flow_rows, inputs_hash FROM loads") == \
        [(150, expected + 4000, info["inputs_hash"])]


def test_simple_blocks_typed_from_their_bytes_and_staged_in_the_background_load_the_same_rows(tmp_path, monkeypatch):
    """A file of printable ASCII without quotes or spaces (the usual export): its blocks are typed
    straight from their bytes on the worker threads and staged by the writing thread, many small
    files; the database equals the in-memory load's, and the physical order of the lines is the
    file's (``source_line`` ascending in the table as stored)."""
    from ratescape.load import portfolio as portfolio_module
    (tmp_path / "p.csv").write_text(PROJECTS)
    flows = "".join(line.replace('"', "") + "\n" for line in _flows().splitlines() if line)
    assert " " not in flows
    (tmp_path / "c.csv").write_text(flows)
    p, c = tmp_path / "p.csv", tmp_path / "c.csv"
    typed_from_bytes = []
    real = portfolio_module.clean_flow_bytes

    def counting(*args, **kwargs):
        out = real(*args, **kwargs)
        typed_from_bytes.append(out is not None)
        return out
    monkeypatch.setattr(portfolio_module, "clean_flow_bytes", counting)
    monkeypatch.setattr(reader, "BLOCK_BYTES", 512)
    monkeypatch.setattr(portfolio_writer, "STAGE_ROWS", 7)
    many = tmp_path / "many.duckdb"
    info = api.load_portfolio(p, c, many)
    assert sum(typed_from_bytes) > 20                     # the path was taken, block after block
    memory = _in_memory_db(tmp_path / "memory.duckdb", p, c)
    assert _tables(many) == _tables(memory)
    lines = [r[0] for r in fetch(many, "SELECT source_line FROM cash_flows WHERE source = 'c.csv'")]
    assert lines == list(range(2, 2 + len(flows.splitlines()) - 1)) and info["cash_flow_rows"] > len(lines)


def test_staged_files_are_written_in_order_and_a_failed_write_is_raised(tmp_path):
    import polars as pl
    sink = portfolio_writer.StagingSink(tmp_path)
    frames = [pl.DataFrame({"project_id": [f"P{k}"] * 3, "period": [0, 1, 2], "amount": [-9.0, 4.0, 5.5],
                            "basis": ["real"] * 3, "escalation": [0.0] * 3, "kind": ["", "benefit", "cost"],
                            "source": ["c.csv"] * 3, "source_line": [3 * k, 3 * k + 1, 3 * k + 2]})
              for k in range(40)]
    old = portfolio_writer.STAGE_ROWS
    try:
        portfolio_writer.STAGE_ROWS = 10
        for frame in frames:
            sink.cash_flows(frame)
        sink.close()
    finally:
        portfolio_writer.STAGE_ROWS = old
        sink.shutdown()
    assert len(sink.files["flows"]) == 10 and all(f.exists() for f in sink.files["flows"])
    staged = pl.concat([pl.read_parquet(f) for f in sink.files["flows"]])
    # every column but the file's name, which the insert writes (one value for the whole file)
    # and whole numbers as the table's 32-bit integers
    assert staged.equals(pl.concat(frames).drop("source").with_columns(pl.col("period", "source_line").cast(pl.Int32)))
    assert "source" not in staged.columns
    # a write that fails (here: its folder is gone) is raised by close, not lost on the writing thread
    broken = portfolio_writer.StagingSink(tmp_path / "gone")
    broken.cash_flows(frames[0])
    try:
        with pytest.raises(OSError):
            broken.close()
    finally:
        broken.shutdown()


def test_parametric_sql_expansion_gives_the_textbook_lines(tmp_path):
    """One project worked by hand: first cost at 0, benefit and cost at 1..life in their bases, salvage at life."""
    (tmp_path / "p.csv").write_text("project_id,name,first_cost,annual_benefit,benefit_basis,benefit_escalation,"
                                    "annual_cost,cost_basis,salvage,life\nX,Invented,500,120,nominal,0.03,40,real,60,3\n")
    db = tmp_path / "x.duckdb"
    api.load_portfolio(tmp_path / "p.csv", None, db)
    assert fetch(db, "SELECT period, amount, basis, escalation, kind, source, source_line FROM cash_flows "
                     "ORDER BY period, kind") == [
        (0, -500.0, "real", 0.0, "investment", "p.csv", 2),
        (1, 120.0, "nominal", 0.03, "benefit", "p.csv", 2), (1, -40.0, "real", 0.0, "cost", "p.csv", 2),
        (2, 120.0, "nominal", 0.03, "benefit", "p.csv", 2), (2, -40.0, "real", 0.0, "cost", "p.csv", 2),
        (3, 120.0, "nominal", 0.03, "benefit", "p.csv", 2), (3, -40.0, "real", 0.0, "cost", "p.csv", 2),
        (3, 60.0, "real", 0.0, "salvage", "p.csv", 2)]


def _staging_left(folder: Path) -> list[str]:
    return [f.name for f in folder.iterdir() if ".load-" in f.name]


def test_faults_in_late_blocks_keep_their_physical_lines_and_nothing_is_written(inputs, tmp_path, monkeypatch):
    p, c = inputs
    db = tmp_path / "plan.duckdb"
    assert run_cli("load", "--projects", p, "--cash-flows", c, "--db", db).exit_code == 0
    before = digest(db)
    monkeypatch.setattr(reader, "BLOCK_BYTES", 512)
    lines = FLOWS.split("\n")
    bad = {3001: "F03,7,\"1,200.50\",real,0,", 3900: "F04,8,12%,real,0,", len(lines) - 2: "F05,x,1,real,0,"}
    for index, row in bad.items():
        lines[index] = row
    text = "\n".join(lines)
    c.write_text(text)
    physical = text.split("\n")
    expected = sorted(physical.index(row) + 1 for row in bad.values())   # counted without the reader
    assert expected[0] > 3000
    r = run_cli("load", "--projects", p, "--cash-flows", c, "--db", db)
    assert r.exit_code == 1
    assert r.stderr.splitlines()[1:] == [
        f"  {c}, line {expected[0]}, column 'amount': not a finite number (value '1,200.50'). "
        "Fix: remove the thousands separators (1,200.50 -> 1200.50)",
        f"  {c}, line {expected[1]}, column 'amount': not a finite number (value '12%'). "
        "Fix: write rates as fractions without a percent sign (3% -> 0.03)",
        f"  {c}, line {expected[2]}, column 'period': not a finite number (value 'x'). "
        "Fix: write a period index (0 = now) using digits, '.', '-' and 'e' only"]
    assert r.stderr.startswith("Error: 3 problems found in the input; nothing was written.")
    assert digest(db) == before and _staging_left(tmp_path) == []


def test_many_faults_show_the_first_of_each_kind_with_a_count_of_the_rest(tmp_path, monkeypatch):
    monkeypatch.setattr(reader, "BLOCK_BYTES", 4096)
    (tmp_path / "p.csv").write_text("project_id,name\n" + "".join(f"B{k},Invented {k}\n" for k in range(10)))
    rows = ["project_id,period,amount"]
    rows += [f"B{k % 10},{k % 40},x{k}" for k in range(1000)]          # 1000 bad amounts: lines 2..1001
    rows += [f"B{k % 10},-{k + 1},5" for k in range(500)]              # 500 negative periods: 1002..1501
    rows += [f"B{k % 10},1,5,extra" for k in range(300)]               # 300 ragged rows: 1502..1801
    (tmp_path / "c.csv").write_text("\n".join(rows) + "\n")
    db = tmp_path / "x.duckdb"
    r = run_cli("load", "--projects", tmp_path / "p.csv", "--cash-flows", tmp_path / "c.csv", "--db", db)
    assert r.exit_code == 1 and not db.exists()
    out = r.stderr.splitlines()
    assert out[0] == "Error: 1800 problems found in the input; nothing was written."
    c = tmp_path / "c.csv"
    assert f"  {c}, line 2, column 'amount': not a finite number (value 'x0'). " \
           "Fix: write an amount of money using digits, '.', '-' and 'e' only" in out
    assert f"  ... and 995 more of this kind ({c}, column 'amount': not a finite number)" in out
    assert f"  {c}, line 1006, column 'period': less than 0 (value '-5'). " \
           "Fix: write a period index (0 = now) of at least 0" in out
    assert f"  ... and 495 more of this kind ({c}, column 'period': less than 0)" in out
    assert f"  {c}, line 1502: 4 fields where the header has 3 (value 'B0,1,5,extra'). Fix: " \
           "make every line have the same number of comma-separated fields as the header " \
           "(quote cells that contain commas)" in out
    assert f"  ... and 295 more of this kind ({c}: 4 fields where the header has 3)" in out
    assert len(out) == 1 + 3 * 6


def test_an_interrupted_write_rolls_back_and_leaves_no_staging(inputs, tmp_path, monkeypatch):
    p, c = inputs
    db = tmp_path / "plan.duckdb"
    (tmp_path / "old.csv").write_text("project_id,name,first_cost,annual_benefit,life\nOLD,Invented old,10,4,3\n")
    api.load_portfolio(tmp_path / "old.csv", None, db)
    before = _tables(db)

    def interrupted(source, projects):   # Ctrl-C after the projects were replaced, inside the transaction
        raise KeyboardInterrupt
    monkeypatch.setattr(portfolio_writer, "expansion_sql", interrupted)
    with pytest.raises(KeyboardInterrupt):
        api.load_portfolio(p, c, db)
    assert _tables(db) == before and fetch(db, "SELECT count(*) FROM loads") == [(1,)]
    assert _staging_left(tmp_path) == []


def test_an_interrupted_read_leaves_the_database_untouched(inputs, tmp_path, monkeypatch):
    p, c = inputs
    db = tmp_path / "plan.duckdb"
    api.load_portfolio(p, c, db)
    before = digest(db)
    monkeypatch.setattr(reader, "BLOCK_BYTES", 512)
    calls = []

    def stop(n):
        calls.append(n)
        if len(calls) == 40:       # well into the cash-flow file
            raise KeyboardInterrupt
    with pytest.raises(KeyboardInterrupt):
        portfolio_writer.load_streamed(db, p, c, progress=stop)
    assert digest(db) == before and _staging_left(tmp_path) == []


def test_a_load_that_cannot_fit_on_the_disk_is_refused_before_work_starts(inputs, tmp_path, monkeypatch):
    import shutil
    p, c = inputs
    db = tmp_path / "plan.duckdb"
    free = shutil.disk_usage(tmp_path).free
    monkeypatch.setattr(portfolio_writer, "DISK_MARGIN_BYTES", free + (1 << 40))
    with pytest.raises(RatescapeError) as exc:
        api.load_portfolio(p, c, db)
    assert re.fullmatch(r"not enough disk space for loading 0 MB of CSV: it needs about [\d.]+ GB in .+, and "
                        r"[\d.]+ GB are free; nothing was written\. Fix: free disk space there, or give --db a "
                        r"path on a disk with more room", str(exc.value)), str(exc.value)
    assert not db.exists() and _staging_left(tmp_path) == []


def test_progress_of_a_long_load_says_how_much_is_left(inputs, tmp_path, capsys):
    p, c = inputs
    api.load_portfolio(p, c, tmp_path / "x.duckdb", progress=True)
    err = capsys.readouterr().err.splitlines()
    assert re.fullmatch(r"load: reading and checking: 1/1 MB blocks, [\d.]+ s elapsed, about \d+ s left", err[0]), err
    assert err[1] == f"load: writing 150 projects and {fetch(tmp_path / 'x.duckdb', 'SELECT count(*) FROM cash_flows')[0][0]:,} " \
                     f"cash-flow lines into {tmp_path / 'x.duckdb'} ..."
    assert re.fullmatch(r"load: written in [\d.]+ s", err[2])


def test_refused_input_is_not_staged_and_validation_matches_the_in_memory_path(inputs, tmp_path):
    p, c = inputs
    c.write_text(FLOWS.replace("F07,", "F7,", 1))     # an unknown project id
    with pytest.raises(ValidationError) as streamed:
        api.load_portfolio(p, c, tmp_path / "x.duckdb")
    with pytest.raises(ValidationError) as memory:
        read_portfolio(p, c)
    assert streamed.value.message == memory.value.message
    assert "column 'project_id': cash flows for a project not in the projects file (value 'F7')" in memory.value.message
    assert not (tmp_path / "x.duckdb").exists() and _staging_left(tmp_path) == []


def test_a_load_removes_the_staging_left_by_a_killed_load_but_not_a_running_ones(inputs, tmp_path, capsys):
    # a killed load cannot remove its staging folder; the next load of the same database removes it
    # once its owner (host and process id, written when the folder is made) has ended
    import os
    import socket
    import subprocess
    import sys
    p, c = inputs
    ended = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True,
                           text=True, check=True)
    host = socket.gethostname()
    owners = {".x.duckdb.load-killed": f"{host} {int(ended.stdout)}",      # its process has ended
              ".x.duckdb.load-running": f"{host} {os.getpid()}",            # alive: a load under way
              ".x.duckdb.load-elsewhere": f"another-host-{host} 1",         # another machine's
              ".other.duckdb.load-killed": f"{host} {int(ended.stdout)}"}    # another database's
    for name, owner in owners.items():
        (tmp_path / name).mkdir()
        (tmp_path / name / "flows_000000.parquet").write_bytes(b"staged")
        (tmp_path / name / portfolio_writer.STAGING_OWNER).write_text(owner + "\n")
    (tmp_path / ".x.duckdb.load-unowned").mkdir()                            # no owner file: kept
    capsys.readouterr()
    api.load_portfolio(p, c, tmp_path / "x.duckdb", progress=True)
    assert sorted(_staging_left(tmp_path)) == [".other.duckdb.load-killed", ".x.duckdb.load-elsewhere",
                                               ".x.duckdb.load-running", ".x.duckdb.load-unowned"]
    assert "load: removed 1 staging folder(s) left beside x.duckdb by a load that was killed" in capsys.readouterr().err


def test_ids_no_project_has_are_reported_line_by_line_only_when_there_are_some(tmp_path, monkeypatch):
    """Cash flows whose id is not in the projects file are found once both files are read (the two
    are read at the same time) and reported line by line from a second reading, the first of the
    kind with a count of the rest; a good file is read once. Oracle: the lines counted here."""
    from ratescape.errors import MAX_ISSUES_PER_KIND
    from ratescape.load import portfolio as portfolio_module
    monkeypatch.setattr(reader, "BLOCK_BYTES", 2048)
    (tmp_path / "p.csv").write_text("project_id,name\n" + "".join(f"K{k},Invented {k}\n" for k in range(20)))
    rows = ["project_id,period,amount"] + [f"K{k % 20},{k % 30},{k + 1}" for k in range(3000)]
    unknown_lines = []
    for k in range(0, 3000, 7):                 # every seventh line names a project no one has
        rows[1 + k] = f"Z{k % 3},{k % 30},5"
        unknown_lines.append(2 + k)
    (tmp_path / "c.csv").write_text("\n".join(rows) + "\n")
    opened = []
    real = portfolio_module.open_table

    def counting(path, *args):
        opened.append(Path(path).name)
        return real(path, *args)
    monkeypatch.setattr(portfolio_module, "open_table", counting)
    with pytest.raises(ValidationError) as refused:
        read_portfolio(tmp_path / "p.csv", tmp_path / "c.csv")
    assert opened.count("c.csv") == 2
    kept = [i for i in refused.value.issues if i.problem == "cash flows for a project not in the projects file"]
    assert [i.line for i in kept] == unknown_lines[:MAX_ISSUES_PER_KIND]
    assert {i.value for i in kept} == {"Z0", "Z1", "Z2"} and kept[0].fix == "add 'Z0' to p.csv or correct the id"
    assert refused.value.total == len(unknown_lines)
    # the same files with the unknown lines taken out: one reading of each file
    (tmp_path / "c.csv").write_text("\n".join(r for r in rows if not r.startswith("Z")) + "\n")
    opened.clear()
    read_portfolio(tmp_path / "p.csv", tmp_path / "c.csv")
    assert sorted(opened) == ["c.csv", "p.csv"]


def test_a_second_reading_for_ids_no_project_has_is_announced(tmp_path, capsys):
    (tmp_path / "p.csv").write_text("project_id,name\nK1,Invented one\n")
    (tmp_path / "c.csv").write_text("project_id,period,amount\nK1,0,-10\nQ7,1,4\nQ8,1,4\nK1,1,12\n")
    db = tmp_path / "x.duckdb"
    with pytest.raises(ValidationError) as refused:
        api.load_portfolio(tmp_path / "p.csv", tmp_path / "c.csv", db, progress=True)
    assert not db.exists()
    assert [i.line for i in refused.value.issues] == [3, 4]
    err = capsys.readouterr().err
    assert "load: 2 project id(s) in c.csv are not in p.csv; reading the file again to list their lines ..." in err
