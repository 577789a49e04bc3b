"""Solvers: the Ipopt plug-in (casadi's bundled Ipopt through NL files), starting points, marginals."""

from __future__ import annotations

import importlib
import shutil

from pyomo.opt import SolverFactory

from tubeyield.errors import StudyError
# importing the plug-in module registers it with Pyomo's SolverFactory
from tubeyield.solve.ipopt import ACCEPTABLE_CONDITIONS, NAME, OK_CONDITIONS, STALLED_CONDITIONS


def make_solver(numerics):
    """The bundled Ipopt plug-in, or Pyomo's interface to an `ipopt` executable on PATH when the study asks."""
    if numerics.solver == "executable":
        if shutil.which("ipopt") is None:
            raise StudyError("numerics.solver", "an 'ipopt' executable on PATH for solver = 'executable'; none found "
                                                "(use solver = 'bundled' for the Ipopt in the casadi wheel)")
        return ExecutableIpopt()
    # every solve is bounded by the command's wall time (the job's own guard acts between solves)
    return SolverFactory(NAME, options={"max_wall_time": float(numerics.time_limit)})


class ExecutableIpopt:
    """Pyomo's own `ipopt` interface with the same call as the plug-in (reuse options are ignored)."""

    def __init__(self):
        # Pyomo's solver interfaces register themselves with pyomo.environ, which tubeyield.modeling does not load
        importlib.import_module("pyomo.environ")
        self._solver = SolverFactory("ipopt")
        self.last_stats = {}
        self.last_timing = {}

    def solve(self, model, *, options=None, warmstart=False, reuse_structure=False, tee=False):
        import time
        t0 = time.perf_counter()
        res = self._solver.solve(model, options=dict(options or {}), tee=tee, load_solutions=True)
        self.last_timing = {"total": time.perf_counter() - t0, "nl_write": 0.0, "solver_build": 0.0,
                            "ipopt": time.perf_counter() - t0}
        self.last_stats = {"return_status": str(res.solver.termination_condition), "iterations": -1}
        return res


__all__ = ["ACCEPTABLE_CONDITIONS", "NAME", "OK_CONDITIONS", "STALLED_CONDITIONS", "make_solver"]
