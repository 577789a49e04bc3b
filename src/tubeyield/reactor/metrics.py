"""Outlet metrics (definitions in study/metric.py) over plain arithmetic: floats, arrays or Pyomo expressions."""

from __future__ import annotations

from tubeyield.chemistry.network import yield_factor
from tubeyield.study.metric import Metric
from tubeyield.study.schema import Study
from tubeyield.study.units import convert

# Units shown to users for metrics that have one (SI inside).
DISPLAY_UNIT = {"outlet": "mol/L", "productivity": "mol/(L*h)"}


def metric_display(metric: Metric, value_si: float) -> tuple[float, str]:
    """A metric's SI value in the unit shown to users, and that unit ('' for fractions)."""
    unit = DISPLAY_UNIT.get(metric.kind, "")
    return (convert(value_si, metric.si_unit, unit) if unit else value_si), unit


def metric_value(study: Study, metric: Metric, u_out: dict, u_in: dict, tau, c_s, conc_out: dict):
    """Value of `metric` in SI from scaled outlet and inlet flows, residence time (s), scale C_s and outlet
    concentrations (mol/m^3)."""
    key = study.goal.key
    kind, s = metric.kind, metric.species
    if kind == "conversion":
        return 1.0 - u_out[s] / u_in[s]
    if kind == "yield":
        factor, _ = yield_factor(study, s)
        return factor * (u_out[s] - u_in[s]) / u_in[key]
    if kind == "selectivity":
        factor, _ = yield_factor(study, s)
        return factor * (u_out[s] - u_in[s]) / (u_in[key] - u_out[key])
    if kind == "outlet":
        return conc_out[s]
    if kind == "productivity":
        return (u_out[s] - u_in[s]) * c_s / tau
    if kind == "margin":
        value = 0.0
        for sp, price in study.goal.value:
            value = value + price * u_out[sp]
        for sp, cost in study.goal.cost:
            value = value - cost * u_in[sp]
        return value / u_in[key]
    raise ValueError(kind)


def all_metrics(study: Study) -> list[Metric]:
    """The metrics every result reports: conversion of each fed reactant, yield and selectivity of each product
    on a path from the key reactant (co-products such as water are left out unless the study names them)."""
    from tubeyield.chemistry.network import fed_species, yield_paths
    fed = fed_species(study)
    consumed = {s for r in study.reactions for s, c in r.stoichiometry().items() if c < 0}
    carried = yield_paths(study)
    out = [Metric("conversion", s) for s in study.symbols if s in fed and s in consumed]
    out += [Metric("yield", s) for s in study.symbols if s in carried]
    out += [Metric("selectivity", s) for s in study.symbols if s in carried]
    for m in [study.goal.metric] + [lim.metric for lim in study.goal.limits if lim.metric is not None]:
        if m not in out:
            out.append(m)
    if study.front is not None:
        for m in (study.front.x, study.front.y):
            if m not in out:
                out.append(m)
    return out
