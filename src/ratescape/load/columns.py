"""The glossary in code: CSV headers, their canonical names and allowed values.

Raw file headers are mapped to the canonical names used everywhere else in
ratescape in this one place (header matching ignores case and surrounding
spaces; ``group`` in the file becomes ``group_name`` in the database because
GROUP is an SQL keyword).
"""
from __future__ import annotations

BASES = ("real", "nominal")
DEPRECIATION_METHODS = ("straight-line", "declining-balance", "macrs")
DEPRECIATION_CONVENTIONS = ("half-year", "mid-quarter")
from ratescape.evaluate.kinds import KINDS  # noqa: E402, F401  (the one table of kinds, re-exported for the loader)

# Cash-flow file: header -> (canonical name, required, type)
CASH_FLOW_COLUMNS = {
    "project_id": ("project_id", True, "id"),
    "period": ("period", True, "period"),
    "amount": ("amount", True, "money"),
    "basis": ("basis", False, "basis"),
    "escalation": ("escalation", False, "rate"),
    "kind": ("kind", False, "kind"),
}

# Projects file. Parametric columns describe a project without a cash-flow file:
# first_cost (investment at period 0), annual_benefit and annual_cost for
# periods 1..life, salvage at period life. Money is given as positive numbers;
# the loader signs it (first_cost and annual_cost out, benefit and salvage in).
PROJECT_COLUMNS = {
    "project_id": ("project_id", True, "id"),
    "name": ("name", True, "text"),
    "group": ("group_name", False, "text"),
    "requires": ("requires", False, "text"),
    "mandatory": ("mandatory", False, "bool"),
    "category": ("category", False, "text"),
    "first_cost": ("first_cost", False, "money"),
    "annual_benefit": ("annual_benefit", False, "money"),
    "benefit_basis": ("benefit_basis", False, "basis"),
    "benefit_escalation": ("benefit_escalation", False, "rate"),
    "annual_cost": ("annual_cost", False, "money"),
    "cost_basis": ("cost_basis", False, "basis"),
    "cost_escalation": ("cost_escalation", False, "rate"),
    "salvage": ("salvage", False, "money"),
    "life": ("life", False, "period"),
    # after-tax columns (used by `screen --after-tax`)
    "depreciation_method": ("depreciation_method", False, "choice"),
    "depreciation_convention": ("depreciation_convention", False, "choice"),
    "service_quarter": ("service_quarter", False, "period"),
    "recovery_years": ("recovery_years", False, "period"),
    "depreciable_basis": ("depreciable_basis", False, "money"),
    "loan_amount": ("loan_amount", False, "money"),
    "loan_rate": ("loan_rate", False, "rate"),
    "loan_term": ("loan_term", False, "period"),
    # value of the asset at the end of a study period, base-year money, + received / - paid
    # (used only by `[alternatives] basis = "study-period"`, for an alternative cut at the study period)
    "terminal_value": ("terminal_value", False, "money"),
}

PARAMETRIC_MONEY = ("first_cost", "annual_benefit", "annual_cost", "salvage")
PARAMETRIC_COLUMNS = PARAMETRIC_MONEY + (
    "benefit_basis", "benefit_escalation", "cost_basis", "cost_escalation", "life",
)

# Largest period index accepted: 100 years of months. Longer horizons are
# refused rather than silently allocating huge arrays.
MAX_PERIOD = 1200
TRUE_WORDS = {"true", "yes", "y", "1", "t"}
FALSE_WORDS = {"false", "no", "n", "0", "f", ""}

# Rates whose size makes a percentage typo near-certain (3 written for 3 %). A discount,
# real, inflation, escalation or loan rate above 100 % a period in size (|rate| > 1), or an
# income-tax rate or credit of 1 (100 %) or more, is refused with the fraction probably
# meant, unless the study asks for extreme rates explicitly (--allow-extreme-rates).
PERCENT_RATE_LIMIT = 1.0
PERCENT_TAX_LIMIT = 1.0

# Largest amount of one cash-flow line (or parametric amount), in size. Far beyond any real
# budget (a million billion), and small enough that an amount grown by the largest factors a
# grid allows over 1,200 periods and summed over millions of lines stays a finite double
# (1e15 x 1e280 x 1e7 lines < 1.8e308); larger amounts are refused at load.
MAX_AMOUNT = 1e15
