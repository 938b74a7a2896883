"""Rank stability of projects across scenarios.

Projects are ranked within each scenario by a measure of worth (present
worth, or the profitability index), 1 = best. Summaries say how far a
project's rank moves across the scenario space, how often it lands in the
top K, and how closely each scenario's whole ordering agrees with a base
scenario's (Kendall's tau-b).

Shapes follow the engine's kernel: ``pw`` is (P, S), projects by scenarios.

References
----------
M. G. Kendall, "The treatment of ties in ranking problems", Biometrika 33(3),
1945, pp. 239-251 (tau-b).
M. G. Kendall, J. D. Gibbons, Rank Correlation Methods, 5th ed., Edward
Arnold, 1990, ch. 3.
"""
from __future__ import annotations

import numpy as np

__all__ = [
    "rank_projects",
    "rank_summary",
    "top_k_share",
    "kendall_tau_b",
    "profitability_index",
    "rank_by_profitability_index",
]


def _as_pw(pw, name="pw"):
    arr = np.asarray(pw, dtype=float)
    if arr.ndim == 1:
        arr = arr[:, None]
    if arr.ndim != 2:
        raise ValueError(f"{name} must have shape (P, S) or (P,), got shape {arr.shape}")
    if arr.shape[0] == 0:
        raise ValueError(f"{name} must hold at least one project, got shape {arr.shape}")
    return arr


def _as_ranks(ranks):
    arr = np.asarray(ranks)
    if arr.ndim == 1:
        arr = arr[:, None]
    if arr.ndim != 2:
        raise ValueError(f"ranks must have shape (P, S) or (P,), got shape {arr.shape}")
    if not np.issubdtype(arr.dtype, np.integer):
        raise ValueError(f"ranks must be integers (from rank_projects), got dtype {arr.dtype}")
    return arr


def rank_projects(pw):
    """Rank projects within each scenario, 1 = highest worth.

    Parameters
    ----------
    pw : array_like, shape (P, S) or (P,) [currency]
        Measure of worth of each project in each scenario (present worth,
        annual worth, profitability index, ...). Higher is better.

    Returns
    -------
    ranks : ndarray of int64, shape (P, S) (or (P,) for 1-D input)
        ``ranks[p, s]`` is project p's place in scenario s.

    Notes
    -----
    Ties get the smallest rank of their group ("competition" or "1224"
    ranking): worths 10, 7, 7, 3 rank 1, 2, 2, 4. This equals
    ``scipy.stats.rankdata(-pw, method="min", axis=0)``. NaN worths rank
    after every finite worth and tie with each other.

    The sort runs along axis 0 for all scenarios at once (O(S P log P)).

    Examples
    --------
    >>> rank_projects([10.0, 7.0, 7.0, 3.0]).tolist()
    [1, 2, 2, 4]
    >>> rank_projects([[1.0, 5.0], [2.0, 5.0], [3.0, -1.0]]).tolist()
    [[3, 1], [2, 1], [1, 3]]
    """
    one_d = np.ndim(pw) == 1
    x = _as_pw(pw)
    P, S = x.shape
    key = -x  # NaN stays NaN and argsort puts it last
    order = np.argsort(key, axis=0, kind="stable")
    sk = np.take_along_axis(key, order, axis=0)
    same = (sk[1:] == sk[:-1]) | (np.isnan(sk[1:]) & np.isnan(sk[:-1]))
    new_group = np.ones((P, S), dtype=bool)
    new_group[1:] = ~same
    pos = np.arange(P, dtype=np.int64)[:, None]
    start = np.where(new_group, pos, 0)
    np.maximum.accumulate(start, axis=0, out=start)
    ranks = np.empty((P, S), dtype=np.int64)
    np.put_along_axis(ranks, order, start + 1, axis=0)
    return ranks[:, 0] if one_d else ranks


