"""The rank pass in plain NumPy, for portfolios small enough that compiling the Numba kernels of
:mod:`ratescape.decide.rank_kernel` would cost more than it saves (issue 16, part 3: a first run
compiles only what it needs).

Each function computes exactly what its compiled counterpart computes, with the same floating
operations in the same order (sequential sums as ``np.cumsum``, never NumPy's pairwise ``sum``),
so the two agree bit for bit; the tests compare them on ties, NaN, signed zeros and infinities.
"""
from __future__ import annotations

import numpy as np


def sort_keys(values) -> np.ndarray:
    """Ascending sort key of each value: -v, NaN -> +inf, -0.0 -> 0.0 (the compiled ``_key``)."""
    keys = np.negative(values)
    keys[np.isnan(values)] = np.inf
    keys[keys == 0.0] = 0.0
    return keys


def competition_ranks(keys):
    """Stable order (B, P) of each row's keys, the first place (0-based) of each sorted position's
    tie group, and the positions that start a group."""
    B, P = keys.shape
    order = np.argsort(keys, axis=1, kind="stable")
    sorted_keys = np.take_along_axis(keys, order, axis=1)
    new = np.ones((B, P), dtype=bool)
    new[:, 1:] = sorted_keys[:, 1:] != sorted_keys[:, :-1]
    start = np.where(new, np.arange(P), 0)
    np.maximum.accumulate(start, axis=1, out=start)
    return order, start, new


def _sequential_sum(x):
    """Sum along the last axis adding left to right, as a compiled loop does."""
    return np.cumsum(x, axis=-1)[..., -1] if x.shape[-1] else np.zeros(x.shape[:-1])


def rank_rows_numpy(values, base_mean, valid, ranks, rho, acc_min, acc_max, acc_top, acc_nan, top_k):
    """The NumPy form of ``rank_kernel._unpack`` after the packed sort: competition ranks into
    ``ranks`` (B, P), Spearman's rho into ``rho`` (B,) when ``base_mean`` has P entries, and the
    running tallies when ``acc_min`` has P entries (see :func:`ratescape.decide.rank_kernel.rank_rows`).

    Ties are ordered by project (a stable sort of the keys), the order in which the compiled
    kernel sums the tie corrections of Spearman's average places. (C. Spearman, "The proof and
    measurement of association between two things", American Journal of Psychology 15(1), 1904,
    pp. 72-101: Pearson's correlation of ranks.)
    """
    B, P = values.shape
    keys = sort_keys(values)
    order, start, new = competition_ranks(keys)
    np.put_along_axis(ranks, order, (start + 1).astype(np.uint32), axis=1)
    if acc_min.size == P:
        np.minimum(acc_min, ranks.min(axis=0), out=acc_min)
        np.maximum(acc_max, ranks.max(axis=0), out=acc_max)
        acc_top += (ranks <= top_k).sum(axis=0)
        acc_nan |= (keys == np.inf).any(axis=0)
    rho[:] = np.nan
    if base_mean.size != P:
        return
    n = float(np.count_nonzero(valid))
    if n < 2.0:
        return
    # the sums over valid projects in project order, then the tie corrections in sorted order
    x = ranks.astype(float)
    zero = 0.0
    sx = _sequential_sum(np.where(valid, x, zero))
    sy = _sequential_sum(np.where(valid, base_mean, zero))
    sxx = _sequential_sum(np.where(valid, x * x, zero))
    syy = _sequential_sum(np.where(valid, base_mean * base_mean, zero))
    sxy = _sequential_sum(np.where(valid, x * base_mean, zero))
    last = np.ones((B, P), dtype=bool)                      # the last sorted place of each tie group
    last[:, :-1] = new[:, 1:]
    end = np.where(last, np.arange(P), P - 1)
    end = np.minimum.accumulate(end[:, ::-1], axis=1)[:, ::-1]
    shift = (end - start) / 2.0                             # average place - smallest place
    tied = (shift > 0.0) & valid[order]
    first = start + 1.0
    cx = _sequential_sum(np.where(tied, shift, zero))
    cxx = _sequential_sum(np.where(tied, (first + shift) * (first + shift) - first * first, zero))
    cxy = _sequential_sum(np.where(tied, shift * base_mean[order], zero))
    sx = sx + cx
    sxx = sxx + cxx
    sxy = sxy + cxy
    cxx_ = sxx - sx * sx / n
    cyy = syy - sy * sy / n
    ok = (cxx_ > 0.0) & (cyy > 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        r = (sxy - sx * sy / n) / np.sqrt(cxx_ * cyy)
    rho[ok] = np.minimum(1.0, np.maximum(-1.0, r[ok]))


# pairs compared at once by the tau-b count (rows x pairs a block)
_PAIR_CELLS = 2_000_000


def _tied_pairs_sorted(y):
    """Pairs of equal values in each row of y (B, n): sum of t (t - 1) / 2 over runs of ties."""
    B, n = y.shape
    s = np.sort(y, axis=1)
    new = np.ones((B, n), dtype=bool)
    new[:, 1:] = s[:, 1:] != s[:, :-1]
    start = np.where(new, np.arange(n), 0)
    np.maximum.accumulate(start, axis=1, out=start)
    return (np.arange(n) - start).sum(axis=1, dtype=np.int64)     # each value: the equal ones before it


def tau_numpy(values, order, group_start, n_valid, base_tied_pairs):
    """Kendall's tau-b (B,) of each row of ``values`` against the base ordering given by ``order``,
    ``group_start``, ``n_valid``, ``base_tied_pairs`` (a :class:`ratescape.decide.rank_kernel.BaseOrdering`),
    from the compiled merge sort's counts, found here directly: pairs tied in the scenario (runs of
    a sorted row), pairs tied in both (pairs within a base group) and discordant pairs (pairs of
    different base groups whose scenario values are in the other order: O(B n^2) comparisons for
    n valid projects), hence the same tau. (Kendall, Biometrika 1945, tau-b; see
    :mod:`ratescape.decide.rank_kernel`.)"""
    B = values.shape[0]
    n = int(n_valid)
    tau = np.full(B, np.nan)
    n0 = n * (n - 1) // 2
    if n < 2 or B == 0:
        return tau
    y = values[:, order[:n]]                                       # base order
    y = np.where(np.isnan(y), np.inf, -y)
    sizes = np.diff(group_start)
    group = np.repeat(np.arange(sizes.size), sizes)[:n]
    i, j = np.triu_indices(n, 1)
    apart = group[i] < group[j]
    i_apart, j_apart = i[apart], j[apart]                          # base strictly ordered: i before j
    i_same, j_same = i[~apart], j[~apart]                          # tied in the base
    scenario_tied = _tied_pairs_sorted(y)
    both_tied = np.zeros(B, dtype=np.int64)
    discordant = np.zeros(B, dtype=np.int64)
    step = max(1, _PAIR_CELLS // max(1, i_apart.size))
    for a in range(0, B, step):
        yb = y[a:a + step]
        discordant[a:a + step] = np.count_nonzero(yb[:, i_apart] > yb[:, j_apart], axis=1)
        if i_same.size:
            both_tied[a:a + step] = np.count_nonzero(yb[:, i_same] == yb[:, j_same], axis=1)
    denom = float(n0 - base_tied_pairs) * (n0 - scenario_tied).astype(float)
    num = (n0 - base_tied_pairs - scenario_tied + both_tied - 2 * discordant).astype(float)
    good = denom > 0.0
    tau[good] = num[good] / np.sqrt(denom[good])
    return tau
