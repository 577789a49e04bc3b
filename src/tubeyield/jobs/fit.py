"""Kinetics from lab runs: weighted least squares over every experiment in one NLP, with linearized statistics.

Method
------
Each experiment (batch, or a liquid plug-flow run read at its residence times: at constant density the two obey the
same balance dc/dt = S r(c, T)) is discretized by orthogonal collocation on finite elements (pyomo.dae, Radau points,
as the reactor models), with its sampling times on element boundaries so that the model is compared with the data
without interpolation. All experiments share the estimated parameters, and the weighted sum of squared residuals is
minimized by Ipopt through the project's solver plug-in (the simultaneous approach to parameter estimation in
differential-algebraic models: Tjoa and Biegler, Ind. Eng. Chem. Res. 30 (1991) 376; Biegler, Nonlinear Programming,
SIAM 2010, ch. 10). Rate constants are estimated as ln k at a centring temperature T_c, the reciprocal mean of the
experiments' 1/T, and Ea in kJ/mol, so that the two are nearly uncorrelated (the reparameterized Arrhenius equation:
Schwaab and Pinto, Chem. Eng. Sci. 62 (2007) 2750).

The fitted curves are re-simulated with scipy (solve_ivp, Radau) at the estimates; the mesh is refined until they
agree with the collocation to the study's check tolerance. Statistics come from that independent simulation: the
Jacobian of the weighted residuals by central differences in the estimation coordinates, the covariance
s^2 (J^T J)^-1 (Gauss-Newton approximation of the inverse Fisher information; s^2 = SSR/(N - p) when no measurement
error is given, 1 when it is, and then the SSR is a chi-square with N - p degrees of freedom), and t-based 95 %
intervals, taken in ln k for rate constants (so positive) and mapped to the reported units (Bates and Watts,
Nonlinear Regression Analysis and Its Applications, Wiley 1988, ch. 2). Singular values of the scaled Jacobian
show combinations of parameters the data do not determine.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field, replace

import numpy as np

from tubeyield import status as st
from tubeyield.errors import SimulationFailed
from tubeyield.reactor.parameters import parametric_reactions, study_parameters
from tubeyield.study.kinetics import GAS_CONSTANT, Arrhenius
from tubeyield.study.schema import Experiment, Study
from tubeyield.study.units import rate_constant_from_si

EA_DEFAULT_BOUNDS = (0.0, 500.0)   # kJ/mol, when the study gives none
LNK_SPAN = 25.0                    # ln k may move this far from its start when the study gives no bounds
IDENTIFIABLE = 1e-7                # smallest/largest singular value of the scaled Jacobian below this: not determined
MAX_REFINE = 4                     # mesh doublings for the check


@dataclass
class FitParameter:
    path: str
    value: float              # user units (k at the study's T_ref in the unit the study used; Ea in kJ/mol)
    unit: str
    se: float | None          # linearized standard error (delta method for k), user units
    low: float | None         # 95 % interval (t-based, in ln k for rate constants)
    high: float | None
    at_bound: bool = False
    profile_low: float | None = None     # 95 % profile-likelihood interval (None: open on that side)
    profile_high: float | None = None

    def to_dict(self) -> dict:
        return dict(self.__dict__)


@dataclass
class FitResult:
    status: str
    study: str
    parameters: list[FitParameter]
    ssr: float | None
    n_data: int
    dof: int
    sigma: float | None              # estimated common standard deviation (mol/L), when no error model is given
    chi_square: float | None         # with an error model: the weighted SSR, chi-square with dof degrees of freedom
    correlation: list[list[float]]
    singular_values: list[float]
    not_identified: list[str]
    T_centre: float
    check: dict
    experiments: list[dict]
    values_si: dict = field(default_factory=dict)    # path -> SI value (k at the reaction's T_ref, Ea in J/mol)
    curves: list = field(default_factory=list)       # per experiment: data and the fitted curves (s, mol/L)
    timing: dict = field(default_factory=dict)
    message: str = ""
    warnings: list[str] = field(default_factory=list)

    def to_dict(self) -> dict:
        d = dict(self.__dict__)
        d["parameters"] = [p.to_dict() for p in self.parameters]
        return d

    def to_frame(self):
        import pandas as pd
        return pd.DataFrame([p.to_dict() for p in self.parameters])


# -------------------------------------------------------------------------------------------------- coordinates


@dataclass(frozen=True)
class _Coordinates:
    """Estimation coordinates x: ln k(T_c) for a path '.k', Ea in kJ/mol for '.Ea'; everything else from the study."""
    study: Study                       # the study with every rate constant re-expressed at T_c
    paths: tuple[str, ...]
    T_c: float
    refs: tuple[tuple[str, float], ...]   # each reaction's own T_ref (the study's), K

    def start(self) -> np.ndarray:
        out = []
        for p in self.paths:
            rid, name = p.split(".")[1:]
            r = self.study.reaction(rid)
            out.append(r.k.ln_k_ref if name == "k" else r.k.Ea / 1000.0)
        return np.array(out)

    def bounds(self, given: dict) -> list[tuple[float, float]]:
        x0 = self.start()
        out = []
        for p, x in zip(self.paths, x0):
            name = p.split(".")[2]
            if p in given:
                low, high = given[p]
                if name == "k":
                    # bounds are on k at the study's T_ref; at T_c they move with Ea (taken at the start value)
                    shift = self._shift(p, x0)
                    out.append((math.log(low) + shift, math.log(high) + shift))
                else:
                    out.append((low / 1000.0, high / 1000.0))
            else:
                out.append((x - LNK_SPAN, x + LNK_SPAN) if name == "k" else EA_DEFAULT_BOUNDS)
        return out

    def _shift(self, path: str, x) -> float:
        """ln k(T_c) - ln k(T_ref) for the reaction of `path` at coordinates x."""
        rid = path.split(".")[1]
        r_ref = self.T_ref(rid)
        return -self.Ea(rid, x) / GAS_CONSTANT * (1.0 / self.T_c - 1.0 / r_ref)

    def T_ref(self, rid: str) -> float:
        return dict(self.refs)[rid]

    def Ea(self, rid: str, x) -> float:
        p = f"reaction.{rid}.Ea"
        return 1000.0 * x[self.paths.index(p)] if p in self.paths else self.study.reaction(rid).k.Ea

    def par(self, x, base: dict | None = None) -> dict:
        """The study's parameters (reactor/parameters.py names) with the estimated ones from x (floats or vars)."""
        par = dict(base if base is not None else study_parameters(self.study))
        for p, v in zip(self.paths, x):
            rid, name = p.split(".")[1:]
            par[f"lnk:{rid}" if name == "k" else f"Ea:{rid}"] = v if name == "k" else 1000.0 * v
        return par


