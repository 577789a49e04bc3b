"""The lab runs as models: the reference simulation of each run (scipy) and its block in the estimation NLP (Pyomo).

- A batch run obeys dc/dt = S r(c, T(t)); a liquid plug-flow run sampled at residence times obeys the same balance
  in residence time (constant density: the plug-flow/batch analogy, Levenspiel, Chemical Reaction Engineering, 3rd
  ed. 1999, ch. 5). In the NLP it is discretized by orthogonal collocation on finite elements (pyomo.dae, Radau
  points, as the reactor models), with the sampling times and the corners of a temperature programme on element
  boundaries, so that the model is compared with the data without interpolation.
- A liquid stirred-tank run is one steady state per row: c_in - c + tau S r(c, T) = 0 (the CSTR design equation,
  Levenspiel ch. 5). The reference integrates the start-up transient from the feed to a steady state and polishes
  it with scipy's root finder.
"""

from __future__ import annotations

import math

import numpy as np

from tubeyield.errors import SimulationFailed
from tubeyield.reactor.parameters import parametric_reactions
from tubeyield.reactor.simulate import integrate_segment
from tubeyield.study.schema import Experiment, Study

SETTLE_TAUS = (50.0, 1000.0)    # a stirred run's start-up is integrated this many residence times to its steady state


def stoichiometric_matrix(study: Study) -> np.ndarray:
    S = np.zeros((len(study.symbols), len(study.reactions)))
    for j, r in enumerate(study.reactions):
        for s, v in r.stoichiometry().items():
            S[study.symbols.index(s), j] = v
    return S


def _corners(e: Experiment, t_end: float) -> list[float]:
    """The programme's points strictly inside (0, t_end): where T(t) has a corner."""
    return [t for t, _ in e.programme if 0.0 < t < t_end]


def simulate_experiment(study: Study, par: dict, e: Experiment, times=None, rtol: float = 1e-10) -> np.ndarray:
    """Concentrations (mol/m^3, species x times) of experiment `e` at parameters `par`, by scipy: batch and plug
    flow with solve_ivp's LSODA (BDF where LSODA stalls, as in the reactor's reference simulation), integrated
    piecewise between the corners of a temperature programme; a stirred tank by the start-up transient to each
    row's steady state, polished by scipy.optimize.root."""
    reactions = parametric_reactions(study, par)
    S = stoichiometric_matrix(study)
    symbols = study.symbols
    start = dict(e.start)
    y0 = np.array([start.get(s, 0.0) for s in symbols])
    scale = max(float(y0.max()), 1e-12)
    times = np.array(e.times if times is None else times, dtype=float)

    def rates(c, T):
        conc = {s: v for s, v in zip(symbols, c)}
        return np.array([rx.rate_expression(conc, T, np) for rx in reactions])

    if e.vessel == "stirred":
        return np.column_stack([_steady_state(rates, S, y0, float(tau), e.T, scale, rtol) for tau in times]) \
            if times.size else np.zeros((len(symbols), 0))

    def f(t, y):
        return S @ rates(np.maximum(y, 0.0) * scale, e.temperature(t)) / scale

    if not times.size:
        return np.zeros((len(symbols), 0))
    t_end = float(times[-1])
    edges = [0.0] + _corners(e, t_end) + [t_end]
    y = y0 / scale
    out = np.full((len(symbols), times.size), np.nan)
    for a, b in zip(edges[:-1], edges[1:]):
        inside = (times > a) & (times <= b) if a > 0 else (times >= a) & (times <= b)
        t_eval = np.unique(np.concatenate([times[inside], [b]]))
        if b <= a:
            continue
        sol, _ = integrate_segment(f, (a, b), y, "LSODA", rtol, rtol * 1e-2, t_eval=t_eval, vectorized=False)
        if not sol.success:
            raise SimulationFailed(f"experiment {e.id}: {sol.message}")
        for k, t in enumerate(sol.t):
            hit = np.nonzero(inside & (times == t))[0]
            out[:, hit] = sol.y[:, k:k + 1] * scale
        y = sol.y[:, -1]
    if times[0] == 0.0:
        out[:, 0] = y0
    return out


