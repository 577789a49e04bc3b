"""The optimize job: the best operating point, what limits it, and proof that the numbers hold.

load -> screened multistart (reference simulation) -> collocation NLP (Ipopt) from each start -> best ->
re-simulation, refining the mesh until the outlet flows agree -> marginals of active limits and bounds.
When no start meets the limits, a minimum-violation problem gives the closest point and the conflicting limits.
"""

from __future__ import annotations

import time

import pyomo.environ as pyo

from tubeyield.reactor import build
from tubeyield.reactor.metrics import DISPLAY_UNIT, all_metrics
from tubeyield.reactor.model import ReactorModel
from tubeyield.reactor.verify import compare, reference
from tubeyield.solve import OK_CONDITIONS, make_solver
from tubeyield.solve import multistart
from tubeyield.solve.marginals import bound_reports, limit_reports
from tubeyield.jobs.result import Result
from tubeyield.study.schema import Study
from tubeyield.study.units import convert, decision_to_user, unit_step

SAME_OPTIMUM = 1e-6    # relative difference of goal values that counts as the same optimum


def goal_scale(study: Study, value: float | None) -> float:
    """The goal's typical magnitude, so that Ipopt's objective is of order one: fractions (conversion, yield,
    selectivity) are scaled only when small (a yield of 1e-6 would otherwise be lost below the tolerances), other
    metrics by the best screened value."""
    v = abs(value) if value is not None and value == value else 0.0
    if study.goal.metric.kind in ("conversion", "yield", "selectivity"):
        return min(1.0, max(v, 1e-9)) if v > 0 else 1.0
    return v if v > 0 else 1.0


def prepare(study: Study, elements: int | None = None, scale_hint: float | None = None,
            start=None) -> ReactorModel:
    """The model with the study's goal and limits. `start` (a Simulation) sets the species scales; without one, a
    simulation at the middle of the decision ranges does (or unit scales if it fails)."""
    from tubeyield.reactor import state_scales
    if start is None:
        try:
            from tubeyield.reactor.simulate import simulate
            from tubeyield.solve.multistart import SCREEN_RTOL
            mid = {d.name: 0.5 * (d.low + d.high) for d in study.decisions}
            start = simulate(study, mid, rtol=SCREEN_RTOL)
        except Exception:  # a start that cannot be simulated: unit scales
            start = None
    model = build(study, elements, state_scales(start) if start is not None else None)
    model.set_goal(study.goal.metric, study.goal.sense, goal_scale(study, scale_hint))
    model.add_limits(study.goal.limits)
    return model


