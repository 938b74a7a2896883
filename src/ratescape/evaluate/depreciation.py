"""Tax depreciation schedules: straight line, declining balance, MACRS, units of production.

Every schedule is the depreciation amount of each *tax year* k = 1, 2, ...
in the money of that year (depreciation is fixed in nominal money: it is a
share of the historical cost, whatever inflation does afterwards).

The MACRS percentages are the published tables of the tax authority (IRS
Publication 946, Appendix A, Tables A-1 to A-5), kept as CSV data files in
``tables/`` beside this module with their source in each file's header. They
are looked up, never recomputed: the printed percentages were rounded by
the IRS so that each column sums to 100 (one printed column, Table A-2
20-year, sums to 99.992 because its year 2 is printed 7.000), and most
differ from a fresh declining-balance computation by up to 0.0064
percentage point (two cells of Table A-3 7-year by 0.014).

Broadcasting contract: ``cost`` and ``salvage`` broadcast against each other
to a batch shape B (scalars give B = ()); a schedule has shape B + (Y,),
Y the number of tax years of the method. The loop is over tax years only,
never over assets.

References
----------
Internal Revenue Service, Publication 946, How to Depreciate Property,
Appendix A (Tables A-1 to A-5); Rev. Proc. 87-57, 1987-2 C.B. 687.
D. G. Newnan, T. G. Eschenbach, J. P. Lavelle, Engineering Economic
Analysis, Oxford University Press, chapter "Depreciation" (from memory).
W. G. Sullivan, E. M. Wicks, C. P. Koelling, Engineering Economy, Pearson,
chapter "Depreciation and Income Taxes" (from memory).
"""
from __future__ import annotations

import csv
import functools
from pathlib import Path

import numpy as np

__all__ = [
    "METHODS",
    "CONVENTIONS",
    "MACRS_RECOVERY_YEARS",
    "macrs_percentages",
    "depreciation_schedule",
    "book_value",
    "gain_on_disposal",
    "tax_on_disposal",
]

METHODS = ("straight-line", "declining-balance", "macrs", "units-of-production")
CONVENTIONS = ("full-year", "half-year", "mid-quarter")
MACRS_RECOVERY_YEARS = (3, 5, 7, 10, 15, 20)

_TABLE_DIR = Path(__file__).resolve().parent / "tables"
_TABLE_FILES = {
    ("half-year", None): "macrs_gds_half_year_table_a1.csv",
    ("mid-quarter", 1): "macrs_gds_mid_quarter_q1_table_a2.csv",
    ("mid-quarter", 2): "macrs_gds_mid_quarter_q2_table_a3.csv",
    ("mid-quarter", 3): "macrs_gds_mid_quarter_q3_table_a4.csv",
    ("mid-quarter", 4): "macrs_gds_mid_quarter_q4_table_a5.csv",
}


@functools.lru_cache(maxsize=None)
def _load_table(filename: str) -> dict:
    """Read one MACRS CSV table -> {recovery_years: tuple of percentages}."""
    path = _TABLE_DIR / filename
    with open(path, newline="", encoding="utf-8") as fh:
        rows = list(csv.reader(line for line in fh if not line.startswith("#") and line.strip()))
    header, body = rows[0], rows[1:]
    table = {}
    for j, name in enumerate(header[1:], start=1):
        table[int(name)] = tuple(float(r[j]) for r in body if j < len(r) and r[j].strip())
    return table


