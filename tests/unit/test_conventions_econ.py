"""Issue 14 at the function level: MIRR over each stream's own horizon, IRR under every timing,
nominal escalation in every evaluator, one profitability index, sensitivity on a real basis."""
import numpy as np
import numpy_financial as npf
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq

from ratescape.evaluate.factors import p_given_a1_geometric
from ratescape.evaluate.kernel import LineClass, PointEvaluator, discount_tensor, then_current_streams
from ratescape.evaluate.measures import last_flow_period, mirr, present_worth, profitability_index
from ratescape.evaluate.sensitivity import SensitivitySettings, one_at_a_time
from ratescape.evaluate.timing import discount_exponents, stream_on_timing_grid
from ratescape.run.evaluation import timed_irr_roots

amounts_st = st.lists(st.integers(-500, 500).map(float), min_size=2, max_size=10)


# ------------------------------------------------------------------------------------------ MIRR (part 1)

@settings(max_examples=200)
@given(own=amounts_st, pad=st.integers(0, 20), rate=st.sampled_from([0.0, 0.05, 0.1, 0.25]))
def test_mirr_does_not_change_with_padding_and_matches_numpy_financial(own, pad, rate):
    """Property: a stream's MIRR is the same padded with trailing zeros to any longer portfolio
    length (defect 1), and equals numpy_financial.mirr on the stream cut at its last non-zero
    period (numpy-financial always compounds over the full length given to it)."""
    n = int(last_flow_period(own))
    got = [mirr(np.array(own + [0.0] * extra), rate, rate) for extra in (pad, pad + 3)]
    assert got[0] == pytest.approx(got[1], rel=1e-12, abs=1e-14) or (np.isnan(got[0]) and np.isnan(got[1]))
    if n >= 1:
        want = npf.mirr(own[:n + 1], rate, rate)            # numpy-financial: NaN without both signs
        if np.isnan(want):
            assert np.isnan(got[0])
        else:
            assert got[0] == pytest.approx(want, rel=1e-10, abs=1e-12)
    else:
        assert np.isnan(got[0])                             # every flow now: no time to earn a rate


def test_mirr_rows_with_different_horizons_in_one_array():
    """A (P, T) array of rows with horizons 2 and 5: each row's MIRR is numpy-financial's on its own
    stream (Sullivan, Wicks & Koelling: the terminal date is the end of the project's own life)."""
    A = np.array([[-100, 60, 70, 0, 0, 0], [-100, 20, 30, 40, 50, 10]], dtype=float)
    got = mirr(A, 0.1, 0.12)
    assert got[0] == pytest.approx(npf.mirr([-100, 60, 70], 0.1, 0.12), rel=1e-12)
    assert got[1] == pytest.approx(npf.mirr([-100, 20, 30, 40, 50, 10], 0.1, 0.12), rel=1e-12)
    # an explicit horizon equal to the padded length reproduces numpy-financial on the padded row
    assert mirr(A, 0.1, 0.12, horizon=5)[0] == pytest.approx(npf.mirr(A[0], 0.1, 0.12), rel=1e-12)


def test_mirr_edge_cases_a_practitioner_checks():
    """Zero stream, all-negative (cost-only) stream, all-positive stream: no MIRR (NaN), as
    numpy-financial; a horizon before the last flow is refused."""
    assert np.isnan(mirr([0.0, 0.0, 0.0], 0.1, 0.1))
    assert np.isnan(mirr([-100.0, -10.0, -10.0], 0.1, 0.1)) and np.isnan(npf.mirr([-100, -10, -10], 0.1, 0.1))
    assert np.isnan(mirr([100.0, 10.0, 10.0], 0.1, 0.1)) and np.isnan(npf.mirr([100, 10, 10], 0.1, 0.1))
    with pytest.raises(ValueError, match="after the horizon"):
        mirr([-100.0, 50.0, 70.0], 0.1, 0.1, horizon=1)


@pytest.mark.parametrize("timing", ["end", "mid", "beginning"])
def test_mirr_exceeds_the_rate_exactly_when_present_worth_is_positive(timing):
    """With finance = reinvest = i, MIRR > i exactly when PW(i) > 0 under the same timing (common
    practice: the MIRR and PW decisions agree); checked on 500 random streams."""
    rng = np.random.default_rng(3)
    A = np.round(rng.normal(0, 100, (500, 7)), 0)
    A[:, 0] = -np.abs(A[:, 0]) - 1
    i = 0.08
    m = mirr(A, i, i, timing=timing)
    pw = present_worth(A, i, timing=timing)
    ok = np.isfinite(m) & (np.abs(pw) > 1e-6)
    assert ok.sum() > 400
    assert np.array_equal(m[ok] > i, pw[ok] > 0)


