"""Compiled (Numba) loops of the engine where NumPy would need full-size temporaries: geometric
sums, per-project point worth and its root search (sensitivity), profitability indexes and
per-project summaries over scenarios. The IRR kernels are in :mod:`ratescape.evaluate.irr_kernels`.

Pure functions: arrays in, arrays out. Each has a NumPy formulation it is tested against.
"""
from __future__ import annotations

import numpy as np
from numba import njit

from .compiled_numpy import (
    bracketed_roots_numpy,
    class_weighted_numpy,
    column_summaries_numpy,
    geometric_sums_numpy,
    index_and_fixed_numpy,
)

# Arrays of up to this many elements take the NumPy forms of compiled_numpy.py (the same numbers,
# bit for bit) in index_and_fixed_investment, column_summaries and class_weighted_streams, and the
# loops below are not compiled for them: at that size NumPy's temporaries cost nothing and the
# compilation (about 0.8 s of CPU for the three, on a first run) would cost more than it saves.
NUMPY_MAX_ELEMENTS = 4_000_000


# Root searches (and point-worth sums) of up to this many projects run in NumPy, all rows in
# lockstep (compiled_numpy.bracketed_roots_numpy, geometric_sums_numpy: the same steps and
# numbers); compiling the search and the point worth costs about 1.5 s of CPU on a first run.
NUMPY_MAX_ROOTS = 2_000


def _use_compiled(n: int, compiled: bool | None, limit: int | None = None) -> bool:
    return n > (NUMPY_MAX_ELEMENTS if limit is None else limit) if compiled is None else bool(compiled)

# A geometric sequence q^t built by repeated multiplication drifts by about one rounding per step;
# it is re-anchored with an exact exp() every this many periods (drift stays below ~1e-14).
ANCHOR_STEPS = 32


@njit(cache=True, nogil=True)
def _geometric_sum(row, xp, tau, uniform_step):
    """sum_t row[t] * exp(xp * tau[t]) (see :func:`weighted_exponential_sums`)."""
    T = row.size
    acc = 0.0
    if uniform_step > 0.0:
        q = np.exp(xp * uniform_step)
        factor = 1.0
        for t in range(T):
            if t < 2 or (t % ANCHOR_STEPS) == 0:
                factor = np.exp(xp * tau[t])
            else:
                factor *= q
            acc += row[t] * factor
    else:
        for t in range(T):
            acc += row[t] * np.exp(xp * tau[t])
    return acc


@njit(cache=True, nogil=True)
def _weighted_geometric_sums(lines, x, tau, uniform_step, out):
    P, T = lines.shape
    for p in range(P):
        out[p] = _geometric_sum(lines[p], x[p], tau, uniform_step)


def _uniform_step(tau) -> float:
    """The spacing of tau from period 1 on when it is even and positive (a geometric sequence
    of factors), else 0."""
    steps = np.diff(tau[1:])
    return float(steps[0]) if steps.size and np.all(steps == steps[0]) and steps[0] > 0 else 0.0


def weighted_exponential_sums(lines, log_ratio, tau, *, compiled: bool | None = None) -> np.ndarray:
    """sum_t lines[p, t] * exp(log_ratio[p] * tau[t]) for every row p: (P, T), (P,), (T,) -> (P,).

    The present worth of one line class at a per-project point, with log_ratio =
    log(1 + growth) - log(1 + discount rate) [per year] and tau the discount exponents [years].
    Where tau is evenly spaced from period 1 on (every timing convention of
    :func:`ratescape.evaluate.timing.discount_exponents`), the factors are a geometric sequence
    and cost one multiplication each instead of an exp(). Equals
    ``np.einsum("pt,pt->p", lines, np.exp(np.multiply.outer(log_ratio, tau)))`` to ~1e-14 relative.
    Up to ``NUMPY_MAX_ROOTS`` rows the same sums run in NumPy (the same numbers; nothing compiled).
    """
    lines = np.ascontiguousarray(lines, dtype=float)
    x = np.ascontiguousarray(log_ratio, dtype=float)
    tau = np.ascontiguousarray(tau, dtype=float)
    if not _use_compiled(lines.shape[0], compiled, NUMPY_MAX_ROOTS):
        return geometric_sums_numpy(lines, x, tau, _uniform_step(tau))
    out = np.empty(lines.shape[0])
    _weighted_geometric_sums(lines, x, tau, _uniform_step(tau), out)
    return out


