"""Cell-level checks of text columns, vectorised with Polars.

Each ``parse_*`` function turns a text column into a typed column and appends
one :class:`~ratescape.errors.Issue` per bad cell (file, line, column, value,
fix). Nothing here writes anywhere.
"""
from __future__ import annotations

import functools
import re

import polars as pl

from .columns import BASES, FALSE_WORDS, KINDS, MAX_AMOUNT, MAX_PERIOD, PERCENT_RATE_LIMIT, TRUE_WORDS
from ..errors import MAX_ISSUES_PER_KIND, Issue, count_more, percent_typo, room_for

# Issues listed per kind (column and problem): the loader's list keeps this many of each kind and
# counts the rest, so a 2 GB file of bad cells still produces a readable message.
MAX_ISSUES_PER_COLUMN = MAX_ISSUES_PER_KIND

_CURRENCY = re.compile(r"[$€£¥₹]")
# Characters an id may not hold: C0/C1 controls (Cc), invisible format characters such as
# zero-width spaces and joiners and bidirectional overrides (Cf), line and paragraph separators,
# and spaces other than the plain space (a no-break space looks like a space but is not one).
INVISIBLE = r"[\p{Cc}\p{Cf}\p{Zl}\p{Zp}\p{Co}[\p{Zs}&&[^ ]]]"


def _invisible_fix(value: str) -> str:
    shown = ", ".join(sorted({f"U+{ord(c):04X}" for c in value
                              if not c.isprintable() or (c.isspace() and c != " ")}))
    return (f"remove the invisible or control character(s) {shown or '(not printable)'}; ids are compared as "
            "they look, so they may hold only printable text")


@functools.lru_cache(maxsize=64)
def _const(value, n: int, dtype) -> pl.Series:
    """A column of ``n`` copies of ``value`` (cached: every block of a file has about the same size)."""
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

    def __init__(self, path: str, frame: pl.DataFrame, issues: list[Issue], counts: dict | None = None,
                 allow_extreme_rates: bool = False, plain_ascii: bool = False, spaceless: bool = False):
        self.path = path
        # the cells hold printable ASCII only (see reader._plain_ascii): normal form C, nothing invisible;
        # spaceless: and no space, so nothing to strip (fast paths, the same results)
        self.plain_ascii = plain_ascii
        self.spaceless = spaceless
        self._texts: dict[str, pl.Series] = {}
        self.allow_extreme_rates = allow_extreme_rates
        self.frame = frame
        self.issues = issues
        # bad cells per column, shared by the batches of one file (see ``finish``)
        self.counts = counts if counts is not None else {}

    def report(self, mask: pl.Series, column: str, problem: str, fix) -> None:
        """Add an issue for each row where ``mask`` is true (fix may be a callable of the value).

        The issue list keeps the first issues of each kind (column and problem) over all
        batches of a file and counts the others (:class:`ratescape.errors.Issues`); only the rows
        it keeps are turned into issues.
        """
        if not mask.any():
            return
        bad = self.frame.filter(mask)
        n = bad.height
        room = room_for(self.issues, self.path, column, problem)
        shown = bad if room is None else bad.head(room)
        self.counts[(column, problem)] = self.counts.get((column, problem), 0) + n
        for line, value in zip(shown["line"].to_list(), shown[column].to_list() if column in shown.columns else [None] * shown.height):
            text = "" if value is None else str(value)
            self.issues.append(Issue(self.path, line, column, text, problem,
                                     fix(text) if callable(fix) else fix))
        count_more(self.issues, self.path, column, problem, n - shown.height)

    def finish(self) -> None:
        """Kept for callers: the counts of issues not listed are held by the issue list itself."""

    def text(self, column: str) -> pl.Series:
        if column not in self.frame.columns:
            return _const("", self.frame.height, pl.String).alias(column)
        if column not in self._texts:
            cells = self.frame[column].fill_null("")
            self._texts[column] = cells if self.spaceless else cells.str.strip_chars()
        return self._texts[column]

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

    def money(self, column: str, *, required: bool, default: float | None = None,
              what: str = "an amount of money") -> pl.Series:
        """An amount: a finite number of at most :data:`MAX_AMOUNT` in size (blanks as in :meth:`number`)."""
        values = self.number(column, required=required, default=default, what=what)
        huge = (values.abs() > MAX_AMOUNT).fill_null(False)
        limit = f"{MAX_AMOUNT:.0e}".replace("+", "")
        self.report(huge, column, f"an amount larger than {limit} in size, which could not be discounted "
                    "and summed in double precision over 1,200 periods and millions of lines",
                    f"give amounts of at most {limit} (a million billion) in size; for larger sums "
                    "state them in thousands or millions of the currency")
        return values.zip_with(~huge, _const(None, len(values), pl.Float64)).alias(column)

    def rate(self, column: str, *, default: float = 0.0) -> pl.Series:
        """A rate as a fraction per year, > -1 (-100 %); blank means ``default``.

        A rate above 1 (100 %) in size is refused as a near-certain percentage typo ("2" for
        2 %) unless the load allows extreme rates.
        """
        values = self.number(column, required=False, default=default, what="a rate as a fraction (0.02 = 2 %)")
        low = (values <= -1.0).fill_null(False)
        self.report(low, column, "a rate of -100 % or less",
                    lambda v: "give a fraction greater than -1 (0.02 = 2 %)"
                    + (f"; {percent_typo(float(v))}" if abs(float(v)) > PERCENT_RATE_LIMIT else ""))
        if not self.allow_extreme_rates:
            big = ~low & (values.abs() > PERCENT_RATE_LIMIT).fill_null(False)
            self.report(big, column, "a rate of more than 100 % a period in size, almost surely a percentage",
                        lambda v: f"write rates as fractions: {percent_typo(float(v))} (for a genuinely extreme "
                                  "rate, load with --allow-extreme-rates)")
        return values

    def choice(self, column: str, allowed: tuple[str, ...], *, default: str | None) -> pl.Series:
        raw = self.text(column)
        if default is not None and raw.is_in(list(allowed) + [""]).all():   # the usual file: no fault, lower case
            return raw.zip_with(raw != "", _const(default, len(raw), pl.String)).alias(column)
        raw = raw.str.to_lowercase()
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
        """An id: normalised to Unicode NFC (so ids that look alike are alike); blank ids and ids
        holding invisible or control characters are refused."""
        raw = self.text(column)
        self.report(raw == "", column, "blank id", "give every row an id")
        if self.plain_ascii:
            return raw.alias(column)
        hidden = raw.str.contains(INVISIBLE)
        self.report(hidden, column, "an id holding an invisible or control character", _invisible_fix)
        return raw.str.normalize("NFC").alias(column)

    def normal_text(self, column: str) -> pl.Series:
        """A text column in Unicode normal form C (compared like ids)."""
        text = self.text(column)
        return (text if self.plain_ascii else text.str.normalize("NFC")).alias(column)


