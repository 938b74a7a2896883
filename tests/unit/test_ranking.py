"""Tests for reference.ranking.

Cross-checks: scipy.stats.rankdata(method="min") and scipy.stats.kendalltau
(variant "b") as reference libraries.
"""
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import kendalltau, rankdata

from reference.ranking import (
    kendall_tau_b,
    profitability_index,
    rank_by_profitability_index,
    rank_projects,
    rank_summary,
    top_k_share,
)


def test_competition_ranking_small():
    # "1224" competition ranking, common practice
    assert rank_projects([10.0, 7.0, 7.0, 3.0]).tolist() == [1, 2, 2, 4]


@settings(max_examples=60, deadline=None)
@given(
    P=st.integers(1, 30),
    S=st.integers(1, 6),
    seed=st.integers(0, 2**31 - 1),
    levels=st.integers(1, 8),
)
def test_ranks_match_scipy_rankdata_min(P, S, seed, levels):
    # reference library: scipy.stats.rankdata(-pw, method="min") per scenario; few levels force ties
    rng = np.random.default_rng(seed)
    pw = rng.integers(-levels, levels + 1, size=(P, S)).astype(float) * 1000.0
    expected = rankdata(-pw, method="min", axis=0)
    np.testing.assert_array_equal(rank_projects(pw), expected)


def test_nan_ranks_last_and_tied():
    r = rank_projects([[np.nan], [1.0], [np.nan], [2.0]])
    assert r[:, 0].tolist() == [3, 2, 3, 1]


def test_rank_summary_and_top_k():
    pw = np.array([[5.0, 1.0, 3.0, 3.0], [4.0, 2.0, 3.0, 1.0], [1.0, 3.0, 2.0, 2.0]])
    r = rank_projects(pw)
    lo, med, hi = rank_summary(r)
    assert lo.tolist() == [1, 1, 1] and hi.tolist() == [3, 3, 3]
    # project 0 ranks 1, 3, 1, 1 -> median 1; project 1 ranks 2, 2, 1, 3 -> median 2
    assert med.tolist() == [1.0, 2.0, 2.5]
    assert top_k_share(r, 1).tolist() == [0.75, 0.25, 0.25]
    w = np.array([0.0, 1.0, 0.0, 0.0])
    assert top_k_share(r, 1, weights=w).tolist() == [0.0, 0.0, 1.0]


@settings(max_examples=40, deadline=None)
@given(P=st.integers(2, 40), S=st.integers(1, 5), seed=st.integers(0, 2**31 - 1), ties=st.booleans())
def test_kendall_matches_scipy(P, S, seed, ties):
    # reference library: scipy.stats.kendalltau(variant="b")
    rng = np.random.default_rng(seed)
    pw = rng.integers(0, 4, size=(P, S)).astype(float) if ties else rng.normal(size=(P, S))
    base = rng.normal(size=P) if not ties else rng.integers(0, 3, size=P).astype(float)
    got = kendall_tau_b(pw, base, chunk_bytes=8 * 64)  # small chunks exercise the chunk loop
    for s in range(S):
        ref = kendalltau(base, pw[:, s], variant="b").statistic
        if np.isnan(ref):
            assert np.isnan(got[s])
        else:
            assert got[s] == pytest.approx(ref, abs=1e-12)


def test_kendall_base_index_and_ranks_equal_values():
    rng = np.random.default_rng(3)
    pw = rng.normal(size=(25, 7))
    t1 = kendall_tau_b(pw, 2)
    t2 = kendall_tau_b(rank_projects(pw), 2)
    assert t1[2] == pytest.approx(1.0)
    np.testing.assert_allclose(t1, t2, atol=1e-12)


def test_kendall_large_p_falls_back_to_scipy():
    rng = np.random.default_rng(4)
    pw = rng.normal(size=(3001, 2))
    got = kendall_tau_b(pw, 0)
    assert got[1] == pytest.approx(kendalltau(pw[:, 0], pw[:, 1]).statistic, abs=1e-12)


def test_profitability_index_ranks():
    # PI = 1 + PW / I (common practice)
    pw = np.array([[20.0, 5.0], [15.0, 15.0]])
    inv = np.array([100.0, 50.0])
    np.testing.assert_allclose(profitability_index(pw, inv), [[1.2, 1.05], [1.3, 1.3]])
    np.testing.assert_array_equal(rank_by_profitability_index(pw, inv), [[2, 2], [1, 1]])
    assert rank_projects(pw)[:, 0].tolist() == [1, 2]


def test_shape_errors():
    with pytest.raises(ValueError, match="shape"):
        rank_projects(np.zeros((2, 2, 2)))
    with pytest.raises(ValueError, match="shape"):
        kendall_tau_b(np.zeros((3, 2)), np.zeros(4))
    with pytest.raises(ValueError, match="shape"):
        top_k_share(np.ones((3, 2), dtype=int), 1, weights=[1.0])
    with pytest.raises(ValueError, match="positive"):
        profitability_index([1.0], [0.0])
