"""Safe output: files the tool writes never replace the database, and text it writes carries no payload.

* :func:`check_output_path` refuses an output path that is the database file, its write-ahead log
  (``<db>.wal``) or its worth-file folder (``<db>.scratch``), or lies inside that folder, however
  the path is spelled (relative, absolute, through a symbolic link): paths are compared resolved.
* :func:`write_text_atomically` writes beside the target and renames, and turns the operating
  system's refusals (no such folder, read-only, disk full) into one-line messages with the fix.
* :func:`neutralise_csv_cell` prefixes a text cell that a spreadsheet would run as a formula
  (beginning with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return) with a single quote, the
  recommendation of OWASP, "CSV Injection" (owasp.org/www-community/attacks/CSV_Injection, common
  practice); numbers stay numbers.
* :func:`terminal_safe` shows control characters (C0, C1, DEL), bidirectional overrides and
  zero-width characters as visible escapes (``\\x1b``, ``<U+202E>``), so a name cannot set a
  terminal's title, clear its screen or reorder what it shows.
"""
from __future__ import annotations

import errno
import os
import re
from pathlib import Path

from ..errors import RatescapeError


class OutputPathError(RatescapeError):
    """An output path the tool refuses to write to (the database's own files, a missing folder...)."""


def _resolved(path) -> Path:
    return Path(os.path.abspath(os.path.realpath(os.fspath(path))))


def protected_paths(db_path) -> dict[Path, str]:
    """The resolved paths that belong to the database at ``db_path``, each with what it is."""
    found: dict[Path, str] = {}
    # DuckDB names the log and ratescape the worth-file folder after the path as given, which may be
    # a link: both the given spelling (made absolute) and the resolved one are protected.
    for db in (Path(os.path.abspath(os.fspath(db_path))), _resolved(db_path)):
        found.setdefault(db, "the database file itself")
        for suffix, what in ((".wal", "the database's write-ahead log"), (".scratch", "the database's worth-file folder")):
            found.setdefault(Path(f"{db}{suffix}"), what)
            found.setdefault(_resolved(f"{db}{suffix}"), what)
    return found


def check_output_path(db_path, out_path, *, option: str = "--out") -> None:
    """Refuse ``out_path`` when it is (or is inside) one of the database's own files; see module doc."""
    out = _resolved(out_path)
    for protected, what in protected_paths(db_path).items():
        same = out == protected or out.is_relative_to(protected)
        if not same and out.exists() and protected.exists():
            try:
                same = os.path.samefile(out, protected)
            except OSError:
                same = False
        if same:
            raise OutputPathError(f"{option} {out_path} is {what} ({protected}); writing there would destroy "
                                  f"the data. Fix: choose another output path, e.g. {option} report.html")


def os_error_message(exc: OSError, path, action: str = "write") -> str:
    """One line saying why the operating system refused and what to do about it."""
    code = exc.errno
    if code == errno.ENOSPC or code == errno.EDQUOT:
        why, fix = "the disk is full", "free some space (or choose a folder on another disk) and run again"
    elif code == errno.EFBIG:
        why, fix = ("the file would exceed the file-size limit of this process (ulimit -f)",
                    "raise the limit (ulimit -f unlimited) and run again")
    elif code in (errno.EROFS, errno.EACCES, errno.EPERM):
        why, fix = "the location is read-only or not writable by you", "choose a folder you can write to"
    elif code == errno.ENOENT:
        why, fix = "its folder does not exist", f"create the folder first (mkdir -p {Path(path).parent})"
    elif code == errno.ENOTDIR:
        why, fix = "a part of the path is a file, not a folder", "choose a path whose folders exist"
    elif code == errno.EISDIR:
        why, fix = "it is a folder", "give a file name inside the folder"
    else:
        why, fix = (exc.strerror or str(exc)), "check the path and the disk, then run again"
    return f"cannot {action} {path}: {why}. Fix: {fix}"


def check_parent_folder(out_path) -> None:
    """Refuse early, with the fix, when the output's folder is missing or is a file."""
    parent = Path(out_path).parent
    if not parent.exists():
        raise OutputPathError(f"cannot write {out_path}: its folder {parent} does not exist. "
                              f"Fix: create it first (mkdir -p {parent}) or choose another --out")
    if not parent.is_dir():
        raise OutputPathError(f"cannot write {out_path}: {parent} is a file, not a folder. "
                              "Fix: choose a path whose folders exist")


def write_bytes_atomically(out_path, data: bytes) -> Path:
    """Write ``data`` beside ``out_path`` and rename it into place (never a partial file)."""
    out = Path(out_path)
    check_parent_folder(out)
    if out.is_dir():
        raise OutputPathError(f"cannot write {out}: it is a folder. Fix: give a file name, e.g. {out / 'report.html'}")
    tmp = out.with_name(f".{out.name}.{os.getpid()}.tmp")
    try:
        tmp.write_bytes(data)
        os.replace(tmp, out)
    except OSError as exc:
        raise OutputPathError(os_error_message(exc, out)) from None
    finally:
        try:
            if tmp.exists():
                tmp.unlink()
        except OSError:
            pass
    return out


def write_text_atomically(out_path, text: str) -> Path:
    return write_bytes_atomically(out_path, text.encode("utf-8"))


# --- CSV formula injection ---------------------------------------------------------------------

FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def neutralise_csv_cell(value):
    """A text cell a spreadsheet would read as a formula, prefixed with ``'``; anything else unchanged."""
    if isinstance(value, str) and value.startswith(FORMULA_STARTS):
        return "'" + value
    return value


def neutralise_frame(frame):
    """The Polars frame with every text column's formula-like cells neutralised (numbers untouched)."""
    import polars as pl

    exprs = []
    for name, dtype in frame.schema.items():
        if dtype == pl.Utf8:
            col = pl.col(name)
            exprs.append(pl.when(col.str.contains(r"^[=+\-@\t\r]")).then(pl.lit("'") + col)
                         .otherwise(col).alias(name))
    return frame.with_columns(exprs) if exprs else frame


# --- terminal control sequences ----------------------------------------------------------------

# C0 controls but not newline, C1 controls, DEL; bidirectional embeddings/overrides/isolates and marks;
# zero-width and other invisible format characters.
_UNSAFE = re.compile("[\x00-\x09\x0b-\x1f\x7f-\x9f\u200b-\u200f\u202a-\u202e\u2060-\u2069\u061c\ufeff\u00ad]")


def _escape(m: re.Match) -> str:
    ch = m.group(0)
    code = ord(ch)
    if code < 0x100:
        return f"\\x{code:02x}"
    return f"<U+{code:04X}>"


def terminal_safe(text: str, *, keep_newlines: bool = True) -> str:
    """``text`` with control, bidirectional and invisible characters shown as escapes."""
    out = _UNSAFE.sub(_escape, text)
    if not keep_newlines:
        out = out.replace("\n", "\\n")
    return out
