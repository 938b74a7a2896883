"""ratescape: screen capital projects over discount-rate and inflation scenarios."""
__version__ = "0.1.0"
