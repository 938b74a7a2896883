"""Scenario grid: run settings → one row per scenario.

A grid is the Cartesian product of named axes. The discount-rate axis is
given on a nominal or a real basis; every scenario carries both rates, linked
by the exact Fisher relation (1 + i) = (1 + r)(1 + f). Further axes
(``tax_rate``, ``cost_multiplier``, ``benefit_multiplier``) multiply into the
same product. Scenario ids number the product with the discount-rate axis
varying fastest.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ratescape.evaluate.inflation import nominal_rate, real_rate
from ratescape.settings import RunSettings


@dataclass
class ScenarioTable:
    """The scenarios of a grid as columns (S,) plus the base scenario's index."""

    columns: dict[str, np.ndarray]
    base_index: int

    @property
    def size(self) -> int:
        return len(self.columns["scenario_id"])


def build_scenarios(spec: RunSettings) -> ScenarioTable:
    """Expand a grid spec into scenario columns: discount_rate (nominal), real_rate, inflation, extra axes.

    The base scenario is the grid point nearest to ``spec.base`` on each
    axis (default: each axis's middle value). ``spec.base`` names the run's own
    axes: ``real_rate`` on a real-basis grid, ``discount_rate`` on a nominal one
    (the other is refused in :func:`ratescape.settings.validate_run_settings`).
    """
    axes = spec.axes
    mesh = np.meshgrid(*[np.asarray(a.values, dtype=float) for a in reversed(axes)], indexing="ij")
    cols = {a.name: m.ravel() for a, m in zip(reversed(axes), mesh)}
    f = cols["inflation"]
    if spec.discount_basis == "nominal":
        cols["real_rate"] = np.asarray(real_rate(cols["discount_rate"], f))
    else:
        cols["discount_rate"] = np.asarray(nominal_rate(cols["real_rate"], f))
    S = f.size
    out = {"scenario_id": np.arange(S, dtype=np.int64), "discount_rate": cols["discount_rate"],
           "real_rate": cols["real_rate"], "inflation": f}
    for a in spec.extra_axes:
        out[a.name] = cols[a.name]
    # base point: nearest grid value per axis
    base_values = {}
    for a in axes:
        vals = np.asarray(a.values, dtype=float)
        want = spec.base.get(a.name)
        base_values[a.name] = vals[np.argmin(np.abs(vals - want))] if want is not None else vals[(len(vals) - 1) // 2]
    mask = np.ones(S, dtype=bool)
    for a in axes:
        mask &= cols[a.name] == base_values[a.name]
    base_index = int(np.flatnonzero(mask)[0])
    return ScenarioTable(out, base_index)


def base_values(spec: RunSettings, table: ScenarioTable) -> dict[str, float]:
    """The base scenario's value on each axis of the run (its own basis), for messages."""
    return {a.name: float(table.columns[a.name][table.base_index]) for a in spec.axes}
