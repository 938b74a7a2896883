"""ratescape: screen capital projects over a grid of discount-rate and inflation scenarios.

Pipeline: load → grid → evaluate → decide → store → query / chart / report.
The numeric core (:mod:`ratescape.evaluate`, :mod:`ratescape.decide`) is pure
numpy/scipy; I/O lives at the edges.
"""
__version__ = "0.1.0"

from .evaluate.kernel import present_worth_grid  # noqa: E402
from .evaluate.measures import present_worth  # noqa: E402
from .evaluate.irr import irr, irr_roots  # noqa: E402
from .evaluate.depreciation import depreciation_schedule  # noqa: E402
from .evaluate.inflation import nominal_rate, real_rate  # noqa: E402
from .api import load_portfolio, read_table, screen_portfolio  # noqa: E402
from .query import run_query  # noqa: E402

__all__ = ["present_worth", "present_worth_grid", "irr", "irr_roots", "depreciation_schedule", "nominal_rate",
           "real_rate", "load_portfolio", "screen_portfolio", "run_query", "read_table", "__version__"]