@njit(cache=True, nogil=True)
def _index_from_worth(pw, outlay_pw, pi, fixed):
    S, P = pw.shape
    for p in range(P):
        fixed[p] = -outlay_pw[0, p] if S else np.nan
    for s in range(S):
        for p in range(P):
            outlay = -outlay_pw[s, p]                  # read before pi[s, p] (may be the same array)
            if outlay != fixed[p]:
                fixed[p] = np.nan                      # NaN != anything: stays NaN
            pi[s, p] = 1.0 + pw[s, p] / outlay if outlay > 0.0 else np.nan
    for p in range(P):
        if not fixed[p] > 0.0:
            fixed[p] = np.nan


def index_from_worth(present_worth, outlay_worth, out=None) -> np.ndarray:
    """Profitability index 1 + PW / (-PW of the outlays), NaN where the outlays' PW is not negative.

    (S, P), (S, P) -> (S, P), in one pass. ``outlay_worth`` is the present worth of the
    investment lines (negative for an outlay) [currency]; the index is dimensionless. Equals
    ``np.where(-outlay_worth > 0, 1 + present_worth / -outlay_worth, nan)``: PW of the flows
    other than the investment per unit of PW of the investment, the same definition as the API's
    :func:`ratescape.evaluate.measures.profitability_index` (called with ``investment=`` the
    investment lines; see its references).
    """
    return index_and_fixed_investment(present_worth, outlay_worth, out)[0]


def index_and_fixed_investment(present_worth, outlay_worth, out=None, *,
                               compiled: bool | None = None) -> tuple[np.ndarray, np.ndarray]:
    """:func:`index_from_worth` and, per project, the investment's PW where it is the same in
    every scenario (an outlay at time 0, no cost axis): (S, P), (S, P) -> (S, P), (P,).

    The second result is that positive outlay [currency] or NaN (it varies, or there is none).
    Where it is a number, PI = 1 + PW / it exactly in every scenario, so a stored row need not
    carry its PI (the ``results`` view derives it). Up to ``NUMPY_MAX_ELEMENTS`` elements (or as
    ``compiled`` says) in NumPy (:mod:`ratescape.evaluate.compiled_numpy`, the same numbers).
    """
    pw = np.ascontiguousarray(present_worth, dtype=float)
    outlay = np.ascontiguousarray(outlay_worth, dtype=float)
    if pw.shape != outlay.shape or pw.ndim != 2:
        raise ValueError(f"present_worth {pw.shape} and outlay_worth {outlay.shape} must be the same 2-D shape")
    pi = np.empty(pw.shape) if out is None else out
    if not _use_compiled(pw.size, compiled):
        return index_and_fixed_numpy(pw, outlay, pi)
    fixed = np.empty(pw.shape[1])
    _index_from_worth(pw, outlay, pi, fixed)
    return pi, fixed


@njit(cache=True, nogil=True)
def _column_summaries(pw, w, lo, hi, total, weighted, accepted, weighted_accepted):
    S, P = pw.shape
    for p in range(P):
        lo[p] = np.inf
        hi[p] = -np.inf
        total[p] = 0.0
        weighted[p] = 0.0
        accepted[p] = 0.0
        weighted_accepted[p] = 0.0
    for s in range(S):
        ws = w[s]
        for p in range(P):
            v = pw[s, p]
            if v < lo[p]:
                lo[p] = v
            if v > hi[p]:
                hi[p] = v
            total[p] += v
            weighted[p] += ws * v
            if v >= 0.0:
                accepted[p] += 1.0
                weighted_accepted[p] += ws