# ------------------------------------------------------------------------------- IRR and timing (part 2)

@pytest.mark.parametrize("timing", ["end", "mid", "beginning"])
@settings(max_examples=60)
@given(amounts=st.lists(st.integers(-300, 300).map(float), min_size=2, max_size=9))
def test_timed_irr_roots_zero_the_present_worth_under_the_same_timing(timing, amounts):
    """Property: every root the timed search returns zeroes ratescape's own present_worth under
    that timing (relative to the stream's scale); for a one-sign-change stream with a root in
    range, SciPy's brentq on that present worth finds the same rate."""
    a = np.array([-1000.0] + amounts)
    res = timed_irr_roots(a[None, :], timing, -0.99, 10.0)
    roots = np.asarray(res.roots)[0]
    roots = roots[np.isfinite(roots)]
    for r in roots:       # tolerance relative to the discounted absolute flows at that rate
        assert abs(present_worth(a, r, timing=timing)) <= 1e-9 * present_worth(np.abs(a), r, timing=timing)
    nz = a[a != 0]
    if np.count_nonzero(np.diff(np.sign(nz))) == 1:
        lo, hi = present_worth(a, -0.99, timing=timing), present_worth(a, 10.0, timing=timing)
        if np.sign(lo) != np.sign(hi) and timing != "beginning":
            want = brentq(lambda x: present_worth(a, x, timing=timing), -0.99, 10.0, xtol=1e-14)
            assert roots.size == 1 and roots[0] == pytest.approx(want, rel=1e-8, abs=1e-10)


def test_stream_on_timing_grid_keeps_present_worth():
    """The positioned stream has the same present worth at per-step rate (1+i)^(1/k) - 1."""
    a = np.array([-100.0, 20.0, 30.0, 40.0, 50.0])
    for timing, k in (("end", 1), ("mid", 2), ("beginning", 1)):
        g = stream_on_timing_grid(a, timing)
        for i in (0.0, 0.07, 0.3):
            step = (1 + i) ** (1 / k) - 1
            # computed independently: per-step rate (1 + i)^(1/k) - 1 compounds to i per year (common practice)
            assert present_worth(g, step) == pytest.approx(present_worth(a, i, timing=timing), rel=1e-12)


def test_beginning_of_period_with_flows_in_period_zero_and_one():
    """Beginning of period: period 0 and period 1 both fall now. -100 at 0, +100 at 1 and +10 at 2
    is -0 now and +10 a period later: no sign change, no IRR (status no_sign_change)."""
    res = timed_irr_roots(np.array([[-100.0, 100.0, 10.0]]), "beginning", -0.99, 10.0)
    assert res.labels[0] == "no_sign_change"


# ----------------------------------------------------------------------- nominal escalation (part 3)

def test_nominal_escalation_in_tensor_streams_and_point_evaluator():
    """A nominal line escalating 3 % by contract: then-current amount x 1.03^t at every inflation
    (then_current_streams), PW = A1 (P/A1, g, i, n) (geometric gradient: Sullivan, Wicks &
    Koelling, Engineering Economy) from the tensor, the point evaluator and the compiled root
    search; independent of inflation at a fixed nominal rate."""
    classes = [LineClass("nominal", 0.03, "one")]
    T, i = 11, 0.09
    tau = discount_exponents(T, "end")
    A = np.zeros((1, 1, T))
    A[0, 0, 1:] = 500.0
    A[0, 0, 0] = -3000.0
    streams = then_current_streams(A, classes, tau, [0.0, 0.05])
    np.testing.assert_allclose(streams[0, 0, 1:], 500.0 * 1.03 ** np.arange(1, T), rtol=1e-14)
    np.testing.assert_array_equal(streams[0], streams[1])
    want = -3000.0 + 515.0 * p_given_a1_geometric(0.03, i, 10)
    D = discount_tensor(classes, tau, [i, i], [0.0, 0.07])
    np.testing.assert_allclose(np.einsum("cpt,cts->ps", A, D)[0], [want, want], rtol=1e-12)
    by_role = np.zeros((3, 1, 1, T))
    by_role[1] = A
    ev = PointEvaluator(by_role, classes, tau)
    assert ev(i, 0.0)[0] == pytest.approx(want, rel=1e-12)
    assert ev(i, 0.07)[0] == pytest.approx(want, rel=1e-12)
    assert ev.at_rows([0], i, 0.04)[0] == pytest.approx(want, rel=1e-12)
    root = ev.roots_between(0, np.array([0]), np.array([0.0]), np.array([1.0]), discount_rate=i, inflation=0.02)[0]
    assert root == pytest.approx(npf.irr(streams[0, 0]), rel=1e-9)


