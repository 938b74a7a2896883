"""Reading a chunk's cash flows from DuckDB into the engine's (roles, classes, projects, periods) array.

The after-tax lines (depreciation shield, write-off, loans, credits) are added here, from the
projects' tax columns, so the evaluation sees one array of amounts per chunk.
"""
from __future__ import annotations

from collections import deque
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import polars as pl

from ratescape.errors import RunError
from ratescape.evaluate.kernel import ROLES
from ratescape.evaluate.kinds import RECOVERED_KINDS, multiplier_for, role_index
from ratescape.evaluate.tax import after_tax_lines, staged_asset_lines
from ratescape.run.plan import (
    ASSET_CREDIT_CLASS,
    ASSET_SHIELD_CLASS,
    TAX_SHIELD_CLASS,
    Plan,
)
from ratescape.store.database import DB_THREAD_PREFIX, fetch_frame


def chunk_amounts(con, plan: Plan, first: int, stop: int):
    """Amounts by role (R, C, P_chunk, T), project ids and horizons for project keys [first, stop).

    Roles (investment, benefit, other) keep the lines apart for one-at-a-time
    sensitivity; the kernel uses their sum. Working capital or land that a project pays out and
    never lists as coming back (no positive line of that kind) is recovered at the project's
    horizon, in the same basis and escalation (see :func:`recovered_at_horizon`).
    """
    frame = fetch_frame(con,
        """SELECT p.project_key, cf.period, cf.basis, cf.escalation, cf.kind, sum(cf.amount) AS amount
           FROM cash_flows cf JOIN projects p USING (project_id)
           WHERE p.project_key >= ? AND p.project_key < ?
           GROUP BY ALL""", [first, stop])
    ids = con.execute("SELECT project_id FROM projects WHERE project_key >= ? AND project_key < ? ORDER BY project_key",
                      [first, stop]).fetchnumpy()["project_id"]
    P = stop - first
    A = np.zeros((len(ROLES), len(plan.classes), P, plan.n_periods))
    horizon = np.ones(P, dtype=np.int64)
    if frame.height:
        nz = frame.filter(pl.col("amount") != 0).group_by("project_key").agg(pl.col("period").max())
        horizon[nz["project_key"].to_numpy() - first] = np.maximum(nz["period"].to_numpy(), 1)
        frame = recovered_at_horizon(frame, horizon, first)
        axes = {a.name for a in plan.spec.extra_axes}
        uniq = frame.select("basis", "escalation", "kind").unique(maintain_order=True)
        cls = [plan.class_index[(b, float(e), multiplier_for(k, axes, plan.spec.after_tax))]
               for b, e, k in uniq.iter_rows()]
        roles = [role_index(k) for _, _, k in uniq.iter_rows()]
        lookup = uniq.with_columns(pl.Series("class_index", cls, dtype=pl.Int64),
                                   pl.Series("role_index", roles, dtype=pl.Int64))
        joined = frame.join(lookup, on=["basis", "escalation", "kind"], how="left")
        k = joined["project_key"].to_numpy() - first
        t = joined["period"].to_numpy()
        c = joined["class_index"].to_numpy()
        r = joined["role_index"].to_numpy()
        np.add.at(A, (r, c, k, t), joined["amount"].to_numpy())
    if plan.spec.after_tax:
        _add_tax_lines(con, plan, first, stop, A, horizon, frame)
    return A, np.asarray(ids, dtype=object), horizon


