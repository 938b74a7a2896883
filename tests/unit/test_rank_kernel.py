"""The rank pass, compiled and plain NumPy, against SciPy's reference implementations.

Sources: scipy.stats.rankdata (method="min": competition ranking), scipy.stats.kendalltau
(tau-b, Knight's algorithm) and scipy.stats.spearmanr. Ties, NaN and values closer than the
packed sort keeps apart are generated on purpose. Each test runs both forms (``compiled=True``:
the Numba kernels; ``compiled=False``: :mod:`ratescape.decide.rank_numpy`, which small portfolios
use so that a first run compiles nothing for the rank pass), and the two must agree bit for bit.
"""
import numpy as np
import pytest
from scipy.stats import kendalltau, rankdata, spearmanr

from ratescape.decide.rank_kernel import BaseOrdering, mean_ranks, rank_rows, ranks_and_tau

ENGINES = pytest.mark.parametrize("compiled", [True, False], ids=["compiled", "numpy"])


def _scipy_ranks(values):
    v = np.where(np.isnan(values), -np.inf, values)        # NaN last, tied with each other
    return rankdata(-v, method="min", axis=1)


def _cases(seed, n):
    rng = np.random.default_rng(seed)
    for trial in range(n):
        P, B = int(rng.integers(1, 60)), int(rng.integers(1, 5))
        scale = [1.0, 1e-300, 1e300, 1.0 + 1e-15, 5e-324][trial % 5]     # the last: subnormal multiples
        values = rng.integers(-3, 4, size=(B, P)).astype(float) * scale
        if trial % 2:
            values[rng.random((B, P)) < 0.2] = np.nan
        if trial % 5 == 0:
            values += rng.normal(size=(B, P)) * 1e-13         # closer than the packed bits keep apart
        if trial % 7 == 0:
            values[:, : P // 2] = -0.0                          # signed zeros tie
        if trial % 11 == 0:
            values[:, -1] = np.inf                              # first; -inf ties with NaN, last
            values[:, 0] = -np.inf
        base = rng.integers(-2, 3, size=P).astype(float)
        if trial % 3 == 0:
            base[rng.random(P) < 0.25] = np.nan
        yield values, base


@ENGINES
def test_rank_rows_equals_scipy_rankdata_min(compiled):
    for values, base in _cases(0, 400):
        ranks, _ = rank_rows(values, compiled=compiled)
        np.testing.assert_array_equal(ranks, _scipy_ranks(values))


@ENGINES
def test_rank_rows_large_portfolio_with_near_ties(compiled):
    """100,000 values with many pairs 1 ulp apart: the exact re-sort must keep them apart."""
    rng = np.random.default_rng(1)
    v = rng.normal(size=100_000) * 1e6
    v[1::2] = np.nextafter(v[0::2], np.inf)
    values = np.vstack([v, -v])
    ranks, _ = rank_rows(values, compiled=compiled)
    np.testing.assert_array_equal(ranks, _scipy_ranks(values))


@ENGINES
def test_rank_rows_long_runs_within_the_dropped_bits(compiled):
    """Runs of 5, 40 and 3,000 values a few ulps apart, in reverse project order and with exact
    ties mixed in: short runs take the insertion sort, long ones the merge sort; ranks, tallies
    and Spearman's rho still equal SciPy's."""
    from ratescape.decide.rank_kernel import RankTally
    rng = np.random.default_rng(4)
    parts = []
    for size in (5, 40, 3000):
        ulps = rng.integers(0, size // 2 + 1, size=size)              # repeats give exact ties
        parts.append(np.array([np.nextafter(1e6, np.inf) + k * np.spacing(1e6) for k in ulps])[::-1])
    v = np.concatenate(parts + [rng.normal(size=2000) * 1e6])
    values = np.vstack([v, v[::-1], -v])
    base = mean_ranks(values[0])
    tally = RankTally(v.size, 10)
    ranks, rho = rank_rows(values, base, tally=tally, compiled=compiled)
    want = _scipy_ranks(values)
    np.testing.assert_array_equal(ranks, want)
    np.testing.assert_array_equal(tally.min, want.min(axis=0))
    np.testing.assert_array_equal(tally.max, want.max(axis=0))
    np.testing.assert_array_equal(tally.top, (want <= 10).sum(axis=0))
    for b in range(3):
        assert rho[b] == pytest.approx(spearmanr(values[0], values[b]).statistic, abs=1e-12)


@ENGINES
def test_spearman_rho_equals_scipy_spearmanr(compiled):
    rng = np.random.default_rng(2)
    for trial in range(100):
        P = int(rng.integers(3, 80))
        base = rng.integers(0, 6, size=P).astype(float) if trial % 2 else rng.normal(size=P)
        values = np.vstack([base + rng.normal(size=P) * s for s in (0.0, 0.5, 5.0)])
        _, rho = rank_rows(values, mean_ranks(base), compiled=compiled)
        for b in range(3):
            want = spearmanr(values[b], base).statistic
            assert rho[b] == pytest.approx(want, abs=1e-12)


@ENGINES
def test_spearman_rho_over_valid_projects_ranked_first(compiled):
    """Projects without a value (NaN in every scenario) rank last and are left out of rho."""
    rng = np.random.default_rng(3)
    base = rng.normal(size=30)
    base[[3, 8, 20]] = np.nan
    values = np.vstack([base + rng.normal(size=30) * 0.3, base])
    ok = np.isfinite(base)
    _, rho = rank_rows(values, mean_ranks(base), ok, compiled=compiled)
    assert rho[0] == pytest.approx(spearmanr(values[0, ok], base[ok]).statistic, abs=1e-12)
    assert rho[1] == pytest.approx(1.0)


@ENGINES
def test_rho_is_nan_when_a_ranking_is_all_ties(compiled):
    _, rho = rank_rows(np.ones((1, 5)), mean_ranks(np.arange(5.0)), compiled=compiled)
    assert np.isnan(rho[0])


@ENGINES
def test_ranks_and_tau_equal_scipy(compiled):
    for values, base in _cases(4, 300):
        ranks, tau = ranks_and_tau(values, BaseOrdering(base), compiled=compiled)
        np.testing.assert_array_equal(ranks, _scipy_ranks(values))
        ok = np.isfinite(base)
        last = np.where(np.isnan(values), -np.inf, values)      # NaN ranks last, tied with each other
        for b in range(values.shape[0]):
            want = kendalltau(base[ok], last[b, ok]).statistic if ok.sum() >= 2 else np.nan
            if np.isnan(want):
                assert np.isnan(tau[b])
            else:
                assert tau[b] == pytest.approx(want, abs=1e-12)


@ENGINES
def test_tau_of_a_reversed_order_is_minus_one_and_identity_is_one(compiled):
    """tau-b = 1 for the same order, -1 for the reverse (common practice)."""
    base = np.arange(50.0)
    _, tau = ranks_and_tau(np.vstack([base * 2.0, -base]), BaseOrdering(base), compiled=compiled)
    np.testing.assert_allclose(tau, [1.0, -1.0])


def test_rank_rows_refuses_a_wrong_out_buffer():
    with pytest.raises(ValueError, match="uint32"):
        rank_rows(np.ones((2, 3)), out=np.empty((2, 3)))


@ENGINES
def test_rank_tally_matches_numpy_reductions_over_several_calls(compiled):
    """Lowest and highest rank, top-K count and NaN flags accumulated block by block equal the
    reductions of the whole rank matrix (scipy.stats.rankdata, method="min")."""
    from ratescape.decide.rank_kernel import RankTally
    rng = np.random.default_rng(8)
    values = rng.integers(0, 9, size=(23, 40)).astype(float)
    values[rng.random(values.shape) < 0.05] = np.nan
    tally = RankTally(40, top_k=5)
    for a in range(0, 23, 6):
        rank_rows(values[a:a + 6], tally=tally, compiled=compiled)
    want = _scipy_ranks(values)
    np.testing.assert_array_equal(tally.min, want.min(axis=0))
    np.testing.assert_array_equal(tally.max, want.max(axis=0))
    np.testing.assert_array_equal(tally.top, (want <= 5).sum(axis=0))
    np.testing.assert_array_equal(tally.any_nan, np.isnan(values).any(axis=0))


def test_mean_ranks_equal_scipy_average_ranks():
    rng = np.random.default_rng(12)
    for _ in range(50):
        v = rng.integers(0, 5, size=int(rng.integers(1, 40))).astype(float)
        v[rng.random(v.size) < 0.2] = np.nan
        want = rankdata(-np.where(np.isnan(v), -np.inf, v), method="average")
        np.testing.assert_allclose(mean_ranks(v), want)


@ENGINES
@pytest.mark.parametrize("S", [1, 2, 7, 64, 2601])
def test_column_medians_equal_numpy_median(S, compiled):
    """Each column's exact median (the mean of the two middle values when S is even) equals
    ``numpy.median(axis=0)``; widths around the transpose's block of columns, ranks and floats."""
    from ratescape.decide.rank_kernel import column_medians
    rng = np.random.default_rng(S)
    for W in (1, 63, 64, 65, 200):
        ranks = rng.integers(1, 1000, size=(S, W)).astype(np.uint32)
        ranks[:, :3] = 7                                             # constant columns
        np.testing.assert_array_equal(column_medians(ranks, compiled=compiled), np.median(ranks, axis=0))
        work = np.empty(S * W + 5, dtype=np.uint32)                 # a larger reused buffer
        out = np.empty(W)
        assert column_medians(ranks, out=out, work=work, compiled=compiled) is out
        np.testing.assert_array_equal(out, np.median(ranks, axis=0))
        floats = rng.normal(size=(S, W))
        np.testing.assert_array_equal(column_medians(floats, compiled=compiled), np.median(floats, axis=0))
    with pytest.raises(ValueError, match="work must hold"):
        column_medians(np.ones((S, 3), dtype=np.uint32), work=np.empty(1, dtype=np.uint32), compiled=compiled)


def test_numpy_rank_pass_equals_the_compiled_one_bit_for_bit():
    """Ranks, Spearman's rho (same sums in the same order), Kendall's tau-b and the tallies of the
    NumPy forms equal the compiled kernels' exactly, on the tie/NaN/signed-zero/infinity cases and
    on a portfolio of the demo's size; and a portfolio that small takes the NumPy form by default
    (the compiled kernels are then never called: see tests/db/test_compiled_kernels.py)."""
    from ratescape.decide import rank_kernel
    from ratescape.decide.rank_kernel import RankTally
    rng = np.random.default_rng(21)
    demo_sized = rng.normal(size=(40, 194)).round(1)           # rounding makes ties
    demo_sized[:, :7] = np.nan
    cases = list(_cases(9, 200)) + [(demo_sized, demo_sized[0].copy())]
    for values, base in cases:
        P = values.shape[1]
        got = {}
        for compiled in (True, False):
            tally = RankTally(P, 3)
            ranks, rho = rank_rows(values, mean_ranks(base), np.isfinite(base), tally=tally, compiled=compiled)
            ranks2, tau = ranks_and_tau(values, BaseOrdering(base), compiled=compiled)
            got[compiled] = (ranks, ranks2, rho, tau, tally.min, tally.max, tally.top, tally.any_nan)
        for a, b in zip(got[True], got[False]):
            np.testing.assert_array_equal(a, b)          # exactly equal (NaN where NaN)
    assert rank_kernel.NUMPY_MAX_PROJECTS >= 194
    assert not rank_kernel._use_compiled(194, None) and rank_kernel._use_compiled(rank_kernel.NUMPY_MAX_PROJECTS + 1, None)
