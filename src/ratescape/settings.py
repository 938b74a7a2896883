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
import os
import re
import stat
from collections.abc import Mapping
from dataclasses import asdict, dataclass, field
from pathlib import Path

import numpy as np

from ratescape.decide.weights import axis_weights
from ratescape.errors import GridError, percent_typo
from ratescape.evaluate.inflation import nominal_rate, real_rate
from ratescape.evaluate.sensitivity import INPUTS as SENSITIVITY_INPUTS
from ratescape.evaluate.timing import TIMING_CONVENTIONS
from ratescape.load.columns import DEPRECIATION_METHODS, MAX_PERIOD, PERCENT_RATE_LIMIT, PERCENT_TAX_LIMIT

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
# A grid TOML file is a few hundred bytes; larger files are refused before they are read whole.
MAX_GRID_BYTES = 1 << 20
# Daily periods are the finest the tool takes (365 a year).
MAX_PERIODS_PER_YEAR = 365
RATE_AXES = ("discount_rate", "real_rate", "inflation")
EXTREME_FIX = ("for a genuinely extreme study (hyperinflation, say) add --allow-extreme-rates, "
               "or allow_extreme_rates = true under [grid]")


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
    allow_extreme_rates: bool = False             # rates above 100 % (|r| > 1) accepted on purpose
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


RANGE_FORMS = ("START:STOP:COUNT with rates as fractions, e.g. 0:0.2:41 (41 values from 0 to 0.2, both ends "
               "included, step 0.005), a single value like 0.07, or a list like 0.03,0.05,0.07")


def parse_range(text: str, what: str) -> list[float]:
    """Parse ``START:STOP:COUNT`` (inclusive, evenly spaced) or a single value or ``a,b,c``.

    The count is checked against :data:`MAX_SCENARIOS` before any value is built.

    >>> parse_range("0:0.1:3", "inflation")
    [0.0, 0.05, 0.1]
    """
    t = str(text).strip()
    try:
        if ":" in t:
            parts = t.split(":")
            if len(parts) != 3:
                raise ValueError
            start, stop, count = float(parts[0]), float(parts[1]), float(parts[2])
            if not math.isfinite(count) or count != int(count):
                raise GridError(f"{what}: COUNT must be a whole number in {t!r}. Fix: e.g. 0:0.2:41")
            return _linspace(start, stop, int(count), what)
        if "," in t:
            return [float(v) for v in t.split(",")]
        return [float(t)]
    except GridError:
        raise
    except ValueError:
        percent = " (write rates as fractions without a percent sign: 5% -> 0.05)" if "%" in t else ""
        raise GridError(f"{what}: cannot read {t!r}{percent}. Fix: give {RANGE_FORMS}") from None


def _linspace(start: float, stop: float, count: int, what: str) -> list[float]:
    if count < 1:
        raise GridError(f"{what}: COUNT must be at least 1, got {count}. Fix: e.g. 0:0.2:41")
    if count > MAX_SCENARIOS:
        raise GridError(f"{what}: COUNT {count:,} is more than the {MAX_SCENARIOS:,} scenarios a run may have "
                        "(nothing was built). Fix: use fewer steps, e.g. 0:0.2:41")
    if not (math.isfinite(start) and math.isfinite(stop)):
        raise GridError(f"{what}: START and STOP must be finite, got {start}:{stop}. Fix: give finite fractions")
    if count > 1 and stop < start:
        raise GridError(f"{what}: the range {start}:{stop} runs backwards. Fix: give START below STOP, e.g. {stop}:{start}:{count}")
    if count > 1 and stop == start:
        raise GridError(f"{what}: START equals STOP with COUNT {count} (a zero step). Fix: use COUNT 1 or widen the range")
    # rounded to 12 decimals so 0:0.2:41 gives 0.175, not 0.17500000000000002
    return [float(v) for v in np.round(np.linspace(start, stop, count), 12)]


def _is_number(value) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _numbers(values, what: str) -> list[float]:
    if not isinstance(values, (list, tuple)) or not all(_is_number(v) for v in values):
        raise GridError(f"{what}: values must be a list of numbers, got {values!r}. Fix: e.g. values = [0.03, 0.05, 0.07]")
    return [float(v) for v in values]


