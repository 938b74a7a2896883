"""Scenario grid: ranges, TOML settings, exact Fisher columns, refusals."""
import numpy as np
import pytest

from ratescape.errors import GridError
from ratescape.grid import build_scenarios
from ratescape.settings import RunSettings, make_run_settings, parse_budget, parse_range, read_settings_toml


def test_parse_range_inclusive_evenly_spaced():
    assert parse_range("0:0.2:5", "x") == pytest.approx([0.0, 0.05, 0.1, 0.15, 0.2])
    assert parse_range("0.07", "x") == [0.07]
    assert parse_range("0.03,0.05", "x") == [0.03, 0.05]


@pytest.mark.parametrize("text,fragment", [
    ("0.2:0:5", "runs backwards"),
    ("0.1:0.1:3", "zero step"),
    ("0:0.2:0", "COUNT must be at least 1"),
    ("0:0.2", "cannot read"),
    ("a:b:c", "cannot read"),
    ("0:0.2:2.5", "whole number"),
])
def test_parse_range_refusals_say_how_to_fix(text, fragment):
    with pytest.raises(GridError, match=fragment) as exc:
        parse_range(text, "--discount-rates")
    assert "Fix" in str(exc.value) or "COUNT" in str(exc.value)


def test_rates_at_or_below_minus_100_percent_are_refused():
    with pytest.raises(GridError, match="-100 %"):
        make_run_settings(discount_rates="-1:0.1:3")
    with pytest.raises(GridError, match="-100 %"):
        make_run_settings(inflation="-1.5")


def test_scenarios_carry_nominal_and_real_rates_by_exact_fisher():
    spec = make_run_settings(discount_rates="0:0.2:5", inflation="0:0.1:3", discount_basis="nominal")
    t = build_scenarios(spec)
    c = t.columns
    assert t.size == 15
    # exact Fisher relation (1 + i) = (1 + r)(1 + f) (Fisher 1930; common practice)
    np.testing.assert_allclose((1 + c["discount_rate"]), (1 + c["real_rate"]) * (1 + c["inflation"]), rtol=1e-15)
    # discount-rate axis varies fastest
    assert c["discount_rate"][:5].tolist() == pytest.approx([0, 0.05, 0.1, 0.15, 0.2])
    assert c["inflation"][:5].tolist() == [0.0] * 5


def test_real_discount_basis_converts_to_nominal():
    spec = make_run_settings(discount_rates="0.05", inflation="0.03", discount_basis="real")
    c = build_scenarios(spec).columns
    # refcases fisher-nominal-r5-f3: 0.0815 (published formula)
    assert abs(c["discount_rate"][0] - 0.0815) < 1e-15
    assert abs(c["real_rate"][0] - 0.05) < 1e-15


def test_base_scenario_is_nearest_grid_point_or_middle():
    spec = make_run_settings(discount_rates="0:0.2:41", inflation="0:0.1:21")
    t = build_scenarios(spec)
    assert t.columns["discount_rate"][t.base_index] == pytest.approx(0.10)
    assert t.columns["inflation"][t.base_index] == pytest.approx(0.05)
    spec.base = {"discount_rate": 0.081, "inflation": 0.029}
    t = build_scenarios(spec)
    assert t.columns["discount_rate"][t.base_index] == pytest.approx(0.08)
    assert t.columns["inflation"][t.base_index] == pytest.approx(0.03)


def test_toml_settings_and_flag_overrides(tmp_path):
    p = tmp_path / "grid.toml"
    p.write_text("""
[grid]
discount_basis = "real"
discount_rates = { start = 0.0, stop = 0.1, count = 3 }
inflation = { values = [0.0, 0.05] }
tax_rate = { values = [0.2, 0.3] }
[time]
timing = "mid"
[budget]
periods = { "0" = 1e6, "1" = 5e5 }
""")
    spec = make_run_settings(toml_settings=read_settings_toml(p), inflation="0.02")
    assert spec.discount_basis == "real" and spec.timing == "mid"
    assert spec.inflation == [0.02]
    assert spec.budgets == {0: 1e6, 1: 5e5}
    assert spec.scenario_count == 3 * 1 * 2
    assert RunSettings.from_json(spec.to_json()) == spec


@pytest.mark.parametrize("text,fragment", [
    ("[grid\n", "invalid TOML"),
    ("[grid]\ndiscount_rate = 0.1\n", "unknown key grid.discount_rate"),
    ("[colours]\n", "unknown table"),
    ("[grid]\ninflation = { start = 0.0, stop = 0.1 }\n", "missing 'count'"),
])
def test_bad_toml_is_refused_with_a_fix(tmp_path, text, fragment):
    p = tmp_path / "g.toml"
    p.write_text(text)
    with pytest.raises(GridError, match=fragment):
        read_settings_toml(p)


def test_budget_flags():
    assert parse_budget(["0=50e6", "1=20e6"]) == {0: 50e6, 1: 20e6}
    with pytest.raises(GridError, match="PERIOD=AMOUNT"):
        parse_budget(["fifty"])
    with pytest.raises(GridError, match="non-negative"):
        parse_budget(["0=-5"])
