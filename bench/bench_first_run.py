"""Benchmark: the first run after install (cold compiled-code cache) against a warm run (issue 16, part 3).

Runs, each in a fresh process:

* ``demo``: ``python -m ratescape demo --out TMP`` (load, screen with the demo's budgets, report);
* ``nobudget``: the same job with the demo grid's ``[budget]`` table left out (load, screen,
  report), so the capital-rationing stage, timed separately elsewhere, is not in the figure.

Each is run *cold* (``NUMBA_CACHE_DIR`` an empty folder: what a fresh install sees) and then
*warm* (the same command again with the folder it filled). For every run it prints the wall time,
the CPU time of the child (user + system, less sensitive to other jobs on a shared machine) and
the Numba compilation time attributed per function from Numba's event API
(``numba.core.event``, kind ``numba:compile``), as wall time and as CPU time of the compiling
thread: *self* time excludes the callees compiled inside a function's own compilation, so the
self times add up to the whole compile time. With
``--before DIR`` (a folder holding another version's ``src/``, ``data_demo/`` and ``queries/``,
e.g. from ``git archive``) the two versions are run interleaved, repeat by repeat.

Usage: PYTHONPATH=src .venv/bin/python bench/bench_first_run.py [--repeats 2] [--modes demo,nobudget]
       [--before /tmp/ratescape-before] [--after DIR] [--top 12]
  e.g. git archive <commit> src data_demo queries | tar -x -C /tmp/ratescape-before
"""
from __future__ import annotations

import argparse
import json
import os
import resource
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parents[1]

CHILD = r"""
import atexit, json, os, runpy, sys, time
from numba.core import event

report_path, mode, out = sys.argv[1], sys.argv[2], sys.argv[3]
stack = []            # [name, start, child seconds, start CPU, child CPU] (compilations are serialised
self_time = {}        # by Numba's compiler lock, so one stack serves every thread)
self_cpu = {}
inclusive = {}
counts = {}

class Attribution(event.Listener):
    def on_start(self, ev):
        d = ev.data["dispatcher"]
        stack.append([d.py_func.__module__.rsplit(".", 1)[-1] + "." + d.py_func.__qualname__, time.perf_counter(), 0.0,
                      time.thread_time(), 0.0])

    def on_end(self, ev):
        name, start, children, cpu_start, cpu_children = stack.pop()
        took = time.perf_counter() - start
        cpu = time.thread_time() - cpu_start          # CPU time of the compiling thread
        self_time[name] = self_time.get(name, 0.0) + took - children
        self_cpu[name] = self_cpu.get(name, 0.0) + cpu - cpu_children
        counts[name] = counts.get(name, 0) + 1
        if stack:
            stack[-1][2] += took
            stack[-1][4] += cpu
        else:
            inclusive[name] = inclusive.get(name, 0.0) + took

event.register("numba:compile", Attribution())
t0 = time.perf_counter()

def dump():
    json.dump({"self": self_time, "self_cpu": self_cpu, "inclusive": inclusive, "count": counts,
               "in_process": time.perf_counter() - t0}, open(report_path, "w"))

atexit.register(dump)
if mode == "demo":
    sys.argv = ["ratescape", "demo", "--out", out, "--quiet"]
    runpy.run_module("ratescape", run_name="__main__")
else:
    from pathlib import Path
    from ratescape.api import load_portfolio, screen_portfolio
    from ratescape.demo import demo_data_dir
    from ratescape.report import write_report
    data = demo_data_dir()
    text = (data / "grid.toml").read_text()
    grid = Path(out) / "grid.toml"
    Path(out).mkdir(parents=True, exist_ok=True)
    grid.write_text(text.split("[budget]")[0])        # the demo grid without its budgets
    db = Path(out) / "nobudget.duckdb"
    load_portfolio(data / "projects.csv", data / "cash_flows.csv", db)
    run_id = screen_portfolio(db, grid=grid, progress=False)
    write_report(db, Path(out) / "report.html", run_id=run_id)
"""


def load_average() -> str:
    return " ".join(f"{x:.2f}" for x in os.getloadavg())


def run_once(src: Path, mode: str, cache: Path, work: Path) -> dict:
    out = Path(tempfile.mkdtemp(dir=work))
    report = out / "compile.json"
    env = dict(os.environ, NUMBA_CACHE_DIR=str(cache), PYTHONPATH=str(src / "src"))
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    load = load_average()
    t0 = time.perf_counter()
    done = subprocess.run([sys.executable, "-c", CHILD, str(report), mode, str(out / "run")], env=env,
                          capture_output=True, text=True, cwd=work)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    if done.returncode != 0:
        raise SystemExit(f"{src} {mode} failed ({done.returncode}):\n{done.stderr[-3000:]}")
    stats = json.loads(report.read_text())
    shutil.rmtree(out, ignore_errors=True)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return dict(wall=wall, cpu=cpu, compile=sum(stats["self"].values()), compile_cpu=sum(stats["self_cpu"].values()),
                load=load, **stats)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=2)
    ap.add_argument("--modes", default="demo,nobudget")
    ap.add_argument("--before", type=Path, help="folder of another version (src/, data_demo/, queries/)")
    ap.add_argument("--after", type=Path, default=HERE, help="folder of the version measured (default: this one)")
    ap.add_argument("--top", type=int, default=12, help="functions listed per cold run")
    a = ap.parse_args(argv)
    versions = ([("before", a.before)] if a.before else []) + [("after", a.after)]
    work = Path(tempfile.mkdtemp(prefix="ratescape-first-run-"))
    rows = []
    try:
        for rep in range(a.repeats):
            for mode in a.modes.split(","):
                for label, src in versions:
                    cache = Path(tempfile.mkdtemp(dir=work, prefix="numba-cache-"))
                    cold = run_once(src, mode, cache, work)
                    warm = run_once(src, mode, cache, work)
                    shutil.rmtree(cache, ignore_errors=True)
                    rows.append((rep, mode, label, cold, warm))
                    print(f"[{rep}] {mode:<8} {label:<6} cold wall {cold['wall']:6.2f} s cpu {cold['cpu']:6.2f} s "
                          f"compile {cold['compile']:5.2f} s wall, {cold['compile_cpu']:5.2f} s cpu (load {cold['load']})"
                          f" | warm wall {warm['wall']:6.2f} s cpu {warm['cpu']:6.2f} s compile {warm['compile']:5.2f} s "
                          f"(load {warm['load']})", flush=True)
                    top = sorted(cold["self_cpu"].items(), key=lambda kv: -kv[1])[: a.top]
                    print("      compile self-time (CPU s), cold: " + ", ".join(
                        f"{k} {v:.2f}" + (f" (x{cold['count'][k]})" if cold["count"][k] > 1 else "")
                        for k, v in top), flush=True)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    print("\nseconds, one figure per repeat")
    print("mode      version  cold wall       cold CPU        compile CPU     warm wall       warm CPU")
    for mode in a.modes.split(","):
        for label, _ in versions:
            sel = [(c, w) for _, m, lab, c, w in rows if m == mode and lab == label]
            fig = lambda xs: ", ".join(f"{x:.2f}" for x in xs).ljust(15)
            print(f"{mode:<9} {label:<7}  {fig([c['wall'] for c, _ in sel])} {fig([c['cpu'] for c, _ in sel])} "
                  f"{fig([c['compile_cpu'] for c, _ in sel])} {fig([w['wall'] for _, w in sel])} "
                  f"{fig([w['cpu'] for _, w in sel])}")
    print(f"load average at the end: {load_average()}")


if __name__ == "__main__":
    main()
