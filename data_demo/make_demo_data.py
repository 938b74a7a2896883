"""Write ratescape's bundled demo portfolio: an INVENTED organisation and its projects.

The Tarnwick Harbour and Water Company is invented for demonstration. Every
name, place and amount written by this script is made up; none describes a
real organisation, site or project.

Usage::

    python data_demo/make_demo_data.py [--out DIR]

writes ``projects.csv``, ``cash_flows.csv`` and ``grid.toml`` into DIR
(default: the folder of this script). The script uses numpy only, with a fixed
seed, so the output is byte for byte the same on every run (for a given numpy
version, whose ``default_rng`` streams numpy keeps stable).

Conventions of the files (see README.md beside this script):

- parametric columns of ``projects.csv`` are positive amounts; the loader signs
  them (first_cost and annual_cost are paid, annual_benefit and salvage are
  received): first_cost at period 0, annual_benefit and annual_cost at periods
  1..life, salvage at period life;
- ``cash_flows.csv`` amounts are signed (+ in, - out), one row per project,
  period and line; rows of one project and period add up;
- ``real`` amounts are base-year money that grows with inflation f and the
  line's escalation e as ((1+f)(1+e))^t; ``nominal`` amounts are then-current
  money fixed by contract.
"""
from __future__ import annotations

import argparse
import csv
import io
from pathlib import Path

import numpy as np

SEED = 20_240_917
# The cash-flow projects carry a depreciation method for later after-tax use, but
# the projects file leaves every parametric and tax column blank for them (the
# investment lines in cash_flows.csv describe them). Set True to write them.
WRITE_CASH_FLOW_DEPRECIATION = False
BASE_INFLATION = 0.03  # inflation at which the real IRR of nominal-basis lines is targeted

PROJECT_COLUMNS = (
    "project_id", "name", "group", "requires", "mandatory", "category",
    "first_cost", "annual_benefit", "benefit_basis", "benefit_escalation",
    "annual_cost", "cost_basis", "cost_escalation", "salvage", "life",
    "depreciation_method", "recovery_years",
)
CASH_FLOW_COLUMNS = ("project_id", "period", "amount", "basis", "escalation", "kind")

M = 1_000_000
K = 1_000

# --------------------------------------------------------------------------
# Hand-written projects described by cash-flow lines (irregular streams)
# --------------------------------------------------------------------------
# A line is (periods, amount, basis, escalation, kind); amount signed, applied
# at every period of ``periods``.


def _r(a, b):
    """Periods a..b inclusive."""
    return range(a, b + 1)


