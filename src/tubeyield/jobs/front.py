"""The front job: the Pareto front of two metrics by the epsilon-constraint method, with continuation.

1. The single-metric optima (optimize job, multistart) give the ends: the y-optimum fixes where x starts, the
   x-optimum where it ends.
2. Between them, y is optimized subject to x at evenly spaced levels (x >= level when x is maximized), the study's
   limits kept. The level is a pinned variable of one model, so the built solver is reused and each point is
   warm-started from its neighbour (primal values and multipliers): a continuation along the front.
3. Levels Ipopt cannot meet are marked infeasible; dominated points are dropped; the knee is the point farthest from
   the chord between the ends (in coordinates scaled to the ends). Each point keeps its decisions, all metrics, its
   active limits and the local slope dy/dx of the front (the sensitivity of the optimum to the level).

References
----------
Y. Y. Haimes, L. S. Lasdon and D. A. Wismer, "On a bicriterion formulation of the problems of integrated system
identification and system optimization", IEEE Trans. Syst. Man Cybern. SMC-1 (1971) 296-297: the epsilon-constraint
method. K. Miettinen, Nonlinear Multiobjective Optimization, Kluwer 1999, section 3.2. I. Das, "On characterizing the
'knee' of the Pareto curve based on normal-boundary intersection", Struct. Optim. 18 (1999) 107-115: the knee as the
point of largest distance from the line through the ends.
"""

from __future__ import annotations

import dataclasses
import time
from dataclasses import dataclass, field

import numpy as np

from tubeyield import __version__
from tubeyield import status as st
from tubeyield.jobs.optimize import HELD_BY_STATE_BOUND, SAME_OPTIMUM, held_by_state_bound, optimize
from tubeyield.jobs.problem import goal_scale, prepare
from tubeyield.jobs.refine import verify_and_refine
from tubeyield.jobs.result import Result, finite_json
from tubeyield.reactor import frozen_heap
from tubeyield.reactor.metrics import all_metrics, metric_display
from tubeyield.reactor.verify import compare, reference
from tubeyield.solve import OK_CONDITIONS, forked, make_solver
from tubeyield.solve.marginals import bound_reports, limit_reports, limit_sensitivity
from tubeyield.study.metric import Metric
from tubeyield.study.schema import Study
from tubeyield.study.units import decisions_to_user

LEVEL = "front_level"


@dataclass
class FrontResult:
    study: str
    x: str
    y: str
    x_sense: str
    y_sense: str
    status: str                      # done | partial | infeasible | failed | single point (tubeyield.status)
    points: list                     # every level: dict with level, status, x, y, decisions, metrics, ...
    ends: dict                       # {"y_optimum": Result dict, "x_optimum": Result dict}
    knee: int | None = None          # index into points
    timing: dict = field(default_factory=dict)
    message: str = ""

    def front_points(self) -> list:
        return [p for p in self.points if p["status"] in st.SOLVED and not p["dominated"]]

    def to_dict(self) -> dict:
        return finite_json({"tool": f"tubeyield {__version__}", "study": self.study, "x": self.x, "y": self.y,
                        "x_sense": self.x_sense, "y_sense": self.y_sense, "status": self.status,
                        "message": self.message, "knee": self.knee, "points": self.points, "ends": self.ends,
                        "timing": self.timing})

    def table(self):
        return front_table(self.to_dict())

    def to_frame(self):
        """One row per level (pandas): see front_table."""
        return self.table()


def front_table(front: dict):
    """One row per level of a front (as saved): status, x, y, trade-off, decisions, metrics, active limits."""
    import pandas as pd
    rows = []
    for i, p in enumerate(front["points"]):
        row = {"point": i, "status": p["status"], "dominated": p["dominated"], "knee": i == front.get("knee"),
               "level": p["level"], front["x"]: p["x"], front["y"]: p["y"], "trade_off_dy_dx": p["trade_off"],
               "check_max_rel_error": p["check"]}
        for name, v in p["decisions"].items():
            row[f"decision:{name}"] = v if not isinstance(v, list) else f"profile {min(v):.6g}..{max(v):.6g}"
        row.update(p["metrics"])
        row["active_limits"] = "; ".join(p["active"])
        rows.append(row)
    return pd.DataFrame(rows)


def _with_goal(study: Study, metric: Metric, sense: str) -> Study:
    return dataclasses.replace(study, goal=dataclasses.replace(study.goal, metric=metric, sense=sense))


