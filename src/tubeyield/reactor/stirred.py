"""Stirred-tank models: one ideal tank, or N equal tanks in series, each with its own steady-state balances.

References
----------
O. Levenspiel, Chemical Reaction Engineering, 3rd ed., Wiley 1999, ch. 5-6 (mixed flow reactors and tanks in series).
H. S. Fogler, Elements of Chemical Reaction Engineering, 5th ed., Pearson 2016, ch. 11-12 (steady-state energy balance
of a stirred tank with heat exchange).
"""

from __future__ import annotations

from tubeyield.modeling import pyo
from tubeyield.reactor.balances import concentrations, math_for, wall_term
from tubeyield.reactor.model import T_STATE_BOUNDS, ReactorModel


class StirredModel(ReactorModel):
    kind = "stirred"

    def _build(self) -> None:
        m, st = self.m, self.study
        rx = st.reactor
        symbols = st.symbols
        n = rx.tanks
        self.n_tanks = n
        m.K = pyo.RangeSet(1, n)
        m.S = pyo.Set(initialize=symbols, ordered=True)
        m.J = pyo.Set(initialize=[r.id for r in st.reactions], ordered=True)
        sc = self.state_scale
        m.u = pyo.Var(m.S, m.K, bounds=(0.0, None),
                      initialize=lambda m, s, k: pyo.value(self.u0[s]) / sc[s])
        energy = rx.mode.energy_balance
        if energy:
            m.theta = pyo.Var(m.K, bounds=T_STATE_BOUNDS, initialize=pyo.value(m.T_in))
        tau_k = self.tau_expr() / n
        c_s = self.c_s
        reactions = self.kin.reactions
        index = {r.id: i for i, r in enumerate(st.reactions)}
        stoich = self.kin.stoich

        def theta(k):
            return m.theta[k] if energy else m.T

        def u_before(s, k):
            return self.u0[s] if k == 1 else sc[s] * m.u[s, k - 1]

        def rate_rule(m, j, k):
            T = self.T_scale * theta(k)
            conc = concentrations(st, {s: sc[s] * m.u[s, k] for s in symbols}, T, c_s, self.par)
            return reactions[index[j]].rate_expression(conc, T, math_for(T))

        m.rate = pyo.Expression(m.J, m.K, rule=rate_rule)

        def balance(m, s, k):
            production = sum(stoich[index[j]].get(s, 0.0) * m.rate[j, k] for j in m.J if stoich[index[j]].get(s, 0.0))
            return (sc[s] * m.u[s, k] - u_before(s, k)) / sc[s] == tau_k * production / (c_s * sc[s])

        m.mole_balance = pyo.Constraint(m.S, m.K, rule=balance)

        if energy:
            cp_scale = max(float(pyo.value(self.kin.flow_heat_capacity(self.u0))), 1e-12)

            def energy_rule(m, k):
                T = self.T_scale * m.theta[k]
                q = sum(-reactions[i].heat_of_reaction(T, self.kin.dCp[i]) * m.rate[j, k] for j, i in index.items())
                q = q + wall_term(st, self.par, T, self.T_cool_expr())
                before = m.T_in if k == 1 else m.theta[k - 1]
                heat_capacity = self.kin.flow_heat_capacity({s: u_before(s, k) for s in symbols})
                return heat_capacity * (m.theta[k] - before) / cp_scale == tau_k * q / (c_s * self.T_scale * cp_scale)

            m.energy_balance = pyo.Constraint(m.K, rule=energy_rule)

        self.u_out = {s: sc[s] * m.u[s, n] for s in symbols}
        self.T_out = theta(n)
        self.T_points = [m.theta[k] for k in m.K] if energy else [m.T]
        self._theta = theta

    def temperature_function(self):
        return None

    def reference_guess(self) -> list:
        """The tanks' states at the model's solution: where the reference solve starts (a tank can have several
        steady states, and the check is of this one)."""
        return self.tank_states()

    def tank_states(self) -> list:
        from tubeyield.reactor.simulate import States
        return [States({s: float(pyo.value(self.m.u[s, k])) * self.state_scale[s] for s in self.study.symbols},
                       float(pyo.value(self._theta(k))) * self.T_scale) for k in range(1, self.n_tanks + 1)]

    def initialize(self, sim) -> None:
        m = self.m
        for k in range(1, self.n_tanks + 1):
            for s in self.study.symbols:
                m.u[s, k].set_value(max(float(sim.tanks[k - 1].flows[s]), 0.0) / self.state_scale[s],
                                    skip_validation=True)
            if self.study.reactor.mode.energy_balance:
                m.theta[k].set_value(sim.tanks[k - 1].T / self.T_scale, skip_validation=True)

    def profile_rows(self) -> list[dict]:
        """The tanks at the current values: one dict per tank."""
        st = self.study
        tau = float(pyo.value(self.tau_expr()))
        par = {k: pyo.value(v) for k, v in self.par.items()}
        rows = []
        for k in range(1, self.n_tanks + 1):
            T = float(pyo.value(self._theta(k))) * self.T_scale
            u = {s: float(pyo.value(self.m.u[s, k])) * self.state_scale[s] for s in st.symbols}
            conc = concentrations(st, u, T, float(pyo.value(self.c_s)), par)
            row = {"tank": k, "residence_time_s": k * tau / self.n_tanks,
                   "volume_m3": k * tau * st.feed.flow / self.n_tanks, "T_K": T}
            row.update({f"C_{s}_mol_per_m3": conc[s] for s in st.symbols})
            rows.append(row)
        return rows
