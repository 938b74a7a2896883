"""The loader's fast path for clean cash-flow blocks against the cell-by-cell reference.

Safety first: a block the reference faults is never typed by the fast path (it returns None and
the reference reports the cells). Where the fast path types a block, the frame is the
reference's, cell for cell. The blocks come from real files through the reader, as in a load.
"""
from __future__ import annotations

import numpy as np
import pytest

from ratescape.errors import Issues
from ratescape.load.clean_blocks import NUMBER_COLUMNS, clean_flow_block, clean_flow_bytes
from ratescape.load.columns import CASH_FLOW_COLUMNS, MAX_AMOUNT, MAX_PERIOD
from ratescape.load.portfolio import CASH_FLOW_SCHEMA, _typed_flows
from ratescape.load.reader import byte_profile, open_table, regular_lines
from ratescape.load.validate import Cells


def _blocks(tmp_path, text: str):
    path = tmp_path / "flows.csv"
    path.write_text(text, encoding="utf-8")
    issues = Issues()
    source = open_table(path, CASH_FLOW_COLUMNS, issues)
    assert source is not None and not issues
    return [(frame, source.plain_ascii, source.spaceless) for frame in source.batches()]


def _from_bytes(text: str, columns: list[str], allow_extreme_rates: bool):
    """The bytes path on the file's rows, or None where the reader would not offer it the block
    (not regular, or not printable ASCII without spaces: :func:`byte_profile`'s ``simple``)."""
    block = text.split("\n", 1)[1].encode("utf-8")
    counts = byte_profile(block)
    lines = regular_lines(block, len(columns), counts)
    if not (counts[2] and lines):
        return None
    return clean_flow_bytes(block, columns, 2, lines, source="flows.csv", allow_extreme_rates=allow_extreme_rates)


def _both(tmp_path, text: str, allow_extreme_rates: bool = False):
    """(fast frame or None, reference frame, reference issues) of a one-block file.

    Both fast paths are run: the text frame's (:func:`clean_flow_block`) is returned, and the
    bytes path (:func:`clean_flow_bytes`) is held to the same rule here: None when the reference
    faults, the reference's frame when it types the block.
    """
    (frame, plain, spaceless), = _blocks(tmp_path, text)
    fast = clean_flow_block(frame, source="flows.csv", plain_ascii=plain, spaceless=spaceless,
                            allow_extreme_rates=allow_extreme_rates)
    issues = Issues()
    ref = _typed_flows(Cells("flows.csv", frame, issues, {}, allow_extreme_rates, plain, spaceless), "flows.csv")
    direct = _from_bytes(text, [c for c in frame.columns if c != "line"], allow_extreme_rates)
    if issues:
        assert direct is None, text
    elif direct is not None:
        assert direct.equals(ref), text
    _both.direct = direct
    return fast, ref, list(issues)


HEADER = "project_id,period,amount,basis,escalation,kind\n"


def test_a_clean_block_is_typed_as_the_reference_types_it(tmp_path):
    text = HEADER + ("P1,0,-1000,real,0,investment\nP1,1,400.5,nominal,0.02,benefit\n"
                     "P1,2,-50,,,\nP1,0,-5,,,\nP2,3,1e3,real,-0.5,\nP2,4,0,nominal,,cost\n")
    fast, ref, issues = _both(tmp_path, text)
    assert not issues
    assert fast is not None and fast.equals(ref)
    assert dict(fast.schema) == CASH_FLOW_SCHEMA
    # blanks: basis real, escalation 0, kind inferred (period-0 outlay = investment, common practice)
    assert fast.row(2) == ("P1", 2, -50.0, "real", 0.0, "cost", "flows.csv", 4)
    assert fast.row(3)[5] == "investment"
    assert _both.direct is not None and _both.direct.equals(ref)     # the bytes path typed it too


def test_the_bytes_path_takes_columns_in_any_order_and_missing_optional_ones(tmp_path):
    text = "kind,amount,project_id,period\nbenefit,10,P1,1\n,-5,P2,0\n,7,P2,3\n"
    fast, ref, issues = _both(tmp_path, text)
    assert not issues and _both.direct is not None and _both.direct.equals(ref)
    assert _both.direct["kind"].to_list() == ["benefit", "investment", "benefit"]
    assert _both.direct["basis"].to_list() == ["real"] * 3 and _both.direct["escalation"].to_list() == [0.0] * 3
    assert _both.direct["source_line"].to_list() == [2, 3, 4]