def _coordinates(study: Study) -> _Coordinates:
    temps = [e.T for e in study.experiments]
    T_c = len(temps) / sum(1.0 / T for T in temps)
    refs = tuple((r.id, r.k.T_ref) for r in study.reactions)
    centred = tuple(replace(r, k=Arrhenius(r.k.ln_value(T_c, math), T_c, r.k.Ea)) for r in study.reactions)
    return _Coordinates(replace(study, reactions=centred), tuple(study.fit.estimate), T_c, refs)


# ---------------------------------------------------------------------------------------------------- simulation


def _stoich(study: Study) -> np.ndarray:
    S = np.zeros((len(study.symbols), len(study.reactions)))
    for j, r in enumerate(study.reactions):
        for s, v in r.stoichiometry().items():
            S[study.symbols.index(s), j] = v
    return S


def simulate_experiment(study: Study, par: dict, e: Experiment, times=None, rtol: float = 1e-10):
    """Concentrations (mol/m^3, species x times) of experiment `e` at parameters `par`, by scipy's Radau method."""
    from scipy.integrate import solve_ivp
    reactions = parametric_reactions(study, par)
    S = _stoich(study)
    symbols = study.symbols
    start = dict(e.start)
    y0 = np.array([start.get(s, 0.0) for s in symbols])
    scale = max(float(y0.max()), 1e-12)

    def f(t, y):
        conc = {s: max(v, 0.0) * scale for s, v in zip(symbols, y)}
        r = np.array([rx.rate_expression(conc, e.T, np) for rx in reactions])
        return S @ r / scale

    times = np.array(e.times if times is None else times)
    sol = solve_ivp(f, (0.0, float(times[-1])), y0 / scale, method="Radau", t_eval=times, rtol=rtol,
                    atol=rtol * 1e-2)
    if not sol.success:
        raise SimulationFailed(f"experiment {e.id}: {sol.message}")
    return sol.y * scale


