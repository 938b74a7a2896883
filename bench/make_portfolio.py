"""Write an invented synthetic portfolio of N projects for benchmarks.

Usage:
  .venv/bin/python bench/make_portfolio.py N OUT.csv [--life 40] [--seed 0]
      parametric rows (one line per project, expanded by the loader)
  .venv/bin/python bench/make_portfolio.py N PROJECTS.csv --cash-flows FLOWS.csv [--life 40] [--seed 0]
      a projects file of ids and names plus a long-form cash-flow file of the same projects:
      one investment line, then a benefit and (for some) a cost line per period; about
      N x (1 + 1.6 x life) lines in all
Vectorised with numpy and Polars; a mix of real and nominal benefit bases and escalations.
"""
from __future__ import annotations

import argparse

import numpy as np


def write_portfolio(n: int, path: str, *, life: int = 40, seed: int = 0) -> None:
    rng = np.random.default_rng(seed)
    cost = rng.uniform(1e5, 5e6, n).round(0)
    benefit = (cost * rng.uniform(0.05, 0.2, n)).round(0)
    opex = (cost * rng.uniform(0.0, 0.03, n)).round(0)
    basis = np.where(rng.random(n) < 0.2, "nominal", "real")
    esc = np.where(rng.random(n) < 0.3, 0.02, 0.0)
    lives = rng.integers(max(3, life // 4), life + 1, n)
    lives[0] = life
    with open(path, "w") as fh:
        fh.write("project_id,name,first_cost,annual_benefit,benefit_basis,benefit_escalation,annual_cost,life\n")
        for k in range(n):
            fh.write(f"B{k:07d},Synthetic project {k},{cost[k]:.0f},{benefit[k]:.0f},{basis[k]},{esc[k]},"
                     f"{opex[k]:.0f},{lives[k]}\n")


def write_long_form(n: int, projects_path: str, flows_path: str, *, life: int = 40, seed: int = 0,
                    block: int = 20_000) -> int:
    """Projects file (ids and names) and a long-form cash-flow file; return the number of cash-flow lines."""
    import polars as pl

    rng = np.random.default_rng(seed)
    ids = pl.Series("project_id", np.arange(n)).cast(pl.String).str.zfill(7)
    ids = ("C" + ids).alias("project_id")
    pl.DataFrame({"project_id": ids, "name": "Synthetic long-form project " + ids}).write_csv(projects_path)
    lines = 0
    with open(flows_path, "wb") as fh:
        fh.write(b"project_id,period,amount,basis,escalation,kind\n")
        for start in range(0, n, block):
            m = min(block, n - start)
            cost = rng.uniform(1e5, 5e6, m).round(0)
            benefit = (cost * rng.uniform(0.05, 0.2, m)).round(0)
            opex = (cost * rng.uniform(0.0, 0.03, m)).round(0)
            opex[rng.random(m) < 0.4] = 0.0
            nominal = rng.random(m) < 0.2
            esc = np.where(rng.random(m) < 0.3, 0.02, 0.0)
            pid = np.repeat(np.arange(start, start + m), life)
            t = np.tile(np.arange(1, life + 1), m)
            j = pid - start
            inv = pl.DataFrame({"k": np.arange(start, start + m), "period": 0, "amount": -cost,
                                "basis": "real", "escalation": 0.0, "kind": "investment"})
            ben = pl.DataFrame({"k": pid, "period": t, "amount": benefit[j],
                                "basis": np.where(nominal[j], "nominal", "real"), "escalation": esc[j],
                                "kind": "benefit"})
            keep = opex[j] != 0
            opx = pl.DataFrame({"k": pid[keep], "period": t[keep], "amount": -opex[j][keep], "basis": "real",
                                "escalation": 0.0, "kind": "cost"})
            frame = pl.concat([inv, ben, opx], how="vertical_relaxed").sort("k", "period", maintain_order=True)
            frame = frame.with_columns(("C" + pl.col("k").cast(pl.String).str.zfill(7)).alias("project_id")) \
                .select("project_id", "period", "amount", "basis", "escalation", "kind")
            frame.write_csv(fh, include_header=False, float_precision=None)
            lines += frame.height
    return lines


if __name__ == "__main__":
    ap = argparse.ArgumentParser()
    ap.add_argument("n", type=int)
    ap.add_argument("out")
    ap.add_argument("--cash-flows", dest="cash_flows", help="write a long-form cash-flow file here as well")
    ap.add_argument("--life", type=int, default=40)
    ap.add_argument("--seed", type=int, default=0)
    a = ap.parse_args()
    if a.cash_flows:
        print(write_long_form(a.n, a.out, a.cash_flows, life=a.life, seed=a.seed), "cash-flow lines")
    else:
        write_portfolio(a.n, a.out, life=a.life, seed=a.seed)