def _cash_flow_projects() -> list[dict]:
    """Irregular projects: staged builds, overhauls, fixed-price contracts, end costs."""
    P = []

    def add(key, name, category, lines, group="", mandatory=False, requires=(), dep=("", "")):
        P.append(dict(key=key, name=name, category=category, lines=lines, group=group,
                      mandatory=mandatory, requires=tuple(requires), dep=dep))

    # --- group fleet-depot: buy versus lease (lease payments fixed in nominal money)
    add("fleet_buy", "Fleet depot: buy and fit out Quarry Lane site", "property", [
        (_r(0, 0), -12.5 * M, "real", 0.0, "investment"),
        (_r(1, 1), -3.5 * M, "real", 0.0, "investment"),
        (_r(2, 25), 2.05 * M, "real", 0.005, "benefit"),
        (_r(2, 25), -0.38 * M, "real", 0.01, "cost"),
        (_r(13, 13), -2.2 * M, "real", 0.0, "investment"),
        (_r(25, 25), 5.0 * M, "real", 0.0, "salvage"),
    ], group="fleet-depot", dep=("straight-line", 39))
    add("fleet_lease", "Fleet depot: 25-year lease of Marsh Road depot", "property", [
        (_r(0, 0), -1.6 * M, "real", 0.0, "investment"),
        (_r(1, 1), -0.6 * M, "real", 0.0, "investment"),
        (_r(2, 25), 2.05 * M, "real", 0.005, "benefit"),
        (_r(2, 25), -0.22 * M, "real", 0.01, "cost"),
        (_r(1, 10), -1.05 * M, "nominal", 0.0, "cost"),
        (_r(11, 20), -1.25 * M, "nominal", 0.0, "cost"),
        (_r(21, 25), -1.45 * M, "nominal", 0.0, "cost"),
    ], group="fleet-depot", dep=("straight-line", 15))

    # --- group north-parcel: sell now versus a 40-year ground lease with fixed rent steps
    add("parcel_sell", "North parcel: sell now", "property", [
        (_r(0, 0), 9.0 * M, "real", 0.0, "other"),
        (_r(0, 0), -0.25 * M, "real", 0.0, "cost"),
    ], group="north-parcel")
    add("parcel_lease", "North parcel: 40-year ground lease", "property", [
        (_r(0, 0), -0.45 * M, "real", 0.0, "investment"),
        (_r(1, 10), 0.52 * M, "nominal", 0.0, "benefit"),
        (_r(11, 20), 0.62 * M, "nominal", 0.0, "benefit"),
        (_r(21, 30), 0.74 * M, "nominal", 0.0, "benefit"),
        (_r(31, 40), 0.88 * M, "nominal", 0.0, "benefit"),
        (_r(40, 40), 7.0 * M, "real", 0.0, "salvage"),
    ], group="north-parcel")

    # --- group disinfection (mandatory, three alternatives; the UV option is parametric)
    add("ozone", "Disinfection: ozone plant at North treatment works", "infrastructure", [
        (_r(0, 0), -4.8 * M, "real", 0.0, "investment"),
        (_r(1, 1), -3.9 * M, "real", 0.0, "investment"),
        (_r(2, 21), -0.27 * M, "real", 0.02, "cost"),
        (_r(11, 11), -1.5 * M, "real", 0.0, "investment"),
    ], group="disinfection", mandatory=True, dep=("macrs", 15))
    add("disinfect_contract", "Disinfection: 20-year fixed-price treatment service contract",
        "fixed-price contract", [
            (_r(0, 0), -0.9 * M, "real", 0.0, "investment"),
            (_r(1, 10), -1.05 * M, "nominal", 0.0, "cost"),
            (_r(11, 20), -1.25 * M, "nominal", 0.0, "cost"),
        ], group="disinfection", mandatory=True, dep=("straight-line", 20))

    # --- group solar-supply: own array (parametric) versus a fixed-price purchase agreement
    add("solar_ppa", "Solar supply: 20-year fixed-price power purchase agreement", "fixed-price contract", [
        (_r(0, 0), -0.35 * M, "real", 0.0, "investment"),
        (_r(1, 20), 0.62 * M, "real", 0.02, "benefit"),
        (_r(1, 20), -0.60 * M, "nominal", 0.0, "cost"),
    ], group="solar-supply")

    # --- group berth-3: rehabilitate (parametric) versus a staged rebuild
    add("berth_rebuild", "Berth 3: rebuild as deep-water berth", "infrastructure", [
        (_r(0, 0), -6.0 * M, "real", 0.0, "investment"),
        (_r(1, 1), -11.5 * M, "real", 0.0, "investment"),
        (_r(2, 2), -4.5 * M, "real", 0.0, "investment"),
        (_r(3, 40), 2.35 * M, "real", 0.005, "benefit"),
        (_r(3, 40), -0.18 * M, "real", 0.01, "cost"),
    ], group="berth-3", dep=("macrs", 20))

    # --- group warehouse-5: let on a fixed rent (parametric) versus demolish and sell
    add("wh5_sell", "Warehouse 5: demolish and sell site", "property", [
        (_r(0, 0), -0.4 * M, "real", 0.0, "cost"),
        (_r(0, 0), 2.4 * M, "real", 0.0, "other"),
    ], group="warehouse-5")

    # --- independent irregular projects
    add("hydro", "Dam 2 mini-hydro with 15-year fixed-price power sale", "fixed-price contract", [
        (_r(0, 0), -5.2 * M, "real", 0.0, "investment"),
        (_r(1, 1), -2.1 * M, "real", 0.0, "investment"),
        (_r(2, 16), 1.02 * M, "nominal", 0.0, "benefit"),
        (_r(17, 35), 0.62 * M, "real", 0.015, "benefit"),
        (_r(2, 35), -0.11 * M, "real", 0.01, "cost"),
        (_r(20, 20), -1.4 * M, "real", 0.0, "investment"),
    ], dep=("macrs", 15))
    add("spoil_cell", "Gull Flats dredge spoil containment cell (with capping and aftercare)", "infrastructure", [
        (_r(0, 0), -6.0 * M, "real", 0.0, "investment"),
        (_r(1, 10), 3.9 * M, "real", 0.0, "benefit"),
        (_r(1, 10), -0.6 * M, "real", 0.01, "cost"),
        (_r(11, 15), -6.8 * M, "real", 0.0, "cost"),
    ], dep=("straight-line", 10))
    add("floating_dock", "Floating dock: refit for 12 more years then decommission", "equipment", [
        (_r(0, 0), -3.2 * M, "real", 0.0, "investment"),
        (_r(1, 12), 1.1 * M, "real", 0.0, "benefit"),
        (_r(1, 12), -0.35 * M, "real", 0.01, "cost"),
        (_r(13, 13), -4.5 * M, "real", 0.0, "cost"),
    ], dep=("macrs", 10))
    add("fibre", "Fibre backbone: treatment works and port ring", "IT", [
        (_r(0, 0), -2.8 * M, "real", 0.0, "investment"),
        (_r(1, 1), -1.9 * M, "real", 0.0, "investment"),
        (_r(2, 25), 0.52 * M, "real", 0.0, "benefit"),
        (_r(2, 25), -0.06 * M, "real", 0.0, "cost"),
    ], dep=("macrs", 15))
    add("reservoir2", "Reservoir 2 expansion (staged)", "infrastructure", [
        (_r(0, 0), -7.5 * M, "real", 0.0, "investment"),
        (_r(1, 1), -9.0 * M, "real", 0.0, "investment"),
        (_r(2, 2), -5.5 * M, "real", 0.0, "investment"),
        (_r(3, 40), 1.55 * M, "real", 0.01, "benefit"),
        (_r(3, 40), -0.15 * M, "real", 0.0, "cost"),
    ], dep=("macrs", 20))
    mains = [(_r(t, t), -3.0 * M, "real", 0.0, "investment") for t in range(5)]
    mains += [(_r(t, t), 0.3 * M * t, "real", 0.005, "benefit") for t in range(1, 5)]
    mains += [(_r(5, 40), 1.5 * M, "real", 0.005, "benefit")]
    add("mains", "Trunk main renewal programme over years 0-4", "infrastructure", mains, dep=("macrs", 20))
    add("tug", "Harbour tug replacement with mid-life repower", "equipment", [
        (_r(0, 0), -8.4 * M, "real", 0.0, "investment"),
        (_r(1, 30), 1.25 * M, "real", 0.005, "benefit"),
        (_r(1, 30), -0.42 * M, "real", 0.015, "cost"),
        (_r(15, 15), -2.6 * M, "real", 0.0, "investment"),
        (_r(30, 30), 0.8 * M, "real", 0.0, "salvage"),
    ], dep=("macrs", 10))
    add("sts_crane", "Ship-to-shore crane 4 with 15-year overhaul", "equipment", [
        (_r(0, 0), -7.0 * M, "real", 0.0, "investment"),
        (_r(1, 1), -5.5 * M, "real", 0.0, "investment"),
        (_r(2, 30), 2.2 * M, "real", 0.0, "benefit"),
        (_r(2, 30), -0.55 * M, "real", 0.01, "cost"),
        (_r(16, 16), -3.0 * M, "real", 0.0, "investment"),
        (_r(30, 30), 1.0 * M, "real", 0.0, "salvage"),
    ], dep=("macrs", 7))
    add("cold_store2", "Cold store 2: build and let on 15-year fixed-rent lease", "property", [
        (_r(0, 0), -4.5 * M, "real", 0.0, "investment"),
        (_r(1, 1), -3.8 * M, "real", 0.0, "investment"),
        (_r(2, 16), 1.08 * M, "nominal", 0.0, "benefit"),
        (_r(17, 40), 0.95 * M, "real", 0.0, "benefit"),
        (_r(2, 40), -0.12 * M, "real", 0.01, "cost"),
        (_r(40, 40), 2.0 * M, "real", 0.0, "salvage"),
    ], dep=("straight-line", 39))
    add("ferry_concession", "Ferry terminal catering concession (fixed annual fee)", "fixed-price contract", [
        (_r(0, 0), -1.2 * M, "real", 0.0, "investment"),
        (_r(1, 10), 0.24 * M, "nominal", 0.0, "benefit"),
        (_r(1, 10), -0.05 * M, "real", 0.01, "cost"),
    ], dep=("straight-line", 10))
    add("esco", "Energy performance contract: pump stations 1-12", "energy retrofit", [
        (_r(0, 0), -0.2 * M, "real", 0.0, "investment"),
        (_r(1, 12), 0.80 * M, "real", 0.03, "benefit"),
        (_r(1, 12), -0.95 * M, "nominal", 0.0, "cost"),
    ])
    add("customer_centre_lease", "Customer centre: sell building and move to 10-year leased premises",
        "property", [
            (_r(0, 0), -0.6 * M, "real", 0.0, "investment"),
            (_r(0, 0), 1.4 * M, "real", 0.0, "other"),
            (_r(1, 10), 0.72 * M, "real", 0.01, "benefit"),
            (_r(1, 10), -0.78 * M, "nominal", 0.0, "cost"),
        ], dep=("straight-line", 10))
    add("erp", "ERP replacement with 7-year fixed-price subscription", "IT", [
        (_r(0, 0), -1.8 * M, "real", 0.0, "investment"),
        (_r(1, 1), -1.1 * M, "real", 0.0, "investment"),
        (_r(2, 8), 1.35 * M, "real", 0.01, "benefit"),
        (_r(1, 8), -0.42 * M, "nominal", 0.0, "cost"),
    ], dep=("macrs", 3))
    add("sludge_dryer", "Sludge dryer with 10-year fixed-price operation contract", "fixed-price contract", [
        (_r(0, 0), -3.6 * M, "real", 0.0, "investment"),
        (_r(1, 20), 0.95 * M, "real", 0.015, "benefit"),
        (_r(1, 10), -0.38 * M, "nominal", 0.0, "cost"),
        (_r(11, 20), -0.42 * M, "real", 0.01, "cost"),
        (_r(10, 10), -0.9 * M, "real", 0.0, "investment"),
    ], dep=("macrs", 7))
    add("wind", "Breakwater wind turbine with 15-year fixed feed-in tariff", "fixed-price contract", [
        (_r(0, 0), -3.9 * M, "real", 0.0, "investment"),
        (_r(1, 15), 0.52 * M, "nominal", 0.0, "benefit"),
        (_r(16, 25), 0.30 * M, "real", 0.015, "benefit"),
        (_r(1, 25), -0.09 * M, "real", 0.01, "cost"),
        (_r(25, 25), -0.35 * M, "real", 0.0, "cost"),
    ], dep=("macrs", 5))
    add("marina_pontoons", "Marina pontoon extension with 10-year fixed berth licences", "property", [
        (_r(0, 0), -2.1 * M, "real", 0.0, "investment"),
        (_r(1, 10), 0.31 * M, "nominal", 0.0, "benefit"),
        (_r(11, 30), 0.30 * M, "real", 0.0, "benefit"),
        (_r(1, 30), -0.05 * M, "real", 0.01, "cost"),
    ], dep=("macrs", 15))
    add("flood_barrier", "Harbour flood barrier (staged)", "infrastructure", [
        (_r(0, 0), -4.5 * M, "real", 0.0, "investment"),
        (_r(1, 1), -8.0 * M, "real", 0.0, "investment"),
        (_r(2, 2), -3.5 * M, "real", 0.0, "investment"),
        (_r(3, 40), 0.95 * M, "real", 0.01, "benefit"),
        (_r(3, 40), -0.12 * M, "real", 0.0, "cost"),
    ], dep=("macrs", 20))
    add("heat_sale", "Wastewater heat recovery with fixed-price heat sale to Oldbeck infirmary",
        "fixed-price contract", [
            (_r(0, 0), -2.4 * M, "real", 0.0, "investment"),
            (_r(1, 15), 0.36 * M, "nominal", 0.0, "benefit"),
            (_r(1, 15), -0.04 * M, "real", 0.02, "cost"),
        ], dep=("macrs", 15))
    add("pilot_boats", "Electric pilot boats with battery replacement in year 8", "equipment", [
        (_r(0, 0), -2.6 * M, "real", 0.0, "investment"),
        (_r(1, 16), 0.46 * M, "real", 0.02, "benefit"),
        (_r(1, 16), -0.05 * M, "real", 0.0, "cost"),
        (_r(8, 8), -0.55 * M, "real", 0.0, "investment"),
        (_r(16, 16), 0.2 * M, "real", 0.0, "salvage"),
    ], dep=("macrs", 5))
    add("desilting", "Reservoir 5 desilting campaigns every 5 years", "infrastructure", [
        (_r(0, 0), -0.8 * M, "real", 0.0, "investment"),
        (_r(5, 5), -0.8 * M, "real", 0.01, "cost"),
        (_r(10, 10), -0.8 * M, "real", 0.01, "cost"),
        (_r(15, 15), -0.8 * M, "real", 0.01, "cost"),
        (_r(1, 20), 0.21 * M, "real", 0.0, "benefit"),
    ])
    return P


