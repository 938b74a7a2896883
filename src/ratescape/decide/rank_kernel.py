"""Compiled rank pass: competition ranks and Kendall's tau-b of many scenarios at once.

For P projects and a block of B scenarios, :func:`ranks_and_tau` ranks every
project within each scenario (1 = highest value; ties share the smallest rank;
NaN last, tied with each other) and returns Kendall's tau-b of each scenario's
ordering against a base ordering. Both come out of ONE merge sort per scenario
(Knight's algorithm): the scenario's values are laid out in the base order and
merge-sorted; the number of element moves past a larger element is the number
of discordant pairs, and the sorted order gives the ranks. Scenarios of a grid
are ordered much like the base, so most merges are skipped (already in order)
and the sort is close to linear.

Compiled with Numba (kernels release the GIL; rows run in a small thread pool); the
pure-NumPy/SciPy references are :func:`reference.ranking.rank_projects`
and ``scipy.stats.kendalltau``, and the tests compare against both.

References
----------
W. R. Knight, "A computer method for calculating Kendall's tau with ungrouped
data", Journal of the American Statistical Association 61(314), 1966,
pp. 436-439. M. G. Kendall, "The treatment of ties in ranking problems",
Biometrika 33(3), 1945, pp. 239-251 (tau-b).
"""
from __future__ import annotations

import os
import threading
from concurrent.futures import ThreadPoolExecutor

import numpy as np
from numba import njit

from .rank_numpy import rank_rows_numpy, tau_numpy

# Up to this many projects the rank pass runs in plain NumPy (rank_numpy.py: the same numbers,
# bit for bit) and the kernels below are not compiled at all: at that size compiling them (about
# 6 s of CPU on a first run, before Numba's cache holds them) costs far more than they save. The
# NumPy forms cost about 0.07 ms (ranks) and 0.24 ms (tau, by counting pairs: O(P^2)) a scenario
# at 194 projects, against 0.002 and 0.011 ms compiled; at 1,024 projects the pair count alone
# takes 34 ms a scenario, so above this size the compiled kernels pay for their compilation.
NUMPY_MAX_PROJECTS = 256


def _use_compiled(P: int, compiled: bool | None) -> bool:
    return P > NUMPY_MAX_PROJECTS if compiled is None else bool(compiled)


_RUN = 32   # elements insertion-sorted before merging
ZERO = np.int64(0)   # a typed 0, not a literal: one compiled signature per callee


@njit(cache=True, nogil=True)
def _merge_sort(y, idx, lo, hi, tmp_y, tmp_i):
    """Stable merge sort of y[lo:hi] (idx carried along); returns the number of inversions.

    An inversion is a pair i < j with y[i] > y[j] (ties are not inversions). Runs of
    ``_RUN`` elements are insertion-sorted (each shift is one inversion), then merged
    bottom-up between y and a scratch buffer; adjacent runs already in order are copied.
    """
    inversions = 0
    for a in range(lo, hi, _RUN):
        b = min(a + _RUN, hi)
        for k in range(a + 1, b):
            vy = y[k]
            vi = idx[k]
            j = k - 1
            while j >= a and y[j] > vy:
                y[j + 1] = y[j]
                idx[j + 1] = idx[j]
                j -= 1
            inversions += k - 1 - j
            y[j + 1] = vy
            idx[j + 1] = vi
    src_y, src_i, dst_y, dst_i = y, idx, tmp_y, tmp_i
    in_place = True
    width = _RUN
    while width < hi - lo:
        start = lo
        while start < hi:
            mid = min(start + width, hi)
            end = min(start + 2 * width, hi)
            if mid >= end or src_y[mid - 1] <= src_y[mid]:
                for t in range(start, end):
                    dst_y[t] = src_y[t]
                    dst_i[t] = src_i[t]
            else:
                a = start
                b = mid
                k = start
                while a < mid and b < end:          # branch-free select (random data mispredicts)
                    ya = src_y[a]
                    yb = src_y[b]
                    left = ya <= yb
                    dst_y[k] = ya if left else yb
                    dst_i[k] = src_i[a] if left else src_i[b]
                    step = np.int64(left)
                    inversions += (1 - step) * (mid - a)
                    a += step
                    b += 1 - step
                    k += 1
                while a < mid:
                    dst_y[k] = src_y[a]
                    dst_i[k] = src_i[a]
                    a += 1
                    k += 1
                while b < end:
                    dst_y[k] = src_y[b]
                    dst_i[k] = src_i[b]
                    b += 1
                    k += 1
            start += 2 * width
        src_y, src_i, dst_y, dst_i = dst_y, dst_i, src_y, src_i
        in_place = not in_place
        width *= 2
    if not in_place:
        for t in range(lo, hi):
            y[t] = tmp_y[t]
            idx[t] = tmp_i[t]
    return inversions


