"""Start-up of the command line: import compiled extensions with Ctrl-C deferred, then treat SIGTERM
and SIGHUP like Ctrl-C.

Compiled extensions (numpy, duckdb, polars) print their own traceback when SIGINT
arrives in the middle of their import. Importing them first with SIGINT only
recorded, then honouring it, makes an early Ctrl-C end with "Interrupted." and
exit code 130 like any later one.

SIGTERM (what a batch scheduler or `timeout` sends) and SIGHUP (a closed terminal) would end
the process at once, leaving a screen's run marked `running` with no process behind it. Their
handlers raise :class:`ratescape.errors.Interrupted` (a KeyboardInterrupt carrying the signal
number), so every command stops as it does on Ctrl-C (a screen marks its run `interrupted`,
resumable, and stops its workers) and exits with 128 + the signal number (143, 129).
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


def _raise_interrupted(signum, frame):
    """Raise Interrupted once; a repeated SIGTERM/SIGHUP during the clean-up is only recorded."""
    from .errors import RECEIVED_SIGNALS, Interrupted
    first = not RECEIVED_SIGNALS
    RECEIVED_SIGNALS.append(signum)
    if first:
        raise Interrupted(signum)


def treat_termination_like_ctrl_c() -> None:
    """Install the SIGTERM and SIGHUP handlers (main thread only; where the platform has them)."""
    for name in ("SIGTERM", "SIGHUP"):
        sig = getattr(signal, name, None)
        if sig is not None:
            signal.signal(sig, _raise_interrupted)


def run() -> None:
    """Entry point of the ``ratescape`` console script and ``python -m ratescape``."""
    treat_termination_like_ctrl_c()
    try:
        import_extensions_then_honour_ctrl_c()
    except KeyboardInterrupt as exc:     # SIGTERM/SIGHUP while importing: nothing opened yet
        print("Interrupted.", file=sys.stderr)
        sys.exit(128 + getattr(exc, "signum", signal.SIGINT))
    from .cli import main
    main(prog_name="ratescape")
