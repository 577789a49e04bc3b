"""A Pyomo solver plug-in: Ipopt as bundled in the casadi wheel, reached through Pyomo's AMPL NL writer.

`SolverFactory("tubeyield-ipopt")` writes the model's NL file (no labels, no presolve, so every constraint keeps its
dual), reads it with casadi's NL importer, expands the expression graph to SX (fast evaluations; no JIT), solves with
Ipopt and loads back primal values, constraint duals (`model.dual` import suffix) and bound reduced costs
(`model.rc`), in Pyomo's sign convention (that of Ipopt's own AMPL driver):

    dual = -sense * lam_g,   rc = -sense * lam_x          (sense +1 minimize, -1 maximize)

so that a dual is the change of the optimal objective per unit increase of the constraint's bound.

Why NL text: casadi's NL reader builds the expression graph in C++. Building it from Pyomo's expression trees in
Python instead (a visitor making one casadi SX operation per node) was measured on the demo model (40 elements, about
20 000 nodes; 2026-12-05): 0.34 s, against 0.07 s for the NL write and 0.02 s for casadi's reading. The walk alone,
with plain floats in place of SX, took 0.025 s: the cost is the Python call into casadi at every node.

Built solvers are cached per model structure and option set. The structure key is the NL text without the segments
that hold numbers a re-solve may change (variable bounds `b`, constraint bounds `r`, starting points `x`, `d`), so a
model whose parameters are variables pinned by equal bounds is re-solved with new values without a rebuild. Pinned
variables (lower bound == upper bound) are handed to casadi as parameters `p`: Ipopt does not see them, and their
sensitivities (`rc` on them) come from casadi's lam_p.

References
----------
A. Waechter and L. T. Biegler, "On the implementation of an interior-point filter line-search algorithm for
large-scale nonlinear programming", Math. Program. 106 (2006) 25-57 (Ipopt).
J. A. E. Andersson, J. Gillis, G. Horn, J. B. Rawlings and M. Diehl, "CasADi: a software framework for nonlinear
optimization and optimal control", Math. Program. Comput. 11 (2019) 1-36.
D. M. Gay, "Writing .nl files", Sandia report SAND2005-7907P (2005): the NL format.
"""

from __future__ import annotations

import hashlib
import io
import os
import tempfile
import time
import weakref
from collections import OrderedDict
from dataclasses import dataclass, field

import numpy as np
from pyomo.opt import SolverFactory, SolverResults, SolverStatus, TerminationCondition
from pyomo.repn.plugins.nl_writer import NLWriter

from tubeyield.errors import SolverOptionRefused, SolverUnavailable
from tubeyield.modeling import pyo
from tubeyield.solve.options import DEFAULT_OPTIONS, WARM_OPTIONS

NAME = "tubeyield-ipopt"

_STATUS = {
    "Solve_Succeeded": (SolverStatus.ok, TerminationCondition.optimal),
    "Solved_To_Acceptable_Level": (SolverStatus.warning, TerminationCondition.locallyOptimal),
    "Feasible_Point_Found": (SolverStatus.warning, TerminationCondition.feasible),
    "Infeasible_Problem_Detected": (SolverStatus.warning, TerminationCondition.infeasible),
    "Maximum_Iterations_Exceeded": (SolverStatus.warning, TerminationCondition.maxIterations),
    "Maximum_CpuTime_Exceeded": (SolverStatus.warning, TerminationCondition.maxTimeLimit),
    "Maximum_WallTime_Exceeded": (SolverStatus.warning, TerminationCondition.maxTimeLimit),
    "Diverging_Iterates": (SolverStatus.warning, TerminationCondition.unbounded),
    "User_Requested_Stop": (SolverStatus.aborted, TerminationCondition.userInterrupt),
    "Restoration_Failed": (SolverStatus.warning, TerminationCondition.other),
    "Search_Direction_Becomes_Too_Small": (SolverStatus.warning, TerminationCondition.other),
    "Not_Enough_Degrees_Of_Freedom": (SolverStatus.error, TerminationCondition.invalidProblem),
    "Invalid_Problem_Definition": (SolverStatus.error, TerminationCondition.invalidProblem),
    "Invalid_Option": (SolverStatus.error, TerminationCondition.error),
    "Invalid_Number_Detected": (SolverStatus.error, TerminationCondition.solverFailure),
    "Error_In_Step_Computation": (SolverStatus.error, TerminationCondition.solverFailure),
    "Insufficient_Memory": (SolverStatus.error, TerminationCondition.solverFailure),
    "Internal_Error": (SolverStatus.error, TerminationCondition.solverFailure),
    "Unrecoverable_Exception": (SolverStatus.error, TerminationCondition.solverFailure),
    "NonIpopt_Exception_Thrown": (SolverStatus.error, TerminationCondition.solverFailure),
}

