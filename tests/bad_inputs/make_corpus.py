"""Write the bad-input corpus (one fault per file) and its manifest.

Run from the repository root to regenerate after changing a case:

    .venv/bin/python tests/bad_inputs/make_corpus.py

Every file is small and invented. The manifest (``manifest.toml``) lists, per
case: the file's role (``projects``, ``cash_flows``, ``grid`` or ``flags``),
the good companion files from ``good/`` it is paired with, the expected
outcome (``refused``, or ``repaired`` with a note) and the fragments the
message must hold (file name, line, column, value and the fix). A case may
carry ``lead_fix``: a known gap in a module outside the loader, tested as a
strict expected failure until it is fixed.
"""
from __future__ import annotations

from pathlib import Path

HERE = Path(__file__).parent
GOOD = HERE / "good"

PROJECT_HEADER = ("project_id,name,group,requires,mandatory,category,first_cost,annual_benefit,benefit_basis,"
                  "benefit_escalation,annual_cost,cost_basis,cost_escalation,salvage,life")
PROJECT_ROWS = [  # lines 2..6
    "P1,Pump station upgrade,,,,water,1000,260,real,0,40,real,0.01,100,6",
    "P2,Depot roof (steel),depot,,,buildings,800,200,nominal,0,,,,,6",
    "P3,Depot roof (membrane),depot,,,buildings,650,170,real,0,,,,,5",
    "P4,Bridge deck repair,,P1,,roads,,,,,,,,,",
    "P5,Meter replacement,,,,water,,,,,,,,,",
]
FLOW_HEADER = "project_id,period,amount,basis,escalation,kind"
FLOW_ROWS = [  # lines 2..11
    "P4,0,-1200,real,0,investment",
    "P4,1,300,real,0.01,benefit",
    "P4,2,300,real,0.01,benefit",
    "P4,3,300,real,0.01,benefit",
    "P4,4,420,real,0.01,benefit",
    "P5,0,-500,nominal,0,",
    "P5,1,150,nominal,0,",
    "P5,2,150,nominal,0,",
    "P5,3,150,nominal,0,",
    "P5,4,150,nominal,0,",
]
GRID = """# invented grid for the bad-input tests
[grid]
discount_basis = "nominal"
discount_rates = { start = 0.0, stop = 0.2, count = 5 }
inflation = { start = 0.0, stop = 0.1, count = 3 }
base = { discount_rate = 0.1, inflation = 0.05 }
"""

CASES: list[dict] = []


def lines(header: str, rows: list[str], changes: dict[int, str | None] | None = None,
          extra: list[str] | None = None) -> str:
    """Rows with line numbers (header = 1) replaced (None deletes), plus extra rows at the end."""
    out = [header] + list(rows)
    for line, text in sorted((changes or {}).items(), reverse=True):
        if text is None:
            del out[line - 1]
        else:
            out[line - 1] = text
    return "\n".join(out + (extra or [])) + "\n"


def project_row(line: int, **cells) -> str:
    """The good projects row on ``line`` with some cells replaced."""
    names = PROJECT_HEADER.split(",")
    values = PROJECT_ROWS[line - 2].split(",")
    for k, v in cells.items():
        values[names.index(k)] = v
    return ",".join(values)


def flow_row(line: int, **cells) -> str:
    names = FLOW_HEADER.split(",")
    values = FLOW_ROWS[line - 2].split(",")
    for k, v in cells.items():
        values[names.index(k)] = v
    return ",".join(values)


def case(cid: str, role: str, content, expect: list[str], *, fault: str, outcome: str = "refused",
         lead_fix: str | None = None, args: list[str] | None = None) -> None:
    ext = {"projects": "csv", "cash_flows": "csv", "grid": "toml", "flags": None}[role]
    entry = {"id": cid, "role": role, "fault": fault, "outcome": outcome, "expect": expect}
    if ext:
        entry["file"] = f"{cid}.{ext}"
        data = content.encode("utf-8") if isinstance(content, str) else content
        (HERE / entry["file"]).write_bytes(data)
    if role == "projects":
        entry["pair"] = {"cash_flows": "good/cash_flows.csv"}
    elif role == "cash_flows":
        entry["pair"] = {"projects": "good/projects.csv"}
    if args:
        entry["args"] = args
    if lead_fix:
        entry["lead_fix"] = lead_fix
    CASES.append(entry)


def P(changes=None, extra=None, header=PROJECT_HEADER):
    return lines(header, PROJECT_ROWS, changes, extra)


def C(changes=None, extra=None, header=FLOW_HEADER):
    return lines(header, FLOW_ROWS, changes, extra)


