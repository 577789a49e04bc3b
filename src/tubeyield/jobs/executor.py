"""Where sweep scenarios run: a local process pool or a Dask cluster, behind one small interface.

    executor.share(obj) -> handle      what tasks receive for an object shared by all (pickled with each task)
    executor.submit(fn, *args) -> future
    executor.wait_some(futures, t)     the futures finished within t seconds (an empty list when none did)
    executor.result(future)            a finished future's value; raises if it failed or its value was lost
    executor.workers()                 how many workers can take tasks now
    executor.restart()                 after a local worker process died: a fresh pool
    executor.shutdown(cancel)          stop; cancel what has not started

Local worker processes stop when the sweep's main process dies, however it dies (even SIGKILL): each watches its
parent and exits when it is gone, so no orphan goes on computing.
"""

from __future__ import annotations

import concurrent.futures as cf
import logging
import multiprocessing
import os
import signal
import threading
import time


PARENT_POLL = 0.5     # s between a worker's checks that its parent is alive
RESULT_WAIT = 10.0    # s to fetch a finished Dask task's value before it counts as lost with its worker


def _worker_init(parent: int) -> None:
    # Ctrl-C goes to the whole process group: the driver handles it and shuts the workers down.
    signal.signal(signal.SIGINT, signal.SIG_IGN)

    def watch() -> None:
        while True:
            time.sleep(PARENT_POLL)
            if os.getppid() != parent:      # the parent died: this process was re-parented
                os._exit(1)

    threading.Thread(target=watch, name="tubeyield-parent-watch", daemon=True).start()


class LocalExecutor:
    """A pool of worker processes (spawned: each imports the solver stack once and keeps its built models)."""

    name = "local"

    def __init__(self, workers: int | None = None):
        self.n_workers = workers or os.cpu_count() or 1
        # One thread per worker for the linear algebra: the pool already uses every core.
        for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
            os.environ.setdefault(var, "1")
        self._start()

    def _start(self) -> None:
        self.pool = cf.ProcessPoolExecutor(max_workers=self.n_workers, mp_context=multiprocessing.get_context("spawn"),
                                           initializer=_worker_init, initargs=(os.getpid(),))

    def restart(self) -> None:
        """After a worker process died (the pool is then broken): a fresh pool."""
        self.pool.shutdown(wait=False, cancel_futures=True)
        self._start()

    def share(self, obj):
        return obj

    def submit(self, fn, *args):
        return self.pool.submit(fn, *args)

    def wait_some(self, futures, timeout: float) -> list:
        return list(cf.wait(futures, timeout=timeout, return_when=cf.FIRST_COMPLETED).done)

    def result(self, future):
        return future.result()

    def workers(self) -> int:
        return self.n_workers

    def shutdown(self, cancel: bool = False) -> None:
        self.pool.shutdown(wait=not cancel, cancel_futures=cancel)

    def describe(self) -> str:
        return f"{self.n_workers} local process(es)"


class _LostWorkerNoise(logging.Filter):
    """Drops the client's own reports of what the sweep's driver already handles when a worker dies: a value that
    could not be gathered from a dead worker ("Couldn't gather ... rescheduling"), and the internal AllExit of an
    abandoned gather that asyncio reports as "Task exception was never retrieved" with a traceback. The driver
    counts such a task as lost and resubmits it; the user sees that in one line, not as a traceback."""

    def filter(self, record: logging.LogRecord) -> bool:
        exc = record.exc_info[1] if record.exc_info else None
        if exc is not None and type(exc).__name__ == "AllExit":
            return False
        text = record.getMessage()
        return not ("AllExit" in text or text.startswith("Couldn't gather"))


def _quiet_client_logs() -> None:
    noise = _LostWorkerNoise()
    for name in ("asyncio", "distributed.client"):
        logger = logging.getLogger(name)
        if not any(isinstance(f, _LostWorkerNoise) for f in logger.filters):
            logger.addFilter(noise)


class DaskExecutor:
    """A dask.distributed client on an existing scheduler. A task lost with its worker is rerun by the scheduler."""

    name = "dask"

    def __init__(self, address: str, timeout: float = 30.0):
        from distributed import Client
        _quiet_client_logs()
        self.client = Client(address, timeout=timeout)
        self.address = address

    def share(self, obj):
        # Sent with every task, not scattered: scattered data lives on workers, and when the workers holding it
        # die every task that needs it is cancelled ("already forgotten"). A study is a few kilobytes.
        return obj

    def submit(self, fn, *args):
        return self.client.submit(fn, *args, pure=False)

    def wait_some(self, futures, timeout: float) -> list:
        from distributed import wait
        from distributed.client import FuturesCancelledError
        try:
            wait(list(futures), timeout=timeout, return_when="FIRST_COMPLETED")
        except (TimeoutError, FuturesCancelledError):
            pass            # cancelled futures are done too: their result() raises, and the driver resubmits them
        return [f for f in futures if f.done()]

    def result(self, future):
        # A finished task's value lives on its worker: when that worker has died, result() asks the scheduler to
        # compute it again and would wait for a worker forever (seen with the only worker killed). Bounded here;
        # the driver then counts the task as lost with its worker and resubmits it.
        return future.result(timeout=RESULT_WAIT)

    def workers(self) -> int:
        return len(self.client.scheduler_info().get("workers", {}))

    def restart(self) -> None:
        pass

    def shutdown(self, cancel: bool = False) -> None:
        self.client.close(timeout=10)

    def describe(self) -> str:
        n = len(self.client.scheduler_info().get("workers", {}))
        return f"Dask scheduler {self.address} ({n} worker(s))"