# Only Solve_Succeeded counts as converged; "acceptable" stops are retried or flagged by the jobs.
OK_CONDITIONS = (TerminationCondition.optimal,)
ACCEPTABLE_CONDITIONS = (TerminationCondition.locallyOptimal,)
# a solve that stopped without a verdict on the problem: iteration limit, failed restoration, tiny search direction
STALLED_CONDITIONS = (TerminationCondition.maxIterations, TerminationCondition.other)


def termination_of(return_status: str) -> tuple[SolverStatus, TerminationCondition]:
    return _STATUS.get(return_status, (SolverStatus.error, TerminationCondition.error))


@dataclass
class _Built:
    """A built casadi solver for one structure and option set, with the last multipliers for warm starts."""
    solver: object
    free: np.ndarray              # NL indices of the variables Ipopt optimizes
    pinned: np.ndarray            # NL indices handed over as parameters
    build_seconds: float = 0.0


@dataclass
class _Written:
    """What one NL write of a model gives: variables and constraints in NL order, constraint bounds, objective."""
    variables: list
    constraints: list
    sense: int
    lbg: np.ndarray
    ubg: np.ndarray
    key_text: str
    nl_text: str = field(repr=False, default="")


@SolverFactory.register(NAME, doc="Ipopt bundled in the casadi wheel, through Pyomo's NL writer (tubeyield)")
class BundledIpopt:
    """A Pyomo solver object (legacy interface: `solve`, `available`, `options`)."""

    def __init__(self, **kwds):
        self.options = dict(kwds.get("options", {}))
        self.max_cached = int(kwds.get("max_cached", 8))
        self._built: OrderedDict[tuple, _Built] = OrderedDict()
        # Last multipliers per structure (shared by the solvers built for it with different options), for warm starts.
        self._multipliers: OrderedDict[tuple, tuple] = OrderedDict()
        self._written: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()
        self._last: "weakref.WeakKeyDictionary" = weakref.WeakKeyDictionary()   # model -> (written, built) last used
        self.last_timing: dict[str, float] = {}
        self.last_stats: dict = {}
        self._last_multipliers = None
        self._last_structure = None

    # ------------------------------------------------------------------------------------------- Pyomo's interface

    def available(self, exception_flag: bool = True) -> bool:
        import importlib.util
        if importlib.util.find_spec("casadi") is None:
            if exception_flag:
                raise SolverUnavailable("the casadi package (which bundles Ipopt) is not installed")
            return False
        return True

    def license_is_valid(self) -> bool:
        return True

    def version(self):
        import casadi
        return tuple(int(p) for p in casadi.__version__.split(".")[:3])

    def warm_start_capable(self) -> bool:
        return True

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False

    def solve(self, model, *, tee: bool = False, load_solutions: bool = True, options: dict | None = None,
              warmstart: bool = False, reuse_structure: bool = False, **kwds) -> SolverResults:
        """Solve `model`. `warmstart` starts from the current values and the multipliers of the last solve of the
        same structure; `reuse_structure` skips the NL write when this model object was written before and only
        variable values and bounds have changed since (the caller's promise)."""
        t0 = time.perf_counter()
        (written, built, structure, multipliers, has_warm, x0, lbx, ubx, t_write,
         t_build) = self._ready(model, options, warmstart, reuse_structure, tee)

        args = dict(x0=x0[built.free], lbx=lbx[built.free], ubx=ubx[built.free], lbg=written.lbg, ubg=written.ubg,
                    p=x0[built.pinned])
        if has_warm:
            args.update(lam_x0=multipliers[0], lam_g0=multipliers[1])
        t2 = time.perf_counter()
        sol = built.solver(**args)
        t_solve = time.perf_counter() - t2
        stats = built.solver.stats()
        self.remember_multipliers((np.array(sol["lam_x"]).ravel(), np.array(sol["lam_g"]).ravel()), structure)

        self._last[model] = (written, built)
        status_text = stats.get("return_status", "unknown")
        solver_status, condition = termination_of(status_text)
        if load_solutions:
            _load(model, written, built, sol)
        self.last_timing = {"nl_write": t_write, "solver_build": t_build, "ipopt": t_solve,
                            "total": time.perf_counter() - t0, "built_new": built.build_seconds if t_build > 1e-3 else 0.0}
        self.last_stats = {"return_status": status_text, "iterations": int(stats.get("iter_count", -1)),
                           "objective": float(sol["f"]) * (-1 if written.sense < 0 else 1)}

        results = SolverResults()
        results.solver.name = NAME
        results.solver.status = solver_status
        results.solver.termination_condition = condition
        results.solver.message = status_text
        results.solver.return_code = 0 if condition in OK_CONDITIONS else 1
        results.solver.wallclock_time = self.last_timing["total"]
        results.solver.iterations = self.last_stats["iterations"]
        results.problem.number_of_variables = len(written.variables)
        results.problem.number_of_constraints = len(written.constraints)
        results.problem.lower_bound = results.problem.upper_bound = self.last_stats["objective"]
        return results

    def build(self, model, *, options: dict | None = None, reuse_structure: bool = False, tee: bool = False) -> None:
        """Write `model` and build its solver for `options`, as `solve` would, without solving: forked copies of the
        process then share the built solver (solve/forked.py)."""
        t0 = time.perf_counter()
        *_, t_write, t_build = self._ready(model, options, False, reuse_structure, tee)
        self.last_timing = {"nl_write": t_write, "solver_build": t_build, "ipopt": 0.0,
                            "total": time.perf_counter() - t0}

    def last_multipliers(self):
        """(lam_x, lam_g) of the last solve, to hand to remember_multipliers in a forked copy's parent; None before
        any solve."""
        return self._last_multipliers

    def remember_multipliers(self, pair: tuple, structure: tuple | None = None) -> None:
        """Take `pair` as the last multipliers of `structure` (default: that of the last solve or build), from which
        a warm start of that structure starts: a solve's own, or those of a solve in a forked copy of this process
        (solve/forked.py), so that the copy leaves the same state as solving here would have."""
        structure = self._last_structure if structure is None else structure
        self._multipliers[structure] = pair
        self._multipliers.move_to_end(structure)
        while len(self._multipliers) > self.max_cached:
            self._multipliers.popitem(last=False)
        self._last_multipliers = pair

    def _ready(self, model, options, warmstart: bool, reuse_structure: bool, tee: bool):
        """The written NLP and the built solver for a solve of `model`, with the start, bounds and warm-start
        multipliers, and the seconds spent writing and building."""
        t0 = time.perf_counter()
        opts = {**DEFAULT_OPTIONS, **self.options, **(options or {})}
        written = self._written.get(model) if reuse_structure else None
        if written is None:
            written = _write_nl(model)
            self._written[model] = written
        t_write = time.perf_counter() - t0

        x0 = np.array([v.value if v.value is not None else _interior(v) for v in written.variables], dtype=float)
        lbx = np.array([-np.inf if v.lb is None else v.lb for v in written.variables], dtype=float)
        ubx = np.array([np.inf if v.ub is None else v.ub for v in written.variables], dtype=float)
        pinned_mask = lbx == ubx
        x0[pinned_mask] = lbx[pinned_mask]

        structure = (written.key_text, tuple(np.nonzero(pinned_mask)[0]))
        self._last_structure = structure
        multipliers = self._multipliers.get(structure)
        has_warm = warmstart and multipliers is not None
        key = structure + (tuple(sorted((k, str(v)) for k, v in opts.items())), bool(tee), bool(has_warm))
        t1 = time.perf_counter()
        built = self._built.get(key)
        if built is None:
            built = _build(written, pinned_mask, {**opts, **(WARM_OPTIONS if has_warm else {})}, tee)
            self._built[key] = built
            while len(self._built) > self.max_cached:
                self._built.popitem(last=False)
        else:
            self._built.move_to_end(key)
        t_build = time.perf_counter() - t1
        return written, built, structure, multipliers, has_warm, x0, lbx, ubx, t_write, t_build

    def constraint_jacobian(self, model):
        """The Jacobian of every constraint body with respect to the variables Ipopt optimized in the last solve of
        `model`, at its current values, evaluated exactly by the solver's own derivative function (casadi's
        nlp_jac_g, SX): (scipy CSR matrix, constraints in NL order, the free variables in NL order). For the
        sensitivities of a solution to its parameters (the implicit function theorem on the equality
        constraints)."""
        from scipy import sparse
        last = self._last.get(model)
        if last is None:
            raise SolverUnavailable(f"{NAME}: constraint_jacobian needs a solve of this model first")
        written, built = last
        values = np.array([v.value if v.value is not None else _interior(v) for v in written.variables], dtype=float)
        fn = built.solver.get_function("nlp_jac_g")
        J = fn(values[built.free], values[built.pinned])[1]
        rows, cols = J.sparsity().get_triplet()
        matrix = sparse.csr_matrix((np.array(J.nonzeros(), dtype=float), (rows, cols)), shape=J.shape)
        return matrix, list(written.constraints), [written.variables[i] for i in built.free]


