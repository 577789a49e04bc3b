"""Starting points for temperature-profile problems (zones, free): a continuation ladder and families of profiles.

Profile problems have several local optima (measured on the demo with four zones: eight random starts ended at
0.5033, 0.5159 and 0.5268), and a free profile with many values is hard for a local solver from a poor start (on a
reversible exothermic reaction no start converged from a uniform temperature, while the ladder below reached the
optimum in 12 iterations per rung). Two kinds of start are therefore added to the screened design:

- Continuation. The optimum at one uniform temperature, then with 2, 4, 8, ... equal zones, each rung solved from the
  rung before (a few iterations each), up to the study's zones or, for a free profile, to half its elements; the
  last rung starts the study's own problem. Coarse-to-fine control parameterization is the standard continuation in
  direct optimal control (L. T. Biegler, Nonlinear Programming, SIAM 2010, ch. 10; J. T. Betts, Practical Methods for
  Optimal Control and Estimation Using Nonlinear Programming, 2nd ed., SIAM 2010, section 4.7 on mesh refinement).
  The rungs' optima are kept: they show how much each doubling of the profile's freedom is worth.
- Families. Uniform at the lower bound, the middle and the upper bound, a falling ramp (upper to lower bound) and a
  rising one, with the other decisions at the uniform optimum: shapes an engineer would try (rising profiles suit
  a wanted intermediate whose formation needs less activation than the feed's side reactions; falling ones suit
  reversible exothermic reactions, Levenspiel, Chemical Reaction Engineering, 3rd ed. 1999, ch. 9), each simulated
  and ranked like the screened design.
"""

from __future__ import annotations

import dataclasses

from tubeyield import status as st
from tubeyield.errors import SimulationFailed
from tubeyield.reactor.mesh import breakpoints
from tubeyield.reactor.simulate import PiecewiseConstant, PiecewiseLinear, simulate
from tubeyield.solve import OK_CONDITIONS
from tubeyield.solve.multistart import SCREEN_RTOL, Candidate, violation
from tubeyield.study.schema import Decision, Study

MAX_RUNG_ZONES = 16        # a free profile's ladder stops here (or at half the elements)


def is_profile_study(study: Study) -> bool:
    temps = temperature_decisions(study)
    return study.reactor.mode.profile and bool(temps) and not all(d.fixed for d in temps)


def temperature_decisions(study: Study) -> list[Decision]:
    return [d for d in study.decisions if d.name == "T" or d.name.startswith("T.")]


