"""The rank pass: per-project rank statistics across every scenario, read from the run's worth files
one block of scenarios at a time (memory bounded by the block, not the portfolio).
"""
from __future__ import annotations

import threading
from concurrent.futures import ThreadPoolExecutor

import numpy as np

from ratescape.decide.rank_kernel import (
    BaseOrdering,
    RankTally,
    column_medians,
    mean_ranks,
    rank_rows,
    ranks_and_tau,
)
from ratescape.run.evaluation import chunk_worths
from ratescape.run.plan import Plan
from ratescape.run.progress import Progress, log
from ratescape.run.read import chunk_amounts
from ratescape.store.database import DB_THREAD_PREFIX
from ratescape.store.worth_files import RankFiles

# Cells of the (scenarios x projects) block ranked at once (reused buffers of ~40 MB each).
RANK_BLOCK_CELLS = 5_000_000


# Kendall's tau-b costs a merge sort per scenario and measure (about 15 ms at 100,000 projects);
# above this many projects (default; [decisions] kendall_max_projects) only Spearman's rho
# (nearly free once the ranks are known) is stored.
KENDALL_MAX_PROJECTS = 10_000


def ensure_worth_files(con, plan: Plan, chunks=None) -> None:
    """Rebuild the worth files of evaluated chunks (``chunks``, default all) that lack them
    (resumed run, cleaned folder)."""
    missing = plan.worth_files.missing(chunks)
    if missing:
        log(f"ranks: rebuilding the worth files of {len(missing)} chunk(s)")
    for c in missing:
        first = c * plan.chunk_size
        stop = min(first + plan.chunk_size, plan.project_count)
        A_by_role, _, _ = chunk_amounts(con, plan, first, stop)
        pw, pi, before, fixed = chunk_worths(plan, A_by_role)
        plan.worth_files.write(c, pw, pi, before, investment=fixed)


