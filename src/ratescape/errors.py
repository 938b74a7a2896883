"""Typed, actionable errors.

Every error a user can cause carries what a person needs to fix it: the file,
the line (1-based, counting the header as line 1), the column, the offending
value, what is wrong and how to fix it.
"""
from __future__ import annotations

import re
from dataclasses import dataclass, field

MAX_ISSUES_SHOWN = 50
# Past MAX_ISSUES_SHOWN issues, the first FIRST_PER_KIND of each kind are listed (at most
# MAX_KINDS_SHOWN kinds), each with a count of the rest of its kind.
FIRST_PER_KIND = 5
MAX_KINDS_SHOWN = 40
# Issues kept per kind by an :class:`Issues` list; the others of the kind are only counted, so a
# file of millions of bad cells is refused in memory for a few hundred issues.
MAX_ISSUES_PER_KIND = 200


def issue_kind(file: str, column: str | None, problem: str) -> tuple:
    """The kind of an issue: its file, column and problem with numbers and quoted values blanked
    ("7 fields where the header has 6" and "5 fields where the header has 6" are one kind)."""
    return (file, column, re.sub(r"\d+", "N", re.sub(r"'[^']*'", "'...'", problem)))


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


class Issues(list):
    """A list of :class:`Issue` that keeps the first :data:`MAX_ISSUES_PER_KIND` of each kind
    (:func:`issue_kind`) and counts the others (``omitted``, per kind), so a huge file with many
    faults is reported as the first faults of each kind with a count of the rest."""

    def __init__(self, *args):
        super().__init__(*args)
        self.seen: dict[tuple, int] = {}
        self.omitted: dict[tuple, int] = {}

    def append(self, issue: Issue) -> None:
        kind = issue_kind(issue.file, issue.column, issue.problem)
        n = self.seen.get(kind, 0) + 1
        self.seen[kind] = n
        if n <= MAX_ISSUES_PER_KIND:
            super().append(issue)
        else:
            self.omitted[kind] = self.omitted.get(kind, 0) + 1

    def room(self, file: str, column: str | None, problem: str) -> int:
        """How many more issues of this kind will be kept."""
        return max(0, MAX_ISSUES_PER_KIND - self.seen.get(issue_kind(file, column, problem), 0))

    def count_more(self, file: str, column: str | None, problem: str, n: int) -> None:
        """Count ``n`` further issues of a kind without keeping them."""
        if n > 0:
            kind = issue_kind(file, column, problem)
            self.seen[kind] = self.seen.get(kind, 0) + n
            self.omitted[kind] = self.omitted.get(kind, 0) + n

    def merge(self, other: Issues) -> None:
        """Append the issues of ``other`` (kept and counted) after these, as if found here in turn.

        The two lists are of different files (kinds name their file), so what each kept and counted
        is what one list would have kept and counted reading one file after the other.
        """
        for issue in other:
            self.append(issue)
        for kind, n in other.omitted.items():
            self.seen[kind] = self.seen.get(kind, 0) + n
            self.omitted[kind] = self.omitted.get(kind, 0) + n

    @property
    def total(self) -> int:
        return len(self) + sum(self.omitted.values())


def room_for(issues: list, file: str, column: str | None, problem: str) -> int | None:
    """Issues of this kind ``issues`` still keeps (None: a plain list, which keeps every one)."""
    return issues.room(file, column, problem) if isinstance(issues, Issues) else None


def count_more(issues: list, file: str, column: str | None, problem: str, n: int) -> None:
    """Count ``n`` issues of a kind that were not listed (a plain list cannot hold counts: no-op)."""
    if isinstance(issues, Issues):
        issues.count_more(file, column, problem, n)


@dataclass
class ValidationError(RatescapeError):
    """Raised when input files are invalid; holds every issue found, not only the first.

    ``omitted``: issues of each kind (:func:`issue_kind`) found but not kept (taken from an
    :class:`Issues` list when that is what is passed).
    """

    issues: list[Issue] = field(default_factory=list)
    omitted: dict = field(default_factory=dict)

    def __post_init__(self):
        if isinstance(self.issues, Issues) and not self.omitted:
            self.omitted = dict(self.issues.omitted)
        files = list(dict.fromkeys(i.file for i in self.issues))
        self.issues = sorted(self.issues, key=lambda i: (files.index(i.file), i.line or 0))
        super().__init__(self.message)

    @property
    def total(self) -> int:
        """Problems found: those listed plus those only counted."""
        return len(self.issues) + sum(self.omitted.values())

    @property
    def message(self) -> str:
        """Every issue when there are at most MAX_ISSUES_SHOWN; otherwise the first few of each kind
        (file, column and problem) with a count of the rest of that kind, so that a fault far into a
        big file is not hidden behind many of another kind."""
        n = self.total
        head = f"{n} problem{'s' if n != 1 else ''} found in the input; nothing was written."
        if n <= MAX_ISSUES_SHOWN:
            return "\n".join([head] + ["  " + i.format() for i in self.issues])
        kinds: dict[tuple, list[Issue]] = {}
        for issue in self.issues:
            kinds.setdefault(issue_kind(issue.file, issue.column, issue.problem), []).append(issue)
        lines = [head]
        for kind, group in list(kinds.items())[:MAX_KINDS_SHOWN]:
            file, column, _ = kind
            lines += ["  " + i.format() for i in group[:FIRST_PER_KIND]]
            more = len(group) - FIRST_PER_KIND + self.omitted.get(kind, 0)
            if more > 0:
                where = file + (f", column '{column}'" if column else "")
                lines.append(f"  ... and {more} more of this kind ({where}: {group[0].problem})")
        rest = sum(len(g) + self.omitted.get(k, 0) for k, g in list(kinds.items())[MAX_KINDS_SHOWN:])
        if rest:
            lines.append(f"  ... and {rest} more of {len(kinds) - MAX_KINDS_SHOWN} other kinds "
                         "(fix these first, then run again).")
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


def percent_typo(value: float) -> str:
    """Words for a rate that looks like a percentage: "3 looks like a percentage; did you mean 0.03?"."""
    return f"{value:g} looks like a percentage; did you mean {value / 100:g}?"


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