def _weights(study: Study, e: Experiment, s: str, y: np.ndarray) -> np.ndarray:
    """Standard deviations (mol/m^3) of the samples y of species s: the error model, or 1 mol/L (unit weights)."""
    errors = dict(study.fit.error)
    if s not in errors:
        return np.full_like(y, 1000.0)
    absolute, relative = errors[s]
    sd = absolute + relative * np.abs(y)
    floor = max(relative * np.nanmax(np.abs(y)) * 1e-3, 1e-9) if relative else 1e-12
    return np.maximum(sd, floor)


def _samples(study: Study, e: Experiment):
    """[(species index, time index, value, sd)] of the samples taken after time zero (the start is given)."""
    out = []
    for s, values in e.series:
        y = np.array(values)
        sd = _weights(study, e, s, y)
        for i, (t, v) in enumerate(zip(e.times, y)):
            if t > 0 and not math.isnan(v):
                out.append((study.symbols.index(s), i, float(v), float(sd[i])))
    return out


def residuals(coords: _Coordinates, x, rtol: float = 1e-10) -> np.ndarray:
    """Weighted residuals (model - data) / sd of every sample, from the scipy simulation at coordinates x."""
    par = coords.par(x)
    out = []
    for e in coords.study.experiments:
        c = simulate_experiment(coords.study, par, e, rtol=rtol)
        out += [(c[j, i] - v) / sd for j, i, v, sd in _samples(coords.study, e)]
    return np.array(out)


# -------------------------------------------------------------------------------------------------------- the NLP


def _edges(times, per: int) -> list[float]:
    """Element edges on [0, 1]: the sampling times (scaled by the last) with `per` equal elements between each."""
    t = [0.0] + [float(v) for v in times if v > 0]
    t_end = t[-1]
    edges = [0.0]
    for a, b in zip(t[:-1], t[1:]):
        edges += [(a + (b - a) * (k + 1) / per) / t_end for k in range(per)]
    edges[-1] = 1.0
    return edges


def build_nlp(coords: _Coordinates, bounds, x0, per: int, start_sims: list):
    """One Pyomo model: the estimated coordinates m.x, one collocation block per experiment, the weighted SSR."""
    import pyomo.dae as dae
    import pyomo.environ as pyo
    study = coords.study
    m = pyo.ConcreteModel()
    P = len(coords.paths)
    m.x = pyo.Var(range(P), bounds=lambda m, i: bounds[i], initialize=lambda m, i: float(x0[i]))
    par = coords.par([m.x[i] for i in range(P)])
    reactions = parametric_reactions(study, par)
    S = _stoich(study)
    symbols = study.symbols
    m.E = pyo.Block(range(len(study.experiments)))
    terms = []
    points = []
    for k, e in enumerate(study.experiments):
        b = m.E[k]
        t_end = float(e.times[-1])
        edges = _edges(e.times, per)
        b.tau = dae.ContinuousSet(bounds=(0.0, 1.0), initialize=edges)
        b.u = pyo.Var(range(len(symbols)), b.tau, bounds=(0.0, None))     # mol/L
        b.du = dae.DerivativeVar(b.u, wrt=b.tau)
        pyo.TransformationFactory("dae.collocation").apply_to(m, wrt=b.tau, nfe=len(edges) - 1, ncp=3,
                                                             scheme="LAGRANGE-RADAU")
        taus = sorted(b.tau)
        sim_t = np.array(taus) * t_end
        c0 = start_sims[k](sim_t)                                       # mol/m^3, species x points
        for j in range(len(symbols)):
            for n, z in enumerate(taus):
                b.u[j, z].set_value(max(float(c0[j, n]), 0.0) / 1000.0, skip_validation=True)
        start = dict(e.start)
        for j, s in enumerate(symbols):
            b.u[j, 0.0].fix(start.get(s, 0.0) / 1000.0)
            b.u[j, 0.0].setlb(None)

        def balance(b, j, z, t_end=t_end):
            if z == 0.0:
                return pyo.Constraint.Skip
            conc = {s: 1000.0 * b.u[i, z] for i, s in enumerate(symbols)}
            rates = [rx.rate_expression(conc, e.T, pyo) for rx in reactions]
            return b.du[j, z] == t_end * sum(S[j, r] * rates[r] for r in range(len(rates)) if S[j, r]) / 1000.0

        b.balance = pyo.Constraint(range(len(symbols)), taus, rule=balance)
        at = {}
        for i, t in enumerate(e.times):
            if t > 0:
                z = min(taus, key=lambda q: abs(q - t / t_end))
                at[i] = z
        for j, i, v, sd in _samples(study, e):
            terms.append(((1000.0 * b.u[j, at[i]] - v) / sd) ** 2)
        points.append((b, at, taus))
    m.ssr = pyo.Objective(expr=sum(terms), sense=pyo.minimize)
    return m, points


