"""Reference simulation: the study at given decisions, integrated with scipy, independent of the collocation mesh.

Plug flow: scipy.integrate.solve_ivp at rtol 1e-10, integrated segment by segment wherever the temperature profile
may jump (zone edges, element edges of a collocation profile). The default method is LSODA (L. R. Petzold,
"Automatic selection of methods for solving stiff and nonstiff systems of ordinary differential equations", SIAM J.
Sci. Stat. Comput. 4 (1983) 136-148; ODEPACK), which switches to BDF when the system is stiff; Radau IIA (Hairer and
Wanner, Solving Ordinary Differential Equations II, Springer 1996, IV.8) and BDF can be chosen. Measured on the demo
network: LSODA at rtol 1e-10 agrees with DOP853 at rtol 1e-13 to 2e-9 in 9 ms, Radau to 3e-12 in 0.4 s. Stirred tanks: the steady-state
balances of each tank in turn, solved with scipy.optimize.root (MINPACK hybrid method) to 1e-13.

Shares with the optimization model the rate-law code and the balance formulas (balances.py), not the discretization.
"""

from __future__ import annotations

import bisect
import functools
import types
from dataclasses import dataclass, field

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import root

from tubeyield.errors import SimulationFailed
from tubeyield.reactor.balances import concentration_scale, concentrations, inlet, wall_term
from tubeyield.reactor.kinetics import Kinetics
from tubeyield.reactor.metrics import metric_value
from tubeyield.reactor.parameters import study_parameters
from tubeyield.study.metric import Metric
from tubeyield.study.schema import Study

__all__ = ["PiecewiseConstant", "PiecewiseLinear", "Simulation", "SimulationFailed", "States", "simulate"]

RTOL = 1e-10
ATOL = 1e-14
METHODS = ("LSODA", "Radau", "BDF")
# The math namespace of the rate laws (they use `exp` only) on Python floats. Its exp is numpy's, returned as a
# Python float: math.exp differs from numpy's in the last bit for some arguments, and that was enough to send one
# start of the demo's free temperature profile along another path (241 Ipopt iterations against 75). Its values are
# kept for the arguments last seen: at a constant temperature the rate constants' arguments repeat on every call.
SCALAR_MATH = types.SimpleNamespace(exp=functools.lru_cache(maxsize=1024)(lambda x: float(np.exp(x))))


@dataclass(frozen=True)
class PiecewiseConstant:
    """T(z) constant on each of the intervals between `edges` (zones)."""
    edges: list
    values: list

    def __call__(self, z):
        k = min(max(bisect.bisect_left(self.edges, z - 1e-12) - 1, 0), len(self.values) - 1)
        return self.values[k]

    def segments(self):
        return list(zip(self.edges[:-1], self.edges[1:]))


@dataclass(frozen=True)
class PiecewiseLinear:
    """T(z) linear between its values at `edges` (a free profile: continuous, piecewise linear over the elements).
    Integrated element by element, so the kinks at the edges cost the integrator nothing."""
    edges: list
    values: list

    def __call__(self, z):
        return float(np.interp(z, self.edges, self.values))

    def segments(self):
        return list(zip(self.edges[:-1], self.edges[1:]))


@dataclass(frozen=True)
class States:
    """Scaled molar flows by species and the temperature (K), at one or more positions. Species and temperature live
    in separate fields, so any species symbol (T, tau, z ...) is just a key of `flows`."""
    flows: dict
    T: object                 # ndarray (plug positions) or float (one tank)


