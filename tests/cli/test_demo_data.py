"""Checks of the bundled, invented demo portfolio in data_demo/.

The demo data are invented; these tests check that the generator reproduces
the committed files byte for byte, that the files are structurally sound
(ids, groups, dependencies, bases, kinds), and that the portfolio does what it
is for: acceptance that moves across the discount-rate x inflation grid.

Present worth here is computed independently of ratescape's engine, with
numpy only, by the textbook formula for one cash-flow line of amount A at
period t (end of period) in a scenario of nominal rate i and inflation f:
real basis, escalation e: A * ((1 + e)(1 + f) / (1 + i))**t; nominal basis:
A / (1 + i)**t (common practice; the same formula is in DEVELOPERS.md).
"""
from __future__ import annotations

import csv
import math
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "data_demo"
GENERATOR = DEMO / "make_demo_data.py"
FILES = ("projects.csv", "cash_flows.csv", "grid.toml")

PROJECT_HEADER = ("project_id,name,group,requires,mandatory,category,first_cost,annual_benefit,benefit_basis,"
                  "benefit_escalation,annual_cost,cost_basis,cost_escalation,salvage,life,depreciation_method,"
                  "recovery_years")
CASH_FLOW_HEADER = "project_id,period,amount,basis,escalation,kind"
PARAMETRIC = ("first_cost", "annual_benefit", "benefit_basis", "benefit_escalation", "annual_cost", "cost_basis",
              "cost_escalation", "salvage", "life", "depreciation_method", "recovery_years")
BASES = {"real", "nominal"}
KINDS = {"investment", "benefit", "cost", "salvage", "other"}


def _read_csv(name):
    with open(DEMO / name, newline="", encoding="utf-8") as fh:
        return list(csv.DictReader(fh))


@pytest.fixture(scope="module")
def projects():
    return _read_csv("projects.csv")


@pytest.fixture(scope="module")
def flows():
    return _read_csv("cash_flows.csv")


@pytest.fixture(scope="module")
def grid():
    return tomllib.loads((DEMO / "grid.toml").read_text(encoding="utf-8"))


def _lines(projects, flows):
    """All cash-flow lines as arrays: project index, period, signed amount, nominal flag, escalation."""
    index = {p["project_id"]: k for k, p in enumerate(projects)}
    rows = []
    for p in projects:
        if p["first_cost"] == "":
            continue
        k, life = index[p["project_id"]], int(p["life"])
        rows.append((k, 0, -float(p["first_cost"]), False, 0.0))
        for t in range(1, life + 1):
            rows.append((k, t, float(p["annual_benefit"]), p["benefit_basis"] == "nominal",
                         float(p["benefit_escalation"])))
            rows.append((k, t, -float(p["annual_cost"]), p["cost_basis"] == "nominal",
                         float(p["cost_escalation"])))
        rows.append((k, life, float(p["salvage"]), False, 0.0))
    for r in flows:
        rows.append((index[r["project_id"]], int(r["period"]), float(r["amount"]), r["basis"] == "nominal",
                     float(r["escalation"])))
    k, t, amount, nominal, esc = (np.array(c) for c in zip(*rows))
    return k.astype(int), t.astype(float), amount.astype(float), nominal.astype(bool), esc.astype(float)


def _present_worth(lines, n_projects, rate, inflation):
    """PW (n_projects, S) of every project in S scenarios of nominal rate and inflation (end of period)."""
    k, t, amount, nominal, esc = lines
    rate = np.atleast_1d(np.asarray(rate, float))
    inflation = np.atleast_1d(np.asarray(inflation, float))
    growth = np.where(nominal[:, None], 1.0, (1.0 + esc[:, None]) * (1.0 + inflation[None, :]))
    factor = (growth / (1.0 + rate[None, :])) ** t[:, None]
    out = np.zeros((n_projects, rate.size))
    np.add.at(out, k, amount[:, None] * factor)
    return out


def _axis(spec):
    return np.linspace(spec["start"], spec["stop"], spec["count"])