def _model_at_samples(study: Study, points) -> list[np.ndarray]:
    import pyomo.environ as pyo
    out = []
    for (b, at, _), e in zip(points, study.experiments):
        c = np.full((len(study.symbols), len(e.times)), np.nan)
        for i, z in at.items():
            for j in range(len(study.symbols)):
                c[j, i] = 1000.0 * pyo.value(b.u[j, z])
        out.append(c)
    return out


def _dense_start(study: Study, par: dict, e: Experiment):
    """A function of times (s) giving the start simulation's concentrations there (for initialization)."""
    def at(times):
        times = np.asarray(times, dtype=float)
        inner = times[times > 0]
        c = simulate_experiment(study, par, e, times=inner, rtol=1e-8) if inner.size else np.zeros((len(study.symbols), 0))
        start = dict(e.start)
        c0 = np.array([[start.get(s, 0.0)] for s in study.symbols])
        return np.hstack([c0, c]) if times.size and times[0] == 0 else c
    return at


# -------------------------------------------------------------------------------------------------------- the job


def fit(study: Study, *, solver=None, tee: bool = False) -> FitResult:
    """Estimate study.fit.estimate from study.experiments (module docstring)."""
    import pyomo.environ as pyo

    from tubeyield.solve import OK_CONDITIONS, make_solver
    t0 = time.perf_counter()
    timing: dict = {}
    coords = _coordinates(study)
    given = dict(study.fit.bounds)
    x0 = coords.start()
    bounds = coords.bounds(given)
    x0 = np.clip(x0, [b[0] for b in bounds], [b[1] for b in bounds])
    solver = solver or make_solver(study.numerics)
    par0 = coords.par(x0)
    try:
        starts = [_dense_start(coords.study, par0, e) for e in coords.study.experiments]
    except SimulationFailed as exc:
        return _failed(study, coords, f"the start simulation failed: {exc}", timing)

    per = study.fit.elements
    x = x0
    check = {}
    for refinement in range(MAX_REFINE + 1):
        t = time.perf_counter()
        m, points = build_nlp(coords, bounds, x, per, starts)
        timing["build"] = timing.get("build", 0.0) + time.perf_counter() - t
        t = time.perf_counter()
        res = solver.solve(m, tee=tee)
        timing["solve"] = timing.get("solve", 0.0) + time.perf_counter() - t
        if res.solver.termination_condition not in OK_CONDITIONS:
            return _failed(study, coords, f"Ipopt did not converge ({res.solver.termination_condition})", timing)
        x = np.array([pyo.value(m.x[i]) for i in range(len(coords.paths))])
        model = _model_at_samples(coords.study, points)
        t = time.perf_counter()
        try:
            ref = [simulate_experiment(coords.study, coords.par(x), e) for e in coords.study.experiments]
        except SimulationFailed as exc:
            return _failed(study, coords, f"the re-simulation at the estimates failed: {exc}", timing)
        timing["check"] = timing.get("check", 0.0) + time.perf_counter() - t
        scale = max(max(v for _, v in e.start) for e in coords.study.experiments)
        diff = max(float(np.nanmax(np.abs(a - b))) for a, b in zip(model, ref)) / scale
        check = {"max_rel_difference": diff, "tolerance": study.numerics.check_tolerance,
                 "elements_per_interval": per, "passed": diff <= study.numerics.check_tolerance,
                 "integrator": "scipy solve_ivp Radau, rtol 1e-10"}
        if check["passed"]:
            break
        per *= 2
        starts = [_dense_start(coords.study, coords.par(x), e) for e in coords.study.experiments]

    t = time.perf_counter()
    out = _statistics(study, coords, x, bounds, check, timing)
    timing["statistics"] = time.perf_counter() - t
    if out.parameters and out.ssr is not None:
        t = time.perf_counter()
        _profile_intervals(study, coords, m, solver, float(pyo.value(m.ssr)), out)
        timing["profiles"] = time.perf_counter() - t
        out.curves = _curves(coords, x)
    timing["total"] = time.perf_counter() - t0
    return out