# ---------------------------------------------------------------------------------------------------------- writing


def _interior(v) -> float:
    lb, ub = v.lb, v.ub
    if lb is not None and ub is not None:
        return 0.5 * (lb + ub)
    if lb is not None:
        return lb + 1.0
    if ub is not None:
        return ub - 1.0
    return 0.0


def _write_nl(model) -> _Written:
    for v in model.component_data_objects(pyo.Var, active=True, descend_into=True):
        if not v.fixed and not v.is_continuous():
            raise SolverUnavailable(f"{NAME} solves continuous problems only; variable {v.name} is "
                                    f"{'binary' if v.is_binary() else 'integer'} (use a MILP/MINLP solver)")
    objectives = list(model.component_data_objects(pyo.Objective, active=True))
    if len(objectives) != 1:
        raise SolverUnavailable(f"{NAME} needs exactly one active objective, the model has {len(objectives)}")
    stream = io.StringIO()
    import gc
    was = gc.isenabled()
    gc.disable()                 # the writer allocates many objects; see tubeyield.reactor.paused_gc
    try:
        info = NLWriter().write(model, stream, symbolic_solver_labels=False, linear_presolve=False,
                                skip_trivial_constraints=True, scale_model=False)
    finally:
        if was:
            gc.enable()
    text = stream.getvalue()
    lbg, ubg, key_text = _constraint_bounds_and_key(text, len(info.variables), len(info.constraints))
    sense = 1 if objectives[0].sense == pyo.minimize else -1
    return _Written(list(info.variables), list(info.constraints), sense, lbg, ubg, key_text, text)


