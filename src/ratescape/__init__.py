"""ratescape: screen capital projects over a grid of discount-rate and inflation scenarios.

Pipeline: load → settings → grid → run (evaluate, store, decide) → query / report.
The numeric core (:mod:`ratescape.evaluate`, :mod:`ratescape.decide`) is pure
numpy/scipy; I/O lives at the edges.

The public names below are imported on first use, so ``python -m ratescape``
starts quickly and an early Ctrl-C interrupts cleanly.
"""
__version__ = "0.1.0"

_PUBLIC = {
    "present_worth": ("ratescape.evaluate.measures", "present_worth"),
    "present_worth_grid": ("ratescape.evaluate.kernel", "present_worth_grid"),
    "irr": ("ratescape.evaluate.irr", "irr"),
    "irr_roots": ("ratescape.evaluate.irr", "irr_roots"),
    "depreciation_schedule": ("ratescape.evaluate.depreciation", "depreciation_schedule"),
    "nominal_rate": ("ratescape.evaluate.inflation", "nominal_rate"),
    "real_rate": ("ratescape.evaluate.inflation", "real_rate"),
    "load_portfolio": ("ratescape.api", "load_portfolio"),
    "screen_portfolio": ("ratescape.api", "screen_portfolio"),
    "read_table": ("ratescape.api", "read_table"),
    "run_query": ("ratescape.query", "run_query"),
}
__all__ = [*_PUBLIC, "__version__"]


def __getattr__(name):
    if name in _PUBLIC:
        import importlib

        module, attr = _PUBLIC[name]
        value = getattr(importlib.import_module(module), attr)
        globals()[name] = value
        return value
    raise AttributeError(f"module 'ratescape' has no attribute {name!r}")


def __dir__():
    return sorted(set(globals()) | set(_PUBLIC))
