"""Time per-scenario capital rationing on random (invented) data.

Default size: 1,000 projects x 2,601 scenarios (a 51 x 51 grid of nominal
discount rate x inflation), 2 budget periods, 100 mutually exclusive groups
of 3 alternatives (10 of them mandatory), 50 "requires" pairs.

Present worth comes from invented cash flows: an investment in periods 0
and 1 (real money), a level real benefit for N years, and a level benefit
fixed in nominal money (a contract), so present worth moves with both
axes. The period-1 outlay in then-current money grows with inflation, so
there is one cost class per inflation value (51 classes).

Run:  .venv/bin/python bench/bench_rationing.py [--projects 1000] [--grid 51]
"""
from __future__ import annotations

import argparse
import time

import numpy as np

from ratescape.decide.portfolio_stats import min_max_regret
from ratescape.decide.rationing import METHOD_LP_BOUND, METHOD_MILP, METHOD_MILP_FIXED, ration_capital
from ratescape.decide.rationing_problem import greedy_selection


def annuity_pw(rate, n):
    """(P/A, i, N) for arrays rate (S,) and n (P,) -> (P, S)."""
    r = rate[None, :]
    n = n[:, None].astype(float)
    return (1.0 - (1.0 + r) ** -n) / r


def make_problem(P, n_grid, seed=0):
    rng = np.random.default_rng(seed)
    i_nom = np.linspace(0.03, 0.15, n_grid)
    f = np.linspace(0.0, 0.08, n_grid)
    I, F = np.meshgrid(i_nom, f, indexing="ij")  # scenario s = (rate, inflation), C order
    i_s, f_s = I.ravel(), F.ravel()
    r_s = (1 + i_s) / (1 + f_s) - 1
    f_class = np.tile(np.arange(n_grid), n_grid)  # class = inflation index
    inv0 = rng.uniform(10, 100, P)
    inv1 = rng.uniform(0, 60, P) * (rng.random(P) < 0.6)
    life = rng.integers(5, 31, P)
    real_benefit = (inv0 + inv1) * rng.uniform(0.04, 0.20, P)
    nominal_share = rng.uniform(0, 0.5, P)
    pw = (
        -inv0[:, None]
        - inv1[:, None] * (1 + f_s)[None, :] / (1 + i_s)[None, :]
        + (1 - nominal_share)[:, None] * real_benefit[:, None] * annuity_pw(r_s, life)
        + nominal_share[:, None] * real_benefit[:, None] * annuity_pw(i_s, life)
    )
    investment = np.stack([np.stack([inv0, inv1 * (1 + fk)]) for fk in f])  # (K, 2, P)
    budgets = np.array([0.25 * inv0.sum(), 0.25 * inv1.sum() * 1.04])
    group = np.full(P, -1)
    group[:300] = np.arange(300) // 3
    mandatory = np.zeros(100, dtype=bool)
    mandatory[:10] = True
    dep = rng.choice(np.arange(300, P), 50, replace=False)
    pre = rng.choice(np.arange(300, P), 50, replace=False)
    keep = dep != pre
    requires = np.c_[dep[keep], pre[keep]]
    return pw, investment, budgets, f_class, group, mandatory, requires


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--projects", type=int, default=1000)
    ap.add_argument("--grid", type=int, default=51)
    ap.add_argument("--gap", type=float, default=1e-3)
    args = ap.parse_args()
    pw, inv, bud, cls, grp, mand, req = make_problem(args.projects, args.grid)
    P, S = pw.shape
    kw = dict(scenario_class=cls, group_index=grp, group_mandatory=mand, requires=req)
    print(f"projects={P} scenarios={S} budget periods={inv.shape[1]} classes={inv.shape[0]} "
          f"groups={mand.size} (mandatory {mand.sum()}) requires={len(req)}")
    t = time.perf_counter()
    greedy_selection(pw, inv, bud, **kw)
    print(f"greedy alone (all scenarios, vectorised): {time.perf_counter() - t:.2f} s")
    t = time.perf_counter()
    res = ration_capital(pw, inv, bud, mip_rel_gap=args.gap, **kw)
    wall = time.perf_counter() - t
    solved = res.solved_as == np.arange(S)
    m = res.method[solved]
    print(f"ration_capital: {wall:.1f} s wall, {solved.sum()} distinct scenarios solved, "
          f"{wall / max(solved.sum(), 1) * 1e3:.1f} ms per solved scenario")
    print(f"  proved by LP bound: {(m == METHOD_LP_BOUND).sum()}, MILP after fixing: "
          f"{(m == METHOD_MILP_FIXED).sum()}, full MILP: {(m == METHOD_MILP).sum()}")
    print(f"  status counts: {dict(zip(*np.unique(res.status, return_counts=True)))}")
    print(f"  max mip_gap {np.nanmax(res.mip_gap):.2e}; greedy/optimum min "
          f"{np.nanmin(res.greedy_objective / res.objective):.4f}; "
          f"max solve {res.solve_seconds.max():.2f} s")
    t = time.perf_counter()
    rg = min_max_regret(pw, res.selected, res.objective, inv, bud, scenario_class=cls)
    print(f"min_max_regret over {rg.portfolios.shape[0]} distinct optima: {time.perf_counter() - t:.2f} s, "
          f"best={rg.best}, max regret {rg.max_regret[rg.best] if rg.best >= 0 else float('nan'):.2f}")


if __name__ == "__main__":
    main()