def recovered_at_horizon(frame: pl.DataFrame, horizon: np.ndarray, first: int) -> pl.DataFrame:
    """The chunk's lines plus the recovery of working capital and land that is paid out and never
    listed as coming back.

    For each project and kind in :data:`ratescape.evaluate.kinds.RECOVERED_KINDS` with no positive
    line, the net outlay of each (basis, escalation) comes back at the project's horizon in that
    same basis and escalation: a real-basis amount in base-year money, so its recovery grows with
    inflation (and escalation) to the horizon (working capital: Sullivan, Wicks & Koelling,
    Engineering Economy, Pearson, "working capital is recovered at the end of the study period",
    from memory; land: assumed sold at the horizon at its cost in its own basis, common practice
    in textbook after-tax tables).
    """
    kept = frame.filter(pl.col("kind").is_in(list(RECOVERED_KINDS)))
    if not kept.height:
        return frame
    back = kept.group_by("project_key", "kind").agg((pl.col("amount") > 0).any().alias("back"))
    owed = (kept.join(back, on=["project_key", "kind"]).filter(~pl.col("back"))
            .group_by("project_key", "basis", "escalation", "kind").agg(pl.col("amount").sum())
            .filter(pl.col("amount") < 0))
    if not owed.height:
        return frame
    period = horizon[owed["project_key"].to_numpy() - first]
    owed = owed.with_columns(pl.Series("period", period).cast(frame.schema["period"]), -pl.col("amount"))
    return pl.concat([frame, owed.select(frame.columns)], how="vertical_relaxed")


def _project_tax_columns(con, first: int, stop: int) -> pl.DataFrame:
    return fetch_frame(con, """
        SELECT pr.project_key, pr.depreciation_method, pr.depreciation_convention, pr.service_quarter,
               pr.recovery_years, pr.depreciable_basis, pr.salvage, pr.loan_amount, pr.loan_rate, pr.loan_term,
               coalesce((SELECT sum(amount) FROM cash_flows c WHERE c.project_id = pr.project_id
                         AND c.kind = 'salvage'), 0) AS salvage_lines
        FROM projects pr WHERE pr.project_key >= ? AND pr.project_key < ? ORDER BY pr.project_key""", [first, stop])