@pytest.fixture(scope="module")
def screen(projects, flows, grid):
    """PW over the demo grid, shape (P, n_rates, n_inflation), with the axes."""
    rates, infl = _axis(grid["grid"]["discount_rates"]), _axis(grid["grid"]["inflation"])
    i, f = np.meshgrid(rates, infl, indexing="ij")
    lines = _lines(projects, flows)
    pw = _present_worth(lines, len(projects), i.ravel(), f.ravel())
    return pw.reshape(len(projects), rates.size, infl.size), rates, infl, lines


# --------------------------------------------------------------------------
# the files
# --------------------------------------------------------------------------

def test_generator_is_deterministic(tmp_path):
    done = subprocess.run([sys.executable, str(GENERATOR), "--out", str(tmp_path)],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    for name in FILES:
        assert (tmp_path / name).read_bytes() == (DEMO / name).read_bytes(), (
            f"{name} differs from a fresh run: regenerate with python data_demo/make_demo_data.py")


def test_headers_are_exact():
    with open(DEMO / "projects.csv", encoding="utf-8") as fh:
        assert fh.readline().rstrip("\n") == PROJECT_HEADER
    with open(DEMO / "cash_flows.csv", encoding="utf-8") as fh:
        assert fh.readline().rstrip("\n") == CASH_FLOW_HEADER


def test_readme_marks_the_data_invented():
    text = (DEMO / "README.md").read_text(encoding="utf-8").lower()
    assert "invented" in text
    assert "make_demo_data.py" in text


def test_ids_unique_and_sizes(projects):
    ids = [p["project_id"] for p in projects]
    assert len(ids) == len(set(ids))
    assert all(len(i) == 4 and i[0] == "P" and i[1:].isdigit() for i in ids)
    names = [p["name"] for p in projects]
    assert len(names) == len(set(names))
    assert 150 <= len(projects) <= 250
    # demo names are kept clean (hostile names belong to other tests)
    assert not any(set(n) & set('&<>"\',') for n in names)


def test_requires_known_and_acyclic(projects):
    ids = {p["project_id"] for p in projects}
    graph = {p["project_id"]: [t for t in p["requires"].split(";") if t] for p in projects}
    assert sum(bool(v) for v in graph.values()) >= 3
    for pid, targets in graph.items():
        assert set(targets) <= ids, pid
        assert pid not in targets
    # depth-first search for a cycle (white/grey/black colouring, common practice)
    colour = dict.fromkeys(ids, 0)

    def visit(node):
        colour[node] = 1
        for nxt in graph[node]:
            assert colour[nxt] != 1, f"cycle through {node} -> {nxt}"
            if colour[nxt] == 0:
                visit(nxt)
        colour[node] = 2

    for node in sorted(ids):
        if colour[node] == 0:
            visit(node)


def test_groups_and_mandatory(projects):
    groups: dict[str, list[dict]] = {}
    for p in projects:
        if p["group"]:
            groups.setdefault(p["group"], []).append(p)
    assert 5 <= len(groups) <= 8
    assert all(len(m) >= 2 for m in groups.values())
    assert any(len(m) == 3 for m in groups.values())
    assert {p["mandatory"] for p in projects} <= {"true", "false", ""}
    mandatory_groups = {p["group"] for p in projects if p["mandatory"] == "true"}
    assert len(mandatory_groups) <= 1
    assert "" not in mandatory_groups  # only a group can be a must-do choice
    for g in mandatory_groups:
        assert all(p["mandatory"] == "true" for p in groups[g])
    # a project never requires an alternative of its own group
    by_id = {p["project_id"]: p for p in projects}
    for p in projects:
        for t in filter(None, p["requires"].split(";")):
            assert not (p["group"] and by_id[t]["group"] == p["group"])


def test_each_project_described_one_way(projects, flows):
    ids = {p["project_id"] for p in projects}
    with_flows = {r["project_id"] for r in flows}
    assert with_flows <= ids
    assert 20 <= len(with_flows) <= 40
    for p in projects:
        if p["project_id"] in with_flows:
            assert all(p[c] == "" for c in PARAMETRIC), p["project_id"]
        else:
            assert all(p[c] != "" for c in PARAMETRIC[:9]), p["project_id"]


def test_parametric_values_valid(projects):
    par = [p for p in projects if p["first_cost"]]
    for p in par:
        for c in ("first_cost", "annual_benefit", "annual_cost", "salvage"):
            v = float(p[c])
            assert math.isfinite(v) and v >= 0, (p["project_id"], c)
        assert float(p["first_cost"]) > 0
        assert p["benefit_basis"] in BASES and p["cost_basis"] in BASES
        for c in ("benefit_escalation", "cost_escalation"):
            assert -0.1 < float(p[c]) < 0.1
        assert 3 <= int(p["life"]) <= 40
        assert p["depreciation_method"] in {"", "straight-line", "declining-balance", "macrs"}
        if p["depreciation_method"]:
            allowed = {3, 5, 7, 10, 15, 20} if p["depreciation_method"] == "macrs" else {3, 5, 7, 10, 15, 20, 39}
            assert int(p["recovery_years"]) in allowed
        else:
            assert p["recovery_years"] == ""
    total = sum(float(p["first_cost"]) for p in par)
    assert 100e6 < total < 1e9  # a few hundred million


def test_cash_flow_values_valid(flows):
    for r in flows:
        assert math.isfinite(float(r["amount"])) and float(r["amount"]) != 0
        assert int(r["period"]) >= 0 and int(r["period"]) <= 40
        assert r["basis"] in BASES and r["kind"] in KINDS
        assert -0.1 < float(r["escalation"]) < 0.1
        if r["kind"] in ("investment", "cost"):
            assert float(r["amount"]) < 0
        if r["kind"] in ("benefit", "salvage"):
            assert float(r["amount"]) > 0
    assert {r["basis"] for r in flows} == BASES


def test_grid_layout_and_budget(projects, flows, grid, screen):
    g = grid["grid"]
    assert g["discount_basis"] == "nominal"
    assert g["discount_rates"] == {"start": 0.0, "stop": 0.20, "count": 41}
    assert g["inflation"] == {"start": 0.0, "stop": 0.10, "count": 21}
    assert g["base"] == {"discount_rate": 0.08, "inflation": 0.03}
    assert grid["time"] == {"timing": "end", "periods_per_year": 1}
    budget = {int(k): float(v) for k, v in grid["budget"]["periods"].items()}
    assert set(budget) == {0, 1}
    invest = {0: np.zeros(len(projects)), 1: np.zeros(len(projects))}
    index = {p["project_id"]: k for k, p in enumerate(projects)}
    for p in projects:
        if p["first_cost"]:
            invest[0][index[p["project_id"]]] += float(p["first_cost"])
    for r in flows:
        if r["kind"] == "investment" and int(r["period"]) in invest:
            invest[int(r["period"])][index[r["project_id"]]] -= float(r["amount"])
    for t in (0, 1):
        assert 0.4 <= budget[t] / invest[t].sum() <= 0.6, t
    # the period-0 budget rations in the base scenario: the accepted projects want more
    pw, rates, infl, _ = screen
    base = pw[:, np.argmin(abs(rates - 0.08)), np.argmin(abs(infl - 0.03))]
    assert invest[0][base > 0].sum() > budget[0]


# --------------------------------------------------------------------------
# the economics the demo is meant to show
# --------------------------------------------------------------------------

def test_present_worth_helper_matches_numpy_financial(projects, flows):
    # numpy-financial npv (reference library): values[0] at t = 0, end of period. The stream handed to it is
    # the then-current money of each line: real lines A((1+e)(1+f))^t, nominal lines A (DEVELOPERS.md)
    import numpy_financial as npf
    lines = _lines(projects, flows)
    k, t, amount, nominal, esc = lines
    ti = t.astype(int)
    for rate, f in ((0.07, 0.0), (0.12, 0.05)):
        pw = _present_worth(lines, len(projects), [rate], [f])[:, 0]
        then_current = np.where(nominal, amount, amount * ((1 + esc) * (1 + f)) ** t)
        for j in range(len(projects)):
            stream = np.zeros(ti[k == j].max() + 1)
            np.add.at(stream, ti[k == j], then_current[k == j])
            assert pw[j] == pytest.approx(npf.npv(rate, stream), rel=1e-10, abs=1e-4), projects[j]["project_id"]


def test_real_lines_ignore_inflation_at_fixed_real_rate(projects, flows, screen):
    # exact Fisher relation (1 + i) = (1 + r)(1 + f) (common practice): a project of real lines only
    # has the same PW at a fixed real rate whatever the inflation
    lines = screen[3]
    k, nominal = lines[0], lines[3]
    real_only = np.setdiff1d(np.arange(len(projects)), k[nominal])
    assert real_only.size > 100
    f = np.linspace(0.0, 0.10, 11)
    pw = _present_worth(lines, len(projects), 1.04 * (1 + f) - 1, f)
    assert np.allclose(pw[real_only], pw[real_only, :1], rtol=1e-9, atol=1e-3)


def test_acceptance_spreads_across_the_grid(screen):
    pw = screen[0]
    share = (pw > 0).mean(axis=(1, 2))
    changing = (share > 0) & (share < 1)
    assert changing.mean() >= 0.10
    assert (share == 1).sum() >= 5 and (share == 0).sum() >= 3  # clearly good and clearly bad ones too
    # and the changing ones are spread, not bunched at one end
    assert ((share > 0.1) & (share < 0.5)).sum() >= 10 and ((share >= 0.5) & (share < 0.9)).sum() >= 10


def test_inflation_changes_acceptance_at_fixed_nominal_rate(screen):
    pw, rates, infl, _ = screen
    at_base_rate = pw[:, np.argmin(abs(rates - 0.08)), :] > 0
    flips = at_base_rate.any(axis=1) & ~at_base_rate.all(axis=1)
    assert flips.sum() >= 3


def test_nominal_lines_make_inflation_matter_at_fixed_real_rate(projects, screen):
    # a nominal (contract-fixed) inflow erodes as inflation rises at a fixed real rate; a nominal outflow
    # erodes too, which helps the project (common practice)
    lines = screen[3]
    k, amount, nominal = lines[0], lines[2], lines[3]
    f = np.linspace(0.0, 0.10, 11)
    pw = _present_worth(lines, len(projects), 1.04 * (1 + f) - 1, f)
    has_nominal = np.unique(k[nominal])
    inflow_only = [j for j in has_nominal if (amount[(k == j) & nominal] > 0).all()]
    outflow_only = [j for j in has_nominal if (amount[(k == j) & nominal] < 0).all()]
    assert len(inflow_only) >= 3 and len(outflow_only) >= 3
    assert (np.diff(pw[inflow_only], axis=1) < 0).all()
    assert (np.diff(pw[outflow_only], axis=1) > 0).all()
    # and acceptance itself flips for some of them
    flips = [(pw[j] > 0).any() and not (pw[j] > 0).all() for j in inflow_only + outflow_only]
    assert sum(flips) >= 2


def test_some_choices_between_alternatives_flip_with_inflation(projects, screen):
    pw = screen[0]
    groups: dict[str, list[int]] = {}
    for j, p in enumerate(projects):
        if p["group"]:
            groups.setdefault(p["group"], []).append(j)
    flipping = []
    for g, members in groups.items():
        best = np.argmax(pw[members], axis=0)  # (n_rates, n_inflation)
        if (best.min(axis=1) != best.max(axis=1)).any():  # changes along inflation at some nominal rate
            flipping.append(g)
    assert len(flipping) >= 3, flipping


def test_a_non_conventional_stream_has_two_irrs(projects, screen):
    # two sign changes in the cash-flow stream allow two IRRs (Descartes' rule of signs, common practice);
    # check that the demo holds a stream that really has two, as a real-rate scan at f = 0 shows
    lines = screen[3]
    k, t, amount = lines[0], lines[1].astype(int), lines[2]
    r = np.linspace(-0.5, 1.0, 3001)
    pw = _present_worth(lines, len(projects), r, np.zeros_like(r))
    found = []
    for j in range(len(projects)):
        stream = np.zeros(t[k == j].max() + 1)
        np.add.at(stream, t[k == j], amount[k == j])
        signs = np.sign(stream[stream != 0])
        roots = np.count_nonzero(np.diff(np.sign(pw[j])) != 0)
        if np.count_nonzero(np.diff(signs)) == 2 and roots == 2:
            found.append(projects[j]["project_id"])
    assert found


def test_loader_accepts_the_demo():
    import ratescape.load.portfolio as portfolio
    result = portfolio.read_portfolio(DEMO / "projects.csv", DEMO / "cash_flows.csv")
    assert result.projects.height == len(_read_csv("projects.csv"))