def _axis_from_toml(value, what: str) -> list[float]:
    if isinstance(value, dict):
        unknown = set(value) - {"start", "stop", "count", "values"}
        if unknown:
            raise GridError(f"{what}: unknown key(s) {sorted(unknown)}. Fix: use start/stop/count or values")
        if "values" in value:
            if len(value) > 1:
                raise GridError(f"{what}: give values or start/stop/count, not both. Fix: keep one form")
            return _numbers(value["values"], what)
        missing = [k for k in ("start", "stop", "count") if k not in value]
        if missing:
            raise GridError(f"{what}: missing '{missing[0]}'. Fix: give start, stop and count")
        start, stop, count = value["start"], value["stop"], value["count"]
        if not (_is_number(start) and _is_number(stop)):
            raise GridError(f"{what}: start and stop must be numbers, got {start!r} and {stop!r}. "
                            "Fix: e.g. { start = 0.0, stop = 0.2, count = 41 }")
        if not _is_number(count) or not math.isfinite(count) or count != int(count):
            raise GridError(f"{what}: count must be a whole number, got {count!r}. Fix: e.g. count = 41")
        return _linspace(float(start), float(stop), int(count), what)
    if isinstance(value, (list, tuple)):
        return _numbers(value, what)
    if _is_number(value):
        return [float(value)]
    if isinstance(value, str):
        return parse_range(value, what)
    raise GridError(f"{what}: cannot read {value!r}. Fix: use {{ start = 0.0, stop = 0.2, count = 41 }}")


