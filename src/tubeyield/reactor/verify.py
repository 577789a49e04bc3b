"""Check a solved model against the reference simulation at the same decisions, and the record of that check."""

from __future__ import annotations

from dataclasses import dataclass, field

from tubeyield.reactor.model import ReactorModel
from tubeyield.reactor.simulate import Simulation, simulate

# Species whose outlet flow is below this share of the total inlet flow are compared on an absolute basis
# (a relative error of a trace species is noise, not a model error).
FLOOR_SHARE = 1e-6


@dataclass
class Check:
    """Re-simulation of a solved model with the reference integrator: the verified discretization error."""
    max_rel_error: float
    worst_species: str
    tolerance: float
    elements: int
    integrator: str
    refinements: int = 0
    edges: list | None = None                 # the mesh (element edges on [0, 1]); None for stirred tanks
    notes: list = field(default_factory=list)  # what the refinement tried and could not do
    released: tuple = ()                      # species whose state bounds inside elements the verification dropped

    @property
    def passed(self) -> bool:
        return self.max_rel_error <= self.tolerance

    def to_dict(self):
        out = {"max_rel_error": self.max_rel_error, "worst_species": self.worst_species, "tolerance": self.tolerance,
               "passed": self.passed, "elements": self.elements, "integrator": self.integrator,
               "refinements": self.refinements, "notes": list(self.notes), "released": list(self.released)}
        if self.edges is not None:
            lengths = [b - a for a, b in zip(self.edges[:-1], self.edges[1:])]
            out.update(shortest_element=min(lengths), longest_element=max(lengths), edges=list(self.edges))
        return out


def reference(model: ReactorModel, method: str = "LSODA") -> Simulation:
    return simulate(model.study, model.decision_values(), T_profile=model.temperature_function(),
                    guess=model.reference_guess(),
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
    return Check(err, worst, tolerance, model.elements, sim.integrator,
                 edges=list(model.edges) if model.edges is not None else None)
