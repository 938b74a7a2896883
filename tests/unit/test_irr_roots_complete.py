"""Completeness and tolerance of ``irr_roots`` (issue 14, part 13).

Every reported root must zero the present worth to the documented tolerance, no root in
[low, high] may be missed, and a root that cannot be resolved or refined gives the status
``unresolved`` (never a guessed value). Each check names its source beside it.
"""
from __future__ import annotations

import numpy as np
import pytest

from ratescape.evaluate.irr_kernels import (ROOT_FOUND, ROOT_NOT_CONVERGED, ROOT_TOL, cell_roots,
                                         single_sign_change_solve)
from ratescape.evaluate.irr import _STATUS_LABELS, IrrStatus, irr, irr_roots

LOW, HIGH = -0.99, 10.0


def _relative_worth(a, r):
    """|PW(r)| / sum_t |A_t| (1+r)^-t, for one stream and an array of rates."""
    t = np.arange(a.size)
    disc = (1.0 + np.asarray(r, float)[:, None]) ** -t
    return np.abs(disc @ a) / (disc @ np.abs(a))


def _numpy_roots(a, low=LOW, high=HIGH):
    """Distinct real roots r in [low, high] via numpy.roots (polynomial roots, reference library)
    of sum_t a_t x^t, x = 1/(1+r) real and positive; also whether the row is well conditioned
    (no complex pair near the real axis, no two roots within 1e-7, none within 1e-7 of an end)."""
    z = np.roots(a[::-1])
    real = np.abs(z.imag) <= 1e-9 * np.maximum(1.0, np.abs(z))
    x = np.sort(z[real].real)
    x = x[x > 0]
    r = np.sort(1.0 / x - 1.0)
    near_real = (~real) & (np.abs(z.imag) < 1e-6 * np.maximum(1.0, np.abs(z)))
    close = r.size > 1 and np.min(np.diff(r)) < 1e-7
    edge = np.any(np.abs(r - low) < 1e-7) or np.any(np.abs(r - high) < 1e-7)
    return r[(r >= low) & (r <= high)], not (near_real.any() or close or edge)


def _close_pair_streams(rng, n):
    """Streams with two simple roots closer than one grid step (~0.036 in log(1+r)), a third real
    root and a random factor: products of (x - x_k) in x = 1/(1+r) (constructed; common practice)."""
    out = []
    for _ in range(n):
        r1 = rng.uniform(-0.5, 2.0)
        gap = 10.0 ** rng.uniform(-6, -1.7)                       # 1e-6 .. 0.02 in r
        r3 = rng.uniform(-0.8, 5.0)
        xs = 1.0 / (1.0 + np.array([r1, r1 + gap, r3]))
        poly = np.array([1.0])
        for x in xs:
            poly = np.convolve(poly, [-x, 1.0])                  # ascending powers of x
        extra = rng.normal(size=rng.integers(1, 6))
        out.append(np.convolve(poly, extra) * rng.uniform(10, 1000))
    T = max(len(p) for p in out)
    return np.array([np.pad(p, (0, T - len(p))) for p in out])


def _compare(a, res, allow_unresolved, allow_merged=0):
    compared = unresolved = merged = 0
    for p in range(a.shape[0]):
        if res.status[p] == IrrStatus.UNRESOLVED:
            unresolved += 1
            assert res.count[p] == 0 and np.isnan(res.roots[p]).all()   # no guessed root
            continue
        got = res.roots[p][~np.isnan(res.roots[p])]
        if got.size:   # every reported root zeroes PW to ROOT_TOL (touching: touch_tol 1e-12)
            assert (_relative_worth(a[p], got) <= ROOT_TOL).all(), (a[p].tolist(), got)
        want, good = _numpy_roots(a[p])
        if not good:
            continue
        compared += 1
        # no root in range missed, none invented (numpy.roots, reference library); documented
        # exception: two roots whose PW dips between them by less than its rounding error (or
        # touch_tol) are one touching root
        if res.touching[p] and got.size == want.size - 1:
            assert np.min(np.diff(np.log1p(want))) < 3e-5, (a[p].tolist(), got, want)  # a tight pair only
            merged += 1
            continue
        assert got.size == want.size, (a[p].tolist(), got, want)
        # a close pair is ill-conditioned (both libraries carry errors ~ eps / gap): each root
        # within a fifth of the gap of its partner; otherwise 1e-6 relative
        gap = np.min(np.diff(want)) if want.size > 1 else np.inf
        np.testing.assert_allclose(got, want, rtol=1e-6, atol=min(1e-8 + 0.2 * gap, 1e-4))
    assert unresolved <= allow_unresolved and merged <= allow_merged, (unresolved, merged)
    return compared


