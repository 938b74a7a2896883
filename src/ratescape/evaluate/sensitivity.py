"""One-at-a-time sensitivity of every project around a base scenario.

For each project: the switching value of each input (the value at which its
present worth crosses zero, i.e. the accept/reject decision flips), tornado
data (worth at the low and high end of each input's range) and spider data
(worth against a percentage change of each input). Inputs:

* ``discount_rate``, on the run's discount basis: the nominal rate (its switching value is the
  nominal IRR) or, on a real-basis run, the real rate (its switching value is the real IRR);
* ``inflation``: general inflation with the base discount rate held fixed on the run's basis (the
  nominal rate on a nominal-basis run; the real rate on a real-basis run, so a project of real
  lines without tax shows no sensitivity to inflation, as the grid itself shows);
* ``first_cost``: multiplier of the investment lines (1 = base);
* ``benefits``: multiplier of the benefit lines (1 = base);
* ``escalation``: shift added to every real line's escalation [fraction per year].

Multipliers are linear (unless losses are carried forward, when they are searched too), so their
switching values are closed-form; the rates
are bracketed by a scan (:func:`ratescape.evaluate.switching.switching_value`) and each
crossing root-found by a compiled per-project search
(:meth:`ratescape.evaluate.kernel.PointEvaluator.roots_between`).

References
----------
D. G. Newnan, T. G. Eschenbach, J. P. Lavelle, Engineering Economic Analysis,
Oxford University Press, chapter "Sensitivity and breakeven analysis" (tornado
and spider diagrams; from memory).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .compiled import MOVE_DISCOUNT_RATE, MOVE_ESCALATION, MOVE_INFLATION
from .kernel import PointEvaluator
from .switching import SWITCH_AT_BASE, SWITCH_NONE, SWITCH_ONE, first_cost_switching_multiplier, \
    linear_switching_multiplier, switching_value

INPUTS = ("discount_rate", "inflation", "first_cost", "benefits", "escalation")
DEFAULT_SEARCH = {"discount_rate": (-0.9, 5.0), "inflation": (-0.5, 2.0), "escalation": (-0.5, 0.5)}
#: range searched for a multiplier's switching value when losses are carried forward (worth is then
#: not linear in the multiplier, so the closed form does not apply)
MULTIPLIER_SEARCH = (0.0, 20.0)
DEFAULT_PCT_CHANGES = (-0.3, -0.2, -0.1, 0.0, 0.1, 0.2, 0.3)


@dataclass
class SensitivitySettings:
    """Ranges of the one-at-a-time analysis (from the TOML ``[sensitivity]`` table).

    ``ranges[input] = (low, high)`` for the tornado, in the input's own units
    (rates as fractions, multipliers as factors, escalation as a shift).
    """

    ranges: dict = field(default_factory=dict)
    pct_changes: tuple = DEFAULT_PCT_CHANGES

    @classmethod
    def from_spec(cls, settings: dict, discount_axis: list, inflation_axis: list) -> "SensitivitySettings":
        ranges = {"discount_rate": (min(discount_axis), max(discount_axis)),
                  "inflation": (min(inflation_axis), max(inflation_axis)),
                  "first_cost": (0.8, 1.3), "benefits": (0.7, 1.2), "escalation": (-0.02, 0.02)}
        for key, value in (settings or {}).items():
            if key == "pct_changes":
                continue
            if key not in ranges:
                raise ValueError(f"unknown sensitivity input {key!r}; use one of {', '.join(INPUTS)}")
            low, high = (float(v) for v in value)
            if not low < high:
                raise ValueError(f"sensitivity range for {key} must have low < high, got {value!r}")
            ranges[key] = (low, high)
        pct = tuple(float(v) for v in settings.get("pct_changes", DEFAULT_PCT_CHANGES)) if settings else DEFAULT_PCT_CHANGES
        return cls(ranges, pct)


def one_at_a_time(amounts_by_role, classes, exponents, base_rate: float, base_inflation: float,
                  settings: SensitivitySettings, multipliers: dict | None = None, *,
                  discount_basis: str = "nominal", carried_losses: bool = False) -> dict:
    """Switching values, tornado and spider data for P projects around one base scenario.

    Parameters
    ----------
    amounts_by_role : (R, C, P, T) [currency]; classes, exponents as for the kernel.
    base_rate, base_inflation : discount rate (on ``discount_basis``) and inflation of the base
        scenario [fraction per year].
    multipliers : per-class multiplier values at the base scenario (scalars).
    discount_basis : "nominal" (default) or "real": the basis of ``base_rate``, of the
        ``discount_rate`` range in ``settings`` and of the rate held fixed while inflation moves.
    carried_losses : True when each project carries its tax losses forward (an after-tax run with
        ``[tax] losses = "carry-forward"``): every worth then adds
        :func:`ratescape.evaluate.tax.carried_loss_worth_per_project` at its point, and every
        switching value (multipliers included: worth is no longer linear in them) is searched.

    Returns
    -------
    dict with ``inputs`` (I,), ``base_value`` (I,), ``low``/``high`` (I,), ``worth_base`` (P,),
    ``worth_low``/``worth_high`` (I, P), ``switching_value`` (I, P), ``switching_change`` (I, P)
    (fraction of the base value; for escalation the shift itself), ``switching_status`` (I, P),
    ``pct_changes`` (K,), ``spider`` (I, P, K).
    """
    A = np.asarray(amounts_by_role, dtype=float)
    P = A.shape[2]
    mult = {k: float(np.asarray(v).ravel()[0]) for k, v in (multipliers or {}).items()}
    base = {"discount_rate": base_rate, "inflation": base_inflation, "first_cost": 1.0, "benefits": 1.0,
            "escalation": 0.0}

    evaluate = PointEvaluator(A, classes, exponents, mult, discount_basis=discount_basis)
    carried = _carried_worth(evaluate, A, classes, exponents, mult, discount_basis) if carried_losses else None

    def pw(**kw):
        args = dict(discount_rate=base_rate, inflation=base_inflation, escalation_shift=0.0,
                    cost_multiplier=1.0, benefit_multiplier=1.0)
        args.update(kw)
        worth = evaluate(args["discount_rate"], args["inflation"], escalation_shift=args["escalation_shift"],
                         cost_multiplier=args["cost_multiplier"], benefit_multiplier=args["benefit_multiplier"])
        return worth if carried is None else worth + carried(None, **args)

    def pw_rows(rows, **kw):
        args = dict(discount_rate=base_rate, inflation=base_inflation, escalation_shift=0.0,
                    cost_multiplier=1.0, benefit_multiplier=1.0)
        args.update(kw)
        worth = evaluate.at_rows(rows, args["discount_rate"], args["inflation"],
                                 escalation_shift=args["escalation_shift"], cost_multiplier=args["cost_multiplier"],
                                 benefit_multiplier=args["benefit_multiplier"])
        return worth if carried is None else worth + carried(rows, **args)

    rows_fns = {
        "discount_rate": lambda v, j: pw_rows(j, discount_rate=v),
        "inflation": lambda v, j: pw_rows(j, inflation=v),
        "escalation": lambda v, j: pw_rows(j, escalation_shift=v),
    }
    moves = {"discount_rate": MOVE_DISCOUNT_RATE, "inflation": MOVE_INFLATION, "escalation": MOVE_ESCALATION}
    roots_fns = {name: (lambda rows, a, b, xatol, move=move: evaluate.roots_between(
        move, rows, a, b, discount_rate=base_rate, inflation=base_inflation, xatol=xatol))
        for name, move in moves.items()}
    scan_fns = {
        "discount_rate": lambda v: evaluate.at_shared_points(v, np.full(v.shape, base_inflation)),
        "inflation": lambda v: evaluate.at_shared_points(np.full(v.shape, base_rate), v),
        "escalation": lambda v: evaluate.at_shared_points(np.full(v.shape, base_rate), np.full(v.shape, base_inflation), v),
    }
    if carried is not None:          # the compiled scans and root searches know only the linear tax
        roots_fns, scan_fns = {}, {}
        rows_fns.update({"first_cost": lambda v, j: pw_rows(j, cost_multiplier=v),
                         "benefits": lambda v, j: pw_rows(j, benefit_multiplier=v)})
    fns = {
        "discount_rate": lambda v: pw(discount_rate=v),
        "inflation": lambda v: pw(inflation=v),
        "first_cost": lambda v: pw(cost_multiplier=v),
        "benefits": lambda v: pw(benefit_multiplier=v),
        "escalation": lambda v: pw(escalation_shift=v),
    }
    worth_base = fns["discount_rate"](np.full(P, base_rate))
    I = len(INPUTS)
    out = {k: np.full((I, P), np.nan) for k in ("worth_low", "worth_high", "switching_value", "switching_change")}
    out["switching_status"] = np.full((I, P), SWITCH_NONE, dtype=np.int8)
    pct = np.asarray(settings.pct_changes, dtype=float)
    spider = np.empty((I, P, pct.size))
    for n, name in enumerate(INPUTS):  # five inputs; every call is vectorised over projects
        low, high = settings.ranges[name]
        out["worth_low"][n] = fns[name](np.full(P, low))
        out["worth_high"][n] = fns[name](np.full(P, high))
        b = base[name]
        if name in ("first_cost", "benefits") and carried is not None:
            lo, hi = MULTIPLIER_SEARCH
            res = switching_value(fns[name], np.full(P, 1.0), lo, hi, rows_fn=rows_fns[name])
            out["switching_value"][n] = res.value
            out["switching_status"][n] = res.status
            out["switching_change"][n] = res.value - 1.0
            values = b * (1.0 + pct)
        elif name in ("first_cost", "benefits"):
            scaled = fns[name](np.full(P, 2.0)) - worth_base     # worth of the scaled lines at multiplier 1
            if name == "first_cost":
                m = first_cost_switching_multiplier(worth_base, scaled)
            else:
                m = linear_switching_multiplier(worth_base - scaled, scaled)
            m = np.asarray(m, dtype=float)
            ok = np.isfinite(m) & (m >= 0)
            out["switching_value"][n] = np.where(ok, m, np.nan)
            out["switching_change"][n] = np.where(ok, m - 1.0, np.nan)
            out["switching_status"][n] = np.where(ok, np.where(worth_base == 0, SWITCH_AT_BASE, SWITCH_ONE), SWITCH_NONE)
            values = b * (1.0 + pct)
        else:
            lo, hi = DEFAULT_SEARCH[name]
            res = switching_value(fns[name], np.full(P, b), lo, hi, rows_fn=rows_fns[name],
                                  scan_fn=scan_fns.get(name), roots_fn=roots_fns.get(name))
            out["switching_value"][n] = res.value
            out["switching_status"][n] = res.status
            if name == "escalation":
                out["switching_change"][n] = res.value              # a shift: report it as is
                values = b + pct * 0.1                               # +-10 % of change = +-1 point per 0.1
            else:
                out["switching_change"][n] = (res.value - b) / abs(b) if b != 0 else np.nan
                values = b * (1.0 + pct)
        if name in scan_fns:
            spider[n] = scan_fns[name](np.asarray(values, dtype=float))          # every change at once
        else:
            for k, v in enumerate(values):
                spider[n, :, k] = fns[name](np.full(P, v))
    out.update(inputs=np.array(INPUTS), base_value=np.array([base[n] for n in INPUTS]),
               low=np.array([settings.ranges[n][0] for n in INPUTS]),
               high=np.array([settings.ranges[n][1] for n in INPUTS]),
               worth_base=worth_base, pct_changes=pct, spider=spider)
    return out


def _carried_worth(evaluate: PointEvaluator, A, classes, exponents, mult: dict, discount_basis: str):
    """``carried(rows, discount_rate, inflation, escalation_shift, cost_multiplier, benefit_multiplier)``
    -> worth of each project's carried losses at its own point (rows None: every project)."""
    from .tax import carried_loss_worth_per_project

    total, cost_scaled, benefit = evaluate.total, evaluate.cost_scaled, A[1]

    def carried(rows, *, discount_rate, inflation, escalation_shift, cost_multiplier, benefit_multiplier):
        pick = (lambda a: a) if rows is None else (lambda a: a[:, rows])   # noqa: E731
        n = total.shape[1] if rows is None else np.asarray(rows).size
        i, f, shift, cm, bm = (np.broadcast_to(np.asarray(v, dtype=float), (n,)) for v in
                               (discount_rate, inflation, escalation_shift, cost_multiplier, benefit_multiplier))
        amounts = pick(total) + (cm - 1.0)[None, :, None] * pick(cost_scaled) \
            + (bm - 1.0)[None, :, None] * pick(benefit)
        nominal = (1.0 + i) * (1.0 + f) - 1.0 if discount_basis == "real" else i
        with np.errstate(over="ignore", invalid="ignore"):
            return carried_loss_worth_per_project(amounts, classes, exponents, nominal, f, mult, shift)
    return carried
