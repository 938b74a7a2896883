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


def _text(columns: list[str], name: str, spaceless: bool) -> pl.Expr:
    if name not in columns:
        return pl.lit("", dtype=pl.String)
    cells = pl.col(name).fill_null("")
    return cells if spaceless else cells.str.strip_chars()


def _good_number(text: pl.Expr, parsed: pl.Expr) -> pl.Expr:
    """A non-blank cell that parses to a finite number."""
    return (text != "") & parsed.is_not_null() & parsed.is_finite().fill_null(False)


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
    period = text["period"].cast(pl.Float64, strict=False)
    amount = text["amount"].cast(pl.Float64, strict=False)
    rate = text["escalation"].cast(pl.Float64, strict=False)
    rate_ok = (text["escalation"] == "") | (_good_number(text["escalation"], rate) & (rate > -1.0))
    if not allow_extreme_rates:
        rate_ok = rate_ok & ((text["escalation"] == "") | (rate.abs() <= PERCENT_RATE_LIMIT))
    good = (
        (text["project_id"] != "")
        & _good_number(text["period"], period) & (period == period.floor())
        & (period >= 0) & (period <= MAX_PERIOD)
        & _good_number(text["amount"], amount) & (amount.abs() <= MAX_AMOUNT)
        & rate_ok
        & text["basis"].is_in(list(BASES) + [""])
        & text["kind"].is_in(list(KINDS) + [""])
    ).fill_null(False)
    kind = text["kind"]
    typed = frame.lazy().select(
        text["project_id"].alias("project_id"),
        period.cast(pl.Int64).alias("period"),
        amount.alias("amount"),
        pl.when(text["basis"] == "").then(pl.lit("real")).otherwise(text["basis"]).alias("basis"),
        pl.when(text["escalation"] == "").then(pl.lit(0.0)).otherwise(rate).alias("escalation"),
        # a blank kind is inferred as in the reference: money out at period 0 is investment,
        # other money in is benefit, other money out is cost
        pl.when(kind != "").then(kind)
        .when((period == 0) & (amount < 0)).then(pl.lit("investment"))
        .when(amount >= 0).then(pl.lit("benefit"))
        .otherwise(pl.lit("cost")).alias("kind"),
        pl.lit(source, dtype=pl.String).alias("source"),
        pl.col("line").cast(pl.Int64).alias("source_line"),
        good.alias("__good"),
    ).collect()
    if not typed["__good"].all():
        return None
    return typed.drop("__good")


__all__ = ["clean_flow_block"]
