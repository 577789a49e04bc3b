"""What every reactor model shares: parameters as pinned variables, scaled decisions, inlet, metrics, goal, limits.

Scaling (so that Ipopt sees numbers near 1): residence time over its upper bound, temperature over the largest
temperature bound, flows over v0 C_s (see balances.py). Parameters (kinetics, feed, heat transfer) are variables
pinned by equal bounds: the solver plug-in passes them to casadi as parameters, so a new scenario or a new
epsilon level changes bounds only and the built solver is reused.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from pyomo.common.collections import ComponentMap

from tubeyield.modeling import pyo
from tubeyield.reactor.balances import concentration_scale, concentrations, inlet
from tubeyield.reactor.kinetics import Kinetics
from tubeyield.reactor.metrics import metric_value
from tubeyield.reactor.parameters import study_parameters
from tubeyield.study.metric import Limit, Metric
from tubeyield.study.schema import Study

T_STATE_BOUNDS = (0.05, 20.0)   # scaled temperature states (energy balance): wide, only to keep exp() finite


def temperature_scale(study: Study) -> float:
    """The largest temperature the study names: decision bounds, feed temperature, limits."""
    temps = [d.high for d in study.decisions if d.si_unit == "K"]
    temps += [study.feed.T] if study.feed.T else []
    temps += [lim.bound for lim in study.goal.limits if lim.metric is None]
    return max(temps) if temps else 300.0


@dataclass
class Handle:
    """A decision in the model: SI value = scale * variable. A profile decision has one variable per point."""
    name: str
    var: object                   # VarData, or a list of VarData (one per point) for a profile
    scale: float
    low: float                    # SI bounds from the study
    high: float
    profile: bool = False
    positions: list | None = None  # a profile's positions z (its values' places along the reactor)

    def datas(self):
        return list(self.var) if self.profile else [self.var]

    def value(self):
        vals = [pyo.value(v) * self.scale for v in self.datas()]
        return vals if self.profile else vals[0]

    def set(self, si_value) -> None:
        """Set the starting value (clipped into the bounds); a list sets a profile point by point, a function of z
        (a starting profile) is evaluated at the profile's positions."""
        if callable(si_value):
            si_value = [si_value(z) for z in self.positions]
        vals = si_value if isinstance(si_value, (list, tuple, np.ndarray)) else [si_value] * len(self.datas())
        for v, x in zip(self.datas(), vals):
            v.set_value(min(max(float(x), self.low), self.high) / self.scale, skip_validation=True)

    def pin(self, si_value: float) -> None:
        for v in self.datas():
            v.setlb(si_value / self.scale)
            v.setub(si_value / self.scale)
            v.set_value(si_value / self.scale, skip_validation=True)

    def release(self) -> None:
        for v in self.datas():
            v.setlb(self.low / self.scale)
            v.setub(self.high / self.scale)

    @property
    def fixed(self) -> bool:
        return self.low == self.high


@dataclass
class LimitHandle:
    limit: Limit
    constraints: list             # ConstraintData, one per point for a temperature limit
    scale: float                  # constraint = expression_SI / scale
    level: object = None          # the bound as a pinned variable (scaled), or None (elastic limits)

    def set_bound(self, value_si: float) -> None:
        """Move the limit's bound (SI) without rebuilding the solver: the level is a pinned variable."""
        v = value_si / self.scale
        self.level.setlb(v)
        self.level.setub(v)
        self.level.set_value(v, skip_validation=True)

    @property
    def bound(self) -> float:
        """The bound the constraints hold now (SI): the study's, or a tightened one."""
        return float(self.level.lb) * self.scale


# A state bound's multiplier (goal scaled to order one) above which the bound is said to hold the optimum. Measured:
# 7.5e3 and 8.1e3 on the demo's highest conversion under the byproduct cap (held by the dimer's state at the first
# collocation point, 0.01215 below the true optimum), at most 5e-4 on the demo's other optima and the bench's stiff
# networks, none on a 4-zone temperature profile.
HOLD_MULTIPLIER = 1e-2