@dataclass
class Simulation:
    study: Study
    decisions: dict
    u_in: dict
    c_s: float
    par: dict
    segments: list = field(default_factory=list)      # plug: (z0, z1, solve_ivp solution, T function or None)
    tanks: list = field(default_factory=list)         # stirred: one States per tank
    T_function: object = None
    integrator: str = ""
    rhs: object = None                                # plug: the right-hand side dy/dz(z, y) integrated

    # ------------------------------------------------------------------------------------------------- outlet

    @property
    def u_out(self) -> dict:
        if self.tanks:
            return dict(self.tanks[-1].flows)
        return {s: float(v[-1]) for s, v in self.states_at(np.array([1.0])).flows.items()}

    @property
    def T_out(self) -> float:
        if self.tanks:
            return self.tanks[-1].T
        return float(self.states_at(np.array([1.0])).T[-1])

    def outlet_flows(self) -> dict:
        scale = self.c_s * self.study.feed.flow
        return {s: float(v) * scale for s, v in self.u_out.items()}

    def inlet_flows(self) -> dict:
        scale = self.c_s * self.study.feed.flow
        return {s: float(v) * scale for s, v in self.u_in.items()}

    def metric(self, metric: Metric) -> float:
        conc = concentrations(self.study, self.u_out, self.T_out, self.c_s, self.par)
        return float(metric_value(self.study, metric, self.u_out, self.u_in, self.decisions["tau"], self.c_s, conc))

    def temperature_extreme(self, sense: str = "max") -> tuple[float, float]:
        """(the highest (sense 'max') or lowest temperature along the reactor, where): the hot spot, found on a
        401-point grid and refined between its neighbours by bounded scalar minimization (Brent's method,
        scipy.optimize.minimize_scalar) on the dense output. Tanks: the tank number (1-based) as the position."""
        sign = 1.0 if sense == "max" else -1.0
        if self.tanks:
            k = int(np.argmax([sign * t.T for t in self.tanks]))
            return float(self.tanks[k].T), float(k + 1)
        z = np.linspace(0.0, 1.0, 401)
        T = self.states_at(z).T
        i = int(np.argmax(sign * T))
        best_T, best_z = float(T[i]), float(z[i])
        if 0 < i < len(z) - 1 and np.ptp(T) > 0:
            from scipy.optimize import minimize_scalar
            res = minimize_scalar(lambda x: -sign * float(self.states_at(np.array([x])).T[0]),
                                  bounds=(z[i - 1], z[i + 1]), method="bounded", options={"xatol": 1e-10})
            refined = -sign * float(res.fun)
            if res.success and sign * refined > sign * best_T:
                best_T, best_z = refined, float(res.x)
        return best_T, best_z

    def max_temperature(self) -> float:
        return self.temperature_extreme("max")[0]

    def min_temperature(self) -> float:
        return self.temperature_extreme("min")[0]

    def typical_sizes(self, floor_share: float = 1e-9) -> dict:
        """Typical size of each species' scaled flow: its largest value along the reactor (or over the tanks),
        floored at `floor_share` of the total inlet (a species that never forms keeps a scale that its first trace
        can reach). The collocation models divide their states by these."""
        total = sum(abs(v) for v in self.u_in.values()) or 1.0
        floor = floor_share * total
        if self.tanks:
            return {s: max(max(abs(t.flows[s]) for t in self.tanks), abs(self.u_in[s]), floor)
                    for s in self.study.symbols}
        flows = self.states_at(np.linspace(0.0, 1.0, 201)).flows
        return {s: max(float(np.max(np.abs(flows[s]))), abs(self.u_in[s]), floor) for s in self.study.symbols}

    # ------------------------------------------------------------------------------------------------ profiles

    def states_at(self, z: np.ndarray) -> States:
        """Scaled flows and T (K) at positions z (plug flow), one dense-output call per segment."""
        symbols = self.study.symbols
        z = np.asarray(z, dtype=float)
        flows = {s: np.empty(len(z)) for s in symbols}
        T = np.empty(len(z))
        starts = [seg[0] for seg in self.segments]
        which = np.clip(np.searchsorted(starts, z - 1e-12, side="left") - 1, 0, len(self.segments) - 1)
        for k in np.unique(which):
            z0, z1, sol, T_fun = self.segments[k]
            idx = np.nonzero(which == k)[0]
            zk = np.clip(z[idx], z0, z1)
            y = sol.sol(zk)
            for n, s in enumerate(symbols):
                flows[s][idx] = y[n]
            T[idx] = y[len(symbols)] if T_fun is None else [T_fun(v) for v in zk]
        return States(flows, T)

    def derivatives_at(self, z: np.ndarray) -> States:
        """d(state)/dz at positions z, from the simulation's own right-hand side (to start the collocation model)."""
        states = self.states_at(z)
        symbols = self.study.symbols
        energy = self.study.reactor.mode.energy_balance
        flows = {s: np.empty(len(z)) for s in symbols}
        dT = np.zeros(len(z))
        for i, zi in enumerate(z):
            y = np.array([states.flows[s][i] for s in symbols] + ([states.T[i]] if energy else []))
            dy = self.rhs(float(zi), y)
            for n, s in enumerate(symbols):
                flows[s][i] = dy[n]
            if energy:
                dT[i] = dy[len(symbols)]
        return States(flows, dT)

    def profile(self, n: int = 201):
        import pandas as pd
        st = self.study
        tau = self.decisions["tau"]
        if self.tanks:
            rows = []
            for k, tank in enumerate(self.tanks, 1):
                conc = concentrations(st, tank.flows, tank.T, self.c_s, self.par)
                rows.append({"tank": k, "residence_time_s": k * tau / len(self.tanks), "T_K": tank.T,
                             **{f"C_{s}_mol_per_m3": conc[s] for s in st.symbols}})
            return pd.DataFrame(rows)
        z = np.linspace(0.0, 1.0, n)
        states = self.states_at(z)
        conc = concentrations(st, states.flows, states.T, self.c_s, self.par)
        data = {"z": z, "residence_time_s": z * tau, "volume_m3": z * tau * st.feed.flow, "T_K": states.T}
        data.update({f"C_{s}_mol_per_m3": np.broadcast_to(conc[s], z.shape) for s in st.symbols})
        return pd.DataFrame(data)


