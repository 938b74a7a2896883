"""Compiled engine loops against their NumPy formulations (reference: NumPy itself)."""
import numpy as np
import pytest

from ratescape.evaluate.compiled import weighted_exponential_sums
from ratescape.evaluate.kernel import PointEvaluator, LineClass
from ratescape.evaluate.timing import discount_exponents


@pytest.mark.parametrize("timing", ["end", "mid", "beginning"])
@pytest.mark.parametrize("periods_per_year", [1.0, 4.0, 12.0])
def test_geometric_sums_equal_the_exp_formulation(timing, periods_per_year):
    rng = np.random.default_rng(5)
    tau = discount_exponents(240, timing, periods_per_year)
    lines = rng.normal(size=(40, 240))
    x = rng.uniform(-0.6, 0.4, 40)
    want = np.einsum("pt,pt->p", lines, np.exp(np.multiply.outer(x, tau)))
    scale = np.einsum("pt,pt->p", np.abs(lines), np.exp(np.multiply.outer(x, tau)))
    got = weighted_exponential_sums(lines, x, tau)
    assert np.all(np.abs(got - want) <= 1e-13 * scale)


def test_uneven_exponents_use_exact_exponentials():
    tau = np.array([0.0, 0.3, 1.1, 2.9])
    lines = np.array([[1.0, 2.0, 3.0, 4.0]])
    want = lines[0] @ np.exp(-0.1 * tau)
    assert weighted_exponential_sums(lines, [-0.1], tau)[0] == pytest.approx(want, rel=1e-15)


def test_point_evaluator_per_project_rates_follow_the_definition():
    """PW_p = sum_c sum_t a_cpt ((1+e_c)(1+f_p))^tau_t / (1+i_p)^tau_t for real lines, 1/(1+i_p)^tau_t for
    nominal ones (the factor definitions of kernel.discount_tensor; common practice)."""
    rng = np.random.default_rng(6)
    classes = [LineClass("real", 0.0, "one"), LineClass("real", 0.02, "one"), LineClass("nominal", 0.0, "one")]
    A = rng.normal(size=(3, 3, 25, 31))
    tau = discount_exponents(31, "mid", 1.0)
    i = rng.uniform(0.0, 0.2, 25)
    f = rng.uniform(0.0, 0.1, 25)
    got = PointEvaluator(A, classes, tau)(i, f)
    total = A.sum(axis=0)
    want = np.zeros(25)
    for c, cls in enumerate(classes):
        growth = (1 + cls.escalation) * (1 + f) if cls.basis == "real" else np.ones(25)
        want += (total[c] * (growth[:, None] / (1 + i[:, None])) ** tau).sum(axis=1)
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-9)


def test_single_sign_change_roots_equal_numpy_financial():
    """Conventional streams (one sign change): the compiled Newton root equals numpy_financial.irr
    (reference library) to 1e-12, and a root outside the range is reported as none."""
    import numpy_financial as npf
    from ratescape.evaluate.irr_kernels import single_sign_change_roots
    rng = np.random.default_rng(7)
    A = np.zeros((300, 31))
    A[:, 0] = -rng.uniform(100, 5000, 300)
    last = rng.integers(1, 31, 300)
    for r in range(300):
        A[r, 1:last[r] + 1] = -A[r, 0] * rng.uniform(0.005, 0.9)
    u, found = single_sign_change_roots(A, last, np.log1p(-0.99), np.log1p(10.0))
    want = np.array([npf.irr(A[r, :last[r] + 1]) for r in range(300)])
    inside = (want > -0.99) & (want < 10.0)
    assert (found == inside).all()
    np.testing.assert_allclose(np.expm1(u[found]), want[found], rtol=1e-12, atol=1e-13)
    # a narrower range leaves out roots beyond it
    u2, found2 = single_sign_change_roots(A, last, np.log1p(0.0), np.log1p(0.05))
    assert (found2 == ((want >= 0.0) & (want <= 0.05))).all()


def test_single_sign_change_roots_long_horizon_does_not_overflow():
    """1,200 monthly periods at rates from -99 % to 1000 % per period: the scaled Horner form stays finite."""
    from ratescape.evaluate.irr_kernels import single_sign_change_roots
    A = np.full((2, 1201), 1.0)
    A[:, 0] = [-100.0, -1300.0]
    u, found = single_sign_change_roots(A, np.array([1200, 1200]), np.log1p(-0.99), np.log1p(10.0))
    assert found.all() and np.all(np.isfinite(u))
    r = np.expm1(u)
    # annuity of 1 for 1,200 periods: price 100 -> r = 1 % (1/r to 1e-6); price 1,300 -> a negative rate
    assert r[0] == pytest.approx(0.01, abs=1e-6)
    v = 1.0 / (1.0 + r[1])
    assert 1300.0 == pytest.approx(sum(v ** t for t in range(1, 1201)), rel=1e-10)