def rank_summary(ranks):
    """Smallest, median and largest rank of each project across scenarios.

    Parameters
    ----------
    ranks : array_like of int, shape (P, S)
        From :func:`rank_projects`.

    Returns
    -------
    rank_min, rank_median, rank_max : ndarray, shape (P,)
        ``rank_median`` is a float (the mean of the two middle ranks when S
        is even); the others are integers.

    Examples
    --------
    >>> r = rank_projects([[1.0, 5.0, 2.0], [2.0, 4.0, 1.0]])
    >>> [a.tolist() for a in rank_summary(r)]
    [[1, 1], [1.0, 2.0], [2, 2]]
    """
    r = _as_ranks(ranks)
    return r.min(axis=1), np.median(r, axis=1), r.max(axis=1)


def top_k_share(ranks, k, *, weights=None):
    """Share of scenarios in which each project ranks in the top ``k``.

    Parameters
    ----------
    ranks : array_like of int, shape (P, S)
        From :func:`rank_projects`.
    k : int
        Cut-off rank (a project with rank <= k is in the top k; with ties
        more than k projects can be).
    weights : array_like, shape (S,), optional
        Scenario weights (see :mod:`ratescape.decide.weights`); normalised
        to sum to 1. Default: every scenario counts equally.

    Returns
    -------
    share : ndarray, shape (P,) [fraction]

    Examples
    --------
    >>> r = rank_projects([[3.0, 1.0], [2.0, 2.0], [1.0, 3.0]])
    >>> top_k_share(r, 1).tolist()
    [0.5, 0.0, 0.5]
    """
    r = _as_ranks(ranks)
    k = int(k)
    if k < 1:
        raise ValueError(f"k must be >= 1, got {k}")
    hit = (r <= k).astype(float)
    if weights is None:
        return hit.mean(axis=1)
    w = np.asarray(weights, dtype=float)
    if w.shape != (r.shape[1],):
        raise ValueError(f"weights must have shape (S,) = ({r.shape[1]},), got shape {w.shape}")
    if np.any(~np.isfinite(w)) or np.any(w < 0) or not w.sum() > 0:
        raise ValueError("weights must be finite, non-negative and not all zero")
    return hit @ (w / w.sum())


# Above this many projects the O(P^2) pairwise form is slower than SciPy's O(P log P) per scenario.
PAIRWISE_MAX_PROJECTS = 400


