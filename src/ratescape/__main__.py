"""``python -m ratescape``: the command line."""
from ._startup import run

run()
