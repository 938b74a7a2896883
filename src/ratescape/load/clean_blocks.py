"""One-query typing of a cash-flow block that holds no fault (the loader's fast path).

A long-form cash-flow file is read in blocks of a few megabytes (:mod:`ratescape.load.reader`)
and almost every block of a good file is clean. :class:`ratescape.load.validate.Cells` checks a
block cell by cell with one Polars operation per check and reports each bad cell; that is the
reference. Here the same parsing and the same conditions run as one lazy query whose rows carry
an "every cell is good" flag. When the flag holds on every row the typed block is returned, equal
to the reference's; otherwise None, and the caller runs the reference on the block so that every
fault is reported with its line, column and value. Pure: frames in, frames out, nothing written.

The conditions mirror :meth:`Cells.identifier`, :meth:`Cells.integer`, :meth:`Cells.money`,
:meth:`Cells.rate` and :meth:`Cells.choice`; ``tests/unit/test_clean_blocks.py`` checks that
both give the same frame on clean blocks and that every faulty block falls back.
"""
from __future__ import annotations

import polars as pl

from .columns import BASES, KINDS, MAX_AMOUNT, MAX_PERIOD, PERCENT_RATE_LIMIT

# the cash-flow columns holding numbers (all others are text)
NUMBER_COLUMNS = ("period", "amount", "escalation")


def _text(columns: list[str], name: str, spaceless: bool) -> pl.Expr:
    if name not in columns:
        return pl.lit("", dtype=pl.String)
    cells = pl.col(name).fill_null("")
    return cells if spaceless else cells.str.strip_chars()


def _good_number(present: pl.Expr, parsed: pl.Expr) -> pl.Expr:
    """A non-blank cell (``present``) that parses to a finite number."""
    return present & parsed.is_not_null() & parsed.is_finite().fill_null(False)


def _checked(frame: pl.DataFrame, *, ids: pl.Expr, basis: pl.Expr, kind: pl.Expr, period: pl.Expr,
             period_present: pl.Expr, amount: pl.Expr, amount_present: pl.Expr, rate: pl.Expr,
             rate_present: pl.Expr, line: pl.Expr, source: str, allow_extreme_rates: bool) -> pl.DataFrame | None:
    """The one query both fast paths share: the typed columns and an "every cell is good" flag.

    ``ids``, ``basis`` and ``kind`` are the stripped text cells ("" when blank); the numbers are
    parsed Float64 cells with, beside each, whether its cell was filled in.
    """
    rate_ok = ~rate_present | (_good_number(rate_present, rate) & (rate > -1.0))
    if not allow_extreme_rates:
        rate_ok = rate_ok & (~rate_present | (rate.abs() <= PERCENT_RATE_LIMIT))
    good = (
        (ids != "")
        & _good_number(period_present, period) & (period == period.floor())
        & (period >= 0) & (period <= MAX_PERIOD)
        & _good_number(amount_present, amount) & (amount.abs() <= MAX_AMOUNT)
        & rate_ok
        & basis.is_in(list(BASES) + [""])
        & kind.is_in(list(KINDS) + [""])
    ).fill_null(False)
    typed = frame.lazy().select(
        ids.alias("project_id"),
        period.cast(pl.Int64).alias("period"),
        amount.alias("amount"),
        pl.when(basis == "").then(pl.lit("real")).otherwise(basis).alias("basis"),
        pl.when(rate_present).then(rate).otherwise(pl.lit(0.0)).alias("escalation"),
        # a blank kind is inferred as in the reference: money out at period 0 is investment,
        # other money in is benefit, other money out is cost
        pl.when(kind != "").then(kind)
        .when((period == 0) & (amount < 0)).then(pl.lit("investment"))
        .when(amount >= 0).then(pl.lit("benefit"))
        .otherwise(pl.lit("cost")).alias("kind"),
        pl.lit(source, dtype=pl.String).alias("source"),
        line.cast(pl.Int64).alias("source_line"),
        good.alias("__good"),
    ).collect()
    if not typed["__good"].all():
        return None
    return typed.drop("__good")


def clean_flow_block(frame: pl.DataFrame, *, source: str, plain_ascii: bool, spaceless: bool,
                     allow_extreme_rates: bool) -> pl.DataFrame | None:
    """The typed block (the loader's ``CASH_FLOW_SCHEMA`` columns) when every cell of ``frame`` (text cells
    and ``line``) is good, else None.

    Only blocks of printable ASCII are taken (``plain_ascii``; others need the Unicode checks of
    the reference). Rates are fractions per year; amounts in the file's currency.
    """
    if not plain_ascii or frame.height == 0:
        return None
    columns = frame.columns
    text = {name: _text(columns, name, spaceless)
            for name in ("project_id", "period", "amount", "basis", "escalation", "kind")}
    numbers = {name: text[name].cast(pl.Float64, strict=False) for name in NUMBER_COLUMNS}
    return _checked(frame, ids=text["project_id"], basis=text["basis"], kind=text["kind"],
                    period=numbers["period"], period_present=text["period"] != "",
                    amount=numbers["amount"], amount_present=text["amount"] != "",
                    rate=numbers["escalation"], rate_present=text["escalation"] != "",
                    line=pl.col("line"), source=source, allow_extreme_rates=allow_extreme_rates)


def clean_flow_bytes(block: bytes, columns: list[str], first_line: int, lines: int, *, source: str,
                     allow_extreme_rates: bool) -> pl.DataFrame | None:
    """:func:`clean_flow_block` straight from the bytes of a block, its numbers parsed by the CSV reader.

    For a *regular* block of printable ASCII without a space (the caller checks: ``lines`` lines
    of ``len(columns)`` fields each, no quote, carriage return or blank line; see
    :func:`ratescape.load.reader.regular_lines`), so no cell needs stripping or Unicode checks.
    Polars' CSV reader parses the number columns with the grammar of its string-to-float cast,
    which the reference uses (``tests/unit/test_clean_blocks.py`` compares the two on some
    13,000 spellings); a cell it cannot read as a number makes the whole block fall back. The
    first line of the block is line ``first_line`` of the file. Returns the typed block or None.
    """
    if lines == 0:
        return None
    schema = {name: pl.Float64 if name in NUMBER_COLUMNS else pl.String for name in columns}
    try:
        frame = pl.read_csv(block, has_header=False, schema=schema, quote_char=None,
                            empty_string_is_null=False, truncate_ragged_lines=False, raise_if_empty=True)
    except (pl.exceptions.PolarsError, UnicodeDecodeError, ValueError):
        return None
    if frame.height != lines or frame.width != len(columns):
        return None

    def text(name: str) -> pl.Expr:
        return pl.col(name).fill_null("") if name in columns else pl.lit("", dtype=pl.String)

    def number(name: str) -> tuple[pl.Expr, pl.Expr]:
        if name not in columns:
            return pl.lit(None, dtype=pl.Float64), pl.lit(False)
        return pl.col(name), pl.col(name).is_not_null()

    (period, period_present), (amount, amount_present), (rate, rate_present) = (
        number(name) for name in NUMBER_COLUMNS)
    return _checked(frame, ids=text("project_id"), basis=text("basis"), kind=text("kind"),
                    period=period, period_present=period_present, amount=amount, amount_present=amount_present,
                    rate=rate, rate_present=rate_present,
                    line=pl.int_range(first_line, first_line + lines, dtype=pl.Int64),
                    source=source, allow_extreme_rates=allow_extreme_rates)


__all__ = ["clean_flow_block", "clean_flow_bytes"]