def _constraint_bounds_and_key(text: str, n_var: int, n_con: int):
    """Read the `r` segment (constraint bounds) and return the NL text without the numeric segments b, r, x, d."""
    lines = text.split("\n")
    lbg = np.full(n_con, -np.inf)
    ubg = np.full(n_con, np.inf)
    kept = []
    i = 0
    while i < len(lines):
        line = lines[i]
        tag = line[:1]
        if tag == "b":
            i += 1 + n_var
            continue
        if tag == "r":
            for k in range(n_con):
                parts = lines[i + 1 + k].split("#")[0].split()
                kind = int(parts[0])
                if kind == 0:
                    lbg[k], ubg[k] = float(parts[1]), float(parts[2])
                elif kind == 1:
                    ubg[k] = float(parts[1])
                elif kind == 2:
                    lbg[k] = float(parts[1])
                elif kind == 4:
                    lbg[k] = ubg[k] = float(parts[1])
                elif kind == 5:
                    raise SolverUnavailable(f"{NAME} does not take complementarity constraints")
            i += 1 + n_con
            continue
        if tag in ("x", "d"):
            count = int(line[1:].split("#")[0].split()[0])
            i += 1 + count
            continue
        kept.append(line)
        i += 1
    return lbg, ubg, hashlib.sha1("\n".join(kept).encode()).hexdigest()


# --------------------------------------------------------------------------------------------------------- building


def _import(written: _Written):
    """casadi's reading of the NL text: (builder, variables, constraint expressions), in NL order."""
    import casadi
    builder = casadi.NlpBuilder()
    fd, path = tempfile.mkstemp(suffix=".nl")
    try:
        with os.fdopen(fd, "w") as fh:
            fh.write(written.nl_text)
        try:
            builder.import_nl(path, {"verbose": False})
        except RuntimeError as exc:
            raise SolverUnavailable(f"{NAME}: casadi cannot read this model's NL file; it uses an operator casadi's "
                                    f"NL reader does not support (external functions, logical or piecewise "
                                    f"expressions, min/max, if-then-else): {str(exc).splitlines()[-1]}") from None
    finally:
        os.unlink(path)
    return builder, list(builder.x), list(builder.g)     # SWIG lists are copied on every access: read once