def _curves(coords: _Coordinates, x, n: int = 120) -> list[dict]:
    """For the report: each experiment's fitted samples (after time zero) and its fitted curves on a fine grid
    (s, mol/L)."""
    out = []
    par = coords.par(x)
    for e in coords.study.experiments:
        grid = np.linspace(0.0, float(e.times[-1]), n)
        c = simulate_experiment(coords.study, par, e, times=grid[1:], rtol=1e-8)
        start = dict(e.start)
        c = np.hstack([np.array([[start.get(s, 0.0)] for s in coords.study.symbols]), c])
        at = simulate_experiment(coords.study, par, e)            # at the sampling times, for the parity plot
        measured = [s for s, _ in e.series]
        idx = coords.study.symbols.index
        out.append({"id": e.id, "vessel": e.vessel, "T": e.T, "t": grid.tolist(),
                    "model": {s: (c[idx(s)] / 1000.0).tolist() for s in measured},
                    "data": {s: {"t": [t for t, v in zip(e.times, vals) if t > 0 and not math.isnan(v)],
                                 "c": [v / 1000.0 for t, v in zip(e.times, vals) if t > 0 and not math.isnan(v)],
                                 "fit": [m / 1000.0 for t, m, v in zip(e.times, at[idx(s)], vals)
                                         if t > 0 and not math.isnan(v)]}
                             for s, vals in e.series}})
    return out


# ------------------------------------------------------------------------------------------ profile likelihood


PROFILE_BISECTIONS = 9         # halvings of the bracket: the end is found to 1/512 of its first step


