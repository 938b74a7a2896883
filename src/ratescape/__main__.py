"""``python -m ratescape``: the command line."""
from ._startup import import_extensions_then_honour_ctrl_c

import_extensions_then_honour_ctrl_c()

from .cli import main  # noqa: E402

main(prog_name="ratescape")