# --------------------------------------------------------------------------
# Hand-written parametric projects (group members and dependency targets)
# --------------------------------------------------------------------------

def _fixed_parametric_projects() -> list[dict]:
    """Parametric projects written out by hand: alternatives and linked projects."""
    def p(key, name, category, first_cost, benefit, cost, life, *, salvage=0.0, b_basis="real", b_esc=0.0,
          c_basis="real", c_esc=0.0, dep=("", ""), group="", mandatory=False, requires=()):
        return dict(key=key, name=name, category=category, group=group, mandatory=mandatory,
                    requires=tuple(requires), params=dict(
                        first_cost=first_cost, annual_benefit=benefit, benefit_basis=b_basis,
                        benefit_escalation=b_esc, annual_cost=cost, cost_basis=c_basis, cost_escalation=c_esc,
                        salvage=salvage, life=life), dep=dep)

    return [
        p("uv", "Disinfection: UV reactors at North treatment works", "infrastructure",
          6.2 * M, 0.0, 0.46 * M, 20, c_esc=0.015, dep=("macrs", 15), group="disinfection", mandatory=True),
        p("solar_own", "Solar supply: 4 MW ground-mount array at Skerrow Vale", "energy retrofit",
          5.6 * M, 0.62 * M, 0.07 * M, 25, b_esc=0.02, c_esc=0.01, dep=("macrs", 5), group="solar-supply"),
        p("chiller_he", "Chiller plant: high-efficiency magnetic-bearing chillers", "energy retrofit",
          4.4 * M, 0.62 * M, 0.06 * M, 20, b_esc=0.025, c_esc=0.01, salvage=0.1 * M, dep=("macrs", 7),
          group="chiller-plant"),
        p("chiller_std", "Chiller plant: standard screw chillers", "energy retrofit",
          2.6 * M, 0.40 * M, 0.07 * M, 20, b_esc=0.025, c_esc=0.01, salvage=0.1 * M, dep=("macrs", 7),
          group="chiller-plant"),
        p("berth_rehab", "Berth 3: rehabilitate deck and piles (15-year life)", "infrastructure",
          4.6 * M, 0.85 * M, 0.22 * M, 15, c_esc=0.01, dep=("macrs", 15), group="berth-3"),
        p("wh5_let", "Warehouse 5: refurbish and let on 15-year fixed rent", "property",
          3.4 * M, 0.48 * M, 0.06 * M, 15, b_basis="nominal", salvage=1.5 * M, dep=("straight-line", 39),
          group="warehouse-5"),
        p("scada", "SCADA upgrade: water network", "IT",
          2.4 * M, 0.72 * M, 0.18 * M, 10, b_esc=0.01, dep=("macrs", 5), requires=("fibre",)),
        p("ami", "Smart water meter rollout (48 000 meters)", "equipment",
          9.6 * M, 1.65 * M, 0.35 * M, 15, b_esc=0.01, c_esc=0.01, dep=("macrs", 7), requires=("fibre",)),
        p("leak_alerts", "Customer leak-alert analytics on smart-meter data", "IT",
          0.65 * M, 0.30 * M, 0.09 * M, 6, b_esc=0.01, c_basis="nominal", dep=("macrs", 3), requires=("ami",)),
        p("substation", "Harbour substation upgrade 11 kV to 33 kV", "infrastructure",
          6.8 * M, 0.62 * M, 0.08 * M, 40, b_esc=0.01, dep=("macrs", 20)),
        p("shore_power", "Ferry berth shore power", "energy retrofit",
          3.2 * M, 0.48 * M, 0.05 * M, 20, b_esc=0.02, c_esc=0.01, dep=("macrs", 15), requires=("substation",)),
        p("e_straddle", "Electric straddle carriers (6 units)", "equipment",
          7.8 * M, 1.60 * M, 0.30 * M, 12, b_esc=0.02, c_esc=0.01, salvage=0.6 * M, dep=("macrs", 7),
          requires=("substation",)),
        p("tos", "Terminal operating system upgrade", "IT",
          1.9 * M, 0.62 * M, 0.20 * M, 8, b_esc=0.01, c_basis="nominal", dep=("macrs", 5), requires=("fibre",)),
        p("auto_gate", "Container terminal automated gate with number-plate reading", "IT",
          1.3 * M, 0.36 * M, 0.06 * M, 10, b_esc=0.01, dep=("macrs", 5), requires=("fibre", "tos")),
        p("crane_rail", "Berth 3 crane rail extension", "infrastructure",
          1.6 * M, 0.26 * M, 0.02 * M, 30, dep=("macrs", 15), requires=("berth_rebuild",)),
    ]