def _check_int(value, name, minimum=1):
    if isinstance(value, (bool, np.bool_)):
        raise ValueError(f"{name} must be an integer, got {value!r}")
    try:
        as_int = int(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be an integer, got {value!r}") from None
    if as_int != value or as_int < minimum:
        raise ValueError(f"{name} must be an integer >= {minimum}, got {value!r}")
    return as_int


def _resolve_convention(method, convention, quarter):
    if convention is None:
        convention = "half-year" if method == "macrs" else "full-year"
    if convention not in CONVENTIONS:
        raise ValueError(f"convention must be one of {CONVENTIONS}, got {convention!r}")
    if convention == "mid-quarter":
        if quarter is None:
            raise ValueError("convention='mid-quarter' needs quarter=1, 2, 3 or 4 (quarter placed in service)")
        quarter = _check_int(quarter, "quarter")
        if quarter > 4:
            raise ValueError(f"quarter must be 1, 2, 3 or 4, got {quarter!r}")
    elif quarter is not None:
        raise ValueError(f"quarter is only used with convention='mid-quarter', got quarter={quarter!r}")
    return convention, quarter


def _first_year_fraction(convention, quarter):
    """Share of a full year's deduction allowed in the first tax year."""
    if convention == "full-year":
        return 1.0
    if convention == "half-year":
        return 0.5
    # mid-quarter: placed in service at the middle of quarter q -> (4 - q + 0.5) / 4
    return (4.5 - quarter) / 4.0


def macrs_percentages(recovery_years, convention="half-year", quarter=None):
    """Published MACRS GDS percentages for one recovery period and convention.

    Parameters
    ----------
    recovery_years : int
        GDS recovery period: 3, 5, 7, 10, 15 or 20 [years].
    convention : {"half-year", "mid-quarter"}
        Half-year (Table A-1) or mid-quarter (Tables A-2 to A-5).
    quarter : {1, 2, 3, 4}, optional
        Quarter of the tax year the property is placed in service; required
        for, and only for, ``convention="mid-quarter"``.

    Returns
    -------
    ndarray, shape (recovery_years + 1,) [percent of unadjusted basis]
        Percentage for recovery years 1 .. recovery_years + 1, summing to 100
        (99.992 for Table A-2, 20-year, as printed).

    Warnings
    --------
    The values are the rounded percentages as printed, read from the data
    files in ``tables/``; they are not recomputed. Where a data file marks a
    cell as recalled from memory, its header says so.

    Notes
    -----
    3-, 5-, 7- and 10-year property: 200 % declining balance; 15- and 20-year
    property: 150 % declining balance; both switch to straight line in the
    first year straight line gives the larger deduction; zero salvage.

    References
    ----------
    Internal Revenue Service, Publication 946, How to Depreciate Property,
    Appendix A, Tables A-1 to A-5.

    Examples
    --------
    >>> macrs_percentages(5).tolist()
    [20.0, 32.0, 19.2, 11.52, 11.52, 5.76]
    >>> macrs_percentages(3, "mid-quarter", quarter=1).tolist()
    [58.33, 27.78, 12.35, 1.54]
    """
    n = _check_int(recovery_years, "recovery_years")
    if n not in MACRS_RECOVERY_YEARS:
        raise ValueError(
            f"MACRS GDS recovery_years must be one of {MACRS_RECOVERY_YEARS}, got {recovery_years!r}"
        )
    if convention not in ("half-year", "mid-quarter"):
        raise ValueError(f"MACRS convention must be 'half-year' or 'mid-quarter', got {convention!r}")
    convention, quarter = _resolve_convention("macrs", convention, quarter)
    return np.array(_load_table(_TABLE_FILES[(convention, quarter)])[n], dtype=float)


def _db_to_sl(cost, salvage, n, rate_multiple, first_fraction, switch):
    """Declining balance on book value, optional switch to straight line.

    cost, salvage: (P,). Returns (P, Y). Loops over tax years only.
    """
    fractions = [first_fraction] + [1.0] * (n - 1)
    if first_fraction < 1.0:
        fractions.append(1.0 - first_fraction)
    rate = rate_multiple / n
    book = cost.copy()
    switched = np.zeros(cost.shape, dtype=bool)
    out = np.empty(cost.shape + (len(fractions),))
    elapsed = 0.0
    for k, frac in enumerate(fractions):
        remaining = n - elapsed  # recovery period left at the start of the year [years]
        left = np.maximum(book - salvage, 0.0)
        db = book * rate * frac
        if switch:
            sl = left * frac / remaining
            use_sl = switched | (sl >= db)
            amount = np.where(use_sl, sl, db)
            switched = use_sl
        else:
            amount = db
        amount = np.clip(amount, 0.0, left)  # never below salvage
        out[:, k] = amount
        book = book - amount
        elapsed += frac
    return out


def depreciation_schedule(
    cost,
    method,
    recovery_years,
    *,
    salvage=0.0,
    convention=None,
    quarter=None,
    declining_rate=2.0,
    switch_to_straight_line=True,
    units=None,
    total_units=None,
):
    """Depreciation amount of each tax year for one method.

    Parameters
    ----------
    cost : array_like, batch shape B [currency]
        Unadjusted basis (first cost) of each asset.
    method : {"straight-line", "declining-balance", "macrs", "units-of-production"}
    recovery_years : int
        Recovery period (depreciable life) N [years]. For ``"macrs"`` one of
        3, 5, 7, 10, 15, 20 (GDS class). For ``"units-of-production"`` it
        must equal the number of years in ``units``.
    salvage : array_like, broadcast with ``cost`` [currency]
        Estimated salvage value for straight line, declining balance and
        units of production; the schedule depreciates ``cost - salvage``.
        **Ignored for "macrs"**: MACRS recovers the whole basis with zero
        salvage (Pub. 946); the sale price matters only at disposal, see
        :func:`tax_on_disposal`.
    convention : {"full-year", "half-year", "mid-quarter"}, optional
        Default: ``"half-year"`` for ``"macrs"``, ``"full-year"`` otherwise.
        ``"half-year"`` / ``"mid-quarter"`` give N + 1 tax years with a part
        year first and last; ``"full-year"`` gives N years. MACRS accepts
        only half-year and mid-quarter (the published tables).
    quarter : {1, 2, 3, 4}, optional
        Quarter placed in service, with ``convention="mid-quarter"``.
    declining_rate : float
        Multiple of the straight-line rate for declining balance: 2.0
        (double declining balance) or 1.5 [-]. Any value > 0 is accepted.
    switch_to_straight_line : bool
        Declining balance only: switch to straight line on the remaining
        depreciable basis over the remaining recovery period in the first
        year that gives the larger deduction (default True). Without the
        switch, book value at the end generally stays above salvage.
    units, total_units : array_like, optional
        Units of production: output of each year, shape (Y,) or B + (Y,),
        and total lifetime output (default: the sum of ``units``).

    Returns
    -------
    ndarray, shape B + (Y,) [currency of each tax year]
        Y = N for full-year schedules, N + 1 for half-year / mid-quarter
        and MACRS, ``len(units)`` for units of production.

    Warnings
    --------
    Tax year k is reported at position k - 1; the caller places it at the
    end of period k (period 0 = purchase). Amounts are nominal: fixed in the
    money of the year they are deducted, not escalated with inflation.

    Notes
    -----
    Straight line: D_k = (B - S) / N.
    Declining balance: D_k = min(R/N * BV_{k-1} * a_k, BV_{k-1} - S), with
    switch to (BV_{k-1} - S) * a_k / (N - elapsed) when larger; a_k is the
    share of a year in tax year k (1, or the convention's part year).
    MACRS: D_k = B * p_k / 100 with p_k the published percentage.
    Units of production: D_k = (B - S) * u_k / U, capped at B - S.

    References
    ----------
    Internal Revenue Service, Publication 946, How to Depreciate Property,
    Appendix A. D. G. Newnan, T. G. Eschenbach, J. P. Lavelle, Engineering
    Economic Analysis, Oxford University Press (from memory: chapter
    "Depreciation", straight-line, declining-balance and MACRS sections).

    Examples
    --------
    >>> depreciation_schedule(100_000, "straight-line", 5, salvage=10_000).tolist()
    [18000.0, 18000.0, 18000.0, 18000.0, 18000.0]
    >>> depreciation_schedule(100_000, "declining-balance", 5).round(2).tolist()
    [40000.0, 24000.0, 14400.0, 10800.0, 10800.0]
    >>> depreciation_schedule(100_000, "macrs", 5).round(2).tolist()
    [20000.0, 32000.0, 19200.0, 11520.0, 11520.0, 5760.0]
    >>> depreciation_schedule([1000.0, 2000.0], "macrs", 3).shape
    (2, 4)
    """
    if method not in METHODS:
        raise ValueError(f"method must be one of {METHODS}, got {method!r}")
    n = _check_int(recovery_years, "recovery_years")
    convention, quarter = _resolve_convention(method, convention, quarter)

    cost_arr = np.asarray(cost, dtype=float)
    salvage_arr = np.asarray(0.0 if method == "macrs" else salvage, dtype=float)
    try:
        batch = np.broadcast_shapes(cost_arr.shape, salvage_arr.shape)
    except ValueError:
        raise ValueError(
            f"cost shape {cost_arr.shape} and salvage shape {salvage_arr.shape} do not broadcast"
        ) from None
    c = np.broadcast_to(cost_arr, batch).reshape(-1)
    s = np.broadcast_to(salvage_arr, batch).reshape(-1)
    if not (np.all(np.isfinite(c)) and np.all(np.isfinite(s))):
        raise ValueError("cost and salvage must be finite")
    if np.any(c < 0):
        raise ValueError("cost must be >= 0")
    if np.any(s < 0) or np.any(s > c):
        raise ValueError("salvage must satisfy 0 <= salvage <= cost")

    if method == "macrs":
        if convention == "full-year":
            raise ValueError("MACRS tables exist for convention 'half-year' or 'mid-quarter', not 'full-year'")
        pct = macrs_percentages(n, convention, quarter)
        out = c[:, None] * (pct / 100.0)
    elif method == "straight-line":
        a = _first_year_fraction(convention, quarter)
        shares = np.ones(n) if a == 1.0 else np.array([a] + [1.0] * (n - 1) + [1.0 - a])
        out = (c - s)[:, None] / n * shares
    elif method == "declining-balance":
        rate = float(declining_rate)
        if not (np.isfinite(rate) and rate > 0):
            raise ValueError(f"declining_rate must be > 0 (2.0 or 1.5), got {declining_rate!r}")
        out = _db_to_sl(c, s, n, rate, _first_year_fraction(convention, quarter), bool(switch_to_straight_line))
    else:  # units-of-production
        if convention != "full-year":
            raise ValueError("units-of-production uses no convention; leave convention unset")
        if units is None:
            raise ValueError("method='units-of-production' needs units=(output of each year)")
        u = np.asarray(units, dtype=float)
        if u.ndim == 0 or u.shape[-1] != n:
            raise ValueError(f"units must have shape (recovery_years,) = ({n},) or batch + ({n},), got {u.shape}")
        if np.any(~np.isfinite(u)) or np.any(u < 0):
            raise ValueError("units must be finite and >= 0")
        try:
            u = np.broadcast_to(u, batch + (n,)).reshape(-1, n)
        except ValueError:
            raise ValueError(f"units shape {np.shape(units)} does not broadcast with batch shape {batch}") from None
        total = u.sum(axis=-1) if total_units is None else np.broadcast_to(
            np.asarray(total_units, dtype=float), batch).reshape(-1)
        if np.any(~np.isfinite(total)) or np.any(total <= 0):
            raise ValueError("total_units must be finite and > 0")
        share = np.minimum(np.cumsum(u, axis=-1) / total[:, None], 1.0)
        cumulative = (c - s)[:, None] * share
        out = np.diff(cumulative, axis=-1, prepend=0.0)
    return out.reshape(batch + (out.shape[-1],))


def book_value(cost, depreciation):
    """Book value at the end of each tax year: cost minus accumulated depreciation.

    Parameters
    ----------
    cost : array_like, batch shape B [currency]
    depreciation : array_like, shape B + (Y,) [currency]
        A schedule from :func:`depreciation_schedule`.

    Returns
    -------
    ndarray, shape B + (Y,) [currency]
        BV_k = cost - sum_{j<=k} D_j, k = 1..Y.

    Examples
    --------
    >>> d = depreciation_schedule(100_000, "straight-line", 5, salvage=10_000)
    >>> book_value(100_000, d).tolist()
    [82000.0, 64000.0, 46000.0, 28000.0, 10000.0]
    """
    c = np.asarray(cost, dtype=float)
    d = np.asarray(depreciation, dtype=float)
    if d.ndim == 0:
        raise ValueError("depreciation must have a last axis of tax years, got a scalar")
    if c.shape != d.shape[:-1]:
        try:
            np.broadcast_shapes(c.shape, d.shape[:-1])
        except ValueError:
            raise ValueError(f"cost shape {c.shape} does not match depreciation shape {d.shape}[:-1]") from None
    return c[..., None] - np.cumsum(d, axis=-1)


def gain_on_disposal(sale_price, book_value_at_disposal):
    """Taxable gain (or loss, negative) on selling an asset: sale price minus book value.

    Parameters
    ----------
    sale_price, book_value_at_disposal : array_like [currency of the disposal year]
        Broadcast against each other.

    Returns
    -------
    ndarray or float [currency]

    Notes
    -----
    G = S - BV. A positive gain up to the accumulated depreciation is
    depreciation recapture; above the original cost it is a capital gain; a
    negative G is a loss on disposal.

    Examples
    --------
    >>> gain_on_disposal(30_000, 17_280)
    12720.0
    """
    g = np.asarray(sale_price, dtype=float) - np.asarray(book_value_at_disposal, dtype=float)
    return g if g.ndim else float(g)


def tax_on_disposal(sale_price, book_value_at_disposal, tax_rate):
    """Income tax due on disposal: tax_rate * (sale price - book value).

    Parameters
    ----------
    sale_price, book_value_at_disposal : array_like [currency of the disposal year]
    tax_rate : array_like [fraction]
        All three broadcast against each other.

    Returns
    -------
    ndarray or float [currency]
        Tax due; negative = tax saved (a loss on disposal offsets other income).

    Warnings
    --------
    Screening simplification: the whole gain (depreciation recapture and any
    capital gain above the original cost) is taxed at the ordinary income-tax
    rate, and a loss saves tax at that rate in the same year. Capital-gains
    rates, section 1231 netting and the disposal-year convention are not
    modelled.

    Notes
    -----
    T = t (S - BV); after-tax proceeds S - T = (1 - t) S + t BV.

    Examples
    --------
    >>> tax_on_disposal(30_000, 17_280, 0.25)
    3180.0
    """
    t = np.asarray(tax_rate, dtype=float)
    if np.any(~np.isfinite(t)) or np.any(t < 0) or np.any(t >= 1):
        raise ValueError("tax_rate must satisfy 0 <= tax_rate < 1")
    out = t * (np.asarray(sale_price, dtype=float) - np.asarray(book_value_at_disposal, dtype=float))
    return out if out.ndim else float(out)
