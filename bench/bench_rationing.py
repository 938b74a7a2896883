"""Time per-scenario capital rationing on random (invented) data, on the demo, and in a whole run.

Three modes:

* default: ``ration_capital`` alone on a random problem (below);
* ``--demo``: the demo's rationing problem (captured from a screen of the bundled demo portfolio),
  solved ``--repeats`` times by ``ration_capital`` as a run solves it (two processes), with wall
  time, CPU seconds of this process and of the solver processes, and the methods used;
* ``--run P [P ...]``: a whole ``ratescape screen`` with two budget periods, groups (one in ten
  projects, in groups of three, one group in a hundred mandatory) and "requires" pairs, on an
  invented long-form portfolio of P projects, in a fresh process (its peak RSS is its own, and
  that of its largest solver process), printing the stage times the screen logs.

Default size: 1,000 projects x 2,601 scenarios (a 51 x 51 grid of nominal
discount rate x inflation), 2 budget periods, 100 mutually exclusive groups
of 3 alternatives (10 of them mandatory), 50 "requires" pairs.

Present worth comes from invented cash flows: an investment in periods 0
and 1 (real money), a level real benefit for N years, and a level benefit
fixed in nominal money (a contract), so present worth moves with both
axes. The period-1 outlay in then-current money grows with inflation, so
there is one cost class per inflation value (51 classes).

Run:  .venv/bin/python bench/bench_rationing.py [--projects 1000] [--grid 51]
      .venv/bin/python bench/bench_rationing.py --demo [--repeats 3]
      .venv/bin/python bench/bench_rationing.py --run 10000 [--grid 51] [--dir FOLDER]
"""
from __future__ import annotations

import argparse
import os
import re
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

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


def load_average():
    return "load average " + ", ".join(f"{v:.2f}" for v in os.getloadavg())


def demo_problem(folder):
    """Screen the bundled demo portfolio once and return the rationing problem it solves."""
    import ratescape.run.rationing_stage as stage
    from ratescape.api import load_portfolio, screen_portfolio
    from ratescape.demo import demo_data_dir
    captured = {}
    real = stage.ration_capital

    def capture(pw, investment, budgets, **kw):
        captured.update(pw=np.array(pw), investment=investment, budgets=budgets, **kw)
        return real(pw, investment, budgets, **kw)

    stage.ration_capital = capture
    try:
        data = demo_data_dir()
        db = Path(folder) / "demo.duckdb"
        load_portfolio(data / "projects.csv", data / "cash_flows.csv", db)
        screen_portfolio(db, grid=data / "grid.toml", progress=False)
    finally:
        stage.ration_capital = real
    captured.pop("progress", None)
    return captured


def bench_demo(repeats):
    with tempfile.TemporaryDirectory() as folder:
        problem = demo_problem(folder)
    pw = problem.pop("pw")
    inv = problem.pop("investment")
    bud = problem.pop("budgets")
    P, S = pw.shape
    print(f"demo rationing: {P} projects x {S} scenarios, {inv.shape[1]} budget period(s), {inv.shape[0]} cost "
          f"classes, {problem['group_mandatory'].size} groups")
    for rep in range(repeats):
        before = resource.getrusage(resource.RUSAGE_CHILDREN)
        cpu = time.process_time()
        t = time.perf_counter()
        res = ration_capital(pw, inv, bud, **problem)
        wall = time.perf_counter() - t
        after = resource.getrusage(resource.RUSAGE_CHILDREN)
        children = (after.ru_utime + after.ru_stime) - (before.ru_utime + before.ru_stime)
        m = res.method
        print(f"  repeat {rep + 1}: {wall:.2f} s wall, CPU {time.process_time() - cpu:.2f} s here + {children:.2f} s "
              f"in solver processes; LP bound {(m == METHOD_LP_BOUND).sum()}, branch and bound "
              f"{((m == METHOD_MILP) | (m == METHOD_MILP_FIXED)).sum()}; max stored gap {np.nanmax(res.mip_gap):.2e} "
              f"({load_average()})")


