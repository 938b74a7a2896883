"""Run settings and loader inputs through the real command (issue 14 parts 7-8, issue 17 items 3, 6, Unicode, first-time user).

Each refusal is checked for its exit code, its exact message fragments (where, value, fix) and an
unchanged database; the accepted cases check what the run stored. The bad-input corpus
(tests/bad_inputs, run by test_bad_inputs.py) holds the one-fault files; this module holds the cases
that need a run's results, special files or several faults at once.
"""
from __future__ import annotations

import os
import shutil
import tracemalloc
from pathlib import Path

import duckdb
import pytest

from helpers import digest, load_good_corpus   # tests/ is on sys.path (conftest)
from helpers import run_cli as run

CORPUS = Path(__file__).resolve().parents[1] / "bad_inputs"
GRID_HEAD = '[grid]\ndiscount_rates = { start = 0.0, stop = 0.2, count = 5 }\ninflation = { start = 0.0, stop = 0.1, count = 3 }\n'


@pytest.fixture(scope="module")
def base_db(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("settings") / "base.duckdb"
    load_good_corpus(path)
    return path


@pytest.fixture
def db(base_db, tmp_path) -> Path:
    path = tmp_path / "plan.duckdb"
    shutil.copyfile(base_db, path)
    return path


def refused(db: Path, *args, expect: list[str]):
    before = digest(db)
    r = run("screen", "--db", db, *args)
    assert r.exit_code == 1, r.stderr
    assert r.stderr.startswith("Error: ") and "Traceback" not in r.stderr, r.stderr
    missing = [f for f in expect if f not in r.stderr]
    assert not missing, f"missing {missing} in:\n{r.stderr}"
    assert digest(db) == before, "a refused setting changed the database"
    return r


def grid_file(tmp_path: Path, text: str) -> Path:
    p = tmp_path / "grid.toml"
    p.write_text(text)
    return p


# ---- part A: every key of the grid TOML used or refused, one test per key category ------------------

@pytest.mark.parametrize("extra,expect", [
    # [grid]
    ('discount_basis = "real"\nbase = { discount_rate = 0.1, inflation = 0.05 }\n',
     ["grid.base: base discount_rate = 0.1 names a discount rate", "real_rate = 0.1 if that value is meant",
      # Fisher: (1.1 / 1.05) - 1 = 0.0476190 (Fisher 1930; common practice)
      "real_rate = 0.047619"]),
    ('base = { real_rate = 0.03, inflation = 0.05 }\n',
     ["grid.base: base real_rate = 0.03 names a real rate", "discount_rate = 0.0815"]),   # 1.03 x 1.05 - 1
    ('base = 0.1\n', ["grid.base must be a table of axis values", "Fix: e.g. base = {"]),
    ('base = { inflation = "high" }\n', ["base inflation must be a finite number", "'high'"]),
    ('allow_extreme_rates = "yes"\n', ["grid.allow_extreme_rates must be true or false"]),
    ('tax_rate = { values = [0.2, "x"] }\n', ["grid.tax_rate: values must be a list of numbers"]),
    ('cost_multiplier = { start = 1, stop = 2, count = 2.5 }\n', ["grid.cost_multiplier: count must be a whole number"]),
    # [time]
    ('[time]\nperiods_per_year = true\n', ["time.periods_per_year: periods per year must be a finite number", "True"]),
    ('[time]\nperiods_per_year = 1000\n', ["at most 365", "got 1000"]),
    ('[time]\ntimming = "end"\n', ["unknown key time.timming", "Fix: use timing or periods_per_year"]),
    # [budget]
    ('[budget]\nperiods = { "0" = true }\n', ["budget.periods must map period numbers to amounts"]),
    ('[budget]\nperiods = { "5000" = 1e6 }\n', ["budget.periods: budget for period 5000", "from 0 to 1200"]),
    # [tax]
    ('[tax]\nrate = 0.25\nafter_tax = "yes"\n', ["tax.after_tax must be true or false"]),
    ('[tax]\nafter_tax = false\nrate = 0.25\n', ["a tax rate is given but the run is before tax", "tax.after_tax"]),
    ('[tax]\nrate = 0.25\ndefault_method = "sum-of-digits"\n', ["tax.default_method must be one of straight-line"]),
    ('[tax]\nrate = 0.25\ninvestment_tax_credit = 10\n', ["10 looks like a percentage; did you mean 0.1?"]),
    # [weights]
    ('[weights]\ncolour = [1, 1]\n', ["[weights] names an unknown axis 'colour'"]),
    ('[weights]\ninflation = [1, -1, 1]\n', ["[weights] inflation (axis inflation, 3 grid values)", "Fix: give a list"]),
    ('[weights]\ninflation = { distribution = "normal", mean = 0.03 }\n', ["[weights] inflation", "missing ['sd']"]),
    ('[weights]\ninflation = { distribution = "normal", mean = 0.03, sd = 0.01, tails = "cut" }\n',
     ["tails must be 'fold' or 'truncate'"]),
    # [sensitivity]
    ('[sensitivity]\ninflation = [0.0]\n', ["[sensitivity] inflation must be [low, high]"]),
    ('[sensitivity]\ninflation = [0, 10]\n', ["[sensitivity] inflation has 10: 10 looks like a percentage"]),
    ('[sensitivity]\npct_changes = ["a"]\n', ["[sensitivity] pct_changes must be a list of finite changes"]),
    # [decisions]
    ('[decisions]\ntop_k = 0\n', ["grid.toml: [decisions]: [decisions] top_k must be a whole number of at least 1"]),
    # [results]
    ('[results]\nkeep = 5\n', ["results.keep must be text"]),
    ('[results]\nkeep = "thinned:x"\n', ["results.keep: 'thinned:x' is not a choice"]),
    # tables
    ('[colours]\nsky = "blue"\n', ["unknown table(s) ['colours']"]),
])
def test_every_grid_key_is_used_or_refused_with_file_key_and_fix(db, tmp_path, extra, expect):
    head = GRID_HEAD if not extra.startswith("discount_basis") else GRID_HEAD.replace("[grid]\n", "[grid]\n" + extra)
    text = head if extra.startswith("discount_basis") else (
        GRID_HEAD + extra if extra.startswith("[") else GRID_HEAD.replace("[grid]\n", "[grid]\n" + extra))
    path = grid_file(tmp_path, text)
    r = refused(db, "--grid", path, expect=expect)
    assert str(path) in r.stderr


def test_real_basis_base_is_the_real_rate_it_names(db, tmp_path):
    path = grid_file(tmp_path, '[grid]\ndiscount_basis = "real"\ndiscount_rates = { start = 0.0, stop = 0.1, count = 11 }\n'
                               'inflation = { values = [0.0, 0.05, 0.1] }\nbase = { real_rate = 0.04, inflation = 0.05 }\n')
    r = run("screen", "--db", db, "--grid", path)
    assert r.exit_code == 0, r.stderr
    assert "base scenario: discount rate (real) 0.04, inflation 0.05" in r.stderr
    run_id = r.stdout.strip().splitlines()[-1]
    con = duckdb.connect(str(db), read_only=True)
    try:
        real, f, nominal = con.execute("SELECT real_rate, inflation, discount_rate FROM scenarios "
                                       "WHERE run_id = ? AND is_base", [run_id]).fetchone()
    finally:
        con.close()
    assert (real, f) == (pytest.approx(0.04), pytest.approx(0.05))
    assert nominal == pytest.approx(1.04 * 1.05 - 1, rel=1e-12)   # exact Fisher relation: 0.092


def test_tax_rate_axis_in_grid_means_after_tax(db, tmp_path):
    path = grid_file(tmp_path, GRID_HEAD + "tax_rate = 0.25\n".replace("tax_rate", "[tax]\nrate"))
    r = run("screen", "--db", db, "--grid", path, "--quiet")
    assert r.exit_code == 0, r.stderr


# ---- part B: rates written as percentages ------------------------------------------------------------

@pytest.mark.parametrize("args,expect", [
    (["--inflation", "3"], ["Error: --inflation: the inflation axis has 3: 3 looks like a percentage; did you mean 0.03?",
                            "Fix: write 0.03", "--allow-extreme-rates"]),
    (["--discount-rates", "5:10:3"], ["--discount-rates: the discount_rate axis has 5: 5 looks like a percentage; "
                                      "did you mean 0.05?"]),
    (["--discount-rates", "0.05", "--discount-basis", "real", "--inflation", "-2:0:3"],
     ["the inflation axis has -2 (-100 % or less)", "-2 looks like a percentage; did you mean -0.02?"]),
    (["--tax-rate", "25"], ["--tax-rate: the tax_rate axis has 25: 25 looks like a percentage; did you mean 0.25?"]),
    (["--tax-rate", "1"], ["1 looks like a percentage; did you mean 0.01?", "1 (100 %) or more"]),
])
def test_percentage_typos_in_flags_are_refused_with_the_fraction_meant(db, args, expect):
    refused(db, *args, expect=expect)


def test_extreme_rates_run_only_when_asked(db, tmp_path):
    refused(db, "--inflation", "0:2:3", expect=["2 looks like a percentage; did you mean 0.02?"])
    r = run("screen", "--db", db, "--inflation", "0:2:3", "--discount-rates", "0:0.2:5", "--allow-extreme-rates",
            "--quiet")
    assert r.exit_code == 0, r.stderr
    path = grid_file(tmp_path, GRID_HEAD.replace("stop = 0.1", "stop = 2.0")
                     + "allow_extreme_rates = true\n")
    r = run("screen", "--db", db, "--grid", path, "--quiet")
    assert r.exit_code == 0, r.stderr


def test_load_refuses_percent_escalation_unless_extreme_rates_allowed(tmp_path):
    (tmp_path / "p.csv").write_text("project_id,name,first_cost,annual_benefit,benefit_escalation,life,loan_rate\n"
                                    "H1,Hyperinflation lease (invented),100,30,2,5,\n")
    db = tmp_path / "x.duckdb"
    r = run("load", "--projects", tmp_path / "p.csv", "--db", db)
    assert r.exit_code == 1
    assert ("p.csv, line 2, column 'benefit_escalation': a rate of more than 100 % a period in size, almost surely a "
            "percentage (value '2'). Fix: write rates as fractions: 2 looks like a percentage; did you mean 0.02?") in r.stderr
    assert not db.exists()
    r = run("load", "--projects", tmp_path / "p.csv", "--db", db, "--allow-extreme-rates")
    assert r.exit_code == 0, r.stderr


def test_load_refuses_percent_loan_rate(tmp_path):
    (tmp_path / "p.csv").write_text("project_id,name,first_cost,annual_benefit,life,loan_amount,loan_rate,loan_term\n"
                                    "L1,Loan-financed pump (invented),100,30,5,50,6,5\n")
    r = run("load", "--projects", tmp_path / "p.csv", "--db", tmp_path / "x.duckdb")
    assert r.exit_code == 1 and "column 'loan_rate'" in r.stderr and "did you mean 0.06?" in r.stderr


# ---- part C: sizes checked before anything is built ----------------------------------------------------

def test_billion_value_axis_is_refused_before_allocating(db):
    tracemalloc.start()
    try:
        r = run("screen", "--db", db, "--inflation", "0:0.1:1000000000")
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert r.exit_code == 1
    assert r.stderr.startswith("Error: --inflation: COUNT 1,000,000,000 is more than the 1,000,000 scenarios")
    assert peak < 50e6, peak     # a built axis would take 8 GB


def test_product_of_axes_is_refused_with_the_sizes(db):
    refused(db, "--discount-rates", "0:0.2:1001", "--inflation", "0:0.1:1001",
            expect=["the grid has 1,002,001 scenarios (1,001 discount_rate x 1,001 inflation), more than 1,000,000"])


@pytest.mark.parametrize("kind", ["device", "fifo", "folder", "huge"])
def test_grid_must_be_a_regular_file_of_bounded_size(db, tmp_path, kind):
    if kind == "device":
        path = Path("/dev/zero")
    elif kind == "fifo":
        path = tmp_path / "grid.fifo"
        os.mkfifo(path)          # reading it would block for ever: refused before opening
    elif kind == "folder":
        path = tmp_path
    else:
        path = tmp_path / "huge.toml"
        with open(path, "wb") as fh:
            fh.truncate(2 << 20)  # a sparse 2 MB file
    if kind == "folder":
        r = run("screen", "--db", db, "--grid", path)
        assert r.exit_code == 2   # click refuses a folder for a file option
        return
    expect = ["more than a grid file's limit of 1,048,576"] if kind == "huge" else ["not a regular file"]
    refused(db, "--grid", path, expect=[str(path), *expect, "Fix: point --grid at"])


@pytest.mark.parametrize("keep,expect", [
    ("thinned:99999999999999999999", "is not a choice"),
    ("thinned:5", "thinned:5 keeps every 5-th value of each axis, but the longest axis has 5 values"),
    ("thinned:0", "Fix: give K from 1 to 4"),
    ("thinned:²", "is not a choice"),
])
def test_keep_thinned_k_is_bounded(db, keep, expect):
    refused(db, "--discount-rates", "0:0.2:5", "--inflation", "0:0.1:3", "--keep", keep, expect=[expect])


@pytest.mark.parametrize("value", ["inf", "nan", "0", "-1", "366"])
def test_periods_per_year_must_be_finite_and_bounded(db, value):
    refused(db, "--periods-per-year", value, expect=["--periods-per-year: periods per year must be a finite number "
                                                     "above 0 and at most 365"])


def test_workers_and_chunk_size_are_bounded(db):
    r = run("screen", "--db", db, "--workers", "1000000")
    assert r.exit_code == 2 and "1<=x<=256" in r.stderr
    r = run("screen", "--db", db, "--chunk-size", "99999999999")
    assert r.exit_code == 2 and "1<=x<=10000000" in r.stderr


# ---- part D: amounts that cannot be discounted and summed in double precision --------------------------

def test_amount_limit_is_inclusive_at_1e15(tmp_path):
    (tmp_path / "p.csv").write_text("project_id,name\nB1,Big (invented)\n")
    (tmp_path / "c.csv").write_text("project_id,period,amount\nB1,0,-1e15\nB1,1,1000000000000001\n")
    r = run("load", "--projects", tmp_path / "p.csv", "--cash-flows", tmp_path / "c.csv", "--db", tmp_path / "x.duckdb")
    assert r.exit_code == 1
    assert "c.csv, line 3, column 'amount': an amount larger than 1e15 in size" in r.stderr
    assert "line 2" not in r.stderr      # exactly 1e15 is accepted
    (tmp_path / "c.csv").write_text("project_id,period,amount\nB1,0,-1e15\nB1,1,1.2e15\n".replace("1.2e15", "9e14"))
    r = run("load", "--projects", tmp_path / "p.csv", "--cash-flows", tmp_path / "c.csv", "--db", tmp_path / "x.duckdb")
    assert r.exit_code == 0, r.stderr


# ---- part E: Unicode ids, encodings, long lines, several faults ----------------------------------------

def test_ids_are_nfc_normalised_across_files(tmp_path):
    decomposed, composed = "Cafe\u0301", "Caf\u00e9"
    (tmp_path / "p.csv").write_text(f"project_id,name\n{decomposed},Cafe roof (invented)\n", encoding="utf-8")
    (tmp_path / "c.csv").write_text(f"project_id,period,amount\n{composed},0,-100\n{decomposed},1,120\n", encoding="utf-8")
    db = tmp_path / "x.duckdb"
    r = run("load", "--projects", tmp_path / "p.csv", "--cash-flows", tmp_path / "c.csv", "--db", db)
    assert r.exit_code == 0, r.stderr
    con = duckdb.connect(str(db), read_only=True)
    try:
        assert con.execute("SELECT DISTINCT project_id FROM cash_flows").fetchall() == [(composed,)]
        assert con.execute("SELECT project_id FROM projects").fetchall() == [(composed,)]
    finally:
        con.close()


def test_names_keep_printable_unicode(tmp_path):
    (tmp_path / "p.csv").write_text("project_id,name,first_cost,annual_benefit,life\n"
                                    "Q1,Überdachung – Zürich ★ (invented),100,30,5\n", encoding="utf-8")
    r = run("load", "--projects", tmp_path / "p.csv", "--db", tmp_path / "x.duckdb")
    assert r.exit_code == 0, r.stderr


def test_line_without_quotes_too_long_is_named_and_the_rest_is_checked(tmp_path, monkeypatch):
    from ratescape.load import reader
    monkeypatch.setattr(reader, "BLOCK_BYTES", 4096)
    monkeypatch.setattr(reader, "MAX_CARRY_BYTES", 64 * 1024)   # 30 MB in the field; 64 kB here (same code path)
    (tmp_path / "p.csv").write_text("project_id,name\nP1,One\n")
    (tmp_path / "c.csv").write_bytes(b"project_id,period,amount\nP1,0,-100\n" + b"7" * 200_000 + b"\nP1,1,abc\n")
    r = run("load", "--projects", tmp_path / "p.csv", "--cash-flows", tmp_path / "c.csv", "--db", tmp_path / "x.duckdb")
    assert r.exit_code == 1
    assert "line 3: line too long" in r.stderr and "double quote" not in r.stderr
    assert "line 4, column 'amount': not a finite number (value 'abc')" in r.stderr


def test_cr_only_line_ends_are_named(tmp_path, monkeypatch):
    from ratescape.load import reader
    monkeypatch.setattr(reader, "BLOCK_BYTES", 4096)
    monkeypatch.setattr(reader, "MAX_CARRY_BYTES", 64 * 1024)
    (tmp_path / "p.csv").write_text("project_id,name\nP1,One\n")
    (tmp_path / "c.csv").write_bytes(b"project_id,period,amount\n" + b"P1,1,100\r" * 10_000)
    r = run("load", "--projects", tmp_path / "p.csv", "--cash-flows", tmp_path / "c.csv", "--db", tmp_path / "x.duckdb")
    assert r.exit_code == 1 and "(the file has CR line ends only)" in r.stderr, r.stderr


def test_several_distant_faults_are_all_listed_with_counts(tmp_path, monkeypatch):
    from ratescape.load import reader
    monkeypatch.setattr(reader, "BLOCK_BYTES", 4096)
    (tmp_path / "p.csv").write_text("project_id,name\n" + "".join(f"B{k},Project {k}\n" for k in range(10)))
    rows = ["project_id,period,amount,basis,escalation,kind"]
    rows += [f"B{k % 10},{k % 40},x{k},real,0," for k in range(300)]            # 300 bad amounts, lines 2..301
    rows += [f"B{k % 10},{k % 40},{k},real,0," for k in range(20_000)]
    rows += ["B1,3,5,real,0,extra,cell"]                                         # a ragged row
    rows += [f"B{k % 10},{k % 40},{k},real,0," for k in range(20_000)]
    rows += ["B2,two,5,real,0,", "\xe9B3,1,5,real,0,"]                           # a bad period, then bad UTF-8
    data = ("\n".join(rows) + "\n").encode("utf-8").replace(b"\xc3\xa9B3", b"\xe9B3")
    (tmp_path / "c.csv").write_bytes(data)
    r = run("load", "--projects", tmp_path / "p.csv", "--cash-flows", tmp_path / "c.csv", "--db", tmp_path / "x.duckdb")
    assert r.exit_code == 1
    ragged, period, utf8 = 2 + 300 + 20_000, 2 + 300 + 40_001, 2 + 300 + 40_002
    assert f"line {ragged}: 7 fields where the header has 6" in r.stderr
    assert f"line {period}, column 'period': not a finite number (value 'two')" in r.stderr
    assert f"line {utf8}: invalid UTF-8 bytes" in r.stderr
    assert "line 2, column 'amount': not a finite number (value 'x0')" in r.stderr
    # issue 16: the first 5 of each kind shown, the other 295 bad amounts counted in one line of their kind
    assert "... and 295 more of this kind (" in r.stderr and "column 'amount': not a finite number)" in r.stderr
    assert r.stderr.startswith("Error: 304 problems found")   # 300 + ragged, period, UTF-8, and the mangled id


# ---- part F: help, resolved axes, --quiet ---------------------------------------------------------------

def test_screen_help_states_every_range_form_in_words():
    r = run("screen", "--help")
    assert r.exit_code == 0
    for text in ("0:0.2:41        41 values from 0 to 0.2, both ends included (step 0.005)",
                 "0.07            one value, 0.07", "0.03,0.05,0.07  the 3 values listed",
                 "{ start = 0.0, stop = 0.2, count = 41 }", "--allow-extreme-rates"):
        assert text in r.output, text


def test_screen_prints_resolved_axes_before_it_starts(db):
    r = run("screen", "--db", db, "--discount-rates", "0:0.2:5", "--inflation", "0.02,0.03,0.05")
    assert r.exit_code == 0, r.stderr
    lines = r.stderr.splitlines()
    assert lines[:4] == ["Grid: 15 scenario(s) over 2 axes",
                         "  discount rate (nominal): 5 values from 0 to 0.2, step 0.05",
                         "  inflation: 3 values: 0.02, 0.03, 0.05",
                         "  base scenario: discount rate (nominal) 0.1, inflation 0.03"]


def test_quiet_prints_only_the_run_id(db):
    r = run("screen", "--db", db, "--discount-rates", "0:0.2:5", "--inflation", "0:0.1:3", "--quiet")
    assert r.exit_code == 0
    assert r.stderr == ""
    assert r.stdout.startswith("run-") and r.stdout.count("\n") == 1


def test_quiet_still_prints_errors(db):
    r = run("screen", "--db", db, "--inflation", "3", "--quiet")
    assert r.exit_code == 1 and r.stderr.startswith("Error: --inflation") and r.stdout == ""
