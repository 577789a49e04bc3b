"""Check a solved collocation model against the reference simulation at the same decisions."""

from __future__ import annotations

from tubeyield.jobs.result import Check
from tubeyield.reactor.model import ReactorModel
from tubeyield.reactor.simulate import Simulation, simulate

# Species whose outlet flow is below this share of the total inlet flow are compared on an absolute basis
# (a relative error of a trace species is noise, not a model error).
FLOOR_SHARE = 1e-6


def reference(model: ReactorModel, method: str = "LSODA") -> Simulation:
    guess = None
    if model.kind == "stirred":
        guess = model.tank_states()
    return simulate(model.study, model.decision_values(), T_profile=model.temperature_function(), guess=guess,
                    method=method)


def compare(model: ReactorModel, sim: Simulation, tolerance: float) -> Check:
    """Largest relative difference of outlet molar flows, model against simulation."""
    f_model = model.outlet_flows()
    f_sim = sim.outlet_flows()
    floor = FLOOR_SHARE * sum(abs(v) for v in sim.inlet_flows().values())
    worst, err = "", 0.0
    for s in f_sim:
        e = abs(f_model[s] - f_sim[s]) / max(abs(f_sim[s]), floor)
        if e > err:
            worst, err = s, e
    return Check(err, worst, tolerance, model.elements, sim.integrator)