def _steady_state(rates, S, c_in: np.ndarray, tau: float, T: float, scale: float, rtol: float) -> np.ndarray:
    """The stirred tank's steady state at residence time tau, reached from the feed (start-up transient)."""
    from scipy.integrate import solve_ivp
    from scipy.optimize import root

    def transient(t, y):
        c = np.maximum(y, 0.0) * scale
        return ((c_in - c) / tau + S @ rates(c, T)) / scale

    y = c_in / scale
    for span in SETTLE_TAUS:
        sol = solve_ivp(transient, (0.0, span * tau), y, method="Radau", rtol=1e-8, atol=1e-12)
        if not sol.success:
            raise SimulationFailed(f"stirred tank at tau {tau:g} s: {sol.message}")
        y = sol.y[:, -1]
        if np.max(np.abs(transient(0.0, y))) * tau < 1e-9:
            break

    def balance(yy):
        c = yy * scale
        return (c_in - c + tau * (S @ rates(np.maximum(c, 0.0), T))) / scale

    polished = root(balance, y, method="hybr", tol=rtol * 1e-2)
    if polished.success and np.max(np.abs(balance(polished.x))) < max(rtol, 1e-12) * 10 and polished.x.min() > -1e-9:
        y = polished.x
    elif np.max(np.abs(balance(y))) > 1e-6:
        raise SimulationFailed(f"stirred tank at tau {tau:g} s: no steady state reached ({polished.message})")
    return np.maximum(y, 0.0) * scale


# ---------------------------------------------------------------------------------------------------- the data


def weights(error: dict, s: str, y: np.ndarray) -> np.ndarray:
    """Standard deviations (mol/m^3) of the samples y of species s: the error model (species -> (absolute,
    relative)), or 1 mol/L for every value (unit weights) when none is given."""
    if s not in error:
        return np.full_like(y, 1000.0)
    absolute, relative = error[s]
    sd = absolute + relative * np.abs(y)
    floor = max(relative * np.nanmax(np.abs(y)) * 1e-3, 1e-9) if relative else 1e-12
    return np.maximum(sd, floor)


def samples(study: Study, e: Experiment) -> list[tuple[int, int, float, float]]:
    """[(species index, row index, value, sd)] of the samples fitted: every value after time zero (the row at time
    zero of a batch or plug-flow run is its start, which is given)."""
    error = dict(study.fit.error) if study.fit else {}
    out = []
    for s, values in e.series:
        y = np.array(values)
        sd = weights(error, s, y)
        for i, (t, v) in enumerate(zip(e.times, y)):
            if t > 0 and not math.isnan(v):
                out.append((study.symbols.index(s), i, float(v), float(sd[i])))
    return out


def residuals(study: Study, par: dict, rtol: float = 1e-10) -> np.ndarray:
    """Weighted residuals (model - data) / sd of every sample of every experiment, from the scipy simulation."""
    out = []
    for e in study.experiments:
        c = simulate_experiment(study, par, e, rtol=rtol)
        out += [(c[j, i] - v) / sd for j, i, v, sd in samples(study, e)]
    return np.array(out)


# ----------------------------------------------------------------------------------------------------- the NLP


def intervals(e: Experiment) -> list[float]:
    """The breakpoints of a batch or plug-flow run's mesh (s): 0, the sampling times and the programme's corners."""
    t_end = float(e.times[-1])
    return sorted({0.0, *(float(v) for v in e.times if v > 0), *_corners(e, t_end)})


def element_edges(e: Experiment, per) -> list[float]:
    """Element edges on [0, 1] (times over the last sampling time): the breakpoints (intervals()), with `per` equal
    elements between each pair; `per` is one count for every interval or a list of one count per interval."""
    t = intervals(e)
    t_end = t[-1]
    counts = [per] * (len(t) - 1) if isinstance(per, int) else list(per)
    edges = [0.0]
    for (a, b), n in zip(zip(t[:-1], t[1:]), counts):
        edges += [(a + (b - a) * (k + 1) / n) / t_end for k in range(n)]
    edges[-1] = 1.0
    return edges