def front(study: Study, *, points: int | None = None, solver=None, workers: int = 1) -> FrontResult:
    """The Pareto front of `study`'s [front] metrics: the two single-metric optima (the ends, each a multistart
    optimization; on two or more `workers` the two at once, see _ends), then the levels of x between them by
    continuation, one after another."""
    spec = study.front
    n = points or spec.points
    t0 = time.perf_counter()
    solver = solver or make_solver(study.numerics)
    options = dict(study.numerics.ipopt)
    xs, ys = spec.x_sense, spec.y_sense
    timing = {}

    # One model for the y-end and the whole front: optimize y subject to x at a level (a pinned variable). At the
    # y-end the level is set where it cannot bind. When both metrics have one sense the x-end is solved on the same
    # model, its objective selected by pinned weights (ReactorModel.set_goals): the problem is written and the solver
    # built once for both ends (measured on the demo front, 21 points: 3.18 s before, 2.84 s). Both ends rank the same
    # screened simulations.
    t = time.perf_counter()
    fstudy = _with_goal(study, spec.y, ys)
    xstudy = _with_goal(study, spec.x, xs)
    from tubeyield.solve import multistart
    screened = multistart.screen(study, multistart.design(
        study, max(16, 8 * study.numerics.starts, 4 * sum(not d.fixed for d in study.decisions))))
    model = prepare(fstudy)
    shared = xs == ys
    if shared:
        x_best = max((abs(c.goal) for c in multistart.rerank(xstudy, screened) if c.goal == c.goal), default=None)
        model.set_goals([(spec.y, ys, model.goal_scale), (spec.x, xs, goal_scale(xstudy, x_best))])
    x_scale = 1.0 if spec.x.kind in ("conversion", "yield", "selectivity") else None
    free_level = -1e6 if xs == "max" else 1e6
    model.add_level(LEVEL, spec.x, ">=" if xs == "max" else "<=", free_level * (x_scale or 1.0), x_scale or 1.0)
    y_opt, x_opt, y_snapshot, processes = _ends(fstudy, xstudy, model, solver, options, screened, shared, workers)
    timing["ends"] = time.perf_counter() - t
    if processes > 1:
        timing["end_processes"] = processes
    ends = {"y_optimum": y_opt.to_dict(), "x_optimum": x_opt.to_dict()}
    result = FrontResult(study.name, spec.x.text, spec.y.text, xs, ys, st.DONE, [], ends, timing=timing)
    if y_opt.status not in USABLE_ENDS or x_opt.status not in USABLE_ENDS:
        bad = y_opt if y_opt.status not in USABLE_ENDS else x_opt
        result.status = bad.status
        result.message = f"the single-metric optimum failed: {bad.message}"
        return result

    # Levels are set on the model, in SI; results hold display units (mol/L, mol/(L*h)).
    x_start = y_opt.metrics[spec.x.text]["value"] / _display_factor(spec.x)
    x_end = x_opt.metrics[spec.x.text]["value"] / _display_factor(spec.x)
    sign = 1.0 if xs == "max" else -1.0
    if sign * (x_end - x_start) <= SAME_OPTIMUM * max(abs(x_start), abs(x_end)):
        result.status = st.SINGLE_POINT if y_opt.status == st.OPTIMAL else st.PARTIAL
        result.message = (f"no trade-off: the optimum of {spec.y.text} is also the optimum of {spec.x.text}")
        result.points = [_point_from_result(y_opt, spec, y_opt.metrics[spec.x.text]["value"])]
        result.knee = 0
        return result

    t = time.perf_counter()
    mesh = _finest_mesh(model, y_opt, x_opt)
    if mesh is not None or x_scale is None:
        # the ends needed a finer mesh (or the x metric needs its own scale): a front model to match
        x_scale = x_scale or max(abs(x_start), abs(x_end), 1e-300)
        model = prepare(fstudy, mesh if mesh is not None else model.mesh,
                        scale_hint=y_opt.goal["value"] / _display_factor(spec.y))
        model.add_level(LEVEL, spec.x, ">=" if xs == "max" else "<=", x_start, x_scale)
        _start_from(model, study, y_opt.decisions_si)
        y_snapshot = None
    else:
        model.restore(y_snapshot)
    if any(end.check is not None and end.check.released for end in (y_opt, x_opt)):
        # An end's verification dropped the bounds of species that feed nothing back inside elements, because one
        # held that optimum (jobs/refine.py). The levels near that end need the same: on a front whose x-end was
        # solved on its own model, the levels between 0.986 and 0.998 in conversion on the demo network were
        # infeasible with the bounds (the x-end held at 0.98598 has them) and failed.
        model.free_inert_stages()
    timing["build"] = time.perf_counter() - t

    # The levels stay inside the attainable range: x_end is itself an optimum found to solver tolerance (on the ends'
    # own mesh), so the last level sits a little inside it; a level that still fails is retried from its neighbour,
    # then moved inwards, and the x-end's own optimum closes the front if even that fails.
    levels = np.linspace(x_start, x_end, n)
    levels[-1] = x_end - sign * END_INSET * max(abs(x_end - x_start), 1e-300)
    t = time.perf_counter()
    # The first level is the y-end itself: its own verified optimum is the first point, not solved again. A cold
    # solve there took 21-22 Ipopt iterations on the demo fronts, and failed in about 1 of 25 runs of a series
    # network near complete conversion while the mesh estimate still varied between runs. The second level starts
    # cold from the y-end's primal point: a warm start from the y-end's primal-dual pair took 19 and 47 iterations
    # on two demo fronts, against 15 and 36 cold (the level constraint, slack at the y-end, must take up its
    # multiplier from zero).
    model.set_level(LEVEL, float(levels[0]))
    previous, earlier, first_solved = y_snapshot, None, False
    if y_snapshot is None and _x_limits_at(model, spec, float(levels[0])):
        # A front model rebuilt on a finer mesh does not hold the y-end's multipliers: where a limit on x sets the
        # slope there, the first level is solved on it for that slope, and the front goes on from its solution.
        res = solver.solve(model.m, options=options, reuse_structure=True)
        if res.solver.termination_condition in OK_CONDITIONS:
            first_solved, previous = True, model.snapshot()
    result.points.append(_first_point(y_opt, model if y_snapshot is not None or first_solved else None, spec))
    with frozen_heap():             # the ends' models and solvers live on: out of the collector's scans
        for i in range(1, len(levels)):
            level = levels[i]
            if previous is not None and earlier is not None:
                _predict(previous, earlier)
            point = _level_point(model, study, spec, float(level), solver, options, previous,
                                 warm=i > 1 or first_solved)
            if point is not None and (point["status"] == st.UNVERIFIED or point.get("held")):
                # this level needs a finer mesh than the front model's, or a state bound holds it: refine for it
                # alone (the front goes on on its own model)
                previous = model.snapshot()
                point = _refined_point(model, fstudy, study, spec, float(level), solver, options, timing) or point
                model.restore(previous)
            if point is None and i == len(levels) - 1:
                for inset in (1e-4, 1e-2):
                    inner = x_end - sign * inset * abs(x_end - x_start)
                    point = _level_point(model, study, spec, float(inner), solver, options, previous)
                    if point is not None:
                        break
                if point is None and x_opt.status == st.OPTIMAL:
                    point = _end_point(x_opt, spec, "the x-end's own optimum (the last level could not be solved "
                                                    "on the front model)")
            if point is not None:
                earlier, previous = (previous if point["status"] == st.OPTIMAL else None), model.snapshot()
                result.points.append(point)
            else:
                earlier = None
                result.points.append({"level": metric_display(spec.x, float(level))[0], "status": st.FAILED, "x": None,
                                      "y": None, "trade_off": None, "decisions": {}, "metrics": {}, "active": [],
                                      "check": None, "dominated": False,
                                      "iterations": solver.last_stats.get("iterations")})
                if previous is not None:
                    model.restore(previous)
    timing["points"] = time.perf_counter() - t
    if result.points and result.points[-1]["status"] == st.OPTIMAL:
        # At the x-end the feasible set shrinks to a point: the front ends steeply and the multipliers there are
        # ill-determined (measured: -5 in one run, -640 in another), so no slope is reported.
        result.points[-1]["trade_off"] = None
    _mark_dominated(result.points, xs, ys)
    result.knee = _knee(result.points, xs, ys)
    n_failed = sum(p["status"] == st.FAILED for p in result.points)
    n_unverified = sum(p["status"] == st.UNVERIFIED for p in result.points)
    notes = []
    if n_failed:
        notes.append(f"{n_failed} of {len(result.points)} levels could not be solved")
    if n_unverified:
        notes.append(f"{n_unverified} of {len(result.points)} points did NOT pass their verification")
    if st.UNVERIFIED in (y_opt.status, x_opt.status):
        notes.append("an end of the front did NOT pass its verification")
    result.message = "; ".join(notes)
    if n_failed == len(result.points):
        result.status = st.FAILED
    elif notes:
        result.status = st.PARTIAL
    held = [w for end in (y_opt, x_opt) for w in end.warnings if w.startswith(HELD_BY_STATE_BOUND)]
    if held:
        # said, not made a failure: the front's other points are verified; the end may lie further out
        result.message = "; ".join(([result.message] if result.message else []) +
                                   [f"an end of the front may lie further out: {held[0]}"])
    held_levels = [p for p in result.points if p.get("held")]
    if held_levels:
        # said likewise: a level whose element could not be split further (numerics.max_elements) stays held
        result.message = "; ".join(([result.message] if result.message else []) + [
            f"{len(held_levels)} of {len(result.points)} levels may lie further out: {held_levels[0]['held']}"])
    timing["total"] = time.perf_counter() - t0
    return result