class ReactorModel:
    """Base of the plug-flow and stirred-tank models. Subclasses implement `_build` (states and balances), setting
    `u_out`, `T_out` (scaled), `T_points` (scaled temperature expressions the limit T applies to)."""

    kind = "base"
    inert_stages_free = False     # free_inert_stages has dropped bounds inside elements (plug flow)

    def __init__(self, study: Study, mesh=None, state_scale: dict | None = None):
        self.study = study
        # the mesh: a number of elements (the study's starting mesh with that many) or the element edges themselves
        self.mesh = study.reactor.elements if mesh is None else mesh
        self.elements = self.mesh if isinstance(self.mesh, int) else len(self.mesh) - 1
        self.edges = None
        # Each species' scaled flow is divided by its own typical size (from a simulation at the start), so that
        # fast intermediates at quasi-steady levels of 1e-8 are order one to Ipopt, like everything else.
        self.state_scale = {s: 1.0 for s in study.symbols}
        self.state_scale.update(state_scale or {})
        m = self.m = pyo.ConcreteModel(name=study.name)
        m.dual = pyo.Suffix(direction=pyo.Suffix.IMPORT)
        m.rc = pyo.Suffix(direction=pyo.Suffix.IMPORT)
        self.c_ref = concentration_scale(study)
        self.T_scale = temperature_scale(study)
        self.tau_scale = study.decision("tau").high
        values = study_parameters(study)
        m.P = pyo.Set(initialize=list(values), ordered=True)
        m.par = pyo.Var(m.P, initialize=values)
        for k, v in values.items():
            m.par[k].setlb(v)
            m.par[k].setub(v)
        self.par = {k: m.par[k] for k in values}
        self.kin = Kinetics(study, self.par)
        self.decisions: dict[str, Handle] = {}
        self._scalar_decisions()
        self.u0, self.c_s, balance = inlet(study, self.par, {s: self.m.ratio[s] for s in self.ratio_species},
                                           self._inlet_temperature(), self.c_ref)
        if balance is not None:
            m.balance_nonnegative = pyo.Constraint(expr=balance >= 0)
        self.limits: list[LimitHandle] = []
        self.levels: dict[str, tuple[object, float]] = {}
        self._build()
        self.conc_out = concentrations(study, self.u_out, self.T_scale * self.T_out, self.c_s, self.par)

    # ------------------------------------------------------------------------------------------------- decisions

    @property
    def ratio_species(self) -> list[str]:
        return [d.name[6:] for d in self.study.decisions if d.name.startswith("ratio.")]

    def _scalar_decisions(self) -> None:
        m, st = self.m, self.study
        heat = st.reactor.heat

        def scalar(name, component, scale):
            d = st.decision(name)
            component.setlb(d.low / scale)
            component.setub(d.high / scale)
            component.set_value(0.5 * (d.low + d.high) / scale, skip_validation=True)
            self.decisions[name] = Handle(name, component, scale, d.low, d.high)

        m.tau = pyo.Var()
        scalar("tau", m.tau, self.tau_scale)
        if heat == "isothermal":
            m.T = pyo.Var()
            scalar("T", m.T, self.T_scale)
        elif heat == "zones":
            m.Tz = pyo.Var(pyo.RangeSet(1, st.reactor.zones))
            for k in range(1, st.reactor.zones + 1):
                scalar(f"T.{k}", m.Tz[k], self.T_scale)
        elif st.reactor.mode.energy_balance:
            m.T_in = pyo.Var()
            scalar("T_in", m.T_in, self.T_scale)
            if st.reactor.mode.wall:
                m.T_cool = pyo.Var()
                scalar("T_cool", m.T_cool, self.T_scale)
        m.ratio = pyo.Var(self.ratio_species)
        for s in self.ratio_species:
            scalar(f"ratio.{s}", m.ratio[s], 1.0)

    def _inlet_temperature(self):
        heat = self.study.reactor.heat
        if heat == "isothermal":
            return self.T_scale * self.m.T
        if heat == "zones":
            return self.T_scale * self.m.Tz[1]
        if self.study.reactor.mode.energy_balance:
            return self.T_scale * self.m.T_in
        return None  # free: a gas feed must name its temperature (checked by the loader)

    def tau_expr(self):
        return self.tau_scale * self.m.tau

    def T_cool_expr(self):
        return self.T_scale * self.m.T_cool if self.study.reactor.mode.wall else None

    def profile_positions(self) -> list:
        """Positions z of a profile decision's values (the element edges of a free temperature profile)."""
        return list(self.edges) if self.edges is not None else []

    def set_decisions(self, values: dict) -> None:
        for name, v in values.items():
            self.decisions[name].set(v)

    def decision_values(self) -> dict:
        return {name: h.value() for name, h in self.decisions.items()}

    # ------------------------------------------------------------------------------------------------- parameters

    def set_parameters(self, study: Study) -> None:
        """Pin the parameters to the values of another study with the same structure (a sweep scenario)."""
        for k, v in study_parameters(study).items():
            self.par[k].setlb(v)
            self.par[k].setub(v)
            self.par[k].set_value(v, skip_validation=True)
        for d in study.decisions:
            h = self.decisions.get(d.name)
            if h is not None and (h.low, h.high) != (d.low, d.high):
                h.low, h.high = d.low, d.high
                h.release()
        self.study = study

    # ---------------------------------------------------------------------------------------------------- metrics

    def metric(self, metric: Metric):
        return metric_value(self.study, metric, self.u_out, self.u0, self.tau_expr(), self.c_s, self.conc_out)

    def metric_value(self, metric: Metric) -> float:
        return float(pyo.value(self.metric(metric)))

    def outlet_flows(self) -> dict[str, float]:
        """Outlet molar flows, mol/s, at the current values."""
        scale = pyo.value(self.c_s) * self.study.feed.flow
        return {s: float(pyo.value(self.u_out[s])) * scale for s in self.study.symbols}

    def temperatures(self) -> list[float]:
        return [float(pyo.value(t)) * self.T_scale for t in self.T_points]

    # ------------------------------------------------------------------------------------------- goal and limits

    def set_goal(self, metric: Metric, sense: str, scale: float = 1.0) -> None:
        m = self.m
        if m.component("goal") is not None:
            m.del_component("goal")
        m.goal = pyo.Objective(expr=self.metric(metric) / scale, sense=pyo.maximize if sense == "max" else pyo.minimize)
        self.goal_metric, self.goal_sense, self.goal_scale = metric, sense, scale

    def set_goals(self, goals: list) -> None:
        """One objective for several goals of the same sense, (metric, sense, scale) each, weighted by pinned
        variables: `use_goal(k)` selects goal k by its weight alone, so the written problem and the built solver
        serve every goal (a front's two ends on one model)."""
        m = self.m
        senses = {sense for _, sense, _ in goals}
        if len(senses) != 1:
            raise ValueError("set_goals takes goals of one sense")
        if m.component("goal") is not None:
            m.del_component("goal")
        m.goal_weight = pyo.Var(range(len(goals)), initialize=0.0, bounds=(0.0, 0.0))
        m.goal = pyo.Objective(expr=sum(m.goal_weight[k] * self.metric(metric) / scale
                                        for k, (metric, _, scale) in enumerate(goals)),
                               sense=pyo.maximize if senses.pop() == "max" else pyo.minimize)
        self._goals = list(goals)
        self.use_goal(0)

    def use_goal(self, k: int) -> None:
        """Make goal k of set_goals the objective (its weight 1, the others 0)."""
        for i, w in self.m.goal_weight.items():
            w.setlb(1.0 if i == k else 0.0)
            w.setub(1.0 if i == k else 0.0)
            w.set_value(1.0 if i == k else 0.0, skip_validation=True)
        self.goal_metric, self.goal_sense, self.goal_scale = self._goals[k]

    def add_limits(self, limits) -> None:
        for i, lim in enumerate(limits):
            self.limits.append(self._limit(f"limit_{len(self.limits)}", lim))

    def _limit(self, name: str, lim: Limit) -> LimitHandle:
        """A limit whose bound is a pinned variable, so that tightening it (temperature between mesh points) or
        relaxing it (the range of its marginal) re-solves without a new NL file or solver."""
        m = self.m
        scale = self.T_scale if lim.metric is None else _metric_scale(lim.metric, lim.bound, self)
        level = pyo.Var(initialize=lim.bound / scale, bounds=(lim.bound / scale, lim.bound / scale))
        m.add_component(f"{name}_bound", level)
        if lim.metric is None:
            idx = list(range(len(self.T_points)))
            rule = (lambda m, k: self.T_points[k] <= level) if lim.sense == "<=" else (lambda m, k: self.T_points[k] >= level)
            con = pyo.Constraint(idx, rule=rule)
            m.add_component(name, con)
            return LimitHandle(lim, [con[k] for k in idx], scale, level)
        expr = self.metric(lim.metric) / scale
        con = pyo.Constraint(expr=expr >= level if lim.sense == ">=" else expr <= level)
        m.add_component(name, con)
        return LimitHandle(lim, [con], scale, level)

    def add_elastic_limits(self, limits) -> list:
        """Limits with a non-negative slack each (one shared by the points of a temperature limit), for the
        minimum-violation problem that finds the closest point when no point meets every limit. Returns the
        slack variables; their sum is the violation to minimize (each in the units of its scaled constraint)."""
        m = self.m
        slacks = []
        for i, lim in enumerate(limits):
            slack = pyo.Var(bounds=(0.0, None), initialize=0.0)
            m.add_component(f"slack_{i}", slack)
            name = f"elastic_{i}"
            if lim.metric is None:
                bound = lim.bound / self.T_scale
                idx = list(range(len(self.T_points)))
                if lim.sense == "<=":
                    con = pyo.Constraint(idx, rule=lambda m, k: self.T_points[k] - slack <= bound)
                else:
                    con = pyo.Constraint(idx, rule=lambda m, k: self.T_points[k] + slack >= bound)
                m.add_component(name, con)
                self.limits.append(LimitHandle(lim, [con[k] for k in idx], self.T_scale))
            else:
                scale = _metric_scale(lim.metric, lim.bound, self)
                expr = self.metric(lim.metric) / scale
                con = pyo.Constraint(expr=expr + slack >= lim.bound / scale if lim.sense == ">=" else
                                     expr - slack <= lim.bound / scale)
                m.add_component(name, con)
                self.limits.append(LimitHandle(lim, [con], scale))
            slacks.append(slack)
        return slacks

    def state_bound_holds(self, multiplier: float = HOLD_MULTIPLIER) -> list[tuple[str, float, float]]:
        """(species, position, |multiplier|) of every state at its lower bound in the last solution whose bound
        multiplier is at least `multiplier` (the goal is scaled to order one), largest first. A state bound guards
        the solver's iterates and is not a limit of the reactor: an optimum it holds may not be the reactor's."""
        u = self.m.component("u")
        if u is None:
            return []
        out = []
        for (s, z), v in u.items():
            if v.lb is not None and v.value is not None and v.value - v.lb <= 1e-6:
                m = abs(self.m.rc.get(v, 0.0))
                if m >= multiplier:
                    out.append((s, float(z), m))
        return sorted(out, key=lambda h: -h[2])

    def inert_species(self) -> list[str]:
        """Species whose states feed nothing back into the balances (reactor/plug.py); none for tank models."""
        return []

    def free_inert_stages(self) -> list[str]:
        """Drop the state bounds of species that feed nothing back, at the stage points inside elements; returns the
        species freed. The plug-flow model has such points (reactor/plug.py); tank models have none."""
        return []

    def bound_inert_stages(self) -> None:
        """Undo free_inert_stages."""

    def inside_element(self, z: float) -> bool:
        return False

    def snapshot(self) -> dict:
        """Values of every variable and the loaded duals and reduced costs, to restore a solution later."""
        variables = self._variables()
        return {"values": list(zip(variables, [v.value for v in variables])),
                "dual": ComponentMap(self.m.dual), "rc": ComponentMap(self.m.rc)}

    def restore(self, snap: dict) -> None:
        """Put back a snapshot's values. Pinned variables (parameters, fixed decisions) keep the value their bounds
        give now: the snapshot may come from another scenario."""
        for v, x in snap["values"]:
            lb, ub = v.bounds
            v.set_value(lb if lb is not None and lb == ub else x, skip_validation=True)
        for suffix, saved in ((self.m.dual, snap["dual"]), (self.m.rc, snap["rc"])):
            suffix.clear()
            suffix.update(saved)

    def plain_snapshot(self, snap: dict) -> dict:
        """`snap` as plain numbers, for a forked copy of this process to hand back (solve/forked.py): the values in
        the order of the model's variables, duals and reduced costs by position in its constraint and variable
        lists. A copy's lists hold its copies of the same components in the same order."""
        variables = self._variables()
        if len(snap["values"]) != len(variables):
            raise ValueError("a snapshot of another structure of the model")
        var_at = {id(v): k for k, v in enumerate(variables)}
        con_at = {id(c): k for k, c in enumerate(self._constraints())}
        return {"values": [x for _, x in snap["values"]],
                "dual": [(con_at[id(c)], y) for c, y in snap["dual"].items()],
                "rc": [(var_at[id(v)], y) for v, y in snap["rc"].items()]}

    def from_plain(self, plain: dict) -> dict:
        """The snapshot that plain_snapshot gave as plain numbers (in this process or a forked copy of it)."""
        variables, constraints = self._variables(), self._constraints()
        dual, rc = ComponentMap(), ComponentMap()
        for k, y in plain["dual"]:
            dual[constraints[k]] = y
        for k, y in plain["rc"]:
            rc[variables[k]] = y
        return {"values": list(zip(variables, plain["values"])), "dual": dual, "rc": rc}

    def bounds_state(self) -> dict:
        """The bounds of every variable (among them the pinned levels of limits and goal weights) and the study, as
        set now: what a solve and its verification may change on a shared model (released stage bounds, tightened
        temperature limits, another goal), to put back with restore_bounds."""
        return {"bounds": [(v.lb, v.ub) for v in self._variables()], "inert_free": self.inert_stages_free,
                "study": self.study}

    def restore_bounds(self, state: dict) -> None:
        """Put back the bounds and study of a bounds_state of this model."""
        variables = self._variables()
        if len(variables) != len(state["bounds"]):
            raise ValueError("bounds of another structure of the model")
        for v, (lb, ub) in zip(variables, state["bounds"]):
            v.setlb(lb)
            v.setub(ub)
            if lb is not None and lb == ub:
                v.set_value(lb, skip_validation=True)
        self.inert_stages_free = state["inert_free"]
        self.study = state["study"]

    def _constraints(self) -> list:
        return list(self.m.component_data_objects(pyo.Constraint, descend_into=True))

    def _variables(self) -> list:
        """Every variable of the model, listed once per set of Var components and their sizes (a snapshot of every
        sweep scenario and front level walked the model for them: 6 ms of a 50 ms warm re-solve on the demo)."""
        components = list(self.m.component_objects(pyo.Var, descend_into=True))
        key = tuple((id(c), len(c)) for c in components)
        if getattr(self, "_variables_key", None) != key:
            self._variables_list = list(self.m.component_data_objects(pyo.Var, descend_into=True))
            self._variables_key = key
            self._variables_of = components     # held, so that no other component can take one of their ids
        return self._variables_list

    def add_level(self, name: str, metric: Metric, sense: str, value: float, scale: float):
        """A metric bound whose level is a pinned variable (for epsilon-constraint fronts): change it with
        `set_level` without rebuilding the solver."""
        m = self.m
        level = pyo.Var(initialize=value / scale, bounds=(value / scale, value / scale))
        m.add_component(f"{name}_level", level)
        expr = self.metric(metric) / scale
        m.add_component(name, pyo.Constraint(expr=expr >= level if sense == ">=" else expr <= level))
        self.levels[name] = (level, scale)
        return level

    def set_level(self, name: str, value: float) -> None:
        level, scale = self.levels[name]
        level.setlb(value / scale)
        level.setub(value / scale)
        level.set_value(value / scale, skip_validation=True)

    # ------------------------------------------------------------------------------------------------ subclasses

    def _build(self) -> None:
        raise NotImplementedError

    def initialize(self, sim) -> None:
        raise NotImplementedError

    def reference_guess(self):
        """What the reference simulation starts from (None: the inlet; tank models give their solution)."""
        return None

    def profile_rows(self) -> list[dict]:
        raise NotImplementedError

    def profile(self):
        """The profile at the current values (pandas DataFrame)."""
        import pandas as pd
        return pd.DataFrame(self.profile_rows())


def _metric_scale(metric: Metric, bound: float, model: ReactorModel) -> float:
    if metric.kind in ("conversion", "yield", "selectivity"):
        return 1.0
    if abs(bound) > 0:
        return abs(bound)
    if metric.kind == "outlet":
        return model.c_ref
    return 1.0
