"""The window job: maps of the goal and of every limit over two decisions, and the operating window where all hold.

Cells are evaluated with the reference simulation at the study's other decisions fixed at the optimum (or at values
the study fixes), or re-optimized in every cell (others = "optimized", one NLP per cell, continuation along rows).

Speed. In a plug-flow reactor whose temperature does not depend on the reactor length (isothermal, adiabatic, cooled:
the balances in residence time t = V/v0 do not contain the total residence time), the outlet at residence time tau is
the state at t = tau of one integration to the longest tau: a tau axis costs one integration per row, not one per
cell (the plug-flow/batch analogy; Levenspiel, Chemical Reaction Engineering, 3rd ed. 1999, ch. 5). Other cases
simulate every cell, spread over processes.
"""

from __future__ import annotations

import os
import time
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field

import numpy as np

from tubeyield import __version__
from tubeyield.jobs.result import finite_json
from tubeyield.errors import SimulationFailed
from tubeyield.reactor.metrics import metric_display
from tubeyield.reactor.simulate import simulate
from tubeyield.study.schema import Study
from tubeyield.study.units import convert

WINDOW_RTOL = 1e-8


@dataclass
class WindowResult:
    study: str
    x: str
    y: str
    x_unit: str
    y_unit: str
    x_values: np.ndarray          # user units
    y_values: np.ndarray
    maps: dict                    # name -> 2-D array (ny, nx): goal metric and each limit's quantity, display units
    holds: dict                   # limit text -> boolean 2-D array
    window: np.ndarray            # all limits hold
    fixed: dict                   # other decisions: name -> value (user units)
    goal: str
    optimum: dict | None          # {"x": .., "y": ..} user units
    others: str
    timing: dict = field(default_factory=dict)
    method: str = ""
    units: dict = field(default_factory=dict)   # unit of each fixed decision and of the goal ('' for fractions)

    def to_dict(self) -> dict:
        return finite_json({"tool": f"tubeyield {__version__}", "study": self.study, "x": self.x, "y": self.y,
                        "x_unit": self.x_unit, "y_unit": self.y_unit, "x_values": self.x_values.tolist(),
                        "y_values": self.y_values.tolist(), "maps": {k: v.tolist() for k, v in self.maps.items()},
                        "holds": {k: v.tolist() for k, v in self.holds.items()}, "window": self.window.tolist(),
                        "fixed": self.fixed, "goal": self.goal, "optimum": self.optimum, "others": self.others,
                        "timing": self.timing, "method": self.method, "units": self.units,
                        "window_share": float(np.mean(self.window))})

    def to_frame(self):
        """One row per cell (pandas): the two decisions, the goal and each limit's quantity, whether each limit
        holds, and whether the cell is inside the window."""
        import pandas as pd
        rows = []
        for j, yv in enumerate(self.y_values):
            for i, xv in enumerate(self.x_values):
                row = {f"{self.x} [{self.x_unit}]": xv, f"{self.y} [{self.y_unit}]": yv}
                row.update({k: v[j, i] for k, v in self.maps.items()})
                row.update({f"holds: {k}": bool(v[j, i]) for k, v in self.holds.items()})
                row["window"] = bool(self.window[j, i])
                rows.append(row)
        return pd.DataFrame(rows)

    @classmethod
    def from_dict(cls, d: dict) -> "WindowResult":
        return cls(d["study"], d["x"], d["y"], d["x_unit"], d["y_unit"], np.array(d["x_values"]),
                   np.array(d["y_values"]), {k: _arr(v) for k, v in d["maps"].items()},
                   {k: np.array(v, dtype=bool) for k, v in d["holds"].items()}, np.array(d["window"], dtype=bool),
                   d["fixed"], d["goal"], d["optimum"], d["others"], d.get("timing", {}), d.get("method", ""),
                   d.get("units", {}))


def _arr(v):
    return np.array([[np.nan if x is None else x for x in row] for row in v], dtype=float)


def axis_values(study: Study, name: str, n: int) -> np.ndarray:
    """SI grid of a decision: logarithmic for a residence time spanning a decade or more, else linear."""
    d = study.decision(name)
    if name == "tau" and d.high / d.low >= 10:
        return np.geomspace(d.low, d.high, n)
    return np.linspace(d.low, d.high, n)


def _quantities(study: Study, sim) -> dict:
    """Goal and limit quantities of one simulated point, in display units (limit quantities in the bound's unit)."""
    out = {study.goal.metric.text: metric_display(study.goal.metric, sim.metric(study.goal.metric))[0]}
    for lim in study.goal.limits:
        if lim.metric is None:
            v = sim.max_temperature() if lim.sense == "<=" else sim.min_temperature()
            out[lim.text] = convert(v, "K", lim.unit) if lim.unit else v
        else:
            v = sim.metric(lim.metric)
            out[lim.text] = convert(v, lim.metric.si_unit, lim.unit) if lim.unit else v
    return out


