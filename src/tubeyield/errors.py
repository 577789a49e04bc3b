"""One exception family for user mistakes.

A `StudyError` always carries the file, the key path inside it and what was expected, so the command line can print
one line and exit 2 without a traceback.
"""

from __future__ import annotations


class StudyError(Exception):
    """A mistake in a study file or in a command-line setting."""

    def __init__(self, key: str, expected: str, *, file: str | None = None):
        self.file = file
        self.key = key
        self.expected = expected
        super().__init__(self.line())

    def line(self) -> str:
        where = f"{self.file}: " if self.file else ""
        return f"{where}{self.key or '(top level)'}: {self.expected}"

    def in_file(self, file: str) -> "StudyError":
        """The same error, attributed to `file` if it names none yet."""
        if self.file is None:
            self.file = file
            self.args = (self.line(),)
        return self


class SolverUnavailable(Exception):
    """The solver cannot take this model (integer variables, unsupported operators) or cannot be started."""


class SolverOptionRefused(SolverUnavailable):
    """Ipopt does not know an option or refuses its value: a mistake in the study's numerics.ipopt."""


class SimulationFailed(Exception):
    """The reference simulation could not integrate (or solve) the balances at an operating point: a numerical
    outcome of that point, not a programming error (those propagate as themselves)."""
