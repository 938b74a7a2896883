"""Alternatives of unequal lives compared on an equal-service basis.

Present worth over each alternative's own life compares unequal periods of service and is a
textbook error when the lives differ. Two equal-service bases are offered:

* **equivalent annual worth** (the repeatability assumption): AW = PW x (A/P, r, N) over each
  alternative's own life N, at the real rate r since PW is in base-year money. Choosing by AW is
  the same as choosing by PW over a common multiple of the lives when each alternative is
  repeated with the same base-year cash flows;
* a **study period** T: each alternative's cash flows are cut at T and a terminal value put in
  their place at T (the user's estimate, or the straight-line unrecovered investment).

Equal lives need neither: every basis then decides as present worth does.

Pure numpy: arrays in, arrays out.

References
----------
W. G. Sullivan, E. M. Wicks, C. P. Koelling, Engineering Economy, 15th ed., Pearson, 2012,
ch. 6 "Comparison and selection among alternatives": the repeatability assumption, the
coterminated (study-period) assumption and the imputed or estimated market value at the end of the
study period (from memory). L. T. Blank, A. J. Tarquin, Engineering Economy, 7th ed., McGraw-Hill,
2012, ch. 5-6: PW over the least common multiple of lives, AW over one life cycle, study-period
analysis with estimated market values (from memory).
"""
from __future__ import annotations

import numpy as np

from ratescape.evaluate.kernel import capital_recovery_factor

__all__ = ["lives_differ", "annual_worth", "straight_line_terminal_value", "cut_at_study_period"]


def lives_differ(horizon) -> bool:
    """True when the alternatives of a group have different lives (horizons in periods).

    >>> lives_differ([6, 9]), lives_differ([5, 5, 5])
    (True, False)
    """
    h = np.asarray(horizon)
    return bool(h.size > 1 and np.any(h != h.flat[0]))


def annual_worth(pw, years, real_rate):
    """Equivalent uniform annual worth of each alternative, AW = PW x (A/P, r, N).

    Parameters
    ----------
    pw : array_like, shape (A, S) [base-year currency]
        Present worth of A alternatives in S scenarios (or at S points).
    years : array_like, shape (A,) [years]
        Each alternative's own life N (its horizon in periods / periods per year), > 0.
    real_rate : array_like, shape (S,) [fraction per year], > -1
        The real discount rate of each scenario: PW is in base-year money, so the annual amount
        in base-year money uses the real rate. At r = 0, (A/P, 0, N) = 1/N.

    Returns
    -------
    ndarray, shape (A, S) [base-year currency per year]

    References
    ----------
    Sullivan, Wicks & Koelling, Engineering Economy, 15th ed., Pearson, 2012, sec. 6.4 (the
    repeatability assumption: AW over one life cycle; from memory). Blank & Tarquin, Engineering
    Economy, 7th ed., McGraw-Hill, 2012, sec. 6.1 (AW over one life cycle; from memory).

    Examples
    --------
    >>> round(float(annual_worth([[-27813.5]], [6], [0.15])[0, 0]), 1)   # Blank & Tarquin vendor A
    -7349.4
    """
    w = np.asarray(pw, dtype=float)
    n = np.asarray(years, dtype=float)
    r = np.asarray(real_rate, dtype=float)
    if w.ndim != 2 or n.shape != (w.shape[0],) or r.shape != (w.shape[1],):
        raise ValueError(f"pw must be (A, S), years (A,) and real_rate (S,); got {w.shape}, {n.shape}, {r.shape}")
    if np.any(~(n > 0)):
        raise ValueError("years must be positive")
    return w * capital_recovery_factor(r[None, :], n[:, None])


def straight_line_terminal_value(first_cost, salvage, life, study_period):
    """Unrecovered investment at the end of a study period by straight-line capital recovery.

    B_T = I - (I - S) T / N for an alternative whose life N exceeds the study period T: the book
    value of the first cost I recovered in equal parts over the life down to its salvage S
    (I (N - T) / N when S = 0). An alternative that ends at T keeps its own flows (its salvage
    at T): 0 is returned for N <= T.

    Parameters
    ----------
    first_cost : array_like (A,) [base-year currency], paid, positive
    salvage : array_like (A,) [base-year currency], received at N, >= 0
    life : array_like (A,) [periods]
    study_period : int [periods]

    References
    ----------
    Straight-line depreciation's book value (common practice), used as the estimated value of
    an asset at the end of a study period where no market value is estimated; Sullivan, Wicks &
    Koelling, Engineering Economy, 15th ed., Pearson, 2012, sec. 6.4 (the study-period approach
    needs a value of each alternative at the end of the study period; from memory).

    Examples
    --------
    >>> straight_line_terminal_value([18000.0], [2000.0], [9], 6).round(2).tolist()
    [7333.33]
    """
    i = np.asarray(first_cost, dtype=float)
    s = np.asarray(salvage, dtype=float)
    n = np.asarray(life, dtype=float)
    T = float(study_period)
    with np.errstate(divide="ignore", invalid="ignore"):
        value = i - (i - s) * T / n
    return np.where(n > T, value, 0.0)


def cut_at_study_period(amounts, study_period: int, collapse=None):
    """Cash flows cut at the study period T: periods after T dropped, or moved to T.

    Parameters
    ----------
    amounts : array_like, shape (C, A, T_total) [currency]
        Amounts by line class, alternative and period.
    study_period : int
        T in periods; periods T + 1, T + 2, ... are cut.
    collapse : array_like of bool, shape (C,), optional
        Classes whose amounts after T are summed into period T instead of dropped: the tax
        shield of depreciation not yet taken (the remaining tax book value, written off at a
        disposal at T) and loan lines (paid off at T; undiscounted, a screening simplification).

    Returns
    -------
    ndarray, shape (C, A, T_total), periods after T zero.

    Examples
    --------
    >>> cut_at_study_period([[[1.0, 2.0, 3.0, 4.0]]], 1, collapse=[True]).tolist()
    [[[1.0, 9.0, 0.0, 0.0]]]
    """
    a = np.array(amounts, dtype=float)
    T = int(study_period)
    if a.ndim != 3:
        raise ValueError(f"amounts must have shape (C, A, T), got {a.shape}")
    if T < 0:
        raise ValueError("study_period must be >= 0")
    if T + 1 >= a.shape[2]:
        return a
    if collapse is not None:
        c = np.asarray(collapse, dtype=bool)
        a[c, :, T] += a[c, :, T + 1:].sum(axis=-1)
    a[:, :, T + 1:] = 0.0
    return a
