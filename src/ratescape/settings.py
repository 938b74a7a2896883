"""Run settings: every TOML section and command-line flag of a screen, validated in one place.

:class:`RunSettings` is everything that defines a run's scenarios and evaluation conventions
(the grid's axes, discount basis, timing, periods per year, budgets, tax, weights,
sensitivity and decision settings, which result rows are kept). It is stored as JSON in
``runs.grid_spec`` so a run can be resumed with exactly its settings. Flags override the
TOML file; every key is either used or refused with a message naming where it came from.
"""
from __future__ import annotations

import json
import math
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

from ratescape.errors import GridError
from ratescape.evaluate.inflation import nominal_rate
from ratescape.evaluate.timing import TIMING_CONVENTIONS

try:
    import tomllib
except ModuleNotFoundError:  # pragma: no cover - Python < 3.11
    import tomli as tomllib


DEFAULT_DISCOUNT = "0:0.20:41"


DEFAULT_INFLATION = "0:0.10:21"


EXTRA_AXES = {
    "tax_rate": (0.0, 1.0, "an income-tax rate as a fraction (0.25 = 25 %)"),
    "cost_multiplier": (0.0, None, "a multiplier of investment lines (1.1 = 10 % overrun)"),
    "benefit_multiplier": (0.0, None, "a multiplier of benefit lines (0.9 = 10 % shortfall)"),
}


MAX_SCENARIOS = 1_000_000


@dataclass
class Axis:
    """One grid axis: a name and its values (ascending)."""

    name: str
    values: list[float]


@dataclass
class RunSettings:
    """Everything that defines a run's scenarios and evaluation conventions."""

    discount_rates: list[float]
    inflation: list[float]
    discount_basis: str = "nominal"
    extra_axes: list[Axis] = field(default_factory=list)
    base: dict = field(default_factory=dict)
    timing: str = "end"
    periods_per_year: float = 1.0
    budgets: dict = field(default_factory=dict)
    after_tax: bool = False
    weights: dict = field(default_factory=dict)
    sensitivity: dict = field(default_factory=dict)
    decisions: dict = field(default_factory=dict)
    tax: dict = field(default_factory=dict)
    sources: dict = field(default_factory=dict)   # setting -> where it came from (file: key, or flag)
    keep: str = "all"                             # result rows kept: all, summary, thinned:K
    alternatives_basis: str = "annual-worth"      # how alternatives of unequal lives are compared
    study_period: int | None = None               # periods, with alternatives_basis "study-period"

    def to_json(self) -> str:
        return json.dumps(asdict(self), sort_keys=True)

    @classmethod
    def from_json(cls, text: str) -> "RunSettings":
        data = json.loads(text)
        data["extra_axes"] = [Axis(**a) for a in data.get("extra_axes", [])]
        data["budgets"] = {int(k): v for k, v in data.get("budgets", {}).items()}
        return cls(**data)

    @property
    def axes(self) -> list[Axis]:
        first = "discount_rate" if self.discount_basis == "nominal" else "real_rate"
        return [Axis(first, list(self.discount_rates)), Axis("inflation", list(self.inflation)), *self.extra_axes]

    @property
    def scenario_count(self) -> int:
        return math.prod(len(a.values) for a in self.axes)


def parse_range(text: str, what: str) -> list[float]:
    """Parse ``START:STOP:COUNT`` (inclusive, evenly spaced) or a single value or ``a,b,c``.

    >>> parse_range("0:0.1:3", "inflation")
    [0.0, 0.05, 0.1]
    """
    t = str(text).strip()
    try:
        if ":" in t:
            parts = t.split(":")
            if len(parts) != 3:
                raise ValueError
            start, stop, count = float(parts[0]), float(parts[1]), parts[2]
            if float(count) != int(float(count)):
                raise GridError(f"{what}: COUNT must be a whole number in {t!r}. Fix: e.g. 0:0.2:41")
            return _linspace(start, stop, int(float(count)), what)
        if "," in t:
            return [float(v) for v in t.split(",")]
        return [float(t)]
    except GridError:
        raise
    except ValueError:
        raise GridError(f"{what}: cannot read {t!r}. Fix: give START:STOP:COUNT with rates as fractions, "
                        f"e.g. 0:0.2:41 (0 to 20 % in 41 steps), a single value like 0.07, or a list like 0.03,0.05,0.07")


