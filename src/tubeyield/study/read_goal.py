"""What the study asks for: [goal] (metric, key reactant, limits, prices), [front], [window] and [numerics]."""

from __future__ import annotations

import difflib

from tubeyield.errors import StudyError
from tubeyield.study import caps
from tubeyield.study.metric import parse_limit, parse_metric
from tubeyield.study.schema import Feed, FrontSpec, Goal, Numerics, WindowSpec
from tubeyield.study.toml import Table, number
from tubeyield.study.units import to_si


def read_goal(t: Table, symbols: set[str], reactions, feed: Feed, decisions) -> Goal:
    has_max, has_min = t.has("maximize"), t.has("minimize")
    if has_max == has_min:
        raise StudyError(t.key("maximize"), "exactly one of maximize or minimize, e.g. maximize = 'yield:B'")
    sense = "max" if has_max else "min"
    metric = parse_metric(t.take("maximize" if has_max else "minimize"), t.key("maximize" if has_max else "minimize"), symbols)
    fed = {s for s, v in feed.inlet().items() if v > 0} | {d.name[6:] for d in decisions if d.name.startswith("ratio.")}
    default_key = next((s for r in reactions for s, _ in r.reactants if s in fed), None)
    key = t.take("key", default_key, types=str)
    if key is None:
        raise StudyError(t.key("key"), "the key reactant (a fed species that reacts); none could be inferred")
    if key not in symbols:
        raise StudyError(t.key("key"), f"a species of the network, got {key!r}")
    if key not in fed:
        raise StudyError(t.key("key"), f"a species present in the feed, {key!r} is not fed")
    if key in {d.name[6:] for d in decisions if d.name.startswith("ratio.")}:
        raise StudyError(t.key("key"), f"a key reactant with its own feed concentration, not a ratio species ({key!r})")
    limits_raw = t.take("limits", [], types=list, what="a list of limits such as ['conversion:A >= 0.9']")
    limits = tuple(parse_limit(text, f"{t.key('limits')}[{i}]", symbols) for i, text in enumerate(limits_raw))
    value = _prices(t, "value", symbols)
    cost = _prices(t, "cost", symbols)
    currency = t.take("currency", "", types=str)
    if metric.kind == "margin" and not value:
        raise StudyError(t.key("value"), "values per mol of the products for the goal 'margin', e.g. { B = 30.0 }")
    t.close(("maximize", "minimize", "key", "limits", "value", "cost", "currency"))
    return Goal(metric, sense, key, limits, value, cost, currency)


def _prices(t: Table, name: str, symbols: set[str]) -> tuple[tuple[str, float], ...]:
    data = t.take(name, {}, types=dict, what="a table of prices per mol such as { B = 30.0 }")
    out = []
    for s, v in data.items():
        key = f"{t.key(name)}.{s}"
        if s not in symbols:
            raise StudyError(key, f"a species of the network, got {s!r}")
        out.append((s, number(v, key)))
    return tuple(out)


# ------------------------------------------------------------------------------------------ front, window, numerics


def read_front(t: Table | None, symbols: set[str]) -> FrontSpec | None:
    if t is None:
        return None
    x = parse_metric(t.take("x", what="the metric on the x axis, e.g. 'conversion:A'"), t.key("x"), symbols)
    y = parse_metric(t.take("y", what="the metric on the y axis, e.g. 'selectivity:B'"), t.key("y"), symbols)
    if x == y:
        raise StudyError(t.key("y"), "a metric other than x")
    points = int(number(t.take("points", 21), t.key("points"), integer=True, low=3))
    caps.at_most(points, caps.MAX_FRONT_POINTS, t.key("points"), "a number of front levels")
    senses = []
    for axis in ("x_sense", "y_sense"):
        v = t.take(axis, "max", types=str)
        if v not in ("max", "min"):
            raise StudyError(t.key(axis), f"'max' or 'min' (which way the metric is better), got {v!r}")
        senses.append(v)
    t.close()
    return FrontSpec(x, y, points, *senses)