def temperature_profile(study: Study, decisions: dict):
    """T(z) for the modes where temperature is a decision: a float, PiecewiseConstant or PiecewiseLinear (a free
    profile given as one value is uniform)."""
    heat = study.reactor.heat
    if heat == "isothermal":
        return decisions["T"]
    if heat == "zones":
        n = study.reactor.zones
        return PiecewiseConstant([k / n for k in range(n)] + [1.0], [decisions[f"T.{k}"] for k in range(1, n + 1)])
    if heat == "free":
        T = decisions["T"]
        if isinstance(T, (list, tuple)):
            raise SimulationFailed("a free temperature profile needs its positions: pass a PiecewiseLinear "
                                   "(Result.point() gives one), not a bare list of values")
        return T
    return None


def simulate(study: Study, decisions: dict, T_profile=None, guess: list | None = None, *, method: str = "LSODA",
             rtol: float = RTOL) -> Simulation:
    """Simulate `study` at `decisions` (SI values by decision name). `T_profile` overrides the temperature
    decision (a callable with `segments()`, e.g. from a collocation solution); `guess` starts the tank solves."""
    par = study_parameters(study)
    kin = Kinetics(study, par)
    c_ref = concentration_scale(study)
    ratio = {d.name[6:]: decisions[d.name] for d in study.decisions if d.name.startswith("ratio.")}
    T_fun = T_profile if T_profile is not None else temperature_profile(study, decisions)
    T_in = decisions.get("T_in")
    if T_in is None:
        T_in = T_fun(0.0) if callable(T_fun) else T_fun
    u0, c_s, _ = inlet(study, par, ratio, T_in, c_ref)
    u0 = {s: float(v) for s, v in u0.items()}
    sim = Simulation(study, dict(decisions), u0, float(c_s), par)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        try:
            if study.reactor.form.axial:
                _plug(sim, kin, T_fun, T_in, method, rtol)
            else:
                _tanks(sim, kin, T_fun, T_in, guess)
        except (ValueError, ArithmeticError, np.linalg.LinAlgError) as exc:
            # non-finite rates or states (an overflowing exponential, a NaN start): this point cannot be simulated
            raise SimulationFailed(f"reference simulation failed: {type(exc).__name__}: {exc}") from None
    if not all(np.isfinite(v) for v in sim.u_out.values()) or not np.isfinite(sim.T_out):
        raise SimulationFailed("reference simulation gave non-finite outlet values")
    return sim


