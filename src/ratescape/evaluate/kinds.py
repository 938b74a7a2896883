"""The ONE table of cash-flow kinds: each kind's role, after-tax multiplier and scaling axis.

Every place that needs to know what a ``kind`` of cash-flow line means (the loader's allowed
values, the engine's line classes, the roles kept apart for sensitivity, the after-tax
relabelling) reads it from :data:`KIND_RULES`; nothing else spells the kinds out.

==================  ===========  ==============  ==================  =======================================
kind                role         after tax       scaled by axis      meaning
==================  ===========  ==============  ==================  =======================================
``investment``      investment   ``one``         cost_multiplier     capitalised; recovered by depreciation
``benefit``         benefit      ``after_tax``   benefit_multiplier  taxable income
``cost``            other        ``after_tax``   -                   deductible expense
``other``           other        ``after_tax``   -                   taxable / deductible
``salvage``         other        ``after_tax``   -                   sale price at disposal (gain taxed)
``working_capital`` other        ``one``         -                   paid out and recovered, never taxed
``land``            other        ``one``         -                   not depreciated; gain taxed at sale
==================  ===========  ==============  ==================  =======================================

Before tax every kind is an ordinary cash flow (multiplier ``one`` unless an axis scales it).
The tax on a land sale's gain is not a multiplier of the land lines: the after-tax lines add
``-tau x sale`` and ``+tau x cost`` at the sale (see :func:`ratescape.evaluate.tax.land_tax_lines`).

References
----------
W. G. Sullivan, E. M. Wicks, C. P. Koelling, Engineering Economy, Pearson, chapter "Depreciation
and Income Taxes": working capital and land are neither depreciated nor expensed; working
capital is recovered at the end of the study period (from memory).
C. S. Park, Contemporary Engineering Economics, Pearson, chapter on developing project cash
flows: land is not depreciable; working capital investment and recovery (from memory).
"""
from __future__ import annotations

from typing import NamedTuple

__all__ = ["KindRule", "KIND_RULES", "KINDS", "RECOVERED_KINDS", "ROLES", "role_index", "multiplier_for"]

#: roles the engine keeps apart (one-at-a-time sensitivity scales the first two)
ROLES = ("investment", "benefit", "other")


class KindRule(NamedTuple):
    role: str            # one of ROLES
    after_tax: str       # multiplier name after tax: "one" (not taxed) or "after_tax" (1 - tau)
    axis: str | None     # grid axis that scales the kind's lines, if any


KIND_RULES: dict[str, KindRule] = {
    "investment": KindRule("investment", "one", "cost_multiplier"),
    "benefit": KindRule("benefit", "after_tax", "benefit_multiplier"),
    "cost": KindRule("other", "after_tax", None),
    "salvage": KindRule("other", "after_tax", None),
    "other": KindRule("other", "after_tax", None),
    "working_capital": KindRule("other", "one", None),
    "land": KindRule("other", "one", None),
}

#: allowed values of the cash-flow file's ``kind`` column
KINDS = tuple(KIND_RULES)

#: kinds whose outlays come back at the project's horizon when no recovery (no positive line) is listed
RECOVERED_KINDS = ("working_capital", "land")


def role_index(kind: str) -> int:
    """Index in :data:`ROLES` of a kind's role."""
    return ROLES.index(KIND_RULES[kind].role)


def multiplier_for(kind: str, axes: set[str], after_tax: bool = False) -> str:
    """Per-scenario multiplier name of a line of this kind (composite names multiply, ``"a*b"``).

    Examples
    --------
    >>> multiplier_for("benefit", {"benefit_multiplier"}, after_tax=True)
    'after_tax*benefit_multiplier'
    >>> multiplier_for("working_capital", {"cost_multiplier"}, after_tax=True)
    'one'
    """
    rule = KIND_RULES[kind]
    parts = []
    if after_tax and rule.after_tax != "one":
        parts.append(rule.after_tax)
    if rule.axis is not None and rule.axis in axes:
        parts.append(rule.axis)
    return "*".join(parts) or "one"