def optimize(study: Study, *, starts: int | None = None, seed: int = 0, solver=None, tee: bool = False,
             model: ReactorModel | None = None, screened: list | None = None) -> Result:
    """The best operating point of `study`. `model` (optional) is a prepared model of the same structure, reused
    with the study's parameter values (sweeps, fronts); otherwise one is built. `screened` (optional) holds
    simulated candidate points to rank for this goal instead of screening a new design."""
    t_start = time.perf_counter()
    numerics = study.numerics
    solver = solver or make_solver(numerics)
    options = dict(numerics.ipopt)
    timing = {"screen": 0.0, "build": 0.0, "solve": 0.0, "check": 0.0, "nl_write": 0.0, "solver_build": 0.0,
              "ipopt": 0.0}

    t = time.perf_counter()
    candidates = multistart.starts(study, starts or numerics.starts, seed, screened=screened)
    timing["screen"] = time.perf_counter() - t
    if not candidates:
        return _failed(study, "the reference simulation failed at every starting point", timing)
    t = time.perf_counter()
    uniform = _uniform_temperature_start(study, solver, seed, starts)
    if uniform is not None:
        timing["uniform_start"] = time.perf_counter() - t
    if uniform is not None:
        candidates = [uniform] + candidates[:len(candidates) - 1]

    t = time.perf_counter()
    reuse = model is not None
    if reuse:
        model.set_parameters(study)
    else:
        model = prepare(study, scale_hint=max((abs(c.goal) for c in candidates if c.goal == c.goal), default=None),
                        start=candidates[0].simulation)
    timing["build"] = time.perf_counter() - t

    closest = None
    if candidates[0].violation > 0:
        # Phase 1: no screened point meets every limit. Minimize the violation first; if it stays positive the
        # study is infeasible, and no local solve from infeasible starts is needed to say so.
        closest = _closest_point(study, model.elements, solver, options, candidates, timing)
        if closest is None:
            return _failed(study, "the minimum-violation problem (phase 1) did not converge", timing)
        if closest.total > FEASIBLE_VIOLATION:
            return _infeasible(study, closest, timing, t_start)
        candidates = [closest.as_candidate()] + candidates[:-1]

    runs, best, best_snap = [], None, None
    for i, cand in enumerate(candidates):
        model.set_decisions(cand.decisions)
        model.initialize(cand.simulation)
        res = _solve(solver, model, timing, options=options, reuse_structure=i > 0 or reuse, tee=tee)
        ok = res.solver.termination_condition in OK_CONDITIONS
        run = {"start": _user_decisions(study, cand.decisions), "status": str(res.solver.termination_condition),
               "iterations": solver.last_stats.get("iterations"), "goal": None}
        if ok:
            run["goal"] = model.metric_value(study.goal.metric)
            if best is None or _better(study, run["goal"], best["goal"]):
                best, best_snap = run, model.snapshot()
        runs.append(run)

    if best is None:
        if closest is None and study.goal.limits:
            closest = _closest_point(study, model.elements, solver, options, candidates, timing)
        if closest is not None and closest.total > FEASIBLE_VIOLATION:
            return _infeasible(study, closest, timing, t_start, runs)
        return _failed(study, "Ipopt did not converge from any start: " + ", ".join(r["status"] for r in runs),
                       timing, runs)

    model.restore(best_snap)
    reached = sum(1 for r in runs if r["goal"] is not None and _same(r["goal"], best["goal"]))
    starts_info = {"n": len(runs), "ok": sum(r["goal"] is not None for r in runs), "reached_best": reached,
                   "runs": runs}
    model, check, sim, timing = _verify_and_refine(study, model, solver, options, timing, tee)
    result = _result(study, model, "optimal", check, starts_info, timing, t_start)
    if not check.passed:
        result.warnings.append(f"the re-simulation differs by {check.max_rel_error:.2e} (tolerance "
                               f"{check.tolerance:.0e}) even at {check.elements} elements; treat the numbers with care")
    return result


def _solve(solver, model, timing: dict, **kw):
    """solver.solve with its stages added to `timing` (solve = NL write + solver build + Ipopt + loading)."""
    t = time.perf_counter()
    res = solver.solve(model.m, **kw)
    timing["solve"] += time.perf_counter() - t
    for k in ("nl_write", "solver_build", "ipopt"):
        timing[k] = timing.get(k, 0.0) + solver.last_timing.get(k, 0.0)
    return res