# --------------------------------------------------------------------------
# Generated parametric projects
# --------------------------------------------------------------------------

PUMP_STATIONS = [f"Pump station {k}" for k in range(1, 13)]
WORKS = ["North treatment works", "South treatment works", "Wastewater works", "Oldbeck booster station",
         "Skerrow Vale wellfield"]
RESERVOIRS = ["Reservoir 2", "Reservoir 5", "Reservoir 7"]
PORT = ["Container terminal", "Ferry terminal", "Bulk quay", "Berth 1", "Berth 2", "Berth 5", "Fish quay",
        "Marina", "Lock 2"]
BUILDINGS = ["Harbour office", "Central workshop", "Cold store 1", "Customer centre", "Laboratory",
             "Pilot station"]
AREAS = ["Oldbeck", "Skerrow Vale", "Tarnwick north", "Tarnwick east", "Harbour district", "Millrace"]

ITEMS = {
    "energy retrofit": [
        ("VFD retrofit", PUMP_STATIONS + WORKS),
        ("high-efficiency pump replacement", PUMP_STATIONS + WORKS),
        ("power-factor correction", PUMP_STATIONS + WORKS + PORT[:3]),
        ("LED lighting retrofit", WORKS + BUILDINGS + PORT),
        ("rooftop solar", WORKS + BUILDINGS + PORT[:3]),
        ("HVAC controls upgrade", BUILDINGS + PORT[:2]),
        ("heat pump conversion", BUILDINGS),
        ("building envelope insulation", BUILDINGS),
        ("premium-efficiency motor replacement", PUMP_STATIONS + WORKS),
        ("compressed-air leak programme", WORKS[:3] + ["Central workshop"]),
    ],
    "equipment": [
        ("standby generator", PUMP_STATIONS + WORKS),
        ("pump and motor spares pool", WORKS),
        ("online water-quality analysers", WORKS + RESERVOIRS),
        ("forklift replacement", PORT[:4] + ["Cold store 1", "Central workshop"]),
        ("reach stacker replacement", PORT[:3]),
        ("yard tractor replacement", PORT[:3]),
        ("workboat replacement", PORT[3:]),
        ("service van fleet renewal", AREAS),
        ("vacuum excavator truck", AREAS),
        ("CCTV sewer inspection unit", AREAS),
        ("mobile crane", PORT[:3]),
    ],
    "infrastructure": [
        ("rising main duplication", PUMP_STATIONS),
        ("wet-well rehabilitation", PUMP_STATIONS),
        ("switchgear renewal", PUMP_STATIONS + WORKS),
        ("filter rebuild", WORKS[:2]),
        ("clarifier refurbishment", WORKS[:3]),
        ("chemical dosing upgrade", WORKS),
        ("roof replacement", RESERVOIRS),
        ("inlet main renewal", RESERVOIRS),
        ("quay wall repair", PORT[:7]),
        ("pavement rehabilitation", PORT[:3] + ["Fish quay"]),
        ("fender system renewal", PORT[2:7]),
        ("water main renewal", AREAS),
        ("sewer relining", AREAS),
        ("storm overflow upgrade", AREAS),
        ("district metering zones", AREAS),
    ],
    "IT": [
        ("Asset management system replacement", None),
        ("Work-order mobile app", None),
        ("GIS platform upgrade", None),
        ("Cyber-security monitoring service", None),
        ("Billing system tariff module", None),
        ("Vessel traffic display upgrade", None),
        ("Hydraulic network model rebuild", None),
        ("Document management system", None),
        ("Telemetry outstation renewal at pump stations 1-6", None),
        ("Telemetry outstation renewal at pump stations 7-12", None),
        ("Laboratory information system", None),
        ("Port community system link", None),
        ("Berth booking portal", None),
        ("Customer self-service portal", None),
        ("Data warehouse and reporting", None),
        ("Backup data centre", None),
        ("Network firewall renewal", None),
        ("Digital radio network", None),
        ("Fleet telematics", None),
        ("Energy management dashboard", None),
        ("Payroll system replacement", None),
        ("E-tendering system", None),
        ("Predictive maintenance pilot on pumps", None),
        ("Drone survey programme", None),
    ],
    "property": [
        ("Harbour office second floor refurbishment to let", None),
        ("Fish quay retail units to let", None),
        ("Central workshop extension", None),
        ("Staff car park resurfacing and EV charging", None),
        ("Visitor centre refurbishment", None),
        ("Old pump house conversion to offices to let", None),
        ("Pilot station accommodation refurbishment", None),
        ("Ferry terminal cafe unit fit-out to let", None),
        ("Harbour office roof replacement", None),
        ("Laboratory extension", None),
        ("Marina clubhouse refurbishment to let", None),
        ("Warehouse 7 re-roofing", None),
    ],
    "fixed-price contract": [
        ("Pilotage service for Skerrow Vale harbour (fixed fee)", None),
        ("Tank-cleaning service to neighbouring utility (fixed fee)", None),
        ("Laboratory testing for Oldbeck council (fixed fee)", None),
        ("Mooring maintenance for marina operators (fixed fee)", None),
        ("Bulk quay stevedoring concession (fixed fee)", None),
        ("Meter-reading service for Skerrow gas network (fixed fee)", None),
        ("Bunkering barge charter (fixed rate)", None),
        ("Tow-boat standby contract (fixed fee)", None),
        ("Sludge reception service (fixed gate fee)", None),
        ("Fleet maintenance for Oldbeck council (fixed price)", None),
    ],
}

