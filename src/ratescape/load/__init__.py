"""Load stage: CSV files → validated, typed Polars frames (file edge of the pipeline)."""
from .portfolio import Portfolio, PortfolioSink, ScanResult, read_portfolio, scan_portfolio

__all__ = ["Portfolio", "PortfolioSink", "ScanResult", "read_portfolio", "scan_portfolio"]