def _uniform_temperature_start(study: Study, solver, seed: int, starts: int | None = None):
    """For zones and free profiles: the optimum at one uniform temperature, as the first start.

    Temperature-profile problems have many local optima (measured: four zones on the demo, 8 random starts ended at
    0.5033, 0.5159 and 0.5268). The uniform optimum is a feasible point of the profile problem, so a local solve from
    it cannot end below what one temperature gives; it is the continuation an engineer would use."""
    import dataclasses

    from tubeyield.reactor.simulate import simulate
    from tubeyield.solve.multistart import Candidate, violation
    from tubeyield.study.schema import Decision
    heat = study.reactor.heat
    if heat not in ("zones", "free"):
        return None
    temps = [d for d in study.decisions if d.name == "T" or d.name.startswith("T.")]
    if not temps or all(d.fixed for d in temps):
        return None
    T = temps[0]
    decisions = tuple(d for d in study.decisions if d not in temps) + (Decision("T", T.low, T.high, T.unit, "K"),)
    uniform = dataclasses.replace(study, decisions=decisions,
                                  reactor=dataclasses.replace(study.reactor, heat="isothermal", zones=1))
    res = optimize(uniform, starts=max(1, (starts or study.numerics.starts) // 2), seed=seed, solver=solver)
    if res.status != "optimal":
        return None
    values = {k: v for k, v in res.decisions_si.items() if k != "T"}
    T_opt = res.decisions_si["T"]
    for d in temps:
        values[d.name] = T_opt
    sim = simulate(study, values)
    return Candidate(values, sim, sim.metric(study.goal.metric), violation(study, sim))


def _better(study: Study, a: float, b: float) -> bool:
    return a > b if study.goal.sense == "max" else a < b


def _same(a: float, b: float) -> bool:
    return abs(a - b) <= SAME_OPTIMUM * max(1.0, abs(b))


# A refined mesh starts from the coarse optimum, re-simulated: a point already close to the optimum, so the barrier
# starts small and decreases monotonically instead of pushing the iterates back into the interior.
REFINE_OPTIONS = {"mu_strategy": "monotone", "mu_init": 1e-6}


def _verify_and_refine(study, model, solver, options, timing, tee):
    """Re-simulate; while the outlet flows differ by more than the tolerance, double the elements and re-solve
    from the refined simulation (automatic, up to numerics.max_elements)."""
    tol = study.numerics.check_tolerance
    t = time.perf_counter()
    sim = reference(model)
    check = compare(model, sim, tol)
    timing["check"] += time.perf_counter() - t
    refinements = 0
    while not check.passed and model.elements * 2 <= study.numerics.max_elements:
        decisions = model.decision_values()
        T_fun = model.temperature_function()
        t = time.perf_counter()
        finer = prepare(study, model.elements * 2, scale_hint=model.goal_scale, start=sim)
        timing["build"] += time.perf_counter() - t
        if "T" in finer.decisions and finer.decisions["T"].profile:
            decisions["T"] = [T_fun(z) for z in finer.inner]
        finer.set_decisions(decisions)
        finer.initialize(sim)
        res = _solve(solver, finer, timing, options={**REFINE_OPTIONS, **options}, tee=tee)
        if res.solver.termination_condition not in OK_CONDITIONS:
            break
        refinements += 1
        model = finer
        t = time.perf_counter()
        sim = reference(model)
        check = compare(model, sim, tol)
        timing["check"] += time.perf_counter() - t
    check.refinements = refinements
    return model, check, sim, timing


# ---------------------------------------------------------------------------------------------------- infeasible

FEASIBLE_VIOLATION = 1e-7     # total scaled violation below which the limits count as met


class _Closest:
    """The minimum-violation point: its model, slacks and total violation."""

    def __init__(self, model, slacks):
        self.model = model
        self.slacks = slacks
        self.total = float(sum(pyo.value(x) for x in slacks))

    def as_candidate(self):
        from tubeyield.solve.multistart import Candidate
        sim = reference(self.model)
        return Candidate(self.model.decision_values(), sim, sim.metric(self.model.study.goal.metric), 0.0)


def _closest_point(study, elements, solver, options, candidates, timing) -> "_Closest | None":
    """Minimize the total violation of the limits (each scaled like its constraint) over the decision ranges,
    from each of the least-violating screened points (the problem is nonconvex too); the smallest wins."""
    from tubeyield.reactor import state_scales
    least = min(candidates, key=lambda c: c.violation)
    elastic = build(study, elements, state_scales(least.simulation) if least.simulation is not None else None)
    slacks = elastic.add_elastic_limits(study.goal.limits)
    elastic.m.goal = pyo.Objective(expr=sum(slacks), sense=pyo.minimize)
    elastic.goal_metric, elastic.goal_sense, elastic.goal_scale = study.goal.metric, "min", 1.0
    best, best_total = None, float("inf")
    for i, start in enumerate(sorted(candidates, key=lambda c: c.violation)[:study.numerics.starts]):
        elastic.set_decisions(start.decisions)
        elastic.initialize(start.simulation)
        for slack in slacks:
            slack.set_value(0.0)
        res = _solve(solver, elastic, timing, options=options, reuse_structure=i > 0)
        if res.solver.termination_condition in OK_CONDITIONS:
            total = float(sum(pyo.value(x) for x in slacks))
            if total < best_total:
                best, best_total = elastic.snapshot(), total
            if total <= FEASIBLE_VIOLATION:
                break
    if best is None:
        return None
    elastic.restore(best)
    return _Closest(elastic, slacks)


def _infeasible(study, closest: _Closest, timing, t_start, runs=()) -> Result:
    """The closest point, and the limits that cannot hold together: those it misses, and those holding at their
    bounds there (their multipliers are nonzero, so they take part in the conflict)."""
    elastic = closest.model
    t = time.perf_counter()
    sim = reference(elastic)
    check = compare(elastic, sim, study.numerics.check_tolerance)
    timing["check"] += time.perf_counter() - t
    starts_info = {"n": len(runs), "ok": 0, "reached_best": 0, "runs": list(runs)}
    result = _result(study, elastic, "infeasible", check, starts_info, timing, t_start)
    reports = {r["text"]: r for r in result.limits}
    conflicts = []
    for slack, lim, lh in zip(closest.slacks, study.goal.limits, elastic.limits):
        miss_si = pyo.value(slack) * lh.scale
        if pyo.value(slack) > FEASIBLE_VIOLATION:
            si_unit = "K" if lim.metric is None else lim.metric.si_unit
            shown = miss_si / unit_step(lim.unit, si_unit) if lim.unit else miss_si
            conflicts.append({"limit": lim.text, "missed_by": shown, "unit": lim.unit, "holds": False})
        elif reports[lim.text]["active"]:
            conflicts.append({"limit": lim.text, "missed_by": 0.0, "unit": lim.unit, "holds": True})
    result.conflicts = conflicts
    held = [c["limit"] for c in conflicts if c["holds"]]
    missed = [f"{c['limit']} (missed by {c['missed_by']:.4g}{' ' + c['unit'] if c['unit'] else ''})"
              for c in conflicts if not c["holds"]]
    bounds = [f"{b['decision']} at its {b['side']} bound" for b in result.bounds if b["side"] in ("low", "high")]
    result.message = ("no operating point within the decision ranges meets every limit. At the closest point found "
                      + "; ".join(missed)
                      + (f", while {', '.join(held)} hold at their bounds" if held else "")
                      + (f" and {', '.join(bounds)}" if bounds else "") + ".")
    result.goal["value"] = None
    return result


def _failed(study, message, timing, runs=()) -> Result:
    return Result("failed", study.name, {"metric": study.goal.metric.text, "sense": study.goal.sense, "value": None},
                  {}, {}, {}, [], [], None, {"n": len(runs), "ok": 0, "reached_best": 0, "runs": list(runs)}, timing,
                  message=message)


# -------------------------------------------------------------------------------------------------------- result


def _user_decisions(study: Study, values: dict) -> dict:
    return {name: decision_to_user(v, study.decision(name)) for name, v in values.items()}


def metric_display(metric, value_si: float) -> tuple[float, str]:
    unit = DISPLAY_UNIT.get(metric.kind, "")
    return (convert(value_si, metric.si_unit, unit) if unit else value_si), unit


def _result(study: Study, model: ReactorModel, status: str, check, starts_info: dict, timing: dict,
            t_start: float) -> Result:
    values = model.decision_values()
    decisions = {}
    for name, v in values.items():
        d = study.decision(name)
        low, high = decision_to_user([d.low, d.high], d)
        entry = {"unit": d.unit, "low": low, "high": high, "fixed": d.fixed, "value": decision_to_user(v, d)}
        if isinstance(v, list):
            entry.update(z=list(model.inner), min=decision_to_user(min(v), d), max=decision_to_user(max(v), d))
        decisions[name] = entry
    metrics = {}
    for met in all_metrics(study):
        val, unit = metric_display(met, model.metric_value(met))
        metrics[met.text] = {"value": val, "unit": unit}
    gval, gunit = metric_display(study.goal.metric, model.metric_value(study.goal.metric))
    flows = model.outlet_flows()
    conc = {s: float(pyo.value(c)) for s, c in model.conc_out.items()}
    outlet = {s: {"conc": conc[s] / 1000.0, "conc_unit": "mol/L", "flow": flows[s], "flow_unit": "mol/s"}
              for s in study.symbols}
    timing = dict(timing)
    timing["total"] = time.perf_counter() - t_start
    return Result(status=status, study=study.name,
                  goal={"metric": study.goal.metric.text, "sense": study.goal.sense, "value": gval, "unit": gunit},
                  decisions=decisions, metrics=metrics, outlet=outlet,
                  limits=[r.to_dict() for r in limit_reports(model)], bounds=[b.to_dict() for b in bound_reports(model)],
                  check=check, starts=starts_info, timing=timing,
                  volume_m3=float(pyo.value(model.tau_expr())) * study.feed.flow,
                  decisions_si=values, profile=model.profile())
