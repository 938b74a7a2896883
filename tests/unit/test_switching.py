"""Tests of ratescape.evaluate.switching (switching values, tornado, spider)."""
import numpy as np
import numpy_financial as npf
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from ratescape.evaluate.switching import (
    SWITCH_AT_BASE,
    SWITCH_NONE,
    SWITCH_ONE,
    SWITCH_SEVERAL,
    first_cost_switching_multiplier,
    linear_switching_multiplier,
    spider,
    switching_value,
    tornado,
)


def pw_at(flows, rate):
    """Local discounting helper: PW of rows of end-of-period flows, t = 0, 1, ...

    flows (P, T), rate (P,) -> (P,): sum_t A_t / (1 + i)^t.
    """
    flows = np.atleast_2d(np.asarray(flows, float))
    t = np.arange(flows.shape[1])
    return np.sum(flows / (1.0 + np.asarray(rate, float)[:, None]) ** t, axis=1)


FLOWS = np.array([
    [-10000.0, 3000, 3000, 3000, 3000, 3000],  # IRR 0.1523823711663066 (refcase irr-conventional)
    [-100.0, 39, 59, 55, 20],  # numpy-financial irr docstring example, 0.28094842115996066
    [-100.0, 0, 0, 74],  # numpy-financial irr docstring example, -0.0954958303489728
    [-500.0, 100, 100, 100, 100, 100],  # invented, IRR = 0 (undiscounted sum zero)
], dtype=object)


def _padded(rows):
    T = max(len(r) for r in rows)
    return np.array([list(r) + [0.0] * (T - len(r)) for r in rows], float)


def test_discount_rate_switching_value_is_irr():
    flows = _padded(FLOWS)
    res = switching_value(lambda i: pw_at(flows, i), np.full(4, 0.08), -0.5, 1.0)
    expected = np.array([npf.irr(r) for r in FLOWS])  # numpy-financial as reference library
    np.testing.assert_allclose(res.value, expected, rtol=0, atol=1e-12)
    # published in ../shared/refcases (numpy-financial 1.0.0 values)
    assert res.value[0] == pytest.approx(0.1523823711663066, abs=1e-9)
    assert res.value[1] == pytest.approx(0.28094842115996066, abs=1e-9)
    assert res.value[2] == pytest.approx(-0.0954958303489728, abs=1e-9)
    assert res.status.tolist() == [SWITCH_ONE] * 4
    assert res.n_crossings.tolist() == [1] * 4
    np.testing.assert_allclose(res.relative_change, (expected - 0.08) / 0.08)
    # identity: worth at the switching value is zero
    np.testing.assert_allclose(pw_at(flows, res.value), 0.0, atol=1e-9)


def test_several_crossings_are_all_reported():
    # Lorie & Savage (1955) "pump" problem: -1600, +10000, -10000 has IRRs 25 % and 400 %
    flows = np.array([[-1600.0, 10000, -10000], [-1000.0, 2500, -2000]])
    res = switching_value(lambda i: pw_at(flows, i), np.full(2, 0.10), 0.0, 5.0, n_scan=101)
    assert res.status[0] == SWITCH_SEVERAL and res.n_crossings[0] == 2
    np.testing.assert_allclose(res.crossings[0], [0.25, 4.0], rtol=1e-12)
    assert res.value[0] == pytest.approx(0.25, rel=1e-12)  # the crossing nearest the base
    # -1000, 2500, -2000 has no real IRR (discriminant < 0; numpy_financial.irr gives nan)
    assert np.isnan(npf.irr(flows[1]))
    assert res.status[1] == SWITCH_NONE and np.isnan(res.value[1]) and res.n_crossings[1] == 0
    assert np.all(np.isnan(res.crossings[1]))


def test_zero_at_base_and_at_scan_point():
    fn = lambda v: v - 0.5  # noqa: E731
    res = switching_value(fn, 0.5, 0.0, 1.0, n_scan=5)  # 0.5 is a scan point and the base
    assert res.status == SWITCH_AT_BASE and res.value == 0.5 and res.n_crossings == 1
    assert res.relative_change == 0.0
    res = switching_value(fn, 0.2, 0.0, 1.0, n_scan=5)
    assert res.status == SWITCH_ONE and res.value == 0.5


