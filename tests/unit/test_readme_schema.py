"""The README's "Database schema" documents every public table, view and column of store/schema.py.

BRIEF §8: the tables and columns are the product's public interface, "documented in the README".
This test parses the DDL the code runs, so a column added without a line in the README fails here.
"""
from __future__ import annotations

import re
from pathlib import Path

from ratescape.store.schema import TABLES, VIEWS

README = Path(__file__).resolve().parents[2] / "README.md"
# physical or bookkeeping tables the README names as internal (and says what to read instead)
INTERNAL = {"meta", "result_rows_pw", "result_rows_after_tax", "result_rows_full", "annual_factors"}


def _schema_section() -> str:
    text = README.read_text(encoding="utf-8")
    start = text.index("\n## Database schema")
    return text[start:text.index("\n## ", start + 5)]


def _columns(ddl: str) -> list[str]:
    body = ddl[ddl.index("(") + 1:ddl.rindex(")")]
    names = []
    for part in re.split(r",\s*(?![^()]*\))", body):
        word = part.split()[0]
        if word.upper() not in ("PRIMARY", "UNIQUE"):
            names.append(word)
    return names


def _view_columns(ddl: str) -> list[str]:
    select = ddl[ddl.index("SELECT") + 6:ddl.index("FROM")]
    return [re.split(r"\bAS\b|\.", part)[-1].strip().split()[-1] for part in re.split(r",(?![^()]*\))", select)]


def test_column_parsers_read_the_ddl():
    assert _columns(TABLES["run_notes"]) == ["run_id", "topic", "note"]
    assert _view_columns(VIEWS["results"]) == ["run_id", "project_id", "scenario_id", "present_worth", "annual_worth",
                                               "accepted", "profitability_index", "present_worth_before_tax",
                                               "project_key"]


def test_every_public_table_and_column_is_documented():
    section = _schema_section()
    public = {name: _columns(ddl) for name, ddl in TABLES.items() if name not in INTERNAL}
    public.update({name: _view_columns(ddl) for name, ddl in VIEWS.items()})
    missing = []
    for name, columns in public.items():
        if f"**`{name}`**" not in section:
            missing.append(name)
        missing += [f"{name}.{c}" for c in columns if f"`{c}`" not in section]
    assert not missing, f"not documented in README 'Database schema': {missing}"


def test_internal_tables_are_named_as_internal_and_nothing_else_is():
    section = _schema_section()
    internal = section[section.index("**Internal, not part of the interface**"):section.index("\n### ")]
    for name in INTERNAL:
        assert f"`{name}`" in internal, name
    assert set(TABLES) - INTERNAL, "every table would be internal"
    assert "`result_rows`" not in internal.split("Read")[0], "result_rows (the view) is public"


def test_schema_cells_are_short_enough_to_read():
    # the former single-table layout had cells of about 700 characters
    rows = [line for line in _schema_section().splitlines() if line.startswith("|")]
    assert rows
    longest = max(max(len(cell.strip()) for cell in row.strip("|").split("|")) for row in rows)
    assert longest <= 200, longest