def _linspace(start: float, stop: float, count: int, what: str) -> list[float]:
    if count < 1:
        raise GridError(f"{what}: COUNT must be at least 1, got {count}. Fix: e.g. 0:0.2:41")
    if count > 1 and stop < start:
        raise GridError(f"{what}: the range {start}:{stop} runs backwards. Fix: give START below STOP, e.g. {stop}:{start}:{count}")
    if count > 1 and stop == start:
        raise GridError(f"{what}: START equals STOP with COUNT {count} (a zero step). Fix: use COUNT 1 or widen the range")
    # rounded to 12 decimals so 0:0.2:41 gives 0.175, not 0.17500000000000002
    return [float(v) for v in np.round(np.linspace(start, stop, count), 12)]


def _axis_from_toml(value, what: str) -> list[float]:
    if isinstance(value, dict):
        unknown = set(value) - {"start", "stop", "count", "values"}
        if unknown:
            raise GridError(f"{what}: unknown key(s) {sorted(unknown)}. Fix: use start/stop/count or values")
        if "values" in value:
            return [float(v) for v in value["values"]]
        try:
            return _linspace(float(value["start"]), float(value["stop"]), int(value["count"]), what)
        except KeyError as exc:
            raise GridError(f"{what}: missing '{exc.args[0]}'. Fix: give start, stop and count") from None
    if isinstance(value, (list, tuple)):
        return [float(v) for v in value]
    if isinstance(value, (int, float)):
        return [float(value)]
    if isinstance(value, str):
        return parse_range(value, what)
    raise GridError(f"{what}: cannot read {value!r}. Fix: use {{ start = 0.0, stop = 0.2, count = 41 }}")