def test_first_cost_multiplier_closed_form_matches_root_finding():
    # worth(m) = PW(benefits) + m * PW(first cost): linear in the multiplier
    flows = _padded(FLOWS)
    rate = np.full(len(flows), 0.07)
    pw_inv = flows[:, 0].copy()
    pw_total = pw_at(flows, rate)

    def worth(m):
        g = flows.copy()
        g[:, 0] *= m
        return pw_at(g, rate)

    closed = first_cost_switching_multiplier(pw_total, pw_inv)
    res = switching_value(worth, np.ones(4), 0.0, 3.0)
    np.testing.assert_allclose(res.value, closed, rtol=1e-12)
    np.testing.assert_allclose(closed, linear_switching_multiplier(pw_total - pw_inv, pw_inv))
    # hand check of the closed form: m* = 1 - PW / PW_investment
    assert first_cost_switching_multiplier(200.0, -1000.0) == pytest.approx(1.2)
    assert np.isnan(linear_switching_multiplier(5.0, 0.0))


def test_tornado_linear_worth():
    # worth = -cost + benefit * (P/A, 10 %, 5), P/A = 3.790786769... (common practice formula)
    pa = (1 - 1.1 ** -5) / 0.1
    cost = np.array([1000.0, 2000.0])
    benefit = np.array([300.0, 450.0])
    fns = {
        "first cost": lambda c: -c + benefit * pa,
        "annual benefit": lambda b: -cost + b * pa,
    }
    t = tornado(fns, {"first cost": cost, "annual benefit": benefit},
                {"first cost": 0.9 * cost, "annual benefit": 0.8 * benefit},
                {"first cost": 1.1 * cost, "annual benefit": 1.2 * benefit})
    assert t.inputs == ["first cost", "annual benefit"]
    np.testing.assert_allclose(t.swing[0], 0.2 * cost)
    np.testing.assert_allclose(t.swing[1], 0.4 * benefit * pa)
    np.testing.assert_allclose(t.worth_base, -cost + benefit * pa)
    # project 0: benefit swing 454.9 > cost swing 200; project 1: 682.3 > 400
    assert t.rank.tolist() == [[1, 1], [0, 0]]
    with pytest.raises(ValueError, match="disagree at the base"):
        tornado(fns, {"first cost": cost, "annual benefit": 1.5 * benefit}, 0.0, 1.0)
    with pytest.raises(ValueError, match="no value for input"):
        tornado(fns, {"first cost": cost}, 0.0, 1.0)


def test_spider_shape_and_values():
    fns = {"benefit": lambda b: -100 + b, "cost": lambda c: 150 - c}
    out = spider(fns, {"benefit": np.array([120.0, 80.0]), "cost": np.array([50.0, 50.0])}, [-0.1, 0.0, 0.1])
    assert out.shape == (2, 2, 3)
    np.testing.assert_allclose(out[0], [[8.0, 20.0, 32.0], [-28.0, -20.0, -12.0]])
    np.testing.assert_allclose(out[1], [[105.0, 100.0, 95.0], [105.0, 100.0, 95.0]])


@pytest.mark.parametrize(
    "call, match",
    [
        (lambda: switching_value(lambda v: v, 0.0, 1.0, 0.0), "low < high"),
        (lambda: switching_value(lambda v: v, np.zeros(3), np.zeros(2), 1.0), r"shape \(3,\)"),
        (lambda: switching_value(lambda v: v[:1], np.zeros(3), -1.0, 1.0), r"shape \(3,\)"),
        (lambda: switching_value(lambda v: v, 0.0, -1.0, 1.0, n_scan=1), "n_scan"),
        (lambda: spider({"a": lambda v: v}, {"a": 1.0}, [[0.1]]), r"shape \(K,\)"),
        (lambda: tornado({}, 0.0, 0.0, 1.0), "non-empty"),
    ],
)
def test_bad_arguments_raise(call, match):
    with pytest.raises(ValueError, match=match):
        call()


conventional = st.lists(st.floats(0.0, 1000.0, allow_subnormal=False), min_size=1, max_size=12).flatmap(
    lambda inflows: st.tuples(st.floats(1.0, 5000.0), st.just(inflows)))


@settings(max_examples=40, deadline=None)
@given(conventional)
def test_raising_discount_rate_never_raises_pw_of_conventional_investment(case):
    # common practice: a conventional investment (outlay now, inflows later)
    # has present worth non-increasing in the discount rate, hence at most
    # one IRR (Descartes' rule of signs)
    outlay, inflows = case
    flows = np.array([[-outlay] + inflows])
    rates = np.array([0.0, 0.02, 0.05, 0.1, 0.2, 0.5, 1.0])
    out = spider({"rate": lambda i: pw_at(flows, i)}, {"rate": 0.1}, rates / 0.1 - 1.0)
    assert np.all(np.diff(out[0, 0]) <= 1e-9 * outlay)
    res = switching_value(lambda i: pw_at(flows, i), 0.1, 0.0, 1.0)  # scalars in, scalars out
    assert res.n_crossings <= 1
    if res.status in (SWITCH_ONE, SWITCH_AT_BASE):
        # the crossing is a root of PW (identity), and numpy-financial's IRR where it finds one
        # (npf.irr returns NaN for some rows whose IRR is exactly 0, e.g. outlay = sum of inflows)
        assert abs(pw_at(flows, np.array([res.value]))[0]) <= 1e-9 * outlay
        reference = npf.irr(flows[0])
        if np.isfinite(reference):
            assert res.value == pytest.approx(reference, abs=1e-9)


