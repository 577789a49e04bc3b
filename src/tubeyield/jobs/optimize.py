"""The optimize job: the best operating point, what limits it, and proof that the numbers hold.

load -> screened multistart (reference simulation) -> collocation NLP (Ipopt) from each start -> distinct local
optima, best first -> verification by re-simulation with mesh refinement (jobs/refine.py) -> marginals of active
limits and bounds. The best point that passes its verification is reported as optimal; when none does, the best is
reported as unverified (never as optimal). When no start meets the limits, the minimum-violation problem
(jobs/infeasible.py) gives the closest point and the conflicting limits.
"""

from __future__ import annotations

import time

from tubeyield import status as st
from tubeyield.jobs.infeasible import FEASIBLE_VIOLATION, closest_point, conflict_message, conflicts
from tubeyield.jobs.marginal_range import marginal_ranges
from tubeyield.jobs.problem import add_times, prepare, starting_mesh, timed_solve
from tubeyield.jobs.profile_search import is_profile_study, profile_starts
from tubeyield.jobs.refine import verify_and_refine
from tubeyield.jobs.result import Result
from tubeyield.modeling import pyo
from tubeyield.reactor.metrics import all_metrics, metric_display
from tubeyield.reactor.model import ReactorModel
from tubeyield.reactor.verify import compare, reference
from tubeyield.solve import ACCEPTABLE_CONDITIONS, OK_CONDITIONS, STALLED_CONDITIONS, make_solver
from tubeyield.solve import forked, multistart
from tubeyield.solve.marginals import bound_reports, limit_reports
from tubeyield.solve.options import STALL_OPTIONS
from tubeyield.study.schema import Study
from tubeyield.study.units import convert, decision_to_user, decisions_to_user

SAME_OPTIMUM = 1e-6    # relative difference of goal values that counts as the same optimum
VERIFY_AT_MOST = 3     # distinct local optima tried, best first, until one passes its verification