def rank_statistics(con, plan: Plan, *, progress: bool = False):
    """Per-project rank statistics by present worth and by profitability index, per scenario block.

    Reads the run's worth files one block of scenarios at a time (memory bounded by the block,
    not the portfolio), ranks every project within each scenario (1 = largest; ties share the
    smallest rank, "competition ranking"; projects without a PI in every scenario get no PI
    rank statistics), and keeps min, max, the base scenario's rank and the top-K count. Each
    block's ranks go to per-chunk rank files, from which exact medians are taken one chunk at a
    time. Also returns, per scenario, Spearman's rho of its ranking against the base scenario's
    (by PW, and by PI over the projects that have one) and, up to KENDALL_MAX_PROJECTS projects,
    Kendall's tau-b. ``progress``: the blocks ranked, with the time left.
    """
    ensure_worth_files(con, plan)
    P, S = plan.project_count, plan.scenarios.size
    base = plan.scenarios.base_index
    k = int(plan.spec.decisions.get("top_k", 10))
    block = max(1, min(S, RANK_BLOCK_CELLS // max(P, 1)))
    tau_limit = int(plan.spec.decisions.get("kendall_max_projects", KENDALL_MAX_PROJECTS))
    with_tau = P <= tau_limit
    if not with_tau:
        log(f"ranks: {P:,} projects; Kendall's tau is computed up to {tau_limit:,} ([decisions] "
            "kendall_max_projects), Spearman's rho is stored for every scenario")
    names = {"pw": "", "pi": "_pi"}
    agreement = {f"{stat}{suffix}": np.full(S, np.nan) for stat in ("kendall_tau", "spearman_rho")
                 for suffix in names.values()}
    stats = {}
    for name in names:
        base_values = plan.worth_files.read_block(name, base, base + 1)[0]
        has = np.isfinite(base_values)
        stats[name] = {"tally": RankTally(P, k), "base": np.zeros(P, dtype=np.uint32),
                       "mean_ranks": mean_ranks(base_values), "has": has,
                       "ordering": BaseOrdering(base_values) if with_tau else None,
                       "files": RankFiles(plan.worth_files.folder, name, S, P, plan.chunk_size)}
    # file reads and rank-file appends run on an I/O thread, one block ahead of the ranking;
    # two sets of buffers alternate (reused: fresh pages are costly to fault in)
    buffers = [{name: (np.empty((block, P)), np.empty((block, P), dtype=np.uint32)) for name in names}
               for _ in range(2)]
    blocks = [(a, min(S, a + block)) for a in range(0, S, block)]

    def load(n):
        a, b = blocks[n]
        worth = plan.worth_files.read_block("pw", a, b, out=buffers[n % 2]["pw"][0])
        plan.worth_files.read_block("pi", a, b, out=buffers[n % 2]["pi"][0], worth=worth)   # derived from PW

    def store(n):
        a, b = blocks[n]
        for name in names:
            stats[name]["files"].append(buffers[n % 2][name][1][: b - a])

    # Block n is ranked while block n + 1 is read (reader thread) and block n - 1's ranks are
    # appended to the rank files (writer thread, in block order). Buffer set n % 2 holds block n:
    # its values are free once block n is ranked, its ranks once block n's append is done.
    with ThreadPoolExecutor(max_workers=1, thread_name_prefix=f"{DB_THREAD_PREFIX}rank-read") as reads, \
            ThreadPoolExecutor(max_workers=1, thread_name_prefix=f"{DB_THREAD_PREFIX}rank-write") as writes:
        loaded = reads.submit(load, 0)
        stored = {}
        bar = Progress(len(blocks), "ranks", unit="block", enabled=progress)
        for n, (a, b) in enumerate(blocks):
            loaded.result()
            if n + 1 < len(blocks):
                loaded = reads.submit(load, n + 1)  # into set (n + 1) % 2: block n - 1 is ranked
            if n - 2 in stored:
                stored.pop(n - 2).result()         # set n % 2's ranks were block n - 2's: appended
            for name, suffix in names.items():
                st = stats[name]
                vals = buffers[n % 2][name][0][: b - a]
                ranks, rho = rank_rows(vals, st["mean_ranks"], st["has"], out=buffers[n % 2][name][1][: b - a],
                                       tally=st["tally"])
                agreement[f"spearman_rho{suffix}"][a:b] = rho
                if with_tau:
                    agreement[f"kendall_tau{suffix}"][a:b] = ranks_and_tau(vals, st["ordering"])[1]
                if a <= base < b:
                    st["base"][:] = ranks[base - a]
            stored[n] = writes.submit(store, n)
            bar.update()
        bar.close()
        for job in stored.values():
            job.result()
    out = {}
    for name, prefix in (("pw", "rank"), ("pi", "pi_rank")):
        st = stats[name]
        tally = st["tally"]
        ok = st["has"] & ~tally.any_nan          # a value in every scenario
        median = np.empty(P)
        files = st["files"]
        local = threading.local()

        def chunk_median(chunk):
            # each thread reads a chunk's (S, width) ranks into its own buffers, lays them out
            # project-major (blocked transpose) and partitions in place (no fresh pages per chunk)
            if not hasattr(local, "ranks"):
                local.ranks = np.empty(S * plan.chunk_size, dtype=np.uint32)
                local.by_project = np.empty(S * plan.chunk_size, dtype=np.uint32)
            first, chunk_ranks = files.read(chunk, out=local.ranks)
            width = chunk_ranks.shape[1]
            column_medians(chunk_ranks, out=median[first:first + width], work=local.by_project)

        with ThreadPoolExecutor(max_workers=2) as pool:   # NumPy's partition releases the GIL
            list(pool.map(chunk_median, range(files.chunk_count)))
        out[f"{prefix}_min"] = np.where(ok, tally.min.astype(np.int64), -1)
        out[f"{prefix}_max"] = np.where(ok, tally.max.astype(np.int64), -1)
        out[f"{prefix}_median"] = np.where(ok, median, np.nan)
        if name == "pw":
            out["rank_base"] = np.where(ok, st["base"].astype(np.int64), -1)
            out["top_k_share"] = np.where(ok, tally.top / S, np.nan)
    return out, agreement
