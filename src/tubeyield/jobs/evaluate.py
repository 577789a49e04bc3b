"""The evaluate job: the study at a given operating point, by the reference simulation alone (no optimization)."""

from __future__ import annotations

import time

from tubeyield.errors import SimulationFailed, StudyError
from tubeyield.jobs.result import Result
from tubeyield.reactor.metrics import all_metrics
from tubeyield.reactor.simulate import simulate
from tubeyield.solve.multistart import limit_misses, violation
from tubeyield.study.schema import Study
from tubeyield.study.units import convert, decision_to_user, to_si

_KIND = {"s": "time", "K": "temperature", "": "dimensionless"}


def parse_settings(study: Study, settings: list[str]) -> tuple[dict, list[str]]:
    """`name=value` settings ("tau=120 s", "T=340K", "ratio.O=1.5") -> SI values for every decision, and notes on
    decisions left at the middle of their range. `T=...` sets every zone of a zoned reactor."""
    values: dict[str, float] = {}
    names = [d.name for d in study.decisions]
    for text in settings:
        name, sep, raw = text.partition("=")
        name = name.strip()
        if not sep:
            raise StudyError(f"--set {text}", "name=value with units, e.g. tau=120s or T=340K")
        targets = [n for n in names if n.startswith("T.")] if name == "T" and "T" not in names else [name]
        if not targets or targets[0] not in names:
            raise StudyError(f"--set {text}", f"a decision, one of {', '.join(names)}")
        d = study.decision(targets[0])
        v = to_si(raw.strip(), _KIND[d.si_unit], f"--set {name}")
        if v < 0 or (v == 0 and d.si_unit in ("s", "K")):
            raise StudyError(f"--set {name}", f"a {'positive' if d.si_unit in ('s', 'K') else 'non-negative'} "
                                              f"value, got {raw.strip()!r}")
        for n in targets:
            values[n] = v
    notes = []
    for name, v in values.items():
        d = study.decision(name)
        if not d.low * (1 - 1e-12) <= v <= d.high * (1 + 1e-12):
            low, high, shown = decision_to_user([d.low, d.high, v], d)
            u = f" {d.unit}" if d.unit else ""
            notes.append(f"{name} = {shown:.6g}{u} is outside the study's range [{low:.6g}, {high:.6g}]{u}")
    for d in study.decisions:
        if d.name not in values:
            values[d.name] = d.low if d.fixed else 0.5 * (d.low + d.high)
            if not d.fixed:
                shown = decision_to_user(values[d.name], d)
                notes.append(f"{d.name} not set: the middle of its range, {shown:.6g} {d.unit}".rstrip())
    return values, notes


def evaluate(study: Study, values: dict) -> Result:
    """Metrics, outlet and limits at `values` (SI by decision name) from the reference simulation."""
    t0 = time.perf_counter()
    sim = simulate(study, values)
    metrics = {}
    from tubeyield.reactor.metrics import metric_display
    for met in all_metrics(study):
        v, unit = metric_display(met, sim.metric(met))
        metrics[met.text] = {"value": v, "unit": unit}
    limits = []
    for lim in study.goal.limits:
        if lim.metric is None:
            value_si = sim.max_temperature() if lim.sense == "<=" else sim.min_temperature()
            si_unit = "K"
        else:
            value_si, si_unit = sim.metric(lim.metric), lim.metric.si_unit
        holds = value_si <= lim.bound * (1 + 1e-9) if lim.sense == "<=" else value_si >= lim.bound * (1 - 1e-9)
        shown = (lambda v: convert(v, si_unit, lim.unit) if lim.unit else v)
        value, bound = shown(value_si), shown(lim.bound)
        # margin in the limit's unit: room left (> 0) or how much it is missed by (< 0)
        margin = bound - value if lim.sense == "<=" else value - bound
        limits.append({"text": lim.text, "value": value, "bound": bound, "margin": 0.0 if holds and margin < 0
                       else margin, "unit": lim.unit, "holds": bool(holds)})
    flows = sim.outlet_flows()
    from tubeyield.reactor.balances import concentrations
    conc = concentrations(study, sim.u_out, sim.T_out, sim.c_s, sim.par)
    outlet = {s: {"conc": float(conc[s]) / 1000.0, "conc_unit": "mol/L", "flow": flows[s], "flow_unit": "mol/s"}
              for s in study.symbols}
    decisions = {}
    for d in study.decisions:
        v = values[d.name]
        decisions[d.name] = {"value": decision_to_user(v, d), "unit": d.unit}
    gval, gunit = metric_display(study.goal.metric, sim.metric(study.goal.metric))
    status = "meets limits" if violation(study, sim) <= 1e-9 else "misses limits"
    return Result(status, study.name, {"metric": study.goal.metric.text, "sense": study.goal.sense, "value": gval,
                                       "unit": gunit},
                  decisions, metrics, outlet, limits, [], None, {}, {"simulate": time.perf_counter() - t0},
                  message=sim.integrator, volume_m3=values["tau"] * study.feed.flow, decisions_si=dict(values),
                  profile_data=sim.profile())


# ------------------------------------------------------------------------------------ a point in many scenarios


def in_scenarios(args) -> list[tuple]:
    """(study, point, [scenario values], tolerance) -> for each scenario (goal in display units, every limit holds,
    [limit quantities, SI], [each limit holds]): the point simulated (rtol 1e-8) in each scenario. A limit holds when
    it is missed by at most `tolerance` (absolute for fractions, relative to the bound otherwise, as
    solve.multistart.violation weighs them). A point that cannot be simulated misses every limit."""
    from tubeyield.reactor.metrics import metric_display
    from tubeyield.study.variation import apply_values
    study, point, scenario_values = args[:3]
    tolerance = args[3] if len(args) > 3 else 1e-9
    out = []
    for values in scenario_values:
        try:
            sc = apply_values(study, values)
            sim = simulate(sc, point, rtol=1e-8)
            misses = limit_misses(sc, sim)
            quantities = [q for q, _, _ in misses]
            holds = [bool(miss <= tolerance * scale) for _, miss, scale in misses]
            goal = metric_display(sc.goal.metric, sim.metric(sc.goal.metric))[0]
            out.append((goal, all(holds), quantities, holds))
        except (SimulationFailed, ArithmeticError):
            n = len(study.goal.limits)
            out.append((float("nan"), False, [float("nan")] * n, [False] * n))
    return out


def points_in_scenarios(study: Study, points: list[dict], scenario_values: list[dict], pool,
                        tolerance: float = 1e-9) -> list[list]:
    """Every point in every scenario (in_scenarios), spread over a process pool (or here when `pool` is None) in
    chunks; one list per point, in the scenarios' order."""
    n_workers = pool._max_workers if pool is not None else 1
    chunks = max(1, min(n_workers * 2, len(scenario_values) // 20 or 1))
    parts = [scenario_values[i::chunks] for i in range(chunks)]
    order = [list(range(len(scenario_values)))[i::chunks] for i in range(chunks)]
    jobs = [(study, p, part, tolerance) for p in points for part in parts]
    if pool is not None and len(jobs) > 1:
        results = list(pool.map(in_scenarios, jobs))
    else:
        results = [in_scenarios(j) for j in jobs]
    out = []
    for k in range(len(points)):
        merged = [None] * len(scenario_values)
        for c in range(chunks):
            for idx, res in zip(order[c], results[k * chunks + c]):
                merged[idx] = res
        out.append(merged)
    return out
