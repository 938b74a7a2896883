"""Load stage: CSV files → validated, typed Polars frames (file edge of the pipeline)."""
from .portfolio import Portfolio, read_portfolio

__all__ = ["Portfolio", "read_portfolio"]