def _profile_intervals(study, coords, m, solver, ssr_min: float, out: FitResult) -> None:
    """95 % profile-likelihood intervals: for each reported parameter, the values where the SSR, minimized over the
    other parameters, crosses ssr_min (1 + F(1, N - p; 0.95) / (N - p)) (error estimated) or ssr_min + chi2(1; 0.95)
    (error known) (Bates and Watts 1988, ch. 6; Venzon and Moolgavkar, Appl. Statist. 37 (1988) 87, for the
    profile idea). The parameter is held by an equality on its linear function of the coordinates (ln k at the
    reaction's own T_ref, or Ea), whose right-hand side is a pinned variable, so each point re-solves the built
    NLP warm. Sets p.profile_low / p.profile_high (None where the SSR stays below the threshold up to a bound) and
    warns where they differ from the linearized interval by more than 20 % of its half-width."""
    import pyomo.environ as pyo
    from scipy import stats

    from tubeyield.solve import OK_CONDITIONS
    known = out.chi_square is not None
    level = (ssr_min + float(stats.chi2.ppf(0.95, 1))) if known else \
        ssr_min * (1.0 + float(stats.f.ppf(0.95, 1, out.dof)) / out.dof)
    x_opt = [pyo.value(m.x[i]) for i in range(len(coords.paths))]
    m.target = pyo.Var(initialize=0.0)
    for p, g, to_user, lin in _reported(study, coords, out):
        value0 = float(sum(gi * xi for gi, xi in zip(g, x_opt)))
        m.target.setlb(value0)
        m.target.setub(value0)
        m.hold = pyo.Constraint(expr=sum(float(gi) * m.x[i] for i, gi in enumerate(g) if gi) == m.target)

        written = []            # the first solve after adding the constraint writes the model anew

        def ssr_at(v):
            m.target.setlb(v)
            m.target.setub(v)
            res = solver.solve(m, warmstart=bool(written), reuse_structure=bool(written))
            written.append(v)
            if res.solver.termination_condition not in OK_CONDITIONS:
                return None
            return float(pyo.value(m.ssr))

        ends = []
        step0 = lin if lin and lin > 0 else 0.1 * max(1.0, abs(value0))
        for side in (-1.0, 1.0):
            for i, v in enumerate(x_opt):
                m.x[i].set_value(v, skip_validation=True)
            inside, outside, step = 0.0, None, step0
            for _ in range(8):                       # expand until the SSR passes the level
                s = ssr_at(value0 + side * step)
                if s is None:
                    break
                if s > level:
                    outside = step
                    break
                inside, step = step, 2.0 * step
            if outside is None:
                ends.append(None)
                continue
            for _ in range(PROFILE_BISECTIONS):
                mid = 0.5 * (inside + outside)
                s = ssr_at(value0 + side * mid)
                if s is None:
                    break
                if s > level:
                    outside = mid
                else:
                    inside = mid
            ends.append(value0 + side * 0.5 * (inside + outside))
        m.del_component(m.hold)
        low, high = (to_user(e) if e is not None else None for e in ends)
        p.profile_low, p.profile_high = low, high
        if p.low is not None and low is not None and high is not None:
            half = 0.5 * (p.high - p.low)
            if max(abs(low - p.low), abs(high - p.high)) > 0.2 * half:
                out.warnings.append(f"{p.path}: the profile-likelihood interval ({low:.4g} to {high:.4g}) differs "
                                    f"from the linearized one ({p.low:.4g} to {p.high:.4g}): the model is far "
                                    "from linear in this parameter; trust the profile interval")
        elif low is None or high is None:
            out.warnings.append(f"{p.path}: the profile-likelihood interval could not be closed on one side (the SSR "
                                "stays below the 95 % level up to the parameter's bound, or a re-solve failed)")
    m.del_component(m.target)


def _reported(study, coords, out: FitResult):
    """(parameter, gradient g of its estimation value in the coordinates, value -> user units, linearized SE of
    that value) for each reported parameter: ln k at the reaction's T_ref, or Ea in kJ/mol."""
    P = len(coords.paths)
    for i, p in enumerate(out.parameters):
        rid, name = p.path.split(".")[1:]
        g = np.zeros(P)
        if name == "Ea":
            g[i] = 1.0
            yield p, g, float, p.se
            continue
        rx = study.reaction(rid)
        a = -1.0 / GAS_CONSTANT * (1.0 / rx.k.T_ref - 1.0 / coords.T_c)
        g[i] = 1.0
        ea = f"reaction.{rid}.Ea"
        if ea in coords.paths:
            g[coords.paths.index(ea)] = 1000.0 * a
        const = 0.0 if ea in coords.paths else a * rx.k.Ea

        def to_user(v, rx=rx, const=const):
            return rate_constant_from_si(math.exp(v + const), rx.k_power, rx.k_unit)[0]
        yield p, g, to_user, (p.se / p.value if p.se is not None and p.value else None)


