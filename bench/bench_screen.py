"""Benchmark the whole `ratescape screen` on an invented synthetic portfolio.

Prints, for each portfolio size: load time, screen time, result rows, rows per second, database
size and the peak resident memory of the screening process, then the screen's own phase timings
(chunks evaluated and written, rank pass, decisions and summaries).

Usage:
  .venv/bin/python bench/bench_screen.py --projects 10000 100000 --grid 51 [--chunk-size N] [--keep all]

Each size runs `python -m ratescape screen` in a fresh process so its peak RSS
(resource.getrusage of the child) is its own. Never used by the test suite.
"""
from __future__ import annotations

import argparse
import subprocess
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from make_portfolio import write_portfolio  # noqa: E402


def run(args):
    """Run `python -m ratescape ARGS`; return its wall time [s]."""
    t0 = time.perf_counter()
    out = subprocess.run([sys.executable, "-m", "ratescape", *args], capture_output=True, text=True)
    if out.returncode != 0:
        raise SystemExit(f"ratescape {' '.join(args)} failed:\n{out.stderr}")
    return time.perf_counter() - t0


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--projects", type=int, nargs="+", default=[10_000])
    ap.add_argument("--grid", type=int, default=51, help="points on each of the two axes")
    ap.add_argument("--periods", type=int, default=40)
    ap.add_argument("--chunk-size", type=int)
    ap.add_argument("--keep", default=None)
    ap.add_argument("--dir", default=None, help="work folder (default: a temporary folder)")
    a = ap.parse_args(argv)
    work = Path(a.dir or tempfile.mkdtemp(prefix="ratescape-bench-"))
    work.mkdir(parents=True, exist_ok=True)
    print(f"grid {a.grid} x {a.grid} = {a.grid ** 2:,} scenarios, {a.periods} periods; work folder {work}")
    print(f"{'projects':>10}{'load s':>9}{'screen s':>10}{'rows':>15}{'rows/s':>13}{'db GB':>8}{'peak RSS GB':>13}")
    for n in a.projects:
        csv = work / f"p{n}.csv"
        db = work / f"b{n}.duckdb"
        for f in (db, db.with_name(db.name + ".wal")):
            if f.exists():
                f.unlink()
        write_portfolio(n, str(csv), life=a.periods)
        t_load = run(["load", "--projects", str(csv), "--db", str(db)])
        args = ["screen", "--db", str(db), "--discount-rates", f"0:0.2:{a.grid}", "--inflation", f"0:0.1:{a.grid}",
                "--quiet"]
        if a.chunk_size:
            args += ["--chunk-size", str(a.chunk_size)]
        if a.keep:
            args += ["--keep", a.keep]
        # peak RSS of this child alone: run it through a tiny wrapper that reports its own maxrss
        wrapper = ("import resource, runpy, sys; sys.argv = ['ratescape'] + sys.argv[1:]\n"
                   "try:\n    runpy.run_module('ratescape', run_name='__main__')\n"
                   "finally:\n    print('PEAK_RSS_KB', resource.getrusage(resource.RUSAGE_SELF).ru_maxrss, file=sys.stderr)")
        t0 = time.perf_counter()
        out = subprocess.run([sys.executable, "-c", wrapper, *args], capture_output=True, text=True)
        t_screen = time.perf_counter() - t0
        if out.returncode != 0:
            raise SystemExit(out.stderr)
        peak_kb = int(next(l.split()[1] for l in out.stderr.splitlines() if l.startswith("PEAK_RSS_KB")))
        rows = n * a.grid ** 2
        size = db.stat().st_size / 1e9
        print(f"{n:>10,}{t_load:>9.1f}{t_screen:>10.1f}{rows:>15,}{rows / t_screen:>13,.0f}{size:>8.2f}"
              f"{peak_kb / 1e6:>13.2f}")
        phases = [l for l in out.stderr.splitlines()
                  if l.startswith(("chunks:", "decisions and", "result rows:", "screen: done"))
                  or (l.startswith("ranks:") and " in " in l)]
        for line in phases:                          # the screen's own phase timings
            print(f"{'':>10}  {line}")


if __name__ == "__main__":
    main()
