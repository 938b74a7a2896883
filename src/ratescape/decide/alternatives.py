"""Choice among mutually exclusive alternatives, scenario by scenario.

A *group* holds alternatives of which at most one is funded (exactly one
when the group is *mandatory*, e.g. "which pump", where doing nothing is
not allowed). In every scenario the preferred alternative is the one with
the highest present worth; an optional group also has the implicit
alternative *do nothing*, whose present worth is 0.

Pure numpy: arrays in, arrays out.

References
----------
E. L. Grant, W. G. Ireson, R. S. Leavenworth, Principles of Engineering
Economy, 8th ed., Wiley, 1990, ch. "Comparing mutually exclusive
alternatives" (from memory). Common practice: among mutually exclusive
alternatives evaluated at the MARR, choose the one of greatest present
worth, the do-nothing alternative having present worth 0.
"""
from __future__ import annotations

from typing import NamedTuple

import numpy as np

__all__ = [
    "DO_NOTHING",
    "NO_ALTERNATIVE",
    "Preference",
    "preferred_alternative",
    "pad_groups",
    "choice_share",
]

#: Index that stands for the implicit do-nothing alternative (PW = 0).
DO_NOTHING = -1
#: Index that stands for "no alternative available" (all missing).
NO_ALTERNATIVE = -2


class Preference(NamedTuple):
    """Preferred alternative per scenario, with its runner-up and margin."""

    #: index of the preferred alternative; DO_NOTHING or NO_ALTERNATIVE.
    best: np.ndarray
    #: present worth of the preferred minus that of the runner-up [currency], >= 0; NaN without runner-up.
    margin: np.ndarray
    #: index of the runner-up; DO_NOTHING or NO_ALTERNATIVE.
    runner_up: np.ndarray


def _as_bool_groups(do_nothing, lead_shape):
    dn = np.asarray(do_nothing)
    if dn.dtype != bool:
        if not np.issubdtype(dn.dtype, np.integer):
            raise ValueError(f"do_nothing must be bool or an array of bools, got dtype {dn.dtype}")
        dn = dn.astype(bool)
    try:
        return np.broadcast_to(dn, lead_shape)
    except ValueError:
        raise ValueError(
            f"do_nothing of shape {dn.shape} does not broadcast to the group shape {lead_shape}"
        ) from None


def preferred_alternative(pw, *, do_nothing=True):
    """Preferred alternative of each group in each scenario, its margin and runner-up.

    Parameters
    ----------
    pw : array_like, shape (..., A, S) or (A,) [currency]
        Present worth of the A alternatives of a group in S scenarios.
        Leading axes stack groups: a padded (G, A, S) array holds G groups,
        with NaN for the members a group does not have (or for a scenario an
        alternative could not be evaluated in). A 1-D (A,) array is one
        scenario and gives scalar results.
    do_nothing : bool or array_like of bool, shape broadcastable to (...)
        True (default) where the group is optional, so that the implicit
        do-nothing alternative (present worth 0, index ``DO_NOTHING`` = -1)
        competes; False for a mandatory group.

    Returns
    -------
    Preference
        ``best`` (..., S) int: index of the alternative with the greatest
        present worth; ``runner_up`` (..., S) int: the second greatest;
        ``margin`` (..., S) float [currency]: best minus runner-up worth,
        NaN where there is no runner-up. ``NO_ALTERNATIVE`` (-2) marks
        a missing best or runner-up.

    Warnings
    --------
    Ties go to the lowest index among real alternatives, and a real
    alternative wins a tie with do nothing (accept when PW >= 0, as is
    common practice); a tie shows as a margin of 0.

    Notes
    -----
    best = argmax_a PW_a over the alternatives and, if optional, PW = 0;
    margin = PW_best - max_{a != best} PW_a.

    References
    ----------
    E. L. Grant, W. G. Ireson, R. S. Leavenworth, Principles of Engineering
    Economy, 8th ed., Wiley, 1990 (from memory).

    Examples
    --------
    >>> import numpy as np
    >>> pref = preferred_alternative(np.array([[10.0, -5.0], [12.0, -8.0]]))
    >>> pref.best.tolist(), pref.runner_up.tolist(), pref.margin.tolist()
    ([1, -1], [0, 0], [2.0, 5.0])
    >>> preferred_alternative(np.array([[-3.0], [-1.0]]), do_nothing=False).best.tolist()
    [1]
    """
    w = np.asarray(pw, dtype=float)
    scalar = w.ndim == 1
    if scalar:
        w = w[:, None]
    if w.ndim < 2:
        raise ValueError(f"pw must have shape (..., A, S) or (A,), got shape {np.shape(pw)}")
    if w.shape[-2] == 0:
        raise ValueError(f"pw must hold at least one alternative, got shape {w.shape}")
    if np.any(np.isinf(w)):
        raise ValueError("pw must not hold infinite values (use NaN for missing)")
    lead = w.shape[:-2]
    n_alt, n_s = w.shape[-2], w.shape[-1]
    dn = _as_bool_groups(do_nothing, lead)

    cand = np.where(np.isnan(w), -np.inf, w)
    dn_row = np.where(dn, 0.0, -np.inf)[..., None, None] * np.ones((1, n_s))
    cand = np.concatenate([cand, np.broadcast_to(dn_row, lead + (1, n_s))], axis=-2)

    best = np.argmax(cand, axis=-2)  # first maximum: lowest index; do nothing last
    best_val = np.take_along_axis(cand, best[..., None, :], axis=-2)[..., 0, :]
    masked = cand.copy()
    np.put_along_axis(masked, best[..., None, :], -np.inf, axis=-2)
    second = np.argmax(masked, axis=-2)
    second_val = np.take_along_axis(masked, second[..., None, :], axis=-2)[..., 0, :]

    def _label(idx, val):
        out = np.where(idx == n_alt, DO_NOTHING, idx).astype(np.int64)
        return np.where(np.isneginf(val), NO_ALTERNATIVE, out)

    best_i = _label(best, best_val)
    second_i = _label(second, second_val)
    with np.errstate(invalid="ignore"):
        margin = np.where(np.isneginf(second_val) | np.isneginf(best_val), np.nan, best_val - second_val)
    if scalar:
        return Preference(int(best_i[..., 0]), float(margin[..., 0]), int(second_i[..., 0]))
    return Preference(best_i, margin, second_i)


