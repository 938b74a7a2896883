"""The reader's worker-thread path gives what the one-thread reader gives, fault for fault.

Blocks are cut small (a few hundred bytes) so that a file of a few hundred lines spans dozens of
blocks: regular ones (parsed on workers) between blocks with quotes, blank lines, ragged rows
and invalid UTF-8 (parsed on the reading thread, in file order). The data are invented.
"""
from __future__ import annotations

import numpy as np
import polars as pl
import pytest

from ratescape.errors import Issues
from ratescape.load.columns import CASH_FLOW_COLUMNS
from ratescape.load.reader import open_table


def _file(tmp_path, faults: bool) -> bytes:
    rng = np.random.default_rng(3)
    lines = [b"project_id,period,amount,basis,escalation,kind"]
    for k in range(600):
        lines.append(f"P{k % 37},{k % 40},{rng.integers(-9000, 9000)},real,0.01,".encode())
        if faults and k % 97 == 5:
            lines.append(b"")                                        # blank line
        if faults and k % 131 == 7:
            lines.append(b"P1,2,3")                                  # ragged row
        if faults and k % 151 == 9:
            lines.append(b'"P,9",3,4,real,0,benefit')                # quoted cell
        if faults and k == 333:
            lines.append(b"P\xff1,1,2,real,0,cost")                   # invalid UTF-8
        if faults and k % 173 == 11:
            lines.append(b"P 4 , 5 ,6,nominal,,")                     # spaces
    return b"\n".join(lines) + b"\n"


def _read(path, parallel: bool):
    issues = Issues()
    source = open_table(path, CASH_FLOW_COLUMNS, issues)
    source.block_bytes = 300
    seen, on_workers = [], 0
    if parallel:
        for frame, plain, spaceless, read, typed in source.read_parallel(
                lambda f, p, s: (f.height, p, s), workers=2, ahead=3):
            assert typed is None or typed == (frame.height, plain, spaceless)
            on_workers += typed is not None
            seen.append((frame, plain, spaceless, read))
    else:
        seen = list(source.read_ahead())
    source.finish()
    issues = [(i.file, i.line, i.column, i.value, i.problem, i.fix) for i in issues]
    return seen, issues, (source.rows, source.blank_lines, source.broken, source.sha256), on_workers


@pytest.mark.parametrize("faults", [False, True])
def test_worker_threads_read_what_one_thread_reads(tmp_path, faults):
    path = tmp_path / "flows.csv"
    path.write_bytes(_file(tmp_path, faults))
    one, one_issues, one_state, _ = _read(path, parallel=False)
    many, many_issues, many_state, on_workers = _read(path, parallel=True)
    # regular blocks were parsed on the workers; with faults, the others on the reading thread
    assert on_workers == len(many) if not faults else 0 < on_workers < len(many)
    assert len(one) > 20 and len(many) == len(one)
    for (a, pa_, sa, ra), (b, pb, sb, rb) in zip(one, many):
        assert a.equals(b) and (pa_, sa, ra) == (pb, sb, rb)
    assert many_issues == one_issues and many_state == one_state
    if faults:
        assert one_state[1] > 0 and one_state[2]                      # blank lines counted, file broken
        kinds = {i[4] for i in one_issues}
        assert any("fields where the header has" in k for k in kinds)
        assert any("UTF-8" in k for k in kinds)
        assert pl.concat([f for f, *_ in many])["project_id"].str.contains('"').sum() == 0


NAMES = ["project_id", "period", "amount", "line"]


@pytest.mark.parametrize("block", [
    b"P1,1,2\nP1,2,3\n",
    b"P 1, 1 ,2\nP1,,\n",                       # spaces kept, empty cells as ""
])
def test_a_regular_block_parses_as_the_line_splitter_parses_it(block):
    from ratescape.load.reader import CsvSource, _parse_plain, _parse_regular
    fast = _parse_regular(block, NAMES, 7)
    src = CsvSource(None, "f.csv", NAMES[:-1], 0, [])
    ref = _parse_plain(block.decode(), 3, 7, src)
    ref.columns = NAMES
    assert fast is not None and fast.equals(ref) and not src.broken


@pytest.mark.parametrize("block", [
    b"P1,1,2\nP1,2\nP1,2,3,4\n",                # ragged lines whose commas total right
    b"P1,1,2\nP1,2\n",                           # too few fields
    b"P1,1,2\n\nP1,2,3\n",                       # blank line
    b"P1,1,2\r\nP1,2,3\r\n",                     # carriage returns (left to the line splitter)
    b'"P1",1,2\n',                               # a quote
    b"P\xff1,1,2\n",                             # invalid UTF-8
    b"P1,1,2",                                    # no line end
])
def test_an_irregular_block_is_left_to_the_reading_thread(block):
    from ratescape.load.reader import _parse_regular
    assert _parse_regular(block, NAMES, 2) is None