END_INSET = 1e-6     # the last level's distance inside the x-end, as a share of the front's x range
USABLE_ENDS = (st.OPTIMAL, st.UNVERIFIED)


def _ends(fstudy: Study, xstudy: Study, model, solver, options: dict, screened: list, shared: bool, workers: int):
    """The front's two single-metric optima: (y-end, x-end, snapshot of the model at the y-end or None, the number
    of processes that solved them).

    Each end is optimized from the model as the front built it: what the y-end's solves and verification leave on the
    shared model (its values, released stage bounds, tightened temperature limits) is put aside while the x-end is
    solved, and put back for the levels. On two or more cores the x-end is solved in a forked copy of this process,
    made before the y-end starts, while this process solves the y-end (solve/forked.py), each end's starts on half of
    the cores: the same results as one end after the other, in the time of the longer end. The problem is written
    and the solver built before the copy is made, once for both."""
    built = model.bounds_state(), model.snapshot()
    concurrent = workers > 1 and forked.can_fork()
    cores = (max(1, workers // 2), max(1, workers - workers // 2)) if concurrent else (workers, workers)
    kept = {}

    def y_end():
        y_opt = optimize(fstudy, solver=solver, model=model, screened=screened, workers=cores[0])
        kept["snapshot"] = model.snapshot() if y_opt.status in USABLE_ENDS else None
        return y_opt

    def x_end():
        if not shared:
            return optimize(xstudy, solver=solver, screened=screened, workers=cores[1])
        after_y = model.bounds_state(), model.snapshot()
        _put_back(model, built)
        model.use_goal(1)
        try:
            return optimize(xstudy, solver=solver, model=model, screened=screened, workers=cores[1])
        finally:
            model.use_goal(0)
            _put_back(model, after_y)

    if concurrent and hasattr(solver, "build"):
        solver.build(model.m, options=options)
    y_opt, x_opt = forked.forked_map(lambda i: y_end() if i == 0 else x_end(), 2, 2 if concurrent else 1,
                                     first_here=True)
    return y_opt, x_opt, kept.get("snapshot"), 2 if concurrent else 1


def _put_back(model, state) -> None:
    bounds, values = state
    model.restore_bounds(bounds)
    model.restore(values)


def _finest_mesh(model, *ends):
    """The edges of the finest mesh the ends were verified on, when it is not the model's own; else None."""
    meshes = [r.check.edges for r in ends if r.check is not None and r.check.edges is not None]
    if not meshes or model.edges is None:
        return None
    finest = max(meshes, key=len)
    return None if len(finest) == len(model.edges) and np.allclose(finest, model.edges) else finest


def _level_point(model, study: Study, spec, level: float, solver, options, previous, warm: bool = True) \
        -> dict | None:
    """The front point at one level: from the previous point (warm unless told otherwise), or from its neighbour
    again cold; None if both fail."""
    model.set_level(LEVEL, level)
    res = solver.solve(model.m, options=options, reuse_structure=True, warmstart=warm and previous is not None)
    ok = res.solver.termination_condition in OK_CONDITIONS
    if not ok and previous is not None:
        model.restore(previous)
        _start_from(model, study, model.decision_values())
        res = solver.solve(model.m, options=options, reuse_structure=True)
        ok = res.solver.termination_condition in OK_CONDITIONS
    if not ok:
        if previous is not None:
            model.restore(previous)
        return None
    return _point(model, study, spec, level, solver)


def _predict(previous: dict, earlier: dict) -> None:
    """Start the next level from the secant through the last two points (the levels are evenly spaced): every free
    variable at 2 x_previous - x_earlier, kept within its bounds. A first-order predictor for the continuation (E. L.
    Allgower and K. Georg, Introduction to Numerical Continuation Methods, SIAM 2003, chapter 2): the warm start then
    corrects a small error instead of the whole step."""
    for (v, x1), (_, x0) in zip(previous["values"], earlier["values"]):
        if x1 is None or x0 is None or (v.lb is not None and v.lb == v.ub):
            continue
        x = 2.0 * x1 - x0
        if v.lb is not None:
            x = max(x, v.lb)
        if v.ub is not None:
            x = min(x, v.ub)
        v.set_value(x, skip_validation=True)


def _refined_point(model, fstudy: Study, study: Study, spec, level: float, solver, options, timing) -> dict | None:
    """The point at `level` verified on a refined mesh (jobs/refine.py, the level constraint added to each finer
    model); None when even the finest mesh does not pass."""
    _, x_scale = model.levels[LEVEL]
    sense = ">=" if spec.x_sense == "max" else "<="
    verified = verify_and_refine(fstudy, model, solver, options, timing,
                                 extend=lambda m: m.add_level(LEVEL, spec.x, sense, level, x_scale))
    if verified.model is model or not verified.check.passed or verified.acceptable_only:
        return None
    point = _point(verified.model, study, spec, level, solver)
    point["note"] = f"verified on a finer mesh of {verified.model.elements} elements"
    return point


def _start_from(model, study: Study, decisions: dict) -> None:
    from tubeyield.reactor.simulate import simulate
    model.set_decisions(decisions)
    model.initialize(simulate(study, model.decision_values(), T_profile=model.temperature_function()))


def _point(model, study: Study, spec, level: float, solver) -> dict:
    values = model.decision_values()
    metrics = {}
    for met in all_metrics(study):
        metrics[met.text] = metric_display(met, model.metric_value(met))[0]
    x = metric_display(spec.x, model.metric_value(spec.x))[0]
    y = metric_display(spec.y, model.metric_value(spec.y))[0]
    dy_dx, _ = _slope(model, spec, level)
    active = [r.text for r in limit_reports(model) if r.active]
    active += [f"{b.decision} at {b.side} bound" for b in bound_reports(model) if b.side in ("low", "high")]
    check = compare(model, reference(model), study.numerics.check_tolerance)
    held = held_by_state_bound(model, f" at the level {metric_display(spec.x, level)[0]:.6g}")
    return {"level": metric_display(spec.x, level)[0], "status": st.OPTIMAL if check.passed else st.UNVERIFIED,
            "x": x, "y": y, "trade_off": dy_dx, "decisions": decisions_to_user(study, values), "metrics": metrics,
            "active": active, "check": check.max_rel_error, "dominated": False,
            "iterations": solver.last_stats.get("iterations"), "held": held}


def _slope(model, spec, level: float) -> tuple[float, bool]:
    """The local slope of the front, dy/dx in display units, at the solution the model holds, and whether a study
    limit on x sits at `level` (its multiplier is part of the slope)."""
    # The sensitivity of the optimal objective to the level, which is a pinned variable (a casadi parameter, its
    # multiplier loaded as its reduced cost). Unlike the constraint's dual, it does not depend on how the writer
    # orients `x >= level`. Scaled objective per scaled level -> display units.
    # A study limit on the same metric in the same direction at this level (the y-end often sits on it) is the same
    # constraint twice: Ipopt splits the multiplier between the two, and moving the level past the limit frees
    # neither, so the slope is their sum.
    level_var, x_scale = model.levels[LEVEL]
    sensitivity = (model.m.rc.get(level_var, 0.0) or 0.0) / x_scale
    on_limit = False
    for lh in _x_limits_at(model, spec, level):
        sensitivity += limit_sensitivity(model, lh) / lh.scale
        on_limit = True
    dy_dx = sensitivity * model.goal_scale
    dy_dx *= _display_factor(spec.y) / _display_factor(spec.x)
    return dy_dx, on_limit


def _x_limits_at(model, spec, level: float) -> list:
    """The study's limits on the front's x metric, in its direction, whose bound is `level`."""
    sense = ">=" if spec.x_sense == "max" else "<="
    return [lh for lh in model.limits if lh.limit.metric == spec.x and lh.limit.sense == sense
            and abs(lh.limit.bound - level) <= 1e-6 * max(1.0, abs(level))]


def _first_point(y_opt: Result, model, spec) -> dict:
    """The y-end's own verified optimum as the front's first point. Its slope is one-sided: when a study limit on x
    binds there, its multiplier is the slope (read from `model`, holding the y-end's solution, when given); when
    none does, the y-end's multipliers do not give it (the level constraint is only weakly active there, and where
    the y-end sits on decision bounds the measured values were 0.0064 against 0.0134 between the first two points),
    and no slope is reported."""
    point = _end_point(y_opt, spec, "the y-end's own optimum")
    if model is not None:
        dy_dx, on_limit = _slope(model, spec, model.levels[LEVEL][0].value * model.levels[LEVEL][1])
        if on_limit:
            point["trade_off"] = dy_dx
    return point


def _display_factor(metric: Metric) -> float:
    return metric_display(metric, 1.0)[0]


def _end_point(end: Result, spec, note: str) -> dict:
    """An end's own verified optimum as a point of the front: the first point always, the last one when its level
    could not be solved on the front model. No slope: the level's multiplier is not there."""
    point = _point_from_result(end, spec, end.metrics[spec.x.text]["value"])
    point.update(trade_off=None, note=note)
    return point


def _point_from_result(r: Result, spec, level: float) -> dict:
    return {"level": level, "status": r.status, "x": r.metrics[spec.x.text]["value"],
            "y": r.metrics[spec.y.text]["value"], "trade_off": 0.0,
            "decisions": {k: v["value"] for k, v in r.decisions.items()},
            "metrics": {k: v["value"] for k, v in r.metrics.items()},
            "active": [lim["text"] for lim in r.limits if lim["active"]], "check": r.check.max_rel_error,
            "dominated": False, "iterations": None, "held": None}


def _mark_dominated(points: list, xs: str, ys: str, tol: float = 1e-9) -> None:
    """A point is dominated when another is at least as good in both metrics and better in one."""
    sx = 1.0 if xs == "max" else -1.0
    sy = 1.0 if ys == "max" else -1.0
    good = [p for p in points if p["status"] in st.SOLVED]
    for p in good:
        for q in good:
            if q is p:
                continue
            dx, dy = sx * (q["x"] - p["x"]), sy * (q["y"] - p["y"])
            scale_x, scale_y = tol * max(1.0, abs(p["x"])), tol * max(1.0, abs(p["y"]))
            if dx >= -scale_x and dy >= -scale_y and (dx > scale_x or dy > scale_y):
                p["dominated"] = True
                break


# The least outward bulge, as a share of the diagonal of the front's box, for a point to be called its knee: a
# front within 1 % of its chord is practically straight, and the farthest point from the chord is then noise (on a
# straight front of opposite senses the "knee" fell on an end).
KNEE_MIN_BULGE = 0.01


def _knee(points: list, xs: str, ys: str) -> int | None:
    """Index of the non-dominated point farthest from the chord between the ends, in coordinates scaled to [0, 1]
    (the knee of a front in the sense of I. Das, "On characterizing the 'knee' of the Pareto curve based on
    normal-boundary intersection", Structural Optimization 18, 1999); None when no point bulges outwards by
    KNEE_MIN_BULGE."""
    idx = [i for i, p in enumerate(points) if p["status"] in st.SOLVED and not p["dominated"]]
    if len(idx) < 3:
        return idx[0] if idx else None
    x = np.array([points[i]["x"] for i in idx])
    y = np.array([points[i]["y"] for i in idx])
    xr = (x - x[0]) / (x[-1] - x[0]) if x[-1] != x[0] else np.zeros_like(x)
    yr = (y - y[-1]) / (y[0] - y[-1]) if y[0] != y[-1] else np.zeros_like(y)
    # chord from (0, 1) to (1, 0): distance |x + y - 1| / sqrt(2); the knee bulges outwards (x + y > 1)
    d = (xr + yr - 1.0) / np.sqrt(2.0)
    k = int(np.argmax(d))
    return idx[k] if d[k] > KNEE_MIN_BULGE * np.sqrt(2.0) else None
