"""Write an invented synthetic portfolio of N projects (parametric rows) for benchmarks.

Usage: .venv/bin/python bench/make_portfolio.py N OUT.csv [--life 40] [--seed 0]
Vectorised with numpy; a mix of real and nominal benefit bases and escalations.
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


if __name__ == "__main__":
    ap = argparse.ArgumentParser()
    ap.add_argument("n", type=int)
    ap.add_argument("out")
    ap.add_argument("--life", type=int, default=40)
    ap.add_argument("--seed", type=int, default=0)
    a = ap.parse_args()
    write_portfolio(a.n, a.out, life=a.life, seed=a.seed)
