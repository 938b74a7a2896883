"""IRR with every root: cross-checks against numpy-financial and numpy.roots,
identities (PW = 0 at every root, Descartes, Norstrom), touching roots,
statuses and shapes (Hypothesis).

Published / reference values are checked in test_refcases_core.py.
"""
from __future__ import annotations

import doctest

import numpy as np
import numpy_financial as npf
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from ratescape.evaluate import irr as irr_mod
from ratescape.evaluate.irr import IrrStatus, irr, irr_roots, sign_changes


def _pw_relative(amounts, r):
    """|PW(r)| / sum |A_t| (1+r)^-t for each root r (rows broadcast)."""
    t = np.arange(amounts.shape[-1])
    disc = (1.0 + r[..., None]) ** -t
    with np.errstate(invalid="ignore", divide="ignore"):  # NaN-padded slots of zero rows
        return np.abs((amounts * disc).sum(-1)) / (np.abs(amounts) * disc).sum(-1)


def _oracle_roots(a, low=-0.99, high=10.0):
    """Real roots r in [low, high] from numpy.roots of sum a_t x^t, x = 1/(1+r).

    Returns (roots, well_conditioned); ill-conditioned rows (near-real
    complex roots or close real roots) are left out of the comparison.
    """
    z = np.roots(a[::-1])
    is_real = np.abs(z.imag) <= 1e-10 * np.maximum(1.0, np.abs(z))
    x = np.sort(z[is_real].real)
    near_real = (~is_real) & (np.abs(z.imag) < 1e-3)
    close = x.size > 1 and np.min(np.diff(x)) < 1e-4
    x = x[x > 0]
    r = np.sort(1.0 / x - 1.0)
    edge = np.any(np.abs(r - low) < 1e-6) or np.any(np.abs(r - high) < 1e-6)
    r = r[(r >= low) & (r <= high)]
    return r, not (near_real.any() or close or edge)


# ---------------------------------------------------- reference libraries --
def test_conventional_rows_match_numpy_financial_irr():
    # one sign change: a unique root; numpy_financial.irr (polynomial roots)
    rng = np.random.default_rng(7)
    a = rng.uniform(50, 400, size=(300, 15))
    a[:, 0] = -rng.uniform(500, 3000, size=300)
    got = irr(a)
    expect = np.array([npf.irr(row) for row in a])
    ok = np.isfinite(expect) & (expect > -0.99) & (expect < 10)
    assert ok.sum() > 250
    np.testing.assert_allclose(got[ok], expect[ok], rtol=1e-9, atol=1e-11)
    res = irr_roots(a)
    assert (res.status[ok] == IrrStatus.UNIQUE).all()
    assert (res.sign_changes == 1).all()


@pytest.mark.parametrize("T", [3, 5, 8, 13, 21])
def test_all_roots_match_numpy_roots_on_random_streams(T):
    # non-conventional random streams: every real root in range, as numpy.roots
    rng = np.random.default_rng(T)
    a = rng.normal(size=(400, T))
    res = irr_roots(a)
    compared = 0
    for p in range(a.shape[0]):
        r, good = _oracle_roots(a[p])
        if not good:
            continue
        compared += 1
        got = res.roots[p][~np.isnan(res.roots[p])]
        assert got.size == r.size == res.count[p], (a[p].tolist(), got, r)
        np.testing.assert_allclose(got, r, rtol=1e-8, atol=1e-10)
    assert compared > 300
    assert res.count.max() >= 2  # the sample does contain several-root rows


# ---------------------------------------------------------- identities ---
def test_present_worth_is_zero_at_every_root():
    rng = np.random.default_rng(11)
    a = rng.normal(size=(2000, 30))
    res = irr_roots(a)
    r = res.roots
    found = ~np.isnan(r)
    rel = _pw_relative(a[:, None, :], np.where(found, r, 0.0))
    assert (rel[found] < 1e-12).all()
    assert found.sum() > 1000
    # roots sorted ascending and inside the search range
    assert (np.diff(np.where(found, r, 1e300), axis=1)[found[:, 1:]] > 0).all()
    assert ((r[found] >= -0.99) & (r[found] <= 10.0)).all()
    # Descartes' rule of signs: no more roots than sign changes
    assert (res.count <= res.sign_changes).all()
    np.testing.assert_array_equal(res.count, found.sum(axis=1))


def test_norstrom_rows_have_one_positive_root():
    # Norstrom (1972): one sign change of the cumulative amounts (total != 0)
    # -> exactly one root r > 0 (from memory)
    rng = np.random.default_rng(3)
    a = rng.normal(size=(3000, 10))
    a[:, 0] -= 2.0
    res = irr_roots(a, high=50.0)
    sel = res.norstrom
    assert sel.sum() > 100
    positive = np.sum(res.roots > 0, axis=1)
    # PW at 0 is the total; PW at a very high rate tends to A_0: a root in
    # (0, 50] exactly when their signs differ
    pw_hi = (a * (51.0 ** -np.arange(10))).sum(1)
    expect = (np.sign(a.sum(1)) != np.sign(pw_hi)).astype(int)
    np.testing.assert_array_equal(positive[sel], expect[sel])


