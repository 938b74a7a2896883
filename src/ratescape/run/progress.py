"""Progress on long work: a bar on a terminal, plain log lines otherwise (CI, cron, nohup)."""
from __future__ import annotations

import sys
import time
from contextlib import contextmanager

# Set by :func:`quiet_logs` (the command line's --quiet): log lines are dropped, errors still raise.
_QUIET = False


class Progress:
    """Report progress of ``total`` units to standard error.

    On a terminal a tqdm bar with rate and time left; otherwise a plain line
    at most every ``interval`` seconds (and at the end).
    """

    def __init__(self, total: int, desc: str, unit: str = "chunk", *, enabled: bool = True,
                 interval: float = 10.0, stream=None):
        self.total = total
        self.desc = desc
        self.unit = unit
        self.stream = stream or sys.stderr
        self.enabled = enabled
        self.interval = interval
        self.count = 0
        self.start = time.monotonic()
        self.last = self.start           # the first line after `interval` (a short stage prints its last only)
        self.bar = None
        if enabled and getattr(self.stream, "isatty", lambda: False)():
            from tqdm import tqdm
            self.bar = tqdm(total=total, desc=desc, unit=unit, file=self.stream, dynamic_ncols=True)

    def update(self, n: int = 1) -> None:
        self.count += n
        if not self.enabled:
            return
        if self.bar is not None:
            self.bar.update(n)
            return
        now = time.monotonic()
        if now - self.last >= self.interval or self.count >= self.total:
            self.last = now
            elapsed = now - self.start
            rate = self.count / elapsed if elapsed > 0 else 0.0
            left = (self.total - self.count) / rate if rate > 0 else float("nan")
            print(f"{self.desc}: {self.count}/{self.total} {self.unit}s, {elapsed:.1f} s elapsed, "
                  f"about {left:.0f} s left", file=self.stream, flush=True)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.close()


def log(message: str, *, stream=None) -> None:
    """One plain line on standard error (none inside :func:`quiet_logs`)."""
    if not _QUIET:
        print(message, file=stream or sys.stderr, flush=True)


@contextmanager
def quiet_logs():
    """Drop log lines while the block runs, on every thread (the run's reader and writer threads
    log too); errors are still raised and reported by the caller."""
    global _QUIET
    before, _QUIET = _QUIET, True
    try:
        yield
    finally:
        _QUIET = before
