"""When no operating point meets every limit: the minimum-violation point and the limits that cannot hold together.

The elastic problem gives each limit a non-negative slack and minimizes their sum over the decision ranges (the
"phase 1" of nonlinear programming; e.g. J. Nocedal and S. J. Wright, Numerical Optimization, 2nd ed., Springer 2006,
section 17.2 on l1 penalty and elastic formulations). A positive minimum means the study is infeasible; the point
reached is the closest one, and the limits it misses, together with those holding at their bounds there (their
multipliers are nonzero, so they take part in the conflict), are the conflicting set.
"""

from __future__ import annotations

from tubeyield.jobs.problem import timed_solve
from tubeyield.modeling import pyo
from tubeyield.reactor import build, state_scales
from tubeyield.solve import OK_CONDITIONS
from tubeyield.study.units import unit_step

FEASIBLE_VIOLATION = 1e-7     # total scaled violation below which the limits count as met


class Closest:
    """The minimum-violation point: its model, slacks and total violation."""

    def __init__(self, model, slacks):
        self.model = model
        self.slacks = slacks
        self.total = float(sum(pyo.value(x) for x in slacks))

    def as_candidate(self):
        from tubeyield.reactor.verify import reference
        from tubeyield.solve.multistart import Candidate
        sim = reference(self.model)
        return Candidate(self.model.decision_values(), sim, sim.metric(self.model.study.goal.metric), 0.0)


def closest_point(study, mesh, solver, options, candidates, timing) -> "Closest | None":
    """Minimize the total violation of the limits (each scaled like its constraint) over the decision ranges,
    from each of the least-violating screened points (the problem is nonconvex too); the smallest wins."""
    least = min(candidates, key=lambda c: c.violation)
    elastic = build(study, mesh, state_scales(least.simulation) if least.simulation is not None else None)
    slacks = elastic.add_elastic_limits(study.goal.limits)
    elastic.m.goal = pyo.Objective(expr=sum(slacks), sense=pyo.minimize)
    elastic.goal_metric, elastic.goal_sense, elastic.goal_scale = study.goal.metric, "min", 1.0
    best, best_total = None, float("inf")
    for i, start in enumerate(sorted(candidates, key=lambda c: c.violation)[:study.numerics.starts]):
        elastic.set_decisions(start.decisions)
        elastic.initialize(start.simulation)
        for slack in slacks:
            slack.set_value(0.0)
        res = timed_solve(solver, elastic, timing, options=options, reuse_structure=i > 0)
        if res.solver.termination_condition in OK_CONDITIONS:
            total = float(sum(pyo.value(x) for x in slacks))
            if total < best_total:
                best, best_total = elastic.snapshot(), total
            if total <= FEASIBLE_VIOLATION:
                break
    if best is None:
        return None
    elastic.restore(best)
    return Closest(elastic, slacks)


def conflicts(study, closest: Closest, limit_reports: list) -> list[dict]:
    """The limits that cannot hold together at the closest point: those missed (by how much, in the bound's unit)
    and those holding at their bounds there."""
    reports = {r["text"]: r for r in limit_reports}
    out = []
    for slack, lim, lh in zip(closest.slacks, study.goal.limits, closest.model.limits):
        miss_si = pyo.value(slack) * lh.scale
        if pyo.value(slack) > FEASIBLE_VIOLATION:
            si_unit = "K" if lim.metric is None else lim.metric.si_unit
            shown = miss_si / unit_step(lim.unit, si_unit) if lim.unit else miss_si
            out.append({"limit": lim.text, "missed_by": shown, "unit": lim.unit, "holds": False})
        elif reports[lim.text]["active"]:
            out.append({"limit": lim.text, "missed_by": 0.0, "unit": lim.unit, "holds": True})
    return out


def conflict_message(found: list[dict], bounds: list[dict]) -> str:
    held = [c["limit"] for c in found if c["holds"]]
    missed = [f"{c['limit']} (missed by {c['missed_by']:.4g}{' ' + c['unit'] if c['unit'] else ''})"
              for c in found if not c["holds"]]
    at_bounds = [f"{b['decision']} at its {b['side']} bound" for b in bounds if b["side"] in ("low", "high")]
    return ("no operating point within the decision ranges meets every limit. At the closest point found "
            + "; ".join(missed)
            + (f", while {', '.join(held)} hold at their bounds" if held else "")
            + (f" and {', '.join(at_bounds)}" if at_bounds else "") + ".")