def test_sign_changes_skip_zeros():
    assert sign_changes([-100, 0, 0, 50, 0, -10]) == 2
    assert sign_changes([0, 0, 5]) == 0
    np.testing.assert_array_equal(sign_changes([[1, -1, 1], [0, -1, 0]]), [2, 0])


# ------------------------------------------------------- touching roots --
def test_touching_double_root():
    # (1 - x)^2: PW touches zero at r = 0 without changing sign
    res = irr_roots([1.0, -2.0, 1.0])
    assert res.count == 1 and res.touching
    assert abs(res.roots[0]) < 1e-12
    # double root at r = 10 % times 2x^2 - 1 (root x = 1/sqrt(2), r = 41.4 %)
    a = np.convolve(np.convolve([-1 / 1.1, 1], [-1 / 1.1, 1]), [-1.0, 0.0, 2.0])
    res = irr_roots(a)
    assert res.touching and res.count == 2
    # a double root is only determined to about sqrt(eps)
    np.testing.assert_allclose(res.roots, [0.1, np.sqrt(2) - 1], atol=1e-7)


def test_close_pair_of_roots_within_one_grid_step():
    # roots at 10 % and 10.01 %: far closer than the grid spacing
    a = np.convolve([-1 / 1.1, 1], [-1 / 1.1001, 1])
    res = irr_roots(a)
    assert res.count == 2 and not res.touching
    np.testing.assert_allclose(res.roots, [0.1, 0.1001], rtol=1e-9)
    assert res.labels == "multiple"


# ----------------------------------------------------- statuses, range ---
def test_statuses():
    a = np.array([
        [-100, 110, 0],       # unique
        [-1000, 2500, -2000],  # none (refcase irr-none-real)
        [-1600, 10000, -10000],  # multiple (Lorie & Savage pump)
        [100, 50, 50],        # no sign change
        [0, 0, 0],            # zero flows
        [-1, np.nan, 2],      # nonfinite
    ], dtype=float)
    res = irr_roots(a)
    assert res.labels.tolist() == ["unique", "none", "multiple", "no_sign_change",
                                   "zero_flows", "nonfinite"]
    assert res.status.dtype == np.int8
    np.testing.assert_array_equal(res.count, [1, 0, 2, 0, 0, 0])
    assert res.roots.shape == (6, 2)
    out = irr(a)
    assert out[0] == pytest.approx(0.1)
    assert np.isnan(out[1:]).all()  # several roots -> NaN, never one of them


def test_search_range_is_honoured():
    # Lorie & Savage pump: roots 25 % and 400 %; a range up to 100 % sees one
    assert irr([-1600, 10000, -10000], high=1.0) == pytest.approx(0.25, rel=1e-12)
    assert irr_roots([-1600, 10000, -10000], low=0.3, high=1.0).labels == "none"


def test_shapes_and_scalars():
    a = np.random.default_rng(0).normal(size=(2, 3, 6))
    res = irr_roots(a)
    assert res.count.shape == res.status.shape == res.norstrom.shape == (2, 3)
    assert res.roots.shape[:2] == (2, 3)
    assert irr(a).shape == (2, 3)
    assert type(irr([-100, 110])) is float
    one = irr_roots([-100, 110])
    assert type(one.count) is int and type(one.labels) is str
    with pytest.raises(ValueError, match=r"shape \(\)"):
        irr_roots(5.0)
    with pytest.raises(ValueError, match="low < high"):
        irr_roots([-1, 2], low=-1.0)
    with pytest.raises(ValueError, match="grid_points"):
        irr_roots([-1, 2], grid_points=3)


def test_chunked_batch_equals_row_by_row():
    # more rows than one internal block: block boundaries must not matter
    rng = np.random.default_rng(5)
    a = rng.normal(size=(12000, 6))
    big = irr_roots(a)
    for p in list(range(40)) + list(range(7800, 7830)) + list(range(11970, 12000)):
        one = irr_roots(a[p])
        assert one.count == big.count[p]
        np.testing.assert_allclose(one.roots[: one.count], big.roots[p, : one.count], rtol=1e-12)


# ----------------------------------------------------------- Hypothesis --
@settings(max_examples=150, deadline=None)
@given(hnp.arrays(float, st.tuples(st.integers(1, 6), st.integers(1, 12)),
                  elements=st.floats(-1e3, 1e3, allow_subnormal=False)))
def test_fuzz_roots_are_roots(a):
    res = irr_roots(a)
    r = res.roots
    found = ~np.isnan(r)
    np.testing.assert_array_equal(res.count, found.sum(axis=1))
    assert (res.count <= res.sign_changes).all()
    if found.any():
        # rows of zeros have no roots, so the denominator is positive here
        rel = _pw_relative(a[:, None, :], np.where(found, r, 0.0))[found]
        # simple roots to ~1e-12; a touching/triple root's PW is tiny too
        assert (rel < 1e-9).all(), rel
    single = irr(a)
    np.testing.assert_array_equal(np.isnan(single), res.count != 1)


def test_docstring_examples():
    result = doctest.testmod(irr_mod)
    assert result.attempted > 4 and result.failed == 0