def _holds(study: Study, values: dict) -> dict:
    out = {}
    for lim in study.goal.limits:
        v = values[lim.text]
        if lim.metric is None:
            bound = convert(lim.bound, "K", lim.unit) if lim.unit else lim.bound
        else:
            bound = convert(lim.bound, lim.metric.si_unit, lim.unit) if lim.unit else lim.bound
        # a cell on the boundary holds: the simulations are trusted to the study's check tolerance, so an optimum
        # sitting on a limit (which the map's cells then touch) is not judged outside the window by round-off
        tol = study.numerics.check_tolerance * max(1.0, abs(bound))
        out[lim.text] = (v <= bound + tol) if lim.sense == "<=" else (v >= bound - tol)
    return out


def optimum_marker(study: Study, decisions_si: dict) -> dict:
    """Where an optimum sits on the window's two axes, in user units: {"x": .., "y": ..}."""
    dx, dy = study.decision(study.window.x), study.decision(study.window.y)
    return {"x": convert(decisions_si[dx.name], dx.si_unit, dx.unit) if dx.unit else decisions_si[dx.name],
            "y": convert(decisions_si[dy.name], dy.si_unit, dy.unit) if dy.unit else decisions_si[dy.name]}


def window(study: Study, base: dict, *, workers: int | None = None, optimum: dict | None = None) -> WindowResult:
    """Maps over study.window's two decisions. `base` holds SI values of every decision (e.g. the optimum); the
    window's `fix` entries override them."""
    spec = study.window
    t0 = time.perf_counter()
    base = dict(base)
    base.update(dict(spec.fix))
    xs = axis_values(study, spec.x, spec.points[0])
    ys = axis_values(study, spec.y, spec.points[1])
    if spec.others == "optimized":
        grids, method = _optimized_cells(study, base, xs, ys)
    elif _tau_axis_shortcut(study, spec):
        grids, method = _tau_rows(study, base, xs, ys, spec)
    else:
        grids, method = _all_cells(study, base, xs, ys, workers)
    names = [study.goal.metric.text] + [lim.text for lim in study.goal.limits]
    maps = {n: np.array([[cell.get(n, np.nan) for cell in row] for row in grids]) for n in names}
    holds = {lim.text: np.zeros_like(maps[lim.text], dtype=bool) for lim in study.goal.limits}
    for j, row in enumerate(grids):
        for i, cell in enumerate(row):
            if not cell:
                continue
            for text, ok in _holds(study, cell).items():
                holds[text][j, i] = ok
    window_mask = np.ones((len(ys), len(xs)), dtype=bool)
    for h in holds.values():
        window_mask &= h
    if not study.goal.limits:
        window_mask &= np.isfinite(maps[study.goal.metric.text])
    dx, dy = study.decision(spec.x), study.decision(spec.y)
    fixed = {k: _fixed_text(v, study.decision(k)) for k, v in base.items() if k not in (spec.x, spec.y)}
    return WindowResult(study.name, spec.x, spec.y, dx.unit, dy.unit, _user(xs, dx), _user(ys, dy), maps, holds,
                        window_mask, fixed, study.goal.metric.text, optimum, spec.others,
                        {"total": time.perf_counter() - t0, "cells": len(xs) * len(ys)}, method,
                        {**{k: study.decision(k).unit for k in fixed},
                         study.goal.metric.text: metric_display(study.goal.metric, 1.0)[1]})


def _fixed_text(v, d):
    """A decision held fixed in the map, in user units; a profile summarized by its range."""
    values = list(v) if isinstance(v, list) else getattr(v, "values", None)
    if values is not None:
        low, high = (convert(x, d.si_unit, d.unit) if d.unit else x for x in (min(values), max(values)))
        return f"profile {low:.4g} to {high:.4g}"
    return convert(v, d.si_unit, d.unit) if d.unit else v


def _user(values: np.ndarray, d) -> np.ndarray:
    return np.array([convert(v, d.si_unit, d.unit) for v in values]) if d.unit else np.asarray(values)


def _tau_axis_shortcut(study: Study, spec) -> bool:
    return (study.reactor.form.axial and not study.reactor.mode.profile
            and "tau" in (spec.x, spec.y))


