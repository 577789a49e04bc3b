"""Over what range an active limit's marginal value holds: the optimum re-solved at relaxed bounds.

A multiplier is a derivative at the optimum (Luenberger and Ye, Linear and Nonlinear Programming, 4th ed., Springer
2016, section 11.8); a design review asks what relaxing the limit by a finite amount is actually worth. Each active
limit's bound is relaxed in steps (RELAX_STEPS, shares of the bound's size) and the problem re-solved warm from the
optimum; the actual gain is reported beside the linear prediction (marginal x change), and the marginal is said to
hold up to the largest relaxation whose gain stays within LINEAR_TOLERANCE of the prediction. The model is put back
to the optimum afterwards.
"""

from __future__ import annotations

from tubeyield.jobs.problem import add_times, timed_solve
from tubeyield.reactor.metrics import metric_display
from tubeyield.reactor.model import ReactorModel
from tubeyield.solve import OK_CONDITIONS, forked
from tubeyield.study.schema import Study
from tubeyield.study.units import convert, unit_step

RELAX_STEPS = (0.002, 0.01, 0.05, 0.2)   # relaxations tried, as shares of |bound| (FRACTION_FLOOR for bounds near zero)
FRACTION_FLOOR = 0.1              # |bound| used for the steps when it is smaller (a cap of 0.02 moves by 0.001 ...)
LINEAR_TOLERANCE = 0.1            # the gain within 10 % of marginal x change counts as "the marginal holds"
MAX_CHECKED = 4                   # active limits checked (the largest marginals first)


def marginal_ranges(study: Study, model: ReactorModel, solver, options: dict, limits: list[dict],
                    timing: dict, workers: int = 1) -> None:
    """Add a "relaxed" entry to each active limit in `limits` (the result's limit dicts, in study order):
    [{"bound", "gain", "predicted", "solved"}] and "holds_to" (the farthest bound tried where the marginal held,
    None when it held at none). `workers` > 1 solves that many steps at a time (solve/forked.py)."""
    active = [(i, lim) for i, lim in enumerate(limits) if lim.get("active")]
    active.sort(key=lambda p: -abs(p[1]["marginal"]))
    if not active:
        return
    snap = model.snapshot()
    goal0 = _goal(model)
    try:
        for i, entry in active[:MAX_CHECKED]:
            handle = model.limits[i]
            lim = handle.limit
            si_unit = "K" if lim.metric is None else lim.metric.si_unit
            per_user = unit_step(lim.unit, si_unit)               # SI per user unit of the bound (a difference)
            bound_user = convert(lim.bound, si_unit, lim.unit) if lim.unit else lim.bound
            size = max(abs(bound_user), FRACTION_FLOOR if not lim.unit else 0.0) or 1.0
            sign = 1.0 if lim.sense == "<=" else -1.0              # the direction that relaxes the limit
            original = handle.bound                               # SI; a tightened temperature limit stays so
            steps, holds_to, k = [], None, 0
            # steps side by side only where copies can be made: run here one after another, a batch would solve
            # steps past the first that fails or stops holding for nothing
            at_once = max(1, workers) if forked.can_fork() else 1

            def relaxed(j: int, batch: tuple) -> tuple:
                handle.set_bound(original + sign * batch[j] * size * per_user)
                model.restore(snap)
                # only the pinned bound moved: no new NL file, no new solver; a cold start from the optimum
                own: dict = {}
                res = timed_solve(solver, model, own, options=options, reuse_structure=True)
                solved = res.solver.termination_condition in OK_CONDITIONS
                return solved, (_goal(model) - goal0 if solved else None), own

            while k < len(RELAX_STEPS):
                # with more than one core, the next steps are solved side by side in forked copies (each step is a
                # cold solve from the optimum, so the result is the same); those past the first that fails or
                # stops holding are not used
                batch = RELAX_STEPS[k:k + at_once]
                outs = forked.forked_map(lambda j: relaxed(j, batch), len(batch), at_once)
                stop = False
                for share, (solved, gain, own) in zip(batch, outs):
                    add_times(timing, own)
                    change = sign * share * size                  # user units
                    predicted = entry["marginal"] * change
                    steps.append({"bound": bound_user + change, "gain": gain, "predicted": predicted,
                                  "solved": solved})
                    stop = not solved or not abs(gain - predicted) <= LINEAR_TOLERANCE * max(abs(predicted),
                                                                                              abs(gain), 1e-12)
                    if stop:
                        break
                    holds_to = bound_user + change
                if stop:
                    break
                k += len(batch)
            handle.set_bound(original)
            entry["relaxed"] = steps
            entry["holds_to"] = holds_to
    finally:
        model.restore(snap)


def _goal(model: ReactorModel) -> float:
    return metric_display(model.goal_metric, model.metric_value(model.goal_metric))[0]
