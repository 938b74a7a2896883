"""Read a CSV file as text columns, checking its header, encoding and shape first.

This is the file edge of the loader: it decides whether a file is a comma
separated UTF-8 table with the expected headers and returns every cell as a
string (numbers are parsed and checked in :mod:`ratescape.load.validate`, so
that every bad cell can be reported at once with its line and column).

Files are read in blocks of :data:`BLOCK_BYTES` cut at line ends (never inside
a quoted field), so a file of any size is checked with memory bounded by the
block size: :meth:`CsvSource.batches` yields one frame of text cells per
block. Line numbers are physical, 1-based, with the header on line 1. Empty
lines are skipped (a note says how many); a quoted field holding a line break
is refused, as are rows with too many or too few fields, lines longer than
:data:`MAX_CARRY_BYTES`, invalid UTF-8 and UTF-16 files. After a structural
fault the rest of the file is still read and checked (rows of the wrong shape
are left out of the cell checks), so every fault of a file is found in one pass.
"""
from __future__ import annotations

import csv
import difflib
import hashlib
import io
from collections import deque
from collections.abc import Callable, Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import polars as pl

from ..errors import MAX_ISSUES_PER_KIND, Issue, count_more, room_for

BOM = b"\xef\xbb\xbf"
# Bytes read per block. A block becomes a few frames of the same size, so the
# loader's memory stays near a small multiple of this whatever the file size (8 MB: the checks of a
# 50-million-line file took 11.3-11.5 s, against 11.9 s with 4 MB blocks and 11.4-11.5 s with
# 16 MB, whose peak was 250 MB higher; smaller blocks' Polars calls cost more per byte;
# bench/RESULTS.md).
BLOCK_BYTES = 8 << 20
# A block is cut at the last line end outside quotes; a file whose quotes never
# balance would otherwise be carried whole, so give up past this many bytes.
MAX_CARRY_BYTES = 16 << 20
# Structural problems (ragged rows, line breaks in cells) listed per kind; the rest of a kind are counted.
MAX_STRUCTURE_ISSUES = MAX_ISSUES_PER_KIND
ROW_FIX = "make every line have the same number of comma-separated fields as the header (quote cells that contain commas)"


@dataclass
class RawTable:
    """Cells of one CSV file as strings, with the mapping to canonical names.

    ``broken``: a structural fault was found; ``frame`` then holds the well-formed rows
    only (for their cell checks) and the file must not be loaded.
    """

    path: str
    frame: pl.DataFrame | None
    notes: list[str] = field(default_factory=list)
    broken: bool = False


def _first_line(path: Path) -> bytes:
    with open(path, "rb") as fh:
        return fh.readline(1 << 20)


def _locate_bad_utf8(path: Path) -> tuple[int, str]:
    """Line number and a hex excerpt of the first invalid UTF-8 sequence (reads line by line)."""
    with open(path, "rb") as fh:
        for number, raw in enumerate(fh, start=1):
            try:
                raw.decode("utf-8")
            except UnicodeDecodeError as exc:
                bad = raw[exc.start : exc.end + 3]
                return number, bad.hex(" ")
    return 0, ""


def _excerpt(text: str, limit: int = 60) -> str:
    text = text.rstrip("\r\n")
    return text if len(text) <= limit else text[: limit - 3] + "..."


