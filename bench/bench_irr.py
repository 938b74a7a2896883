"""Benchmark: every IRR root of 100,000 projects at each of 51 inflation levels.

Prints the engine's time (`run.evaluation.irr_over_inflation`, as a screen runs it: real-only projects searched once and
mapped by the Fisher relation, projects with nominal lines searched at every level) beside a
numpy-financial `irr` loop on a sample, extrapolated, and their ratio.

Usage: .venv/bin/python bench/bench_irr.py [--projects N] [--levels F] [--nominal-share 0.2]
"""
from __future__ import annotations

import argparse
import time
from types import SimpleNamespace

import numpy as np
import numpy_financial as npf

from ratescape.evaluate.kernel import LineClass, then_current_streams
from ratescape.evaluate.timing import discount_exponents
from ratescape.run.evaluation import irr_over_inflation


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--projects", type=int, default=100_000)
    ap.add_argument("--levels", type=int, default=51)
    ap.add_argument("--periods", type=int, default=40)
    ap.add_argument("--nominal-share", type=float, default=0.2)
    ap.add_argument("--sample", type=int, default=200)
    a = ap.parse_args(argv)
    rng = np.random.default_rng(0)
    P, T = a.projects, a.periods + 1
    classes = [LineClass("real", 0.0), LineClass("real", 0.02), LineClass("nominal", 0.0)]
    A = np.zeros((3, P, T))
    cost = rng.uniform(1e5, 5e6, P)
    life = rng.integers(10, T, P)
    t = np.arange(T)
    benefit = (cost * rng.uniform(0.05, 0.2, P))[:, None] * ((t >= 1) & (t <= life[:, None]))
    nominal = rng.random(P) < a.nominal_share
    escalating = rng.random(P) < 0.3
    A[0, :, 0] = -cost
    A[0][~nominal & ~escalating] += benefit[~nominal & ~escalating]
    A[1][~nominal & escalating] += benefit[~nominal & escalating]
    A[2][nominal] += benefit[nominal]
    levels = np.linspace(0.0, 0.1, a.levels)
    plan = SimpleNamespace(inflation_levels=levels, classes=classes, exponents=discount_exponents(T),
                           irr_multipliers={}, spec=SimpleNamespace(periods_per_year=1.0, timing="end"))
    t0 = time.perf_counter()
    table = irr_over_inflation(plan, A)
    engine = time.perf_counter() - t0
    n = a.sample
    streams = then_current_streams(A[:, :n], classes, plan.exponents, levels)       # (F, n, T)
    t0 = time.perf_counter()
    for f in range(levels.size):
        for p in range(n):
            npf.irr(streams[f, p])
    loop = (time.perf_counter() - t0) / (n * levels.size) * (P * levels.size)
    print(f"{P:,} projects x {levels.size} inflation levels x {T} periods "
          f"({int(nominal.sum()):,} with nominal lines); roots found: {int(table.count.sum()):,}")
    print(f"{'method':<48}{'seconds':>10}")
    print(f"{'engine: every root, all levels':<48}{engine:>10.2f}")
    print(f"{'numpy-financial irr loop (extrapolated)':<48}{loop:>10.0f}")
    print(f"{'speed-up':<48}{loop / engine:>10.0f}x")


if __name__ == "__main__":
    main()
