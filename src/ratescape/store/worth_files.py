"""A run's worth files: each chunk's worth matrices as raw float64 files, for the rank pass.

Ranking needs every project's worth in a scenario, but chunks hold some projects in every
scenario. Each chunk therefore also writes its (S, P_chunk) present worth and profitability
index, scenario-major, to ``<database>.scratch/<run id>/``; the rank pass then reads one block
of scenarios for all projects with one contiguous read per chunk file (from the page cache,
which does not count towards the process's memory). The files are written before the chunk's
transaction commits, checked by size when read, and deleted when the run is done; a missing or
short file (a crash between the two, or a folder cleaned by hand) is rebuilt by the caller.
The chunk's result rows are also written from these files (by a writer thread that may run
behind the evaluation), so an after-tax run keeps its before-tax present worth here too ("pwb").

A chunk whose every profitability index follows from its present worth (each project's
investment PW is the same in every scenario, or it has no PI at all) stores, instead of its PI
matrix, one investment PW per project ("pi-investment"): its PI is then 1 + PW / that, the
engine's own floating-point operation, so the values read back are identical. Disk use: 8 bytes
per project and scenario in that case (2.1 GB for 100,000 x 2,601), 16 otherwise (24 after tax).
"""
from __future__ import annotations

import os
import shutil
import tempfile
import threading
from pathlib import Path

import numpy as np

MEASURES = ("pw", "pi")
BEFORE_TAX = "pwb"
INVESTMENT = "pi-investment"      # (P_chunk,) file standing in for a chunk's derivable PI matrix


def index_is_derivable(index: np.ndarray, investment: np.ndarray) -> bool:
    """True when every column of a chunk's (S, P) PI equals 1 + PW / investment (P,): each
    project has a fixed investment PW (a number) or no PI in any scenario (NaN throughout)."""
    varying = ~np.isfinite(investment)
    return bool(np.isnan(index[:, varying]).all()) if varying.any() else True


def worth_files_folder(con, run_id: str) -> Path:
    """``<database file>.scratch/<run id>`` (a temporary folder for an in-memory database)."""
    row = con.execute("SELECT path FROM duckdb_databases() WHERE database_name = current_database()").fetchall()
    path = row[0][0] if row else None
    if not path:
        return Path(tempfile.gettempdir()) / f"ratescape-{os.getpid()}.scratch" / run_id
    return Path(f"{path}.scratch") / run_id


_LOCAL = threading.local()


def _thread_buffer(size: int) -> np.ndarray:
    """This thread's float64 read buffer of at least ``size`` values (kept between calls)."""
    buffer = getattr(_LOCAL, "buffer", None)
    if buffer is None or buffer.size < size:
        buffer = _LOCAL.buffer = np.empty(size)
    return buffer