def write_run_portfolio(n, folder, seed=0):
    """Invented long-form portfolio: investments in periods 0 and 1, level benefits for 5-30 years."""
    import polars as pl
    rng = np.random.default_rng(seed)
    ids = np.array([f"R{k:07d}" for k in range(n)], dtype=object)
    inv0 = rng.uniform(1e5, 5e6, n).round(0)
    inv1 = np.where(rng.random(n) < 0.6, rng.uniform(0, 3e6, n).round(0), 0.0)
    life = rng.integers(5, 31, n)
    benefit = ((inv0 + inv1) * rng.uniform(0.06, 0.2, n)).round(0)
    basis = np.where(rng.random(n) < 0.3, "nominal", "real")
    grouped = n // 10 // 3 * 3
    group = np.full(n, "", dtype=object)
    group[:grouped] = [f"G{k // 3:06d}" for k in range(grouped)]
    mandatory = np.zeros(n, dtype=bool)
    mandatory[:grouped][(np.arange(grouped) // 3) % 100 == 0] = True
    requires = np.full(n, "", dtype=object)
    dep = rng.choice(np.arange(grouped, n), max(1, n // 1000), replace=False)
    requires[dep] = ids[np.minimum(dep + 1, n - 1)]
    requires[n - 1] = ""
    pl.DataFrame({"project_id": ids, "name": [f"Invented project {k}" for k in range(n)], "group": group,
                  "requires": requires, "mandatory": np.where(mandatory, "true", "")}).write_csv(
        Path(folder) / "projects.csv")
    rows_p, rows_t, rows_a, rows_b, rows_k = [], [], [], [], []
    rows_p.append(ids); rows_t.append(np.zeros(n, int)); rows_a.append(-inv0); rows_b.append(np.full(n, "real"))
    rows_k.append(np.full(n, "investment"))
    has1 = inv1 > 0
    rows_p.append(ids[has1]); rows_t.append(np.ones(has1.sum(), int)); rows_a.append(-inv1[has1])
    rows_b.append(np.full(has1.sum(), "real")); rows_k.append(np.full(has1.sum(), "investment"))
    reps = life
    pid = np.repeat(np.arange(n), reps)
    t = np.concatenate([np.arange(2, 2 + L) for L in life])
    rows_p.append(ids[pid]); rows_t.append(t); rows_a.append(benefit[pid]); rows_b.append(basis[pid])
    rows_k.append(np.full(pid.size, "benefit"))
    flows = pl.DataFrame({"project_id": np.concatenate(rows_p), "period": np.concatenate(rows_t),
                          "amount": np.concatenate(rows_a), "basis": np.concatenate(rows_b),
                          "escalation": np.zeros(sum(len(a) for a in rows_a)),
                          "kind": np.concatenate(rows_k)})
    flows.write_csv(Path(folder) / "cash_flows.csv")
    budgets = {"0": float(0.25 * inv0.sum()), "1": float(0.25 * inv1.sum() * 1.04)}
    return budgets, int(flows.height)


def bench_run(n, grid, folder):
    folder = Path(folder) / f"run-{n}"
    folder.mkdir(parents=True, exist_ok=True)
    budgets, lines = write_run_portfolio(n, folder)
    db = folder / "plan.duckdb"
    for stale in (db, Path(f"{db}.wal")):
        stale.unlink(missing_ok=True)
    (folder / "grid.toml").write_text(f"""
[grid]
discount_basis = "nominal"
discount_rates = {{ start = 0.02, stop = 0.15, count = {grid} }}
inflation = {{ start = 0.0, stop = 0.08, count = {grid} }}
base = {{ discount_rate = 0.08, inflation = 0.03 }}
[budget]
periods = {{ "0" = {budgets["0"]:.0f}, "1" = {budgets["1"]:.0f} }}
""")
    src = Path(__file__).resolve().parents[1] / "src"
    env = dict(os.environ, PYTHONPATH=f"{src}{os.pathsep}{os.environ.get('PYTHONPATH', '')}")
    t = time.perf_counter()
    out = subprocess.run([sys.executable, "-m", "ratescape", "load", "--projects", str(folder / "projects.csv"),
                          "--cash-flows", str(folder / "cash_flows.csv"), "--db", str(db)],
                         capture_output=True, text=True, env=env)
    if out.returncode:
        raise SystemExit(out.stderr)
    print(f"run {n:,} projects ({lines:,} cash-flow lines) x {grid * grid:,} scenarios, 2 budget periods: "
          f"load {time.perf_counter() - t:.1f} s ({load_average()})")
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t = time.perf_counter()
    out = subprocess.run(["/usr/bin/time", "-v", sys.executable, "-m", "ratescape", "screen", "--db", str(db),
                          "--grid", str(folder / "grid.toml")], capture_output=True, text=True, env=env)
    wall = time.perf_counter() - t
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if out.returncode:
        raise SystemExit(out.stderr[-3000:])
    rss = re.search(r"Maximum resident set size \(kbytes\): (\d+)", out.stderr)
    for line in out.stderr.splitlines():
        if line.startswith(("chunks:", "ranks:", "capital rationing:", "decisions and", "screen:")):
            print("   ", line)
    print(f"  screen {wall:.1f} s wall, CPU {after.ru_utime + after.ru_stime - before.ru_utime - before.ru_stime:.1f} s "
          f"(all processes), peak RSS {int(rss.group(1)) / 1e6 if rss else float('nan'):.2f} GB (largest process) "
          f"({load_average()})")
    import duckdb
    con = duckdb.connect(str(db), read_only=True)
    print("  portfolios:", con.execute("""SELECT count(*), count(*) FILTER (WHERE status = 'optimal'),
        max(mip_gap), sum(solve_seconds) FROM portfolios""").fetchall()[0],
          "selections:", con.execute("SELECT count(*) FROM selections").fetchall()[0][0],
          "regret candidates:", con.execute("SELECT count(*) FROM portfolio_regret").fetchall()[0][0])
    con.close()


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--projects", type=int, default=1000)
    ap.add_argument("--grid", type=int, default=51)
    ap.add_argument("--gap", type=float, default=1e-3)
    ap.add_argument("--demo", action="store_true", help="time the demo's rationing")
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--run", type=int, nargs="+", help="whole screens with budgets of these portfolio sizes")
    ap.add_argument("--dir", default=None, help="work folder for --run (default: a temporary folder)")
    args = ap.parse_args()
    if args.demo:
        bench_demo(args.repeats)
        return
    if args.run:
        with tempfile.TemporaryDirectory(dir=args.dir) as folder:
            for n in args.run:
                bench_run(n, args.grid, folder)
        return
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