def column_summaries(present_worth, weights, *, compiled: bool | None = None) -> dict:
    """Per-project summaries over scenarios of a scenario-major PW matrix (S, P), in one pass.

    Returns ``pw_min``, ``pw_max``, ``pw_mean`` (plain mean over scenarios), ``pw_expected``
    (sum_s w_s PW_s), ``accept_share`` (fraction of scenarios with PW >= 0) and
    ``accept_probability`` (sum of the weights of those scenarios), each (P,). Money in the
    amounts' currency. Equals the NumPy reductions ``pw.min(axis=0)``, ``weights @ pw``,
    ``(pw >= 0).mean(axis=0)``, ... to summation order. Present worth is finite here (the
    discount tensor is checked finite before any chunk runs). Up to ``NUMPY_MAX_ELEMENTS``
    elements (or as ``compiled`` says) in NumPy (:mod:`ratescape.evaluate.compiled_numpy`, the
    same numbers).
    """
    pw = np.ascontiguousarray(present_worth, dtype=float)
    w = np.ascontiguousarray(weights, dtype=float)
    if pw.ndim != 2 or w.shape != (pw.shape[0],):
        raise ValueError(f"present_worth must be (S, P) and weights (S,), got {pw.shape} and {w.shape}")
    S, P = pw.shape
    names = ("pw_min", "pw_max", "total", "pw_expected", "accepted", "accept_probability")
    if not _use_compiled(pw.size, compiled):
        out = dict(zip(names, column_summaries_numpy(pw, w)))
    else:
        out = {k: np.empty(P) for k in names}
        _column_summaries(pw, w, out["pw_min"], out["pw_max"], out["total"], out["pw_expected"], out["accepted"],
                          out["accept_probability"])
    out["pw_mean"] = out.pop("total") / S if S else np.full(P, np.nan)
    out["accept_share"] = out.pop("accepted") / S if S else np.full(P, np.nan)
    return out


@njit(cache=True, nogil=True)
def _class_weighted_streams(amounts, growth, out):
    C, P, T = amounts.shape
    F = growth.shape[1]
    for f in range(F):
        for p in range(P):
            for t in range(T):
                acc = 0.0
                for c in range(C):
                    acc += amounts[c, p, t] * growth[c, f, t]
                out[f, p, t] = acc


def class_weighted_streams(amounts, growth, *, compiled: bool | None = None) -> np.ndarray:
    """out[f, p, t] = sum_c amounts[c, p, t] * growth[c, f, t]: (C, P, T), (C, F, T) -> (F, P, T).

    Then-current streams at F inflation levels from amounts by line class and each class's growth
    factors, in one pass that writes the result once (NumPy's ``out += amounts[c] * growth[c]``
    makes a full-size temporary per class). The classes are summed in order from 0.0, as that
    NumPy loop does, so the two agree bit for bit; up to ``NUMPY_MAX_ELEMENTS`` output elements
    (or as ``compiled`` says) that NumPy loop runs instead.
    """
    A = np.ascontiguousarray(amounts, dtype=float)
    g = np.ascontiguousarray(growth, dtype=float)
    if A.ndim != 3 or g.ndim != 3 or g.shape[0] != A.shape[0] or g.shape[2] != A.shape[2]:
        raise ValueError(f"amounts (C, P, T) {A.shape} and growth (C, F, T) {g.shape} do not match")
    if not _use_compiled(g.shape[1] * A.shape[1] * A.shape[2], compiled):
        return class_weighted_numpy(A, g)
    out = np.empty((g.shape[1], A.shape[1], A.shape[2]))
    _class_weighted_streams(A, g, out)
    return out


# Which input a root search moves (the others stay at the base point).
MOVE_DISCOUNT_RATE, MOVE_INFLATION, MOVE_ESCALATION = 0, 1, 2


