"""NumPy forms of three loops of :mod:`ratescape.evaluate.compiled`, for arrays small enough that
their full-size temporaries cost nothing and compiling the loop (on a first run, before Numba's
cache holds it) would cost more than it saves (issue 16, part 3).

Each gives its compiled counterpart's result bit for bit: reductions run over the scenario axis
(axis 0 of a C-ordered (S, P) array, which NumPy adds row after row, in the loop's order) and the
classes are summed in order from 0.0; the tests compare the two.
"""
from __future__ import annotations

import numpy as np


def index_and_fixed_numpy(pw, outlay_pw, out):
    """``compiled._index_from_worth``: PI (S, P) into ``out`` (may be ``pw`` itself) and the fixed
    investment (P,)."""
    S, P = pw.shape
    outlay = np.negative(outlay_pw)
    if S:
        same = (outlay == outlay[0]).all(axis=0)               # NaN never equal: the loop's NaN too
        fixed = np.where(same & (outlay[0] > 0.0), outlay[0], np.nan)
    else:
        fixed = np.full(P, np.nan)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        pi = np.where(outlay > 0.0, 1.0 + pw / outlay, np.nan)
    out[...] = pi
    return out, fixed


def column_summaries_numpy(pw, w):
    """``compiled._column_summaries``: min, max, total, weighted total, accepted count and weight
    per project (present worth is finite here, as the compiled loop assumes)."""
    S, P = pw.shape
    if S == 0:
        return (np.full(P, np.inf), np.full(P, -np.inf), np.zeros(P), np.zeros(P), np.zeros(P), np.zeros(P))
    accept = pw >= 0.0
    return (pw.min(axis=0), pw.max(axis=0), pw.sum(axis=0), (w[:, None] * pw).sum(axis=0),
            accept.sum(axis=0).astype(float), np.where(accept, w[:, None], 0.0).sum(axis=0))


def class_weighted_numpy(amounts, growth):
    """``compiled._class_weighted_streams``: out[f, p, t] = sum_c amounts[c, p, t] growth[c, f, t],
    the classes added in order from 0.0."""
    C, P, T = amounts.shape
    out = np.zeros((growth.shape[1], P, T))
    for c in range(C):                                          # a handful of line classes
        out += amounts[c][None, :, :] * growth[c][:, None, :]
    return out
