"""Reference cases for the numeric core (factors, measures, IRR, Fisher).

Every case comes from tests/data/reference_cases.json (a copy of
../shared/refcases/reference_cases.json; see tests/data/README.md). Each
case names its own source; the failure message quotes it. Pass rule (from
the refcases README): |actual - expected| <= tolerance.abs or
<= tolerance.rel * |expected|.
"""
from __future__ import annotations

import json
import math
import os
from pathlib import Path

import numpy as np
import numpy_financial as npf
import pytest

from ratescape.evaluate import factors, inflation, irr as irr_mod, measures

HERE = Path(__file__).resolve().parents[1]
LOCAL_COPY = HERE / "data" / "reference_cases.json"
SHARED = Path(__file__).resolve().parents[3] / "shared" / "refcases" / "reference_cases.json"

CORE_KINDS = {
    "interest_factor", "geometric_gradient_pw", "nist_spv", "nist_upv", "nist_upv_star",
    "identity", "fisher", "npv", "irr", "irr_multiple", "mirr", "capital_recovery",
    "annual_worth", "benefit_cost_ratio", "discounted_payback",
}


def _refcases_path() -> Path:
    env = os.environ.get("RATESCAPE_REFCASES")
    if env:
        return Path(env)
    return LOCAL_COPY if LOCAL_COPY.exists() else SHARED


def _load():
    with open(_refcases_path(), encoding="utf-8") as fh:
        return json.load(fh)


ALL_CASES = _load()
CASES = [c for c in ALL_CASES if c["kind"] in CORE_KINDS]


def _close(actual, expected, tol):
    err = abs(actual - expected)
    return err <= tol.get("abs", 0.0) or err <= tol.get("rel", 0.0) * abs(expected)


def _check(case, actual, expected, what=""):
    tol = case["tolerance"]
    assert math.isfinite(actual), f"{case['id']} {what}: got {actual}; source: {case['source']}"
    assert _close(actual, expected, tol), (
        f"{case['id']} {what}: got {actual!r}, expected {expected!r} within {tol}; "
        f"source: {case['source']}"
    )


# ------------------------------------------------------------ per kind --


def _interest_factor(case):
    x = case["inputs"]
    _check(case, factors.interest_factor(x["factor"], x["i"], x["n"]), case["expected"], x["factor"])


def _geometric_gradient_pw(case):
    x = case["inputs"]
    _check(case, x["A1"] * factors.p_given_a1_geometric(x["g"], x["i"], x["n"]), case["expected"])


def _nist_spv(case):
    x = case["inputs"]
    _check(case, factors.spv(x["d"], x["t"]), case["expected"])


def _nist_upv(case):
    x = case["inputs"]
    _check(case, factors.upv(x["d"], x["n"]), case["expected"])


def _nist_upv_star(case):
    x = case["inputs"]
    _check(case, factors.upv_star(x["d"], x["e"], x["n"]), case["expected"])


def _identity(case):
    x = case["inputs"]
    exp = case["expected"]
    if case["id"] == "nist-upvstar-vs-geometric-gradient":
        d, e, n = x["d"], x["e"], x["n"]
        geo = factors.p_given_a1_geometric(e, d, n)
        _check(case, factors.upv_star(d, e, n), exp["UPV*"], "UPV*")
        _check(case, (1 + e) * geo, exp["(1+e)*P/A1(g=e,i=d,n)"], "(1+e) P/A1")
        _check(case, geo, exp["P/A1(g=e,i=d,n)"], "P/A1")
    elif case["id"] == "inflation-real-vs-nominal-pw-equivalence":
        A, N, r, f = x["constant_dollar_cash_flow"], x["years"], x["real_rate"], x["inflation"]
        t = np.arange(N + 1)
        real_flows = np.where(t > 0, A, 0.0)
        i = inflation.nominal_rate(r, f)
        _check(case, measures.present_worth(real_flows, r), exp, "constant money at real rate")
        _check(case, measures.present_worth(real_flows * (1 + f) ** t, i), exp,
               "then-current money at nominal rate")
    else:
        pytest.fail(f"identity case {case['id']} has no check written for it")


def _fisher(case):
    x = case["inputs"]
    if x["solve_for"] == "nominal":
        got = inflation.nominal_rate(x["real"], x["inflation"])
    else:
        got = inflation.real_rate(x["nominal"], x["inflation"])
    _check(case, got, case["expected"], x["solve_for"])


def _npv(case):
    x = case["inputs"]
    assert x["values0_at"] == "t=0"
    _check(case, measures.present_worth(x["values"], x["rate"]), case["expected"])


def _irr(case):
    x = case["inputs"]
    got = irr_mod.irr(x["values"])
    res = irr_mod.irr_roots(x["values"])
    if case["expected"] is None:
        assert math.isnan(got) and res.count == 0, (
            f"{case['id']}: expected no real IRR, got {got} ({res.labels}); source: {case['source']}"
        )
    else:
        _check(case, got, case["expected"])
        assert res.labels == "unique", f"{case['id']}: status {res.labels}; source: {case['source']}"


