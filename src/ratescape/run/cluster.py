"""Where chunks are evaluated: in this process, or on a Dask distributed cluster.

The screen stage reads each chunk's cash flows from DuckDB and writes its results
back in this process (one writer); only the pure evaluation (``evaluate_chunk``)
moves to the workers. The plan travels once to every worker (scattered with
``broadcast=True``); each chunk's arrays travel once, scattered to the worker that
evaluates the chunk, so no task carries data in its graph. Results are written in chunk order, so a cluster run stores
the same rows as a single-process run (values equal up to the floating-point
summation order of the workers' BLAS).
"""
from __future__ import annotations

from collections import deque

from ratescape.errors import RatescapeError


class LocalEvaluator:
    """Evaluate chunks in this process, one at a time.

    The chunk's large matrices reuse the same buffers from chunk to chunk (``fn``'s ``buffers``):
    a result must be consumed (written) before the next chunk is submitted.
    """

    def __init__(self, fn, plan):
        self.fn, self.plan = fn, plan
        self.pending = deque()
        self.buffers = {}

    def submit(self, key, A, horizon):
        self.pending.append((key, self.fn(self.plan, A, horizon, buffers=self.buffers)))

    def ready(self):
        """Yield finished (key, result) pairs that should be written now."""
        while self.pending:
            yield self.pending.popleft()

    def drain(self):
        yield from self.ready()

    def close(self):
        pass


class DaskEvaluator:
    """Evaluate chunks on a Dask cluster, keeping a bounded number of chunks in flight.

    ``address``: a scheduler address such as ``tcp://10.0.0.5:8786``; or ``workers`` N: a local
    cluster of N single-threaded worker processes on 127.0.0.1 with no dashboard.
    """

    def __init__(self, fn, plan, *, address: str | None = None, workers: int | None = None, in_flight: int | None = None):
        try:
            from dask.distributed import Client, LocalCluster
        except ImportError:
            raise RatescapeError("Dask is not installed. Fix: pip install 'ratescape[cluster]' "
                                 "(dask and distributed)") from None
        self.cluster = None
        try:
            if address:
                self.client = Client(address, timeout="10s")
            else:
                self.cluster = LocalCluster(n_workers=int(workers), threads_per_worker=1, processes=True,
                                            host="127.0.0.1", dashboard_address=None)
                self.client = Client(self.cluster)
        except OSError as exc:
            raise RatescapeError(f"cannot reach the Dask scheduler {address!r}: {exc}. Fix: start it with "
                                 "`dask scheduler` and its workers with `dask worker ADDRESS`") from None
        self.workers = sorted(self.client.scheduler_info().get("workers", {}))   # chunks go round them
        self.turn = -1
        n = max(1, len(self.workers))
        self.in_flight = in_flight or 2 * n
        self.fn = fn
        self.plan_future = self.client.scatter(plan, broadcast=True)
        self.pending = deque()

    def submit(self, key, A, horizon):
        # the chunk's arrays travel once, to the worker that will evaluate them, as data of their
        # own (scattered); the task then names them, so the task graph stays a few hundred bytes
        # and the scheduler does not warn about a large graph
        self.turn += 1
        target = [self.workers[self.turn % len(self.workers)]] if self.workers else None
        data = self.client.scatter([A, horizon], workers=target, hash=False)
        self.pending.append((key, self.client.submit(self.fn, self.plan_future, *data, pure=False)))

    def ready(self):
        while len(self.pending) >= self.in_flight:
            key, future = self.pending.popleft()
            yield key, future.result()

    def drain(self):
        while self.pending:
            key, future = self.pending.popleft()
            yield key, future.result()

    def close(self):
        for _, future in self.pending:
            future.cancel()
        self.client.close()
        if self.cluster is not None:
            self.cluster.close()