def _add_tax_lines(con, plan: Plan, first: int, stop: int, A: np.ndarray, horizon: np.ndarray,
                   frame: pl.DataFrame) -> None:
    """Add the after-tax lines (depreciation shield, write-off, loan, credits, land) of a chunk to role "other".

    Staged capital: each investment line (project, period k, basis, escalation) is its own asset,
    placed in service in period k at that period's price and depreciated from there
    (:func:`ratescape.evaluate.tax.staged_asset_lines`); a real-basis asset's deductions go to a
    line class frozen at k, so its basis follows each scenario's inflation up to k and is fixed in
    nominal money after. A project's ``depreciable_basis``, when given, keeps its meaning: one
    asset of that basis placed in service at period 0 (then-current money of period 0).
    Method and recovery period: the project's columns or the ``[tax]`` defaults (straight line
    over the project's horizon). Every asset is disposed of at the project's horizon, where its
    remaining book value is written off. Land is not depreciated: at its sale, the sale price is
    taxed and the cost written off (:func:`_add_land_lines`).
    """
    p = _project_tax_columns(con, first, stop)
    tax = plan.spec.tax
    P = stop - first
    default_method = tax.get("default_method", "straight-line")
    itc = float(tax.get("investment_tax_credit", 0.0))
    methods = np.array([m or default_method for m in p["depreciation_method"].to_list()], dtype=object)
    recovery = np.array([r if r is not None else (tax.get("default_recovery_years") or int(h))
                         for r, h in zip(p["recovery_years"].to_list(), horizon)], dtype=np.int64)
    given = ~p["depreciable_basis"].is_null().to_numpy()
    basis = np.clip(p["depreciable_basis"].fill_null(0.0).to_numpy().astype(float), 0.0, None)
    salvage = np.clip(p["salvage"].fill_null(p["salvage_lines"]).to_numpy().astype(float), 0.0, None)
    loan = p["loan_amount"].fill_null(0.0).to_numpy().astype(float)
    loan_rate = p["loan_rate"].fill_null(0.0).to_numpy().astype(float)
    loan_term = p["loan_term"].fill_null(1).to_numpy().astype(np.int64)
    # the MACRS convention is one value per call: one call per (convention, quarter) present in the chunk
    conventions = [("mid-quarter", int(q or 4)) if c == "mid-quarter" else (None, None)
                   for c, q in zip(p["depreciation_convention"].to_list(), p["service_quarter"].to_list())]
    stages = _investment_stages(frame, first, given)
    share = np.zeros(stages["key"].size)
    if share.size:                                  # the salvage estimate shared in proportion to cost
        total = np.bincount(stages["key"], weights=stages["cost"], minlength=P)
        share = salvage[stages["key"]] * stages["cost"] / np.where(total > 0, total, 1.0)[stages["key"]]
    extra: dict = {}
    tax_class = plan.class_index[TAX_SHIELD_CLASS]
    asset_shield_class = plan.class_index[ASSET_SHIELD_CLASS]
    asset_credit_class = plan.class_index[ASSET_CREDIT_CLASS]
    other = ROLES.index("other")
    for convention, quarter in sorted(set(conventions), key=str):
        rows = np.array([c == (convention, quarter) for c in conventions])
        try:
            # the assets' lines (scaled with their cost) apart from the loans' (fixed by contract)
            part = after_tax_lines(basis[rows], horizon[rows], plan.n_periods, method=methods[rows],
                                   recovery_years=recovery[rows], salvage=np.minimum(salvage, basis)[rows],
                                   convention=convention, quarter=quarter, itc_rate=itc)
            part = {(b, e, f"{m}*asset_cost" if m != "one" else "after_tax_only*asset_cost"): v
                    for (b, e, m), v in part.items()}
            if np.any(loan[rows] > 0):
                loans = after_tax_lines(np.zeros(int(rows.sum())), horizon[rows], plan.n_periods,
                                        method=methods[rows], recovery_years=recovery[rows], loan_amount=loan[rows],
                                        loan_rate=loan_rate[rows], loan_term=loan_term[rows])
                part.update({(b, e, "after_tax_only" if m == "one" else m): v for (b, e, m), v in loans.items()})
            mine = rows[stages["key"]] if stages["key"].size else np.zeros(0, dtype=bool)
            if mine.any():
                k = stages["key"][mine]
                shield, credit = staged_asset_lines(
                    stages["cost"][mine], stages["period"][mine], horizon[k], plan.n_periods, method=methods[k],
                    recovery_years=recovery[k], salvage=share[mine], convention=convention, quarter=quarter,
                    itc_rate=itc)
                _scatter_frozen(A, plan, other, k, stages["period"][mine], stages["basis"][mine],
                                stages["escalation"][mine], shield, asset_shield_class, "tax*asset_cost")
                _scatter_frozen(A, plan, other, k, stages["period"][mine], stages["basis"][mine],
                                stages["escalation"][mine], credit, asset_credit_class, "after_tax_only*asset_cost")
        except ValueError as exc:
            raise RunError(f"after-tax lines of projects {first}..{stop - 1}: {exc}. Fix: check depreciation_method "
                           "(straight-line, declining-balance, macrs), recovery_years, the convention and the loan "
                           "columns") from None
        for key, amounts in part.items():
            full = extra.setdefault(key, np.zeros((P, plan.n_periods)))
            full[rows] = amounts
    for key, amounts in extra.items():
        if key not in plan.class_index or key[:2] != ("nominal", 0.0):
            raise RunError(f"unexpected after-tax line class {key}")
        A[other, plan.class_index[key]] += amounts
    _add_land_lines(A, plan, frame, first, other, tax_class)


def _investment_stages(frame: pl.DataFrame, first: int, given: np.ndarray) -> dict:
    """The chunk's assets: one per (project, period, basis, escalation) of its investment lines with a
    positive net cost, for the projects whose ``depreciable_basis`` is not given."""
    inv = (frame.filter(pl.col("kind") == "investment")
           .group_by("project_key", "period", "basis", "escalation").agg(pl.col("amount").sum())
           .filter(pl.col("amount") < 0).sort("project_key", "period", "basis", "escalation"))
    key = inv["project_key"].to_numpy().astype(np.int64) - first if inv.height else np.zeros(0, dtype=np.int64)
    keep = ~given[key] if key.size else np.zeros(0, dtype=bool)
    return {"key": key[keep], "period": inv["period"].to_numpy().astype(np.int64)[keep] if inv.height else key,
            "basis": np.asarray(inv["basis"].to_list(), dtype=object)[keep] if inv.height else np.zeros(0, object),
            "escalation": inv["escalation"].to_numpy().astype(float)[keep] if inv.height else np.zeros(0),
            "cost": -inv["amount"].to_numpy().astype(float)[keep] if inv.height else np.zeros(0)}