def add_experiment(m, k: int, study: Study, e: Experiment, reactions, per, start, points: int = 3):
    """Block m.E[k]: experiment e's states u (mol/L) and balances, initialized from `start` (a function of times,
    in s, giving mol/m^3). Returns {row index: state index (a collocation point, or the row)} for the samples."""
    import pyomo.dae as dae
    from tubeyield.modeling import pyo
    S = stoichiometric_matrix(study)
    symbols = study.symbols
    n = len(symbols)
    b = m.E[k]
    inlet = dict(e.start)
    # States carry no lower bound: near the depletion of a reactant the collocation polynomial may dip a hair below
    # zero, and a bound at zero then makes parameter values infeasible that are not (measured on the demo's runs:
    # the least-squares optimum, SSR 504.37 by scipy, was cut off and the NLP stopped at 528.31). Fractional orders
    # (c + delta)^(n - 1) need c >= 0, and keep the bound.
    low = 0.0 if any(0 < float(q) < 1 for r in study.reactions for _, q in r.orders
                     if isinstance(q, (int, float))) else None

    def rates_at(u_of, T):
        conc = {s: 1000.0 * u_of(i) for i, s in enumerate(symbols)}
        return [rx.rate_expression(conc, T, pyo) for rx in reactions]

    if e.vessel == "stirred":
        rows = [i for i, t in enumerate(e.times)]
        c0 = start(np.array(e.times))
        b.u = pyo.Var(range(n), rows, bounds=(low, None))
        for j in range(n):
            for i in rows:
                b.u[j, i].set_value(max(float(c0[j, i]), 0.0) / 1000.0, skip_validation=True)

        def steady(b, j, i):
            r = rates_at(lambda q: b.u[q, i], e.T)
            return inlet.get(symbols[j], 0.0) / 1000.0 - b.u[j, i] + \
                e.times[i] * sum(S[j, q] * r[q] for q in range(len(r)) if S[j, q]) / 1000.0 == 0
        b.balance = pyo.Constraint(range(n), rows, rule=steady)
        return {i: i for i in rows}

    t_end = float(e.times[-1])
    edges = element_edges(e, per)
    b.tau = dae.ContinuousSet(bounds=(0.0, 1.0), initialize=edges)
    b.u = pyo.Var(range(n), b.tau, bounds=(low, None))     # mol/L
    b.du = dae.DerivativeVar(b.u, wrt=b.tau)
    pyo.TransformationFactory("dae.collocation").apply_to(m, wrt=b.tau, nfe=len(edges) - 1, ncp=points,
                                                         scheme="LAGRANGE-RADAU")
    taus = sorted(b.tau)
    c0 = start(np.array(taus) * t_end)
    for j in range(n):
        for q, z in enumerate(taus):
            b.u[j, z].set_value(max(float(c0[j, q]), 0.0) / 1000.0, skip_validation=True)
    for j, s in enumerate(symbols):
        b.u[j, 0.0].fix(inlet.get(s, 0.0) / 1000.0)
        b.u[j, 0.0].setlb(None)

    def balance(b, j, z):
        if z == 0.0:
            return pyo.Constraint.Skip
        r = rates_at(lambda q: b.u[q, z], e.temperature(z * t_end))
        return b.du[j, z] == t_end * sum(S[j, q] * r[q] for q in range(len(r)) if S[j, q]) / 1000.0

    b.balance = pyo.Constraint(range(n), taus, rule=balance)
    at = {}
    for i, t in enumerate(e.times):
        if t > 0:
            at[i] = min(taus, key=lambda q: abs(q - t / t_end))
    return at


def dense_start(study: Study, par: dict, e: Experiment):
    """A function of times (s) giving the simulation's concentrations there (mol/m^3), for initialization."""
    def at(times):
        times = np.asarray(times, dtype=float)
        if e.vessel == "stirred":
            return simulate_experiment(study, par, e, times=times, rtol=1e-8)
        inner = np.unique(times[times > 0])
        c = simulate_experiment(study, par, e, times=inner, rtol=1e-8) if inner.size else \
            np.zeros((len(study.symbols), 0))
        start = dict(e.start)
        c0 = np.array([start.get(s, 0.0) for s in study.symbols])
        return np.column_stack([c0 if t <= 0 else c[:, np.searchsorted(inner, t)] for t in times])
    return at
