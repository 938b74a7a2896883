"""Read a CSV file as text columns, checking its header and encoding first.

This is the file edge of the loader: it decides whether a file is a comma
separated UTF-8 table with the expected headers and returns every cell as a
string (numbers are parsed and checked in :mod:`ratescape.load.validate`, so
that every bad cell can be reported at once with its line and column).

Line numbers are 1-based with the header on line 1; a quoted field that
spans several lines would shift the count (documented limitation).
"""
from __future__ import annotations

import csv
import difflib
import io
from dataclasses import dataclass, field
from pathlib import Path

import polars as pl

from ..errors import Issue

BOM = b"\xef\xbb\xbf"


@dataclass
class RawTable:
    """Cells of one CSV file as strings, with the mapping to canonical names."""

    path: str
    frame: pl.DataFrame | None
    notes: list[str] = field(default_factory=list)


def _first_line(path: Path) -> bytes:
    with open(path, "rb") as fh:
        return fh.readline(1 << 20)


def _locate_bad_utf8(path: Path) -> tuple[int, str]:
    """Line number and a hex excerpt of the first invalid UTF-8 sequence."""
    with open(path, "rb") as fh:
        for number, raw in enumerate(fh, start=1):
            try:
                raw.decode("utf-8")
            except UnicodeDecodeError as exc:
                bad = raw[exc.start : exc.end + 3]
                return number, bad.hex(" ")
    return 0, ""


def read_table(path: str | Path, columns: dict, issues: list[Issue]) -> RawTable:
    """Read ``path`` as all-text columns renamed to canonical names.

    Problems are appended to ``issues``; the returned frame is None when the
    file cannot be read as a table at all. Unknown headers are errors (with
    the nearest known header suggested), required headers must be present,
    header case and surrounding spaces are ignored.
    """
    p = Path(path)
    name = str(path)
    table = RawTable(name, None)
    if not p.is_file():
        issues.append(Issue(name, None, None, None, "file not found", "check the path"))
        return table
    if p.stat().st_size == 0:
        issues.append(Issue(name, None, None, None, "the file is empty",
                            "export the table with a header line: " + ",".join(h for h, v in columns.items() if v[1])))
        return table
    head = _first_line(p)
    if head.startswith(BOM):
        head = head[len(BOM):]
        table.notes.append(f"{name}: a UTF-8 byte-order mark was found at the start and ignored.")
    try:
        header_text = head.decode("utf-8").rstrip("\r\n")
    except UnicodeDecodeError:
        issues.append(Issue(name, 1, None, head[:40].hex(" "), "the header is not UTF-8 text",
                            "save the file as UTF-8 (CSV UTF-8) and try again"))
        return table
    if header_text.count(";") > 0 and header_text.count(",") == 0:
        issues.append(Issue(name, 1, None, header_text[:60], "the file uses semicolons as delimiters",
                            "export it as comma-separated values (and use '.' as the decimal mark)"))
        return table
    if "\t" in header_text and "," not in header_text:
        issues.append(Issue(name, 1, None, header_text[:60], "the file uses tabs as delimiters",
                            "export it as comma-separated values"))
        return table
    headers = next(csv.reader(io.StringIO(header_text)))
    known = {h: spec for h, spec in columns.items()}
    rename: dict[str, str] = {}
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
            rename[raw_header] = known[h][0]
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
        return table
    try:
        frame = pl.read_csv(p, infer_schema=False, has_header=True, encoding="utf8",
                            raise_if_empty=False, truncate_ragged_lines=False)
    except pl.exceptions.ComputeError as exc:
        text = str(exc)
        if "utf-8" in text.lower() or "utf8" in text.lower():
            line, excerpt = _locate_bad_utf8(p)
            issues.append(Issue(name, line or None, None, excerpt, "invalid UTF-8 bytes",
                                "save the file as UTF-8 (CSV UTF-8); the bytes shown are not valid UTF-8"))
        else:
            issues.append(Issue(name, None, None, None, f"cannot be read as CSV: {text.splitlines()[0]}",
                                "check that every line has the same number of comma-separated fields"))
        return table
    except pl.exceptions.PolarsError as exc:  # malformed CSV (ragged rows, bad quoting)
        issues.append(Issue(name, None, None, None, f"cannot be read as CSV: {str(exc).splitlines()[0]}",
                            "check that every line has the same number of comma-separated fields"))
        return table
    frame = frame.rename({c: rename[c] for c in frame.columns if c in rename})
    if frame.height == 0:
        issues.append(Issue(name, 2, None, None, "the file has a header but no data rows",
                            "add at least one data row"))
        return table
    table.frame = frame.with_row_index("line", offset=2)
    return table