def test_spaces_and_missing_optional_columns(tmp_path):
    fast, ref, issues = _both(tmp_path, "project_id,period,amount\n P1 , 0 ,-10\nP1,1, 20 \n")
    assert not issues and fast is not None and fast.equals(ref)
    assert fast["project_id"].to_list() == ["P1", "P1"]
    assert fast["basis"].to_list() == ["real", "real"] and fast["kind"].to_list() == ["investment", "benefit"]


@pytest.mark.parametrize("row", [
    ",1,10,real,0,benefit",                      # blank id
    "P1,x,10,real,0,benefit",                    # period not a number
    "P1,,10,real,0,benefit",                     # period blank
    "P1,1.5,10,real,0,benefit",                  # fractional period
    "P1,-1,10,real,0,benefit",                   # negative period
    f"P1,{MAX_PERIOD + 1},10,real,0,benefit",    # beyond the longest horizon
    "P1,1,,real,0,benefit",                      # amount blank
    "P1,1,inf,real,0,benefit",                   # amount not finite
    "P1,1,nan,real,0,benefit",
    "P1,1,$10,real,0,benefit",                   # currency sign
    f"P1,1,{MAX_AMOUNT * 10:.0e},real,0,benefit",  # too large to sum safely
    "P1,1,10,real,-1,benefit",                   # escalation of -100 %
    "P1,1,10,real,2,benefit",                    # a percentage typed as a fraction
    "P1,1,10,real,abc,benefit",
    "P1,1,10,cash,0,benefit",                    # unknown basis
    "P1,1,10,real,0,income",                     # unknown kind
])
def test_every_fault_falls_back_to_the_cell_checks(tmp_path, row):
    fast, _, issues = _both(tmp_path, HEADER + "P1,0,-100,real,0,investment\n" + row + "\n")
    assert issues, row                  # the reference reports the cell ...
    assert fast is None, row            # ... so the fast path must not type the block


def test_values_the_reference_accepts_after_normalising_fall_back_too(tmp_path):
    # upper-case choices are accepted by the reference (lower-cased); the fast path leaves them to it
    fast, ref, issues = _both(tmp_path, HEADER + "P1,1,10,Real,0,Benefit\n")
    assert not issues and fast is None and ref["basis"].to_list() == ["real"]


def test_an_extreme_rate_is_typed_when_allowed(tmp_path):
    fast, ref, issues = _both(tmp_path, HEADER + "P1,1,10,nominal,2.5,benefit\n", allow_extreme_rates=True)
    assert not issues and fast is not None and fast.equals(ref)


def test_non_ascii_blocks_are_left_to_the_unicode_checks(tmp_path):
    fast, ref, issues = _both(tmp_path, HEADER + "Pé1,1,10,real,0,benefit\n")
    assert fast is None and not issues and ref["project_id"].to_list() == ["Pé1"]


def test_random_blocks_never_pass_a_fault(tmp_path):
    """Random mixes of good and bad cells: fast is None whenever the reference faults, and equal to
    the reference otherwise."""
    rng = np.random.default_rng(7)
    pools = {
        "project_id": ["P1", "P2", "", " P3"],
        "period": ["0", "1", "12", "1.0", "1.5", "-2", "", "1200", "1201", "x", "2e1"],
        "amount": ["-100", "55.5", "0", "", "1e15", "2e15", "-inf", "1,5", "7"],
        "basis": ["real", "nominal", "", "REAL", "cash"],
        "escalation": ["0", "", "0.03", "-1", "-0.999", "1.0", "1.01", "nan"],
        "kind": ["", "benefit", "cost", "investment", "salvage", "tax"],
    }
    typed = faulted = 0
    for trial in range(60):
        rows = []
        for _ in range(int(rng.integers(1, 6))):
            # mostly good cells so that some blocks come out clean
            rows.append(",".join(pools[c][0 if rng.random() < 0.85 else int(rng.integers(len(pools[c])))]
                                 for c in pools))
        fast, ref, issues = _both(tmp_path, HEADER + "\n".join(rows) + "\n")
        if issues:
            faulted += 1
            assert fast is None, rows
        elif fast is not None:
            typed += 1
            assert fast.equals(ref), rows
    assert typed > 5 and faulted > 5          # both branches were exercised