def _scatter_frozen(A, plan: Plan, role: int, key, period, basis, escalation, amounts, plain_class: int,
                    multiplier: str) -> None:
    """Add rows of amounts fixed in the money of their service period k to the chunk.

    A real-basis row placed in service at k >= 1 goes to the class (real, e, multiplier) frozen at k
    (its value grows with inflation up to k, then stays fixed). A real row at k = 0 is already in
    then-current money; a nominal row's price of period k is its amount times (1 + e)^tau_k (a
    contractual escalation); both go to the plain nominal class ``plain_class``.
    """
    if not np.any(amounts):
        return
    tau = plan.exponents
    frozen = (basis == "real") & (period >= 1)
    plain = np.flatnonzero(~frozen)
    if plain.size:
        scale = np.where(basis[plain] == "nominal", np.power(1.0 + escalation[plain], tau[period[plain]]), 1.0)
        np.add.at(A[role, plain_class], key[plain], amounts[plain] * scale[:, None])
    if frozen.any():
        idx = np.flatnonzero(frozen)
        cls = np.array([plan.class_index[("real", float(escalation[j]), multiplier, int(period[j]))] for j in idx])
        np.add.at(A[role], (cls, key[idx]), amounts[idx])


def _add_land_lines(A, plan: Plan, frame: pl.DataFrame, first: int, role: int, tax_class: int) -> None:
    """Tax on land sales: the sale price is taxable (-tau x sale, in the sale line's own class) and the
    land's cost, fixed in the money of its purchase, is written off at the project's last land sale
    (+tau x cost): the gain over cost is taxed at the ordinary rate, a sale below cost saves tax at it."""
    land = frame.filter((pl.col("kind") == "land") & (pl.col("amount") != 0))
    if not land.height:
        return
    key = land["project_key"].to_numpy().astype(np.int64) - first
    period = land["period"].to_numpy().astype(np.int64)
    amount = land["amount"].to_numpy().astype(float)
    basis = np.asarray(land["basis"].to_list(), dtype=object)
    escalation = land["escalation"].to_numpy().astype(float)
    sale = amount > 0
    if sale.any():
        cls = np.array([plan.class_index[(b, float(e), "tax")] for b, e in zip(basis[sale], escalation[sale])])
        np.add.at(A[role], (cls, key[sale], period[sale]), -amount[sale])
    bought = np.flatnonzero(~sale)
    if not bought.size:
        return
    last_sale = np.full(A.shape[2], -1, dtype=np.int64)
    np.maximum.at(last_sale, key[sale], period[sale])
    at = np.maximum(last_sale[key[bought]], period[bought])   # every purchase has a sale (listed or at the horizon)
    rows = np.zeros((bought.size, A.shape[3]))
    rows[np.arange(bought.size), at] = -amount[bought]
    _scatter_frozen(A, plan, role, key[bought], period[bought], basis[bought], escalation[bought], rows,
                    tax_class, "tax")


class ChunkReader:
    """Reads the cash flows of the chunks to evaluate on a background thread (its own DuckDB
    connection), ``depth`` chunks ahead: DuckDB's worker threads are shared by every connection,
    so a chunk's read can wait behind the writers' inserts; read ahead, it does not hold up the
    evaluation. Iterating yields (chunk index, (amounts, ids, horizon)) in order."""

    def __init__(self, con, plan: Plan, chunks, depth: int = 2):
        self.con, self.plan = con.cursor(), plan
        self.pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix=f"{DB_THREAD_PREFIX}reader")
        self.chunks = iter(chunks)
        self.queue = deque()
        for _ in range(depth):
            self._next()

    def _next(self) -> None:
        chunk = next(self.chunks, None)
        if chunk is not None:
            self.queue.append((chunk, self.pool.submit(self._read, chunk)))

    def _read(self, chunk: int):
        first = chunk * self.plan.chunk_size
        return chunk_amounts(self.con, self.plan, first, min(first + self.plan.chunk_size, self.plan.project_count))

    def __iter__(self):
        while self.queue:
            chunk, future = self.queue.popleft()
            self._next()
            yield chunk, future.result()

    def close(self) -> None:
        self.pool.shutdown(wait=True, cancel_futures=True)
        self.queue.clear()
        try:
            self.con.close()
        except Exception:
            pass
