"""A run's scratch folder: each chunk's worth matrices as raw float64 files, for the rank pass.

Ranking needs every project's worth in a scenario, but chunks hold some projects in every
scenario. Each chunk therefore also writes its (S, P_chunk) present worth and profitability
index, scenario-major, to ``<database>.scratch/<run id>/``; the rank pass then reads one block
of scenarios for all projects with one contiguous read per chunk file (from the page cache,
which does not count towards the process's memory). The files are written before the chunk's
transaction commits, checked by size when read, and deleted when the run is done; a missing or
short file (a crash between the two, or a folder cleaned by hand) is rebuilt by the caller.
The chunk's result rows are also written from these files (by a writer thread that may run
behind the evaluation), so an after-tax run keeps its before-tax present worth here too ("pwb").
Disk use: 16 bytes per project and scenario (4.2 GB for 100,000 x 2,601; 24 after tax).
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


def scratch_folder(con, run_id: str) -> Path:
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


class WorthScratch:
    """Per-chunk (S, P_chunk) float64 files of present worth ("pw"), profitability index ("pi")
    and, after tax, the before-tax present worth ("pwb")."""

    def __init__(self, folder: Path, scenario_count: int, project_count: int, chunk_size: int,
                 before_tax: bool = False):
        self.folder = Path(folder)
        self.S, self.P, self.chunk_size = scenario_count, project_count, chunk_size
        self.measures = MEASURES + ((BEFORE_TAX,) if before_tax else ())

    def _file(self, measure: str, chunk: int) -> Path:
        return self.folder / f"{measure}-{chunk:07d}.f8"

    def chunk_width(self, chunk: int) -> int:
        first = chunk * self.chunk_size
        return max(0, min(self.chunk_size, self.P - first))

    @property
    def chunk_count(self) -> int:
        return max(1, -(-self.P // self.chunk_size))

    def write(self, chunk: int, pw: np.ndarray, pi: np.ndarray, pw_before_tax: np.ndarray | None = None) -> None:
        """Write a chunk's (S, P_chunk) matrices (atomically: temporary name, then rename)."""
        self.folder.mkdir(parents=True, exist_ok=True)
        if (pw_before_tax is not None) != (BEFORE_TAX in self.measures):
            raise ValueError("the before-tax present worth is written exactly when the run is after tax")
        for measure, values in zip(self.measures, (pw, pi, pw_before_tax)):
            if values.shape != (self.S, self.chunk_width(chunk)):
                raise ValueError(f"chunk {chunk}: {measure} has shape {values.shape}")
            target = self._file(measure, chunk)
            part = target.with_suffix(".part")
            np.ascontiguousarray(values, dtype=np.float64).tofile(part)
            os.replace(part, target)

    def missing(self, chunks=None) -> list[int]:
        """Chunks (of ``chunks``, default all) whose files are absent or not of the expected size."""
        out = []
        for c in (range(self.chunk_count) if chunks is None else chunks):
            size = 8 * self.S * self.chunk_width(c)
            if any(not self._file(m, c).is_file() or self._file(m, c).stat().st_size != size for m in self.measures):
                out.append(c)
        return out

    def read_chunk(self, measure: str, chunk: int, out: np.ndarray | None = None) -> np.ndarray:
        """One chunk's whole (S, P_chunk) matrix, read into ``out`` (reused) when given."""
        width = self.chunk_width(chunk)
        values = np.empty((self.S, width)) if out is None else out[: self.S * width].reshape(self.S, width)
        with open(self._file(measure, chunk), "rb") as fh:
            read = fh.readinto(memoryview(values).cast("B"))
        if read != values.nbytes:
            raise OSError(f"scratch file {self._file(measure, chunk)} is short")
        return values

    def read_block(self, measure: str, a: int, b: int, out: np.ndarray | None = None) -> np.ndarray:
        """Scenarios [a, b) of every project: (b - a, P), scenario-major, projects in key order."""
        block = np.empty((b - a, self.P)) if out is None else out[: b - a]
        segment = _thread_buffer((b - a) * min(self.chunk_size, self.P))     # reused: no fresh pages per read
        for c in range(self.chunk_count):
            width = self.chunk_width(c)
            first = c * self.chunk_size
            part = segment[: (b - a) * width]
            with open(self._file(measure, c), "rb") as fh:
                fh.seek(8 * a * width)
                read = fh.readinto(memoryview(part).cast("B"))
            if read != part.nbytes:
                raise OSError(f"scratch file {self._file(measure, c)} is short")
            block[:, first:first + width] = part.reshape(b - a, width)
        return block

    def remove(self) -> None:
        shutil.rmtree(self.folder, ignore_errors=True)
        try:
            self.folder.parent.rmdir()          # the database's .scratch folder, when no other run uses it
        except OSError:
            pass


class RankScratch:
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