def test_stream_facts_equal_the_numpy_definitions():
    """Sign changes skipping zeros (Descartes' count), of the running sums (Norstrom's condition),
    last non-zero period and finiteness, against their NumPy forms (irr.sign_changes; common practice)."""
    from ratescape.evaluate.irr_kernels import stream_facts
    from ratescape.evaluate.irr import sign_changes
    rng = np.random.default_rng(9)
    A = rng.integers(-2, 3, size=(500, 12)).astype(float)
    A[::7] = 0.0
    A[3, 4] = np.nan
    A[5, 2] = np.inf
    sc, sc_cum, last, finite, total_nonzero = stream_facts(A)
    ok = np.isfinite(A).all(axis=1)
    np.testing.assert_array_equal(finite, ok)
    clean = np.where(ok[:, None], A, 0.0)
    np.testing.assert_array_equal(sc[ok], sign_changes(clean)[ok])
    np.testing.assert_array_equal(sc_cum[ok], sign_changes(np.cumsum(clean, axis=1))[ok])
    nz = clean != 0
    want_last = np.where(nz.any(axis=1), 11 - np.argmax(nz[:, ::-1], axis=1), 0)
    np.testing.assert_array_equal(last[ok], want_last[ok])
    np.testing.assert_array_equal(total_nonzero[ok], clean.sum(axis=1)[ok] != 0)


def test_shared_points_in_one_product_equal_point_by_point_evaluation():
    """PointEvaluator.at_shared_points (one matrix product for K points) equals K single-point calls."""
    rng = np.random.default_rng(10)
    classes = [LineClass("real", 0.0, "one"), LineClass("real", 0.03, "one"), LineClass("nominal", 0.0, "one")]
    A = rng.normal(size=(3, 3, 17, 21))
    ev = PointEvaluator(A, classes, discount_exponents(21, "end", 1.0))
    i = np.linspace(0.0, 0.3, 7)
    f = np.linspace(0.0, 0.1, 7)
    shift = np.linspace(-0.02, 0.02, 7)
    got = ev.at_shared_points(i, f, shift)
    want = np.column_stack([ev(np.full(17, i[k]), np.full(17, f[k]), escalation_shift=shift[k]) for k in range(7)])
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-10)


def test_switching_value_scan_in_one_call_equals_point_by_point():
    """switching_value with scan_fn and rows_fn returns the same crossings as with worth_fn alone."""
    from ratescape.evaluate.switching import switching_value
    rng = np.random.default_rng(11)
    a = rng.normal(size=(30, 8))
    a[:, 0] = -np.abs(a[:, 0]) * 5
    t = np.arange(8)
    fn = lambda r: (a / (1 + r[:, None]) ** t).sum(axis=1)                      # noqa: E731
    scan = lambda v: (a[:, None, :] / (1 + v[None, :, None]) ** t).sum(axis=2)  # noqa: E731
    rows = lambda v, j: (a[j] / (1 + v[:, None]) ** t).sum(axis=1)              # noqa: E731
    plain = switching_value(fn, np.full(30, 0.05), -0.5, 2.0)
    fast = switching_value(fn, np.full(30, 0.05), -0.5, 2.0, scan_fn=scan, rows_fn=rows)
    np.testing.assert_array_equal(plain.status, fast.status)
    np.testing.assert_allclose(plain.value, fast.value, rtol=1e-12, equal_nan=True)


def test_shared_points_with_an_escalation_shift_follow_the_definition():
    """PW at shared points with every real line's escalation shifted by d: real factors
    ((1+e_c+d)(1+f))^tau / (1+i)^tau, nominal 1/(1+i)^tau (common practice)."""
    rng = np.random.default_rng(13)
    classes = [LineClass("real", 0.01, "one"), LineClass("nominal", 0.0, "one")]
    A = rng.normal(size=(3, 2, 9, 15))
    tau = discount_exponents(15, "end", 1.0)
    i, f, d = np.array([0.05, 0.12]), np.array([0.02, 0.04]), np.array([-0.01, 0.03])
    got = PointEvaluator(A, classes, tau).at_shared_points(i, f, d)
    total = A.sum(axis=0)
    for k in range(2):
        want = (total[0] * (((1 + 0.01 + d[k]) * (1 + f[k])) / (1 + i[k])) ** tau).sum(axis=1)
        want += (total[1] * (1 + i[k]) ** -tau).sum(axis=1)
        np.testing.assert_allclose(got[:, k], want, rtol=1e-12, atol=1e-10)


