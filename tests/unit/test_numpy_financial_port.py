"""numpy-financial's own test cases for npv, irr and mirr, run against ratescape's equivalents.

Source of every case: numpy-financial's test suite, ``numpy_financial/tests/test_financial.py``
(the installed 1.0.0 copy and the upstream repository numpy/numpy-financial: ``TestFinancial``
test_npv / test_mirr, ``TestIrr`` test_npv_irr_congruence / test_basic_values /
test_trailing_zeros / test_numpy_gh_6744 / test_gh_15). The expected values are theirs; each
convention difference is stated beside its case. The Decimal variants are not ported: ratescape
computes in float64 only (their float expectations are checked instead).
"""
from __future__ import annotations

import numpy as np
import numpy_financial as npf
import pytest

import ratescape
from ratescape.evaluate.irr import IrrStatus
from ratescape.evaluate.measures import mirr


# ------------------------------------------------------------------ npv (numpy-financial) --
def test_npv():
    # numpy-financial: npv(0.05, [-15000, 1500, 2500, 3500, 4500, 6000]) ~ 122.89 (2 decimals).
    # Convention: same (amounts[0] at t = 0, undiscounted); argument order is (amounts, rate) here.
    got = ratescape.present_worth([-15000, 1500, 2500, 3500, 4500, 6000], 0.05)
    assert got == pytest.approx(122.89, abs=5e-3)
    # their Decimal case gives 122.894854950942692161628715: float64 agrees to ~1e-12
    assert got == pytest.approx(122.894854950942692161628715, rel=1e-12)


# ------------------------------------------------------------------ irr (numpy-financial) --
def test_npv_irr_congruence():
    # numpy-financial: npv(irr(x), x) == 0 to atol 1e-10 for [-40000, 5000, 8000, 12000, 30000]
    cashflows = np.array([-40000, 5000, 8000, 12000, 30000])
    r = ratescape.irr(cashflows)
    assert ratescape.present_worth(cashflows, r) == pytest.approx(0.0, abs=1e-10)


@pytest.mark.parametrize("v, desired, note", [
    ([-150000, 15000, 25000, 35000, 45000, 60000], 0.0524, "one sign change: same unique root"),
    ([-100, 0, 0, 74], -0.0955, "one sign change: same unique (negative) root"),
    ([-100, 39, 59, 55, 20], 0.28095, "one sign change: same unique root"),
    ([-100, 100, 0, 7], 0.06206, "one sign change: same unique root"),
    # Differences: two sign changes and two roots in ratescape's range [-0.99, 10] (-67.9 % and
    # -8.33 %). numpy-financial returns one of them (the one nearest zero); ratescape's irr()
    # returns NaN for several roots and irr_roots lists both, including numpy-financial's.
    ([-100, 100, 0, -7], -0.0833, "several roots: irr NaN, irr_roots lists it"),
    # three sign changes, roots -87.0 %, 8.86 %, 71.0 %: numpy-financial picks 8.86 %
    ([-5, 10.5, 1, -8, 1], 0.0886, "several roots: irr NaN, irr_roots lists it"),
])
def test_irr_basic_values(v, desired, note):
    # numpy-financial: assert_almost_equal(npf.irr(v), desired, decimal=2)
    res = ratescape.irr_roots(v)
    found = res.roots[~np.isnan(res.roots)]
    if "several" in note:
        assert res.labels == "multiple" and np.isnan(ratescape.irr(v))
        # the root numpy-financial picks is among them, to its own precision
        assert np.min(np.abs(found - desired)) < 1.5 * 10 ** -2
        assert np.min(np.abs(found - npf.irr(v))) < 1e-9          # and to 1e-9 of its value
    else:
        assert res.labels == "unique"
        assert abs(ratescape.irr(v) - desired) < 1.5 * 10 ** -2
        assert ratescape.irr(v) == pytest.approx(npf.irr(v), rel=1e-9)


def test_irr_trailing_zeros():
    # numpy-financial: irr([-5, 10.5, 1, -8, 1, 0, 0, 0]) ~ 0.0886. Trailing zeros change nothing
    # in either library; ratescape again lists all three roots and irr() is NaN (several roots)
    with_zeros = ratescape.irr_roots([-5, 10.5, 1, -8, 1, 0, 0, 0])
    without = ratescape.irr_roots([-5, 10.5, 1, -8, 1])
    np.testing.assert_allclose(with_zeros.roots, without.roots, rtol=1e-12)
    assert np.min(np.abs(with_zeros.roots - 0.0886)) < 1.5e-2