# category: (count, median first cost, log sd, min, max, life range, benefit escalation range,
#            annual cost as a fraction of first cost, cost escalation range, salvage fraction range,
#            share of nominal-basis benefits, share of nominal-basis costs, depreciation choices)
CATEGORY_SPECS = {
    "energy retrofit": (40, 260 * K, 0.9, 30 * K, 3 * M, (8, 20), (0.01, 0.035), (0.0, 0.02), (0.0, 0.01),
                        (0.0, 0.0), 0.0, 0.0, [("macrs", 7), ("macrs", 5), ("straight-line", 10)]),
    "equipment": (38, 450 * K, 0.9, 60 * K, 6 * M, (5, 15), (0.0, 0.015), (0.02, 0.06), (0.005, 0.02),
                  (0.05, 0.25), 0.0, 0.1, [("macrs", 5), ("macrs", 7), ("declining-balance", 7),
                                           ("declining-balance", 10)]),
    "infrastructure": (34, 2.6 * M, 0.8, 600 * K, 22 * M, (25, 40), (0.0, 0.01), (0.003, 0.015), (0.0, 0.01),
                       (0.0, 0.0), 0.0, 0.0, [("macrs", 15), ("macrs", 20), ("straight-line", 20), ("", "")]),
    "IT": (20, 450 * K, 0.8, 80 * K, 4 * M, (3, 8), (0.0, 0.015), (0.06, 0.15), (-0.03, 0.0),
           (0.0, 0.0), 0.0, 0.4, [("macrs", 3), ("macrs", 5), ("straight-line", 5)]),
    "property": (10, 1.8 * M, 0.6, 300 * K, 9 * M, (15, 40), (0.0, 0.005), (0.005, 0.015), (0.0, 0.01),
                 (0.2, 0.5), None, 0.0, [("straight-line", 39)]),
    "fixed-price contract": (8, 900 * K, 0.7, 150 * K, 5 * M, (5, 15), (0.0, 0.0), (0.03, 0.08), (0.01, 0.02),
                             (0.0, 0.1), 1.0, 0.0, [("macrs", 7), ("macrs", 5)]),
}
# quality tiers: probability and range of the targeted real IRR (at BASE_INFLATION for nominal lines)
TIERS = ((0.25, 0.18, 0.45), (0.55, -0.02, 0.16), (0.20, -0.12, -0.03))