def _irr_multiple(case):
    x = case["inputs"]
    exp = case["expected"]
    res = irr_mod.irr_roots(x["values"])
    roots = res.roots[~np.isnan(res.roots)]
    assert roots.size == len(exp["all_real_irrs"]), (
        f"{case['id']}: roots {roots}, expected {exp['all_real_irrs']}; source: {case['source']}"
    )
    for got, want in zip(roots, exp["all_real_irrs"]):
        _check(case, got, want, "root")
    assert res.labels == "multiple"
    assert math.isnan(irr_mod.irr(x["values"])), "irr() must not pick one of several roots"
    # the reference library picks one root; it must be one of ours
    _check(case, float(npf.irr(x["values"])), exp["npf_irr_returns"], "numpy_financial.irr")
    for key, rate in (("npv_at_10pct", 0.10), ("npv_at_100pct", 1.00)):
        if key in exp:
            _check(case, measures.present_worth(x["values"], rate), exp[key], key)


def _mirr(case):
    x = case["inputs"]
    _check(case, measures.mirr(x["values"], x["finance_rate"], x["reinvest_rate"]), case["expected"])


def _capital_recovery(case):
    x = case["inputs"]
    _check(case, measures.capital_recovery_cost(x["P"], x["S"], x["i"], x["n"]), case["expected"])


def _annual_worth(case):
    x = case["inputs"]
    if "values" in x:
        _check(case, measures.annual_worth(x["values"], x["rate"]), case["expected"])
    else:
        P, S, om, i, n = x["P"], x["S"], x["annual_om"], x["i"], x["n"]
        _check(case, measures.capital_recovery_cost(P, S, i, n) + om, case["expected"], "CR + O&M")
        flows = np.r_[-P, np.full(n, -om)]
        flows[-1] += S
        _check(case, -measures.annual_worth(flows, i), case["expected"], "-AW of the cash flows")


def _benefit_cost_ratio(case):
    x = case["inputs"]
    n = x["n"]
    b = np.r_[0.0, np.full(n, x["annual_benefit"])]
    c = np.r_[0.0, np.full(n, x["annual_om_cost"])]
    inv = [x["initial_cost"]]
    conv = measures.benefit_cost_ratio(b, c, inv, x["i"])
    mod = measures.benefit_cost_ratio(b, c, inv, x["i"], modified=True)
    _check(case, conv, case["expected"]["conventional"], "conventional")
    _check(case, mod, case["expected"]["modified"], "modified")


def _discounted_payback(case):
    x = case["inputs"]
    exp = case["expected"]
    v, r = x["values"], x["rate"]
    _check(case, measures.discounted_payback_period(v, r), exp["discounted_payback_interpolated"],
           "discounted, interpolated")
    _check(case, measures.discounted_payback_period(v, r, interpolate=False),
           exp["discounted_payback_whole_periods"], "discounted, whole periods")
    _check(case, measures.payback_period(v), exp["simple_payback_interpolated"],
           "simple, interpolated")
    _check(case, measures.payback_period(v, interpolate=False),
           exp["simple_payback_whole_periods"], "simple, whole periods")


CHECKS = {
    "interest_factor": _interest_factor,
    "geometric_gradient_pw": _geometric_gradient_pw,
    "nist_spv": _nist_spv,
    "nist_upv": _nist_upv,
    "nist_upv_star": _nist_upv_star,
    "identity": _identity,
    "fisher": _fisher,
    "npv": _npv,
    "irr": _irr,
    "irr_multiple": _irr_multiple,
    "mirr": _mirr,
    "capital_recovery": _capital_recovery,
    "annual_worth": _annual_worth,
    "benefit_cost_ratio": _benefit_cost_ratio,
    "discounted_payback": _discounted_payback,
}


@pytest.mark.parametrize("case", CASES, ids=[c["id"] for c in CASES])
def test_reference_case(case):
    CHECKS[case["kind"]](case)


def test_every_core_kind_has_cases_and_a_check():
    kinds = {c["kind"] for c in CASES}
    assert kinds == CORE_KINDS == set(CHECKS)
    assert len(CASES) >= 190  # 191 core cases in the starter set; a lost file must not pass


def test_local_copy_matches_shared_original():
    if not SHARED.exists():
        pytest.skip("shared refcases folder not present; the local copy is used")
    assert LOCAL_COPY.read_bytes() == SHARED.read_bytes(), (
        "tests/data/reference_cases.json differs from ../shared/refcases; copy it again"
    )


def test_loader_honours_environment_variable(monkeypatch, tmp_path):
    p = tmp_path / "cases.json"
    p.write_text("[]", encoding="utf-8")
    monkeypatch.setenv("RATESCAPE_REFCASES", str(p))
    assert _refcases_path() == p
    monkeypatch.delenv("RATESCAPE_REFCASES")
    assert _refcases_path() == LOCAL_COPY