def _read_grid_text(path: str | Path) -> str:
    """The text of a grid file: a regular file of at most MAX_GRID_BYTES, UTF-8 (refusals say why)."""
    p = Path(path)
    try:
        info = os.stat(p)
    except FileNotFoundError:
        raise GridError(f"{path}: file not found. Fix: check the path of --grid") from None
    except OSError as exc:
        raise GridError(f"{path}: cannot be read ({exc.strerror}). Fix: check the path of --grid") from None
    if not stat.S_ISREG(info.st_mode):
        raise GridError(f"{path}: not a regular file (a device, pipe or folder), so it was not read. "
                        "Fix: point --grid at a TOML file")
    if info.st_size > MAX_GRID_BYTES:
        raise GridError(f"{path}: {info.st_size:,} bytes, more than a grid file's limit of {MAX_GRID_BYTES:,}. "
                        "Fix: point --grid at the grid TOML file (a few hundred bytes)")
    with open(p, "rb") as fh:
        raw = fh.read(MAX_GRID_BYTES + 1)
    if len(raw) > MAX_GRID_BYTES:
        raise GridError(f"{path}: more than {MAX_GRID_BYTES:,} bytes. Fix: point --grid at the grid TOML file")
    if raw[:2] in (b"\xff\xfe", b"\xfe\xff") or (len(raw) >= 4 and raw.count(b"\x00") >= len(raw) // 4):
        raise GridError(f"{path}: looks like UTF-16 text (NUL bytes between the letters), not UTF-8. "
                        "Fix: save the file as UTF-8")
    try:
        return raw.decode("utf-8")
    except UnicodeDecodeError:
        raise GridError(f"{path}: not UTF-8 text. Fix: save the file as UTF-8") from None


# [tax] keys other than `rate` (an axis) and `after_tax`: (test, what the value must be).
TAX_SETTINGS = {
    "default_method": (lambda v: isinstance(v, str) and v in DEPRECIATION_METHODS,
                       "one of " + ", ".join(DEPRECIATION_METHODS)),
    "default_recovery_years": (lambda v: _is_number(v) and v == int(v) and 1 <= v <= 100,
                               "a whole number of years from 1 to 100"),
    "investment_tax_credit": (lambda v: _is_number(v) and 0 <= v < 1,
                              "a fraction of at least 0 and below 1 (0.1 = 10 %)"),
    "losses": (lambda v: v in ("offset", "carry-forward"), 'offset or carry-forward'),
}
TABLES = ("grid", "time", "budget", "tax", "weights", "sensitivity", "decisions", "results", "alternatives")
GRID_KEYS = ("discount_rates", "inflation", "discount_basis", "base", "allow_extreme_rates")


def read_settings_toml(path: str | Path) -> dict:
    """Read the settings of a grid TOML file into a flat dict of RunSettings fields.

    Every table and key is either taken (and checked in :func:`validate_run_settings`) or
    refused here with the file, the key and the fix.
    """
    text = _read_grid_text(path)
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise GridError(f"{path}: invalid TOML: {exc}. Fix: correct the line shown") from None
    unknown = set(data) - set(TABLES)
    if unknown:
        raise GridError(f"{path}: unknown table(s) {sorted(unknown)}. Fix: use only {sorted(TABLES)}")
    for table in TABLES:
        if table in data and not isinstance(data[table], dict):
            raise GridError(f"{path}: {table} must be a table ([{table}]), got {data[table]!r}. "
                            f"Fix: write its keys under a [{table}] line")
    out: dict = {"sources": {}}
    src = out["sources"]
    for key, value in data.get("grid", {}).items():
        src[key] = f"{path}: grid.{key}"
        if key in ("discount_rates", "inflation"):
            out[key] = _axis_from_toml(value, f"{path}: grid.{key}")
        elif key == "discount_basis":
            out["discount_basis"] = value
        elif key == "base":
            if not isinstance(value, dict):
                raise GridError(f"{path}: grid.base must be a table of axis values, got {value!r}. "
                                "Fix: e.g. base = { discount_rate = 0.07, inflation = 0.03 }")
            out["base"] = dict(value)
        elif key == "allow_extreme_rates":
            if not isinstance(value, bool):
                raise GridError(f"{path}: grid.allow_extreme_rates must be true or false, got {value!r}. "
                                "Fix: allow_extreme_rates = true")
            out["allow_extreme_rates"] = value
        elif key in EXTRA_AXES:
            out.setdefault("extra_axes", []).append(Axis(key, _axis_from_toml(value, f"{path}: grid.{key}")))
        else:
            raise GridError(f"{path}: unknown key grid.{key}. Fix: use {', '.join(GRID_KEYS)} "
                            f"or an extra axis ({', '.join(EXTRA_AXES)})")
    for key, value in data.get("time", {}).items():
        if key not in ("timing", "periods_per_year"):
            raise GridError(f"{path}: unknown key time.{key}. Fix: use timing or periods_per_year")
        out[key] = value
        src[key] = f"{path}: time.{key}"
    budget = data.get("budget", {})
    for key in budget:
        if key != "periods":
            raise GridError(f"{path}: unknown key budget.{key}. Fix: give budgets as "
                            'periods = { "0" = 50e6, "1" = 20e6 } (period = most the investment lines may spend)')
    if "periods" in budget:
        src["budget"] = f"{path}: budget.periods"
        periods = budget["periods"]
        if not isinstance(periods, dict) or not all(_is_number(v) for v in periods.values()):
            raise GridError(f"{path}: budget.periods must map period numbers to amounts, got {periods!r}. "
                            'Fix: e.g. periods = { "0" = 50e6, "1" = 20e6 }')
        try:
            out["budgets"] = {int(k): float(v) for k, v in periods.items()}
        except ValueError:
            raise GridError(f"{path}: budget.periods must map whole period numbers to amounts, got "
                            f"{sorted(periods)}. " + 'Fix: e.g. periods = { "0" = 50e6, "1" = 20e6 }') from None
    tax = dict(data.get("tax", {}))
    if tax:
        src["tax"] = f"{path}: [tax]"
        after = tax.pop("after_tax", True)
        if not isinstance(after, bool):
            raise GridError(f"{path}: tax.after_tax must be true or false, got {after!r}. Fix: after_tax = true")
        out["after_tax"] = after
        src["after_tax"] = f"{path}: tax.after_tax"
        if "state_rate" in tax or "federal_rate" in tax:
            where = f"{path}: tax.state_rate/federal_rate"
            rate = combined_rate_from_pair(tax.pop("state_rate", None), tax.pop("federal_rate", None), where,
                                           single=tax.get("rate"))
            src["tax_rate"] = where
            out.setdefault("extra_axes", []).append(Axis("tax_rate", [rate]))
        if "losses" in tax:
            tax["losses"] = losses_choice(tax["losses"], f"{path}: tax.losses")
        if "rate" in tax:
            rate = tax.pop("rate")
            if any(a.name == "tax_rate" for a in out.get("extra_axes", [])):
                raise GridError(f"{path}: the tax rate is given twice (tax.rate and grid.tax_rate). Fix: keep one")
            src["tax_rate"] = f"{path}: tax.rate"
            out.setdefault("extra_axes", []).append(Axis("tax_rate", _axis_from_toml(rate, f"{path}: tax.rate")))
        for key, value in tax.items():
            if key not in TAX_SETTINGS:
                raise GridError(f"{path}: unknown key tax.{key}. Fix: use after_tax, rate, "
                                + ", ".join(TAX_SETTINGS))
            accepts, what = TAX_SETTINGS[key]
            if not accepts(value):
                hint = (" " + percent_typo(value)) if (key == "investment_tax_credit" and _is_number(value)
                                                        and value >= PERCENT_TAX_LIMIT) else ""
                raise GridError(f"{path}: tax.{key} must be {what}, got {value!r}.{hint} Fix: e.g. "
                                + {"default_method": 'default_method = "straight-line"',
                                   "default_recovery_years": "default_recovery_years = 7",
                                   "investment_tax_credit": "investment_tax_credit = 0.1",
                                   "losses": 'losses = "carry-forward"'}[key])
        out["tax"] = tax
    elif any(a.name == "tax_rate" for a in out.get("extra_axes", [])):
        out["after_tax"] = True   # a tax-rate axis means an after-tax run, as --tax-rate does
    for table in ("weights", "sensitivity", "decisions"):
        if table in data:
            out[table] = data[table]
            src[table] = f"{path}: [{table}]"
    if "results" in data:
        unknown = set(data["results"]) - {"keep"}
        if unknown:
            raise GridError(f"{path}: unknown key(s) results.{sorted(unknown)[0]}. Fix: use results.keep")
        keep = data["results"].get("keep", "all")
        if not isinstance(keep, str):
            raise GridError(f"{path}: results.keep must be text, got {keep!r}. Fix: keep = \"summary\"")
        out["keep"] = keep
        src["keep"] = f"{path}: results.keep"
    for key, value in data.get("alternatives", {}).items():
        if key not in ("basis", "study_period"):
            raise GridError(f"{path}: unknown key alternatives.{key}. Fix: use alternatives.basis "
                            f"({', '.join(ALTERNATIVES_BASES)}) or alternatives.study_period")
        src[f"alternatives_{key}"] = f"{path}: alternatives.{key}"
        out["alternatives_basis" if key == "basis" else "study_period"] = value
    return out


#: how a project's tax losses are treated: "offset" (the default: a loss offsets the firm's other taxable
#: income in the same year) or "carry-forward" (a stand-alone project carries its losses forward)
LOSS_TREATMENTS = ("offset", "carry-forward")


def losses_choice(value, where: str) -> str:
    """Validate a ``losses`` setting (``[tax] losses`` or ``--losses``)."""
    if value not in LOSS_TREATMENTS:
        raise GridError(f"{where}: losses must be 'offset' (a loss offsets the firm's other income that year) or "
                        f"'carry-forward' (a stand-alone project carries its losses forward), got {value!r}. "
                        "Fix: losses = \"offset\" or losses = \"carry-forward\"")
    return value


def combined_rate_from_pair(state, federal, where: str, single=None) -> float:
    """Combined income-tax rate t = t_s + t_f (1 - t_s) from a state (provincial) and a federal rate.

    State tax is deductible from federally taxable income, so each currency unit of income pays
    t_s to the state and t_f on the remaining (1 - t_s) to the federal government.

    References
    ----------
    W. G. Sullivan, E. M. Wicks, C. P. Koelling, Engineering Economy, Pearson, chapter
    "Depreciation and Income Taxes", the effective (combined) income-tax rate (from memory;
    common practice).

    Examples
    --------
    >>> round(combined_rate_from_pair(0.06, 0.21, "x"), 6)
    0.2574
    """
    if single is not None:
        raise GridError(f"{where}: give either one income-tax rate or the state and federal rates, not both. "
                        "Fix: remove the single rate (tax.rate / --tax-rate) or the pair")
    if state is None or federal is None:
        missing = "federal" if federal is None else "state"
        raise GridError(f"{where}: the {missing} rate is missing; the combined rate needs both. "
                        f"Fix: give the {missing} rate too (0 if there is none)")
    out = []
    for name, value in (("state", state), ("federal", federal)):
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) \
                or not 0.0 <= value < 1.0:
            raise GridError(f"{where}: the {name} rate must be one fraction at least 0 and below 1 "
                            f"(0.21 = 21 %), got {value!r}. Fix: give it as a fraction")
        out.append(float(value))
    t_s, t_f = out
    return t_s + t_f * (1.0 - t_s)