def _plug(sim: Simulation, kin: Kinetics, T_fun, T_in, method: str, rtol: float) -> None:
    st = sim.study
    symbols = st.symbols
    n = len(symbols)
    energy = st.reactor.mode.energy_balance
    tau = sim.decisions["tau"]
    T_cool = sim.decisions.get("T_cool")

    factor = tau / sim.c_s
    cp = np.array([kin.Cp[s] for s in symbols])

    def make_rhs(T_of):
        def rhs(z, y):
            u = np.maximum(y[:n], 0.0)
            T = y[n] if energy else (T_of(z) if callable(T_of) else T_of)
            scalar = y.ndim == 1
            if scalar:
                # One state (LSODA's calls, BDF's steps): the rate laws run on Python floats, faster than on numpy
                # scalars (screening 16 points of the demo: 0.084 s -> 0.063 s; the 50-species network: 12.6 -> 8 s).
                u, T = u.tolist(), float(T)
            conc = concentrations(st, dict(zip(symbols, u)), T, sim.c_s, sim.par)
            rates = kin.rates(conc, T, SCALAR_MATH if scalar else np)
            du = factor * kin.production_array(rates)
            if not energy:
                return du
            q = kin.heat_release(rates, T) + wall_term(st, sim.par, T, T_cool)
            dT = factor * q / (cp @ u)
            return np.concatenate([du, np.reshape(dT, (1,) + du.shape[1:])])
        return rhs

    y = np.array([sim.u_in[s] for s in symbols] + ([T_in] if energy else []), dtype=float)
    segments = T_fun.segments() if hasattr(T_fun, "segments") else [(0.0, 1.0)]
    atol = np.full(len(y), ATOL * max(1.0, float(np.max(np.abs(y[:n])))) * (rtol / RTOL))
    if energy:
        atol[n] = 1e-9 * (rtol / RTOL)
    sim.rhs = rhs = make_rhs(T_fun)
    used = []
    for z0, z1 in segments:
        sol, how = integrate_segment(rhs, (z0, z1), y, method, rtol, atol)
        if not sol.success:
            raise SimulationFailed(f"reference integration failed at z = {sol.t[-1]:.4g}: {sol.message}")
        used.append(how)
        sim.segments.append((z0, z1, sol, None if energy else (T_fun if callable(T_fun) else _Const(T_fun))))
        y = sol.y[:, -1]
    sim.T_function = T_fun
    shown = method if all(u == method for u in used) else \
        f"{method}, BDF where LSODA stalled ({sum(u != method for u in used)} of {len(used)} segment(s))"
    sim.integrator = f"scipy solve_ivp {shown}, rtol {rtol:g}, {len(segments)} segment(s)"


# LSODA's automatic switching between its stiff and non-stiff methods can stall on stiff networks: measured on an
# invented 20-species network with rate constants over 12 decades, one operating point took 420,000 right-hand-side
# calls (24 s) at rtol 1e-7 and 1.5 million (85 s) at rtol 1e-10, where BDF needed 2,200-4,000 (0.4 s) and agreed to
# the tolerance. The demo and these networks elsewhere take 20-11,000 calls. Past the budget (about 1.5 s of LSODA)
# the segment is integrated again by BDF.
LSODA_CALL_BUDGET = 25_000


class _Stalled(Exception):
    pass


def integrate_segment(rhs, span, y0, method: str, rtol: float, atol, *, t_eval=None, vectorized: bool = True):
    """solve_ivp on one segment: (solution, method used). LSODA falls back to BDF when it exceeds its call budget.
    With `t_eval` the solution is given at those points (no dense output); `vectorized` says whether rhs takes
    several states at once (BDF's Jacobian)."""
    dense = t_eval is None
    if method != "LSODA":
        return solve_ivp(rhs, span, y0, method=method, rtol=rtol, atol=atol, dense_output=dense, t_eval=t_eval,
                         vectorized=vectorized), method
    calls = 0

    def counted(z, y):
        nonlocal calls
        calls += 1
        if calls > LSODA_CALL_BUDGET:
            raise _Stalled()
        return rhs(z, y)

    try:
        return solve_ivp(counted, span, y0, method="LSODA", rtol=rtol, atol=atol, dense_output=dense,
                         t_eval=t_eval), "LSODA"
    except _Stalled:
        return solve_ivp(rhs, span, y0, method="BDF", rtol=rtol, atol=atol, dense_output=dense, t_eval=t_eval,
                         vectorized=vectorized), "BDF"


