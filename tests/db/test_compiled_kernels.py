"""Issue 16 part 3: the compiled-kernel set a run needs is what it compiles.

A fresh process with an empty Numba cache (NUMBA_CACHE_DIR) screens a small invented portfolio
whose streams change sign once (or the demo portfolio on its grid, without its budgets), then lists every Numba dispatcher of ratescape that holds a
compiled signature. Only the kernels such a run calls may be there, each compiled once (one
signature: one dtype per argument, C-contiguous arrays, no literal-valued duplicates).

A small portfolio runs the rank pass, the IRR search, the per-chunk summaries and the switching
values' root search in plain NumPy (decide/rank_numpy.py, evaluate/irr_numpy.py,
evaluate/compiled_numpy.py: the same numbers), so it compiles nothing at all; the same run with
the size limits set to zero (as a large portfolio has them) compiles the compiled forms, and only
those it calls: the certified cell search of streams with several sign changes is not among them.
"""
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

pytestmark = pytest.mark.heavy   # a subprocess that compiles

SCRIPT = r"""
import json, sys
from pathlib import Path
from numba.core.registry import CPUDispatcher
from ratescape import load_portfolio, screen_portfolio
import ratescape.evaluate.compiled, ratescape.evaluate.irr_kernels, ratescape.decide.rank_kernel
tmp = Path(sys.argv[1])
if sys.argv[2] == "large":      # the size limits of the NumPy forms at zero: every call compiled
    ratescape.decide.rank_kernel.NUMPY_MAX_PROJECTS = 0
    ratescape.evaluate.compiled.NUMPY_MAX_ELEMENTS = -1
    ratescape.evaluate.compiled.NUMPY_MAX_ROOTS = -1
    for name in ("NUMPY_MAX_ROWS", "NUMPY_MAX_CELLS", "NUMPY_MAX_FACTS"):
        setattr(ratescape.evaluate.irr_kernels, name, -1)
rows = ["project_id,name,first_cost,annual_benefit,benefit_basis,annual_cost,cost_basis,life"]
for k in range(12):
    rows.append(f"K{k},Invented {k},{100 + 7 * k},{12 + k},{'nominal' if k % 3 == 0 else 'real'},"
                f"{2 + k % 4},real,{4 + k % 9}")
(tmp / "p.csv").write_text("\n".join(rows) + "\n")
if sys.argv[2] == "demo":       # the demo portfolio and grid (several sign changes, alternatives, ...)
    from ratescape.demo import demo_data_dir
    data = demo_data_dir()
    (tmp / "grid.toml").write_text((data / "grid.toml").read_text().split("[budget]")[0])   # no budgets
    load_portfolio(data / "projects.csv", data / "cash_flows.csv", tmp / "k.duckdb")
    screen_portfolio(tmp / "k.duckdb", grid=tmp / "grid.toml", progress=False)
else:
    load_portfolio(tmp / "p.csv", None, tmp / "k.duckdb")
    screen_portfolio(tmp / "k.duckdb", discount_rates="0:0.2:5", inflation="0:0.1:3", progress=False)
out = {}
for mod in (ratescape.evaluate.compiled, ratescape.evaluate.irr_kernels, ratescape.decide.rank_kernel):
    for name, obj in vars(mod).items():
        if isinstance(obj, CPUDispatcher) and obj.signatures:
            out[mod.__name__.rsplit(".", 1)[1] + "." + name] = [str(s) for s in obj.signatures]
print("KERNELS" + json.dumps(out))
"""

SMALL = set()       # nothing at all
LARGE = {
    # the switching values' root search on the point worth (evaluate/compiled.py)
    "compiled._bracketed_roots", "compiled._geometric_sum", "compiled._worth_at",
    # per-project summaries, profitability index and streams (evaluate/compiled.py)
    "compiled._class_weighted_streams", "compiled._column_summaries", "compiled._index_from_worth",
    # IRR of one-sign-change streams: the classifier and the Newton solve (evaluate/irr_kernels.py)
    "irr_kernels._stream_facts", "irr_kernels._single_roots", "irr_kernels._scaled_worth",
    "irr_kernels._newton_or_bisect", "irr_kernels._steps_done",
    # rank pass (decide/rank_kernel.py)
    "rank_kernel._key", "rank_kernel._pack", "rank_kernel._unpack", "rank_kernel._transpose",
    "rank_kernel._ranks_and_tau", "rank_kernel._merge_sort", "rank_kernel._tied_pairs",
}


@pytest.mark.parametrize("size,needed", [("small", SMALL), ("demo", SMALL), ("large", LARGE)])
def test_a_run_compiles_only_the_kernels_it_needs_once_each(tmp_path, size, needed):
    cache = tmp_path / "numba-cache"
    cache.mkdir()
    env = dict(os.environ, NUMBA_CACHE_DIR=str(cache),
               PYTHONPATH=os.pathsep.join([str(Path(__file__).resolve().parents[2] / "src"),
                                           os.environ.get("PYTHONPATH", "")]))
    done = subprocess.run([sys.executable, "-c", SCRIPT, str(tmp_path), size], env=env, capture_output=True,
                          text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    line = next(x for x in done.stdout.splitlines() if x.startswith("KERNELS"))
    kernels = json.loads(line[len("KERNELS"):])
    assert set(kernels) == needed
    assert {name: len(sigs) for name, sigs in kernels.items() if len(sigs) != 1} == {}
    # the empty cache was filled by this run: every compiled kernel was written once
    assert {p.name.split("-")[0] for p in cache.rglob("*.nbi")} == needed