def make_run_settings(*, toml_settings: dict | None = None, discount_rates: str | None = None,
                   inflation: str | None = None, discount_basis: str | None = None,
                   budgets: dict | None = None, timing: str | None = None,
                   periods_per_year: float | None = None, after_tax: bool | None = None,
                   tax_rate: str | None = None, keep: str | None = None, state_tax_rate: str | float | None = None,
                   federal_tax_rate: str | float | None = None, losses: str | None = None,
                   allow_extreme_rates: bool | None = None, alternatives_basis: str | None = None,
                   study_period: int | None = None) -> RunSettings:
    """Combine TOML settings with command-line overrides (flags win) and validate."""
    s = dict(toml_settings or {})
    s["sources"] = dict(s.get("sources", {}))
    src = s["sources"]
    if state_tax_rate is not None or federal_tax_rate is not None:
        pair = []
        for flag, v in (("--state-tax-rate", state_tax_rate), ("--federal-tax-rate", federal_tax_rate)):
            try:
                pair.append(None if v is None else float(v))
            except ValueError:
                raise GridError(f"{flag} {v!r}: not a number. Fix: give a fraction, e.g. 0.06") from None
        rate = combined_rate_from_pair(*pair, "--state-tax-rate/--federal-tax-rate", single=tax_rate)
        tax_rate = repr(rate)
        src["tax_rate"] = "--state-tax-rate/--federal-tax-rate"
    if losses is not None:
        s["tax"] = dict(s.get("tax", {}), losses=losses_choice(losses, "--losses"))
    if discount_rates is not None:
        src["discount_rates"] = "--discount-rates"
        s["discount_rates"] = parse_range(discount_rates, "--discount-rates")
    if inflation is not None:
        src["inflation"] = "--inflation"
        s["inflation"] = parse_range(inflation, "--inflation")
    if discount_basis is not None:
        src["discount_basis"] = "--discount-basis"
        s["discount_basis"] = discount_basis
    if budgets:
        src["budget"] = "--budget"
        s["budgets"] = dict(budgets)
    if timing is not None:
        src["timing"] = "--timing"
        s["timing"] = timing
    if periods_per_year is not None:
        src["periods_per_year"] = "--periods-per-year"
        s["periods_per_year"] = periods_per_year
    if after_tax is not None:
        src["after_tax"] = "--after-tax" if after_tax else "--before-tax"
        s["after_tax"] = after_tax
    if keep is not None:
        src["keep"] = "--keep"
        s["keep"] = keep
    if allow_extreme_rates:
        src["allow_extreme_rates"] = "--allow-extreme-rates"
        s["allow_extreme_rates"] = True
    if alternatives_basis is not None:
        s["alternatives_basis"] = alternatives_basis
        s["sources"]["alternatives_basis"] = "--alternatives-basis"
    if study_period is not None:
        s["study_period"] = study_period
        s["sources"]["alternatives_study_period"] = "--study-period"
    if s.get("study_period") is not None and "alternatives_basis" not in s:
        s["alternatives_basis"] = "study-period"     # a study period alone asks for the study-period basis
    if tax_rate is not None:
        src.setdefault("tax_rate", "--tax-rate")
        if src["tax_rate"] != "--state-tax-rate/--federal-tax-rate":
            src["tax_rate"] = "--tax-rate"
        axes = [a for a in s.get("extra_axes", []) if a.name != "tax_rate"]
        s["extra_axes"] = axes + [Axis("tax_rate", parse_range(tax_rate, "--tax-rate"))]
        if after_tax is None:
            s["after_tax"] = True
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


