"""One status vocabulary for every result, and the one place that maps statuses to exit codes.

A number is reported as optimal only when the solver converged (Ipopt's Solve_Succeeded, not merely an
"acceptable" level), every limit holds, and the independent re-simulation agrees with the model within the study's
tolerance. A converged point that fails that check is `unverified`: it is shown, flagged, and never called optimal.
"""

from __future__ import annotations

OPTIMAL = "optimal"            # converged, limits met, verified by re-simulation
UNVERIFIED = "unverified"      # converged, but the re-simulation disagrees (or the solver stopped at an acceptable
                               # level only, or a limit between mesh points could not be held): flagged
INFEASIBLE = "infeasible"      # no operating point meets every limit; the closest point is reported
FAILED = "failed"              # the computation did not finish (no start converged, a simulation failed)
DONE = "done"                  # a job of many solves finished (front: every level verified)
PARTIAL = "partial"            # a job of many solves finished with some parts failed or unverified
SINGLE_POINT = "single point"  # a front with no trade-off: one point is best in both metrics
EVALUATED = "evaluated"        # a simulation at a given point (no optimization)
LOST = "lost"                  # a sweep scenario lost with its worker (infrastructure, not numerics): resumed

SOLVED = (OPTIMAL, UNVERIFIED)  # results that carry numbers (an unverified one is flagged wherever it is shown)

EXIT_OK, EXIT_FAILED, EXIT_USER, EXIT_INFEASIBLE, EXIT_UNVERIFIED = 0, 1, 2, 3, 4

EXIT_CODES = {OPTIMAL: EXIT_OK, DONE: EXIT_OK, SINGLE_POINT: EXIT_OK, EVALUATED: EXIT_OK,
              UNVERIFIED: EXIT_UNVERIFIED, PARTIAL: EXIT_UNVERIFIED, INFEASIBLE: EXIT_INFEASIBLE, FAILED: EXIT_FAILED}

MEANING = {
    OPTIMAL: "the best point found, converged and verified by an independent re-simulation",
    UNVERIFIED: "a converged point that did NOT pass its own verification: do not use its numbers without review",
    INFEASIBLE: "no operating point within the decision ranges meets every limit; the closest point is shown",
    FAILED: "the computation did not finish",
    DONE: "finished; every part verified",
    PARTIAL: "finished, but some parts failed or are unverified",
    SINGLE_POINT: "no trade-off: one point is best in both metrics",
    EVALUATED: "simulated at the given point",
    LOST: "lost with its worker, more often than the retries allow; a resume runs it again",
}


def exit_code(status: str) -> int:
    """The command line's exit code for a result status (README: exit codes)."""
    return EXIT_CODES.get(status, EXIT_FAILED)