@dataclass
class CsvSource:
    """A CSV file whose header passed the checks; its rows are read block by block."""

    path: Path
    name: str
    columns: list[str]               # canonical names in file order
    header_bytes: int                # bytes of the header line (with BOM and line end)
    issues: list[Issue]
    notes: list[str] = field(default_factory=list)
    block_bytes: int = field(default_factory=lambda: BLOCK_BYTES)
    broken: bool = False             # a structural problem was found: no more frames are yielded
    blank_lines: int = 0
    rows: int = 0
    bytes_read: int = 0              # bytes of the file read so far (header included): for progress
    complete: bool = False           # the whole file was read (then ``sha256`` is the file's hash)
    plain_ascii: bool = False        # the block last yielded holds printable ASCII and line ends only
    spaceless: bool = False          # ... and no space: its cells need no stripping
    _structure_issues: int = 0
    _hash: hashlib._Hash = field(default_factory=hashlib.sha256)

    @property
    def sha256(self) -> str | None:
        """SHA-256 of the file's bytes, computed while its blocks were read (None until read whole)."""
        return self._hash.hexdigest() if self.complete else None

    def _read(self, fh, size: int) -> bytes:
        chunk = fh.read(size)
        self._hash.update(chunk)
        self.bytes_read += len(chunk)
        return chunk

    def _structural(self, line: int | None, value: str | None, problem: str, fix: str) -> None:
        self.broken = True
        self._structure_issues += 1
        self.issues.append(Issue(self.name, line, None, value, problem, fix))

    def _blocks(self) -> Iterator[tuple[int, bytes]]:
        """(first line number, bytes) of consecutive blocks, each ending at a line end outside quotes."""
        line = 2
        with open(self.path, "rb") as fh:
            self._read(fh, self.header_bytes)
            carry = b""
            while True:
                chunk = self._read(fh, self.block_bytes)
                if chunk and b'"' not in chunk and b'"' not in carry:
                    # the usual block, without quotes: cut at its last line feed, copying it once
                    cut = chunk.rfind(b"\n")
                    if cut >= 0:
                        block = b"".join((carry, memoryview(chunk)[: cut + 1])) if carry else chunk[: cut + 1]
                        carry = chunk[cut + 1:]
                        yield line, block
                        line += count_line_feeds(block)
                        continue
                data = carry + chunk if carry else chunk
                if not chunk:
                    self.complete = True
                    if data:
                        yield line, data
                    return
                cut = _cut_outside_quotes(data)
                if cut < 0:
                    if len(data) > MAX_CARRY_BYTES:
                        if b"\n" in data:
                            self._structural(line, None, "a double quote opens a field that does not close "
                                             f"within {MAX_CARRY_BYTES >> 20} MB",
                                             "close the quoted field, or remove the stray '\"'")
                            return
                        cr = b"\r" in data
                        self._structural(line, _excerpt(data[:60].decode("utf-8", "replace")),
                                         f"line too long: more than {MAX_CARRY_BYTES >> 20} MB without a line end"
                                         + (" (the file has CR line ends only)" if cr else ""),
                                         "end every row with a line break (LF or CR LF)"
                                         + ("; save the file with Windows or Unix line ends" if cr else
                                            "; check that this is the CSV file meant"))
                        # skip to the end of the long line and go on checking the rest of the file
                        while True:
                            chunk = self._read(fh, self.block_bytes)
                            if not chunk:
                                return
                            end = chunk.find(b"\n")
                            if end >= 0:
                                carry = chunk[end + 1:]
                                line += 1
                                break
                        continue
                    carry = data
                    continue
                block, carry = data[: cut + 1], data[cut + 1:]
                yield line, block
                line += count_line_feeds(block)

    def batches(self) -> Iterator[pl.DataFrame]:
        """Frames of text cells (canonical column names) plus ``line`` (Int64), one per block.

        Structural problems are appended to the issues; after the first one
        no further frames are yielded, but the rest of the file is still
        checked so that every ragged row is listed.
        """
        for first_line, block in self._blocks():
            frame = self._frame(first_line, block)
            if frame is not None:
                yield frame

    def _frame(self, first_line: int, block: bytes, may_be_regular: bool = True) -> pl.DataFrame | None:
        """Parse one block here, reporting its structural faults (None: no row to check).
        ``may_be_regular``: False when the block is known not to be regular (a worker said so)."""
        n = len(self.columns)
        # a regular block (the usual one) is split by Polars' CSV reader, the same frame as
        # _parse_plain's (tests/unit/test_reader_parallel.py) in a fraction of the time
        frame = _parse_regular(block, [*self.columns, "line"], first_line) if may_be_regular else None
        if frame is None:
            try:
                text = block.decode("utf-8")
            except UnicodeDecodeError:
                text = self._bad_utf8(block, first_line)
            frame = (_parse_plain(text, n, first_line, self) if '"' not in text
                     else _parse_quoted(text, n, first_line, self))
        if frame is None:
            return None
        frame.columns = [*self.columns, "line"]
        self.rows += frame.height
        self.plain_ascii = _plain_ascii(block)
        self.spaceless = self.plain_ascii and b" " not in block
        return frame

    def read_ahead(self) -> Iterator[tuple[pl.DataFrame, bool, bool, int]]:
        """:meth:`batches` as ``(frame, plain_ascii, spaceless, bytes_read)``: each frame with the state
        of the reader after it."""
        for frame in self.batches():
            yield frame, self.plain_ascii, self.spaceless, self.bytes_read

    def read_parallel(self, typer: Callable[[pl.DataFrame, bool, bool], object], *, workers: int = 2,
                      ahead: int = 4, direct: Callable[[bytes, list[str], int, int], object] | None = None,
                      ) -> Iterator[tuple[pl.DataFrame | None, bool, bool, int, object]]:
        """:meth:`read_ahead` with ``typer(frame, plain_ascii, spaceless)`` added to each tuple, parsing
        and typing blocks on ``workers`` threads while this one reads the file (Polars releases the
        interpreter lock while it splits and parses), yielded in file order.

        Only a regular block is parsed on a worker (:func:`regular_lines`). Any other block is
        parsed here, in file order, by :meth:`_frame`, which reports its faults as :meth:`batches`
        does; its typed value is None. At most ``ahead`` blocks wait, so memory stays a few blocks.

        ``direct(block, columns, first_line, lines)``, when given, is tried first on a regular block
        of printable ASCII without a space: it types the block straight from its bytes (no text
        frame). When it returns a value, that block is yielded with frame None and that value;
        when it returns None, the block goes through ``typer`` as any other.
        """
        names = [*self.columns, "line"]
        fields = len(self.columns)

        def work(first_line: int, block: bytes):
            counts = byte_profile(block)
            if counts[2]:                 # simple: printable ASCII without spaces
                plain = spaceless = True
            else:
                plain = block.isascii() and not block.translate(None, _PRINTABLE_ASCII)
                spaceless = plain and b" " not in block
            lines = regular_lines(block, fields, counts)
            if direct is not None and spaceless and lines:
                typed = direct(block, self.columns, first_line, lines)
                if typed is not None:
                    return None, lines, plain, spaceless, typed
            frame = _parse_regular(block, names, first_line, lines)
            if frame is None:
                return None
            return frame, frame.height, plain, spaceless, typer(frame, plain, spaceless)

        def settle(first_line, block, read, future):
            done = future.result()
            if done is None:
                frame = self._frame(first_line, block, may_be_regular=False)
                return None if frame is None else (frame, self.plain_ascii, self.spaceless, read, None)
            frame, rows, self.plain_ascii, self.spaceless, typed = done
            self.rows += rows
            return frame, self.plain_ascii, self.spaceless, read, typed

        with ThreadPoolExecutor(max_workers=max(1, workers), thread_name_prefix="ratescape-read") as pool:
            pending: deque = deque()
            for first_line, block in self._blocks():
                pending.append((first_line, block, self.bytes_read, pool.submit(work, first_line, block)))
                while len(pending) > ahead or (pending and pending[0][3].done()):
                    out = settle(*pending.popleft())
                    if out is not None:
                        yield out
            while pending:
                out = settle(*pending.popleft())
                if out is not None:
                    yield out

    def _bad_utf8(self, block: bytes, first_line: int) -> str:
        """Report each line of ``block`` holding invalid UTF-8; return the block decoded with
        replacement characters, so that the rest of the block is still checked."""
        line = first_line
        for raw in block.split(b"\n"):
            try:
                raw.decode("utf-8")
            except UnicodeDecodeError as exc:
                before = raw[:exc.start][-20:].decode("utf-8", "replace")
                self._structural(line, raw[exc.start: exc.end + 3].hex(" "), "invalid UTF-8 bytes",
                                 "save the file as UTF-8 (CSV UTF-8); the bytes shown are not valid UTF-8"
                                 + (f" (they follow {before!r})" if exc.start > 0 else ""))
            line += 1
        return block.decode("utf-8", "replace")

    def finish(self) -> None:
        """Add the note on skipped empty lines (structural problems past the first of each kind are
        counted by the issue list, :class:`ratescape.errors.Issues`)."""
        if self.blank_lines:
            self.notes.append(f"{self.name}: {self.blank_lines} empty line(s) were skipped.")