def _percent_refusal(w: str, what: str, value: float, tax: bool = False) -> GridError:
    limit = "1 (100 %) or more" if tax else "more than 1 (100 %) in size"
    return GridError(f"{w}{what} has {value:g}: {percent_typo(value)} Rates are fractions, and a rate of {limit} "
                     f"is refused as a near-certain percentage typo. Fix: write {value / 100:g} "
                     f"(fractions: 0.05 = 5 %); {EXTREME_FIX}")


def validate_run_settings(spec: RunSettings) -> None:
    """Refuse rates at or below -100 %, percentages written for fractions, unknown bases and conventions,
    empty or huge grids, bad [base], [weights], [sensitivity], [decisions], [tax] and --keep values.

    Messages start with where the setting came from (the TOML file and key, or the flag).
    Nothing is built before the sizes are known to be within bounds.
    """
    src = spec.sources or {}

    def where(key: str, default: str) -> str:
        return src.get(key, default) + ": "

    axis_key = {"discount_rate": "discount_rates", "real_rate": "discount_rates"}
    extreme = spec.allow_extreme_rates
    if not isinstance(extreme, bool):
        raise GridError(f"{where('allow_extreme_rates', 'allow_extreme_rates')}must be true or false, got {extreme!r}")
    if spec.discount_basis not in ("nominal", "real"):
        raise GridError(f"{where('discount_basis', '--discount-basis')}discount basis must be 'nominal' or 'real', "
                        f"got {spec.discount_basis!r}. "
                        "Fix: --discount-basis nominal (market rates) or real (rates net of inflation)")
    if spec.timing not in TIMING_CONVENTIONS:
        raise GridError(f"{where('timing', '--timing')}timing must be one of {', '.join(TIMING_CONVENTIONS)}, "
                        f"got {spec.timing!r}. Fix: use --timing end, mid or beginning")
    ppy = spec.periods_per_year
    if not (_is_number(ppy) and math.isfinite(ppy) and 0 < ppy <= MAX_PERIODS_PER_YEAR):
        raise GridError(f"{where('periods_per_year', '--periods-per-year')}periods per year must be a finite number "
                        f"above 0 and at most {MAX_PERIODS_PER_YEAR}, got {ppy!r}. "
                        "Fix: 1 = years, 4 = quarters, 12 = months, 365 = days")
    axes = spec.axes
    for axis in axes:   # sizes first: nothing below builds more than one axis's values
        if not isinstance(axis.values, list) or len(axis.values) > MAX_SCENARIOS:
            raise GridError(f"{where(axis_key.get(axis.name, axis.name), f'grid axis {axis.name}')}the {axis.name} "
                            f"axis has more than {MAX_SCENARIOS:,} values. Fix: use fewer steps")
    count = spec.scenario_count
    if count > MAX_SCENARIOS:
        sizes = " x ".join(f"{len(a.values):,} {a.name}" for a in axes)
        raise GridError(f"the grid has {count:,} scenarios ({sizes}), more than {MAX_SCENARIOS:,}; nothing was built. "
                        "Fix: use fewer steps on some axes")
    for axis in axes:
        w = where(axis_key.get(axis.name, axis.name), f"grid axis {axis.name}")
        vals = np.asarray(axis.values, dtype=float)
        what = f"the {axis.name} axis"
        if vals.size == 0:
            raise GridError(f"{w}{what} has no values. Fix: give at least one")
        if not np.all(np.isfinite(vals)):
            bad = vals[~np.isfinite(vals)][0]
            raise GridError(f"{w}{what} has a non-finite value ({bad}). Fix: give finite fractions")
        if np.unique(vals).size != vals.size:
            raise GridError(f"{w}{what} repeats a value. Fix: give distinct values")
        if axis.name in RATE_AXES:
            if np.any(vals <= -1.0):
                bad = vals[vals <= -1.0][0]
                hint = f" ({percent_typo(bad)})" if bad < -PERCENT_RATE_LIMIT else ""
                raise GridError(f"{w}{what} has {bad:g} (-100 % or less), where money would lose all value{hint}. "
                                "Fix: rates are fractions greater than -1 (0.07 = 7 %)")
            big = np.abs(vals) > PERCENT_RATE_LIMIT
            if not extreme and big.any():
                raise _percent_refusal(w, what, float(vals[big][0]))
        if axis.name == "tax_rate" and not extreme and np.any(vals >= PERCENT_TAX_LIMIT):
            raise _percent_refusal(w, what, float(vals[vals >= PERCENT_TAX_LIMIT][0]), tax=True)
        if axis.name in EXTRA_AXES:
            low, high, text = EXTRA_AXES[axis.name]
            if np.any(vals < low) or (high is not None and np.any(vals > high)):
                raise GridError(f"{w}{what} must hold {text}, got {vals.min():g}..{vals.max():g}. "
                                f"Fix: give values of at least {low:g}" + (f" and at most {high:g}" if high else ""))
    if spec.discount_basis == "real":
        i = nominal_rate(np.asarray(spec.discount_rates)[None, :], np.asarray(spec.inflation)[:, None])
        if np.any(np.asarray(i) <= -1.0):
            raise GridError("a real rate and an inflation rate combine to a nominal rate of -100 % or less. "
                            "Fix: raise the lowest real rate or the lowest inflation")
    _check_tax(spec, where)
    _check_budgets(spec, where)
    _check_keep(spec, where)
    _check_base(spec, where)
    _check_weights(spec, where)
    _validate_alternatives(spec, where)
    _check_sensitivity(spec, where)
    _check_decisions(spec, where)


