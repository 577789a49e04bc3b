"""Plug-flow model: orthogonal collocation on finite elements (Radau points) with pyomo.dae.

Heat modes: isothermal (one T), zones (equal zones of whole elements, one T each), free (a continuous, piecewise-linear
T over the elements, bounded: as the mesh is refined, the optimal-control bound on what a temperature profile can
give), adiabatic and cooled
(energy balance with heats of reaction, heat capacities and wall heat transfer to a coolant).

References
----------
L. T. Biegler, Nonlinear Programming: Concepts, Algorithms, and Applications to Chemical Processes, SIAM 2010,
ch. 10 (simultaneous collocation on finite elements, Radau points, element placement).
B. Nicholson, J. D. Siirola, J.-P. Watson, V. M. Zavala and L. T. Biegler, "pyomo.dae: a modeling and automatic
discretization framework for optimization with differential and algebraic equations", Math. Program. Comput. 10
(2018) 187-223.
"""

from __future__ import annotations

import bisect

import numpy as np
import pyomo.dae as dae
from pyomo.core.expr.visitor import identify_variables

from tubeyield.modeling import pyo
from tubeyield.reactor.balances import concentrations, math_for, wall_term
from tubeyield.reactor.mesh import breakpoints, initial_edges, radau_roots
from tubeyield.reactor.model import T_STATE_BOUNDS, Handle, ReactorModel


# States of trace species may dip below zero by this share of the total inlet flow. The collocation solution of a
# species that a fast reaction consumes while it is a trace is negative at some points: for y' = -k y on an element
# of length h with k h >> 1 the three Radau stage values are (2.4, -1.7, 3.0) y0 / (k h) (computed from the
# collocation equations; Radau IIA, Hairer and Wanner, Solving Ordinary Differential Equations II, 2nd ed. 1996,
# sec. IV.5), and traces of 1e-20 sit in front of a bound of zero. Ipopt's barrier term then pushes on them with a
# force mu / slack comparable to the goal's own gradient, a wall the optimum stops at. Measured on the bench's invented
# networks, rate constants over 12 decades, one start:
#   bound 0             16 species 80-198 s, unverified; 20 species 15.8 s, unverified (a first solve stopped at the
#                       acceptable level 3 % below the optimum, bound multipliers of 1e10); 50 species failed, 284 s
#   dip 1e-15 of inlet  20 species optimal in 18 iterations; 16 species "optimal" at tau 330 s, a wall: the
#                       re-simulated yield still rises to tau 372 s
#   dip 1e-9 of inlet   16 species 8.3 s, 20 species 5.5 s, 50 species 55 s: each optimal, verified, and at the maximum
#                       of a re-simulated scan over tau
#   no bound            16 species: a false optimum at tau 626 s (yield 0.398 against 0.402 re-simulated) that trades
#                       on negative concentrations
# The dip is 1e-3 of the verification's absolute floor (reactor/verify.py, FLOOR_SHARE): an outlet that sits at it
# fails the check and refines the mesh. It equals the smallest typical size a species is scaled by (state_scales), so
# a trace species' scaled state is bounded at -1. Species in a rate law with an order that is not a whole number keep
# the bound of zero: c^n is undefined below it, or regularized only down to -FRACTIONAL_ORDER_DELTA.
TRACE_DIP_SHARE = 1e-9