def optimize(study: Study, *, starts: int | None = None, seed: int = 0, solver=None, tee: bool = False,
             model: ReactorModel | None = None, screened: list | None = None, relax: bool = False,
             workers: int = 1) -> Result:
    """The best operating point of `study`. `model` (optional) is a prepared model of the same structure, reused
    with the study's parameter values (sweeps, fronts); otherwise one is built. `screened` (optional) holds
    simulated candidate points to rank for this goal instead of screening a new design. `relax` re-solves at
    relaxed bounds to say over what range each active limit's marginal holds (jobs/marginal_range.py). `workers` > 1
    solves the starts on that many cores, in forked copies of this process (solve/forked.py); the result is the
    same."""
    t_start = time.perf_counter()
    numerics = study.numerics
    solver = solver or make_solver(numerics)
    options = dict(numerics.ipopt)
    timing = {"screen": 0.0, "build": 0.0, "solve": 0.0, "check": 0.0, "nl_write": 0.0, "solver_build": 0.0,
              "ipopt": 0.0}

    t = time.perf_counter()
    candidates = multistart.starts(study, starts or numerics.starts, seed, screened=screened,
                                   workers=1 if tee else workers)
    timing["screen"] = time.perf_counter() - t
    if not candidates:
        return _failed(study, "the reference simulation failed at every starting point", timing)
    rungs = []
    if is_profile_study(study):
        t = time.perf_counter()
        profile, rungs = profile_starts(study, solver, seed, starts or numerics.starts, options, timing)
        timing["profile_search"] = time.perf_counter() - t
        candidates = sorted(profile + candidates[:max(1, len(candidates) - len(profile))],
                            key=lambda c: c.rank_key(study.goal.sense))

    t = time.perf_counter()
    reuse = model is not None
    if reuse:
        model.set_parameters(study)
    else:
        model = prepare(study, starting_mesh(study, [c.simulation for c in candidates]),
                        scale_hint=max((abs(c.goal) for c in candidates if c.goal == c.goal), default=None),
                        start=candidates[0].simulation)
    timing["build"] = time.perf_counter() - t

    closest = None
    if candidates[0].violation > 0:
        # Phase 1: no screened point meets every limit. Minimize the violation first; if it stays positive the
        # study is infeasible, and no local solve from infeasible starts is needed to say so.
        closest = closest_point(study, model.mesh, solver, options, candidates, timing)
        if closest is None:
            return _failed(study, "the minimum-violation problem (phase 1) did not converge", timing)
        if closest.total > FEASIBLE_VIOLATION:
            return _infeasible(study, closest, timing, t_start)
        candidates = [closest.as_candidate()] + candidates[:-1]

    if workers > 1 and len(candidates) > 1 and not tee and hasattr(solver, "build") and forked.can_fork():
        outcomes = _forked_starts(study, model, solver, options, candidates, reuse, timing, workers)
    else:
        outcomes = [_solve_start(study, model, solver, options, cand, i > 0 or reuse, timing, tee)
                    for i, cand in enumerate(candidates)]
    runs = [run for run, _ in outcomes]
    found = [(run, snap) for run, snap in outcomes if snap is not None]

    if not found:
        if closest is None and study.goal.limits:
            closest = closest_point(study, model.mesh, solver, options, candidates, timing)
        if closest is not None and closest.total > FEASIBLE_VIOLATION:
            return _infeasible(study, closest, timing, t_start, runs)
        return _failed(study, "Ipopt did not converge from any start: " + ", ".join(r["status"] for r in runs),
                       timing, runs)

    optima = _distinct_optima(study, found)
    best_goal = optima[0][0]["goal"]
    starts_info = {"n": len(runs), "ok": sum(r["goal"] is not None for r in runs),
                   "reached_best": sum(1 for r in runs if r["goal"] is not None and _same(r["goal"], best_goal)),
                   "distinct_optima": [{"goal": metric_display(study.goal.metric, r["goal"])[0], "from": r["from"]}
                                       for r, _ in optima], "ladder": rungs, "runs": runs}
    tried = []
    for run, snap in optima[:VERIFY_AT_MOST]:
        model.restore(snap)
        verified = verify_and_refine(study, model, solver, options, timing, tee)
        tried.append((run, verified))
        if _trusted(run, verified):
            break
    run, verified = next(((r, v) for r, v in tried if _trusted(r, v)), tried[0])
    status = st.OPTIMAL if _trusted(run, verified) else st.UNVERIFIED
    result = _result(study, verified.model, status, verified.check, starts_info, timing, t_start, verified)
    if status == st.OPTIMAL and relax:
        t = time.perf_counter()
        marginal_ranges(study, verified.model, solver, options, result.limits, result.timing, workers=workers)
        result.timing["marginal_ranges"] = time.perf_counter() - t
        result.timing["total"] = time.perf_counter() - t_start
    if status == st.OPTIMAL and run is not tried[0][0]:
        shown = metric_display(study.goal.metric, tried[0][0]["goal"])[0]
        result.warnings.append(f"a better point ({study.goal.metric.text} = {shown:.6g}) did not pass its "
                               "verification; the best verified point is reported")
    if status == st.UNVERIFIED:
        result.message = "NOT VERIFIED: " + "; ".join(_doubts(run, verified))
    held = held_by_state_bound(verified.model)
    if held:
        result.warnings.append(
            f"{held}, a guard for the iterations and not a limit of the reactor: a better point may "
            "lie beyond it (the element holding it could not be split further: numerics.max_elements or the shortest "
            "element; check the point by simulation)")
    from tubeyield.study.read_kinetics import extrapolation
    note = extrapolation(study, result.decisions_si)
    if note:
        result.warnings.append(note)
    return result