def pad_groups(pw, group):
    """Stack the projects of each group into a NaN-padded (G, A, S) array.

    Parameters
    ----------
    pw : array_like, shape (P, S) [currency]
        Present worth of P projects in S scenarios.
    group : array_like, shape (P,)
        Group label of each project (any sortable labels).

    Returns
    -------
    padded : ndarray, shape (G, A, S) [currency]
        A = size of the largest group; NaN where a group has fewer members.
    members : ndarray, shape (G, A), int
        Row of ``pw`` of each member, -1 for padding. Members keep their
        order of appearance in ``pw``.
    labels : ndarray, shape (G,)
        The sorted unique group labels.

    Examples
    --------
    >>> import numpy as np
    >>> padded, members, labels = pad_groups(np.array([[1.0], [2.0], [3.0]]), ["b", "a", "b"])
    >>> members.tolist(), labels.tolist()
    ([[1, -1], [0, 2]], ['a', 'b'])
    """
    w = np.asarray(pw, dtype=float)
    if w.ndim != 2:
        raise ValueError(f"pw must have shape (P, S), got shape {w.shape}")
    g = np.asarray(group)
    if g.shape != (w.shape[0],):
        raise ValueError(f"group must have shape ({w.shape[0]},) to match pw, got shape {g.shape}")
    labels, inv = np.unique(g, return_inverse=True)
    inv = inv.ravel()
    order = np.argsort(inv, kind="stable")
    counts = np.bincount(inv, minlength=labels.size)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    pos = np.arange(order.size) - np.repeat(starts, counts)
    n_alt = int(counts.max()) if counts.size else 0
    members = np.full((labels.size, n_alt), -1, dtype=np.int64)
    members[inv[order], pos] = order
    padded = np.full((labels.size, n_alt, w.shape[1]), np.nan)
    padded[inv[order], pos] = w[order]
    return padded, members, labels


def choice_share(best, n_alternatives, *, weights=None):
    """Share of scenarios in which each alternative (and do nothing) is preferred.

    Parameters
    ----------
    best : array_like of int, shape (..., S)
        Output ``best`` of :func:`preferred_alternative`.
    n_alternatives : int
        A, the number of alternatives per group.
    weights : array_like, shape (S,), optional
        Non-negative probability weights of the scenarios (normalised
        here); equal weights by default.

    Returns
    -------
    share : ndarray, shape (..., A + 1)
        Columns 0 .. A-1 for the alternatives, column A for do nothing.
        Scenarios with no alternative count in no column.

    Examples
    --------
    >>> choice_share([0, 0, 1, -1], 2).tolist()
    [0.5, 0.25, 0.25]
    """
    b = np.asarray(best)
    if b.ndim < 1 or not np.issubdtype(b.dtype, np.integer):
        raise ValueError(f"best must be an integer array of shape (..., S), got {b.dtype} {b.shape}")
    n_s = b.shape[-1]
    if weights is None:
        wts = np.full(n_s, 1.0 / n_s) if n_s else np.zeros(0)
    else:
        wts = np.asarray(weights, dtype=float)
        if wts.shape != (n_s,):
            raise ValueError(f"weights must have shape ({n_s},), got shape {wts.shape}")
        if np.any(wts < 0) or not np.all(np.isfinite(wts)) or wts.sum() <= 0:
            raise ValueError("weights must be finite, non-negative and not all zero")
        wts = wts / wts.sum()
    col = np.where(b == DO_NOTHING, n_alternatives, b)
    onehot = col[..., None] == np.arange(n_alternatives + 1)
    return np.tensordot(onehot.astype(float), wts, axes=([-2], [0]))
