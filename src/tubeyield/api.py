"""The Python front door: one function per job, the same objects the command line prints."""

from __future__ import annotations

from tubeyield.chemistry.consistency import CheckReport, check_network
from tubeyield.study import Study, load_study

__all__ = ["CheckReport", "Study", "check", "load_study"]


def check(study: Study) -> CheckReport:
    """The network checks: stoichiometric consistency (HiGHS LP/MILP), element balances, reachability."""
    return check_network(study)