# The OpenBLAS that the casadi wheel bundles for MUMPS starts one thread per core. On the collocation KKT systems
# (small dense fronts) the threads spin rather than work, and their reductions make round-off, and so Ipopt's path,
# differ from run to run. Measured on the bench's invented 50-species stiff network, one solve on 40 elements (2-core
# x86_64): 60 iterations in 14.4 s, 13.7 s of it system time, with the threads; 15 iterations in 2.6 s with one.
# One thread is set unless the user chose a number (OPENBLAS_NUM_THREADS); numpy's own OpenBLAS is not touched.
BLAS_LIBRARY = "libcasadi-tp-openblas.so"
_blas_threads_set = False


def single_threaded_blas() -> int | None:
    """Set casadi's bundled OpenBLAS to one thread (once per process; not when OPENBLAS_NUM_THREADS is set).
    Returns the number of threads it had, or None when nothing was done."""
    global _blas_threads_set
    if _blas_threads_set or "OPENBLAS_NUM_THREADS" in os.environ:
        return None
    _blas_threads_set = True
    import ctypes
    import casadi
    path = os.path.join(os.path.dirname(casadi.__file__), BLAS_LIBRARY)
    try:
        lib = ctypes.CDLL(path)
        before = int(lib.openblas_get_num_threads())
        lib.openblas_set_num_threads(1)
    except (OSError, AttributeError):
        return None              # a casadi build without its own OpenBLAS: nothing to set
    return before


def _build(written: _Written, pinned_mask: np.ndarray, opts: dict, tee: bool) -> _Built:
    import casadi

    single_threaded_blas()
    t0 = time.perf_counter()
    builder, xs, gs = _import(written)
    free = np.nonzero(~pinned_mask)[0]
    pinned = np.nonzero(pinned_mask)[0]
    nlp = {"x": casadi.vertcat(*[xs[i] for i in free]),
           "p": casadi.vertcat(*[xs[i] for i in pinned]) if len(pinned) else casadi.MX(0, 1),
           "f": builder.f,
           "g": casadi.vertcat(*gs) if gs else casadi.MX(0, 1)}
    ipopt_opts = {k: v for k, v in opts.items()}
    ipopt_opts.setdefault("print_level", 5 if tee else 0)
    ipopt_opts.setdefault("sb", "yes")
    try:
        solver = casadi.nlpsol("tubeyield", "ipopt", nlp, {"expand": True, "print_time": False, "error_on_fail": False,
                                                          # evaluation errors (a NaN at a trial point) are
                                                          # handled by Ipopt's line search: not for the terminal
                                                          "show_eval_warnings": bool(tee),
                                                          "ipopt": ipopt_opts})
    except RuntimeError as exc:
        raise SolverOptionRefused(f"{NAME}: Ipopt refused an option ({str(exc).splitlines()[-1]})") from None
    return _Built(solver, free, pinned, build_seconds=time.perf_counter() - t0)


# ---------------------------------------------------------------------------------------------------------- loading


def _load(model, written: _Written, built: _Built, sol) -> None:
    x = np.array(sol["x"]).ravel()
    lam_x = np.array(sol["lam_x"]).ravel()
    lam_g = np.array(sol["lam_g"]).ravel()
    lam_p = np.array(sol["lam_p"]).ravel() if len(built.pinned) else np.zeros(0)
    for i, value in zip(built.free, x):
        written.variables[i].set_value(float(value), skip_validation=True)
    for i in built.pinned:                   # a pinned variable's value is its bound
        v = written.variables[i]
        v.set_value(v.lb, skip_validation=True)
    sense = written.sense
    dual = _import_suffix(model, "dual")
    if dual is not None:
        for con, lam in zip(written.constraints, lam_g):
            dual[con] = float(-sense * lam)
    rc = _import_suffix(model, "rc")
    if rc is not None:
        for i, lam in zip(built.free, lam_x):
            rc[written.variables[i]] = float(-sense * lam)
        for i, lam in zip(built.pinned, lam_p):
            rc[written.variables[i]] = float(-sense * lam)


def _import_suffix(model, name: str):
    s = model.component(name)
    if isinstance(s, pyo.Suffix) and s.import_enabled():
        return s
    return None