@njit(cache=True, nogil=True)
def _tied_pairs(y, lo, hi):
    """Pairs of equal values among the sorted y[lo:hi]: sum of t(t-1)/2 over runs of ties."""
    pairs = 0
    run = 1
    for k in range(lo + 1, hi):
        if y[k] == y[k - 1]:
            run += 1
        else:
            pairs += run * (run - 1) // 2
            run = 1
    if hi > lo:
        pairs += run * (run - 1) // 2
    return pairs


@njit(cache=True, nogil=True)
def _ranks_and_tau(values, base_order, group_start, n_valid, base_tied_pairs, ranks, tau):
    B, P = values.shape
    n0 = n_valid * (n_valid - 1) // 2
    n_groups = group_start.size - 1
    for b in range(B):
        y = np.empty(P)
        idx = np.empty(P, dtype=np.int64)
        tmp_y = np.empty(P)
        tmp_i = np.empty(P, dtype=np.int64)
        for k in range(P):
            p = base_order[k]
            v = values[b, p]
            y[k] = np.inf if np.isnan(v) else -v          # ascending keys = descending values, NaN last
            idx[k] = p
        # Knight: order by (base, scenario): sort each group of base ties by the scenario's values,
        # counting the pairs tied in both among the projects with a base value
        both_tied = 0
        for g in range(n_groups):
            lo = group_start[g]
            hi = group_start[g + 1]
            if hi - lo > 1:
                _merge_sort(y, idx, lo, hi, tmp_y, tmp_i)
                if hi <= n_valid:
                    both_tied += _tied_pairs(y, lo, hi)
        discordant = _merge_sort(y, idx, ZERO, n_valid, tmp_y, tmp_i)
        scenario_tied = _tied_pairs(y, ZERO, n_valid)
        if n_valid < P:                                    # projects without a base value: ranked, not in tau
            _merge_sort(y, idx, n_valid, P, tmp_y, tmp_i)
            _merge_sort(y, idx, ZERO, P, tmp_y, tmp_i)
        start = 0
        for k in range(P):
            if k > 0 and y[k] != y[k - 1]:
                start = k
            ranks[b, idx[k]] = start + 1
        denom = float(n0 - base_tied_pairs) * float(n0 - scenario_tied)
        if n_valid < 2 or denom <= 0.0:
            tau[b] = np.nan
        else:
            tau[b] = (n0 - base_tied_pairs - scenario_tied + both_tied - 2 * discordant) / np.sqrt(denom)