_PRINTABLE_ASCII = bytes(range(0x20, 0x7F)) + b"\n\r"


def _plain_ascii(block: bytes) -> bool:
    """True when ``block`` holds printable ASCII and line ends only (no control character, no lone
    CR): its cells are then in Unicode normal form C and hold no invisible character, so the id
    checks for those can be skipped (a fast path, same result)."""
    return block.isascii() and not block.translate(None, _PRINTABLE_ASCII) and \
        block.count(b"\r") == block.count(b"\r\n")


def _cut_outside_quotes(data: bytes) -> int:
    """Index of the last b'\\n' in ``data`` preceded by an even number of quotes, or -1."""
    pos = data.rfind(b"\n")
    if pos < 0 or b'"' not in data:          # no quote (the usual block): a search, not a count
        return pos
    parity = data.count(b'"', 0, pos + 1) & 1
    while parity:
        prev = data.rfind(b"\n", 0, pos)
        if prev < 0:
            return -1
        parity ^= data.count(b'"', prev + 1, pos + 1) & 1
        pos = prev
    return pos


def count_line_feeds(block: bytes) -> int:
    """Line feeds in ``block``, counted by NumPy (which, unlike ``bytes.count``, releases the
    interpreter lock: the worker threads count while the reading thread reads)."""
    return int(np.count_nonzero(np.frombuffer(block, dtype=np.uint8) == 0x0A))