class WorthFiles:
    """Per-chunk (S, P_chunk) float64 files of present worth ("pw"), profitability index ("pi")
    and, after tax, the before-tax present worth ("pwb")."""

    def __init__(self, folder: Path, scenario_count: int, project_count: int, chunk_size: int,
                 before_tax: bool = False):
        self.folder = Path(folder)
        self.S, self.P, self.chunk_size = scenario_count, project_count, chunk_size
        self.measures = MEASURES + ((BEFORE_TAX,) if before_tax else ())
        self._investments = {}              # chunk -> its fixed investment PW per project (read once)
        self._lock = threading.Lock()

    def __getstate__(self):            # sent to Dask workers with the plan: no lock, no cache
        state = dict(self.__dict__)
        del state["_lock"]
        state["_investments"] = {}
        return state

    def __setstate__(self, state):
        self.__dict__.update(state)
        self._lock = threading.Lock()

    def _file(self, measure: str, chunk: int) -> Path:
        return self.folder / f"{measure}-{chunk:07d}.f8"

    def chunk_width(self, chunk: int) -> int:
        first = chunk * self.chunk_size
        return max(0, min(self.chunk_size, self.P - first))

    @property
    def chunk_count(self) -> int:
        return max(1, -(-self.P // self.chunk_size))

    def write(self, chunk: int, pw: np.ndarray, pi: np.ndarray, pw_before_tax: np.ndarray | None = None,
              investment: np.ndarray | None = None) -> None:
        """Write a chunk's (S, P_chunk) matrices (each atomically: temporary name, then rename).

        With ``investment`` (P_chunk,), each project's fixed investment PW or NaN (see
        :func:`ratescape.evaluate.compiled.index_and_fixed_investment`), a PI that follows from
        the PW (:func:`index_is_derivable`) is stored as that vector instead of a matrix.
        """
        self.folder.mkdir(parents=True, exist_ok=True)
        if (pw_before_tax is not None) != (BEFORE_TAX in self.measures):
            raise ValueError("the before-tax present worth is written exactly when the run is after tax")
        width = self.chunk_width(chunk)
        derived = investment is not None and index_is_derivable(pi, np.asarray(investment, dtype=float))
        files = {"pw": pw, "pi": None if derived else pi, BEFORE_TAX: pw_before_tax}
        for measure in self.measures:
            values = files[measure]
            if values is None:
                continue
            if values.shape != (self.S, width):
                raise ValueError(f"chunk {chunk}: {measure} has shape {values.shape}")
            self._write_file(self._file(measure, chunk), values)
        if derived:
            self._write_file(self._file(INVESTMENT, chunk), np.asarray(investment, dtype=float).reshape(width))
            self._file("pi", chunk).unlink(missing_ok=True)             # a matrix left by an earlier attempt
        else:
            self._file(INVESTMENT, chunk).unlink(missing_ok=True)
        with self._lock:
            self._investments.pop(chunk, None)

    @staticmethod
    def _write_file(target: Path, values: np.ndarray) -> None:
        part = target.with_suffix(".part")
        np.ascontiguousarray(values, dtype=np.float64).tofile(part)
        os.replace(part, target)

    def stores_index(self, chunk: int) -> bool:
        """True when the chunk's PI is stored as a matrix (False: derived from its PW)."""
        return self._file("pi", chunk).is_file()

    def _sized(self, path: Path, size: int) -> bool:
        return path.is_file() and path.stat().st_size == size

    def missing(self, chunks=None) -> list[int]:
        """Chunks (of ``chunks``, default all) whose files are absent or not of the expected size."""
        out = []
        for c in (range(self.chunk_count) if chunks is None else chunks):
            width = self.chunk_width(c)
            size = 8 * self.S * width
            ok = all(self._sized(self._file(m, c), size) for m in self.measures if m != "pi")
            ok = ok and (self._sized(self._file("pi", c), size) or self._sized(self._file(INVESTMENT, c), 8 * width))
            if not ok:
                out.append(c)
        return out

    def investment(self, chunk: int) -> np.ndarray:
        """The chunk's fixed investment PW per project (P_chunk,), for a derived PI (read once)."""
        with self._lock:
            values = self._investments.get(chunk)
        if values is None:
            width = self.chunk_width(chunk)
            values = np.fromfile(self._file(INVESTMENT, chunk), dtype=np.float64)
            if values.size != width:
                raise OSError(f"worth file {self._file(INVESTMENT, chunk)} is short")
            with self._lock:
                self._investments[chunk] = values
        return values

    def read_chunk(self, measure: str, chunk: int, out: np.ndarray | None = None) -> np.ndarray:
        """One chunk's whole (S, P_chunk) matrix, read into ``out`` (reused) when given (a derived
        PI is computed from the chunk's PW)."""
        width = self.chunk_width(chunk)
        values = np.empty((self.S, width)) if out is None else out[: self.S * width].reshape(self.S, width)
        if measure == "pi" and not self.stores_index(chunk):
            self.read_chunk("pw", chunk, out=values)
            return _derive_index(values, self.investment(chunk), out=values)
        with open(self._file(measure, chunk), "rb") as fh:
            read = fh.readinto(memoryview(values).cast("B"))
        if read != values.nbytes:
            raise OSError(f"worth file {self._file(measure, chunk)} is short")
        return values

    def read_block(self, measure: str, a: int, b: int, out: np.ndarray | None = None,
                   worth: np.ndarray | None = None) -> np.ndarray:
        """Scenarios [a, b) of every project: (b - a, P), scenario-major, projects in key order.

        For "pi", ``worth`` (the same block of "pw", already read) spares re-reading the PW of
        chunks whose PI is derived from it.
        """
        block = np.empty((b - a, self.P)) if out is None else out[: b - a]
        segment = _thread_buffer((b - a) * min(self.chunk_size, self.P))     # reused: no fresh pages per read
        for c in range(self.chunk_count):
            width = self.chunk_width(c)
            first = c * self.chunk_size
            target = block[:, first:first + width]
            if measure == "pi" and not self.stores_index(c):
                pw = worth[:, first:first + width] if worth is not None else self._segment("pw", c, a, b, segment)
                _derive_index(pw, self.investment(c), out=target)
                continue
            target[:] = self._segment(measure, c, a, b, segment)
        return block

    def _segment(self, measure: str, chunk: int, a: int, b: int, segment: np.ndarray) -> np.ndarray:
        """Rows [a, b) of one chunk's file, read into ``segment``: (b - a, P_chunk)."""
        width = self.chunk_width(chunk)
        part = segment[: (b - a) * width]
        with open(self._file(measure, chunk), "rb") as fh:
            fh.seek(8 * a * width)
            read = fh.readinto(memoryview(part).cast("B"))
        if read != part.nbytes:
            raise OSError(f"worth file {self._file(measure, chunk)} is short")
        return part.reshape(b - a, width)

    def remove(self) -> None:
        shutil.rmtree(self.folder, ignore_errors=True)
        try:
            self.folder.parent.rmdir()          # the database's .scratch folder, when no other run uses it
        except OSError:
            pass


def _derive_index(worth: np.ndarray, investment: np.ndarray, out: np.ndarray) -> np.ndarray:
    """PI = 1 + PW / investment, column by column: (S, P), (P,) -> (S, P) (``out`` may be ``worth``).

    The same two floating-point operations as the engine (:func:`ratescape.evaluate.compiled.
    index_and_fixed_investment`), so a derived PI equals the one computed there bit for bit;
    NaN where the project has no fixed investment (and then no PI)."""
    np.divide(worth, investment, out=out)
    out += 1.0
    return out


class RankFiles:
    """Per-chunk (S, P_chunk) uint32 rank files, appended one block of scenarios at a time."""

    def __init__(self, folder: Path, measure: str, scenario_count: int, project_count: int, chunk_size: int):
        self.folder, self.measure = Path(folder), measure
        self.S, self.P, self.chunk_size = scenario_count, project_count, chunk_size
        self.chunk_count = max(1, -(-project_count // chunk_size))
        self.folder.mkdir(parents=True, exist_ok=True)
        for c in range(self.chunk_count):
            self._file(c).write_bytes(b"")

    def _file(self, chunk: int) -> Path:
        return self.folder / f"rank-{self.measure}-{chunk:07d}.u4"

    def append(self, ranks: np.ndarray) -> None:
        """Append a block (B, P) of ranks, scenario-major, to every chunk's file."""
        for c in range(self.chunk_count):
            first = c * self.chunk_size
            with open(self._file(c), "ab") as fh:
                np.ascontiguousarray(ranks[:, first:first + self.chunk_size]).tofile(fh)

    def read(self, chunk: int, out: np.ndarray | None = None) -> tuple[int, np.ndarray]:
        """(first project, the chunk's (S, P_chunk) ranks), read into ``out`` (reused) when given;
        the file is deleted once read."""
        first = chunk * self.chunk_size
        width = min(self.chunk_size, self.P - first)
        ranks = (np.empty((self.S, width), dtype=np.uint32) if out is None
                 else out[: self.S * width].reshape(self.S, width))
        with open(self._file(chunk), "rb") as fh:
            read = fh.readinto(memoryview(ranks).cast("B"))
        if read != ranks.nbytes:
            raise OSError(f"rank file {self._file(chunk)} is short")
        self._file(chunk).unlink()
        return first, ranks
