"""NumPy forms of three loops of :mod:`ratescape.evaluate.compiled`, for arrays small enough that
their full-size temporaries cost nothing and compiling the loop (on a first run, before Numba's
cache holds it) would cost more than it saves (issue 16, part 3).

Each gives its compiled counterpart's result bit for bit: reductions run over the scenario axis
(axis 0 of a C-ordered (S, P) array, which NumPy adds row after row, in the loop's order) and the
classes are summed in order from 0.0; the tests compare the two.
"""
from __future__ import annotations

import math

import numpy as np

from ratescape.evaluate.bracketing import chandrupatla


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


# ------------------------------------------------- switching values: Chandrupatla's root search --
def _libm(fn):
    def one(v: float) -> float:
        try:
            return fn(v)
        except OverflowError:
            return math.inf
        except ValueError:                               # log1p(-1) = -inf, below -1 NaN, as compiled
            return -math.inf if v == -1.0 else math.nan
    ufunc = np.frompyfunc(one, 1, 1)

    def apply(x):
        x = np.asarray(x, dtype=float)
        if not x.size:
            return np.empty(x.shape)
        with np.errstate(over="ignore", invalid="ignore"):
            return ufunc(x).astype(float)
    return apply


# the C library's exp and log1p, which compiled code calls (NumPy's SIMD forms differ in the last
# bit now and then)
libm_exp = _libm(math.exp)
libm_log1p = _libm(math.log1p)


def geometric_sums_numpy(rows, xp, tau, uniform_step):
    """``compiled._geometric_sum`` of each row of ``rows`` (n, T) at its own ``xp`` (n,)."""
    n, T = rows.shape
    acc = np.zeros(n)
    with np.errstate(over="ignore", invalid="ignore"):
        if uniform_step > 0.0:
            q = libm_exp(xp * uniform_step)
            factor = np.ones(n)
            for t in range(T):
                factor = libm_exp(xp * tau[t]) if (t < 2 or t % 32 == 0) else factor * q   # compiled.ANCHOR_STEPS
                acc = acc + rows[:, t] * factor
        else:
            for t in range(T):
                acc = acc + rows[:, t] * libm_exp(xp * tau[t])
    return acc


def _worth_at(lines, p, real, frozen, escalation, multiplier, tau, uniform_step, move, x, rate, inflation, shift,
              real_basis):
    """``compiled._worth_at`` of projects ``p`` (n,) each at its own moved input ``x`` (n,)."""
    n = p.size
    if move == 0:                                        # MOVE_DISCOUNT_RATE
        log_i, log_f, d = libm_log1p(x), libm_log1p(np.full(n, inflation)), np.full(n, shift)
    elif move == 1:                                      # MOVE_INFLATION
        log_i, log_f, d = libm_log1p(np.full(n, rate)), libm_log1p(x), np.full(n, shift)
    else:                                                # MOVE_ESCALATION
        log_i, log_f, d = libm_log1p(np.full(n, rate)), libm_log1p(np.full(n, inflation)), x
    if real_basis:
        log_i = log_i + log_f
    total = np.zeros(n)
    with np.errstate(over="ignore", invalid="ignore"):
        for c in range(lines.shape[0]):
            log_g = libm_log1p(escalation[c] + d) + log_f if real[c] else libm_log1p(np.full(n, escalation[c]))
            k = int(frozen[c])
            if k < 0 or not real[c]:
                total = total + geometric_sums_numpy(lines[c][p], log_g - log_i, tau, uniform_step) * multiplier[c]
            else:
                head = geometric_sums_numpy(lines[c][p, :k], log_g - log_i, tau[:k], uniform_step)
                tail = geometric_sums_numpy(lines[c][p, k:], -log_i, tau[k:], uniform_step) * libm_exp(log_g * tau[k])
                total = total + (head + tail) * multiplier[c]
    return total


def bracketed_roots_numpy(lines, real, frozen, escalation, multiplier, tau, uniform_step, move, rate, inflation,
                          shift, rows, low, high, xatol, xrtol, real_basis):
    """``compiled._bracketed_roots``: Chandrupatla's method on every row at once, in lockstep (each
    row takes the compiled loop's steps; a row leaves the loop where the compiled one breaks).

    T. R. Chandrupatla, "A new hybrid quadratic/bisection algorithm for finding the zero of a
    nonlinear function without using derivatives", Advances in Engineering Software 28(3), 1997,
    pp. 145-149, with the steps and tests of ``scipy.optimize.elementwise.find_root``."""
    J = rows.size
    if J == 0:
        return np.full(0, np.nan)

    def worth(idx, x):
        return _worth_at(lines, rows[idx], real, frozen, escalation, multiplier, tau, uniform_step, move, x, rate,
                         inflation, shift, real_basis)

    all_rows = np.arange(J)
    x1 = np.array(low, dtype=float)
    x2 = np.array(high, dtype=float)
    f1 = worth(all_rows, x1)
    f2 = worth(all_rows, x2)
    return chandrupatla(worth, x1, x2, f1, f2, xatol=xatol, xrtol=xrtol)
