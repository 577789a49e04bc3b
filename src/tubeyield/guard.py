"""A wall-time guard for one command: past `numerics.time_limit` the job stops with one clear line.

Ipopt solves are bounded by the same time (its max_wall_time); the guard catches everything between them (model
builds, simulations, screening). It raises a BaseException subclass so that no `except Exception` in a job can take
it for a numerical failure and carry on.
"""

from __future__ import annotations

import contextlib
import signal
import threading


class TimeLimitReached(BaseException):
    def __init__(self, seconds: float):
        self.seconds = seconds
        super().__init__(f"the command did not finish within numerics.time_limit = {seconds:g} s")


@contextlib.contextmanager
def time_guard(seconds: float | None):
    """Raise TimeLimitReached in this (main) thread after `seconds` of wall time; a no-op elsewhere or for None."""
    if not seconds or threading.current_thread() is not threading.main_thread() or not hasattr(signal, "setitimer"):
        yield
        return

    def expired(signum, frame):
        raise TimeLimitReached(seconds)

    previous = signal.signal(signal.SIGALRM, expired)
    signal.setitimer(signal.ITIMER_REAL, seconds)
    try:
        yield
    finally:
        signal.setitimer(signal.ITIMER_REAL, 0)
        signal.signal(signal.SIGALRM, previous)