@njit(cache=True, nogil=True)
def _worth_at(lines, p, real, frozen, escalation, multiplier, tau, uniform_step, move, x, rate, inflation, shift,
              real_basis):
    """Present worth of project p with one input moved to x: the per-project point worth of
    :class:`ratescape.evaluate.kernel.PointEvaluator` (classes summed in order from 0.0). A class
    with ``frozen[c] = k >= 0`` grows only up to period k (see ``LineClass.frozen_at``). With
    ``real_basis`` the discount rate (``rate`` or the moved x) is the real rate r and the nominal
    rate is (1 + r)(1 + f) - 1 at the point's inflation f: the real rate stays fixed as f moves."""
    if move == MOVE_DISCOUNT_RATE:
        log_i = np.log1p(x)
        log_f = np.log1p(inflation)
        d = shift
    elif move == MOVE_INFLATION:
        log_i = np.log1p(rate)
        log_f = np.log1p(x)
        d = shift
    else:
        log_i = np.log1p(rate)
        log_f = np.log1p(inflation)
        d = x
    if real_basis:
        log_i = log_i + log_f
    total = 0.0
    for c in range(lines.shape[0]):
        log_g = np.log1p(escalation[c] + d) + log_f if real[c] else np.log1p(escalation[c])  # nominal: contract
        k = frozen[c]
        if k < 0 or not real[c]:
            total += _geometric_sum(lines[c, p], log_g - log_i, tau, uniform_step) * multiplier[c]
        else:
            head = _geometric_sum(lines[c, p, :k], log_g - log_i, tau[:k], uniform_step)
            tail = _geometric_sum(lines[c, p, k:], -log_i, tau[k:], uniform_step) * np.exp(log_g * tau[k])
            total += (head + tail) * multiplier[c]
    return total


@njit(cache=True, nogil=True)
def _bracketed_roots(lines, real, frozen, escalation, multiplier, tau, uniform_step, move, rate, inflation, shift,
                     rows, low, high, xatol, xrtol, real_basis, out):
    """Chandrupatla's method per row, as SciPy's vectorised ``find_root`` runs it (same steps,
    same termination tests), on the compiled point worth."""
    fatol = 2.2250738585072014e-308                     # smallest normal, SciPy's default
    for j in range(rows.size):
        p = rows[j]
        x1 = low[j]
        x2 = high[j]
        f1 = _worth_at(lines, p, real, frozen, escalation, multiplier, tau, uniform_step, move, x1, rate, inflation, shift,
                       real_basis)
        f2 = _worth_at(lines, p, real, frozen, escalation, multiplier, tau, uniform_step, move, x2, rate, inflation, shift,
                       real_basis)
        x3 = x2
        f3 = f2
        t = 0.5
        result = np.nan
        for it in range(2000):
            if abs(f1) < abs(f2):
                xmin, fmin = x1, f1
            else:
                xmin, fmin = x2, f2
            if abs(fmin) <= fatol:
                result = xmin
                break
            if np.sign(f1) == np.sign(f2) or not (np.isfinite(x1) and np.isfinite(x2)) \
                    or (np.isnan(f1) and np.isnan(f2)):
                break                                   # no sign change, or not finite: NaN
            dx = abs(x2 - x1)
            tol = abs(xmin) * xrtol + xatol
            if dx < tol:
                result = xmin
                break
            if it > 0:                                  # the first step bisects (t = 0.5)
                xi1 = (x1 - x2) / (x3 - x2)
                phi1 = (f1 - f2) / (f3 - f2)
                alpha = (x3 - x1) / (x2 - x1)
                if (1.0 - np.sqrt(1.0 - xi1)) < phi1 and phi1 < np.sqrt(xi1):
                    t = (f1 / (f1 - f2) * f3 / (f3 - f2) - alpha * f1 / (f3 - f1) * f2 / (f2 - f3))
                else:
                    t = 0.5
                tl = 0.5 * tol / dx
                t = min(max(t, tl), 1.0 - tl)
            x = x1 + t * (x2 - x1)
            f = _worth_at(lines, p, real, frozen, escalation, multiplier, tau, uniform_step, move, x, rate, inflation,
                          shift, real_basis)
            if np.sign(f) == np.sign(f1):
                x3, f3 = x1, f1
            else:
                x3, f3 = x2, f2
                x2, f2 = x1, f1
            x1, f1 = x, f
        out[j] = result


