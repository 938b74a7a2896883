"""Measures that do not exist for a cost-only stream are NULL with a status.

A *cost-only* project has no benefit lines: the only money it receives is salvage, a residual or
another non-benefit line (a replacement chosen for least life-cycle cost, a regulatory
obligation). Its benefit-cost ratios would be 0 or negative, its IRR and MIRR would be driven by
its residual value alone, its profitability index and payback have no benefit to measure: they
are stored as NULL, with ``project_summary.measure_status = 'cost-only'`` and
``irr_results.status = 'cost-only'``. Present, future and annual worth (its life-cycle cost)
remain.

References
----------
Common practice: a cost-only comparison is a least-cost (minimum life-cycle cost) choice, made by
present or annual worth; rate-of-return and benefit-cost measures need benefits. W. G. Sullivan,
E. M. Wicks, C. P. Koelling, Engineering Economy, 15th ed., Pearson, 2012, ch. 5-6 ("cost
alternatives", from memory).
"""
from __future__ import annotations

import numpy as np

from ratescape.evaluate.kernel import ROLES

COST_ONLY = "cost-only"

#: project_summary columns that do not exist for a cost-only stream (investment_worth carries the PI)
MASKED_SUMMARY = ("bc_ratio_base", "bc_ratio_modified_base", "mirr_base", "payback_periods",
                  "discounted_payback_base", "investment_worth")


def cost_only_projects(A_by_role: np.ndarray) -> np.ndarray:
    """(P,) True for a project without benefit lines that pays money out (amounts (R, C, P, T)).

    >>> import numpy as np
    >>> A = np.zeros((3, 1, 2, 3)); A[0, 0, :, 0] = -100; A[1, 0, 0, 1:] = 60; A[2, 0, 1, 2] = 10
    >>> cost_only_projects(A).tolist()
    [False, True]
    """
    benefit = A_by_role[ROLES.index("benefit")]
    has_benefit = np.any(benefit != 0.0, axis=(0, 2))
    pays = np.any(A_by_role.sum(axis=0) < 0.0, axis=(0, 2))
    return ~has_benefit & pays


def mask_cost_only(summary: dict, pi: np.ndarray, irr, A_by_role: np.ndarray) -> np.ndarray:
    """NULL (NaN) the measures of the chunk's cost-only projects, in place; return the (P,) mask.

    ``summary``: the chunk's project_summary columns (gains ``measure_status``); ``pi``: (S, P)
    profitability indexes; ``irr``: the chunk's IrrTable ((F * P) rows, inflation-major), whose
    roots are cleared (count 0) and which gains ``cost_only`` (rows) for the status written.
    """
    mask = cost_only_projects(A_by_role)
    P = mask.size
    summary["measure_status"] = np.where(mask, COST_ONLY, None).astype(object)
    if not mask.any():
        irr.cost_only = None
        return mask
    for key in MASKED_SUMMARY:
        if key in summary:
            column = np.array(summary[key], dtype=float)
            column[mask] = np.nan
            summary[key] = column
    pi[:, mask] = np.nan
    rows = np.tile(mask, np.asarray(irr.count).size // P)
    irr.roots[rows] = np.nan
    irr.count[rows] = 0
    irr.cost_only = rows
    return mask