def test_seeded_random_streams_every_root_found_and_zeroes_worth():
    # 24,000 seeded random streams, three families, against numpy.roots (reference library)
    rng = np.random.default_rng(20240613)
    compared = 0
    for T in range(3, 41):
        a = rng.normal(size=(300, T))
        compared += _compare(a, irr_roots(a), allow_unresolved=0)
    for T in range(16, 41):
        a = rng.integers(-9, 10, size=(300, T)).astype(float)
        compared += _compare(a, irr_roots(a), allow_unresolved=0)
    a = _close_pair_streams(rng, 1000)
    res = irr_roots(a)
    # pairs 1e-6 .. 0.02 apart (log-uniform): those under ~3e-6 dip below PW's rounding error and
    # are one touching root; a few tight clusters are unresolved (1 %), never a wrong "unique"
    compared += _compare(a, res, allow_unresolved=10, allow_merged=120)
    assert compared > 19_000   # of 24,000 (ill-conditioned oracle rows are skipped)
    # the constructed rows do hold several roots in range, and none is called "unique"
    assert (res.count[res.status != IrrStatus.UNRESOLVED] >= 2).mean() > 0.7


def test_close_pairs_never_reported_as_unique():
    # two roots 1e-3 .. 1e-5 apart in r plus a third: count 3, "multiple" (constructed, common practice)
    for gap in (1e-3, 1e-4, 1e-5):
        xs = 1.0 / (1.0 + np.array([0.05, 0.05 + gap, 0.8]))
        poly = np.array([1.0])
        for x in xs:
            poly = np.convolve(poly, [-x, 1.0])
        res = irr_roots(poly * 1000.0)
        assert res.labels == "multiple" and res.count == 3, (gap, res)
        # the coefficients are rounded, so a pair 'gap' apart moves by ~ eps / gap (conditioning)
        np.testing.assert_allclose(res.roots, [0.05, 0.05 + gap, 0.8], rtol=1e-9, atol=1e-2 * gap)


def test_regression_stream_whose_close_pair_was_missed():
    # found by 50,000 seeded normal streams against numpy.roots (reference library): roots
    # 1.52 %, 2.68 % (closer than one grid step) and 9.94 %; the grid search used to report
    # only 9.94 % as the "unique" IRR
    a = np.array([-1.8684992497154793, -0.1677367061771002, -0.37656893886811393, 1.9403168492799876,
                  0.355347752863103, -0.14160086911520642, 0.18853882884545914, 1.3853764082350528,
                  0.2771076598949732, 0.7028811640863352, 1.1644066389517445, -0.7263462163190245,
                  -0.37824106232962224, -0.5185699208537555, -0.24330946697352757, -0.9631270136669764,
                  1.4925748988700995, -0.5029850622636284, -1.1434656731584953, 0.345454302586364,
                  -0.5876233792653728, 0.00348720648604492, 1.406906649116539, -1.1957671668797465,
                  -1.467383002194664, -0.29287638129420474, -0.9671503457281593, 0.7007024789232328,
                  -1.7218944950322554, 1.468684958961284, -0.18818750771311377, 0.5639789426907655,
                  0.28400834379449597, -0.12381625099692091, -0.22925830653015572, -0.23355694398492055,
                  -0.9286934671948457, -0.8087266559838949, 1.1245724029624375, 2.4864765074202086])
    want, good = _numpy_roots(a)
    assert good and want.size == 3
    res = irr_roots(a)
    assert res.labels == "multiple" and res.count == 3
    np.testing.assert_allclose(res.roots, want, rtol=1e-8)
    assert np.isnan(irr(a))


