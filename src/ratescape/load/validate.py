"""Cell-level checks of text columns, vectorised with Polars.

Each ``parse_*`` function turns a text column into a typed column and appends
one :class:`~ratescape.errors.Issue` per bad cell (file, line, column, value,
fix). Nothing here writes anywhere.
"""
from __future__ import annotations

import re

import polars as pl

from .columns import BASES, FALSE_WORDS, KINDS, MAX_PERIOD, TRUE_WORDS
from ..errors import Issue

# Cap on issues recorded per column, so a 2 GB file of bad cells still
# produces a readable message (the total count is reported).
MAX_ISSUES_PER_COLUMN = 200

_CURRENCY = re.compile(r"[$€£¥₹]")


def _const(value, n: int, dtype) -> pl.Series:
    return pl.select(pl.repeat(value, n, dtype=dtype)).to_series()


def number_fix(value: str, what: str = "a plain number") -> str:
    """Explain how to turn a rejected numeric cell into an accepted one."""
    v = value.strip()
    if v == "":
        return f"fill in {what}"
    low = v.lower()
    if low in {"nan", "inf", "-inf", "+inf", "infinity", "-infinity", "na", "n/a", "null", "none"}:
        return f"replace it with a finite number ({what})"
    if "%" in v:
        return "write rates as fractions without a percent sign (3% -> 0.03)"
    if _CURRENCY.search(v):
        return "remove the currency symbol (amounts are in the file's currency)"
    if re.fullmatch(r"[-+]?\d{1,3}(,\d{3})+(\.\d+)?", v):
        return "remove the thousands separators (1,200.50 -> 1200.50)"
    if re.fullmatch(r"[-+]?\d+,\d+", v):
        return "use '.' as the decimal mark (1,5 -> 1.5)"
    return f"write {what} using digits, '.', '-' and 'e' only"