def _solve_start(study: Study, model: ReactorModel, solver, options: dict, cand, reuse_structure: bool,
                 timing: dict, tee: bool) -> tuple[dict, dict | None]:
    """One start: Ipopt from the candidate's simulated profile (once more with the stall options when it stalls,
    and on from an acceptable-only point once, warm). Returns the run's record and, when it converged, a snapshot of
    the solution."""
    model.set_decisions(cand.decisions)
    model.initialize(cand.simulation)
    res = timed_solve(solver, model, timing, options=options, reuse_structure=reuse_structure, tee=tee)
    condition = res.solver.termination_condition
    retried = condition in STALLED_CONDITIONS
    if retried:
        # the same start once more with the other barrier strategy (solve/options.py, STALL_OPTIONS)
        model.set_decisions(cand.decisions)
        model.initialize(cand.simulation)
        res = timed_solve(solver, model, timing, options={**STALL_OPTIONS, **options}, reuse_structure=True, tee=tee)
        condition = res.solver.termination_condition
    if condition in ACCEPTABLE_CONDITIONS:
        # Ipopt stopped at its "acceptable" level only: go on from there once, warm, before flagging it
        res = timed_solve(solver, model, timing, options=options, reuse_structure=True, warmstart=True, tee=tee)
        condition = res.solver.termination_condition
    run = {"from": cand.label, "start": decisions_to_user(study, cand.decisions), "status": str(condition),
           "iterations": solver.last_stats.get("iterations"), "goal": None}
    if retried:
        run["retried"] = "stalled at first; solved again with a monotone barrier update"
    if condition in OK_CONDITIONS or condition in ACCEPTABLE_CONDITIONS:
        run["goal"] = model.metric_value(study.goal.metric)
        run["acceptable_only"] = condition not in OK_CONDITIONS
        return run, model.snapshot()
    return run, None


def _forked_starts(study: Study, model: ReactorModel, solver, options: dict, candidates: list, reuse: bool,
                   timing: dict, workers: int) -> list:
    """The starts on `workers` cores (solve/forked.py): the solver is built here first, so that every forked copy
    solves with it as the serial loop would (the same start values, options and built solver give the same run;
    tests/test_forked_starts.py). The copies hand back each run's record, its solution as plain numbers and its
    stage times; the multipliers of the last start are taken as this solver's own, as after the serial loop.
    `timing` gets the stage times summed over the starts (work, not wall time) and "starts_wall"."""
    t = time.perf_counter()
    # the build needs the structure and the bounds only: each start sets its own decisions and profile
    solver.build(model.m, options=options, reuse_structure=reuse)
    add_times(timing, {"nl_write": solver.last_timing["nl_write"], "solver_build": solver.last_timing["solver_build"],
                       "solve": solver.last_timing["total"]})

    def one(i: int):
        own: dict = {}
        run, snap = _solve_start(study, model, solver, options, candidates[i], True, own, False)
        return run, None if snap is None else model.plain_snapshot(snap), own, solver.last_multipliers()

    outcomes = forked.forked_map(one, len(candidates), workers)
    for _run, _plain, own, _pair in outcomes:
        add_times(timing, own)
    if outcomes[-1][3] is not None:
        solver.remember_multipliers(outcomes[-1][3])
    timing["starts_wall"] = time.perf_counter() - t
    timing["start_workers"] = min(workers, len(candidates))
    return [(run, None if plain is None else model.from_plain(plain)) for run, plain, _own, _pair in outcomes]


# The opening of the warning that a state bound holds the optimum (ReactorModel.state_bound_holds); the front
# matches it.
HELD_BY_STATE_BOUND = "the optimum is held by the solver's lower bound"


def held_by_state_bound(model: ReactorModel, where: str = "") -> str | None:
    """Where a state bound holds the model's solution (its largest multiplier; ReactorModel.state_bound_holds), said
    in words that open with HELD_BY_STATE_BOUND; `where` is added after the position. None when none holds."""
    holds = model.state_bound_holds()
    if not holds:
        return None
    s, z, m = holds[0]
    return f"{HELD_BY_STATE_BOUND} on the state of {s} at {z:.4g} of the reactor length{where} (multiplier {m:.2g})"


def _distinct_optima(study: Study, found: list) -> list:
    """One (run, snapshot) per distinct local optimum: converged before acceptable-only, then best goal first."""
    sense = 1.0 if study.goal.sense == "max" else -1.0
    ordered = sorted(found, key=lambda f: (f[0]["acceptable_only"], -sense * f[0]["goal"]))
    out = []
    for run, snap in ordered:
        if not any(_same(run["goal"], r["goal"]) and run["acceptable_only"] == r["acceptable_only"] for r, _ in out):
            out.append((run, snap))
    return out


def _trusted(run: dict, verified) -> bool:
    return not run["acceptable_only"] and not verified.acceptable_only and verified.check.passed \
        and verified.limits_hold


