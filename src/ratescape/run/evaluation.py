"""Evaluation of one chunk: present worth and PI over every scenario, IRRs, base measures, sensitivity.

Pure with respect to storage: arrays in, arrays and dicts out (the chunk loop, or a Dask worker,
calls :func:`evaluate_chunk`). The numbers come from :mod:`ratescape.evaluate`.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ratescape.evaluate.compiled import column_summaries, index_and_fixed_investment
from ratescape.evaluate.irr import STATUS_LABELS, irr_roots
from ratescape.evaluate.kernel import (
    ROLES,
    capital_recovery_factor,
    present_worth_scenario_major,
    then_current_streams,
)
from ratescape.evaluate.measures import (
    benefit_cost_ratio,
    discounted_payback_period,
    mirr,
    payback_period,
    present_worth,
)
from ratescape.evaluate.sensitivity import one_at_a_time
from ratescape.evaluate.tax import carried_loss_streams, carry_forward_adjustment
from ratescape.evaluate.timing import steps_per_period, stream_on_timing_grid
from ratescape.run.cost_only import mask_cost_only
from ratescape.run.plan import IRR_SEARCH, Plan, scenario_multipliers


def _reused(buffers: dict | None, name: str, shape: tuple) -> np.ndarray | None:
    """A buffer of ``buffers`` (a caller's dict kept across chunks) of at least this shape, or None."""
    if buffers is None:
        return None
    size = int(np.prod(shape))
    if name not in buffers or buffers[name].size < size:
        buffers[name] = np.empty(size)
    return buffers[name][:size].reshape(shape)


def _nonzero_columns_product(tensor_sm: np.ndarray, amounts: np.ndarray, out: np.ndarray | None = None) -> np.ndarray:
    """(S, C*T) @ (C*T, P) of class-stacked amounts (C, P, T), skipping the (class, period)
    columns that are zero for every project of the chunk (they add exactly zero: the tensor is
    checked finite when the run is planned). Investments sit in a few periods, so their
    product shrinks from C*T columns to a handful."""
    C, P, T = amounts.shape
    flat = amounts[0] if C == 1 else np.ascontiguousarray(amounts.transpose(1, 0, 2)).reshape(P, C * T)
    used = np.flatnonzero(np.any(flat != 0.0, axis=0))
    if used.size == C * T:
        return np.matmul(tensor_sm, flat.T, out=out)
    return np.matmul(np.ascontiguousarray(tensor_sm[:, used]), np.ascontiguousarray(flat[:, used]).T, out=out)


def worth_index_and_investment(plan: Plan, A_by_role: np.ndarray, buffers: dict | None = None) -> tuple:
    """Present worth and profitability index (S, P), scenario-major, of a chunk's amounts
    (R, C, P, T), and each project's investment PW where it is the same in every scenario (P,).

    PI = 1 + PW / (PW of the investment outlays), where the outlay's present worth is positive;
    NaN otherwise (a project without an investment has no PI). The fixed investment is NaN where
    the outlay's PW varies between scenarios or is not positive (see
    :func:`ratescape.evaluate.compiled.index_and_fixed_investment`). With ``buffers`` (a dict
    the caller keeps across chunks and does not read between them) the matrices reuse its arrays.
    """
    shape = (plan.tensor_sm.shape[0], A_by_role.shape[2])
    pw = _nonzero_columns_product(plan.tensor_sm, A_by_role.sum(axis=0), out=_reused(buffers, "pw", shape))
    if carries_losses(plan):
        pw += losses_carried_forward(plan, A_by_role.sum(axis=0))
    outlay = _nonzero_columns_product(plan.tensor_sm, A_by_role[0], out=_reused(buffers, "pi", shape))
    pi, fixed = index_and_fixed_investment(pw, outlay, out=outlay)   # in place: the outlay is not needed again
    return pw, pi, fixed


def carries_losses(plan: Plan) -> bool:
    """True when the run is after tax with each project's losses carried forward ([tax] losses)."""
    return bool(plan.spec.after_tax and plan.spec.tax.get("losses") == "carry-forward")


def carried_streams(plan: Plan, A: np.ndarray, inflation, multipliers: dict) -> np.ndarray:
    """(F, P, T) then-current tax deferral of carried losses at F points with (F,) multipliers:
    zero unless the run carries losses forward (:func:`ratescape.evaluate.tax.carried_loss_streams`)."""
    f = np.atleast_1d(np.asarray(inflation, dtype=float))
    if not carries_losses(plan):
        return np.zeros((f.size, A.shape[1], A.shape[2]))
    return carried_loss_streams(A, plan.classes, plan.exponents, f, multipliers).transpose(1, 0, 2)


def losses_carried_forward(plan: Plan, A: np.ndarray) -> np.ndarray:
    """(S, P) worth to add when each project's tax losses are carried forward ([tax] losses)."""
    cols = plan.scenarios.columns
    return carry_forward_adjustment(A, plan.classes, plan.exponents, cols["discount_rate"], cols["inflation"],
                                    scenario_multipliers(plan.scenarios, True))


def evaluate_chunk(plan: Plan, A_by_role: np.ndarray, horizon: np.ndarray, buffers: dict | None = None) -> dict:
    """Pure evaluation of one chunk: present worth and PI (S, P), summaries, IRRs, sensitivity.

    ``buffers``: see :func:`worth_index_and_investment` (the in-process evaluator reuses them; a chunk's
    worth matrices are written to its worth files before the next chunk is evaluated)."""
    cols = plan.scenarios.columns
    A = A_by_role.sum(axis=0)
    pw, pi, fixed_investment = worth_index_and_investment(plan, A_by_role, buffers)   # (S, P), (S, P), (P,)
    years = horizon / float(plan.spec.periods_per_year)
    w = plan.weights
    b = plan.scenarios.base_index
    columns = column_summaries(pw, w)                                   # one pass over (S, P)
    summary = {
        "accept_share": columns["accept_share"], "accept_probability": columns["accept_probability"],
        "pw_min": columns["pw_min"], "pw_max": columns["pw_max"], "pw_mean": columns["pw_mean"],
        "pw_expected": columns["pw_expected"], "pw_base": pw[b].copy(), "accepted_base": pw[b] >= 0.0,
        "annual_worth_base": pw[b] * capital_recovery_factor(cols["real_rate"][b], years),
        "horizon": horizon.astype(np.int32), "investment_worth": fixed_investment,
    }
    irr = irr_over_inflation(plan, A)
    F, P = plan.inflation_levels.size, A.shape[1]
    summary.update(base_measures(plan, A_by_role, horizon))
    mask_cost_only(summary, pi, irr, A_by_role)          # measures a cost-only stream has not: NULL
    basis = plan.spec.discount_basis                                    # move rates on the run's own basis
    sens = one_at_a_time(A_by_role, plan.classes, plan.exponents,
                         float(cols["real_rate" if basis == "real" else "discount_rate"][b]),
                         float(cols["inflation"][b]), plan.sensitivity, plan.base_multipliers, discount_basis=basis,
                         carried_losses=carries_losses(plan))
    pw_before = None
    if plan.tensor_before_tax_sm is not None:
        pw_before = present_worth_scenario_major(A, plan.tensor_before_tax_sm)
        summary["pw_before_tax_base"] = pw_before[b].copy()
    return {"pw": pw, "pw_before_tax": pw_before, "pi": pi, "summary": summary, "irr": irr, "irr_shape": (F, P),
            "sensitivity": sens}


@dataclass
class IrrTable:
    """IRR results laid out as (inflation level, project) rows: F * P rows, roots per period."""

    roots: np.ndarray
    count: np.ndarray
    status: np.ndarray            # IrrStatus codes (int8)
    sign_changes: np.ndarray
    cost_only: np.ndarray | None = None   # (F * P,) rows of cost-only projects (run/cost_only.py), or None

    @property
    def labels(self) -> np.ndarray:
        return STATUS_LABELS[self.status.astype(int)]


def timed_irr_roots(streams: np.ndarray, timing: str, low: float, high: float):
    """Every rate per period in [low, high] at which ``streams`` (N, T), placed by ``timing``,
    have zero present worth: the IRR of the stream on its timing grid
    (:func:`ratescape.evaluate.timing.stream_on_timing_grid`), mapped from grid steps to periods
    by (1 + i) = (1 + x)^k. Under end-of-period timing this is :func:`irr_roots` itself."""
    k = steps_per_period(timing)
    if k == 1 and timing == "end":
        return irr_roots(streams, low=low, high=high)
    grid = stream_on_timing_grid(streams, timing)
    step = lambda rate: np.expm1(np.log1p(rate) / k)                     # noqa: E731 per period -> per step
    res = irr_roots(grid, low=float(step(low)), high=float(step(high)))
    with np.errstate(invalid="ignore"):
        roots = np.expm1(k * np.log1p(np.asarray(res.roots, dtype=float)))
    return res._replace(roots=roots)


def irr_over_inflation(plan: Plan, A: np.ndarray) -> IrrTable:
    """Every IRR root of every project's then-current stream at each inflation level of the grid.

    The IRR is the rate at which the stored present worth is zero at that inflation level, under
    the run's timing convention: the then-current streams are built with the same exponents tau
    the present worth uses (real lines grown by ((1+e)(1+f))^tau, nominal lines by (1+e)^tau) and
    each flow is placed where the present worth discounts it (:func:`timed_irr_roots`).

    A project whose lines are all real (constant base-year money) has a present worth
    sum_t R_t ((1+f)/(1+i))^tau_t, so its nominal roots are (1+i) = (1+f)(1+r) for the roots r
    of R under the same timing: its IRR is searched once and mapped by the exact Fisher relation
    to every inflation level. Projects with nominal lines are searched at each level.
    """
    levels = plan.inflation_levels
    F, (_, P, T) = levels.size, A.shape
    timing = plan.spec.timing
    nominal = np.array([not c.grows_throughout for c in plan.classes])   # nominal or frozen: searched per level
    mixed = np.any(A[nominal] != 0, axis=(0, 2)) if nominal.any() else np.zeros(P, dtype=bool)
    if carries_losses(plan):          # carried losses are not a Fisher image of one real stream
        mixed = np.ones(P, dtype=bool)
    m = float(plan.spec.periods_per_year)
    low, high = IRR_SEARCH
    real_part = then_current_streams(A[:, ~mixed], plan.classes, plan.exponents, [0.0],
                                     {k: v[:1] for k, v in plan.irr_multipliers.items()})[0]
    r = timed_irr_roots(real_part, timing, low, high)
    growth = np.power(1.0 + levels, 1.0 / m)                                     # per-period inflation factor
    K = max(np.asarray(r.roots).shape[-1], 1)
    parts = {}
    if mixed.any():
        streams = then_current_streams(A[:, mixed], plan.classes, plan.exponents, levels, plan.irr_multipliers)
        streams += carried_streams(plan, A[:, mixed], levels, plan.irr_multipliers)
        q = timed_irr_roots(streams.reshape(F * int(mixed.sum()), T), timing, low, high)
        K = max(K, np.asarray(q.roots).shape[-1])
        parts["mixed"] = q
    roots = np.full((F, P, K), np.nan)
    count = np.zeros((F, P), dtype=np.int64)
    status = np.zeros((F, P), dtype=np.int8)
    signs = np.zeros((F, P), dtype=np.int64)
    rr = np.asarray(r.roots)
    roots[:, ~mixed, :rr.shape[-1]] = growth[:, None, None] * (1.0 + rr[None]) - 1.0
    count[:, ~mixed] = np.asarray(r.count)[None]
    status[:, ~mixed] = np.asarray(r.status)[None]
    signs[:, ~mixed] = np.asarray(r.sign_changes)[None]
    if mixed.any():
        q = parts["mixed"]
        n = int(mixed.sum())
        qr = np.asarray(q.roots).reshape(F, n, -1)
        roots[:, mixed, :qr.shape[-1]] = qr
        count[:, mixed] = np.asarray(q.count).reshape(F, n)
        status[:, mixed] = np.asarray(q.status).reshape(F, n)
        signs[:, mixed] = np.asarray(q.sign_changes).reshape(F, n)
    return IrrTable(roots.reshape(F * P, K), count.ravel(), status.ravel(), signs.ravel())


def base_measures(plan: Plan, A_by_role: np.ndarray, horizon: np.ndarray) -> dict:
    """Measures of worth of each project at the base scenario, on its then-current cash flows.

    Future worth (at the end of the project's horizon), conventional and modified
    benefit-cost ratios (benefits = benefit lines; O&M = the other lines net of
    salvage; investment = investment lines), simple and discounted payback
    [periods], and MIRR with finance and reinvestment rates equal to the base
    nominal discount rate [fraction per year].

    MIRR runs over each project's own horizon (:func:`own_horizon`: its last period with a
    line, after tax including the tax lines, so the period a write-off may need belongs to a
    project only when it has a flow there), never over the portfolio's padded length, and
    places flows by the run's timing: a project's MIRR does not depend on which other projects
    are loaded.
    """
    cols = plan.scenarios.columns
    b = plan.scenarios.base_index
    i, f = float(cols["discount_rate"][b]), float(cols["inflation"][b])
    m = float(plan.spec.periods_per_year)
    mult = {name: np.array([v]) for name, v in plan.base_multipliers.items()}
    by_role = [then_current_streams(A_by_role[r], plan.classes, plan.exponents, [f], mult)[0] for r in range(len(ROLES))]
    invest, benefit, other = by_role
    total = invest + benefit + other + carried_streams(plan, A_by_role.sum(axis=0), [f], mult)[0]
    opts = {"timing": plan.spec.timing, "periods_per_year": m}
    with np.errstate(divide="ignore", invalid="ignore"):
        bc = benefit_cost_ratio(benefit, -other, -invest, i, **opts)
        bc_mod = benefit_cost_ratio(benefit, -other, -invest, i, modified=True, **opts)
        fw = present_worth(total, i, **opts) * np.power(1.0 + i, horizon / m)
        i_per = (1.0 + i) ** (1.0 / m) - 1.0
        own = own_horizon(A_by_role)
        mirr_per = (mirr(total, i_per, i_per, horizon=own, timing=plan.spec.timing) if total.shape[1] >= 2
                    else np.full(total.shape[0], np.nan))
    return {
        "future_worth_base": np.asarray(fw, dtype=float),
        "bc_ratio_base": np.asarray(bc, dtype=float),
        "bc_ratio_modified_base": np.asarray(bc_mod, dtype=float),
        "payback_periods": np.asarray(payback_period(total), dtype=float),
        "discounted_payback_base": np.asarray(discounted_payback_period(total, i, **opts), dtype=float),
        "mirr_base": np.asarray(_per_period_to_annual(np.asarray(mirr_per, dtype=float), m), dtype=float),
    }


def own_horizon(A_by_role: np.ndarray) -> np.ndarray:
    """Each project's own horizon (P,): the last period in which any of its lines (R, C, P, T)
    is non-zero; 0 for a project without any."""
    nz = np.any(A_by_role != 0, axis=(0, 1))                              # (P, T)
    T = nz.shape[-1]
    return np.where(nz.any(axis=-1), T - 1 - np.argmax(nz[:, ::-1], axis=-1), 0)


def _per_period_to_annual(rate, m: float):
    """(1 + rate)^m - 1; a rate whose annual form exceeds the largest double is +inf (stored NULL
    with the status 'overflow', see run/write.py), without a warning on standard error."""
    with np.errstate(over="ignore"):
        return np.power(1.0 + rate, m) - 1.0


def chunk_worths(plan: Plan, A_by_role: np.ndarray) -> tuple:
    """What a chunk's worth files hold: PW, PI and (after tax) the before-tax PW, each (S, P),
    and the fixed investment PW per project (P,) (see :meth:`WorthFiles.write`)."""
    pw, pi, fixed = worth_index_and_investment(plan, A_by_role)
    before = None
    if plan.tensor_before_tax_sm is not None:
        before = present_worth_scenario_major(A_by_role.sum(axis=0), plan.tensor_before_tax_sm)
    return pw, pi, before, fixed