def with_zones(study: Study, zones: int) -> Study:
    """The study with `zones` equal temperature zones (1: one uniform temperature) in place of its profile."""
    T = temperature_decisions(study)[0]
    others = tuple(d for d in study.decisions if d.name != "T" and not d.name.startswith("T."))
    if zones == 1:
        decisions = others + (Decision("T", T.low, T.high, T.unit, "K"),)
        reactor = dataclasses.replace(study.reactor, heat="isothermal", zones=1)
    else:
        decisions = others + tuple(Decision(f"T.{k + 1}", T.low, T.high, T.unit, "K") for k in range(zones))
        elements = zones * max(1, -(-study.reactor.elements // zones))
        reactor = dataclasses.replace(study.reactor, heat="zones", zones=zones, elements=elements)
    return dataclasses.replace(study, decisions=decisions, reactor=reactor)


def _values(study: Study, others: dict, T_fun) -> dict:
    """Decision values of `study` for a temperature function T(z): zones at their middles, a free profile as the
    function itself (set on the model at its own positions), one temperature as the function's mean."""
    values = dict(others)
    if study.reactor.heat == "zones":
        Z = study.reactor.zones
        for k in range(Z):
            values[f"T.{k + 1}"] = T_fun((k + 0.5) / Z)
    elif study.reactor.heat == "free":
        values["T"] = T_fun
    else:
        values["T"] = sum(T_fun((k + 0.5) / 8) for k in range(8)) / 8
    return values


def _profile_of(study: Study, values: dict):
    """The temperature function the reference simulation integrates for `values` (None: from the decisions)."""
    if study.reactor.heat == "free" and callable(values.get("T")):
        return values["T"]
    return None


def _candidate(study: Study, values: dict, label: str) -> Candidate | None:
    try:
        sim = simulate(study, values, T_profile=_profile_of(study, values), rtol=SCREEN_RTOL)
        goal = sim.metric(study.goal.metric)
    except (SimulationFailed, ArithmeticError):
        return None
    return Candidate(values, sim, goal, violation(study, sim), label=label)


def families(study: Study, others: dict) -> list[Candidate]:
    """Uniform (low, middle, high), falling and rising ramps, simulated and ranked."""
    T = temperature_decisions(study)[0]
    shapes = {
        "uniform at the lower bound": PiecewiseLinear([0.0, 1.0], [T.low, T.low]),
        "uniform in the middle": PiecewiseLinear([0.0, 1.0], [0.5 * (T.low + T.high)] * 2),
        "uniform at the upper bound": PiecewiseLinear([0.0, 1.0], [T.high, T.high]),
        "falling ramp": PiecewiseLinear([0.0, 1.0], [T.high, T.low]),
        "rising ramp": PiecewiseLinear([0.0, 1.0], [T.low, T.high]),
    }
    out = [c for c in (_candidate(study, _values(study, others, f), label) for label, f in shapes.items()) if c]
    out.sort(key=lambda c: c.rank_key(study.goal.sense))
    return out


def ladder(study: Study, solver, seed: int, starts: int, options: dict, timing: dict):
    """The continuation ladder (module docstring). Returns (the start it gives the study's problem or None, the
    rungs as [{"zones": Z, "goal": value, "status": ...}])."""
    from tubeyield.jobs.optimize import optimize
    from tubeyield.jobs.problem import prepare, starting_mesh, timed_solve
    uniform = optimize(with_zones(study, 1), starts=max(1, starts // 2), seed=seed, solver=solver)
    rungs = [{"zones": 1, "goal": uniform.goal.get("value"), "status": uniform.status}]
    if uniform.status not in st.SOLVED:
        return None, rungs
    others = {k: v for k, v in uniform.decisions_si.items() if k != "T"}
    T_opt = uniform.decisions_si["T"]
    T_fun = PiecewiseLinear([0.0, 1.0], [T_opt, T_opt])
    top = study.reactor.zones if study.reactor.heat == "zones" else min(MAX_RUNG_ZONES,
                                                                          max(1, study.reactor.elements // 2))
    Z = 2
    while Z < top or (study.reactor.heat == "free" and Z <= top):
        rung = with_zones(study, Z)
        values = _values(rung, others, T_fun)
        try:
            sim = simulate(rung, values, rtol=SCREEN_RTOL)
        except SimulationFailed:
            break
        model = prepare(rung, starting_mesh(rung, [sim]), scale_hint=sim.metric(study.goal.metric), start=sim)
        model.set_decisions(values)
        model.initialize(sim)
        res = timed_solve(solver, model, timing, options=options)
        if res.solver.termination_condition not in OK_CONDITIONS:
            rungs.append({"zones": Z, "goal": None, "status": str(res.solver.termination_condition)})
            break
        from tubeyield.reactor.metrics import metric_display
        rungs.append({"zones": Z, "goal": metric_display(study.goal.metric, model.metric_value(study.goal.metric))[0],
                      "status": "solved"})
        vals = model.decision_values()
        others = {k: v for k, v in vals.items() if not k.startswith("T.")}
        T_fun = PiecewiseConstant(breakpoints(Z), [vals[f"T.{k + 1}"] for k in range(Z)])
        Z *= 2
    last = rungs[-1]["zones"] if rungs[-1]["goal"] is not None else rungs[-2]["zones"] if len(rungs) > 1 else 1
    start = _candidate(study, _values(study, others, T_fun), f"continuation from {last} zone(s)")
    return start, rungs


def profile_starts(study: Study, solver, seed: int, starts: int, options: dict, timing: dict):
    """(starting candidates for a zones or free study: the ladder's end first, then the families; the ladder's
    rungs). Empty for other studies."""
    if not is_profile_study(study):
        return [], []
    start, rungs = ladder(study, solver, seed, starts, options, timing)
    others = {}
    if start is not None:
        others = {k: v for k, v in start.decisions.items() if k != "T" and not k.startswith("T.")}
    else:
        others = {d.name: 0.5 * (d.low + d.high) for d in study.decisions
                  if d.name != "T" and not d.name.startswith("T.")}
    found = ([start] if start is not None else []) + families(study, others)[:max(1, starts // 2)]
    return found, rungs
