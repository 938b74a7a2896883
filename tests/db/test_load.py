"""Loading CSV files: every problem reported at once, with file, line, column, value and fix."""
from pathlib import Path

import pytest

from ratescape.errors import ValidationError
from ratescape.load import read_portfolio


def write(tmp_path: Path, name: str, text: str, encoding="utf-8") -> Path:
    p = tmp_path / name
    p.write_bytes(text.encode(encoding) if isinstance(text, str) else text)
    return p


def issues_of(projects: Path, flows: Path | None = None):
    with pytest.raises(ValidationError) as exc:
        read_portfolio(projects, flows)
    return exc.value.issues


def test_parametric_rows_expand_to_signed_lines(tmp_path):
    p = write(tmp_path, "p.csv", "project_id,name,first_cost,annual_benefit,benefit_basis,benefit_escalation,"
                                 "annual_cost,cost_basis,salvage,life\n"
                                 "A,Alpha,1000,300,nominal,0,50,real,100,3\n")
    pf = read_portfolio(p)
    cf = pf.cash_flows.sort("period", "kind")
    rows = cf.select("period", "amount", "basis", "kind").rows()
    assert rows == [(0, -1000.0, "real", "investment"),
                    (1, 300.0, "nominal", "benefit"), (1, -50.0, "real", "cost"),
                    (2, 300.0, "nominal", "benefit"), (2, -50.0, "real", "cost"),
                    (3, 300.0, "nominal", "benefit"), (3, -50.0, "real", "cost"), (3, 100.0, "real", "salvage")]


def test_cash_flow_defaults_and_kind_inference(tmp_path):
    p = write(tmp_path, "p.csv", "project_id,name\nB,Beta\n")
    c = write(tmp_path, "c.csv", "project_id,period,amount\nB,0,-100\nB,1,60\nB,2,-5\nB,2,70\n")
    cf = read_portfolio(p, c).cash_flows.sort("source_line")
    assert cf["basis"].to_list() == ["real"] * 4
    assert cf["escalation"].to_list() == [0.0] * 4
    assert cf["kind"].to_list() == ["investment", "benefit", "cost", "benefit"]
    assert cf["source_line"].to_list() == [2, 3, 4, 5]


def test_every_problem_is_reported_at_once(tmp_path):
    p = write(tmp_path, "p.csv", "project_id,name,group\nA,Alpha,g\nB,Beta,\nA,Again,\nb,Lower,\n")
    c = write(tmp_path, "c.csv",
              "project_id,period,amount,basis,escalation,kind\n"
              "A,0,-100,real,0,investment\n"
              "A,1.5,\"1,200.50\",real,0,benefit\n"
              "B,-1,12%,weird,-1.2,gift\n"
              "Z,1,nan,real,,\n"
              "B,2,$40,real,3%,\n")
    found = {(i.file.split("/")[-1], i.line, i.column, i.problem) for i in issues_of(p, c)}
    expected = {
        ("p.csv", 4, "project_id", "the same id already appears on line 2"),
        ("p.csv", 5, "project_id", "an id that differs only in letter case from 'B' already appears on line 3"),
        ("p.csv", 2, "group", "a group with only one member"),
        ("c.csv", 3, "period", "not a whole number"),
        ("c.csv", 3, "amount", "not a finite number"),
        ("c.csv", 4, "period", "less than 0"),
        ("c.csv", 4, "amount", "not a finite number"),
        ("c.csv", 4, "basis", "unknown value"),
        ("c.csv", 4, "escalation", "a rate of -100 % or less"),
        ("c.csv", 4, "kind", "unknown value"),
        ("c.csv", 5, "amount", "not a finite number"),
        ("c.csv", 5, "project_id", "cash flows for a project not in the projects file"),
        ("c.csv", 6, "amount", "not a finite number"),
        ("c.csv", 6, "escalation", "not a finite number"),
    }
    assert expected <= found, expected - found


