"""Typed, actionable errors.

Every error a user can cause carries what a person needs to fix it: the file,
the line (1-based, counting the header as line 1), the column, the offending
value, what is wrong and how to fix it.
"""
from __future__ import annotations

from dataclasses import dataclass, field

MAX_ISSUES_SHOWN = 50


class RatescapeError(Exception):
    """Base class of errors the user can cause and fix; the CLI prints them as ``Error: ...``."""


@dataclass(frozen=True)
class Issue:
    """One problem found in an input file."""

    file: str
    line: int | None
    column: str | None
    value: str | None
    problem: str
    fix: str

    def format(self) -> str:
        where = self.file
        if self.line is not None:
            where += f", line {self.line}"
        if self.column is not None:
            where += f", column '{self.column}'"
        shown = ""
        if self.value is not None:
            v = self.value if len(self.value) <= 60 else self.value[:57] + "..."
            shown = f" (value {v!r})"
        return f"{where}: {self.problem}{shown}. Fix: {self.fix}"


@dataclass
class ValidationError(RatescapeError):
    """Raised when input files are invalid; holds every issue found, not only the first."""

    issues: list[Issue] = field(default_factory=list)

    def __post_init__(self):
        files = list(dict.fromkeys(i.file for i in self.issues))
        self.issues = sorted(self.issues, key=lambda i: (files.index(i.file), i.line or 0))
        super().__init__(self.message)

    @property
    def message(self) -> str:
        n = len(self.issues)
        head = f"{n} problem{'s' if n != 1 else ''} found in the input; nothing was written."
        lines = [head] + ["  " + i.format() for i in self.issues[:MAX_ISSUES_SHOWN]]
        if n > MAX_ISSUES_SHOWN:
            lines.append(f"  ... and {n - MAX_ISSUES_SHOWN} more (fix these first, then run again).")
        return "\n".join(lines)

    def __str__(self) -> str:
        return self.message


class GridError(RatescapeError):
    """An invalid scenario-grid specification (flag or TOML)."""


class DatabaseBusyError(RatescapeError):
    """Another process holds the database for writing."""


class RunError(RatescapeError):
    """A run cannot be started or resumed as asked."""


class QueryError(RatescapeError):
    """A query cannot be found, has bad parameters, or tries to write."""


class Interrupted(KeyboardInterrupt):
    """A stop asked for by a signal other than Ctrl-C (SIGTERM from a scheduler or `timeout`, SIGHUP
    from a closed terminal), handled exactly like Ctrl-C: the run is marked interrupted and can be
    resumed. ``exit_code`` follows the shell's convention, 128 + the signal number (143, 129)."""

    def __init__(self, signum: int):
        import signal
        self.signum = signum
        try:
            name = signal.Signals(signum).name
        except ValueError:
            name = f"signal {signum}"
        super().__init__(f"stopped by {name}")
        self.signal_name = name

    @property
    def exit_code(self) -> int:
        return 128 + self.signum


# Signals received by this process (set by the command line's handlers), so an interruption that
# reaches the CLI in another form (DuckDB's own "interrupted" error) still exits with its code.
RECEIVED_SIGNALS: list[int] = []


def interruption_exit_code(exc: BaseException | None = None) -> tuple[int, str]:
    """(exit code, signal name) of an interruption: SIGTERM 143, SIGHUP 129, Ctrl-C 130."""
    signum = getattr(exc, "signum", None) or (RECEIVED_SIGNALS[0] if RECEIVED_SIGNALS else None)
    if signum is None:
        return 130, "SIGINT"
    return Interrupted(signum).exit_code, Interrupted(signum).signal_name