def test_regression_search_range_near_minus_one_returns_no_unconverged_root():
    # numpy-financial issue gh-15 stream (its test suite): root r = -0.9999999990596069. With a
    # range reaching to -100 % the compiled Newton used to creep and stop at its iteration limit,
    # returning -0.99999999563 as "the" root (PW far from zero there)
    v = np.array([-3000.0, 2.3926932267015667e-07, 4.1672087103345505e-16, 5.3965110036378706e-25,
                  5.1962551071806174e-34, 3.7202955645436402e-43, 1.9804961711632469e-52,
                  7.8393517651814181e-62, 2.3072565113911438e-71, 5.0491839233308912e-81,
                  8.2159177668499263e-91, 9.9403244366963527e-101, 8.942410813633967e-111])
    for low in (-0.999, -1 + 1e-12):
        res = irr_roots(v, low=low)
        if res.count:
            # the tolerance holds at u = log(1 + r) (where the kernel checks it); the returned float
            # r itself carries 1 + r only to eps / (1 + r) relative, magnified T times in PW
            r = res.roots[:1]
            allowance = ROOT_TOL + 2 * v.size * np.finfo(float).eps / (1.0 + r[0])
            assert _relative_worth(v, r)[0] <= allowance
    np.testing.assert_allclose(irr(v, low=-1 + 1e-12), -0.9999999990596069, rtol=1e-9)  # numpy-financial


def test_iteration_limit_is_a_status_never_a_root():
    # a Newton that runs out of iterations reports ROOT_NOT_CONVERGED and NaN (common practice)
    rng = np.random.default_rng(1)
    A = np.zeros((200, 31))
    A[:, 0] = -rng.uniform(100, 1000, 200)
    A[:, 1:] = rng.uniform(0, 100, (200, 30))
    last = np.full(200, 30)
    u, code = single_sign_change_solve(A, last, np.log1p(-0.999), np.log1p(10.0), maxiter=2)
    assert (code == ROOT_NOT_CONVERGED).sum() > 150
    assert np.isnan(u[code == ROOT_NOT_CONVERGED]).all()
    found = code == ROOT_FOUND
    t = np.arange(31)
    for r in np.flatnonzero(found):
        assert _relative_worth(A[r], np.expm1(u[r:r + 1]))[0] <= ROOT_TOL
    # with the default limit every row converges, even from low = -0.999
    u, code = single_sign_change_solve(A, last, np.log1p(-0.999), np.log1p(10.0))
    assert (code == ROOT_FOUND).all()
    assert max(_relative_worth(A[r], np.expm1(u[r:r + 1]))[0] for r in range(200)) <= ROOT_TOL
    # the cell kernel likewise: a starved refinement flags the cell, it lists no root
    roots, touch, count, flag = cell_roots(np.array([[-1600.0, 10000, -10000]]), np.array([2]), np.array([0]),
                                           np.array([np.log1p(-0.99)]), np.array([np.log1p(10.0)]), maxiter=1)
    assert flag[0] != 0 and count[0] == 0 and np.isnan(roots).all()


def test_triple_root_is_unresolved_not_unique():
    # (1 - x)^3 and a triple root at 10 %: three roots at one point cannot be told from one in
    # floating point; the old search reported a "unique" IRR (from memory: Descartes' parity)
    for a in ([1.0, -3.0, 3.0, -1.0], np.convolve(np.convolve([-1 / 1.1, 1], [-1 / 1.1, 1]), [-1 / 1.1, 1])):
        res = irr_roots(a)
        assert res.labels == "unresolved" and res.count == 0 and np.isnan(res.roots).all()
        assert np.isnan(irr(a))


def test_status_labels_keep_their_codes():
    # screen.py stores labels through _STATUS_LABELS[code]: old codes unchanged, the new one last
    assert list(_STATUS_LABELS) == ["unique", "none", "multiple", "no_sign_change", "zero_flows",
                                    "nonfinite", "unresolved"]
    assert [int(s) for s in IrrStatus] == list(range(7))


@pytest.mark.parametrize("low,high", [(-0.999, 10.0), (-0.5, 0.5), (0.0, 50.0)])
def test_search_ranges_against_numpy_roots(low, high):
    # the documented range is honoured at both ends (numpy.roots, reference library)
    rng = np.random.default_rng(int(1000 * (high - low)))
    a = rng.normal(size=(1500, 12))
    res = irr_roots(a, low=low, high=high)
    for p in range(a.shape[0]):
        want, good = _numpy_roots(a[p], low, high)
        got = res.roots[p][~np.isnan(res.roots[p])]
        assert ((got >= low) & (got <= high)).all()
        if good:
            assert res.status[p] != IrrStatus.UNRESOLVED
            np.testing.assert_allclose(got, want, rtol=1e-6, atol=1e-8)