def _annuity(ratio: float, life: int) -> float:
    """Sum of ratio**t for t = 1..life."""
    t = np.arange(1, life + 1, dtype=float)
    return float(np.sum(ratio ** t))


def _site_and_item(site: str, item: str) -> str:
    """"Bulk quay" + "quay wall repair" -> "Bulk quay wall repair" (no doubled word)."""
    last, (first, _, rest) = site.split()[-1], item.partition(" ")
    return f"{site} {rest}" if rest and last.lower() == first.lower() else f"{site} {item}"


def _names(rng: np.random.Generator, category: str, count: int) -> list[str]:
    """Distinct invented names for ``count`` projects of a category."""
    combos = []
    for item, sites in ITEMS[category]:
        if sites is None:
            combos.append(item)
        else:
            combos.extend(_site_and_item(site, item) for site in sites)
    if len(combos) < count:  # pragma: no cover - guarded by the tables above
        raise ValueError(f"only {len(combos)} names for {count} {category} projects")
    pick = rng.choice(len(combos), size=count, replace=False)
    return [combos[k] for k in pick]


def _generated_projects(rng: np.random.Generator) -> list[dict]:
    """Independent parametric projects drawn from the category specs."""
    out = []
    for category, spec in CATEGORY_SPECS.items():
        (count, median, sd, lo, hi, life_rng, b_esc_rng, cost_frac_rng, c_esc_rng,
         salv_rng, nominal_b, nominal_c, deps) = spec
        names = _names(rng, category, count)
        for k in range(count):
            name = names[k]
            first_cost = float(np.clip(median * rng.lognormal(0.0, sd), lo, hi))
            first_cost = float(round(first_cost, -3))
            life = int(rng.integers(life_rng[0], life_rng[1] + 1))
            if nominal_b is None:
                b_basis = "nominal" if name.endswith("to let") else "real"
            else:
                b_basis = "nominal" if rng.random() < nominal_b else "real"
            c_basis = "nominal" if rng.random() < nominal_c else "real"
            b_esc = 0.0 if b_basis == "nominal" else round(float(rng.uniform(*b_esc_rng)), 3)
            c_esc = 0.0 if c_basis == "nominal" else round(float(rng.uniform(*c_esc_rng)), 3)
            cost = float(round(first_cost * rng.uniform(*cost_frac_rng), -2))
            salvage = float(round(first_cost * rng.uniform(*salv_rng), -3))
            tier = int(rng.choice(len(TIERS), p=[t[0] for t in TIERS]))
            target = float(rng.uniform(TIERS[tier][1], TIERS[tier][2]))
            # annual benefit that makes the real IRR (nominal lines deflated at BASE_INFLATION) equal `target`
            defl = {"real": 1.0, "nominal": 1.0 / (1.0 + BASE_INFLATION)}
            sb = _annuity((1 + b_esc) * defl[b_basis] / (1 + target), life)
            sc = _annuity((1 + c_esc) * defl[c_basis] / (1 + target), life)
            benefit = (first_cost + cost * sc - salvage / (1 + target) ** life) / sb
            # a large salvage at a negative target rate can ask for a negative benefit: keep a floor
            benefit = float(round(max(benefit, cost + 0.01 * first_cost), -2))
            dep = deps[int(rng.integers(len(deps)))]
            out.append(dict(key=f"gen_{category}_{k}", name=name, category=category, group="", mandatory=False,
                            requires=(), params=dict(
                                first_cost=first_cost, annual_benefit=benefit, benefit_basis=b_basis,
                                benefit_escalation=b_esc, annual_cost=cost, cost_basis=c_basis,
                                cost_escalation=c_esc, salvage=salvage, life=life), dep=dep))
    return out


