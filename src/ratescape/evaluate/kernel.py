"""The engine's kernel: present worth over a scenario grid as one matrix product.

A chunk of P projects with T periods is a stack of amount matrices, one per
*line class* c = (basis, escalation, multiplier). For S scenarios with
nominal rate i_s, inflation f_s and per-scenario multipliers m_cs, the
discount tensor is

    D[c, t, s] = m_cs * ((1 + e_c)(1 + f_s))^tau_t / (1 + i_s)^tau_t   (real lines)
    D[c, t, s] = m_cs * (1 + e_c)^tau_t / (1 + i_s)^tau_t              (nominal lines)

A real line's escalation e_c is a differential over general inflation; a nominal line's is a
fixed contractual rate (a lease or service contract indexed at e a year, an indexed tariff), so
its then-current amount is amount x (1 + e_c)^tau_t whatever the inflation of the scenario.

and the present worth (base-year money, time 0) of every project in every
scenario is ``A.reshape(P, C*T) @ D.reshape(C*T, S)``.

Factors are computed in log space, exp(tau * (log1p(e) + log1p(f) - log1p(i))),
so long horizons and extreme rates neither lose precision nor overflow early.

References
----------
W. G. Sullivan, E. M. Wicks, C. P. Koelling, Engineering Economy, Pearson,
chapter on price changes: constant-dollar vs actual-dollar analysis (from memory).
I. Fisher, The Theory of Interest, Macmillan, 1930.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping, Sequence

import numpy as np

from .factors import a_given_p
from .kinds import ROLES as _KIND_ROLES
from .timing import discount_exponents


@dataclass(frozen=True, order=True)
class LineClass:
    """A class of cash-flow lines that share one discount-factor row.

    basis : "real" (base-year money, grows with inflation and escalation) or
        "nominal" (then-current money fixed by contract).
    escalation : [fraction per year] for a real line, its escalation differential over general
        inflation (then-current amount x ((1 + e)(1 + f))^tau); for a nominal line, its fixed
        contractual escalation (then-current amount x (1 + e)^tau, independent of inflation f).
        Sullivan, Wicks & Koelling, Engineering Economy, Pearson, chapter on price changes:
        actual-dollar amounts escalated at a stated rate (from memory).
    multiplier : name of a per-scenario multiplier ("one" for plain lines;
        "after_tax" = 1 - tax_rate, "tax" = tax_rate, "cost_multiplier", ...).
    frozen_at : for a real class, the period k after which its amounts stop growing (-1, the
        default: never). An amount a in period t >= k is worth a ((1+e)(1+f))^tau_k / (1+i)^tau_t:
        money fixed in then-current terms at period k, e.g. the depreciation of an asset whose
        real-basis cost was paid in period k (its basis is that period's price, and the tax
        deductions are a fixed share of it). Amounts before k grow as in a plain real class.
    """

    basis: str = "real"
    escalation: float = 0.0
    multiplier: str = "one"
    frozen_at: int = -1

    @property
    def key(self) -> tuple:
        """The class's key in a plan's ``class_index``: (basis, escalation, multiplier), with
        ``frozen_at`` appended for a frozen class."""
        base = (self.basis, self.escalation, self.multiplier)
        return base if self.frozen_at < 0 else base + (self.frozen_at,)

    @property
    def grows_throughout(self) -> bool:
        """True for a real class that grows with inflation in every period (not frozen)."""
        return self.basis == "real" and self.frozen_at < 0

    def growth_exponents(self, exponents: np.ndarray) -> np.ndarray:
        """Growth exponents (T,) [years]: tau_t, or min(tau_t, tau_k) for a class frozen at k."""
        tau = np.asarray(exponents, dtype=float)
        if self.frozen_at < 0:
            return tau
        return np.minimum(tau, tau[min(self.frozen_at, tau.size - 1)])

    def then_current_growth(self, inflation: np.ndarray, exponents: np.ndarray, escalation_shift=0.0) -> np.ndarray:
        """Factors (F, T) from an amount as written to its then-current money at each inflation level.

        Real: ((1 + e + shift)(1 + f))^g_t with g the growth exponents (frozen classes stop growing)
        and ``escalation_shift`` (scalar or (F,)) the sensitivity's shift of real escalation;
        nominal: the contractual (1 + e)^tau_t, the same at every inflation level."""
        f = np.atleast_1d(np.asarray(inflation, dtype=float))
        tau = np.asarray(exponents, dtype=float)
        if self.basis == "real":
            shift = np.broadcast_to(np.asarray(escalation_shift, dtype=float), f.shape)
            return np.exp(np.multiply.outer(np.log1p(f) + np.log1p(self.escalation + shift),
                                            self.growth_exponents(tau)))
        return np.broadcast_to(np.exp(np.log1p(self.escalation) * tau), (f.size, tau.size)).copy()

    def __post_init__(self):
        if self.basis not in ("real", "nominal"):
            raise ValueError(f"basis must be 'real' or 'nominal', got {self.basis!r}")
        if not self.escalation > -1.0:
            raise ValueError(f"escalation must be > -1, got {self.escalation!r}")


def multiplier_values(name: str, multipliers: Mapping[str, np.ndarray], shape: tuple) -> np.ndarray:
    """Values of a (possibly composite) multiplier name, e.g. ``"after_tax*benefit_multiplier"``.

    ``"one"`` is 1; a composite name is the product of its ``*``-separated parts.
    """
    out = np.ones(shape)
    if name == "one":
        return out
    for part in name.split("*"):
        if part not in multipliers:
            raise ValueError(f"no per-scenario values given for multiplier {part!r}")
        m = np.asarray(multipliers[part], dtype=float)
        try:
            out = out * np.broadcast_to(m, shape)
        except ValueError:
            raise ValueError(f"multiplier {part!r} has shape {m.shape}, expected {shape}") from None
    return out


def _rates(x, name: str) -> np.ndarray:
    a = np.asarray(x, dtype=float)
    if a.ndim != 1:
        raise ValueError(f"{name} must be 1-D (S,), got shape {a.shape}")
    if np.any(~np.isfinite(a)) or np.any(a <= -1.0):
        raise ValueError(f"{name} must be finite and > -1 (fractions per year)")
    return a


def discount_tensor(classes: Sequence[LineClass], exponents: np.ndarray, discount_rate, inflation,
                    multipliers: Mapping[str, np.ndarray] | None = None, escalation_shift=0.0) -> np.ndarray:
    """Discount-factor tensor D (C, T, S) for line classes over scenarios.

    Parameters
    ----------
    classes : sequence of C LineClass
    exponents : (T,) [years] from :func:`timing.discount_exponents`
    discount_rate : (S,) nominal rate i [fraction per year]
    inflation : (S,) general inflation f [fraction per year]
    multipliers : mapping name -> (S,) per-scenario multiplier; "one" is implicit.
    escalation_shift : scalar or (S,) [fraction per year] added to every real line's escalation
        (the escalation input of one-at-a-time sensitivity); 0 by default. A nominal line's
        contractual escalation is fixed by its contract and not shifted.

    Returns
    -------
    ndarray (C, T, S): present worth of one unit of each class's amount.
    """
    i = _rates(discount_rate, "discount_rate")
    f = _rates(inflation, "inflation")
    if i.shape != f.shape:
        raise ValueError(f"discount_rate {i.shape} and inflation {f.shape} must have the same shape (S,)")
    tau = np.asarray(exponents, dtype=float)
    if tau.ndim != 1:
        raise ValueError(f"exponents must be 1-D (T,), got shape {tau.shape}")
    multipliers = dict(multipliers or {})
    shift = np.broadcast_to(np.asarray(escalation_shift, dtype=float), i.shape)
    log_i = np.log1p(i)
    log_f = np.log1p(f)
    out = np.empty((len(classes), tau.size, i.size))
    for c, cls in enumerate(classes):  # loop over a handful of classes, not projects or scenarios
        log_growth = (np.log1p(cls.escalation + shift) + log_f if cls.basis == "real"
                      else np.full_like(log_f, np.log1p(cls.escalation)))   # nominal: contractual escalation only
        if cls.frozen_at >= 0 and cls.basis == "real":
            np.exp(np.multiply.outer(cls.growth_exponents(tau), log_growth) - np.multiply.outer(tau, log_i),
                   out=out[c])
        else:
            np.exp(np.multiply.outer(tau, log_growth - log_i), out=out[c])
        if cls.multiplier != "one":
            out[c] *= multiplier_values(cls.multiplier, multipliers, i.shape)[None, :]
    return out


def present_worth_classes(amounts: np.ndarray, tensor: np.ndarray, *, out: np.ndarray | None = None) -> np.ndarray:
    """Present worth (P, S) of class-stacked amounts (C, P, T) with a tensor (C, T, S).

    One BLAS matrix product: (P, C*T) @ (C*T, S). ``out`` (P, S), when
    given, receives the result (reusing one buffer across chunks avoids
    page-faulting a fresh array for every chunk).
    """
    A = np.asarray(amounts, dtype=float)
    D = np.asarray(tensor, dtype=float)
    if A.ndim != 3 or D.ndim != 3 or A.shape[0] != D.shape[0] or A.shape[2] != D.shape[1]:
        raise ValueError(f"amounts (C, P, T) {A.shape} and tensor (C, T, S) {D.shape} do not match")
    C, P, T = A.shape
    S = D.shape[2]
    if out is not None and out.shape != (P, S):
        raise ValueError(f"out has shape {out.shape}, expected {(P, S)}")
    if C == 1:
        return np.matmul(A[0], D[0], out=out)
    flat = np.ascontiguousarray(A.transpose(1, 0, 2)).reshape(P, C * T)
    return np.matmul(flat, np.ascontiguousarray(D.reshape(C * T, S)), out=out)


def present_worth_scenario_major(amounts: np.ndarray, tensor_t: np.ndarray, *,
                                 out: np.ndarray | None = None) -> np.ndarray:
    """Present worth (S, P), scenario-major, of class-stacked amounts (C, P, T).

    ``tensor_t`` is the discount tensor laid out (S, C*T) (see :func:`scenario_major_tensor`).
    The same product as :func:`present_worth_classes`, transposed: (S, C*T) @ (C*T, P), so rows
    come out one scenario at a time, ready to be written scenario by scenario without a transpose.
    """
    A = np.asarray(amounts, dtype=float)
    C, P, T = A.shape
    if tensor_t.ndim != 2 or tensor_t.shape[1] != C * T:
        raise ValueError(f"amounts (C, P, T) {A.shape} and tensor (S, C*T) {tensor_t.shape} do not match")
    flat = A[0] if C == 1 else np.ascontiguousarray(A.transpose(1, 0, 2)).reshape(P, C * T)
    return np.matmul(tensor_t, flat.T, out=out)


def scenario_major_tensor(tensor: np.ndarray) -> np.ndarray:
    """The discount tensor (C, T, S) as a contiguous (S, C*T) matrix."""
    C, T, S = tensor.shape
    return np.ascontiguousarray(tensor.reshape(C * T, S).T)


def present_worth_grid(amounts, rates, *, timing: str = "end", periods_per_year: float = 1.0) -> np.ndarray:
    """Present worth of P cash-flow rows at S discount rates: (P, T), (S,) -> (P, S).

    The engine's kernel in its plainest form, one matrix product
    ``amounts @ V`` with V[t, s] = (1 + rates[s])^(-tau_t).

    Parameters
    ----------
    amounts : array_like (P, T) [currency], period t = 0, 1, ..., T-1 on the last axis.
    rates : array_like (S,) [fraction per year], each > -1.
    timing : "end" (default), "mid" or "beginning" of period.
    periods_per_year : periods per year m; annual rates convert as (1+i)^(1/m) - 1.

    Returns
    -------
    ndarray (P, S) [currency at time 0]

    Warnings
    --------
    Period 0 is undiscounted; period t >= 1 is discounted over t years
    (end), t - 1/2 (mid) or t - 1 (beginning), divided by ``periods_per_year``.

    Notes
    -----
    PW = sum_t A_t (1 + i)^(-tau_t).

    References
    ----------
    E. L. Grant, W. G. Ireson, R. S. Leavenworth, Principles of Engineering
    Economy, Wiley (present-worth method; from memory).

    Examples
    --------
    >>> present_worth_grid([[-100.0, 60.0, 60.0]], [0.0, 0.1]).round(4).tolist()
    [[20.0, 4.1322]]
    """
    A = np.asarray(amounts, dtype=float)
    if A.ndim != 2:
        raise ValueError(f"amounts must be 2-D (P, T), got shape {A.shape}")
    r = _rates(np.atleast_1d(rates), "rates")
    tau = discount_exponents(A.shape[1], timing, periods_per_year)
    with np.errstate(over="ignore"):
        V = np.exp(-np.multiply.outer(tau, np.log1p(r)))
    if np.all(np.isfinite(V)):
        return A @ V
    return _present_worth_scaled(A, tau, np.log1p(r))


def _present_worth_scaled(A: np.ndarray, tau: np.ndarray, log_r: np.ndarray) -> np.ndarray:
    """PW where discount factors overflow (rates near -100 % over long horizons).

    Rows are grouped by their last non-zero period L (a loop over distinct horizons, not
    rows); each group's factors are scaled by their largest value exp(tau_L * max(0, -log(1+r)))
    so the product stays finite, then scaled back: the result is exact where it is
    representable and +-inf (never NaN) where it is not.
    """
    P, T = A.shape
    out = np.zeros((P, log_r.size))
    nonzero = A != 0
    last = np.where(nonzero.any(axis=1), T - 1 - np.argmax(nonzero[:, ::-1], axis=1), 0)
    for L in np.unique(last):
        rows = np.flatnonzero(last == L)
        m = tau[L] * np.maximum(0.0, -log_r)                                    # (S,) log of the largest factor
        V = np.exp(-np.multiply.outer(tau[:L + 1], log_r) - m[None, :])        # (L+1, S), entries <= 1
        scaled = A[rows, :L + 1] @ V
        with np.errstate(over="ignore", invalid="ignore"):
            out[rows] = np.where(scaled == 0, 0.0, scaled * np.exp(m)[None, :])
    return out


def then_current_streams(amounts: np.ndarray, classes: Sequence[LineClass], exponents: np.ndarray,
                         inflation, multipliers: Mapping[str, np.ndarray] | None = None) -> np.ndarray:
    """Then-current (nominal) cash flows (F, P, T) at each of F inflation levels.

    Real lines grow by ((1 + e)(1 + f))^tau; nominal lines by their contractual escalation
    (1 + e)^tau only, independent of f. tau are the run's discount exponents (the same ones the
    present worth uses), so a stream and its present worth agree under every timing convention.
    Multipliers, when given, are (F,) values per inflation level.
    """
    from .compiled import class_weighted_streams
    A = np.asarray(amounts, dtype=float)
    f = _rates(np.atleast_1d(inflation), "inflation")
    tau = np.asarray(exponents, dtype=float)
    multipliers = dict(multipliers or {})
    growth = np.empty((len(classes), f.size, tau.size))
    for c, cls in enumerate(classes):
        g = cls.then_current_growth(f, tau)                                          # (F, T)
        if cls.multiplier != "one":
            g = g * multiplier_values(cls.multiplier, multipliers, f.shape)[:, None]
        growth[c] = g
    return class_weighted_streams(A, growth)          # sum over classes, one pass


def capital_recovery_factor(rate, years) -> np.ndarray:
    """(A/P, i, n) = i / (1 - (1 + i)^-n), with the i -> 0 limit 1/n; n may be fractional.

    Parameters
    ----------
    rate : array_like [fraction per year], > -1
    years : array_like [years], > 0; broadcast against ``rate``.

    References
    ----------
    Any engineering-economy text's capital recovery factor (common practice).

    Examples
    --------
    >>> round(float(capital_recovery_factor(0.10, 5)), 4)
    0.2638
    """
    crf = np.asarray(a_given_p(rate, years), dtype=float)   # one implementation: factors.a_given_p
    return crf if crf.ndim else float(crf)


ROLES = _KIND_ROLES   # the one list of roles (evaluate/kinds.py)



class PointEvaluator:
    """Evaluate present worth of a chunk's projects at many single points, reusing its layout.

    When every project shares the point (a scan value), the worth is three
    matrix-vector products over the flattened (P, C*T) amounts; otherwise the
    factors are built per project, (P, T) per class.

    ``discount_basis`` says what the ``discount_rate`` arguments of every method are: the nominal
    rate i ("nominal", default) or the real rate r ("real"), with i = (1 + r)(1 + f) - 1 at the
    point's inflation f (exact Fisher). On a real-basis run the real rate is what stays fixed
    when inflation moves, so a project of real lines without tax does not depend on inflation.
    """

    def __init__(self, amounts_by_role, classes: Sequence[LineClass], exponents, multipliers=None,
                 discount_basis: str = "nominal"):
        if discount_basis not in ("nominal", "real"):
            raise ValueError(f"discount_basis must be 'nominal' or 'real', got {discount_basis!r}")
        self.real_basis = discount_basis == "real"
        A = np.asarray(amounts_by_role, dtype=float)
        if A.ndim != 4 or A.shape[0] != len(ROLES) or A.shape[1] != len(classes):
            raise ValueError(f"amounts_by_role must be (R={len(ROLES)}, C={len(classes)}, P, T), got shape {A.shape}")
        self.A = A
        self.classes = list(classes)
        self.tau = np.asarray(exponents, dtype=float)
        self.multipliers = {k: float(np.asarray(v, dtype=float).ravel()[0]) for k, v in (multipliers or {}).items()}
        _, C, P, T = A.shape
        self.P = P
        self.total = A.sum(axis=0)                                               # (C, P, T)
        # what a cost multiplier scales: the investment lines and, after tax, the lines of classes
        # that follow the assets' cost (their depreciation shield and credits, ``asset_cost``)
        follows_cost = np.array(["asset_cost" in c.multiplier.split("*") for c in self.classes])
        self.cost_scaled = np.where(follows_cost[:, None, None], self.total, A[0])   # (C, P, T)
        flat = lambda x: np.ascontiguousarray(x.transpose(1, 0, 2)).reshape(P, C * T)  # noqa: E731
        self.flat_total, self.flat_invest, self.flat_benefit = flat(self.total), flat(self.cost_scaled), flat(A[1])

    def at_shared_points(self, discount_rates, inflations, escalation_shifts=None) -> np.ndarray:
        """Present worth (P, K) of every project at K points shared by all projects (multipliers at
        their base values): one (P, C*T) @ (C*T, K) product instead of K separate evaluations."""
        i = np.atleast_1d(np.asarray(discount_rates, dtype=float))
        f = np.broadcast_to(np.asarray(inflations, dtype=float), i.shape)
        i = self._nominal(i, f)
        shift = 0.0 if escalation_shifts is None else escalation_shifts
        point = {k: np.full(i.size, v) for k, v in self.multipliers.items()}
        with np.errstate(over="ignore", invalid="ignore"):
            D = discount_tensor(self.classes, self.tau, i, f, point, escalation_shift=shift)
            return self.flat_total @ D.reshape(-1, i.size)

    def at_rows(self, rows, discount_rate, inflation, *, escalation_shift=0.0, cost_multiplier=1.0,
                benefit_multiplier=1.0) -> np.ndarray:
        """Present worth (J,) of only the projects ``rows`` (J,) at their own points (each argument
        scalar or (J,)); the cost is that of J projects, not P."""
        rows = np.asarray(rows, dtype=np.int64)
        J = rows.size
        i, f, shift, cm, bm = (np.broadcast_to(np.asarray(v, dtype=float), (J,)) for v in
                               (discount_rate, inflation, escalation_shift, cost_multiplier, benefit_multiplier))
        if np.any(i <= -1) or np.any(f <= -1):
            raise ValueError("rates must be > -1")
        i = self._nominal(i, f)
        with np.errstate(over="ignore", invalid="ignore"):
            return self._per_project(rows, i, f, shift, cm, bm)

    def _nominal(self, rate: np.ndarray, inflation: np.ndarray) -> np.ndarray:
        """The nominal rate of a discount-rate argument on this evaluator's basis (exact Fisher)."""
        return (1.0 + rate) * (1.0 + inflation) - 1.0 if self.real_basis else rate

    def roots_between(self, move: int, rows, low, high, *, discount_rate: float, inflation: float,
                      escalation_shift: float = 0.0, xatol: float = 0.0) -> np.ndarray:
        """Where the worth of projects ``rows`` (J,) crosses zero as one input (``move``: one of
        :data:`ratescape.evaluate.compiled.MOVE_DISCOUNT_RATE`, ``MOVE_INFLATION``,
        ``MOVE_ESCALATION``) moves within [low, high] (J,), the others at the given base point
        (multipliers at base); NaN where the bracket has no sign change. One compiled root search
        per project (:func:`ratescape.evaluate.compiled.bracketed_roots`)."""
        from .compiled import bracketed_roots
        real = np.array([c.basis == "real" for c in self.classes])
        frozen = np.array([c.frozen_at for c in self.classes], dtype=np.int64)
        escalation = np.array([c.escalation for c in self.classes], dtype=float)
        multiplier = np.array([1.0 if c.multiplier == "one" else
                               float(multiplier_values(c.multiplier, self.multipliers, (1,))[0]) for c in self.classes])
        with np.errstate(over="ignore", invalid="ignore"):
            return bracketed_roots(self.total, real, escalation, multiplier, self.tau, move, discount_rate, inflation,
                                   escalation_shift, rows, low, high, xatol, frozen=frozen,
                                   real_basis=self.real_basis)

    def __call__(self, discount_rate, inflation, *, escalation_shift=0.0, cost_multiplier=1.0,
                 benefit_multiplier=1.0) -> np.ndarray:
        P = self.P
        i, f, shift, cm, bm = (np.broadcast_to(np.asarray(v, dtype=float), (P,)) for v in
                               (discount_rate, inflation, escalation_shift, cost_multiplier, benefit_multiplier))
        if np.any(i <= -1) or np.any(f <= -1):
            raise ValueError("rates must be > -1")
        i = self._nominal(i, f)
        if P == 0:
            return np.zeros(0)
        with np.errstate(over="ignore", invalid="ignore"):   # extreme scan points: inf/NaN, flagged by callers
            return self._evaluate(P, i, f, shift, cm, bm)

    def _evaluate(self, P, i, f, shift, cm, bm):
        if all(np.all(v == v[0]) for v in (i, f, shift)):
            point = {k: np.array([v]) for k, v in self.multipliers.items()}
            d = discount_tensor(self.classes, self.tau, i[:1], f[:1], point, escalation_shift=shift[:1]).ravel()
            out = self.flat_total @ d
            if np.any(cm != 1.0):
                out = out + (cm - 1.0) * (self.flat_invest @ d)
            if np.any(bm != 1.0):
                out = out + (bm - 1.0) * (self.flat_benefit @ d)
            return out
        return self._per_project(None, i, f, shift, cm, bm)

    def _per_project(self, rows, i, f, shift, cm, bm) -> np.ndarray:
        """Worth of the projects ``rows`` (all when None), each at its own point: per class, a
        compiled sum of its lines times its geometric discount factors."""
        from .compiled import weighted_exponential_sums
        pick = (lambda a: a) if rows is None else (lambda a: a[rows])   # noqa: E731
        n = i.size
        log_i = np.log1p(i)
        out = np.zeros(n)
        scaled_invest, scaled_benefit = np.any(cm != 1.0), np.any(bm != 1.0)
        for c, cls in enumerate(self.classes):  # a handful of classes; compiled loop over projects and periods
            log_g = (np.log1p(cls.escalation + shift) + np.log1p(f) if cls.basis == "real"
                     else np.full(n, np.log1p(cls.escalation)))
            lines = pick(self.total[c])
            if scaled_invest:
                lines = lines + (cm - 1.0)[:, None] * pick(self.cost_scaled[c])
            if scaled_benefit:
                lines = lines + (bm - 1.0)[:, None] * pick(self.A[1, c])
            if cls.frozen_at >= 0 and cls.basis == "real":    # grows up to period k, fixed after
                k = min(cls.frozen_at, self.tau.size - 1)
                worth = (weighted_exponential_sums(lines[:, :k], log_g - log_i, self.tau[:k])
                         + weighted_exponential_sums(lines[:, k:], -log_i, self.tau[k:])
                         * np.exp(log_g * self.tau[k]))
            else:
                worth = weighted_exponential_sums(lines, log_g - log_i, self.tau)
            if cls.multiplier != "one":
                worth = worth * multiplier_values(cls.multiplier, self.multipliers, (n,))
            out += worth
        return out