class Cells:
    """Collects issues for one file while its columns are parsed."""

    def __init__(self, path: str, frame: pl.DataFrame, issues: list[Issue], counts: dict | None = None):
        self.path = path
        self.frame = frame
        self.issues = issues
        # bad cells per column, shared by the batches of one file (see ``finish``)
        self.counts = counts if counts is not None else {}

    def report(self, mask: pl.Series, column: str, problem: str, fix) -> None:
        """Add an issue for each row where ``mask`` is true (fix may be a callable of the value).

        At most :data:`MAX_ISSUES_PER_COLUMN` issues are listed per column over
        all batches of a file; :meth:`finish` adds the count of the others.
        """
        bad = self.frame.filter(mask)
        if bad.height == 0:
            return
        already = self.counts.get(column, 0)
        self.counts[column] = already + bad.height
        shown = bad.head(max(0, MAX_ISSUES_PER_COLUMN - already))
        for line, value in zip(shown["line"].to_list(), shown[column].to_list() if column in shown.columns else [None] * shown.height):
            text = "" if value is None else str(value)
            self.issues.append(Issue(self.path, line, column, text, problem,
                                     fix(text) if callable(fix) else fix))

    def finish(self) -> None:
        """Add one issue per column with more bad cells than were listed."""
        for column, n in self.counts.items():
            if n > MAX_ISSUES_PER_COLUMN:
                self.issues.append(Issue(self.path, None, column, None,
                                         f"{n - MAX_ISSUES_PER_COLUMN} more bad cells in this column",
                                         "fix the cells listed above the same way"))

    def text(self, column: str) -> pl.Series:
        if column not in self.frame.columns:
            return pl.Series(column, [""] * self.frame.height, dtype=pl.String)
        return self.frame[column].fill_null("").str.strip_chars()

    def number(self, column: str, *, required: bool, default: float | None = None,
               what: str = "a plain number") -> pl.Series:
        """Parse a finite float column; blanks become ``default`` (or an issue when required)."""
        raw = self.text(column)
        parsed = raw.cast(pl.Float64, strict=False)
        blank = raw == ""
        bad = (~blank & (parsed.is_null() | ~parsed.is_finite().fill_null(False)))
        self.report(bad, column, "not a finite number", lambda v: number_fix(v, what))
        if required:
            self.report(blank, column, "blank cell", f"fill in {what}")
        keep = ~(blank | bad)
        return parsed.zip_with(keep, _const(default, len(parsed), pl.Float64)).alias(column)

    def integer(self, column: str, *, required: bool, minimum: int, maximum: int = MAX_PERIOD,
                what: str = "a whole number") -> pl.Series:
        """Parse a whole-number column within [minimum, maximum]; blanks become null."""
        values = self.number(column, required=required, what=what)
        fractional = values.is_not_null() & (values != values.floor())
        self.report(fractional, column, "not a whole number", f"write {what} without a fraction")
        low = values.is_not_null() & (values < minimum)
        self.report(low, column, f"less than {minimum}", f"write {what} of at least {minimum}")
        high = values.is_not_null() & (values > maximum)
        self.report(high, column, f"greater than {maximum}",
                    f"use at most {maximum} (longer horizons are refused to keep memory bounded)")
        ok = ~(fractional | low | high)
        return values.zip_with(ok, _const(None, len(values), pl.Float64)).cast(pl.Int64).alias(column)

    def rate(self, column: str, *, default: float = 0.0) -> pl.Series:
        """A rate as a fraction per year, > -1 (-100 %); blank means ``default``."""
        values = self.number(column, required=False, default=default, what="a rate as a fraction (0.02 = 2 %)")
        low = values <= -1.0
        self.report(low.fill_null(False), column, "a rate of -100 % or less",
                    "give a fraction greater than -1 (0.02 = 2 %)")
        return values

    def choice(self, column: str, allowed: tuple[str, ...], *, default: str | None) -> pl.Series:
        raw = self.text(column).str.to_lowercase()
        blank = raw == ""
        bad = ~blank & ~raw.is_in(list(allowed))
        self.report(bad, column, "unknown value", "use one of: " + ", ".join(allowed))
        if default is None:
            self.report(blank, column, "blank cell", "use one of: " + ", ".join(allowed))
        return raw.zip_with(~blank, _const(default, len(raw), pl.String)).alias(column)

    def boolean(self, column: str) -> pl.Series:
        raw = self.text(column).str.to_lowercase()
        is_true = raw.is_in(list(TRUE_WORDS))
        bad = ~is_true & ~raw.is_in(list(FALSE_WORDS))
        self.report(bad, column, "not true or false", "write true or false (or leave blank for false)")
        return is_true.alias(column)

    def identifier(self, column: str) -> pl.Series:
        raw = self.text(column)
        self.report(raw == "", column, "blank id", "give every row an id")
        return raw.alias(column)


def check_unique_ids(cells: Cells, ids: pl.Series) -> None:
    """Duplicate ids, including ids that differ only in letter case, are refused."""
    lower = ids.str.to_lowercase()
    frame = pl.DataFrame({"line": cells.frame["line"], "id": ids, "key": lower})
    frame = frame.filter(pl.col("id") != "")
    first = frame.group_by("key", maintain_order=True).agg(pl.col("line").first().alias("first_line"),
                                                           pl.col("id").first().alias("first_id"))
    joined = frame.join(first, on="key").filter(pl.col("line") != pl.col("first_line"))
    for line, pid, first_line, first_id in joined.select("line", "id", "first_line", "first_id").head(MAX_ISSUES_PER_COLUMN).iter_rows():
        how = "the same id" if pid == first_id else f"an id that differs only in letter case from '{first_id}'"
        cells.issues.append(Issue(cells.path, line, "project_id", pid,
                                  f"{how} already appears on line {first_line}",
                                  "give every project a unique id (ids are compared ignoring case)"))


__all__ = ["Cells", "check_unique_ids", "number_fix", "BASES", "KINDS"]
