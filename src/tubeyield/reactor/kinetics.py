"""Species production rates and heat release from the shared rate laws, for any math namespace."""

from __future__ import annotations

import numpy as np

from tubeyield.reactor.parameters import parametric_reactions
from tubeyield.study.schema import Study


class Kinetics:
    """Rates of a study's network with constants taken from `par` (Pyomo variables or floats)."""

    def __init__(self, study: Study, par):
        self.symbols = study.symbols
        self.reactions = parametric_reactions(study, par)
        self.stoich = [r.stoichiometry() for r in study.reactions]
        index = {sp: i for i, sp in enumerate(self.symbols)}
        self.matrix = np.zeros((len(self.symbols), len(self.reactions)))   # stoichiometric matrix N
        for j, st in enumerate(self.stoich):
            for sp, nu in st.items():
                self.matrix[index[sp], j] = nu
        self.Cp = {s: par[f"Cp:{s}"] for s in self.symbols}
        # Heat-capacity change of each reaction, sum nu_i Cp_i (Kirchhoff's law for dH(T)).
        self.dCp = [sum(nu * self.Cp[s] for s, nu in st.items()) for st in self.stoich]

    def rates(self, conc: dict, T, mx) -> list:
        return [r.rate_expression(conc, T, mx) for r in self.reactions]

    def production(self, rates: list) -> dict:
        """R_i = sum_j nu_ij r_j, mol/(m^3 s)."""
        out = {s: 0.0 for s in self.symbols}
        for st, r in zip(self.stoich, rates):
            for s, nu in st.items():
                out[s] = out[s] + nu * r
        return out

    def production_array(self, rates: list) -> np.ndarray:
        """N r for numeric rates (scalars or arrays of equal length): rows follow `symbols`."""
        if all(isinstance(r, float) for r in rates):
            return self.matrix @ np.array(rates)
        return self.matrix @ np.array(np.broadcast_arrays(*rates), dtype=float)

    def heat_release(self, rates: list, T) -> object:
        """sum_j (-dH_j(T)) r_j, W/m^3."""
        q = 0.0
        for rx, dcp, r in zip(self.reactions, self.dCp, rates):
            q = q - rx.heat_of_reaction(T, dcp) * r
        return q

    def flow_heat_capacity(self, u: dict) -> object:
        """sum_i u_i Cp_i: heat capacity of the flow per unit of the scaled flow."""
        c = 0.0
        for s in self.symbols:
            c = c + u[s] * self.Cp[s]
        return c