def test_messages_name_the_fix(tmp_path):
    p = write(tmp_path, "p.csv", "project_id,name\nA,Alpha\n")
    c = write(tmp_path, "c.csv", "project_id,period,amount,escalation\nA,0,\"1,200.50\",3%\nA,1,1e999,\nA,2,€5,\nA,3,\"2,5\",\n")
    text = str(ValidationError(issues_of(p, c)))
    assert "line 2, column 'amount': not a finite number (value '1,200.50'). Fix: remove the thousands separators" in text
    assert "line 2, column 'escalation': not a finite number (value '3%'). Fix: write rates as fractions without a percent sign (3% -> 0.03)" in text
    assert "line 3, column 'amount': not a finite number (value '1e999'). Fix:" in text
    assert "line 4, column 'amount': not a finite number (value '€5'). Fix: remove the currency symbol" in text
    assert "line 5, column 'amount': not a finite number (value '2,5'). Fix: use '.' as the decimal mark" in text
    assert "line 2, column 'project_id': all of the project's cash flows are zero (value 'A'). Fix:" in text
    # the count is exact: five bad cells and the project left without a non-zero flow
    assert text.startswith("6 problems found in the input; nothing was written.\n"), text
    assert len(text.splitlines()) == 1 + 6, text


@pytest.mark.parametrize("header,problem,fix_fragment", [
    ("project_id,nmae\n", "unknown column", "rename it to 'name'"),
    ("project_id\n", "required column 'name' is missing", "add a 'name' column"),
    ("project_id;name\n", "the file uses semicolons as delimiters", "comma-separated"),
    ("project_id,name,colour\n", "unknown column", "remove the column"),
])
def test_header_problems(tmp_path, header, problem, fix_fragment):
    p = write(tmp_path, "p.csv", header + "A,Alpha\n")
    issues = issues_of(p)
    assert any(i.line == 1 and problem in i.problem and fix_fragment in i.fix for i in issues), issues


def test_empty_and_header_only_files(tmp_path):
    assert "the file is empty" in issues_of(write(tmp_path, "e.csv", ""))[0].problem
    assert "header but no data rows" in issues_of(write(tmp_path, "h.csv", "project_id,name\n"))[0].problem


def test_byte_order_mark_and_windows_line_endings_are_accepted_with_a_note(tmp_path):
    p = write(tmp_path, "p.csv", b"\xef\xbb\xbfproject_id,name,first_cost,annual_benefit,life\r\nA,Alpha,100,40,3\r\n")
    pf = read_portfolio(p)
    assert pf.projects["project_id"].to_list() == ["A"]
    assert any("byte-order mark" in n for n in pf.notes)


def test_non_utf8_bytes_are_located(tmp_path):
    p = write(tmp_path, "p.csv", b"project_id,name,first_cost,annual_benefit,life\nA,Caf\xe9,100,40,3\n")
    issues = issues_of(p)
    assert issues[0].problem == "invalid UTF-8 bytes" and issues[0].line == 2


def test_structure_checks(tmp_path):
    p = write(tmp_path, "p.csv", "project_id,name,requires,first_cost,annual_benefit,life\n"
                                 "A,Alpha,B,10,5,3\nB,Beta,C,10,5,3\nC,Gamma,A,10,5,3\nD,Delta,Q,10,5,3\n"
                                 "E,Eps,,,,\nF,Phi,,10,5,\n")
    problems = {(i.line, i.problem) for i in issues_of(p)}
    assert (5, "requires an unknown project") in problems
    assert any(pr == "'requires' dependencies form a cycle" for _, pr in problems)
    assert (6, "project has no cash flows") in problems
    assert (7, "parametric amounts given without a life") in problems


def test_all_zero_flows_and_both_descriptions_are_refused(tmp_path):
    p = write(tmp_path, "p.csv", "project_id,name,first_cost,annual_benefit,life\nA,Alpha,,,\nB,Beta,10,5,3\n")
    c = write(tmp_path, "c.csv", "project_id,period,amount\nA,0,0\nA,1,0\nB,0,-10\n")
    problems = {(i.line, i.problem) for i in issues_of(p, c)}
    assert (2, "all of the project's cash flows are zero") in problems
    assert (3, "project has both parametric amounts and rows in the cash-flow file") in problems


def test_absurd_periods_are_refused(tmp_path):
    p = write(tmp_path, "p.csv", "project_id,name\nA,Alpha\n")
    c = write(tmp_path, "c.csv", "project_id,period,amount\nA,0,-10\nA,1000000,50\n")
    issues = issues_of(p, c)
    assert any(i.column == "period" and i.problem == "greater than 1200" for i in issues)