def bracketed_roots(lines, real, escalation, multiplier, tau, move, rate, inflation, shift, rows, low, high,
                    xatol, xrtol=4 * np.finfo(float).eps, frozen=None, *, real_basis: bool = False,
                    compiled: bool | None = None) -> np.ndarray:
    """Where each project's present worth crosses zero as one input moves within its bracket.

    Parameters
    ----------
    lines : (C, P, T) amounts by line class [currency]; real (C,) bool, escalation (C,)
        [fraction per year]; frozen (C,) int, optional: the period after which a real class stops
        growing (-1 = never; ``LineClass.frozen_at``),
        [fraction per year] and multiplier (C,) values of the classes; tau (T,) [years].
    move : MOVE_DISCOUNT_RATE, MOVE_INFLATION or MOVE_ESCALATION (the input searched).
    rate, inflation, shift : the base point (discount rate, inflation [fraction per year],
        escalation shift); the discount rate is nominal, or real when ``real_basis`` (then the
        real rate is held fixed as inflation moves).
    rows (J,), low (J,), high (J,) : the projects and their brackets (worth differs in sign).

    Returns
    -------
    ndarray (J,): the input value at the crossing, to ``|x| * xrtol + xatol``; NaN where the
    bracket holds no sign change.

    References
    ----------
    T. R. Chandrupatla, "A new hybrid quadratic/bisection algorithm for finding the zero of a
    nonlinear function without using derivatives", Advances in Engineering Software 28(3), 1997,
    pp. 145-149; the steps and tests follow ``scipy.optimize.elementwise.find_root``, which the
    tests use as the reference. Up to ``NUMPY_MAX_ROOTS`` rows (or as ``compiled`` says) every
    row runs the same steps in NumPy (:func:`ratescape.evaluate.compiled_numpy.bracketed_roots_numpy`,
    the same numbers) and nothing is compiled.
    """
    tau = np.ascontiguousarray(tau, dtype=float)
    out = np.empty(np.size(rows))
    frozen = np.full(np.shape(real), -1, dtype=np.int64) if frozen is None else frozen
    if not _use_compiled(np.size(rows), compiled, NUMPY_MAX_ROOTS):
        return bracketed_roots_numpy(np.ascontiguousarray(lines, dtype=float), np.asarray(real, dtype=np.bool_),
                                     np.asarray(frozen, dtype=np.int64), np.asarray(escalation, dtype=float),
                                     np.asarray(multiplier, dtype=float), tau, _uniform_step(tau), int(move),
                                     float(rate), float(inflation), float(shift), np.asarray(rows, dtype=np.int64),
                                     np.asarray(low, dtype=float), np.asarray(high, dtype=float), float(xatol),
                                     float(xrtol), bool(real_basis))
    _bracketed_roots(np.ascontiguousarray(lines, dtype=float), np.ascontiguousarray(real, dtype=np.bool_),
                     np.ascontiguousarray(frozen, dtype=np.int64),
                     np.ascontiguousarray(escalation, dtype=float), np.ascontiguousarray(multiplier, dtype=float),
                     tau, _uniform_step(tau), int(move), float(rate), float(inflation), float(shift),
                     np.ascontiguousarray(rows, dtype=np.int64), np.ascontiguousarray(low, dtype=float),
                     np.ascontiguousarray(high, dtype=float), float(xatol), float(xrtol), bool(real_basis), out)
    return out
