"""Caps on every size a study can ask for, checked when the study is read (README: "Caps").

Each cap is far above what a study needs and well below what hangs the machine or exhausts its memory (measured
before the caps: `elements = 1e7` ran out of memory at 7.9 GB, `sweep.samples = 1e9` asked for a 29.8 GiB array,
`numerics.starts = 1e6` reached 3.9 GB, a 5,000-species chain kept `check` busy for more than 300 s).
"""

from __future__ import annotations

from tubeyield.errors import StudyError

MAX_SPECIES = 500
MAX_REACTIONS = 1000
MAX_ELEMENTS = 2000          # reactor.elements and numerics.max_elements
MAX_ZONES = 200
MAX_TANKS = 200
MAX_STARTS = 64
MAX_FRONT_POINTS = 201
MAX_WINDOW_POINTS = 400      # per axis
MAX_WINDOW_CELLS = 40_000
MAX_SCENARIOS = 100_000      # sweep: samples times the grid's combinations
MAX_CANDIDATES = 100
MAX_EXPERIMENTS = 500
MAX_SAMPLES = 10_000        # sampling times in one experiment
MAX_FILE_BYTES = 5_000_000   # a study or network file
MAX_DAMKOHLER = 1e12         # k(T) tau c^(n-1) at the hottest temperature and longest residence time of the study
MAX_TIME_LIMIT = 7 * 86400.0  # numerics.time_limit and sweep.time_limit, s


def at_most(value: float, cap: float, key: str, what: str) -> None:
    """A StudyError naming `key` when `value` exceeds `cap`."""
    if value > cap:
        raise StudyError(key, f"{what} of at most {cap:,g} (tubeyield's cap), got {value:,g}")