def test_irr_no_solution_numpy_gh_6744():
    # numpy-financial: irr([-1, -2, -3]) is NaN. ratescape: NaN too, and the status says why
    # (no sign change: no rate makes PW zero) rather than raising
    assert np.isnan(ratescape.irr([-1, -2, -3]))
    res = ratescape.irr_roots([-1, -2, -3])
    assert res.status == IrrStatus.NO_SIGN_CHANGE and res.count == 0


GH_15 = [-3000.0, 2.3926932267015667e-07, 4.1672087103345505e-16, 5.3965110036378706e-25,
         5.1962551071806174e-34, 3.7202955645436402e-43, 1.9804961711632469e-52, 7.8393517651814181e-62,
         2.3072565113911438e-71, 5.0491839233308912e-81, 8.2159177668499263e-91, 9.9403244366963527e-101,
         8.942410813633967e-111, 5.9816122646481191e-121, 2.9750309031844241e-131, 1.1002067043497954e-141,
         3.0252876563518021e-152, 6.1854121948207909e-163, 9.4032980015353301e-174, 1.0629218520017728e-184,
         8.9337141847171845e-196, 5.5830607698467935e-207, 2.5943122036622652e-218, 8.9635842466507006e-230,
         2.3027710094332358e-241, 4.3987510596745562e-253, 6.2476630372575209e-265, 6.598046841695288e-277,
         5.1811095266842017e-289, 3.0250999925830644e-301, 1.3133070599585015e-313]


def test_irr_gh_15():
    # numpy-financial: irr(v) finite, ~ -0.9999999990596069 (rtol 1e-9).
    # Difference: ratescape searches [low, high] with default low = -0.99, so the root at
    # -99.9999999 % is outside it: NaN with status "none". With the range widened to just above
    # -1 the same root is found (this stream is also the near -100 % Newton regression).
    assert np.isnan(ratescape.irr(GH_15))
    assert ratescape.irr_roots(GH_15).labels == "none"
    got = ratescape.irr(GH_15, low=-1 + 1e-12)
    assert np.isfinite(got)
    np.testing.assert_allclose(got, -0.9999999990596069, rtol=1e-9)


# ----------------------------------------------------------------- mirr (numpy-financial) --
@pytest.mark.parametrize("val, finance, reinvest, desired, decimal", [
    ([-4500, -800, 800, 800, 600, 600, 800, 800, 700, 3000], 0.08, 0.055, 0.0666, 4),
    ([-120000, 39000, 30000, 21000, 37000, 46000], 0.10, 0.12, 0.126094, 6),
    ([100, 200, -50, 300, -200], 0.05, 0.06, 0.3428, 4),
])
def test_mirr(val, finance, reinvest, desired, decimal):
    # numpy-financial: assert_almost_equal(npf.mirr(val, finance, reinvest), desired, decimal).
    # Convention: same argument order (amounts, finance_rate, reinvest_rate), same end-of-period
    # timing, same formula (FW of inflows at the reinvest rate over PW of outflows at the finance rate)
    got = mirr(val, finance, reinvest)
    assert abs(got - desired) < 1.5 * 10 ** -decimal
    assert got == pytest.approx(npf.mirr(val, finance, reinvest), rel=1e-12)


def test_mirr_decimal_values_in_float():
    # numpy-financial's Decimal expectations (28 digits), checked in float64 to 1e-12 relative
    assert mirr([-4500, -800, 800, 800, 600, 600, 800, 800, 700, 3000], 0.08, 0.055) == pytest.approx(
        0.066597175031553548874239618, rel=1e-12)
    assert mirr([-120000, 39000, 30000, 21000, 37000, 46000], 0.10, 0.12) == pytest.approx(
        0.126094130365905145828421880, rel=1e-12)
    assert mirr([100, 200, -50, 300, -200], 0.05, 0.06) == pytest.approx(0.342823387842176663647819868, rel=1e-12)


def test_mirr_no_outflow_is_nan():
    # numpy-financial: mirr of all-positive amounts is NaN. Same here (no exception)
    assert np.isnan(mirr([39000, 30000, 21000, 37000, 46000], 0.10, 0.12))


def test_mirr_broadcasts_rows():
    # Difference: numpy-financial takes one 1-D stream; ratescape broadcasts rows and rates
    rows = [[-120000, 39000, 30000, 21000, 37000, 46000], [-4500, -800, 800, 800, 600, 600]]
    got = mirr(rows, [0.10, 0.08], [0.12, 0.055])
    np.testing.assert_allclose(got, [npf.mirr(rows[0], 0.10, 0.12), npf.mirr(rows[1], 0.08, 0.055)], rtol=1e-12)