def _check_tax(spec: RunSettings, where) -> None:
    has_axis = any(a.name == "tax_rate" for a in spec.extra_axes)
    if not isinstance(spec.after_tax, bool):
        raise GridError(f"{where('after_tax', 'after_tax')}after_tax must be true or false, got {spec.after_tax!r}")
    if not spec.after_tax and has_axis:
        raise GridError(f"{where('tax_rate', 'tax rate')}a tax rate is given but the run is before tax "
                        f"({where('after_tax', 'after_tax')[:-2]}), so it would be ignored. Fix: drop the tax "
                        "rate, or screen after tax (--after-tax, or after_tax = true under [tax])")
    if not spec.after_tax and spec.tax:
        raise GridError(f"{where('tax', '[tax]')}[tax] settings {sorted(spec.tax)} are given but the run is before "
                        "tax, so they would be ignored. Fix: remove them, or screen after tax (--after-tax)")


def _check_budgets(spec: RunSettings, where) -> None:
    for period, amount in spec.budgets.items():
        if not (0 <= int(period) <= MAX_PERIOD) or not (_is_number(amount) and math.isfinite(amount) and amount >= 0):
            raise GridError(f"{where('budget', '--budget')}budget for period {period} must be a non-negative amount "
                            f"for a period from 0 to {MAX_PERIOD}, got {amount!r}. Fix: give the most the investment "
                            "lines of that period may spend, e.g. 50e6")