def check_unique_ids(cells: Cells, ids: pl.Series) -> None:
    """Duplicate ids, including ids that differ only in letter case or Unicode normalisation, are refused."""
    frame = pl.DataFrame({"line": cells.frame["line"], "id": ids, "raw": cells.text("project_id")})
    check_unique_id_frame(cells.path, frame, cells.issues)


DUPLICATE_FIX = "give every project a unique id (ids are compared ignoring case)"


def check_unique_id_frame(path: str, frame: pl.DataFrame, issues: list[Issue]) -> None:
    """The duplicate-id check over a whole file's ``line, id, raw`` (``raw``: the id as written when
    it differs from its normal form ``id``, else null or the same), in file order."""
    frame = frame.filter(pl.col("id") != "").with_columns(
        pl.col("id").str.to_lowercase().alias("key"), pl.coalesce("raw", "id").alias("raw"))
    dup = frame.filter(pl.col("key").is_duplicated())
    if dup.height == 0:
        return
    first = dup.group_by("key", maintain_order=True).agg(pl.col("line").first().alias("first_line"),
                                                         pl.col("id").first().alias("first_id"),
                                                         pl.col("raw").first().alias("first_raw"))
    joined = dup.join(first, on="key").filter(pl.col("line") != pl.col("first_line")).sort("line")
    for line, pid, first_line, first_id, raw, first_raw in joined.select(
            "line", "id", "first_line", "first_id", "raw", "first_raw").iter_rows():
        if pid != first_id:
            how = f"an id that differs only in letter case from '{first_id}'"
        elif raw != first_raw:
            how = f"an id that is the same after Unicode normalisation (NFC) as '{first_raw}'"
        else:
            how = "the same id"
        issues.append(Issue(path, line, "project_id", pid, f"{how} already appears on line {first_line}",
                            DUPLICATE_FIX))


__all__ = ["Cells", "check_unique_ids", "check_unique_id_frame", "number_fix", "BASES", "KINDS"]