def _invented_chunk(seed, P=300, T=25):
    """Invented projects by role and class: outlays at 0 and 1, benefits and costs over the
    horizon, some with a late outlay (two crossings of zero in the discount rate)."""
    from ratescape.evaluate.kernel import LineClass
    rng = np.random.default_rng(seed)
    classes = [LineClass("nominal", 0.0), LineClass("real", 0.0), LineClass("real", 0.03),
               LineClass("nominal", 0.0, "tax")]
    A = np.zeros((3, len(classes), P, T))
    A[0, 0, :, 0] = -rng.uniform(50, 500, P)
    A[0, 1, :, 1] = -rng.uniform(0, 100, P)
    A[1, 1, :, 1:] = rng.uniform(5, 60, (P, 1)) * (rng.random((P, T - 1)) < 0.9)
    A[1, 2, :, 2:] = rng.uniform(0, 20, (P, 1))
    A[2, 1, :, 1:] = -rng.uniform(0, 15, (P, 1))
    A[2, 3, :, 1:6] = rng.normal(0, 10, (P, 5))
    late = rng.random(P) < 0.2
    A[0, 0, late, T - 1] = -rng.uniform(200, 900, late.sum())          # a closing cost: two crossings
    return A, classes


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_compiled_root_search_equals_scipys_find_root(seed, monkeypatch):
    """The compiled per-project Chandrupatla search of the rate inputs' switching values gives
    the same crossings, values and statuses as SciPy's vectorised find_root (the reference, on
    the same point worth), to the search's tolerance."""
    import ratescape.evaluate.sensitivity as sensitivity
    from ratescape.evaluate.sensitivity import SensitivitySettings, one_at_a_time
    from ratescape.evaluate.timing import discount_exponents
    A, classes = _invented_chunk(seed)
    settings_ = SensitivitySettings.from_spec({}, [0.0, 0.2], [0.0, 0.1])
    args = (A, classes, discount_exponents(A.shape[3]), 0.08, 0.03, settings_, {"tax": 0.3})
    compiled = one_at_a_time(*args)
    real = sensitivity.switching_value
    monkeypatch.setattr(sensitivity, "switching_value", lambda *a, **k: real(*a, **dict(k, roots_fn=None)))
    reference = one_at_a_time(*args)
    np.testing.assert_array_equal(compiled["switching_status"], reference["switching_status"])
    assert (compiled["switching_status"] == SWITCH_SEVERAL).any() and (compiled["switching_status"] == SWITCH_ONE).any()
    np.testing.assert_allclose(compiled["switching_value"], reference["switching_value"], rtol=1e-12, atol=1e-13)
    np.testing.assert_allclose(compiled["switching_change"], reference["switching_change"], rtol=1e-10, atol=1e-12)


def test_compiled_root_search_finds_the_irr_of_numpy_financial():
    """For the discount rate, the crossing is the IRR (numpy-financial ``irr``, reference)."""
    from ratescape.evaluate.compiled import MOVE_DISCOUNT_RATE
    from ratescape.evaluate.kernel import LineClass, PointEvaluator
    from ratescape.evaluate.timing import discount_exponents
    flows = np.array([[-1000.0, 300, 400, 500, 200], [-500.0, 100, 150, 200, 250]])
    A = np.zeros((3, 1, 2, 5))
    A[1, 0] = flows                                            # one nominal class, roles irrelevant here
    ev = PointEvaluator(A, [LineClass("nominal", 0.0)], discount_exponents(5))
    got = ev.roots_between(MOVE_DISCOUNT_RATE, np.array([0, 1]), np.array([0.0, 0.0]), np.array([0.5, 0.5]),
                           discount_rate=0.1, inflation=0.0, xatol=1e-15)
    np.testing.assert_allclose(got, [npf.irr(f) for f in flows], rtol=1e-12)
    none = ev.roots_between(MOVE_DISCOUNT_RATE, np.array([0]), np.array([0.3]), np.array([0.5]),
                            discount_rate=0.1, inflation=0.0)
    assert np.isnan(none[0])                                   # no sign change in the bracket