def _check_keep(spec: RunSettings, where) -> None:
    w = where("keep", "--keep")
    keep = spec.keep
    match = re.fullmatch(r"thinned:([0-9]{1,12})", keep) if isinstance(keep, str) else None
    if not (keep in ("all", "summary") or match):
        raise GridError(f"{w}{keep!r} is not a choice. Fix: use all (every result row), summary (per-project "
                        "summaries only) or thinned:K (rows of every K-th rate and inflation level, and the base)")
    if match:
        k, longest = int(match.group(1)), max(len(a.values) for a in spec.axes)
        if not 1 <= k <= max(longest - 1, 1):
            raise GridError(f"{w}thinned:{k} keeps every {k:,}-th value of each axis, but the longest axis has "
                            f"{longest} values, so only its first value would be kept. "
                            f"Fix: give K from 1 to {max(longest - 1, 1)}, or --keep summary")


def _check_base(spec: RunSettings, where) -> None:
    """The base scenario: a value on each named axis of the run's own basis, within the axis's range.

    On a real-basis grid ``base.discount_rate`` (a nominal rate) is refused, and on a nominal grid
    ``base.real_rate``: the message gives the value on the run's basis by the exact Fisher
    relation at the base inflation, so the user states which rate is meant.
    """
    w = where("base", "grid.base")
    axes = {a.name: np.asarray(a.values, dtype=float) for a in spec.axes}
    first = spec.axes[0].name
    if not isinstance(spec.base, Mapping):
        raise GridError(f"{w}base must be a table of axis values. Fix: e.g. base = {{ {first} = 0.07 }}")
    for key, value in spec.base.items():
        if not (_is_number(value) and math.isfinite(value)):
            raise GridError(f"{w}base {key} must be a finite number, got {value!r}. Fix: e.g. {first} = 0.07")
    f = float(spec.base.get("inflation", axes["inflation"][(axes["inflation"].size - 1) // 2]))
    for key, value in spec.base.items():
        if key in ("discount_rate", "real_rate") and key != first:
            if first == "real_rate":
                other = float(real_rate(value, f))
                basis, hint = "real", f"as a nominal rate at the base inflation {f:g} it is real_rate = {other:.6g}"
            else:
                other = float(nominal_rate(value, f))
                basis, hint = "nominal", f"as a real rate at the base inflation {f:g} it is discount_rate = {other:.6g}"
            raise GridError(f"{w}base {key} = {value:g} names a {key.replace('_', ' ')}, but the grid's discount "
                            f"axis is {basis} ({first}). Fix: give base {first} on the grid's basis: "
                            f"{first} = {value:g} if that value is meant on the {basis} basis; {hint} "
                            "(exact Fisher relation)")
        if key not in axes:
            raise GridError(f"{w}base names an unknown axis {key!r}. Fix: use one of {list(axes)}")
        if not spec.allow_extreme_rates and ((key in RATE_AXES and abs(value) > PERCENT_RATE_LIMIT)
                                            or (key == "tax_rate" and value >= PERCENT_TAX_LIMIT)):
            raise _percent_refusal(w, f"base {key}", float(value), tax=key == "tax_rate")
        vals = axes[key]
        if not vals.min() - 1e-12 <= value <= vals.max() + 1e-12:
            raise GridError(f"{w}base {key} = {value:g} lies outside the grid's {key} axis "
                            f"({vals.min():g} to {vals.max():g}). Fix: give a base within the grid, or widen the axis")


def _check_weights(spec: RunSettings, where) -> None:
    """[weights]: per axis a list of weights (one per grid value) or a distribution; checked here."""
    w = where("weights", "[weights]")
    if not isinstance(spec.weights, Mapping):
        raise GridError(f"{w}[weights] must be a table of axis names. Fix: e.g. inflation = [1, 2, 1]")
    names = [a.name for a in spec.axes]
    given = dict(spec.weights)
    if "discount_rates" in given and names[0] in given:
        raise GridError(f"{w}[weights] gives the discount axis twice (discount_rates and {names[0]}). Fix: keep one")
    fix = ('Fix: give a list with one non-negative weight per grid value, e.g. inflation = [1, 2, 1], or a '
           'distribution, e.g. inflation = { distribution = "normal", mean = 0.03, sd = 0.01 } '
           '(triangular: low, mode, high; uniform: low, high; tails = "fold" or "truncate")')
    for key, entry in given.items():
        name = names[0] if key == "discount_rates" else key
        if name not in names:
            raise GridError(f"{w}[weights] names an unknown axis {key!r}. Fix: use one of {['discount_rates', *names[1:]]}")
        grid = np.asarray(next(a.values for a in spec.axes if a.name == name), dtype=float)
        try:
            if isinstance(entry, Mapping):
                params = dict(entry)
                tails = params.pop("tails", "fold")
                if tails not in ("fold", "truncate"):
                    raise ValueError(f"tails must be 'fold' or 'truncate', got {tails!r}")
                if not all(_is_number(v) for k, v in params.items() if k != "distribution"):
                    raise ValueError("distribution parameters must be numbers")
                weights = axis_weights(grid, params, tails=tails)
            elif isinstance(entry, list) and all(_is_number(v) for v in entry):
                weights = axis_weights(grid, entry)
            else:
                raise ValueError(f"cannot read {entry!r}")
            if not np.all(np.isfinite(weights)):
                raise ValueError("the weights are not finite")
        except (ValueError, TypeError, ArithmeticError) as exc:
            raise GridError(f"{w}[weights] {key} (axis {name}, {grid.size} grid values): {exc}. {fix}") from None


def _check_sensitivity(spec: RunSettings, where) -> None:
    """[sensitivity]: input = [low, high] ranges of the one-at-a-time analysis, and pct_changes."""
    w = where("sensitivity", "[sensitivity]")
    if not isinstance(spec.sensitivity, Mapping):
        raise GridError(f"{w}[sensitivity] must be a table. Fix: e.g. inflation = [0.0, 0.1]")
    for key, value in spec.sensitivity.items():
        if key == "pct_changes":
            if not (isinstance(value, list) and value and all(_is_number(v) and math.isfinite(v) and v > -1
                                                              for v in value)):
                raise GridError(f"{w}[sensitivity] pct_changes must be a list of finite changes above -1 "
                                f"(fractions of the base value), got {value!r}. Fix: e.g. pct_changes = [-0.2, 0, 0.2]")
            continue
        if key not in SENSITIVITY_INPUTS:
            raise GridError(f"{w}[sensitivity] has an unknown input {key!r}. "
                            f"Fix: use one of {', '.join(SENSITIVITY_INPUTS)} or pct_changes")
        if not (isinstance(value, list) and len(value) == 2 and all(_is_number(v) and math.isfinite(v) for v in value)
                and value[0] < value[1]):
            raise GridError(f"{w}[sensitivity] {key} must be [low, high] with finite low < high, got {value!r}. "
                            f"Fix: e.g. {key} = [0.0, 0.1]")
        if key in ("discount_rate", "inflation", "escalation") and not spec.allow_extreme_rates:
            big = [v for v in value if abs(v) > PERCENT_RATE_LIMIT]
            if big:
                raise _percent_refusal(w, f"[sensitivity] {key}", float(big[0]))


def _check_decisions(spec: RunSettings, where) -> None:
    w = where("decisions", "[decisions]")
    if not isinstance(spec.decisions, Mapping):
        raise GridError(f"{w}[decisions] must be a table. Fix: e.g. top_k = 10")
    for key, value in spec.decisions.items():
        if key not in DECISION_SETTINGS:
            raise GridError(f"{w}[decisions] has an unknown key {key!r}. Fix: use one of {', '.join(DECISION_SETTINGS)}")
        accepts, what = DECISION_SETTINGS[key]
        if not (_is_number(value) and math.isfinite(value) and accepts(value)):
            raise GridError(f"{w}[decisions] {key} must be {what}, got {value!r}. Fix: e.g. top_k = 10")


def describe_axes(spec: RunSettings, base: dict | None = None) -> list[str]:
    """Plain lines naming each resolved axis (first, last, count, step) and the base scenario.

    >>> describe_axes(make_run_settings(discount_rates="0:0.2:41", inflation="0.03"))[1]
    '  discount rate (nominal): 41 values from 0 to 0.2, step 0.005'
    """
    labels = {"discount_rate": "discount rate (nominal)", "real_rate": "discount rate (real)",
              "inflation": "inflation", "tax_rate": "tax rate", "cost_multiplier": "cost multiplier",
              "benefit_multiplier": "benefit multiplier"}
    lines = [f"Grid: {spec.scenario_count:,} scenario(s) over {len(spec.axes)} axes"]
    for a in spec.axes:
        v = np.asarray(a.values, dtype=float)
        label = labels.get(a.name, a.name)
        if v.size == 1:
            lines.append(f"  {label}: 1 value, {v[0]:g}")
            continue
        steps = np.diff(v)
        even = np.allclose(steps, steps[0], rtol=1e-9, atol=1e-12)
        if even:
            lines.append(f"  {label}: {v.size} values from {v[0]:g} to {v[-1]:g}, step {steps[0]:.12g}")
        elif v.size <= 8:
            lines.append(f"  {label}: {v.size} values: " + ", ".join(f"{x:g}" for x in v))
        else:
            lines.append(f"  {label}: {v.size} values from {v.min():g} to {v.max():g}, uneven steps")
    if base:
        lines.append("  base scenario: " + ", ".join(f"{labels.get(k, k)} {x:g}" for k, x in base.items()))
    return lines


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