def _spellings() -> list[str]:
    """Hand-picked number spellings plus 20,000 random strings over the characters numbers use."""
    picked = ["1", "-1", "+1", "1.", "-.5", ".5", "1e5", "1E5", "1e+5", "1e-5", "1e", "e5", "inf", "-inf", "+inf",
              "Inf", "INF", "infinity", "Infinity", "nan", "NaN", "-nan", "1_000", "0x10", "0b1", "1.2.3", "--1",
              "+-1", "1d", "1f", "0001", "00.1", "1e400", "-1e400", "1e-400", "4.9e-324", "1.7976931348623157e308",
              "123456789012345678901234567890", "0.1000000000000000055511151231257827", "1.5e+", ".", "-", "+",
              "1..2", "1e1.5", "true", "1/2", "1%", "$1", "0e0", "-0", "-0.0", "9" * 400, "0." + "0" * 400 + "1",
              ".e1", "1.e1", "0x1p3", "1e+-1"]
    rng = np.random.default_rng(11)
    alphabet = np.array(list("0123456789.eE+-xinfaINFA_d"))
    drawn = ["".join(rng.choice(alphabet, size=int(rng.integers(1, 7)))) for _ in range(20_000)]
    return list(dict.fromkeys(picked + drawn))


def test_the_csv_readers_numbers_are_the_references_numbers():
    """The bytes path parses numbers with Polars' CSV reader; the reference casts text to Float64.
    Over hand-picked and random spellings both must accept the same cells with the same value (a
    cell the CSV reader refuses makes its block fall back, which is safe; one it accepts that the
    reference refuses, or reads differently, would let a fault through). Common practice: two
    parsers of one library are not assumed to agree, they are compared."""
    import math

    import polars as pl
    mismatches = []
    for cell in _spellings():
        ref = pl.Series([cell]).cast(pl.Float64, strict=False)[0]
        try:
            got = pl.read_csv((cell + "\n").encode(), has_header=False, schema={"a": pl.Float64},
                              quote_char=None)["a"][0]
        except pl.exceptions.PolarsError:
            got = None
        same = (ref is None and got is None) or (
            ref is not None and got is not None and (ref == got or (math.isnan(ref) and math.isnan(got))))
        if not same:
            mismatches.append((cell, ref, got))
    assert not mismatches[:20]


@pytest.mark.parametrize("column", NUMBER_COLUMNS)
def test_a_number_the_csv_reader_refuses_sends_the_block_back(tmp_path, column):
    row = {"project_id": "P1", "period": "1", "amount": "10", "basis": "real", "escalation": "0", "kind": "benefit"}
    row[column] = "1x"
    fast, _ref, issues = _both(tmp_path, HEADER + ",".join(row.values()) + "\n")
    assert issues and fast is None and _both.direct is None


@pytest.mark.parametrize("order", ["grouped", "interleaved", "runs apart"])
def test_block_totals_summed_run_by_run_equal_a_grouping_by_id(order):
    """The per-project totals and first lines of a block (summed over runs of consecutive lines)
    merge to what a plain grouping by id gives, whatever the order of the lines."""
    import polars as pl

    from ratescape.load.portfolio import _block_stats, _flow_stats
    rng = np.random.default_rng(13)
    ids = np.repeat([f"P{k}" for k in range(300)], 20)
    if order == "interleaved":
        ids = rng.permutation(ids)
    elif order == "runs apart":
        ids = np.concatenate([ids[: 3000], ids[: 3000], ids[3000:]])
    typed = pl.DataFrame({"project_id": ids, "amount": rng.normal(0, 100, len(ids)),
                          "source_line": np.arange(2, 2 + len(ids))})
    stats = _block_stats(typed)
    expected = typed.group_by("project_id").agg(pl.col("amount").abs().sum().alias("total"),
                                                pl.col("source_line").min().alias("line"))
    merged = _flow_stats([stats]).sort("project_id")
    expected = expected.sort("project_id")
    assert merged["project_id"].equals(expected["project_id"]) and merged["line"].equals(expected["line"])
    assert np.allclose(merged["total"].to_numpy(), expected["total"].to_numpy(), rtol=1e-12)
    assert stats.height <= len(ids) // 8 or order == "runs apart"     # many runs are grouped again by id
