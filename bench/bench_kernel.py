"""Benchmark: present worth over a scenario grid, engine vs raw matmul vs loops.

Shape (defaults): 100,000 projects x 40 periods x a 51 x 51 grid (2,601
scenarios). Prints, in one run on the same data:

* raw numpy matmul (P, T) @ (T, S): the machine's limit for this shape;
* the engine's kernel (discount tensor + chunked present_worth_classes), as
  the screen stage runs it, with one and with three line classes;
* a numpy-financial loop (npf.npv per project and scenario) on a sample,
  extrapolated to the full shape;
* the same present worths as a DuckDB SQL cross join (cash-flow rows x scenarios,
  grouped) and as a Polars cross join, on a sample of projects, extrapolated;
* the ratios.

Usage:  .venv/bin/python bench/bench_kernel.py [--projects N] [--periods T] [--grid K]
"""
from __future__ import annotations

import argparse
import time

import numpy as np

from ratescape.evaluate.kernel import (LineClass, discount_tensor, present_worth_classes, present_worth_scenario_major,
                                      scenario_major_tensor)
from ratescape.evaluate.timing import discount_exponents


def best_of(fn, repeat=3):
    best = float("inf")
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--projects", type=int, default=100_000)
    ap.add_argument("--periods", type=int, default=40)
    ap.add_argument("--grid", type=int, default=51)
    ap.add_argument("--chunk", type=int, default=3_844, help="projects per chunk (the screen default for 2,601 scenarios)")
    ap.add_argument("--sample", type=int, default=20, help="projects in the numpy-financial loop sample")
    ap.add_argument("--frame-sample", type=int, default=200, help="projects in the SQL / Polars cross-join sample")
    args = ap.parse_args(argv)
    P, T, K = args.projects, args.periods + 1, args.grid
    S = K * K
    rng = np.random.default_rng(0)
    A = rng.normal(size=(P, T))
    i_axis = np.linspace(0.0, 0.20, K)
    f_axis = np.linspace(0.0, 0.10, K)
    f, i = (x.ravel() for x in np.meshgrid(f_axis, i_axis, indexing="ij"))
    tau = discount_exponents(T)

    V = np.exp(-np.multiply.outer(tau, np.log1p(i)))          # (T, S) nominal discount factors
    out = np.empty((P, S))
    t_raw = best_of(lambda: np.matmul(A, V, out=out))

    classes = [LineClass("real", 0.0)]
    buffer = np.empty((args.chunk, S))

    def engine_one():
        D = discount_tensor(classes, tau, i, f)
        for start in range(0, P, args.chunk):
            block = A[None, start:start + args.chunk]
            present_worth_classes(block, D, out=buffer[:block.shape[1]])
    t_engine = best_of(engine_one)

    buffer_sm = np.empty((S, args.chunk))

    def engine_scenario_major():            # the layout the screen uses: (S, P_chunk) per chunk
        D = scenario_major_tensor(discount_tensor(classes, tau, i, f))
        for start in range(0, P, args.chunk):
            block = A[None, start:start + args.chunk]
            present_worth_scenario_major(block, D, out=buffer_sm[:, :block.shape[1]])
    t_engine_sm = best_of(engine_scenario_major)

    A3 = np.stack([A, 0.3 * A, 0.1 * A])
    classes3 = [LineClass("real", 0.0), LineClass("real", 0.02), LineClass("nominal", 0.0)]
    def engine_three():
        D = discount_tensor(classes3, tau, i, f)
        for start in range(0, P, args.chunk):
            block = A3[:, start:start + args.chunk]
            present_worth_classes(block, D, out=buffer[:block.shape[1]])
    t_engine3 = best_of(engine_three, repeat=1)

    import numpy_financial as npf
    n = args.sample
    t0 = time.perf_counter()
    for p in range(n):
        for s in range(S):
            npf.npv(i[s], A[p])
    t_npf = (time.perf_counter() - t0) / (n * S) * (P * S)

    # the same present worths in SQL and in a dataframe library: long cash-flow rows x scenarios
    import duckdb
    import polars as pl
    m = args.frame_sample
    flows = pl.DataFrame({"project": np.repeat(np.arange(m), T), "t": np.tile(np.arange(T), m),
                          "amount": A[:m].ravel()})
    scen = pl.DataFrame({"scenario": np.arange(S), "i": i})
    con = duckdb.connect()
    con.register("flows", flows.to_arrow())
    con.register("scen", scen.to_arrow())
    t0 = time.perf_counter()
    con.execute("SELECT project, scenario, sum(amount * power(1 + i, -t)) AS pw FROM flows CROSS JOIN scen "
                "GROUP BY ALL").fetchall()
    t_sql = (time.perf_counter() - t0) / m * P
    t0 = time.perf_counter()
    (flows.join(scen, how="cross")
          .with_columns((pl.col("amount") * (1 + pl.col("i")).pow(-pl.col("t"))).alias("v"))
          .group_by("project", "scenario").agg(pl.col("v").sum()))
    t_polars = (time.perf_counter() - t0) / m * P

    flops = 2.0 * P * T * S
    print(f"shape: {P:,} projects x {T} periods x {S:,} scenarios ({K} x {K}); chunk {args.chunk:,} projects")
    print(f"{'method':<44}{'seconds':>10}{'GFLOP/s':>10}{'vs raw matmul':>15}")
    print(f"{'raw numpy matmul (P,T)@(T,S)':<44}{t_raw:>10.2f}{flops / t_raw / 1e9:>10.1f}{1.0:>15.2f}")
    print(f"{'engine kernel, 1 line class (chunked)':<44}{t_engine:>10.2f}{flops / t_engine / 1e9:>10.1f}{t_engine / t_raw:>15.2f}")
    print(f"{'engine kernel, scenario-major (as screened)':<44}{t_engine_sm:>10.2f}{flops / t_engine_sm / 1e9:>10.1f}{t_engine_sm / t_raw:>15.2f}")
    print(f"{'engine kernel, 3 line classes (chunked)':<44}{t_engine3:>10.2f}{3 * flops / t_engine3 / 1e9:>10.1f}{t_engine3 / t_raw:>15.2f}")
    print(f"{'numpy-financial npv loop (extrapolated)':<44}{t_npf:>10.0f}{'':>10}{t_npf / t_raw:>15.0f}")
    print(f"{'DuckDB SQL cross join (extrapolated)':<44}{t_sql:>10.0f}{'':>10}{t_sql / t_raw:>15.0f}")
    print(f"{'Polars cross join (extrapolated)':<44}{t_polars:>10.0f}{'':>10}{t_polars / t_raw:>15.0f}")


if __name__ == "__main__":
    main()