# --------------------------------------------------------------------------
# Assembly and writing
# --------------------------------------------------------------------------

def _fmt(x) -> str:
    """Deterministic text for a number: integers without a decimal point."""
    if isinstance(x, str):
        return x
    x = float(x)
    if x == 0:
        return "0"
    if float(x).is_integer():
        return str(int(x))
    return repr(round(x, 6))


def build(seed: int = SEED) -> tuple[list[dict], list[dict]]:
    """Return (project rows, cash-flow rows) as lists of dicts of text, ids assigned."""
    rng = np.random.default_rng(seed)
    flows = _cash_flow_projects()
    fixed = _fixed_parametric_projects()
    generated = _generated_projects(rng)
    everything = flows + fixed + generated
    # keep the members of a group next to each other, shuffle the rest
    units: list[list[dict]] = []
    by_group: dict[str, list[dict]] = {}
    for proj in everything:
        if proj["group"]:
            if proj["group"] not in by_group:
                by_group[proj["group"]] = []
                units.append(by_group[proj["group"]])
            by_group[proj["group"]].append(proj)
        else:
            units.append([proj])
    order = rng.permutation(len(units))
    ordered = [proj for u in order for proj in units[u]]
    ids = {proj["key"]: f"P{n:03d}" for n, proj in enumerate(ordered, start=1)}

    project_rows, flow_rows = [], []
    for proj in ordered:
        pid = ids[proj["key"]]
        row = dict.fromkeys(PROJECT_COLUMNS, "")
        row.update(project_id=pid, name=proj["name"], group=proj["group"],
                   requires=";".join(ids[k] for k in proj["requires"]),
                   mandatory="true" if proj["mandatory"] else "false", category=proj["category"])
        if "params" in proj:
            row.update({c: _fmt(v) for c, v in proj["params"].items()})
            row["depreciation_method"] = proj["dep"][0]
            row["recovery_years"] = _fmt(proj["dep"][1]) if proj["dep"][1] != "" else ""
        else:
            if WRITE_CASH_FLOW_DEPRECIATION and proj["dep"][0]:
                row["depreciation_method"], row["recovery_years"] = proj["dep"][0], _fmt(proj["dep"][1])
            lines = []
            for n, (periods, amount, basis, esc, kind) in enumerate(proj["lines"]):
                for t in periods:
                    lines.append((t, n, amount, basis, esc, kind))
            lines.sort(key=lambda r: (r[0], r[1]))
            for t, _, amount, basis, esc, kind in lines:
                flow_rows.append(dict(project_id=pid, period=str(t), amount=_fmt(round(amount, 0)), basis=basis,
                                      escalation=_fmt(esc), kind=kind))
        project_rows.append(row)
    return project_rows, flow_rows