def byte_profile(block: bytes) -> tuple[int, int, bool]:
    """``(line feeds, commas, simple)`` of ``block``, counted by NumPy outside the interpreter lock.

    ``simple``: every byte is a line feed or printable ASCII above '"' (0x22), so the block holds
    no quote, carriage return, other control character, space or non-ASCII byte (nor '!', which
    is only excluded to keep the test to two comparisons).
    """
    a = np.frombuffer(block, dtype=np.uint8)
    feeds = int(np.count_nonzero(a == 0x0A))
    commas = int(np.count_nonzero(a == 0x2C))
    simple = a.size > 0 and int(np.count_nonzero(a <= 0x22)) == feeds and int(a.max()) <= 0x7E
    return feeds, commas, simple


def regular_lines(block: bytes, fields: int, counts: tuple[int, int, bool] | None = None) -> int:
    """The number of lines of ``block`` when it is *regular*, else 0: every line ends with a line
    feed and holds exactly ``fields`` fields, and the block holds no quote, carriage return or
    blank line. Such a block splits on every comma and line feed. ``counts`` is the block's
    :func:`byte_profile` when already known. Pure: bytes in, count out."""
    lines, commas, simple = counts if counts is not None else byte_profile(block)
    if not lines or not block.endswith(b"\n"):
        return 0
    if not simple and (b'"' in block or b"\r" in block):
        return 0
    if fields == 1 and (b"\n\n" in block or block.startswith(b"\n")):
        return 0
    if commas != lines * (fields - 1):      # a blank or short line has fewer commas
        return 0
    # a line with more fields is refused by the CSV readers given ``fields`` columns; with the
    # commas adding up to lines x (fields - 1), every line then has exactly ``fields`` fields
    return lines


def _parse_regular(block: bytes, names: list[str], first_line: int, lines: int | None = None) -> pl.DataFrame | None:
    """A regular block parsed by Polars' CSV reader: the frame :func:`_parse_plain` gives (text
    cells, empty cells as "", then ``line``), or None when the block is not regular (a quote, a
    carriage return, a blank line, a line with another number of fields, invalid UTF-8): the
    reading thread then parses it and reports what it finds. ``lines``: :func:`regular_lines` of
    the block when already known. Pure: bytes in, frame out."""
    n = len(names) - 1
    lines = regular_lines(block, n) if lines is None else lines
    if not lines:
        return None
    try:
        frame = pl.read_csv(block, has_header=False, schema={name: pl.String for name in names[:-1]},
                            quote_char=None, empty_string_is_null=False, truncate_ragged_lines=False,
                            raise_if_empty=True)
    except (pl.exceptions.PolarsError, UnicodeDecodeError, ValueError):
        return None
    if frame.height != lines or frame.width != n:
        return None
    return frame.with_columns(pl.int_range(first_line, first_line + lines, dtype=pl.Int64).alias("line"))


