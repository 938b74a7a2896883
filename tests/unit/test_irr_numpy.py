"""The IRR kernels in plain NumPy (evaluate/irr_numpy.py) against the compiled ones (issue 16, part 3).

A small run uses the NumPy forms so that a first run compiles no IRR kernel; they must give the
compiled kernels' results bit for bit: roots, counts, statuses (``unresolved`` included),
touching flags, sign-change counts, on random streams with several sign changes, close pairs of
roots (constructed as products of (x - x_k), common practice), a triple root, non-finite and
all-zero rows, and with the iterations starved. The compiled kernels themselves are checked
against numpy.roots and numpy-financial in test_irr.py and test_irr_roots_complete.py.
"""
from __future__ import annotations

import numpy as np
import pytest
from test_irr_roots_complete import _close_pair_streams

import ratescape.evaluate.irr_kernels as K
from ratescape.evaluate.irr import irr_roots
from ratescape.evaluate.irr_numpy import libm_exp

FIELDS = ("roots", "count", "status", "sign_changes", "norstrom", "touching")


def _streams(seed):
    rng = np.random.default_rng(seed)
    out = []
    for T in (2, 3, 5, 8, 13, 21, 41):
        a = rng.normal(size=(60, T)) * rng.uniform(1, 1e4, (60, 1))
        a[rng.random(a.shape) < 0.2] = 0.0
        out.append(a)
    odd = np.zeros((6, 5))
    odd[1] = [np.nan, 1, -2, 0, 3]
    odd[2] = [-1, np.inf, 0, 0, 1]
    odd[3] = [0, 0, -5, 0, 0]
    odd[4] = [-1.0, 3.0, -3.0, 1.0, 0.0]                   # (x - 1)^3: a triple root at 0 %
    odd[5] = [-1600.0, 10000, -10000, 0, 0]                 # 25 % and 400 %
    out.append(odd)
    out.append(_close_pair_streams(rng, 80))
    return out


def _both(monkeypatch, fn):
    """fn() with every IRR kernel call compiled, then with every call in NumPy."""
    got = []
    for limit in (-1, 10**9):
        monkeypatch.setattr(K, "NUMPY_MAX_ROWS", limit)
        monkeypatch.setattr(K, "NUMPY_MAX_CELLS", limit)
        monkeypatch.setattr(K, "NUMPY_MAX_FACTS", limit)
        got.append(fn())
    return got


@pytest.mark.parametrize("low,high", [(-0.99, 10.0), (-0.5, 0.5), (-0.999, 50.0)])
def test_numpy_irr_equals_compiled_bit_for_bit(monkeypatch, low, high):
    for a in _streams(7):
        compiled, plain = _both(monkeypatch, lambda a=a: irr_roots(a, low=low, high=high))
        for f in FIELDS:
            np.testing.assert_array_equal(getattr(plain, f), getattr(compiled, f), err_msg=f)
        if a.shape == (6, 5) and (low, high) == (-0.99, 10.0):           # the odd rows
            assert compiled.labels.tolist() == ["zero_flows", "nonfinite", "nonfinite", "no_sign_change",
                                                "unresolved", "multiple"]


def test_starved_iterations_give_the_same_flags_and_codes():
    """maxiter 1..3 leaves refinements unconverged: the same flag 2 / ROOT_NOT_CONVERGED rows,
    the same roots elsewhere."""
    A = np.array([[-1600.0, 10000, -10000]])
    ends = (np.array([np.log1p(-0.99)]), np.array([np.log1p(10.0)]))
    for maxiter in (1, 2, 3, 300):
        c = K.cell_roots(A, np.array([2]), np.array([0]), *ends, maxiter=maxiter, compiled=True)
        n = K.cell_roots(A, np.array([2]), np.array([0]), *ends, maxiter=maxiter, compiled=False)
        for x, y in zip(c, n):
            np.testing.assert_array_equal(x, y)
    assert c[3][0] == 0 and c[2][0] == 2
    rng = np.random.default_rng(1)
    A = np.zeros((200, 31))
    A[:, 0] = -rng.uniform(100, 1000, 200)
    A[:, 1:] = rng.uniform(0, 100, (200, 30))
    for maxiter in (2, 5, 300):
        c = K.single_sign_change_solve(A, np.full(200, 30), np.log1p(-0.999), np.log1p(10.0), maxiter, compiled=True)
        n = K.single_sign_change_solve(A, np.full(200, 30), np.log1p(-0.999), np.log1p(10.0), maxiter, compiled=False)
        np.testing.assert_array_equal(c[0], n[0])
        np.testing.assert_array_equal(c[1], n[1])
    assert (c[1] == K.ROOT_FOUND).all()


def test_stream_facts_equal_compiled():
    rng = np.random.default_rng(3)
    A = rng.integers(-2, 3, size=(500, 9)).astype(float)
    A[rng.random(A.shape) < 0.03] = np.nan
    A[rng.random(A.shape) < 0.03] = -np.inf
    A[7] = 0.0
    A[8] = -0.0
    for x, y in zip(K.stream_facts(A, compiled=True), K.stream_facts(A, compiled=False)):
        np.testing.assert_array_equal(x, y)


def test_libm_exp_is_the_c_library_exp():
    """NumPy's SIMD exp differs from the C library's in the last bit now and then; compiled code
    and ``math.exp`` call the C library. Overflow gives +inf, as compiled code does."""
    import math
    x = np.random.default_rng(0).uniform(-700, 700, 10_000)
    assert np.array_equal(libm_exp(x), np.array([math.exp(v) for v in x]))
    assert libm_exp(np.array([1000.0]))[0] == np.inf and np.isnan(libm_exp(np.array([np.nan]))[0])


def test_a_small_run_calls_no_compiled_irr_kernel(monkeypatch):
    """A demo-sized call (hundreds of rows and cells) never reaches a Numba kernel."""
    def refuse(*args):
        raise AssertionError("compiled kernel called")
    for name in ("_cells_kernel", "_single_roots", "_stream_facts"):
        monkeypatch.setattr(K, name, refuse)
    rng = np.random.default_rng(2)
    a = rng.normal(size=(150, 41))
    res = irr_roots(a)
    assert (res.status == 2).sum() > 10            # several rows with several roots: cells searched