def _csv_text(rows: list[dict], columns: tuple[str, ...]) -> str:
    buf = io.StringIO()
    writer = csv.DictWriter(buf, fieldnames=list(columns), lineterminator="\n")
    writer.writeheader()
    writer.writerows(rows)
    return buf.getvalue()


def budgets(project_rows: list[dict], flow_rows: list[dict], share: float = 0.45) -> dict[int, int]:
    """Budget of periods 0 and 1: ``share`` of all investment in that period, rounded to 1 million."""
    total = {0: 0.0, 1: 0.0}
    for row in project_rows:
        if row["first_cost"]:
            total[0] += float(row["first_cost"])
    for row in flow_rows:
        if row["kind"] == "investment" and int(row["period"]) in total:
            total[int(row["period"])] -= float(row["amount"])
    return {t: int(round(share * v / M)) * M for t, v in total.items()}


def grid_toml(budget: dict[int, int]) -> str:
    periods = ", ".join(f'"{t}" = {v}' for t, v in sorted(budget.items()))
    return (
        "# Scenario grid of ratescape's demo portfolio (the Tarnwick Harbour and Water Company,\n"
        "# an INVENTED organisation). Written by data_demo/make_demo_data.py; do not edit by hand.\n"
        "\n"
        "[grid]\n"
        'discount_basis = "nominal"\n'
        "discount_rates = { start = 0.0, stop = 0.20, count = 41 }\n"
        "inflation = { start = 0.0, stop = 0.10, count = 21 }\n"
        "base = { discount_rate = 0.08, inflation = 0.03 }\n"
        "\n"
        "[time]\n"
        'timing = "end"\n'
        "periods_per_year = 1\n"
        "\n"
        "[budget]\n"
        "# most the investment lines of each period may spend, in then-current money\n"
        f"periods = {{ {periods} }}\n"
    )


def write(out: Path, seed: int = SEED) -> dict:
    """Write projects.csv, cash_flows.csv and grid.toml into ``out``; return counts."""
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    project_rows, flow_rows = build(seed)
    budget = budgets(project_rows, flow_rows)
    files = {
        "projects.csv": _csv_text(project_rows, PROJECT_COLUMNS),
        "cash_flows.csv": _csv_text(flow_rows, CASH_FLOW_COLUMNS),
        "grid.toml": grid_toml(budget),
    }
    for name, text in files.items():
        (out / name).write_bytes(text.encode("utf-8"))
    groups = {r["group"] for r in project_rows if r["group"]}
    return dict(projects=len(project_rows), cash_flow_rows=len(flow_rows), groups=len(groups),
                cash_flow_projects=len({r["project_id"] for r in flow_rows}), budget=budget)


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0],
                                     epilog="Example: python data_demo/make_demo_data.py --out /tmp/demo")
    parser.add_argument("--out", type=Path, default=Path(__file__).resolve().parent,
                        help="folder to write into (default: the folder of this script)")
    args = parser.parse_args(argv)
    counts = write(args.out)
    print(f"wrote {counts['projects']} projects ({counts['cash_flow_projects']} by cash flows), "
          f"{counts['cash_flow_rows']} cash-flow rows, {counts['groups']} groups; budget {counts['budget']}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