def _doubts(run: dict, verified) -> list[str]:
    c = verified.check
    out = []
    if run["acceptable_only"]:
        out.append("Ipopt stopped at an acceptable level only, not at its convergence tolerance")
    if verified.acceptable_only:
        out.append(f"on the refined mesh of {c.elements} elements Ipopt stopped at an acceptable level only")
    if not c.passed:
        out.append(f"the re-simulation differs by {c.max_rel_error:.2e} (tolerance {c.tolerance:.0e}) at "
                   f"{c.elements} elements")
    out += c.notes
    return out


def _better(study: Study, a: float, b: float) -> bool:
    return a > b if study.goal.sense == "max" else a < b


def _same(a: float, b: float) -> bool:
    return abs(a - b) <= SAME_OPTIMUM * max(1.0, abs(b))


def _infeasible(study, closest, timing, t_start, runs=()) -> Result:
    """The closest point and the limits that cannot hold together (jobs/infeasible.py)."""
    elastic = closest.model
    t = time.perf_counter()
    sim = reference(elastic)
    check = compare(elastic, sim, study.numerics.check_tolerance)
    timing["check"] += time.perf_counter() - t
    starts_info = {"n": len(runs), "ok": 0, "reached_best": 0, "runs": list(runs)}
    result = _result(study, elastic, st.INFEASIBLE, check, starts_info, timing, t_start)
    result.conflicts = conflicts(study, closest, result.limits)
    result.message = conflict_message(result.conflicts, result.bounds)
    result.goal["value"] = None
    return result


def _failed(study, message, timing, runs=()) -> Result:
    return Result(st.FAILED, study.name, {"metric": study.goal.metric.text, "sense": study.goal.sense, "value": None},
                  {}, {}, {}, [], [], None, {"n": len(runs), "ok": 0, "reached_best": 0, "runs": list(runs)}, timing,
                  message=message)


# -------------------------------------------------------------------------------------------------------- result


def _result(study: Study, model: ReactorModel, status: str, check, starts_info: dict, timing: dict,
            t_start: float, verified=None) -> Result:
    values = model.decision_values()
    decisions = {}
    for name, v in values.items():
        d = study.decision(name)
        low, high = decision_to_user([d.low, d.high], d)
        entry = {"unit": d.unit, "low": low, "high": high, "fixed": d.fixed, "value": decision_to_user(v, d)}
        if isinstance(v, list):
            entry.update(z=model.profile_positions(), min=decision_to_user(min(v), d), max=decision_to_user(max(v), d))
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
    limits = [r.to_dict() for r in limit_reports(model)]
    if verified is not None:
        _with_hot_spots(study, limits, verified, float(pyo.value(model.tau_expr())))
    return Result(status=status, study=study.name,
                  goal={"metric": study.goal.metric.text, "sense": study.goal.sense, "value": gval, "unit": gunit},
                  decisions=decisions, metrics=metrics, outlet=outlet,
                  limits=limits, bounds=[b.to_dict() for b in bound_reports(model)],
                  check=check, starts=starts_info, timing=timing,
                  volume_m3=float(pyo.value(model.tau_expr())) * study.feed.flow,
                  decisions_si=values, profile_data=model.profile_rows())


def _with_hot_spots(study: Study, limits: list, verified, tau: float) -> None:
    """Temperature limits report the true extreme along the reactor (the re-simulation, between mesh points too)
    and where it is, instead of the largest value at the collocation points."""
    by_text = {h.limit: h for h in verified.hot_spots}
    plug = verified.model.edges is not None
    for lim, entry in zip(study.goal.limits, limits):
        h = by_text.get(lim.text)
        if h is None:
            continue
        entry["value"] = convert(h.value, "K", lim.unit) if lim.unit else h.value
        entry["margin"] = entry["bound"] - entry["value"] if lim.sense == "<=" else entry["value"] - entry["bound"]
        entry["heat"] = study.reactor.heat
        entry["holds"] = h.excess <= study.numerics.check_tolerance * lim.bound
        if plug:
            entry["where"] = {"z": h.z, "residence_time_s": h.z * tau, "volume_m3": h.z * tau * study.feed.flow}
        else:
            entry["where"] = {"tank": int(h.z)}
        if h.tightened_by:
            entry["tightened_by_K"] = h.tightened_by