def build() -> None:
    GOOD.mkdir(exist_ok=True)
    (GOOD / "projects.csv").write_text(P())
    (GOOD / "cash_flows.csv").write_text(C())
    (GOOD / "grid.toml").write_text(GRID)
    for old in HERE.glob("*_*.*"):
        if old.suffix in (".csv", ".toml") and old.name != "manifest.toml":
            old.unlink()
    CASES.clear()
    fixed = "Fix:"

    # ---- headers -----------------------------------------------------------------------------
    case("p_missing_header_name", "projects",
         P(header=PROJECT_HEADER.replace(",name,", ",title,")),
         ["p_missing_header_name.csv", "line 1", "column 'title'", "value 'title'", "unknown column",
          "column 'name'", "required column 'name' is missing", "Fix: add a 'name' column"],
         fault="the required header 'name' is missing (the column is called 'title')")
    case("p_misspelt_header", "projects", P(header=PROJECT_HEADER.replace("annual_benefit", "anual_benefit")),
         ["p_misspelt_header.csv", "line 1", "column 'anual_benefit'", "value 'anual_benefit'",
          "unknown column", "Fix: rename it to 'annual_benefit'"], fault="misspelt header")
    case("c_misspelt_header", "cash_flows", C(header=FLOW_HEADER.replace("period", "perod")),
         ["c_misspelt_header.csv", "line 1", "column 'perod'", "value 'perod'", "Fix: rename it to 'period'",
          "required column 'period' is missing"], fault="misspelt required header")
    case("c_missing_amount_column", "cash_flows",
         "project_id,period,basis\n" + "\n".join(r.split(",")[0] + "," + r.split(",")[1] + "," + r.split(",")[3]
                                                 for r in FLOW_ROWS) + "\n",
         ["c_missing_amount_column.csv", "line 1", "column 'amount'", "required column 'amount' is missing",
          "Fix: add a 'amount' column"], fault="required column missing")
    case("p_extra_column", "projects", lines(PROJECT_HEADER + ",colour", [r + ",blue" for r in PROJECT_ROWS]),
         ["p_extra_column.csv", "line 1", "column 'colour'", "value 'colour'", "unknown column",
          "Fix: remove the column"], fault="an extra, unknown column")
    case("c_extra_column", "cash_flows", lines(FLOW_HEADER + ",note", [r + ",x" for r in FLOW_ROWS]),
         ["c_extra_column.csv", "line 1", "column 'note'", "value 'note'", "unknown column", "Fix: remove the column"],
         fault="an extra, unknown column")
    case("p_duplicate_header", "projects",
         lines(PROJECT_HEADER + ",life", [r + ",6" for r in PROJECT_ROWS]),
         ["p_duplicate_header.csv", "line 1", "column 'life'", "header 'life' appears twice",
          "Fix: keep one column of that name"], fault="a header given twice")

    # ---- empty, header only, BOM, CRLF, delimiters, encoding -------------------------------------
    case("p_empty", "projects", "", ["p_empty.csv", "the file is empty", "Fix: export the table with a header line: project_id,name"],
         fault="empty file")
    case("c_empty", "cash_flows", "", ["c_empty.csv", "the file is empty", "Fix: export the table with a header line"],
         fault="empty file")
    case("p_header_only", "projects", PROJECT_HEADER + "\n",
         ["p_header_only.csv", "line 2", "the file has a header but no data rows", "Fix: add at least one data row"],
         fault="header line only")
    case("c_header_only", "cash_flows", FLOW_HEADER + "\n",
         ["c_header_only.csv", "line 2", "header but no data rows", "Fix: add at least one data row"],
         fault="header line only")
    case("p_bom", "projects", b"\xef\xbb\xbf" + P().encode(),
         ["p_bom.csv", "byte-order mark was found at the start and ignored"], outcome="repaired",
         fault="UTF-8 byte-order mark (accepted with a note)")
    case("c_bom", "cash_flows", b"\xef\xbb\xbf" + C().encode(),
         ["c_bom.csv", "byte-order mark was found at the start and ignored"], outcome="repaired",
         fault="UTF-8 byte-order mark (accepted with a note)")
    case("p_crlf", "projects", P().replace("\n", "\r\n"),
         ["p_crlf.csv", "Windows line endings (CR LF) were found and accepted"], outcome="repaired",
         fault="Windows line endings (accepted with a note)")
    case("c_crlf", "cash_flows", C().replace("\n", "\r\n"),
         ["c_crlf.csv", "Windows line endings (CR LF) were found and accepted"], outcome="repaired",
         fault="Windows line endings (accepted with a note)")
    case("c_semicolon_decimal_comma", "cash_flows",
         C().replace(",", ";").replace(";0.01;", ";0,01;"),
         ["c_semicolon_decimal_comma.csv", "line 1", "value 'project_id;period;amount;basis;escalation;kind'",
          "the file uses semicolons as delimiters", "Fix: export it as comma-separated values (and use '.' as the decimal mark)"],
         fault="semicolon delimiters with decimal commas (a European spreadsheet export)")
    case("p_semicolon", "projects", P().replace(",", ";"),
         ["p_semicolon.csv", "line 1", "semicolons as delimiters", "Fix: export it as comma-separated values"],
         fault="semicolon delimiters")
    case("c_tabs", "cash_flows", C().replace(",", "\t"),
         ["c_tabs.csv", "line 1", "tabs as delimiters", "Fix: export it as comma-separated values"],
         fault="tab delimiters")
    case("p_non_utf8", "projects", P({3: project_row(3, name="Dépôt roof")}).encode("latin-1"),
         ["p_non_utf8.csv", "line 3", "value 'e9 70 f4 74'", "invalid UTF-8 bytes", "Fix: save the file as UTF-8"],
         fault="Latin-1 bytes (é) in a name")
    case("c_non_utf8", "cash_flows", C().encode() .replace(b"P5,3,150", b"P5,3,\xa3150"),
         ["c_non_utf8.csv", "line 10", "value 'a3 31 35 30'", "invalid UTF-8 bytes", "Fix: save the file as UTF-8"],
         fault="a Latin-1 pound sign")
    case("p_header_non_utf8", "projects", P().encode().replace(b"category", b"cat\xe9gorie", 1),
         ["p_header_non_utf8.csv", "line 1", "the header is not UTF-8 text", "Fix: save the file as UTF-8"],
         fault="non-UTF-8 bytes in the header")

    # ---- row shape ------------------------------------------------------------------------------
    case("c_ragged_too_many", "cash_flows", C({4: FLOW_ROWS[2] + ",extra"}),
         ["c_ragged_too_many.csv", "line 4", "value 'P4,2,300,real,0.01,benefit,extra'",
          "7 fields where the header has 6", "Fix: make every line have the same number of comma-separated fields"],
         fault="a row with too many fields")
    case("c_ragged_too_few", "cash_flows", C({7: "P5,0,-500"}),
         ["c_ragged_too_few.csv", "line 7", "value 'P5,0,-500'", "3 fields where the header has 6",
          "Fix: make every line have the same number of comma-separated fields"],
         fault="a row with too few fields")
    case("p_ragged_unquoted_comma", "projects", P({2: project_row(2, name="Pump station, upgrade")}),
         ["p_ragged_unquoted_comma.csv", "line 2", "16 fields where the header has 15",
          "quote cells that contain commas"], fault="an unquoted comma inside a name")
    case("p_embedded_newline", "projects", P({4: project_row(4, name='"Depot roof\n(membrane)"')}),
         ["p_embedded_newline.csv", "line 4", "value 'P3,Depot roof\\n(membrane)", "a quoted cell holds a line break",
          "Fix: remove the line break from the cell"], fault="a quoted name holding a line break (refused)")
    case("c_unclosed_quote", "cash_flows", C({5: 'P4,3,"300,real,0.01,benefit'}),
         ["c_unclosed_quote.csv", "line 5", "value 'P4,3,\"300,real,0.01,benefit'", "malformed quoting", "Fix: quote a whole cell"],
         fault="a quote that never closes")

    # ---- numbers ------------------------------------------------------------------------------
    num = "Fix: write an amount of money using digits"
    case("c_decimal_comma", "cash_flows", C({3: flow_row(3, amount='"300,5"')}),
         ["c_decimal_comma.csv", "line 3", "column 'amount'", "value '300,5'", "not a finite number",
          "Fix: use '.' as the decimal mark (1,5 -> 1.5)"], fault="decimal comma in a comma-separated file")
    case("c_thousands_separator", "cash_flows", C({2: flow_row(2, amount='"-1,200.50"')}),
         ["c_thousands_separator.csv", "line 2", "column 'amount'", "value '-1,200.50'",
          "Fix: remove the thousands separators (1,200.50 -> 1200.50)"], fault="thousands separator, quoted")
    case("p_thousands_separator", "projects", P({2: project_row(2, first_cost='"1,000"')}),
         ["p_thousands_separator.csv", "line 2", "column 'first_cost'", "value '1,000'",
          "Fix: remove the thousands separators"], fault="thousands separator in a parametric amount")
    case("c_currency_symbol", "cash_flows", C({8: flow_row(8, amount="$150")}),
         ["c_currency_symbol.csv", "line 8", "column 'amount'", "value '$150'", "Fix: remove the currency symbol"],
         fault="currency symbol")
    case("p_currency_symbol", "projects", P({3: project_row(3, annual_benefit="€200")}),
         ["p_currency_symbol.csv", "line 3", "column 'annual_benefit'", "value '€200'", "Fix: remove the currency symbol"],
         fault="currency symbol in a parametric amount")
    case("c_percent_escalation", "cash_flows", C({3: flow_row(3, escalation="1%")}),
         ["c_percent_escalation.csv", "line 3", "column 'escalation'", "value '1%'",
          "Fix: write rates as fractions without a percent sign (3% -> 0.03)"], fault="percent sign in a rate")
    case("p_percent_escalation", "projects", P({2: project_row(2, cost_escalation="1%")}),
         ["p_percent_escalation.csv", "line 2", "column 'cost_escalation'", "value '1%'",
          "Fix: write rates as fractions without a percent sign"], fault="percent sign in a rate")
    case("c_nan_amount", "cash_flows", C({9: flow_row(9, amount="NaN")}),
         ["c_nan_amount.csv", "line 9", "column 'amount'", "value 'NaN'", "not a finite number",
          "Fix: replace it with a finite number"], fault="NaN amount")
    case("c_inf_amount", "cash_flows", C({5: flow_row(5, amount="inf")}),
         ["c_inf_amount.csv", "line 5", "column 'amount'", "value 'inf'", "Fix: replace it with a finite number"],
         fault="infinite amount")
    case("c_overflow_amount", "cash_flows", C({5: flow_row(5, amount="1e999")}),
         ["c_overflow_amount.csv", "line 5", "column 'amount'", "value '1e999'", "not a finite number", fixed],
         fault="an amount that overflows a double")
    case("p_inf_life", "projects", P({2: project_row(2, life="inf")}),
         ["p_inf_life.csv", "line 2", "column 'life'", "value 'inf'", "Fix: replace it with a finite number"],
         fault="infinite life")
    case("c_blank_amount", "cash_flows", C({6: flow_row(6, amount="")}),
         ["c_blank_amount.csv", "line 6", "column 'amount'", "blank cell", "Fix: fill in an amount of money"],
         fault="blank required cell")
    case("c_blank_project_id", "cash_flows", C({6: flow_row(6, project_id="")}),
         ["c_blank_project_id.csv", "line 6", "column 'project_id'", "blank id", "Fix: give every row an id"],
         fault="blank id")
    case("c_text_amount", "cash_flows", C({4: flow_row(4, amount="three hundred")}),
         ["c_text_amount.csv", "line 4", "column 'amount'", "value 'three hundred'", num],
         fault="text in a number field")
    case("c_text_period", "cash_flows", C({4: flow_row(4, period="two")}),
         ["c_text_period.csv", "line 4", "column 'period'", "value 'two'",
          "Fix: write a period index (0 = now) using digits"], fault="text in the period field")
    case("p_text_life", "projects", P({3: project_row(3, life="six")}),
         ["p_text_life.csv", "line 3", "column 'life'", "value 'six'", "Fix: write a life in periods using digits"],
         fault="text in the life field")

    # ---- periods ------------------------------------------------------------------------------
    case("c_period_negative", "cash_flows", C({2: flow_row(2, period="-1")}),
         ["c_period_negative.csv", "line 2", "column 'period'", "value '-1'", "less than 0",
          "Fix: write a period index (0 = now) of at least 0"], fault="negative period")
    case("c_period_fractional", "cash_flows", C({3: flow_row(3, period="1.5")}),
         ["c_period_fractional.csv", "line 3", "column 'period'", "value '1.5'", "not a whole number",
          "Fix: write a period index (0 = now) without a fraction"], fault="fractional period")
    case("c_period_huge", "cash_flows", C({11: flow_row(11, period="1000000")}),
         ["c_period_huge.csv", "line 11", "column 'period'", "value '1000000'", "greater than 1200",
          "Fix: use at most 1200"], fault="absurdly large period (10^6)")
    case("p_life_huge", "projects", P({2: project_row(2, life="1000000")}),
         ["p_life_huge.csv", "line 2", "column 'life'", "value '1000000'", "greater than 1200", "Fix: use at most 1200"],
         fault="absurdly large life (10^6)")
    case("p_life_fractional", "projects", P({4: project_row(4, life="4.5")}),
         ["p_life_fractional.csv", "line 4", "column 'life'", "value '4.5'", "not a whole number",
          "Fix: write a life in periods without a fraction"], fault="fractional life")
    case("p_life_zero", "projects", P({4: project_row(4, life="0")}),
         ["p_life_zero.csv", "line 4", "column 'life'", "value '0'", "less than 1", "Fix: write a life in periods of at least 1"],
         fault="zero life")
    case("p_negative_first_cost", "projects", P({2: project_row(2, first_cost="-1000")}),
         ["p_negative_first_cost.csv", "line 2", "column 'first_cost'", "value '-1000'", "negative amount",
          "Fix: give parametric amounts as positive numbers"], fault="negative parametric amount")

    # ---- ids and structure --------------------------------------------------------------------
    case("p_duplicate_id", "projects", P({6: project_row(6, project_id="P4")}),
         ["p_duplicate_id.csv", "line 6", "column 'project_id'", "value 'P4'", "the same id already appears on line 5",
          "Fix: give every project a unique id"], fault="duplicate project id")
    case("p_duplicate_id_case", "projects", P(extra=["p5,Meter replacement (copy),,,,water,100,30,real,0,,,,,4"]),
         ["p_duplicate_id_case.csv", "line 7", "column 'project_id'", "value 'p5'",
          "an id that differs only in letter case from 'P5' already appears on line 6",
          "Fix: give every project a unique id (ids are compared ignoring case)"],
         fault="duplicate project id differing only in case")
    case("p_blank_id", "projects", P({3: project_row(3, project_id="")}),
         ["p_blank_id.csv", "line 3", "column 'project_id'", "blank id", "Fix: give every row an id"],
         fault="blank project id")
    case("c_unknown_project", "cash_flows", C(extra=["P9,0,-100,real,0,"]),
         ["c_unknown_project.csv", "line 12", "column 'project_id'", "value 'P9'",
          "cash flows for a project not in the projects file", "Fix: add 'P9' to projects.csv or correct the id"],
         fault="cash flows for an unknown project")
    case("c_project_without_flows", "cash_flows", C({7: None, 8: None, 9: None, 10: None, 11: None}),
         ["projects.csv", "line 6", "column 'project_id'", "value 'P5'", "project has no cash flows",
          "Fix: give first_cost/annual_benefit/annual_cost/salvage and life, or rows in c_project_without_flows.csv"],
         fault="a project (P5) with no cash flows")
    case("p_project_without_flows", "projects", P(extra=["P6,Unfunded idea,,,,misc,,,,,,,,,"]),
         ["p_project_without_flows.csv", "line 7", "column 'project_id'", "value 'P6'", "project has no cash flows",
          "Fix: give first_cost/annual_benefit/annual_cost/salvage and life"],
         fault="a project with neither parametric amounts nor cash-flow rows")
    case("c_all_zero", "cash_flows", C({k: flow_row(k, amount="0") for k in range(7, 12)}),
         ["projects.csv", "line 6", "column 'project_id'", "value 'P5'", "all of the project's cash flows are zero",
          "Fix: give the project's cash flows or remove it"], fault="all-zero flows of one project")
    case("p_both_descriptions", "projects", P({5: project_row(5, first_cost="10", annual_benefit="5", life="3")}),
         ["p_both_descriptions.csv", "line 5", "column 'first_cost'", "value 'P4'",
          "project has both parametric amounts and rows in the cash-flow file", "Fix: describe each project one way"],
         fault="parametric columns and cash-flow rows for one project")
    case("p_life_missing", "projects", P({2: project_row(2, life="")}),
         ["p_life_missing.csv", "line 2", "column 'life'", "parametric amounts given without a life",
          "Fix: give the life in periods"], fault="parametric amounts without a life")
    case("c_unknown_basis", "cash_flows", C({3: flow_row(3, basis="constant")}),
         ["c_unknown_basis.csv", "line 3", "column 'basis'", "value 'constant'", "unknown value",
          "Fix: use one of: real, nominal"], fault="unknown basis")
    case("p_unknown_basis", "projects", P({3: project_row(3, benefit_basis="current")}),
         ["p_unknown_basis.csv", "line 3", "column 'benefit_basis'", "value 'current'", "unknown value",
          "Fix: use one of: real, nominal"], fault="unknown benefit basis")
    case("c_unknown_kind", "cash_flows", C({4: flow_row(4, kind="grant")}),
         ["c_unknown_kind.csv", "line 4", "column 'kind'", "value 'grant'", "unknown value",
          "Fix: use one of: investment, benefit, cost, salvage, other"], fault="unknown kind")
    case("c_escalation_minus_100", "cash_flows", C({5: flow_row(5, escalation="-1")}),
         ["c_escalation_minus_100.csv", "line 5", "column 'escalation'", "value '-1'", "a rate of -100 % or less",
          "Fix: give a fraction greater than -1"], fault="escalation of exactly -100 %")
    case("p_escalation_below_minus_100", "projects", P({2: project_row(2, benefit_escalation="-1.5")}),
         ["p_escalation_below_minus_100.csv", "line 2", "column 'benefit_escalation'", "value '-1.5'",
          "a rate of -100 % or less", "Fix: give a fraction greater than -1"], fault="escalation below -100 %")
    case("p_mandatory_word", "projects", P({3: project_row(3, mandatory="maybe")}),
         ["p_mandatory_word.csv", "line 3", "column 'mandatory'", "value 'maybe'", "not true or false",
          "Fix: write true or false"], fault="a word that is not true/false")
    case("p_group_one_member", "projects", P({4: project_row(4, group="depot-b")}),
         ["p_group_one_member.csv", "line 3", "column 'group'", "value 'depot'", "a group with only one member",
          "Fix: give at least two mutually exclusive alternatives the same group"],
         fault="a group with one member (the other member's group is misspelt)")
    case("p_requires_cycle", "projects", P({2: project_row(2, requires="P4")}),
         ["p_requires_cycle.csv", "line 2", "column 'requires'", "value 'P1 -> P4 -> P1'",
          "'requires' dependencies form a cycle", "Fix: break the cycle"], fault="a requires cycle P1 -> P4 -> P1")
    case("p_requires_unknown", "projects", P({5: project_row(5, requires="p1")}),
         ["p_requires_unknown.csv", "line 5", "column 'requires'", "value 'p1'", "requires an unknown project",
          "Fix: did you mean 'P1'?"], fault="requires an unknown id (wrong case)")
    case("p_requires_self", "projects", P({5: project_row(5, requires="P4")}),
         ["p_requires_self.csv", "line 5", "column 'requires'", "value 'P4'", "a project requires itself",
          "Fix: remove the self-reference"], fault="a project that requires itself")

    # ---- grid TOML files ---------------------------------------------------------------------
    def grid(replace: str, by: str) -> str:
        assert replace in GRID
        return GRID.replace(replace, by)

    gfix = "Fix: rates are fractions greater than -1"
    case("g_discount_minus_100", "grid", grid("start = 0.0, stop = 0.2, count = 5", "start = -1.0, stop = 0.2, count = 5"),
         ["g_discount_minus_100.toml", "grid.discount_rates", "-1", "-100 % or less", gfix],
         fault="a discount rate of -100 %")
    case("g_inflation_below_minus_100", "grid", grid("start = 0.0, stop = 0.1, count = 3", "values = [-1.5, 0.0, 0.05]"),
         ["g_inflation_below_minus_100.toml", "grid.inflation", "-1.5", "-100 % or less", gfix],
         fault="an inflation rate below -100 %")
    case("g_reversed_range", "grid", grid("start = 0.0, stop = 0.2, count = 5", "start = 0.2, stop = 0.0, count = 5"),
         ["g_reversed_range.toml", "grid.discount_rates", "0.2:0.0", "runs backwards", "Fix: give START below STOP"],
         fault="a reversed range")
    case("g_zero_step", "grid", grid("start = 0.0, stop = 0.1, count = 3", "start = 0.05, stop = 0.05, count = 3"),
         ["g_zero_step.toml", "grid.inflation", "a zero step", "Fix: use COUNT 1 or widen the range"],
         fault="a zero step (start = stop, count > 1)")
    case("g_count_zero", "grid", grid("start = 0.0, stop = 0.2, count = 5", "start = 0.0, stop = 0.2, count = 0"),
         ["g_count_zero.toml", "grid.discount_rates", "COUNT must be at least 1, got 0", "Fix:"],
         fault="a count of zero")
    case("g_invalid_toml", "grid", grid("count = 3 }", "count = 3"),
         ["g_invalid_toml.toml", "invalid TOML", "line 5", "Fix: correct the line shown"], fault="invalid TOML (unclosed table)")
    case("g_unknown_key", "grid", grid('discount_basis = "nominal"', 'discount_basis = "nominal"\nmarr = 0.08'),
         ["g_unknown_key.toml", "unknown key grid.marr", "Fix: use discount_rates"], fault="an unknown key")
    case("g_percent_rates", "grid", grid("{ start = 0.0, stop = 0.2, count = 5 }", '"0%:20%:5"'),
         ["g_percent_rates.toml", "grid.discount_rates", "'0%:20%:5'", "Fix: give START:STOP:COUNT with rates as fractions"],
         fault="percent signs in a rate range")
    case("g_nan_rate", "grid", grid("start = 0.0, stop = 0.1, count = 3", "values = [nan, 0.05]"),
         ["g_nan_rate.toml", "grid.inflation", "nan", "non-finite value", "Fix: give finite fractions"],
         fault="NaN in a rate list")
    case("g_non_utf8", "grid", GRID.encode().replace(b"# invented", b"# invent\xe9"),
         ["g_non_utf8.toml", "not UTF-8", "Fix: save the file as UTF-8"], fault="non-UTF-8 bytes")
    case("g_base_unknown_axis", "grid", grid("base = { discount_rate = 0.1, inflation = 0.05 }",
                                            "base = { discount = 0.1, inflation = 0.05 }"),
         ["g_base_unknown_axis.toml", "unknown axis 'discount'", "Fix: use one of"], fault="base names an unknown axis")
    case("g_budget_negative", "grid", GRID + '[budget]\nperiods = { "0" = -5.0 }\n',
         ["g_budget_negative.toml", "budget", "-5.0", "non-negative amount", "Fix:"], fault="a negative budget")

    # ---- grid flags ------------------------------------------------------------------------
    case("f_discount_minus_100", "flags", None,
         ["--discount-rates", "-1", "-100 % or less", gfix], args=["--discount-rates", "-1:0.2:5"],
         fault="a discount rate of -100 % by flag")
    case("f_reversed_range", "flags", None,
         ["--inflation", "0.1:0.0", "runs backwards", "Fix: give START below STOP"], args=["--inflation", "0.1:0:3"],
         fault="a reversed range by flag")
    case("f_zero_step", "flags", None, ["--discount-rates", "a zero step", "Fix: use COUNT 1"],
         args=["--discount-rates", "0.1:0.1:4"], fault="a zero step by flag")
    case("f_percent_rates", "flags", None,
         ["--discount-rates", "'5%:10%:3'", "Fix: give START:STOP:COUNT with rates as fractions"],
         args=["--discount-rates", "5%:10%:3"], fault="percent signs in a rate flag")
    case("f_fractional_count", "flags", None, ["--inflation", "COUNT must be a whole number", "Fix:"],
         args=["--inflation", "0:0.1:2.5"], fault="a fractional count by flag")


    # ---- rates written as percentages (issue 14 part 8) ------------------------------------------
    pct = "looks like a percentage; did you mean"
    case("c_escalation_percent_typo", "cash_flows", C({3: flow_row(3, escalation="2")}),
         ["c_escalation_percent_typo.csv", "line 3", "column 'escalation'", "value '2'",
          "a rate of more than 100 % a period in size", "2 looks like a percentage; did you mean 0.02?",
          "--allow-extreme-rates"], fault="an escalation of 2 written for 2 %")
    case("p_escalation_percent_typo", "projects", P({2: project_row(2, cost_escalation="3")}),
         ["p_escalation_percent_typo.csv", "line 2", "column 'cost_escalation'", "value '3'",
          "3 looks like a percentage; did you mean 0.03?"], fault="a parametric escalation of 3 written for 3 %")
    case("p_escalation_negative_percent_typo", "projects", P({3: project_row(3, benefit_escalation="-5")}),
         ["p_escalation_negative_percent_typo.csv", "line 3", "column 'benefit_escalation'", "value '-5'",
          "a rate of -100 % or less", "-5 looks like a percentage; did you mean -0.05?"],
         fault="an escalation of -5 written for -5 %")
    case("g_percent_typo_inflation", "grid", grid("start = 0.0, stop = 0.1, count = 3", "start = 0.0, stop = 10.0, count = 3"),
         ["g_percent_typo_inflation.toml", "grid.inflation", "5 looks like a percentage; did you mean 0.05?",
          "allow_extreme_rates = true"], fault="an inflation range 0 to 10 written for 0 to 10 %")
    case("g_percent_typo_tax", "grid", GRID + "[tax]\nrate = 25\n",
         ["g_percent_typo_tax.toml", "tax.rate", "25 looks like a percentage; did you mean 0.25?"],
         fault="a tax rate of 25 written for 25 %")
    case("f_percent_typo_inflation", "flags", None,
         ["--inflation", "3 looks like a percentage; did you mean 0.03?", "--allow-extreme-rates"],
         args=["--inflation", "3"], fault="--inflation 3 written for 3 %")
    case("f_percent_typo_discount_range", "flags", None,
         ["--discount-rates", "5 looks like a percentage; did you mean 0.05?"],
         args=["--discount-rates", "5:10:3"], fault="--discount-rates 5:10:3 written for 5 % to 10 %")
    case("f_percent_typo_tax", "flags", None, ["--tax-rate", "25 looks like a percentage; did you mean 0.25?"],
         args=["--tax-rate", "25"], fault="--tax-rate 25 written for 25 %")

    # ---- amounts near the largest double (issue 17 item 6) ---------------------------------------
    case("c_amount_too_large", "cash_flows", C({5: flow_row(5, amount="1e300")}),
         ["c_amount_too_large.csv", "line 5", "column 'amount'", "value '1e300'", "an amount larger than 1e15 in size",
          "could not be discounted and summed in double precision", "Fix: give amounts of at most 1e15"],
         fault="an amount of 1e300 (finite, but beyond what can be discounted and summed)")
    case("p_amount_too_large", "projects", P({2: project_row(2, first_cost="5e16")}),
         ["p_amount_too_large.csv", "line 2", "column 'first_cost'", "value '5e16'", "larger than 1e15"],
         fault="a parametric first cost of 5e16")

    # ---- Unicode in ids and encodings (issue 17) -------------------------------------------------
    case("p_id_zero_width", "projects", P({3: project_row(3, project_id="P\u200b2")}),
         ["p_id_zero_width.csv", "line 3", "column 'project_id'", "an id holding an invisible or control character",
          "U+200B"], fault="a zero-width space inside an id")
    case("c_id_bidi_override", "cash_flows", C({7: flow_row(7, project_id="\u202eP5")}),
         ["c_id_bidi_override.csv", "line 7", "column 'project_id'", "invisible or control character", "U+202E"],
         fault="a right-to-left override in an id")
    case("p_id_control", "projects", P({4: project_row(4, project_id="P\x073")}),
         ["p_id_control.csv", "line 4", "column 'project_id'", "invisible or control character", "U+0007"],
         fault="a control character (BEL) in an id")
    case("p_duplicate_id_nfc", "projects", P(extra=["Cafe\u0301,Cafe (decomposed),,,,misc,100,30,real,0,,,,,4",
                                                    "Caf\u00e9,Cafe (composed),,,,misc,100,30,real,0,,,,,4"]),
         ["p_duplicate_id_nfc.csv", "line 8", "column 'project_id'",
          "the same after Unicode normalisation (NFC)", "already appears on line 7"],
         fault="two ids that differ only in Unicode normalisation")
    case("p_utf16_no_bom", "projects", P().encode("utf-16-le"),
         ["p_utf16_no_bom.csv", "line 1", "looks like UTF-16 (little-endian) text without a byte-order mark",
          "Fix: save the file as UTF-8"], fault="UTF-16 without a byte-order mark")
    case("c_utf16_bom", "cash_flows", C().encode("utf-16"),
         ["c_utf16_bom.csv", "line 1", "the file is UTF-16 text", "Fix: save the file as UTF-8"],
         fault="UTF-16 with a byte-order mark")

    # ---- every key of the grid TOML used or refused (issue 14 part 7) ----------------------------
    case("g_base_nominal_on_real_grid", "grid",
         grid('discount_basis = "nominal"', 'discount_basis = "real"'),
         ["g_base_nominal_on_real_grid.toml", "grid.base", "base discount_rate = 0.1 names a discount rate",
          "the grid's discount axis is real (real_rate)", "real_rate = 0.047619", "Fix:"],
         fault="base.discount_rate (nominal) on a real-basis grid")
    case("g_base_outside_grid", "grid", grid("discount_rate = 0.1,", "discount_rate = 0.5,"),
         ["g_base_outside_grid.toml", "grid.base", "base discount_rate = 0.5 lies outside", "0 to 0.2", "Fix:"],
         fault="a base outside the grid")
    case("g_weights_wrong_length", "grid", GRID + "[weights]\ninflation = [1, 2]\n",
         ["g_weights_wrong_length.toml", "[weights] inflation", "3 grid values", "Fix: give a list"],
         fault="weights for 2 of 3 inflation levels")
    case("g_weights_unknown_distribution", "grid",
         GRID + '[weights]\ninflation = { distribution = "lognormal", mean = 0.03, sd = 0.01 }\n',
         ["g_weights_unknown_distribution.toml", "[weights] inflation", "lognormal", "Fix:"],
         fault="an unknown weight distribution")
    case("g_sensitivity_unknown_input", "grid", GRID + "[sensitivity]\nwages = [0.9, 1.1]\n",
         ["g_sensitivity_unknown_input.toml", "[sensitivity]", "unknown input 'wages'", "Fix: use one of"],
         fault="an unknown sensitivity input")
    case("g_sensitivity_reversed", "grid", GRID + "[sensitivity]\ninflation = [0.1, 0.0]\n",
         ["g_sensitivity_reversed.toml", "[sensitivity] inflation must be [low, high]", "Fix:"],
         fault="a sensitivity range given high first")
    case("g_tax_unknown_key", "grid", GRID + "[tax]\nrate = 0.25\ncolour = \"red\"\n",
         ["g_tax_unknown_key.toml", "unknown key tax.colour", "Fix: use after_tax, rate"],
         fault="an unknown key under [tax]")
    case("g_budget_unknown_key", "grid", GRID + '[budget]\n"0" = 50e6\n',
         ["g_budget_unknown_key.toml", "unknown key budget.0", 'Fix: give budgets as periods ='],
         fault="a budget written without periods = {...} (it was ignored)")
    case("g_count_billion", "grid", grid("start = 0.0, stop = 0.1, count = 3", "start = 0.0, stop = 0.1, count = 1000000000"),
         ["g_count_billion.toml", "grid.inflation", "COUNT 1,000,000,000 is more than", "nothing was built", "Fix:"],
         fault="an axis count of a billion")
    case("g_periods_per_year_inf", "grid", GRID + "[time]\nperiods_per_year = inf\n",
         ["g_periods_per_year_inf.toml", "time.periods_per_year", "a finite number above 0", "Fix: 1 = years"],
         fault="infinite periods per year (discounting silently off)")
    case("f_count_billion", "flags", None, ["--discount-rates", "COUNT 1,000,000,000 is more than", "Fix:"],
         args=["--discount-rates", "0:0.2:1000000000"], fault="an axis count of a billion by flag")
    case("f_periods_per_year_inf", "flags", None, ["--periods-per-year", "a finite number above 0", "Fix:"],
         args=["--periods-per-year", "inf"], fault="--periods-per-year inf")
    case("f_keep_absurd", "flags", None, ["--keep", "thinned:99999999999", "only its first value", "Fix:"],
         args=["--keep", "thinned:99999999999"], fault="--keep thinned:K with an absurd K")
    case("f_tax_rate_before_tax", "flags", None, ["--tax-rate", "the run is before tax", "Fix:"],
         args=["--tax-rate", "0.25", "--before-tax"], fault="a tax rate on a before-tax run (it would be ignored)")

    write_manifest()


def _toml_value(v) -> str:
    if isinstance(v, str):
        return '"' + v.replace("\\", "\\\\").replace('"', '\\"').replace("\n", "\\n") + '"'
    if isinstance(v, list):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_toml_value(x)}" for k, x in v.items()) + " }"
    raise TypeError(v)


def write_manifest() -> None:
    out = ["# The bad-input corpus: one fault per file (generated by make_corpus.py; edit there).",
           "# role: which input the file is; pair: good companions from good/; outcome: refused or repaired;",
           "# expect: fragments the message must hold; lead_fix: a known gap outside the loader (strict xfail).", ""]
    for c in CASES:
        out.append("[[case]]")
        for k in ("id", "role", "file", "pair", "args", "outcome", "fault", "expect", "lead_fix"):
            if k in c:
                out.append(f"{k} = {_toml_value(c[k])}")
        out.append("")
    (HERE / "manifest.toml").write_text("\n".join(out))


if __name__ == "__main__":
    build()
    print(f"{len(CASES)} cases written to {HERE}")
