"""Solves of one built model on several cores: forked copies of the process share its model and solver.

A multistart optimization solves the same NLP from several starting points (solve/multistart.py), and the marginal
ranges re-solve it at relaxed bounds (jobs/marginal_range.py); the solver is built once (NL write and casadi's
expansion) and every solve is a call of it. `forked_map` runs such calls in this process and in copies of it made by
fork(2), which inherit the built model and solver as they are (copy on write): nothing is pickled on the way in, and
only each task's plain result (numbers, lists, dicts) comes back through a pipe. The tasks are handed out one at a
time from a pipe of indices, so a slow start does not hold up the others.

The result is always complete and in index order: a copy that fails, is killed or returns nothing leaves its tasks
for this process to compute. Only on Linux, while no other thread runs, and when the caller asks for more than one
worker; the copies end with os._exit, so they run no exit handlers and flush none of the parent's buffered output.
"""

from __future__ import annotations

import os
import pickle
import signal
import struct
import sys
import threading

_INDEX = struct.Struct("<i")
MAX_TASKS = 4096        # their indices (16 KB) fit in a pipe's buffer before any process reads them


def usable_cores() -> int:
    """The cores this process may run on (its CPU affinity where the system tells it)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def can_fork() -> bool:
    """Linux, and this process runs no other thread: a copy holds only the forking thread, and a lock another thread
    held at that moment (the allocator's, logging's) would stay locked in it for good. Other systems solve one start
    after another: on macOS system frameworks may not survive a fork (Python's multiprocessing no longer forks there
    by default, for that reason)."""
    return sys.platform.startswith("linux") and hasattr(os, "fork") and threading.active_count() == 1


def forked_map(task, n: int, workers: int, first_here: bool = False) -> list:
    """[task(i) for i in range(n)], computed by this process and up to workers - 1 forked copies of it.

    `task(i)` must return a picklable value; an exception in a copy makes this process compute that task itself (and
    raise, if it fails here too, as the serial loop would). With `first_here`, task 0 is computed in this process,
    first, and its effects on this process stay here (the copies are made before it starts)."""
    workers = min(int(workers), n)
    if workers <= 1 or not can_fork() or n > MAX_TASKS:
        return [task(i) for i in range(n)]
    tasks_r, tasks_w = os.pipe()
    # every index is written before the copies are made, and the write end closed: an empty pipe then reads as the
    # end of the work (a read of 4 bytes from a pipe is atomic, so no two processes take the same index)
    os.write(tasks_w, b"".join(_INDEX.pack(i) for i in range(1 if first_here else 0, n)))
    os.close(tasks_w)
    children = []                                   # (pid, read end of its result pipe)
    results: dict[int, object] = {}
    finished = False
    try:
        for _ in range(workers - 1):
            out_r, out_w = os.pipe()
            pid = os.fork()
            if pid == 0:                            # the copy: work, hand back, end without any clean-up
                os.close(out_r)
                _child(task, tasks_r, out_w)
            os.close(out_w)
            children.append((pid, out_r))
        if first_here:
            results[0] = task(0)
        for i in _indices(tasks_r):
            results[i] = task(i)
        for pid, out_r in children:
            results.update({i: r for i, r in _received(out_r).items() if i not in results})
        finished = True
    finally:
        os.close(tasks_r)
        for pid, out_r in children:
            _close_quietly(out_r)
            _reap(pid, stop=not finished)
    # whatever a copy did not hand back is computed here
    return [results[i] if i in results else task(i) for i in range(n)]


def _child(task, tasks_r: int, out_w: int) -> None:
    code = 1
    try:
        signal.signal(signal.SIGINT, signal.SIG_DFL)     # Ctrl-C stops a copy at once; the parent reports it
        done = {}
        for i in _indices(tasks_r):
            done[i] = task(i)
        data = pickle.dumps(done, protocol=pickle.HIGHEST_PROTOCOL)
        view = memoryview(data)
        while view:
            view = view[os.write(out_w, view):]
        code = 0
    except BaseException:                            # noqa: BLE001 - the parent computes what is missing
        code = 1
    finally:
        os._exit(code)


def _indices(tasks_r: int):
    while True:
        chunk = os.read(tasks_r, _INDEX.size)
        if len(chunk) < _INDEX.size:
            return
        yield _INDEX.unpack(chunk)[0]


def _received(out_r: int) -> dict:
    parts = []
    while True:
        chunk = os.read(out_r, 1 << 16)
        if not chunk:
            break
        parts.append(chunk)
    try:
        got = pickle.loads(b"".join(parts))
    except Exception:                                # noqa: BLE001 - a copy that died mid-write: nothing from it
        return {}
    return got if isinstance(got, dict) else {}


def _reap(pid: int, stop: bool) -> None:
    """Wait for a copy to end; when this process was interrupted (time limit, Ctrl-C, an error), stop it first."""
    try:
        if stop:
            os.kill(pid, signal.SIGKILL)
        os.waitpid(pid, 0)
    except (ChildProcessError, ProcessLookupError):
        pass


def _close_quietly(fd: int) -> None:
    try:
        os.close(fd)
    except OSError:
        pass
