"""Where sweep scenarios run: a local process pool or a Dask cluster, behind one small interface.

    executor.share(obj) -> handle      send a large object once (Dask scatters it; locally it is pickled per task)
    executor.submit(fn, *args) -> future
    executor.as_completed(futures)     futures in the order they finish
    executor.shutdown(cancel)          stop; cancel what has not started
"""

from __future__ import annotations

import concurrent.futures as cf
import multiprocessing
import os
import signal


def _ignore_sigint() -> None:
    # Ctrl-C goes to the whole process group: the driver handles it and shuts the workers down.
    signal.signal(signal.SIGINT, signal.SIG_IGN)


class LocalExecutor:
    """A pool of worker processes (spawned: each imports the solver stack once and keeps its built models)."""

    name = "local"

    def __init__(self, workers: int | None = None):
        self.workers = workers or os.cpu_count() or 1
        # One thread per worker for the linear algebra: the pool already uses every core.
        for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
            os.environ.setdefault(var, "1")
        self._start()

    def _start(self) -> None:
        self.pool = cf.ProcessPoolExecutor(max_workers=self.workers, mp_context=multiprocessing.get_context("spawn"),
                                           initializer=_ignore_sigint)

    def restart(self) -> None:
        """After a worker process died (the pool is then broken): a fresh pool."""
        self.pool.shutdown(wait=False, cancel_futures=True)
        self._start()

    def share(self, obj):
        return obj

    def submit(self, fn, *args):
        return self.pool.submit(fn, *args)

    def as_completed(self, futures):
        return cf.as_completed(futures)

    def shutdown(self, cancel: bool = False) -> None:
        self.pool.shutdown(wait=not cancel, cancel_futures=cancel)

    def describe(self) -> str:
        return f"{self.workers} local process(es)"


class DaskExecutor:
    """A dask.distributed client on an existing scheduler. A task lost with its worker is rerun by the scheduler."""

    name = "dask"

    def __init__(self, address: str, timeout: float = 30.0):
        from distributed import Client
        self.client = Client(address, timeout=timeout)
        self.address = address

    def share(self, obj):
        return self.client.scatter(obj, broadcast=True)

    def submit(self, fn, *args):
        return self.client.submit(fn, *args, pure=False)

    def as_completed(self, futures):
        from distributed import as_completed
        return as_completed(list(futures))

    def restart(self) -> None:
        pass

    def shutdown(self, cancel: bool = False) -> None:
        self.client.close()

    def describe(self) -> str:
        n = len(self.client.scheduler_info().get("workers", {}))
        return f"Dask scheduler {self.address} ({n} worker(s))"
