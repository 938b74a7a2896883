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
from ratescape.evaluate.tax import after_tax_lines
from ratescape.run.plan import (
    AFTER_TAX_ONLY_CLASS,
    TAX_SHIELD_CLASS,
    Plan,
    multiplier_for,
)
from ratescape.store.database import fetch_frame


def _role_index(kind):
    return 0 if kind == "investment" else 1 if kind == "benefit" else 2


def chunk_amounts(con, plan: Plan, first: int, stop: int):
    """Amounts by role (R, C, P_chunk, T), project ids and horizons for project keys [first, stop).

    Roles (investment, benefit, other) keep the lines apart for one-at-a-time
    sensitivity; the kernel uses their sum.
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
        axes = {a.name for a in plan.spec.extra_axes}
        uniq = frame.select("basis", "escalation", "kind").unique(maintain_order=True)
        cls = [plan.class_index[(b, float(e), multiplier_for(k, axes, plan.spec.after_tax))]
               for b, e, k in uniq.iter_rows()]
        roles = [_role_index(k) for _, _, k in uniq.iter_rows()]
        lookup = uniq.with_columns(pl.Series("class_index", cls, dtype=pl.Int64),
                                   pl.Series("role_index", roles, dtype=pl.Int64))
        frame = frame.join(lookup, on=["basis", "escalation", "kind"], how="left")
        k = frame["project_key"].to_numpy() - first
        t = frame["period"].to_numpy()
        c = frame["class_index"].to_numpy()
        r = frame["role_index"].to_numpy()
        np.add.at(A, (r, c, k, t), frame["amount"].to_numpy())
        nz = frame.filter(pl.col("amount") != 0).group_by("project_key").agg(pl.col("period").max())
        horizon[nz["project_key"].to_numpy() - first] = np.maximum(nz["period"].to_numpy(), 1)
    if plan.spec.after_tax:
        _add_tax_lines(con, plan, first, stop, A, horizon)
    return A, np.asarray(ids, dtype=object), horizon


def _add_tax_lines(con, plan: Plan, first: int, stop: int, A: np.ndarray, horizon: np.ndarray) -> None:
    """Add the after-tax lines (depreciation shield, write-off, loan, credits) of a chunk to role "other".

    Depreciable basis: the project's ``depreciable_basis`` or else its investment lines (base-year
    money, placed in service at period 0). Method and recovery period: the project's columns or the
    ``[tax]`` defaults (straight line over the project's horizon). The asset is disposed of at the
    project's horizon, where its remaining book value is written off.
    """
    p = fetch_frame(con, """
        SELECT pr.project_key, pr.depreciation_method, pr.depreciation_convention, pr.service_quarter,
               pr.recovery_years, pr.depreciable_basis, pr.salvage, pr.loan_amount, pr.loan_rate, pr.loan_term,
               coalesce((SELECT -sum(amount) FROM cash_flows c WHERE c.project_id = pr.project_id
                         AND c.kind = 'investment'), 0) AS invested,
               coalesce((SELECT sum(amount) FROM cash_flows c WHERE c.project_id = pr.project_id
                         AND c.kind = 'salvage'), 0) AS salvage_lines
        FROM projects pr WHERE pr.project_key >= ? AND pr.project_key < ? ORDER BY pr.project_key""", [first, stop])
    tax = plan.spec.tax
    default_method = tax.get("default_method", "straight-line")
    methods = np.array([m or default_method for m in p["depreciation_method"].to_list()], dtype=object)
    recovery = np.array([r if r is not None else (tax.get("default_recovery_years") or int(h))
                         for r, h in zip(p["recovery_years"].to_list(), horizon)], dtype=np.int64)
    basis = np.clip(p["depreciable_basis"].fill_null(p["invested"]).to_numpy().astype(float), 0.0, None)
    salvage = np.clip(p["salvage"].fill_null(p["salvage_lines"]).to_numpy().astype(float), 0.0, None)
    loan = p["loan_amount"].fill_null(0.0).to_numpy().astype(float)
    loan_rate = p["loan_rate"].fill_null(0.0).to_numpy().astype(float)
    loan_term = p["loan_term"].fill_null(1).to_numpy().astype(np.int64)
    # the MACRS convention is one value per call: one call per (convention, quarter) present in the chunk
    conventions = [("mid-quarter", int(q or 4)) if c == "mid-quarter" else (None, None)
                   for c, q in zip(p["depreciation_convention"].to_list(), p["service_quarter"].to_list())]
    extra: dict = {}
    for convention, quarter in sorted(set(conventions), key=str):
        rows = np.array([c == (convention, quarter) for c in conventions])
        try:
            part = after_tax_lines(basis[rows], horizon[rows], plan.n_periods, method=methods[rows],
                                   recovery_years=recovery[rows], salvage=salvage[rows], convention=convention,
                                   quarter=quarter, itc_rate=float(tax.get("investment_tax_credit", 0.0)),
                                   loan_amount=loan[rows], loan_rate=loan_rate[rows], loan_term=loan_term[rows])
        except ValueError as exc:
            raise RunError(f"after-tax lines of projects {first}..{stop - 1}: {exc}. Fix: check depreciation_method "
                           "(straight-line, declining-balance, macrs), recovery_years, the convention and the loan "
                           "columns") from None
        for key, amounts in part.items():
            full = extra.setdefault(key, np.zeros((len(conventions), plan.n_periods)))
            full[rows] = amounts
    other = ROLES.index("other")
    for (b, e, m), amounts in extra.items():
        key = TAX_SHIELD_CLASS if m == "tax" else AFTER_TAX_ONLY_CLASS
        if (b, e) != key[:2]:
            raise RunError(f"unexpected after-tax line class {(b, e, m)}")
        A[other, plan.class_index[key]] += amounts


class ChunkReader:
    """Reads the cash flows of the chunks to evaluate on a background thread (its own DuckDB
    connection), ``depth`` chunks ahead: DuckDB's worker threads are shared by every connection,
    so a chunk's read can wait behind the writers' inserts; read ahead, it does not hold up the
    evaluation. Iterating yields (chunk index, (amounts, ids, horizon)) in order."""

    def __init__(self, con, plan: Plan, chunks, depth: int = 2):
        self.con, self.plan = con.cursor(), plan
        self.pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="ratescape-reader")
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
