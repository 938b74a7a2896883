"""Start-up of the command line: import compiled extensions with Ctrl-C deferred.

Compiled extensions (numpy, duckdb, polars) print their own traceback when SIGINT
arrives in the middle of their import. Importing them first with SIGINT only
recorded, then honouring it, makes an early Ctrl-C end with "Interrupted." and
exit code 130 like any later one.
"""
import signal
import sys


def import_extensions_then_honour_ctrl_c() -> None:
    """Import the command line's dependencies with Ctrl-C deferred, then honour it."""
    caught = []
    previous = signal.signal(signal.SIGINT, lambda signum, frame: caught.append(signum))
    try:
        import click  # noqa: F401
        import duckdb  # noqa: F401
        import numpy  # noqa: F401
        import polars  # noqa: F401
        import pyarrow  # noqa: F401

        from . import cli  # noqa: F401
    finally:
        signal.signal(signal.SIGINT, previous)
    if caught:
        print("Interrupted.", file=sys.stderr)
        sys.exit(130)


def run() -> None:
    """Entry point of the ``ratescape`` console script and ``python -m ratescape``."""
    import_extensions_then_honour_ctrl_c()
    from .cli import main
    main(prog_name="ratescape")