@pytest.mark.parametrize("compiled", [True, False], ids=["compiled", "numpy"])
def test_column_summaries_equal_the_numpy_reductions(compiled):
    # reference: NumPy's own reductions over the scenario axis (common practice)
    from ratescape.evaluate.compiled import column_summaries
    rng = np.random.default_rng(11)
    pw = rng.normal(0.0, 1e5, size=(257, 93))
    pw[:, 3] = 0.0                                  # PW exactly 0 counts as accepted
    pw[:, 4] = -1.0                                 # never accepted
    w = rng.uniform(size=257)
    w /= w.sum()
    got = column_summaries(pw, w, compiled=compiled)
    accepted = pw >= 0.0
    np.testing.assert_array_equal(got["pw_min"], pw.min(axis=0))
    np.testing.assert_array_equal(got["pw_max"], pw.max(axis=0))
    np.testing.assert_allclose(got["pw_mean"], pw.mean(axis=0), rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(got["pw_expected"], w @ pw, rtol=1e-12, atol=1e-9)
    np.testing.assert_array_equal(got["accept_share"], accepted.mean(axis=0))
    np.testing.assert_allclose(got["accept_probability"], w @ accepted, rtol=1e-13)
    assert got["accept_share"][3] == 1.0 and got["accept_share"][4] == 0.0


def test_index_from_worth_equals_the_where_formulation():
    # PI = 1 + PW / PW(investment) where the investment's PW is an outlay (Park, from memory)
    from ratescape.evaluate.compiled import index_from_worth
    rng = np.random.default_rng(12)
    pw = rng.normal(0.0, 1e5, size=(31, 17))
    outlay = -rng.uniform(1e4, 1e6, size=(31, 17))
    outlay[:, 2] = 0.0                              # no investment: no PI
    outlay[5, 6] = 3.0                              # an inflow in the investment role: no PI
    want = np.where(-outlay > 0, 1 + pw / np.where(-outlay > 0, -outlay, 1.0), np.nan)
    got = index_from_worth(pw, outlay)
    np.testing.assert_array_equal(np.isnan(got), np.isnan(want))
    np.testing.assert_allclose(got[~np.isnan(want)], want[~np.isnan(want)], rtol=1e-15)
    assert index_from_worth(np.array([[50.0]]), np.array([[-100.0]]))[0, 0] == 1.5
    with pytest.raises(ValueError):
        index_from_worth(pw, outlay[:, :3])


@pytest.mark.parametrize("compiled", [True, False], ids=["compiled", "numpy"])
def test_fixed_investment_is_the_outlay_where_it_never_changes(compiled):
    # identity: the outlay's PW equal in every scenario and positive -> that value; else NaN
    from ratescape.evaluate.compiled import index_and_fixed_investment
    outlay = -np.array([[100.0, 50.0, 0.0, 70.0, -5.0],
                        [100.0, 55.0, 0.0, 70.0, -5.0],
                        [100.0, 50.0, 0.0, 70.0, -5.0]])
    outlay[1, 3] = -np.nextafter(70.0, 71.0)         # one ulp apart is not the same
    pw = np.arange(15.0).reshape(3, 5)
    pi, fixed = index_and_fixed_investment(pw, outlay.copy(), compiled=compiled)
    np.testing.assert_array_equal(fixed, [100.0, np.nan, np.nan, np.nan, np.nan])
    np.testing.assert_allclose(pi[:, 0], 1 + pw[:, 0] / 100.0, rtol=0, atol=0)
    # in place (the outlay buffer becomes the PI), as the screen calls it
    buffer = outlay.copy()
    pi2, fixed2 = index_and_fixed_investment(pw, buffer, out=buffer, compiled=compiled)
    assert pi2 is buffer
    np.testing.assert_array_equal(np.isnan(pi2), np.isnan(pi))
    np.testing.assert_array_equal(pi2[~np.isnan(pi)], pi[~np.isnan(pi)])
    np.testing.assert_array_equal(np.isnan(fixed2), np.isnan(fixed))


@pytest.mark.parametrize("compiled", [True, False], ids=["compiled", "numpy"])
def test_class_weighted_streams_equal_the_numpy_loop_bit_for_bit(compiled):
    """One compiled pass equals ``out += amounts[c] * growth[c]`` over classes from zeros (the
    NumPy formulation it replaces), bit for bit: same products, same order of addition."""
    from ratescape.evaluate.compiled import class_weighted_streams
    rng = np.random.default_rng(21)
    for C, F, P, T in ((1, 1, 5, 3), (7, 51, 40, 42), (3, 2, 0, 4)):
        amounts = rng.normal(0, 1e4, size=(C, P, T))
        growth = np.exp(rng.normal(0, 0.3, size=(C, F, T)))
        want = np.zeros((F, P, T))
        for c in range(C):
            want += amounts[c][None, :, :] * growth[c][:, None, :]
        np.testing.assert_array_equal(class_weighted_streams(amounts, growth, compiled=compiled), want)
    with pytest.raises(ValueError, match="do not match"):
        class_weighted_streams(np.ones((2, 3, 4)), np.ones((3, 1, 4)))


def test_numpy_forms_equal_the_compiled_loops_bit_for_bit():
    """Small arrays take the NumPy forms (evaluate/compiled_numpy.py) so that a first run compiles
    none of these loops; they must equal the compiled loops exactly: PI and fixed investment (NaN
    where NaN), every per-project summary, the class-weighted streams."""
    from ratescape.evaluate import compiled as k
    rng = np.random.default_rng(5)
    pw = rng.normal(0.0, 1e5, size=(861, 194))
    pw[:, 3] = 0.0
    outlay = -rng.uniform(1e4, 1e6, size=(861, 194))
    outlay[:, 10] = outlay[0, 10]                    # a fixed investment
    outlay[:, 2] = 0.0
    outlay[7, 6] = np.nan
    w = rng.uniform(size=861)
    for a, b in zip(k.index_and_fixed_investment(pw, outlay, compiled=True),
                    k.index_and_fixed_investment(pw, outlay, compiled=False)):
        np.testing.assert_array_equal(a, b)
    assert np.isfinite(k.index_and_fixed_investment(pw, outlay)[1][10])
    c, n = k.column_summaries(pw, w, compiled=True), k.column_summaries(pw, w, compiled=False)
    for key in c:
        np.testing.assert_array_equal(c[key], n[key], err_msg=key)
    amounts = rng.normal(0, 1e4, size=(3, 194, 41))
    growth = np.exp(rng.normal(0, 0.3, size=(3, 21, 41)))
    np.testing.assert_array_equal(k.class_weighted_streams(amounts, growth, compiled=True),
                                  k.class_weighted_streams(amounts, growth, compiled=False))
    assert not k._use_compiled(861 * 194, None) and k._use_compiled(k.NUMPY_MAX_ELEMENTS + 1, None)


@pytest.mark.parametrize("real_basis", [False, True])
def test_numpy_root_search_equals_the_compiled_one_bit_for_bit(real_basis):
    """Chandrupatla's search in NumPy (all rows in lockstep, the C library's exp and log1p) finds
    the compiled kernel's crossings exactly, for each moved input, a class frozen after period 8,
    even and uneven period exponents; brackets without a sign change give NaN in both. (The
    compiled search is checked against scipy.optimize.elementwise.find_root in test_switching.py.)"""
    from ratescape.evaluate import compiled as k
    rng = np.random.default_rng(17)
    C, P, T = 3, 60, 21
    lines = rng.normal(0, 100, size=(C, P, T))
    lines[:, :, 0] = -rng.uniform(500, 3000, size=(C, P))
    real = np.array([True, True, False])
    frozen = np.array([-1, 8, -1])
    escalation = np.array([0.0, 0.02, 0.01])
    multiplier = np.array([1.0, 1.2, 1.0])
    rows = np.arange(P)
    found = 0
    for tau in (np.arange(T, dtype=float), np.sqrt(np.arange(T, dtype=float)) * 3.0):
        for move, (lo, hi) in ((k.MOVE_DISCOUNT_RATE, (-0.5, 2.0)), (k.MOVE_INFLATION, (-0.2, 0.6)),
                               (k.MOVE_ESCALATION, (-0.3, 0.5))):
            args = (lines, real, escalation, multiplier, tau, move, 0.08, 0.03, 0.0, rows, np.full(P, lo),
                    np.full(P, hi), 1e-12)
            got = [k.bracketed_roots(*args, frozen=frozen, real_basis=real_basis, compiled=c) for c in (True, False)]
            np.testing.assert_array_equal(got[0], got[1])
            found += int(np.isfinite(got[0]).sum())
    assert found > 100


def test_numpy_geometric_sums_equal_the_compiled_ones_bit_for_bit():
    """The per-project point worth sums in NumPy (anchored geometric factors, the C library's exp)
    equal the compiled loop's, for even and uneven exponents and per-row ratios of both signs."""
    rng = np.random.default_rng(23)
    lines = rng.normal(0, 1e3, size=(300, 70))
    x = rng.uniform(-0.3, 0.2, size=300)
    for tau in (np.arange(70.0), np.arange(70.0) + 0.5, np.sqrt(np.arange(70.0))):
        np.testing.assert_array_equal(weighted_exponential_sums(lines, x, tau, compiled=True),
                                      weighted_exponential_sums(lines, x, tau, compiled=False))
