"""The optimization problem of a study: the reactor model with the study's goal (scaled) and limits, and one timed
solve. Shared by the jobs that optimize (optimize, refinement, front, window, sweep)."""

from __future__ import annotations

import time

from tubeyield.reactor import build, state_scales
from tubeyield.reactor.model import ReactorModel
from tubeyield.study.schema import Study

FRACTION_KINDS = ("conversion", "yield", "selectivity")


def goal_scale(study: Study, value: float | None) -> float:
    """The goal's typical magnitude, so that Ipopt's objective is of order one: fractions (conversion, yield,
    selectivity) are scaled only when small (a yield of 1e-6 would otherwise be lost below the tolerances), other
    metrics by the best screened value."""
    v = abs(value) if value is not None and value == value else 0.0
    if study.goal.metric.kind in FRACTION_KINDS:
        return min(1.0, max(v, 1e-9)) if v > 0 else 1.0
    return v if v > 0 else 1.0


def prepare(study: Study, mesh=None, scale_hint: float | None = None, start=None) -> ReactorModel:
    """The model with the study's goal and limits. `mesh`: a number of elements or the element edges. `start` (a
    Simulation) sets the species scales; without one, a simulation at the middle of the decision ranges does (or
    unit scales if it cannot be integrated)."""
    if start is None:
        from tubeyield.reactor.simulate import SimulationFailed, simulate
        from tubeyield.solve.multistart import SCREEN_RTOL
        mid = {d.name: 0.5 * (d.low + d.high) for d in study.decisions}
        try:
            start = simulate(study, mid, rtol=SCREEN_RTOL)
        except SimulationFailed:
            start = None
    model = build(study, mesh, state_scales(start) if start is not None else None)
    model.set_goal(study.goal.metric, study.goal.sense, goal_scale(study, scale_hint))
    model.add_limits(study.goal.limits)
    return model


def starting_mesh(study: Study, simulations: list):
    """The first mesh of a plug-flow optimization with a temperature profile (zones, free): the study's elements,
    placed for the starting simulations and for the fastest corner of the decision box (every temperature at its
    upper bound, the longest residence time). A profile optimum often runs hot where the reactant is fresh, and
    there the transient is fast (measured: a reversible exothermic reaction converts 12 % in the first 0.1 % of the
    tube at its optimal profile; on 40 equal elements no start converged, on this mesh the optimum is verified at
    the first solve). Other studies keep the study's mesh, refined after the solve where the check needs it.
    None: keep the study's mesh."""
    from tubeyield.reactor.mesh import adapted_edges, breakpoints
    from tubeyield.reactor.simulate import SimulationFailed, simulate
    if not study.reactor.form.axial or not study.reactor.mode.profile:
        return None
    sims = [s for s in simulations if s is not None]
    corner = {d.name: d.high if d.si_unit in ("s", "K") else 0.5 * (d.low + d.high) for d in study.decisions}
    try:
        sims.append(simulate(study, corner, rtol=1e-8))
    except SimulationFailed:
        pass
    zones = study.reactor.zones
    if not sims:
        return None
    return adapted_edges(sims, study.reactor.elements, study.reactor.points, fixed=breakpoints(zones),
                         grading=study.reactor.grading, tolerance=study.numerics.check_tolerance)


def timed_solve(solver, model: ReactorModel, timing: dict, **kw):
    """solver.solve with its stages added to `timing` (solve = NL write + solver build + Ipopt + loading)."""
    t = time.perf_counter()
    res = solver.solve(model.m, **kw)
    add_times(timing, {"solve": time.perf_counter() - t,
                       **{k: solver.last_timing.get(k, 0.0) for k in ("nl_write", "solver_build", "ipopt")}})
    return res


def add_times(timing: dict, more: dict) -> None:
    """Add the stage times in `more` to `timing` (solves in forked copies hand theirs back this way)."""
    for k, v in more.items():
        timing[k] = timing.get(k, 0.0) + v