def _statistics(study, coords, x, bounds, check, timing) -> FitResult:
    from scipy import stats
    res = residuals(coords, x)
    ssr = float(res @ res)
    N, P = res.size, len(x)
    dof = N - P
    J = np.zeros((N, P))
    for i in range(P):
        # central differences: truncation O(h^2) ~ 1e-6, integration noise rtol / h ~ 1e-6 (relative)
        h = 1e-3 * max(1.0, abs(x[i]))
        xp, xm = x.copy(), x.copy()
        xp[i] += h
        xm[i] -= h
        J[:, i] = (residuals(coords, xp, 1e-9) - residuals(coords, xm, 1e-9)) / (2 * h)
    known = bool(study.fit.error)
    s2 = 1.0 if known else ssr / dof
    sv = np.linalg.svd(J, compute_uv=False)
    _, _, Vt = np.linalg.svd(J)
    not_identified = []
    if sv[0] > 0:
        for value, v in zip(sv, Vt):
            if value / sv[0] < IDENTIFIABLE:
                big = [coords.paths[i] for i in np.argsort(-np.abs(v)) if abs(v[i]) > 0.1]
                not_identified.append(" and ".join(big))
    warnings = []
    try:
        cov = s2 * np.linalg.inv(J.T @ J) if not not_identified else None
    except np.linalg.LinAlgError:
        cov = None
    tq = float(stats.t.ppf(0.975, dof))
    params = []
    T = coords.T_c
    for i, p in enumerate(coords.paths):
        rid, name = p.split(".")[1:]
        at_bound = bool(min(x[i] - bounds[i][0], bounds[i][1] - x[i]) <= 1e-6 * max(1.0, abs(x[i])))
        if at_bound:
            warnings.append(f"{p} ended at its bound: the data do not hold it inside the range given")
        if name == "Ea":
            se = math.sqrt(cov[i, i]) if cov is not None else None
            params.append(FitParameter(p, float(x[i]), "kJ/mol", se, float(x[i] - tq * se) if se is not None else None,
                                       float(x[i] + tq * se) if se is not None else None, at_bound))
            continue
        # ln k at the study's own T_ref: a linear function g of x (through Ea when it is estimated)
        rx = study.reaction(rid)
        a = -1.0 / GAS_CONSTANT * (1.0 / rx.k.T_ref - 1.0 / T)
        g = np.zeros(P)
        g[i] = 1.0
        ea_path = f"reaction.{rid}.Ea"
        if ea_path in coords.paths:
            g[coords.paths.index(ea_path)] = 1000.0 * a
        ln_ref = x[i] + a * coords.Ea(rid, x)
        se_ln = math.sqrt(float(g @ cov @ g)) if cov is not None else None
        def to_user(ln, rx=rx):
            return rate_constant_from_si(math.exp(ln), rx.k_power, rx.k_unit)[0]
        value = to_user(ln_ref)
        unit = rate_constant_from_si(1.0, rx.k_power, rx.k_unit)[1]
        params.append(FitParameter(p, value, unit, value * se_ln if se_ln is not None else None,
                                   to_user(ln_ref - tq * se_ln) if se_ln is not None else None,
                                   to_user(ln_ref + tq * se_ln) if se_ln is not None else None, at_bound))
    corr = []
    if cov is not None:
        d = np.sqrt(np.diag(cov))
        corr = (cov / np.outer(d, d)).tolist()
    if not_identified:
        warnings.append("not determined by the data: " + "; ".join(not_identified))
    per_exp = []
    k = 0
    for e in coords.study.experiments:
        n = len(_samples(coords.study, e))
        per_exp.append({"id": e.id, "vessel": e.vessel, "T": e.T, "samples": n,
                        "ssr": float(res[k:k + n] @ res[k:k + n])})
        k += n
    values_si = {}
    for i, p in enumerate(coords.paths):
        rid, name = p.split(".")[1:]
        if name == "Ea":
            values_si[p] = 1000.0 * float(x[i])
        else:
            rx = study.reaction(rid)
            values_si[p] = math.exp(x[i] - coords.Ea(rid, x) / GAS_CONSTANT * (1.0 / rx.k.T_ref - 1.0 / T))
    status = st.OPTIMAL if check.get("passed") and not not_identified else st.UNVERIFIED
    message = "" if status == st.OPTIMAL else "NOT VERIFIED: " + "; ".join(
        (["the re-simulation differs by %.2e" % check.get("max_rel_difference", float("nan"))]
         if not check.get("passed") else []) + (["parameters not identifiable"] if not_identified else []))
    sigma = math.sqrt(ssr / dof) if not known else None      # mol/L: the residuals are in units of 1 mol/L
    return FitResult(status, study.name, params, ssr, N, dof, sigma, ssr if known else None, corr,
                     [float(v) for v in sv], not_identified, T, check, per_exp, values_si, timing, message, warnings)


def _failed(study, coords, message, timing) -> FitResult:
    return FitResult(st.FAILED, study.name, [], None, 0, 0, None, None, [], [], [], coords.T_c, {}, [], {}, timing,
                     message)

