"""The loader's fast path for clean cash-flow blocks against the cell-by-cell reference.

Safety first: a block the reference faults is never typed by the fast path (it returns None and
the reference reports the cells). Where the fast path types a block, the frame is the
reference's, cell for cell. The blocks come from real files through the reader, as in a load.
"""
from __future__ import annotations

import numpy as np
import pytest

from ratescape.errors import Issues
from ratescape.load.clean_blocks import clean_flow_block
from ratescape.load.columns import CASH_FLOW_COLUMNS, MAX_AMOUNT, MAX_PERIOD
from ratescape.load.portfolio import CASH_FLOW_SCHEMA, _typed_flows
from ratescape.load.reader import open_table
from ratescape.load.validate import Cells


def _blocks(tmp_path, text: str):
    path = tmp_path / "flows.csv"
    path.write_text(text, encoding="utf-8")
    issues = Issues()
    source = open_table(path, CASH_FLOW_COLUMNS, issues)
    assert source is not None and not issues
    return [(frame, source.plain_ascii, source.spaceless) for frame in source.batches()]


def _both(tmp_path, text: str, allow_extreme_rates: bool = False):
    """(fast frame or None, reference frame, reference issues) of a one-block file."""
    (frame, plain, spaceless), = _blocks(tmp_path, text)
    fast = clean_flow_block(frame, source="flows.csv", plain_ascii=plain, spaceless=spaceless,
                            allow_extreme_rates=allow_extreme_rates)
    issues = Issues()
    ref = _typed_flows(Cells("flows.csv", frame, issues, {}, allow_extreme_rates, plain, spaceless), "flows.csv")
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