class PlugModel(ReactorModel):
    kind = "plug"

    def state_floors(self) -> dict:
        """Lower bound of each species' scaled state: -TRACE_DIP_SHARE of the total inlet flow for species that
        appear in the rate laws with whole-number orders only (forward and reverse; an order a fit estimates is a
        variable and counts as not whole), zero for the others."""
        held = set()
        for r in self.kin.reactions:
            for s, n in tuple(r.orders) + tuple(r.reverse_orders):
                if not (isinstance(n, (int, float)) and float(n).is_integer() and n >= 0):
                    held.add(s)
        total = sum(abs(float(pyo.value(self.u0[s]))) for s in self.study.symbols) or 1.0
        return {s: 0.0 if s in held else -TRACE_DIP_SHARE * total / self.state_scale[s] for s in self.study.symbols}

    def _build(self) -> None:
        m, st = self.m, self.study
        rx = st.reactor
        heat = rx.heat
        symbols = st.symbols
        zones = rx.zones
        if isinstance(self.mesh, int):
            self.edges = initial_edges(self.mesh, rx.grading, zones)
        else:
            self.edges = [float(e) for e in self.mesh]
            missing = [b for b in breakpoints(zones) if not any(abs(b - e) < 1e-12 for e in self.edges)]
            if missing:
                raise ValueError(f"a mesh for {zones} zones must have edges at {missing}")
        self.elements = len(self.edges) - 1
        m.z = dae.ContinuousSet(bounds=(0.0, 1.0), initialize=self.edges)
        m.S = pyo.Set(initialize=symbols, ordered=True)
        m.J = pyo.Set(initialize=[r.id for r in st.reactions], ordered=True)
        sc = self.state_scale
        floor = self.state_floors()
        m.u = pyo.Var(m.S, m.z, bounds=lambda m, s, z: (floor[s], None),
                      initialize=lambda m, s, z: pyo.value(self.u0[s]) / sc[s])
        # The derivative values stay variables of the NLP, each defined by pyomo.dae's collocation equation, and the
        # balances are written in them. Substituting the collocation formulas into the balances (the NLP in the states
        # only: 1690 variables become 850 on the demo) was measured on 2026-12-05 and not kept. It is faster where it
        # converges: Ipopt's time per iteration 4.0 ms against 2.5 ms, the whole `tubeyield optimize` of the demo
        # 1.49-1.52 s against 1.32-1.35 s, its 21-point front 2.71 s against 1.93 s, with the same optima. But Ipopt's
        # path changes with the formulation, and on the hard problems it went to worse points: the bench's invented
        # 20-species stiff network ended unverified at 160 elements in 19.5 s (optimal at 40 elements in 4.1 s with
        # the derivative values), and a free temperature profile of a series network (tests/test_profile_search.py)
        # reached a local optimum whose one-element temperature ramp no mesh within numerics.max_elements verifies.
        m.du = dae.DerivativeVar(m.u, wrt=m.z)
        energy = st.reactor.mode.energy_balance
        if energy:
            m.theta = pyo.Var(m.z, bounds=T_STATE_BOUNDS, initialize=pyo.value(m.T_in))
            m.dtheta = dae.DerivativeVar(m.theta, wrt=m.z)
        if heat == "free":
            # The free profile is continuous and piecewise linear over the elements: its values at the element edges
            # are the decisions. Within an element T(z) is then a known smooth function, so the collocation solves
            # the same balances the reference simulation integrates, and the optimizer cannot exploit the gaps
            # between collocation points (free values at every point can: on a reversible exothermic reaction they
            # gave a conversion of 0.99999 where no profile exceeds 0.9386). The limit T <= ... holds exactly, at the
            # edges, where a piecewise-linear profile has its extremes.
            d = st.decision("T")
            m.Tp = pyo.Var(range(len(self.edges)), bounds=(d.low / self.T_scale, d.high / self.T_scale),
                           initialize=0.5 * (d.low + d.high) / self.T_scale)
        pyo.TransformationFactory("dae.collocation").apply_to(
            m, wrt=m.z, nfe=len(self.edges) - 1, ncp=rx.points, scheme="LAGRANGE-RADAU")

        self.points = sorted(m.z)
        K = rx.points
        if len(self.points) != self.elements * K + 1:
            raise ValueError(f"the collocation set holds {len(self.points)} points, not {self.elements * K + 1}: "
                             "element edges closer than reactor.mesh.min_element allows")
        # pyomo.dae rounds collocation points to 6 decimals of z; where a position matters (the free profile's
        # interpolation) each point's element and exact Radau coordinate are used instead.
        roots = radau_roots(K)
        self._local = {0.0: (0, 0.0)}
        for i, z in enumerate(self.points[1:]):
            self._local[z] = (i // K, float(roots[i % K]))
        inner = self.points[1:]
        self.inner = inner
        if heat == "free":
            d = st.decision("T")
            self.decisions["T"] = Handle("T", [m.Tp[k] for k in range(len(self.edges))], self.T_scale, d.low, d.high,
                                         profile=True, positions=list(self.edges))

        theta = self.theta_at
        tau = self.tau_expr()
        c_s = self.c_s
        stoich = self.kin.stoich
        reactions = self.kin.reactions

        def conc_at(z):
            return concentrations(st, {s: sc[s] * m.u[s, z] for s in symbols}, self.T_scale * theta(z), c_s, self.par)

        def rate_rule(m, j, z):
            T = self.T_scale * theta(z)
            return reactions[self._rx_index[j]].rate_expression(conc_at(z), T, math_for(T))

        self._rx_index = {r.id: i for i, r in enumerate(st.reactions)}
        m.rate = pyo.Expression(m.J, inner, rule=rate_rule)

        def ode(m, s, z):
            production = sum(stoich[self._rx_index[j]].get(s, 0.0) * m.rate[j, z] for j in m.J
                             if stoich[self._rx_index[j]].get(s, 0.0))
            return m.du[s, z] == tau * production / (c_s * sc[s])

        m.mole_balance = pyo.Constraint(m.S, inner, rule=ode)
        m.inlet = pyo.Constraint(m.S, rule=lambda m, s: m.u[s, 0.0] == self.u0[s] / sc[s])
        for s in symbols:
            # The inlet equation defines u(0); its bound of zero would be active together with it for every species
            # not fed (a degenerate pair: the constraint gradients are dependent and the multipliers unbounded).
            # Measured on a free profile of a reversible reaction: Ipopt's dual infeasibility at the start was 1e7
            # with the bound and 0.24 without it.
            m.u[s, 0.0].setlb(None)

        if energy:
            cp_scale = max(float(pyo.value(self.kin.flow_heat_capacity(self.u0))), 1e-12)
            self.cp_scale = cp_scale

            def energy_rule(m, z):
                T = self.T_scale * m.theta[z]
                q = sum(-reactions[i].heat_of_reaction(T, self.kin.dCp[i]) * m.rate[j, z] for j, i in self._rx_index.items())
                q = q + wall_term(st, self.par, T, self.T_cool_expr())
                heat_capacity = self.kin.flow_heat_capacity({s: sc[s] * m.u[s, z] for s in symbols})
                return heat_capacity * m.dtheta[z] / cp_scale == tau * q / (c_s * self.T_scale * cp_scale)

            m.energy_balance = pyo.Constraint(inner, rule=energy_rule)
            m.inlet_T = pyo.Constraint(expr=m.theta[0.0] == m.T_in)

        self.u_out = {s: sc[s] * m.u[s, 1.0] for s in symbols}
        self.T_out = theta(1.0)
        if heat == "isothermal":
            self.T_points = [m.T]
        elif heat == "zones":
            self.T_points = [m.Tz[k] for k in range(1, rx.zones + 1)]
        elif heat == "free":
            self.T_points = [m.Tp[k] for k in range(len(self.edges))]
        else:
            self.T_points = [m.theta[z] for z in self.points]

    def inert_species(self) -> list[str]:
        """Species whose state enters neither a rate nor the energy balance (for a liquid, products no rate law
        uses): their stage values never feed back into the other balances. Read from the built expressions at the
        first interior point (every point has the same structure)."""
        m = self.m
        z = self.inner[0]
        used = set()
        exprs = [m.rate[j, z] for j in m.J]
        if self.study.reactor.mode.energy_balance:
            exprs.append(m.energy_balance[z].body)
        for e in exprs:
            for v in identify_variables(e, include_fixed=True):
                if v.parent_component() is m.u:
                    used.add(v.index()[0])
        return [s for s in self.study.symbols if s not in used]

    def free_inert_stages(self) -> list[str]:
        """Drop the state bound of inert species (inert_species) at the stage points inside elements; the element
        edges keep it. Returns the species freed (none the second time).

        A stage value inside an element is an intermediate of the Radau formula, not a value of the solution: for a
        product formed from an intermediate that rises steeply in the first element, the first stage value is its
        inlet value plus h tau (0.197 r1 - 0.066 r2 + 0.024 r3) / C_s (the first row of the three-stage Radau IIA
        matrix; Hairer and Wanner 1996, sec. IV.5, from memory, and recomputed from the collocation conditions),
        negative when its rate r1 at the first stage is small against r2. Bounded, it held the highest conversion
        under a byproduct cap on the demo network at 0.98598, where single shooting with scipy reaches 0.99814. An
        inert species cannot trade on a negative stage value (nothing else sees it), and its edge values are sums of
        its rates with positive weights. The verification calls this only where such a bound holds an optimum
        (jobs/refine.py): freed from the start, the bounds no longer kept the other species' stage values in check on
        the bench's invented 20-species network, whose optimum moved by 3e-8 to a point that then needed 80-160
        elements to verify (4.5 s became 10-26 s, once unverified)."""
        if self.inert_stages_free:
            return []
        freed = self.inert_species()
        self._bound_stages(freed, None)
        self.inert_stages_free = True
        return freed

    def bound_inert_stages(self) -> None:
        """Undo free_inert_stages."""
        if self.inert_stages_free:
            floor = self.state_floors()
            for s in self.inert_species():
                self._bound_stages([s], floor[s])
            self.inert_stages_free = False

    def _bound_stages(self, species, lower) -> None:
        for s in species:
            for z in self.inner:
                if self.inside_element(z):
                    self.m.u[s, z].setlb(lower)

    def inside_element(self, z: float) -> bool:
        """Whether collocation point z is a stage point inside an element (not an element edge)."""
        return self._local.get(z, (0, 0.0))[1] not in (0.0, 1.0)

    # ---------------------------------------------------------------------------------------------------- helpers

    def element_of(self, z: float) -> int:
        """Index of the element whose interior or right end holds z (Radau points belong to their right end)."""
        k = bisect.bisect_left(self.edges, z - 1e-12) - 1
        return min(max(k, 0), len(self.edges) - 2)

    def zone_of(self, z: float) -> int:
        """1-based zone of the element holding z (zones are whole elements)."""
        k = self.element_of(z)
        middle = 0.5 * (self.edges[k] + self.edges[k + 1])
        return min(int(middle * self.study.reactor.zones) + 1, self.study.reactor.zones)

    def theta_at(self, z):
        m, heat = self.m, self.study.reactor.heat
        if heat == "isothermal":
            return m.T
        if heat == "zones":
            return m.Tz[self.zone_of(z)]
        if heat == "free":
            k, w = self._local[z]
            return m.Tp[k] if w == 0.0 else m.Tp[k + 1] if w == 1.0 else (1.0 - w) * m.Tp[k] + w * m.Tp[k + 1]
        return m.theta[z]

    def temperature_function(self):
        """T(z) in K at the current values, as the reference simulation needs it (None when T is a state)."""
        from tubeyield.reactor.simulate import PiecewiseConstant, PiecewiseLinear
        heat = self.study.reactor.heat
        if heat == "zones":
            zones = self.study.reactor.zones
            return PiecewiseConstant(breakpoints(zones),
                                     [pyo.value(self.m.Tz[k]) * self.T_scale for k in range(1, zones + 1)])
        if heat == "free":
            return PiecewiseLinear(list(self.edges),
                                   [pyo.value(self.m.Tp[k]) * self.T_scale for k in range(len(self.edges))])
        return None

    def element_errors(self, sim, floor: float = 0.0) -> np.ndarray:
        """Local error estimate of each element (reactor.mesh.element_errors) against the balances of `sim`, the
        reference simulation at the model's decisions. States are relative to their typical sizes, floored at
        `floor` (the check's absolute floor, as a scaled flow)."""
        from tubeyield.reactor.mesh import element_errors
        m, st = self.m, self.study
        K = st.reactor.points
        energy = st.reactor.mode.energy_balance
        rows = []
        for z in self.points:
            row = [pyo.value(m.u[s, z]) * self.state_scale[s] for s in st.symbols]
            if energy:
                row.append(pyo.value(m.theta[z]) * self.T_scale)
            rows.append(row)
        values = np.array(rows, dtype=float)
        nodes = np.stack([values[k * K:k * K + K + 1] for k in range(self.elements)])
        scales = np.array([max(self.state_scale[s], floor) for s in st.symbols] + ([self.T_scale] if energy else []))
        return element_errors(self.edges, nodes, sim.rhs, scales, K)

    # ---------------------------------------------------------------------------------------------- initialization

    def initialize(self, sim) -> None:
        """Start values from a reference simulation at the current decisions: states and their derivatives."""
        m = self.m
        z = np.array(self.points)
        states = sim.states_at(z)
        derivs = sim.derivatives_at(z)
        for s in self.study.symbols:
            for zi, v, dv in zip(self.points, states.flows[s], derivs.flows[s]):
                m.u[s, zi].set_value(max(float(v), 0.0) / self.state_scale[s], skip_validation=True)
                m.du[s, zi].set_value(float(dv) / self.state_scale[s], skip_validation=True)
        if self.study.reactor.mode.energy_balance:
            for zi, v, dv in zip(self.points, states.T, derivs.T):
                m.theta[zi].set_value(float(v) / self.T_scale, skip_validation=True)
                m.dtheta[zi].set_value(float(dv) / self.T_scale, skip_validation=True)

    # --------------------------------------------------------------------------------------------------- profiles

    def profile_rows(self) -> list[dict]:
        """Axial profile at the current values: one dict per collocation point."""
        st = self.study
        tau = float(pyo.value(self.tau_expr()))
        rows = []
        for z in self.points:
            T = float(pyo.value(self.theta_at(z))) * self.T_scale
            u = {s: float(pyo.value(self.m.u[s, z])) * self.state_scale[s] for s in st.symbols}
            conc = concentrations(st, u, T, float(pyo.value(self.c_s)), {k: pyo.value(v) for k, v in self.par.items()})
            row = {"z": z, "residence_time_s": z * tau, "volume_m3": z * tau * st.feed.flow, "T_K": T}
            row.update({f"C_{s}_mol_per_m3": conc[s] for s in st.symbols})
            rows.append(row)
        return rows
