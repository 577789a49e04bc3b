"""The Ipopt plug-in: Pyomo's sign conventions checked by finite differences, status mapping, refusals, caching."""

import pyomo.environ as pyo
import pytest
from pyomo.opt import TerminationCondition

from tubeyield.errors import SolverUnavailable
from tubeyield.solve.ipopt import NAME, termination_of


def small(p=2.0, sense=pyo.maximize, x_ub=10.0):
    m = pyo.ConcreteModel()
    m.x = pyo.Var(bounds=(0, x_ub), initialize=0.5)
    m.y = pyo.Var(bounds=(0, 10), initialize=0.5)
    m.p = pyo.Var(bounds=(p, p), initialize=p)          # a parameter: pinned by equal bounds
    m.c = pyo.Constraint(expr=m.x + m.y <= m.p)
    m.o = pyo.Objective(expr=m.x * m.y if sense == pyo.maximize else (m.x - 3) ** 2 + m.y, sense=sense)
    m.dual = pyo.Suffix(direction=pyo.Suffix.IMPORT)
    m.rc = pyo.Suffix(direction=pyo.Suffix.IMPORT)
    return m


def solve(m, **kw):
    s = pyo.SolverFactory(NAME)
    return s, s.solve(m, **kw)


def test_maximize_dual_and_parameter_sensitivity():
    # max x y s.t. x + y <= p: optimum p^2/4, so d obj/d p = p/2 = 1 at p = 2, which is also the constraint's dual.
    m = small()
    _, res = solve(m)
    assert res.solver.termination_condition == TerminationCondition.optimal
    assert pyo.value(m.o) == pytest.approx(1.0, rel=1e-8)
    assert m.dual[m.c] == pytest.approx(1.0, rel=1e-6)
    assert m.rc[m.p] == pytest.approx(1.0, rel=1e-6)
    h = 1e-5
    m2 = small(2 + h)
    solve(m2)
    assert (pyo.value(m2.o) - pyo.value(m.o)) / h == pytest.approx(m.dual[m.c], rel=1e-4)


def test_minimize_bound_reduced_cost():
    # min (x-3)^2 + y with x <= 1 active: d obj/d ub = 2 (1 - 3) = -4.
    m = small(p=5, sense=pyo.minimize, x_ub=1.0)
    solve(m)
    assert m.rc[m.x] == pytest.approx(-4.0, rel=1e-6)
    # min with the constraint active (p = 0.5, y = 0): d obj/d p = 2 (0.5 - 3) = -5
    m = small(p=0.5, sense=pyo.minimize)
    solve(m)
    assert m.dual[m.c] == pytest.approx(-5.0, rel=1e-6)


def test_built_solver_is_reused_for_new_parameter_values():
    s = pyo.SolverFactory(NAME)
    m = small()
    s.solve(m)
    assert len(s._built) == 1
    m.p.setlb(3.0)
    m.p.setub(3.0)
    s.solve(m, reuse_structure=True)
    assert len(s._built) == 1 and s.last_timing["nl_write"] < 1e-3
    assert pyo.value(m.o) == pytest.approx(2.25, rel=1e-8)
    m2 = small(p=4.0)                                 # another model object of the same structure
    s.solve(m2)
    assert len(s._built) == 1 and pyo.value(m2.o) == pytest.approx(4.0, rel=1e-8)


def test_infeasible_status():
    m = small()
    m.c2 = pyo.Constraint(expr=m.x + m.y >= 5)
    _, res = solve(m)
    assert res.solver.termination_condition == TerminationCondition.infeasible


def test_iteration_limit_and_options_pass_through():
    m = small()
    _, res = solve(m, options={"max_iter": 1})
    assert res.solver.termination_condition == TerminationCondition.maxIterations


def test_unknown_option_is_refused_clearly():
    with pytest.raises(SolverUnavailable, match="Ipopt refused an option"):
        solve(small(), options={"no_such_option": 3})


def test_integer_variables_are_refused():
    m = small()
    m.n = pyo.Var(domain=pyo.Integers, bounds=(0, 3))
    m.cn = pyo.Constraint(expr=m.n >= m.x)
    with pytest.raises(SolverUnavailable, match="integer"):
        solve(m)


def test_unsupported_operator_is_refused_clearly():
    m = small()
    m.c3 = pyo.Constraint(expr=pyo.Expr_if(IF=m.x >= 1, THEN=m.y, ELSE=m.x) <= 5)
    with pytest.raises(SolverUnavailable, match="casadi cannot read"):
        solve(m)


@pytest.mark.parametrize("status,condition", [
    ("Solve_Succeeded", TerminationCondition.optimal),
    ("Solved_To_Acceptable_Level", TerminationCondition.locallyOptimal),
    ("Infeasible_Problem_Detected", TerminationCondition.infeasible),
    ("Maximum_Iterations_Exceeded", TerminationCondition.maxIterations),
    ("Maximum_WallTime_Exceeded", TerminationCondition.maxTimeLimit),
    ("Diverging_Iterates", TerminationCondition.unbounded),
    ("Invalid_Number_Detected", TerminationCondition.solverFailure),
    ("something new", TerminationCondition.error),
])
def test_status_mapping(status, condition):
    assert termination_of(status)[1] == condition


def test_the_bundled_blas_runs_one_thread_unless_the_user_chose(monkeypatch):
    # solve/ipopt.py: casadi's OpenBLAS threads made a 50-species network 5x slower and Ipopt's path vary run to run
    import ctypes
    import os

    import casadi

    import tubeyield.solve.ipopt as ipopt
    lib = ctypes.CDLL(os.path.join(os.path.dirname(casadi.__file__), ipopt.BLAS_LIBRARY))
    monkeypatch.setattr(ipopt, "_blas_threads_set", False)
    monkeypatch.setenv("OPENBLAS_NUM_THREADS", "2")
    assert ipopt.single_threaded_blas() is None             # the user's choice stands
    monkeypatch.delenv("OPENBLAS_NUM_THREADS")
    lib.openblas_set_num_threads(2)
    had = lib.openblas_get_num_threads()                   # 2, or fewer on a machine with fewer cores
    assert ipopt.single_threaded_blas() == had
    assert lib.openblas_get_num_threads() == 1
    assert ipopt.single_threaded_blas() is None             # once per process
    _, res = solve(small())
    assert res.solver.termination_condition == TerminationCondition.optimal
    assert lib.openblas_get_num_threads() == 1