def _parse_plain(text: str, n: int, first_line: int, src: CsvSource) -> pl.DataFrame | None:
    """A block without quotes: split lines and fields with vectorised string operations."""
    lines = text.split("\n")
    if lines and lines[-1] == "":
        lines.pop()
    raw = pl.Series("raw", lines, dtype=pl.String).str.strip_suffix("\r")
    del lines
    line_no = pl.int_range(first_line, first_line + raw.len(), dtype=pl.Int64, eager=True).alias("line")
    blank = raw == ""
    fields = raw.str.count_matches(",", literal=True) + 1
    ragged = ~blank & (fields != n)
    if ragged.any():
        bad = pl.DataFrame({"line": line_no, "raw": raw, "fields": fields}).filter(ragged)
        problem = f"0 fields where the header has {n}"       # the kind (numbers do not count)
        room = room_for(src.issues, src.name, None, problem)
        shown = bad if room is None else bad.head(room)
        for line, value, count in shown.iter_rows():
            src._structural(line, _excerpt(value), f"{count} fields where the header has {n}", ROW_FIX)
        src.broken = True
        src._structure_issues += bad.height - shown.height
        count_more(src.issues, src.name, None, problem, bad.height - shown.height)
    nblank = int(blank.sum())
    if nblank:
        src.blank_lines += nblank
    if nblank or ragged.any():   # the well-formed rows are still checked cell by cell
        keep = ~blank & ~ragged
        raw, line_no = raw.filter(keep), line_no.filter(keep)
    if n == 1:
        cells = pl.DataFrame({"field_0": raw})
    else:
        cells = raw.str.split_exact(",", n - 1).struct.unnest()
    return cells.with_columns(line_no)


def _parse_quoted(text: str, n: int, first_line: int, src: CsvSource) -> pl.DataFrame | None:
    """A block with quotes: the csv module parses it row by row, keeping physical line numbers."""
    reader = csv.reader(io.StringIO(text, newline=""), strict=True)
    rows: list[list[str]] = []
    lines: list[int] = []
    before = 0
    while True:
        try:
            row = next(reader)
        except StopIteration:
            break
        except csv.Error as exc:
            row_text = text.split("\n", before + 1)[before] if text.count("\n") >= before else ""
            src._structural(first_line + before, _excerpt(row_text), f"malformed quoting in the row starting on this line ({exc})",
                            "quote a whole cell (\"1,200.50\") and double any quote inside it (\"\")")
            return None
        start = first_line + before
        spans = reader.line_num - before
        before = reader.line_num
        if not row:
            src.blank_lines += 1
            continue
        if spans > 1:
            src._structural(start, _excerpt(",".join(row)), f"a quoted cell holds a line break (the row runs over {spans} lines)",
                            "remove the line break from the cell (keep each row on one line)")
            continue
        if len(row) != n:
            src._structural(start, _excerpt(",".join(row)), f"{len(row)} fields where the header has {n}", ROW_FIX)
            continue
        rows.append(row)
        lines.append(start)
    cols = list(zip(*rows)) if rows else [()] * n
    data = {f"field_{k}": pl.Series(f"field_{k}", list(cols[k]), dtype=pl.String) for k in range(n)}
    data["line"] = pl.Series("line", lines, dtype=pl.Int64)
    return pl.DataFrame(data)