def read_window(t: Table | None, decisions) -> WindowSpec | None:
    if t is None:
        return None
    names = [d.name for d in decisions]
    axes = []
    for axis in ("x", "y"):
        name = t.take(axis, what=f"a decision for the {axis} axis, one of {', '.join(names)}", types=str)
        if name not in names:
            hint = difflib.get_close_matches(name, names, n=1)
            raise StudyError(t.key(axis), f"a decision, one of {', '.join(names)}, got {name!r}"
                                          + (f"; did you mean {hint[0]!r}?" if hint else ""))
        if next(d for d in decisions if d.name == name).fixed:
            raise StudyError(t.key(axis), f"a decision with a range; {name!r} is fixed in [operate]")
        axes.append(name)
    if axes[0] == axes[1]:
        raise StudyError(t.key("y"), "a decision other than x")
    pts = t.take("points", [60, 60], types=(list, int))
    pts = [pts, pts] if isinstance(pts, int) else pts
    if len(pts) != 2:
        raise StudyError(t.key("points"), f"[nx, ny] or one number, got {pts!r}")
    pts = tuple(int(number(p, f"{t.key('points')}[{i}]", integer=True, low=2)) for i, p in enumerate(pts))
    for i, n in enumerate(pts):
        caps.at_most(n, caps.MAX_WINDOW_POINTS, f"{t.key('points')}[{i}]", "a number of points per axis")
    caps.at_most(pts[0] * pts[1], caps.MAX_WINDOW_CELLS, t.key("points"), "a number of map cells (nx times ny)")
    others = t.take("others", "optimum", types=str)
    if others not in ("optimum", "optimized"):
        raise StudyError(t.key("others"), f"'optimum' (others fixed at the optimum) or 'optimized' (re-optimized in "
                                          f"every cell), got {others!r}")
    fix_t = t.table("fix", {})
    fix = []
    for name, v in fix_t.data.items():
        if name not in names or name in axes:
            raise StudyError(fix_t.key(name), f"a decision other than the two axes, one of "
                                              f"{', '.join(n for n in names if n not in axes)}")
        d = next(d for d in decisions if d.name == name)
        kind = {"s": "time", "K": "temperature", "": "dimensionless"}[d.si_unit]
        fix.append((name, to_si(v, kind, fix_t.key(name))))
    fix_t.seen.update(fix_t.data)
    t.close()
    return WindowSpec(axes[0], axes[1], pts, others, tuple(fix))


def read_numerics(t: Table) -> Numerics:
    starts = int(number(t.take("starts", 4), t.key("starts"), integer=True, low=1))
    caps.at_most(starts, caps.MAX_STARTS, t.key("starts"), "a number of starting points")
    tol = number(t.take("check_tolerance", 1e-6), t.key("check_tolerance"))
    if not 0 < tol < 1:
        raise StudyError(t.key("check_tolerance"), f"a relative tolerance between 0 and 1, got {tol:g}")
    max_el = int(number(t.take("max_elements", 640), t.key("max_elements"), integer=True, low=1))
    caps.at_most(max_el, caps.MAX_ELEMENTS, t.key("max_elements"), "a number of elements")
    solver = t.take("solver", "bundled", types=str)
    if solver not in ("bundled", "executable"):
        raise StudyError(t.key("solver"), f"'bundled' (the Ipopt in the casadi wheel) or 'executable' (an ipopt on "
                                          f"PATH), got {solver!r}")
    time_limit = to_si(t.take("time_limit", "1 h"), "time", t.key("time_limit"))
    if time_limit <= 0:
        raise StudyError(t.key("time_limit"), f"a positive wall time for one command, got {t.data['time_limit']!r}")
    caps.at_most(time_limit, caps.MAX_TIME_LIMIT, t.key("time_limit"), "a wall time (s)")
    ipopt = t.take("ipopt", {}, types=dict, what="a table of Ipopt options such as { max_iter = 500 }")
    from tubeyield.solve.options import user_option_problem
    for k, v in ipopt.items():
        problem = user_option_problem(k, v)
        if problem:
            raise StudyError(f"{t.key('ipopt')}.{k}", problem)
    t.close()
    return Numerics(starts, tol, max_el, solver, tuple(ipopt.items()), time_limit)