@pytest.mark.parametrize("faults", [False, True])
def test_blocks_typed_from_their_bytes_arrive_in_file_order_without_a_frame(tmp_path, faults):
    """With ``direct``, a simple regular block reaches the caller typed from its bytes (frame None);
    every other block arrives as before, and the reader's counts and faults are unchanged."""
    path = tmp_path / "flows.csv"
    path.write_bytes(_file(tmp_path, faults))
    one, one_issues, one_state, _ = _read(path, parallel=False)
    issues = Issues()
    source = open_table(path, CASH_FLOW_COLUMNS, issues)
    source.block_bytes = 300
    got = list(source.read_parallel(lambda f, p, s: ("text", f.height), workers=2, ahead=3,
                                    direct=lambda block, columns, first, lines: ("bytes", first, lines, block)))
    source.finish()
    assert [(i.line, i.problem) for i in issues] == [(i[1], i[4]) for i in one_issues]
    assert (source.rows, source.blank_lines, source.broken, source.sha256) == one_state
    assert len(got) == len(one)
    direct = [typed for frame, _p, _s, _r, typed in got if frame is None]
    assert direct and all(kind == "bytes" for kind, *_ in direct)
    if faults:           # blocks with spaces, quotes or blank lines still come as text frames
        assert any(frame is not None for frame, *_ in got)
    for (frame, plain, spaceless, read, typed), (ref, ref_plain, ref_spaceless, ref_read) in zip(got, one):
        assert read == ref_read and (plain, spaceless) == (ref_plain, ref_spaceless)
        if frame is None:
            _kind, first, lines, block = typed
            # the block's first line and line count are the one-thread reader's
            assert (first, lines) == (ref["line"][0], ref.height) and plain and spaceless
            assert block.decode().count("\n") == lines
        else:
            assert frame.equals(ref)


def _profile_reference(block: bytes) -> tuple[int, int, bool]:
    simple = len(block) > 0 and all(b == 0x0A or 0x22 < b <= 0x7E for b in block)
    return block.count(b"\n"), block.count(b","), simple


@pytest.mark.parametrize("block", [
    b"P1,1,2\nP1,2,3\n", b"P 1,1,2\n", b'"P1",1,2\n', b"P1,1,2\r\n", b"P1!,1,2\n", b"P\x7f1,1,2\n",
    b"P\xc3\xa91,1,2\n", b"P\t1,1,2\n", b"", b"\n", b"~,~\n", b"#,$\n",
])
def test_the_byte_profile_counts_as_python_counts(block):
    from ratescape.load.reader import byte_profile, count_line_feeds, regular_lines
    assert byte_profile(block) == _profile_reference(block)
    assert count_line_feeds(block) == block.count(b"\n")
    assert regular_lines(block, 3, byte_profile(block)) == regular_lines(block, 3)


def test_the_byte_profile_on_random_bytes():
    from ratescape.load.reader import byte_profile
    rng = np.random.default_rng(5)
    for _ in range(200):
        alphabet = rng.choice(256, size=int(rng.integers(1, 6)), replace=False)
        block = bytes(rng.choice(np.append(alphabet, [10, 44, 65]), size=int(rng.integers(0, 400))).astype(np.uint8))
        assert byte_profile(block) == _profile_reference(block), block


@pytest.mark.parametrize("faults", [False, True])
def test_every_regular_block_of_a_file_parses_as_the_line_splitter_parses_it(tmp_path, faults):
    """The one-thread reader also takes Polars' CSV reader for a regular block: block by block it
    gives the line splitter's frame (the reference for text cells and line numbers)."""
    from ratescape.load.reader import CsvSource, _parse_plain, _parse_regular
    path = tmp_path / "flows.csv"
    path.write_bytes(_file(tmp_path, faults))
    source = open_table(path, CASH_FLOW_COLUMNS, Issues())
    source.block_bytes = 300
    names = [*source.columns, "line"]
    regular = 0
    for first_line, block in source._blocks():
        fast = _parse_regular(block, names, first_line)
        if fast is None:
            continue
        regular += 1
        ref = _parse_plain(block.decode(), len(source.columns), first_line,
                           CsvSource(None, "f.csv", source.columns, 0, []))
        ref.columns = names
        assert fast.equals(ref), block
    assert regular > 10