def _tau_rows(study: Study, base: dict, xs, ys, spec):
    """One integration per value of the other axis; every residence time read off its dense solution at once."""
    from tubeyield.reactor.balances import concentrations
    from tubeyield.reactor.metrics import metric_value
    tau_on_x = spec.x == "tau"
    taus, others = (xs, ys) if tau_on_x else (ys, xs)
    other_name = spec.y if tau_on_x else spec.x
    tau_max = float(np.max(taus))
    f = np.asarray(taus, dtype=float) / tau_max
    fine = np.union1d(np.linspace(0.0, 1.0, 1001), f)
    at = np.searchsorted(fine, f)
    rows_by_other = []
    for v in others:
        point = dict(base)
        point[other_name] = float(v)
        point["tau"] = tau_max
        sim = simulate(study, point, rtol=WINDOW_RTOL)
        states = sim.states_at(f)
        u = states.flows
        conc = concentrations(study, u, states.T, sim.c_s, sim.par)

        def value(metric):
            return np.broadcast_to(metric_value(study, metric, u, sim.u_in, np.asarray(taus), sim.c_s, conc), f.shape)

        columns = {study.goal.metric.text: metric_display(study.goal.metric, 1.0)[0] * value(study.goal.metric)}
        T_fine = sim.states_at(fine).T
        for lim in study.goal.limits:
            if lim.metric is None:
                running = np.maximum.accumulate(T_fine) if lim.sense == "<=" else np.minimum.accumulate(T_fine)
                vals = running[at]
                columns[lim.text] = np.array([convert(t, "K", lim.unit) for t in vals]) if lim.unit else vals
            else:
                vals = value(lim.metric)
                columns[lim.text] = (vals * convert(1.0, lim.metric.si_unit, lim.unit)) if lim.unit else vals
        rows_by_other.append([{k: float(c[i]) for k, c in columns.items()} for i in range(len(taus))])
    if tau_on_x:
        grid = rows_by_other                                 # rows follow y = the other decision
    else:
        grid = [list(col) for col in zip(*rows_by_other)]   # rows follow y = tau
    return grid, f"one integration per {other_name} value (plug-flow residence-time shortcut), rtol {WINDOW_RTOL:g}"


def _cell(args):
    study, point = args
    try:
        return _quantities(study, simulate(study, point, rtol=WINDOW_RTOL))
    except (SimulationFailed, ArithmeticError):   # a cell where the model cannot be evaluated is left blank
        return {}


def _all_cells(study: Study, base: dict, xs, ys, workers):
    spec = study.window
    jobs = []
    for y in ys:
        for x in xs:
            p = dict(base)
            p[spec.x], p[spec.y] = float(x), float(y)
            jobs.append((study, p))
    workers = workers or os.cpu_count() or 1
    if workers > 1 and len(jobs) > 50:
        with ProcessPoolExecutor(max_workers=workers) as pool:
            cells = list(pool.map(_cell, jobs, chunksize=max(1, len(jobs) // (8 * workers))))
    else:
        cells = [_cell(j) for j in jobs]
    nx = len(xs)
    return [cells[j * nx:(j + 1) * nx] for j in range(len(ys))], \
        f"one simulation per cell on {workers} process(es), rtol {WINDOW_RTOL:g}"


def _optimized_cells(study: Study, base: dict, xs, ys):
    """Others re-optimized in every cell: one NLP per cell with the two axes pinned, warm-started along rows."""
    from tubeyield.jobs.problem import prepare
    from tubeyield.solve import OK_CONDITIONS, make_solver
    spec = study.window
    solver = make_solver(study.numerics)
    model = prepare(study)
    model.set_decisions({k: v for k, v in base.items() if k in model.decisions})
    grid = []
    first = True
    for j, y in enumerate(ys):
        order = range(len(xs)) if j % 2 == 0 else range(len(xs) - 1, -1, -1)   # snake: neighbours stay close
        cells = {}
        for i in order:
            model.decisions[spec.x].pin(float(xs[i]))
            model.decisions[spec.y].pin(float(ys[j]))
            if first:
                model.initialize(simulate(study, model.decision_values(), T_profile=model.temperature_function()))
            res = solver.solve(model.m, reuse_structure=not first, warmstart=not first)
            first = False
            if res.solver.termination_condition in OK_CONDITIONS:
                point = model.decision_values()
                cells[i] = _quantities(study, simulate(study, point, T_profile=model.temperature_function(),
                                                       rtol=WINDOW_RTOL))
            else:
                cells[i] = {}
                model.initialize(simulate(study, model.decision_values(), T_profile=model.temperature_function()))
        grid.append([cells[i] for i in range(len(xs))])
    return grid, "others re-optimized in every cell (Ipopt, warm-started along rows)"