class _Const:
    def __init__(self, v):
        self.v = v

    def __call__(self, z):
        return self.v


def _tanks(sim: Simulation, kin: Kinetics, T_fun, T_in, guess) -> None:
    st = sim.study
    symbols = st.symbols
    n = len(symbols)
    energy = st.reactor.mode.energy_balance
    N = st.reactor.tanks
    tau_k = sim.decisions["tau"] / N
    T_cool = sim.decisions.get("T_cool")
    prev = dict(sim.u_in)
    prev_T = T_in
    for k in range(N):
        def residual(x, prev=prev, prev_T=prev_T):
            u = {s: x[i] for i, s in enumerate(symbols)}
            T = x[n] if energy else T_fun
            conc = concentrations(st, {s: max(v, 0.0) for s, v in u.items()}, T, sim.c_s, sim.par)
            rates = kin.rates(conc, T, np)
            R = kin.production(rates)
            res = [u[s] - prev[s] - tau_k * R[s] / sim.c_s for s in symbols]
            if energy:
                q = kin.heat_release(rates, T) + wall_term(st, sim.par, T, T_cool)
                cp = kin.flow_heat_capacity(prev)
                res.append((cp * (T - prev_T) - tau_k * q / sim.c_s) / max(cp, 1e-300))
            return np.array(res, dtype=float)

        if guess is not None:
            x0 = [guess[k].flows[s] for s in symbols] + ([guess[k].T] if energy else [])
        else:
            x0 = [prev[s] for s in symbols] + ([prev_T] if energy else [])
        sol = root(residual, np.array(x0, dtype=float), method="hybr", tol=1e-14)
        if not sol.success or np.max(np.abs(residual(sol.x))) > 1e-9:
            sol = root(residual, sol.x, method="lm", tol=1e-14)
        if np.max(np.abs(residual(sol.x))) > 1e-8:
            # Newton from the start failed (an adiabatic or cooled tank can have several steady states and a
            # narrow basin around each): the steady state the tank reaches when started full of its feed, from
            # the start-up transient, then polished (pseudo-transient continuation; Kelley and Keyes, SIAM J.
            # Numer. Anal. 35 (1998) 508).
            x_start = np.array([prev[s] for s in symbols] + ([prev_T] if energy else []), dtype=float)
            sol = root(residual, _start_up(residual, x_start, tau_k), method="hybr", tol=1e-14)
        if np.max(np.abs(residual(sol.x))) > 1e-8:
            raise SimulationFailed(f"reference tank solve failed in tank {k + 1}: {sol.message}")
        tank = States({s: float(sol.x[i]) for i, s in enumerate(symbols)}, float(sol.x[n]) if energy else float(T_fun))
        sim.tanks.append(tank)
        prev, prev_T = dict(tank.flows), tank.T
    sim.integrator = "scipy optimize.root (MINPACK hybrid), residual <= 1e-9"


START_UP_TIMES = 200.0   # residence times the start-up transient of a tank is followed for


def _start_up(residual, x0: np.ndarray, tau: float) -> np.ndarray:
    """The state of a tank START_UP_TIMES residence times after it started full of its feed. The residual of the
    steady state is (x - x_feed - tau f(x)) / scale, so d x / d t = -residual / tau is the tank's transient in
    the same scaling (mass balances, and the energy balance divided by the stream's heat capacity)."""
    sol = solve_ivp(lambda t, x: -residual(x) / tau, (0.0, START_UP_TIMES * tau), x0, method="LSODA",
                    rtol=1e-10, atol=1e-12)
    return sol.y[:, -1]