class BaseOrdering:
    """The base scenario's ordering of P projects, prepared once for many :func:`ranks_and_tau` calls.

    Parameters
    ----------
    base : array_like, shape (P,)
        Each project's value in the base scenario (higher is better); NaN marks a project
        with no value, left out of tau (still ranked, last).
    """

    def __init__(self, base):
        base = np.asarray(base, dtype=float)
        if base.ndim != 1:
            raise ValueError(f"base must be one value per project, got shape {base.shape}")
        keys = np.where(np.isnan(base), np.inf, -base)
        self.order = np.argsort(keys, kind="stable").astype(np.int64)
        sorted_keys = keys[self.order]
        self.n_valid = int(np.isfinite(base).sum())
        new = np.ones(base.size, dtype=bool)
        new[1:] = sorted_keys[1:] != sorted_keys[:-1]
        new[self.n_valid:self.n_valid + 1] = True          # the valid prefix never shares a group with NaNs
        self.group_start = np.append(np.flatnonzero(new), base.size).astype(np.int64)
        sizes = np.diff(self.group_start)
        valid_sizes = sizes[self.group_start[:-1] < self.n_valid]
        self.tied_pairs = int((valid_sizes * (valid_sizes - 1) // 2).sum())
        self.size = base.size


def ranks_and_tau(values, base: BaseOrdering, *, compiled: bool | None = None):
    """Competition ranks (B, P) and Kendall's tau-b (B,) of B scenarios against a base ordering.

    Parameters
    ----------
    values : array_like, shape (B, P)
        Scenario-major values (present worth [currency], profitability index [-], ...); higher
        ranks first. NaN ranks last and ties with NaN.
    base : BaseOrdering
        The base ordering of the same P projects.

    Returns
    -------
    ranks : ndarray of uint32, shape (B, P)
        ``ranks[b, p]`` = 1 + the number of projects with a larger value in scenario b
        (equal to ``scipy.stats.rankdata(-values, method="min", axis=1)`` with NaN last).
    tau : ndarray, shape (B,)
        Kendall's tau-b between scenario b and the base over the projects with a base value
        (``scipy.stats.kendalltau``, variant "b"); NaN when fewer than two such projects or
        when either ordering is all ties.

    ``compiled``: None (default) runs the Numba kernel above ``NUMPY_MAX_PROJECTS`` projects and
    plain NumPy up to it (:mod:`ratescape.decide.rank_numpy`, the same numbers); True or False
    forces one of them.
    """
    values = np.ascontiguousarray(values, dtype=float)
    if values.ndim != 2 or values.shape[1] != base.size:
        raise ValueError(f"values must have shape (B, {base.size}), got {values.shape}")
    if not _use_compiled(base.size, compiled):
        ranks, _ = rank_rows(values, compiled=False)
        return ranks, tau_numpy(values, base.order, base.group_start, base.n_valid, base.tied_pairs)
    ranks = np.empty(values.shape, dtype=np.uint32)
    tau = np.empty(values.shape[0])
    B = values.shape[0]
    if B and base.size:
        def part(lo, hi):
            _ranks_and_tau(values[lo:hi], base.order, base.group_start, base.n_valid, base.tied_pairs,
                           ranks[lo:hi], tau[lo:hi])
        cuts = np.linspace(0, B, min(B, _THREADS) + 1).astype(int)
        list(_pool().map(lambda ab: part(*ab), zip(cuts[:-1], cuts[1:])))
    else:
        tau[:] = np.nan
    return ranks, tau


@njit(cache=True, nogil=True)
def _key(v):
    """The ascending sort key of a value: -v, NaN -> +inf, -0.0 -> 0.0 (descending values first)."""
    return np.inf if np.isnan(v) else (0.0 if v == 0.0 else -v)


@njit(cache=True, nogil=True)
def _pack(value_bits, bits, packed):
    """Order-preserving signed form of each value's sort key (:func:`_key`), from the float64
    bit patterns of the values, to be sorted as int64; the low ``bits`` hold the project index."""
    B, P = value_bits.shape
    low = np.uint64((1 << bits) - 1)
    keep = ~low
    top = np.uint64(1) << np.uint64(63)
    magnitude = ~top
    exponent = np.uint64(0x7FF0000000000000)
    zero = np.uint64(0)
    sixty_three = np.uint64(63)
    for b in range(B):
        for p in range(P):
            v = value_bits[b, p]
            if (v & exponent) == exponent and (v & magnitude) != exponent:
                w = exponent                                # NaN: the key is +inf
            elif (v & magnitude) == zero:
                w = zero                                    # +-0.0: the key is +0.0
            else:
                w = v ^ top                                 # the key is -v
            flip = (zero - (w >> sixty_three)) | top        # negative: flip all bits; else the sign bit
            # ... then the sign bit flipped back: sorted as int64, which NumPy's SIMD sort
            # handles faster than uint64 on AVX2 (no unsigned 64-bit compare there)
            packed[b, p] = (((w ^ flip) & keep) | np.uint64(p)) ^ top


_SHORT_RUN = 32              # longer runs of equal kept bits are ordered by a merge sort


@njit(cache=True, nogil=True)
def _unpack(packed, values, bits, base_mean, valid, ranks, rho, order, acc_min, acc_max, acc_top, acc_nan, top_k):
    """Competition ranks from the sorted packed integers (ordered exactly where the kept bits
    tie), the tallies, and Spearman's rho against ``base_mean`` over ``valid`` projects.

    Pass 1, in sorted order: a value whose kept high bits differ from both neighbours' is
    distinct from every other, so its rank is its position and it is written straight to its
    project (one random write into the row, which fits in cache). Only runs that agree in the
    kept bits are re-ordered exactly by their keys (:func:`_key` of ``values``; stable, so ties
    keep the project order), by insertion sort when short, by merge sort otherwise; ties among
    them share the smallest rank. Pass 2, in project order (sequential reads only): the
    tallies and Spearman's sums, taking each rank as its average place (the correction of tied
    places was summed in pass 1).
    """
    B, P = values.shape
    low = np.uint64((1 << bits) - 1)
    high_mask = ~low
    # the kept high bits of the packed key of +inf (the key of NaN): exponent all ones (the
    # sign bit is flipped twice); no finite key shares them while bits <= 52
    nan_high = np.uint64(0x7FF0000000000000) & high_mask
    with_rho = base_mean.size == P
    with_acc = acc_min.size == P
    for b in range(B):
        cx = 0.0          # sum of (average place - smallest place) and the matching second-order
        cxx = 0.0         # terms over valid tied projects: Spearman uses average places
        cxy = 0.0
        k = 0
        while k < P:                                    # runs of equal kept bits, in sorted order
            high = packed[b, k] & high_mask
            e = k + 1
            while e < P and (packed[b, e] & high_mask) == high:
                e += 1
            if e - k == 1:                              # distinct from every other value
                p = np.int64(packed[b, k] & low)
                ranks[b, p] = np.uint32(k + 1)
                if with_acc and high == nan_high:
                    acc_nan[p] = True
                k = e
                continue
            for t in range(k, e):
                order[t] = np.int64(packed[b, t] & low)
            if e - k <= _SHORT_RUN:                     # insertion sort, stable (index order on ties)
                for t in range(k + 1, e):
                    o = order[t]
                    key = _key(values[b, o])
                    j = t - 1
                    while j >= k and _key(values[b, order[j]]) > key:
                        order[j + 1] = order[j]
                        j -= 1
                    order[j + 1] = o
            else:
                run_keys = np.empty(e - k)
                for t in range(k, e):
                    run_keys[t - k] = _key(values[b, order[t]])
                run_order = order[k:e][np.argsort(run_keys, kind="mergesort")]
                order[k:e] = run_order
            start = k
            for t in range(k, e + 1):                   # tie groups within the run
                if t == e or (t > start and _key(values[b, order[t]]) != _key(values[b, order[start]])):
                    rank = np.uint32(start + 1)
                    shift = (t - start - 1) / 2.0       # average place - smallest place
                    x = start + 1.0
                    for u in range(start, t):
                        q = order[u]
                        ranks[b, q] = rank
                        if with_acc and _key(values[b, q]) == np.inf:
                            acc_nan[q] = True
                        if with_rho and shift > 0.0 and valid[q]:
                            cx += shift
                            cxx += (x + shift) * (x + shift) - x * x
                            cxy += shift * base_mean[q]
                    start = t
            k = e
        n = 0.0
        sx = 0.0
        sy = 0.0
        sxx = 0.0
        syy = 0.0
        sxy = 0.0
        for p in range(P):
            rank = ranks[b, p]
            if with_acc:
                if rank < acc_min[p]:
                    acc_min[p] = rank
                if rank > acc_max[p]:
                    acc_max[p] = rank
                if rank <= top_k:
                    acc_top[p] += 1
            if with_rho and valid[p]:
                x = float(rank)
                y = base_mean[p]
                n += 1.0
                sx += x
                sy += y
                sxx += x * x
                syy += y * y
                sxy += x * y
        rho[b] = np.nan
        if with_rho and n >= 2.0:
            sx += cx
            sxx += cxx
            sxy += cxy
            cxx_ = sxx - sx * sx / n
            cyy = syy - sy * sy / n
            if cxx_ > 0.0 and cyy > 0.0:
                r = (sxy - sx * sy / n) / np.sqrt(cxx_ * cyy)
                rho[b] = min(1.0, max(-1.0, r))


_THREADS = max(1, min(4, os.cpu_count() or 1))
_PARTS_PER_THREAD = 4
_POOL = None


def _pool():
    global _POOL
    if _POOL is None:
        _POOL = ThreadPoolExecutor(max_workers=_THREADS, thread_name_prefix="ratescape-rank")
    return _POOL


_LOCAL = threading.local()


def _work_buffers(rows: int, P: int):
    """This thread's scratch arrays, reused between calls (fresh pages are costly to fault in)."""
    cached = getattr(_LOCAL, "buffers", None)
    if cached is None or cached[0].shape[1] != P or cached[0].shape[0] < rows:
        cached = (np.empty((rows, P), dtype=np.uint64), np.empty(P, dtype=np.int64))
        _LOCAL.buffers = cached
    packed, order = cached
    return packed[:rows], order


def mean_ranks(values):
    """Average ranks (P,) of one scenario, 1 = highest, ties share the mean place, NaN last.

    Equals ``scipy.stats.rankdata(-values, method="average")`` with NaN last.
    """
    v = np.asarray(values, dtype=float)
    keys = np.where(np.isnan(v), np.inf, -v)
    order = np.argsort(keys, kind="stable")
    sorted_keys = keys[order]
    P = v.size
    new = np.ones(P, dtype=bool)
    new[1:] = sorted_keys[1:] != sorted_keys[:-1]
    starts = np.flatnonzero(new)
    ends = np.append(starts[1:], P) - 1                 # last place of each tie run (0-based)
    run = np.cumsum(new) - 1
    out = np.empty(P)
    out[order] = (starts[run] + ends[run]) / 2.0 + 1.0
    return out


_TRANSPOSE_COLUMNS = 64     # columns moved per pass: a 256-byte piece of each uint32 row


@njit(cache=True, nogil=True)
def _transpose(values, out):
    """out[c, s] = values[s, c], a few columns at a time: each pass reads one short contiguous
    piece of every row and writes that many output rows sequentially (NumPy's copy of a
    transposed view reads a new row for every element: about 3x slower here)."""
    S, W = values.shape
    for c0 in range(0, W, _TRANSPOSE_COLUMNS):
        c1 = min(W, c0 + _TRANSPOSE_COLUMNS)
        for s in range(S):
            for c in range(c0, c1):
                out[c, s] = values[s, c]


def column_medians(values, out=None, work=None, *, compiled: bool | None = None):
    """Exact median of each column of a scenario-major (S, W) array, e.g. each project's median
    rank over the scenarios: float64 (W,), equal to ``np.median(values, axis=0)`` (the mean of
    the two middle values when S is even).

    The columns are laid out as rows by a blocked transpose into ``work`` (a reused buffer of at
    least S * W items of the values' dtype, overwritten) and partitioned in place by NumPy
    (introselect). Up to ``NUMPY_MAX_PROJECTS`` columns (or with ``compiled=False``) NumPy's
    ``np.median(values, axis=0)`` runs instead and nothing is compiled (the same medians).
    """
    values = np.ascontiguousarray(values)
    if values.ndim != 2:
        raise ValueError(f"values must be 2-D (scenarios, columns), got shape {values.shape}")
    S, W = values.shape
    if work is not None and (work.dtype != values.dtype or work.size < S * W):
        raise ValueError(f"work must hold at least {S * W} items of {values.dtype}")
    if not _use_compiled(W, compiled):
        result = np.median(values, axis=0) if S else np.full(W, np.nan)
        if out is None:
            return np.asarray(result, dtype=float)
        out[:] = result
        return out
    if work is None:
        work = np.empty(S * W, dtype=values.dtype)
    by_column = work[: S * W].reshape(W, S)
    if S and W:
        _transpose(values, by_column)
    result = np.median(by_column, axis=1, overwrite_input=True) if S else np.full(W, np.nan)
    if out is None:
        return np.asarray(result, dtype=float)
    out[:] = result
    return out


class RankTally:
    """Per-project running tallies over scenarios: lowest and highest rank, top-K count, any NaN.

    Each thread that ranks rows into it keeps its own running arrays (made on its first rows
    and kept across calls, so no fresh pages per block); reading ``min``, ``max``, ``top`` or
    ``any_nan`` folds them together.
    """

    def __init__(self, P: int, top_k: int):
        self.P = int(P)
        self.top_k = int(top_k)
        self._threads = {}          # thread ident -> (min, max, top, any_nan) of that thread's rows
        self._lock = threading.Lock()

    def for_this_thread(self) -> tuple:
        """The calling thread's running (min, max, top, any_nan) arrays."""
        ident = threading.get_ident()
        mine = self._threads.get(ident)
        if mine is None:
            mine = (np.full(self.P, np.iinfo(np.uint32).max, dtype=np.uint32), np.zeros(self.P, dtype=np.uint32),
                    np.zeros(self.P, dtype=np.int64), np.zeros(self.P, dtype=np.bool_))
            with self._lock:
                self._threads[ident] = mine
        return mine

    def _fold(self, n: int, combine, empty):
        parts = [t[n] for t in self._threads.values()]
        if not parts:
            return empty
        out = parts[0].copy()
        for part in parts[1:]:
            combine(out, part, out=out)
        return out

    @property
    def min(self) -> np.ndarray:
        return self._fold(0, np.minimum, np.full(self.P, np.iinfo(np.uint32).max, dtype=np.uint32))

    @property
    def max(self) -> np.ndarray:
        return self._fold(1, np.maximum, np.zeros(self.P, dtype=np.uint32))

    @property
    def top(self) -> np.ndarray:
        return self._fold(2, np.add, np.zeros(self.P, dtype=np.int64))

    @property
    def any_nan(self) -> np.ndarray:
        return self._fold(3, np.logical_or, np.zeros(self.P, dtype=np.bool_))


_NO_TALLY = (np.empty(0, dtype=np.uint32), np.empty(0, dtype=np.uint32), np.empty(0, dtype=np.int64),
             np.empty(0, dtype=np.bool_))


def rank_rows(values, base_mean_ranks=None, valid=None, *, out=None, tally: RankTally | None = None,
              compiled: bool | None = None):
    """Competition ranks (B, P) of each row, 1 = highest; NaN last and tied with each other.

    Exactly ``scipy.stats.rankdata(-values, method="min", axis=1)`` with NaN last, but built
    on NumPy's SIMD integer sort instead of an argsort: each value's order-preserving 64-bit
    pattern gives up its lowest ceil(log2 P) bits to the project index, so one plain sort of
    packed integers yields the order. Runs of values that agree in the kept bits (within about
    2**-(52 - ceil(log2 P)) relative) are then ordered exactly by value, so the ranks are exact.

    With ``base_mean_ranks`` (P,) (see :func:`mean_ranks`), also returns Spearman's rho of
    each row against the base: Pearson's correlation of average ranks (ties share the mean
    place, counted over all P projects) over the projects where ``valid`` (P,) is true (all
    when None); equal to ``scipy.stats.spearmanr`` when every project is valid, or when the
    valid ones rank ahead of the rest (as projects without a profitability index do). NaN when fewer than two projects or either ranking is all ties.

    Returns
    -------
    ranks : ndarray of uint32, shape (B, P) (``out`` when given)
    rho : ndarray of float64, shape (B,) (NaN without ``base_mean_ranks``)

    With ``tally`` (a :class:`RankTally`), each project's lowest and highest rank, count of
    ranks <= top_k and whether any of its values is NaN are updated in the same pass.

    ``compiled``: None (default) runs the Numba kernels above ``NUMPY_MAX_PROJECTS`` projects and
    plain NumPy up to it (:func:`ratescape.decide.rank_numpy.rank_rows_numpy`: a stable argsort,
    the same ranks, tallies and rho bit for bit); True or False forces one of them.

    References
    ----------
    C. Spearman, "The proof and measurement of association between two things", American
    Journal of Psychology 15(1), 1904, pp. 72-101.
    """
    values = np.ascontiguousarray(np.atleast_2d(np.asarray(values, dtype=float)))
    B, P = values.shape
    ranks = np.empty((B, P), dtype=np.uint32) if out is None else out
    if ranks.shape != (B, P) or ranks.dtype != np.uint32:
        raise ValueError(f"out must be a uint32 array of shape {(B, P)}")
    rho = np.full(B, np.nan)
    if P == 0 or B == 0:
        return ranks, rho
    base = np.empty(0) if base_mean_ranks is None else np.ascontiguousarray(base_mean_ranks, dtype=float)
    mask = np.ones(P, dtype=np.bool_) if valid is None else np.ascontiguousarray(valid, dtype=np.bool_)
    if base.size not in (0, P) or mask.size != P:
        raise ValueError(f"base_mean_ranks and valid must have {P} entries")
    if not _use_compiled(P, compiled):
        acc = tally.for_this_thread() if tally is not None else _NO_TALLY
        rank_rows_numpy(values, base, mask, ranks, rho, *acc, tally.top_k if tally is not None else 0)
        return ranks, rho
    bits = max(1, int(P - 1).bit_length())

    def part(lo, hi):          # compiled kernels and NumPy's sort release the GIL: rows in parallel
        packed, order = _work_buffers(hi - lo, P)
        _pack(values[lo:hi].view(np.uint64), bits, packed)
        packed.view(np.int64).sort(axis=1)
        acc = tally.for_this_thread() if tally is not None else _NO_TALLY
        _unpack(packed, values[lo:hi], bits, base, mask, ranks[lo:hi], rho[lo:hi], order, *acc,
                tally.top_k if tally is not None else 0)

    # a few parts per thread: when another thread of the process (a writer) takes a core for a
    # while, the other rank thread takes the remaining parts instead of waiting at the end
    cuts = np.linspace(0, B, min(B, _PARTS_PER_THREAD * _THREADS) + 1).astype(int)
    if len(cuts) <= 2:
        part(0, B)
    else:
        list(_pool().map(lambda ab: part(*ab), zip(cuts[:-1], cuts[1:])))
    return ranks, rho