def test_escalating_salvage_line_real_and_nominal():
    """Salvage is a line like any other: a real salvage of 100 at t = 5 with escalation 2 % is worth
    100 (1.02 x 1.03)^5 then-current at 3 % inflation; a nominal one with 2 % contractual
    escalation 100 x 1.02^5 whatever the inflation (hand values)."""
    tau = discount_exponents(6, "end")
    A = np.zeros((2, 1, 6))
    A[0, 0, 5] = 100.0
    A[1, 0, 5] = 100.0
    for f in (0.0, 0.03):
        s = then_current_streams(A[:1], [LineClass("real", 0.02)], tau, [f])[0, 0, 5]
        # computed independently (hand value): real line grows by (1 + e)(1 + f) a year (common practice)
        assert s == pytest.approx(100 * (1.02 * (1 + f)) ** 5, rel=1e-14)
        s = then_current_streams(A[1:], [LineClass("nominal", 0.02)], tau, [f])[0, 0, 5]
        # computed independently (hand value): nominal line grows by its contract escalation only (common practice)
        assert s == pytest.approx(100 * 1.02 ** 5, rel=1e-14)


# --------------------------------------------------------------------------- profitability index (part 4)

def test_profitability_index_one_definition():
    """PI = 1 + PW / PV(I) (Ross, Westerfield & Jaffe's PV of later flows / investment when the
    investment is all at t = 0). Default investment (the net outlay at t = 0) agrees with an
    explicit one; staged investment discounts every outlay; no investment gives NaN."""
    a = [-1000.0, 300.0, 400.0, 500.0]
    i = 0.1
    want = (300 / 1.1 + 400 / 1.1 ** 2 + 500 / 1.1 ** 3) / 1000
    assert profitability_index(a, i) == pytest.approx(want, rel=1e-14)
    assert profitability_index(a, i, investment=[1000.0]) == pytest.approx(want, rel=1e-14)
    assert profitability_index(a, i) == pytest.approx(1 + npf.npv(i, a) / 1000, rel=1e-14)
    staged = [-600.0, -100.0, 400.0, 500.0]                 # 600 now, 400 at t = 1 (with 300 of benefit)
    pv_i = 600 + 400 / 1.1
    assert profitability_index(staged, i, investment=[600.0, 400.0]) == pytest.approx(
        1 + npf.npv(i, staged) / pv_i, rel=1e-14)
    assert np.isnan(profitability_index([100.0, 50.0], i))
    assert np.isnan(profitability_index([-100.0, 50.0], i, investment=[0.0]))


# --------------------------------------------------------------------------- sensitivity basis (part 5)

@settings(max_examples=60)
@given(amounts=st.lists(st.integers(-200, 200).map(float), min_size=1, max_size=8),
       escalation=st.sampled_from([0.0, 0.02]), timing=st.sampled_from(["end", "mid", "beginning"]))
def test_real_basis_one_at_a_time_has_no_inflation_sensitivity_for_real_lines(amounts, escalation, timing):
    """Property: with only real lines and no tax, holding the real rate fixed, the worth does not
    move with inflation (tornado ends, spider) and there is no inflation switching value; on a
    nominal basis the same project does move (the defect's behaviour, kept for nominal runs)."""
    T = len(amounts) + 1
    A = np.zeros((3, 1, 1, T))
    A[0, 0, 0, 0] = -250.0
    A[1, 0, 0, 1:] = amounts
    tau = discount_exponents(T, timing)
    classes = [LineClass("real", escalation)]
    s = SensitivitySettings.from_spec({}, [0.02, 0.06], [0.0, 0.08])
    out = one_at_a_time(A, classes, tau, 0.04, 0.04, s, discount_basis="real")
    k = list(out["inputs"]).index("inflation")
    scale = 250.0 + sum(abs(x) for x in amounts)
    wb = out["worth_base"][0]
    # computed independently: real lines on a real-rate axis are worth the same at every inflation (Fisher 1930;
    # common practice), so the value must equal the base worth
    assert out["worth_low"][k, 0] == pytest.approx(wb, abs=1e-10 * scale)
    assert out["worth_high"][k, 0] == pytest.approx(wb, abs=1e-10 * scale)
    np.testing.assert_allclose(out["spider"][k, 0], wb, atol=1e-10 * scale)
    if abs(wb) > 1e-6 * scale:
        assert np.isnan(out["switching_value"][k, 0])
    # the base worth is the PW at the nominal rate (1.04)(1.04) - 1 of the then-current stream
    stream = then_current_streams(A.sum(axis=0), classes, tau, [0.04])[0, 0]
    # source: Fisher relation 1 + i = (1 + r)(1 + f) (Fisher 1930; common practice)
    assert wb == pytest.approx(present_worth(stream, 1.04 * 1.04 - 1, timing=timing), abs=1e-10 * scale)
