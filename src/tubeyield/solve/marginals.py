"""What limits the optimum: active limits and decision bounds with their marginal values, from the duals.

By the envelope theorem the multiplier of an active constraint is the rate of change of the optimal objective with
the constraint's bound (Luenberger and Ye, Linear and Nonlinear Programming, 4th ed., Springer 2016, section 11.8:
sensitivity). The solver plug-in loads duals in that sense (d objective / d bound), so a limit's marginal is

    d goal / d bound = (reduced cost of the pinned bound variable) * goal_scale / constraint_scale

and a decision bound's marginal is the reduced cost of its scaled variable times goal_scale / decision_scale. Values
are reported in the user's units: goal units per unit of the bound as the user wrote it.
"""

from __future__ import annotations

from dataclasses import dataclass

from tubeyield.modeling import pyo
from tubeyield.reactor.metrics import DISPLAY_UNIT
from tubeyield.reactor.model import ReactorModel
from tubeyield.study.units import convert, decision_to_user, unit_step

ACTIVE_DUAL = 1e-7        # |marginal| (scaled) above which a limit counts as active
ACTIVE_BOUND = 1e-6       # distance to a bound, relative to the decision's range, that counts as at the bound


def goal_unit(model: ReactorModel) -> str:
    return DISPLAY_UNIT.get(model.goal_metric.kind, "")


def _per(model: ReactorModel, what: str, unit: str) -> str:
    """'yield:B per K', 'yield:B per unit of conversion:A', 'outlet:B mol/L per min'."""
    g = model.goal_metric.text + (f" {goal_unit(model)}" if goal_unit(model) else "")
    return f"{g} per {unit}" if unit else f"{g} per unit of {what}"


def _goal_to_display(model: ReactorModel, value_si: float) -> float:
    unit = goal_unit(model)
    return convert(value_si, model.goal_metric.si_unit, unit) if unit else value_si


@dataclass
class LimitReport:
    text: str
    value: float              # the limited quantity at the optimum, in the bound's user unit
    unit: str
    active: bool
    marginal: float           # goal (display unit) per user unit of the bound
    marginal_unit: str
    bound: float = 0.0        # the limit's bound, in its user unit
    sense: str = "<="

    @property
    def margin(self) -> float:
        """Room left to the bound (> 0) or how much it is exceeded (< 0), in the bound's user unit."""
        return self.bound - self.value if self.sense == "<=" else self.value - self.bound

    def to_dict(self):
        return {"text": self.text, "value": self.value, "unit": self.unit, "active": self.active,
                "marginal": self.marginal, "marginal_unit": self.marginal_unit, "bound": self.bound,
                "sense": self.sense, "margin": self.margin}


@dataclass
class BoundReport:
    decision: str
    side: str                 # low | high | fixed
    bound: float              # user unit
    unit: str
    marginal: float           # goal (display unit) per user unit of the decision
    marginal_unit: str
    share: float = 1.0        # profile decisions: share of points at this bound

    def to_dict(self):
        return {"decision": self.decision, "side": self.side, "bound": self.bound, "unit": self.unit,
                "marginal": self.marginal, "marginal_unit": self.marginal_unit, "share": self.share}


def limit_sensitivity(model: ReactorModel, lh) -> float:
    """d goal / d bound of one limit, both scaled: the reduced cost of its pinned bound variable (the solver's
    parameter sensitivity), independent of how the NL writer orients the constraint; for an elastic limit
    (constant bound), the sum of its constraints' duals."""
    if lh.level is not None:
        return model.m.rc.get(lh.level, 0.0) or 0.0
    return sum(model.m.dual.get(c, 0.0) or 0.0 for c in lh.constraints)


def limit_reports(model: ReactorModel) -> list[LimitReport]:
    out = []
    for lh in model.limits:
        lim = lh.limit
        scaled = limit_sensitivity(model, lh)
        if lim.metric is None:
            temps = model.temperatures()
            value_si = max(temps) if lim.sense == "<=" else min(temps)
            si_unit = "K"
        else:
            value_si = model.metric_value(lim.metric)
            si_unit = lim.metric.si_unit
        per_si = scaled * model.goal_scale / lh.scale
        marginal = _goal_to_display(model, per_si) * unit_step(lim.unit, si_unit)
        value = convert(value_si, si_unit, lim.unit) if lim.unit else value_si
        active = abs(scaled) > ACTIVE_DUAL
        if not active:
            marginal = 0.0          # below the solver's noise: a limit that does not bind is worth nothing
        bound = convert(lim.bound, si_unit, lim.unit) if lim.unit else lim.bound
        out.append(LimitReport(lim.text, value, lim.unit, active, marginal, _per(model, lim.name, lim.unit),
                               bound, lim.sense))
    return out


def bound_reports(model: ReactorModel) -> list[BoundReport]:
    """Decision bounds that hold the optimum (and fixed decisions, whose marginal says what freeing them is worth)."""
    out = []
    study = model.study
    for name, h in model.decisions.items():
        d = study.decision(name)
        step = unit_step(d.unit, d.si_unit)
        datas = h.datas()
        rcs = [model.m.rc.get(v, 0.0) or 0.0 for v in datas]
        unit_label = _per(model, name, d.unit)
        if h.fixed:
            per_si = sum(rcs) * model.goal_scale / h.scale if abs(sum(rcs)) > ACTIVE_DUAL else 0.0
            out.append(BoundReport(name, "fixed", decision_to_user(d.low, d), d.unit, _goal_to_display(model, per_si) * step,
                                   unit_label))
            continue
        span = h.high - h.low
        for side, bound in (("low", h.low), ("high", h.high)):
            at = [i for i, v in enumerate(datas) if abs(pyo.value(v) * h.scale - bound) <= ACTIVE_BOUND * span]
            if not at:
                continue
            per_si = sum(rcs[i] for i in at) * model.goal_scale / h.scale
            if abs(sum(rcs[i] for i in at)) <= ACTIVE_DUAL:
                continue
            out.append(BoundReport(name, side, decision_to_user(bound, d), d.unit, _goal_to_display(model, per_si) * step,
                                   unit_label, share=len(at) / len(datas)))
    return out