def open_table(path: str | Path, columns: dict, issues: list[Issue]) -> CsvSource | None:
    """Check a CSV file's existence, encoding of the header, delimiter and headers.

    Problems are appended to ``issues``; returns None when the file cannot be
    read as a table at all, else a :class:`CsvSource` whose
    :meth:`~CsvSource.batches` yield the rows. Unknown headers are errors
    (with the nearest known header suggested), required headers must be
    present, header case and surrounding spaces are ignored.
    """
    p = Path(path)
    name = str(path)
    if not p.is_file():
        issues.append(Issue(name, None, None, None, "file not found", "check the path"))
        return None
    if p.stat().st_size == 0:
        issues.append(Issue(name, None, None, None, "the file is empty",
                            "export the table with a header line: " + ",".join(h for h, v in columns.items() if v[1])))
        return None
    notes: list[str] = []
    head = _first_line(p)
    header_bytes = len(head)
    if head[:2] in (b"\xff\xfe", b"\xfe\xff"):
        issues.append(Issue(name, 1, None, head[:2].hex(" "), "the file is UTF-16 text (it starts with a UTF-16 "
                            "byte-order mark)", "save the file as UTF-8 (CSV UTF-8) and try again"))
        return None
    if b"\x00" in head:
        order = "little-endian" if head[1:2] == b"\x00" else "big-endian"
        issues.append(Issue(name, 1, None, head[:8].hex(" "), f"the file looks like UTF-16 ({order}) text without "
                            "a byte-order mark (NUL bytes between the letters)",
                            "save the file as UTF-8 (CSV UTF-8) and try again"))
        return None
    if head.startswith(BOM):
        head = head[len(BOM):]
        notes.append(f"{name}: a UTF-8 byte-order mark was found at the start and ignored.")
    if head.endswith(b"\r\n"):
        notes.append(f"{name}: Windows line endings (CR LF) were found and accepted.")
    try:
        header_text = head.decode("utf-8").rstrip("\r\n")
    except UnicodeDecodeError:
        issues.append(Issue(name, 1, None, head[:40].hex(" "), "the header is not UTF-8 text",
                            "save the file as UTF-8 (CSV UTF-8) and try again"))
        return None
    if header_text.strip() == "":
        issues.append(Issue(name, 1, None, None, "the first line is empty",
                            "put the header line first: " + ",".join(h for h, v in columns.items() if v[1])))
        return None
    if header_text.count(";") > 0 and header_text.count(",") == 0:
        issues.append(Issue(name, 1, None, header_text[:60], "the file uses semicolons as delimiters",
                            "export it as comma-separated values (and use '.' as the decimal mark)"))
        return None
    if "\t" in header_text and "," not in header_text:
        issues.append(Issue(name, 1, None, header_text[:60], "the file uses tabs as delimiters",
                            "export it as comma-separated values"))
        return None
    try:
        headers = next(csv.reader(io.StringIO(header_text), strict=True))
    except csv.Error as exc:
        issues.append(Issue(name, 1, None, header_text[:60], f"the header line cannot be read ({exc})",
                            "write the header as plain comma-separated names"))
        return None
    known = {h: spec for h, spec in columns.items()}
    canonical: list[str] = []
    seen: set[str] = set()
    ok = True
    for col_index, raw_header in enumerate(headers, start=1):
        h = raw_header.strip().lower()
        if h in known:
            if h in seen:
                issues.append(Issue(name, 1, raw_header, raw_header, f"header '{h}' appears twice",
                                    "keep one column of that name"))
                ok = False
            seen.add(h)
            canonical.append(known[h][0])
        else:
            close = difflib.get_close_matches(h, list(known), n=1, cutoff=0.6)
            fix = f"rename it to '{close[0]}'" if close else (
                "remove the column; known columns are " + ", ".join(known))
            issues.append(Issue(name, 1, raw_header or f"#{col_index}", raw_header, "unknown column", fix))
            ok = False
    missing = [h for h, spec in known.items() if spec[1] and h not in seen]
    for h in missing:
        issues.append(Issue(name, 1, h, None, f"required column '{h}' is missing",
                            f"add a '{h}' column to the header line"))
        ok = False
    if not ok:
        return None
    return CsvSource(p, name, canonical, header_bytes, issues, notes)


def read_table(path: str | Path, columns: dict, issues: list[Issue]) -> RawTable:
    """Read ``path`` whole as all-text columns renamed to canonical names.

    Problems are appended to ``issues``; the returned frame is None when the
    file cannot be read as a table. For files too big to hold, iterate
    :func:`open_table`'s batches instead.
    """
    name = str(path)
    source = open_table(path, columns, issues)
    if source is None:
        return RawTable(name, None)
    table = RawTable(name, None, source.notes)
    frames = list(source.batches())
    source.finish()
    if source.broken:
        table.broken = True
        if frames:
            table.frame = pl.concat(frames, how="vertical") if len(frames) > 1 else frames[0]
        return table
    if source.rows == 0:
        issues.append(Issue(name, 2, None, None, "the file has a header but no data rows",
                            "add at least one data row"))
        return table
    table.frame = pl.concat(frames, how="vertical") if len(frames) > 1 else frames[0]
    return table


__all__ = ["BLOCK_BYTES", "CsvSource", "RawTable", "open_table", "read_table"]