def read_settings_toml(path: str | Path) -> dict:
    """Read the settings of a grid TOML file into a flat dict of RunSettings fields."""
    p = Path(path)
    try:
        data = tomllib.loads(p.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise GridError(f"{path}: file not found. Fix: check the path of --grid") from None
    except tomllib.TOMLDecodeError as exc:
        raise GridError(f"{path}: invalid TOML: {exc}. Fix: correct the line shown") from None
    except UnicodeDecodeError:
        raise GridError(f"{path}: not UTF-8 text. Fix: save the file as UTF-8") from None
    allowed = {"grid", "time", "budget", "tax", "weights", "sensitivity", "decisions", "results", "alternatives"}
    unknown = set(data) - allowed
    if unknown:
        raise GridError(f"{path}: unknown table(s) {sorted(unknown)}. Fix: use only {sorted(allowed)}")
    out: dict = {"sources": {}}
    src = out["sources"]
    grid = data.get("grid", {})
    for key, value in grid.items():
        src[key] = f"{path}: grid.{key}"
        if key == "discount_rates":
            out["discount_rates"] = _axis_from_toml(value, f"{path}: grid.discount_rates")
        elif key == "inflation":
            out["inflation"] = _axis_from_toml(value, f"{path}: grid.inflation")
        elif key == "discount_basis":
            out["discount_basis"] = value
        elif key == "base":
            out["base"] = dict(value)
        elif key in EXTRA_AXES:
            out.setdefault("extra_axes", []).append(Axis(key, _axis_from_toml(value, f"{path}: grid.{key}")))
        else:
            raise GridError(f"{path}: unknown key grid.{key}. Fix: use discount_rates, inflation, discount_basis, "
                            f"base or an extra axis ({', '.join(EXTRA_AXES)})")
    time = data.get("time", {})
    for key, value in time.items():
        if key in ("timing", "periods_per_year"):
            out[key] = value
        else:
            raise GridError(f"{path}: unknown key time.{key}. Fix: use timing or periods_per_year")
    budget = data.get("budget", {})
    if "periods" in budget:
        src["budget"] = f"{path}: budget.periods"
        try:
            out["budgets"] = {int(k): float(v) for k, v in budget["periods"].items()}
        except (TypeError, ValueError):
            raise GridError(f"{path}: budget.periods must map period numbers to amounts. "
                            'Fix: e.g. periods = { "0" = 50e6, "1" = 20e6 }') from None
    tax = dict(data.get("tax", {}))
    if tax:
        out["after_tax"] = bool(tax.pop("after_tax", True))
        if "rate" in tax:
            src["tax_rate"] = f"{path}: tax.rate"
            rate = tax.pop("rate")
            if "tax_rate" not in [a.name for a in out.get("extra_axes", [])]:
                out.setdefault("extra_axes", []).append(Axis("tax_rate", _axis_from_toml(rate, f"{path}: tax.rate")))
        out["tax"] = tax
    if "weights" in data:
        out["weights"] = data["weights"]
    if "results" in data:
        unknown = set(data["results"]) - {"keep"}
        if unknown:
            raise GridError(f"{path}: unknown key(s) results.{sorted(unknown)[0]}. Fix: use results.keep")
        out["keep"] = str(data["results"].get("keep", "all"))
    for key, value in data.get("alternatives", {}).items():
        if key not in ("basis", "study_period"):
            raise GridError(f"{path}: unknown key alternatives.{key}. Fix: use alternatives.basis "
                            f"({', '.join(ALTERNATIVES_BASES)}) or alternatives.study_period")
        src[f"alternatives_{key}"] = f"{path}: alternatives.{key}"
        out["alternatives_basis" if key == "basis" else "study_period"] = value
    for extra in ("sensitivity", "decisions"):
        if extra in data:
            out[extra] = data[extra]
    return out


def make_run_settings(*, toml_settings: dict | None = None, discount_rates: str | None = None,
                   inflation: str | None = None, discount_basis: str | None = None,
                   budgets: dict | None = None, timing: str | None = None,
                   periods_per_year: float | None = None, after_tax: bool | None = None,
                   tax_rate: str | None = None, keep: str | None = None,
                   alternatives_basis: str | None = None, study_period: int | None = None) -> RunSettings:
    """Combine TOML settings with command-line overrides (flags win) and validate."""
    s = dict(toml_settings or {})
    s["sources"] = dict(s.get("sources", {}))
    for flag, key, value in (("--discount-rates", "discount_rates", discount_rates), ("--inflation", "inflation", inflation),
                             ("--budget", "budget", budgets), ("--tax-rate", "tax_rate", tax_rate)):
        if value:
            s["sources"][key] = flag
    if discount_rates is not None:
        s["discount_rates"] = parse_range(discount_rates, "--discount-rates")
    if inflation is not None:
        s["inflation"] = parse_range(inflation, "--inflation")
    if discount_basis is not None:
        s["discount_basis"] = discount_basis
    if budgets:
        s["budgets"] = dict(budgets)
    if timing is not None:
        s["timing"] = timing
    if periods_per_year is not None:
        s["periods_per_year"] = periods_per_year
    if after_tax is not None:
        s["after_tax"] = after_tax
    if keep is not None:
        s["keep"] = keep
    if alternatives_basis is not None:
        s["alternatives_basis"] = alternatives_basis
        s["sources"]["alternatives_basis"] = "--alternatives-basis"
    if study_period is not None:
        s["study_period"] = study_period
        s["sources"]["alternatives_study_period"] = "--study-period"
    if s.get("study_period") is not None and "alternatives_basis" not in s:
        s["alternatives_basis"] = "study-period"     # a study period alone asks for the study-period basis
    if tax_rate is not None:
        axes = [a for a in s.get("extra_axes", []) if a.name != "tax_rate"]
        s["extra_axes"] = axes + [Axis("tax_rate", parse_range(tax_rate, "--tax-rate"))]
        s.setdefault("after_tax", True)
    s.setdefault("discount_rates", parse_range(DEFAULT_DISCOUNT, "default discount rates"))
    s.setdefault("inflation", parse_range(DEFAULT_INFLATION, "default inflation"))
    spec = RunSettings(**s)
    validate_run_settings(spec)
    return spec


#: How the alternatives of a group with different lives are compared (README, "Alternatives of unequal lives").
ALTERNATIVES_BASES = ("annual-worth", "study-period", "present-worth")


def _validate_alternatives(spec: RunSettings, where) -> None:
    """The comparison basis of alternatives and its study period (a whole number of periods >= 1)."""
    if spec.alternatives_basis not in ALTERNATIVES_BASES:
        raise GridError(f"{where('alternatives_basis', '--alternatives-basis')}the alternatives basis must be one of "
                        f"{', '.join(ALTERNATIVES_BASES)}, got {spec.alternatives_basis!r}. Fix: annual-worth "
                        "(default: equivalent annual worth over each alternative's own life), study-period (with "
                        "study_period = T) or present-worth (over each alternative's own life)")
    T = spec.study_period
    at = where("alternatives_study_period", "--study-period")
    if spec.alternatives_basis == "study-period":
        if T is None:
            raise GridError(f"{where('alternatives_basis', '--alternatives-basis')}the study-period basis needs a "
                            "study period. Fix: give --study-period T or study_period = T under [alternatives] "
                            "(T in periods, e.g. 10)")
        if isinstance(T, bool) or not isinstance(T, (int, float)) or not math.isfinite(T) or T != int(T) or T < 1:
            raise GridError(f"{at}the study period must be a whole number of periods of at least 1, got {T!r}. "
                            "Fix: e.g. study_period = 10")
        if T > 1200:
            raise GridError(f"{at}the study period {T:g} is longer than 1200 periods, the longest horizon "
                            "ratescape accepts. Fix: give a study period within the alternatives' lives")
        spec.study_period = int(T)
    elif T is not None:
        raise GridError(f"{at}a study period ({T!r}) is used only with the study-period basis, but the basis is "
                        f"{spec.alternatives_basis!r}. Fix: remove the study period, or set the basis to "
                        "study-period (--alternatives-basis study-period)")


# [decisions] settings: a test of the value and what it must be.
DECISION_SETTINGS = {
    "top_k": (lambda v: v == int(v) and v >= 1, "a whole number of at least 1 (the K of top-K rank stability)"),
    "core_share": (lambda v: 0 < v <= 1, "a share above 0 and at most 1"),
    "kendall_max_projects": (lambda v: v == int(v) and v >= 0,
                             "a whole number of at least 0 (Kendall's tau is stored up to that many projects)"),
}


def validate_run_settings(spec: RunSettings) -> None:
    """Refuse rates at or below -100 %, unknown bases and conventions, empty or huge grids.

    Messages start with where the setting came from (the TOML file and key, or the flag).
    """
    src = spec.sources or {}

    def where(key: str, default: str) -> str:
        return src.get(key, default) + ": "

    axis_key = {"discount_rate": "discount_rates", "real_rate": "discount_rates"}
    if spec.discount_basis not in ("nominal", "real"):
        raise GridError(f"{where('discount_basis', '--discount-basis')}discount basis must be 'nominal' or 'real', "
                        f"got {spec.discount_basis!r}. "
                        "Fix: --discount-basis nominal (market rates) or real (rates net of inflation)")
    if spec.timing not in TIMING_CONVENTIONS:
        raise GridError(f"timing must be one of {', '.join(TIMING_CONVENTIONS)}, got {spec.timing!r}. "
                        "Fix: use --timing end, mid or beginning")
    if not (isinstance(spec.periods_per_year, (int, float)) and spec.periods_per_year > 0):
        raise GridError(f"periods_per_year must be a positive number, got {spec.periods_per_year!r}. "
                        "Fix: 1 = years, 4 = quarters, 12 = months")
    for axis in spec.axes:
        w = where(axis_key.get(axis.name, axis.name), f"grid axis {axis.name}")
        vals = np.asarray(axis.values, dtype=float)
        if vals.size == 0:
            raise GridError(f"{w}the {axis.name} axis has no values. Fix: give at least one")
        if not np.all(np.isfinite(vals)):
            bad = vals[~np.isfinite(vals)][0]
            raise GridError(f"{w}the {axis.name} axis has a non-finite value ({bad}). Fix: give finite fractions")
        if np.unique(vals).size != vals.size:
            raise GridError(f"{w}the {axis.name} axis repeats a value. Fix: give distinct values")
        if axis.name in ("discount_rate", "real_rate", "inflation") and np.any(vals <= -1.0):
            bad = vals[vals <= -1.0][0]
            raise GridError(f"{w}the {axis.name} axis has {bad:g} (-100 % or less), where money would lose all value. "
                            "Fix: rates are fractions greater than -1 (0.07 = 7 %)")
        if axis.name in EXTRA_AXES:
            low, high, what = EXTRA_AXES[axis.name]
            if np.any(vals < low) or (high is not None and np.any(vals > high)):
                raise GridError(f"{w}the {axis.name} axis must hold {what}, got {vals.min():g}..{vals.max():g}. "
                                f"Fix: give values of at least {low:g}" + (f" and at most {high:g}" if high else ""))
    if spec.discount_basis == "real":
        i = nominal_rate(np.asarray(spec.discount_rates)[None, :], np.asarray(spec.inflation)[:, None])
        if np.any(np.asarray(i) <= -1.0):
            raise GridError("a real rate and an inflation rate combine to a nominal rate of -100 % or less. "
                            "Fix: raise the lowest real rate or the lowest inflation")
    if spec.scenario_count > MAX_SCENARIOS:
        raise GridError(f"the grid has {spec.scenario_count:,} scenarios, more than {MAX_SCENARIOS:,}. "
                        "Fix: use fewer steps on some axes")
    for period, amount in spec.budgets.items():
        if int(period) < 0 or not (isinstance(amount, (int, float)) and math.isfinite(amount) and amount >= 0):
            raise GridError(f"{where('budget', '--budget')}budget for period {period} must be a non-negative amount, "
                            f"got {amount!r}. Fix: give the most the investment lines of that period may spend, "
                            "e.g. 50e6")
    if not (spec.keep in ("all", "summary") or (spec.keep.startswith("thinned:") and spec.keep[8:].isdigit()
                                                 and int(spec.keep[8:]) >= 1)):
        raise GridError(f"--keep {spec.keep!r} is not a choice. Fix: use all (every result row), summary (per-project "
                        "summaries only) or thinned:K (rows of every K-th rate and inflation level, and the base)")
    for key, value in (spec.decisions or {}).items():
        if key not in DECISION_SETTINGS:
            raise GridError(f"[decisions] has an unknown key {key!r}. Fix: use one of {', '.join(DECISION_SETTINGS)}")
        accepts, what = DECISION_SETTINGS[key]
        if (isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value)
                or not accepts(value)):
            raise GridError(f"[decisions] {key} must be {what}, got {value!r}")
    _validate_alternatives(spec, where)
    names = [a.name for a in spec.axes]
    for key in spec.base:
        if key not in names + ["discount_rate", "real_rate"]:
            raise GridError(f"{where('base', 'grid.base')}base names an unknown axis {key!r}. "
                            f"Fix: use one of {names}")


def parse_budget(items: list[str] | tuple[str, ...]) -> dict[int, float]:
    """Parse repeatable ``PERIOD=AMOUNT`` budget flags (amount in then-current money)."""
    out: dict[int, float] = {}
    for item in items:
        try:
            k, v = item.split("=", 1)
            period, amount = int(k), float(v)
        except ValueError:
            raise GridError(f"--budget {item!r}: expected PERIOD=AMOUNT. Fix: e.g. --budget 0=50e6 --budget 1=20e6") from None
        if period < 0 or not math.isfinite(amount) or amount < 0:
            raise GridError(f"--budget {item!r}: the period must be >= 0 and the amount a non-negative number")
        out[period] = amount
    return out