def kendall_tau_b(pw, base, *, chunk_bytes=64 * 2**20):
    """Kendall's tau-b between each scenario's ordering and a base ordering.

    Parameters
    ----------
    pw : array_like, shape (P, S) [currency]
        Worth (or ranks) of each project in each scenario.
    base : int or array_like, shape (P,)
        Index of the base scenario (a column of ``pw``), or the base
        worths/ranks themselves.
    chunk_bytes : int, optional
        Memory for one chunk of scenarios' pair signs (default 64 MiB).

    Returns
    -------
    tau : ndarray, shape (S,)
        tau-b in [-1, 1]; 1 = the same order, -1 = reversed. NaN where
        either ordering is all ties (the denominator is zero), and where P < 2.

    Notes
    -----
    For n = P projects, n0 = n(n-1)/2 pairs, concordant minus discordant
    pairs C - D = sum_{i<j} sign(b_i - b_j) sign(x_i - x_j), and n1, n2 the
    pairs tied in the base and in the scenario:

        tau_b = (C - D) / sqrt((n0 - n1)(n0 - n2)).

    Since tau-b depends only on order, worths and ranks give the same
    value. The computation is vectorised over all n0 pairs for a chunk of
    scenarios at once (O(P^2) per scenario, as a matrix product of sign
    vectors), which suits small P (up to ``PAIRWISE_MAX_PROJECTS``). For
    larger P it uses ``scipy.stats.kendalltau`` (O(P log P) per scenario) in
    a loop over scenarios: at P = 2,000 the pairwise form would cost two
    million pair comparisons per scenario.

    References
    ----------
    M. G. Kendall, "The treatment of ties in ranking problems", Biometrika
    33(3), 1945, pp. 239-251.

    Examples
    --------
    >>> pw = [[3.0, 3.0, 1.0], [2.0, 2.0, 2.0], [1.0, 1.0, 3.0]]
    >>> kendall_tau_b(pw, 0).round(6).tolist()
    [1.0, 1.0, -1.0]
    """
    x = _as_pw(pw)
    P, S = x.shape
    if np.ndim(base) == 0:
        b_idx = int(base)
        if not -S <= b_idx < S:
            raise ValueError(f"base scenario index {b_idx} out of range for S = {S}")
        b = x[:, b_idx]
    else:
        b = np.asarray(base, dtype=float)
        if b.shape != (P,):
            raise ValueError(f"base must be an index or have shape (P,) = ({P},), got shape {b.shape}")
    if np.any(np.isnan(x)) or np.any(np.isnan(b)):
        raise ValueError("pw and base must not contain NaN")
    out = np.full(S, np.nan)
    if P < 2:
        return out
    if P > PAIRWISE_MAX_PROJECTS:  # O(P^2) pairs cost more than O(P log P) per scenario
        from scipy.stats import kendalltau

        for s in range(S):
            out[s] = kendalltau(b, x[:, s], variant="b").statistic
        return out
    iu, ju = np.triu_indices(P, k=1)
    n0 = iu.size
    sb = np.sign(b[iu] - b[ju])
    n1 = n0 - np.count_nonzero(sb)
    chunk = max(1, int(chunk_bytes // (8 * n0)))
    for lo in range(0, S, chunk):
        xs = x[:, lo:lo + chunk]
        sx = np.sign(xs[iu] - xs[ju])  # (n0, c)
        num = sb @ sx
        n2 = n0 - np.count_nonzero(sx, axis=0)
        den = np.sqrt(float(n0 - n1) * (n0 - n2).astype(float))
        with np.errstate(invalid="ignore", divide="ignore"):
            out[lo:lo + chunk] = np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)
    return np.clip(out, -1.0, 1.0)


def profitability_index(pw, investment):
    """Profitability index: present worth per unit of invested present worth.

    Parameters
    ----------
    pw : array_like, shape (P, S) or (P,) [currency]
        Net present worth of each project.
    investment : array_like, shape (P,) or (P, S) [currency]
        Present worth of each project's investment outlays, as a positive
        amount. Broadcast against ``pw``.

    Returns
    -------
    pi : ndarray, same shape as ``pw`` [dimensionless]

    Notes
    -----
    PI = (PW + I) / I = 1 + PW / I, the present worth of everything but the
    investment divided by the investment. PI > 1 exactly when PW > 0.

    References
    ----------
    H. Bierman, S. Smidt, The Capital Budgeting Decision, 9th ed., Routledge,
    2007, ch. "Capital rationing" (from memory).

    Examples
    --------
    >>> profitability_index([20.0, -5.0], [100.0, 50.0]).tolist()
    [1.2, 0.9]
    """
    p = np.asarray(pw, dtype=float)
    inv = np.asarray(investment, dtype=float)
    if inv.ndim == 1 and p.ndim == 2:
        inv = inv[:, None]
    try:
        np.broadcast_shapes(p.shape, inv.shape)
    except ValueError:
        raise ValueError(
            f"investment of shape {np.shape(investment)} does not broadcast against pw of shape {p.shape}"
        ) from None
    if np.any(~(inv > 0)):
        raise ValueError("investment must be positive (present worth of the outlays as a positive amount)")
    out = 1.0 + p / inv
    return out if out.ndim else float(out)


def rank_by_profitability_index(pw, investment):
    """Rank projects within each scenario by profitability index, 1 = best.

    Same as ``rank_projects(profitability_index(pw, investment))``; see
    :func:`profitability_index` and :func:`rank_projects` for shapes.

    Examples
    --------
    >>> rank_by_profitability_index([20.0, 15.0], [100.0, 50.0]).tolist()
    [2, 1]
    """
    return rank_projects(profitability_index(pw, investment))
