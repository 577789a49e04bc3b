"""The fit job: kinetics from lab runs, with the statistics a reviewer needs.

All experiments in one NLP with shared parameters (the simultaneous approach to parameter estimation in
differential-algebraic models: Tjoa and Biegler, Ind. Eng. Chem. Res. 30 (1991) 376; Biegler, Nonlinear
Programming, SIAM 2010, ch. 10), each run discretized as in estimate/experiments.py, the weighted SSR minimized by
Ipopt through the project's solver plug-in from several starting points (the study's values and a Latin hypercube in
the estimation coordinates: logarithms of rate constants, estimate/coordinates.py). The best fit is re-simulated with
scipy at the estimates and the mesh refined until the two agree to the study's check tolerance. Statistics come from
that independent simulation (estimate/statistics.py): the Jacobian of the weighted residuals by central differences,
the linearized covariance and t intervals, profile-likelihood intervals on the NLP (warm re-solves with one
parameter held), the singular values of the scaled Jacobian with the combinations the data do not determine and the
run that would determine them best, lack of fit, and a comparison with rival networks fitted to the same data.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field, replace

import numpy as np

from tubeyield import status as st
from tubeyield.errors import SimulationFailed
from tubeyield.estimate import statistics as stats
from tubeyield.estimate.coordinates import Coordinates, coordinates
from tubeyield.estimate.experiments import add_experiment, dense_start, residuals, samples, simulate_experiment
from tubeyield.study.schema import Experiment, Study

MAX_REFINE = 4              # mesh doublings for the check
JACOBIAN_STEP = 1e-4        # central-difference step in the coordinates (relative to max(1, |x|))
JACOBIAN_RTOL = 1e-12       # integration tolerance for the Jacobian: truncation and noise both near 1e-8
SAME_MINIMUM = 1e-6         # relative SSR difference that counts as the same local minimum
PROFILE_SOLVES = 12         # re-solves per side of a profile-likelihood interval
PROFILE_CHECK = 0.01        # largest SSR difference at a profile end, re-simulated, as a share of the level's rise
# A start after the first that needs more Ipopt iterations than this is given up (and reported): on the demo's
# twelve runs a converging start takes 4-40 iterations, and one Latin-hypercube start wandered for 1000 (107 s).
START_MAX_ITER = 200
T_STEP_DESIGN = 20.0        # K beyond the coldest and hottest runs for a suggested run


@dataclass
class FitParameter:
    path: str
    value: float              # user units (k at the study's T_ref in the unit the study used; energies in kJ/mol)
    unit: str
    se: float | None          # linearized standard error (delta method for logarithmic parameters), user units
    low: float | None         # 95 % interval (t-based, in the logarithm for rate and equilibrium constants)
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
    curves: list = field(default_factory=list)       # per experiment: data, fitted curves and bands (s, mol/L)
    timing: dict = field(default_factory=dict)
    message: str = ""
    warnings: list[str] = field(default_factory=list)
    starts: list = field(default_factory=list)       # each starting point: where from, SSR, status
    poorly_determined: list[str] = field(default_factory=list)
    suggestions: list[str] = field(default_factory=list)   # the run that would determine a weak combination best
    lack_of_fit: dict = field(default_factory=dict)
    residual_summary: list = field(default_factory=list)   # per species: values, RMS and mean of the residuals
    information: dict = field(default_factory=dict)  # AIC, AICc, BIC
    rivals: list = field(default_factory=list)       # the comparison with rival networks, this network first
    kinetics: dict = field(default_factory=dict)     # what --kinetics reads: values, estimates, covariance, network
    profile_check: dict = field(default_factory=dict)   # the profile ends re-simulated: SSR differences

    def to_dict(self) -> dict:
        d = dict(self.__dict__)
        d["parameters"] = [p.to_dict() for p in self.parameters]
        return d

    def to_frame(self):
        import pandas as pd
        return pd.DataFrame([p.to_dict() for p in self.parameters])


# -------------------------------------------------------------------------------------------------------- the NLP


@dataclass
class _Problem:
    """The estimation NLP: the model, each experiment's block and sample map, the experiments' start functions."""
    m: object
    blocks: list          # per experiment: {row: state index}
    mesh: list            # per experiment: elements in each interval between breakpoints (an int: in every one)

    def describe(self) -> str:
        counts = [n for per in self.mesh for n in (per if isinstance(per, list) else [per])]
        low, high = min(counts), max(counts)
        return f"{low}" if low == high else f"{low} to {high}"


def _build(coords: Coordinates, bounds, x0, mesh: list, starts: list) -> _Problem:
    from tubeyield.modeling import pyo

    from tubeyield.reactor.parameters import parametric_reactions
    study = coords.study
    m = pyo.ConcreteModel()
    P = len(coords.estimands)
    m.x = pyo.Var(range(P), bounds=lambda m, i: bounds[i], initialize=lambda m, i: float(x0[i]))
    reactions = parametric_reactions(study, coords.par([m.x[i] for i in range(P)]))
    m.E = pyo.Block(range(len(study.experiments)))
    blocks, terms = [], []
    for k, e in enumerate(study.experiments):
        at = add_experiment(m, k, study, e, reactions, mesh[k], starts[k])
        blocks.append(at)
        b = m.E[k]
        for j, i, v, sd in samples(study, e):
            terms.append(((1000.0 * b.u[j, at[i]] - v) / sd) ** 2)
    # the weighted SSR, and as the objective its mean over the samples: of order one at a good fit whatever the
    # number of data (an SSR of 500 left Ipopt's absolute dual tolerance out of reach: "search direction too small")
    m.ssr = pyo.Expression(expr=sum(terms))
    # The profile-likelihood constraint, part of the NLP from the start so that profiles re-solve the same built
    # solver: sum_q w_q x_q + a s = target, with w, a and target pinned. Fitting: w = 0, a = 1, target = 0 (so
    # s = 0). Holding a parameter: w = its linear form, a = 0, target = the held value; s then appears only in the
    # objective's s^2 and stays 0. Either way the constraint's Jacobian row is never zero.
    m.w = pyo.Var(range(P), initialize=0.0, bounds=(0.0, 0.0))
    m.a = pyo.Var(initialize=1.0, bounds=(1.0, 1.0))
    m.target = pyo.Var(initialize=0.0, bounds=(0.0, 0.0))
    m.s = pyo.Var(initialize=0.0)
    m.hold = pyo.Constraint(expr=sum(m.w[q] * m.x[q] for q in range(P)) + m.a * m.s == m.target)
    m.objective = pyo.Objective(expr=m.ssr / max(len(terms), 1) + m.s ** 2, sense=pyo.minimize)
    return _Problem(m, blocks, mesh)


def _pin(var, value: float) -> None:
    var.setlb(value)
    var.setub(value)
    var.set_value(value, skip_validation=True)


def _hold(m, weights, target: float) -> None:
    """Hold the linear form weights . x at `target` (profile likelihood), or release it (weights None)."""
    P = len(m.w)
    for q in range(P):
        _pin(m.w[q], 0.0 if weights is None else float(weights[q]))
    _pin(m.a, 1.0 if weights is None else 0.0)
    _pin(m.target, 0.0 if weights is None else float(target))
    m.s.set_value(0.0, skip_validation=True)


def _restart(problem: _Problem, coords: Coordinates, x, starts: list) -> None:
    """Put the NLP at a new starting point: the coordinates x and every state from the start simulations there."""
    m = problem.m
    for i, v in enumerate(x):
        m.x[i].set_value(float(v), skip_validation=True)
    m.s.set_value(0.0, skip_validation=True)
    for k, e in enumerate(coords.study.experiments):
        b = m.E[k]
        index = sorted({idx[1] for idx in b.u.index_set()})
        if e.vessel == "stirred":
            c = starts[k](np.array(e.times))
        else:
            c = starts[k](np.array(index) * float(e.times[-1]))
        for q, z in enumerate(index):
            for j in range(len(coords.study.symbols)):
                var = b.u[j, z]
                if not var.fixed:
                    var.set_value(max(float(c[j, q]), 0.0) / 1000.0, skip_validation=True)


def _refined(study: Study, mesh: list, errors: list, tolerance: float) -> list:
    """The next mesh after a failed check: in each batch or plug-flow run whose error somewhere exceeds the
    tolerance, the elements of every interval up to its last sample with an error above half the tolerance are
    doubled (the error carried forward from early intervals shows at later samples too); other runs keep theirs."""
    from tubeyield.estimate.experiments import intervals
    out = []
    for e, per, err in zip(study.experiments, mesh, errors):
        if e.vessel == "stirred" or not np.nanmax(err) > tolerance:
            out.append(per)
            continue
        t = intervals(e)
        counts = [per] * (len(t) - 1) if isinstance(per, int) else list(per)
        over = [i for i, v in enumerate(err) if e.times[i] > 0 and v > 0.5 * tolerance]
        t_last = e.times[over[-1]]
        out.append([2 * n if b <= t_last + 1e-12 * t_last else n for n, b in zip(counts, t[1:])])
    return out


def _model_at_samples(coords: Coordinates, problem: _Problem) -> list[np.ndarray]:
    from tubeyield.modeling import pyo
    out = []
    for k, (at, e) in enumerate(zip(problem.blocks, coords.study.experiments)):
        b = problem.m.E[k]
        c = np.full((len(coords.study.symbols), len(e.times)), np.nan)
        for i, z in at.items():
            for j in range(len(coords.study.symbols)):
                c[j, i] = 1000.0 * pyo.value(b.u[j, z])
        out.append(c)
    return out


def _x(problem: _Problem, P: int) -> np.ndarray:
    from tubeyield.modeling import pyo
    return np.array([pyo.value(problem.m.x[i]) for i in range(P)])


def sensitivities(problem: _Problem, P: int, solver) -> dict | None:
    """d(state)/d(coordinates) of every state of the NLP at its solution, by the implicit function theorem on the
    collocation and balance equations, F(s, x) = 0: ds/dx = -(dF/ds)^-1 dF/dx, with the exact Jacobian of the
    discretized model (casadi through the solver plug-in). {id(state variable): row of P sensitivities}, or None
    when the solver cannot give the Jacobian (an external ipopt executable)."""
    from scipy.sparse.linalg import splu
    if not hasattr(solver, "constraint_jacobian"):
        return None
    Jg, _, variables = solver.constraint_jacobian(problem.m)
    where = {id(v): k for k, v in enumerate(variables)}
    xcols = [where[id(problem.m.x[i])] for i in range(P)]
    taken = set(xcols)
    state_cols = [k for k in range(len(variables)) if k not in taken]
    A = Jg[:, state_cols].tocsc()
    if A.shape[0] != A.shape[1]:
        return None
    S = -splu(A).solve(Jg[:, xcols].toarray())
    return {id(variables[c]): S[r] for r, c in enumerate(state_cols)}


# -------------------------------------------------------------------------------------------------------- the job


def fit(study: Study, *, solver=None, tee: bool = False, compare: bool = True) -> FitResult:
    """Estimate study.fit.estimate from study.experiments (module docstring). `compare` fits the rival networks
    of [fit] rivals too."""
    from tubeyield.solve import make_solver
    t0 = time.perf_counter()
    timing: dict = {}
    solver = solver or make_solver(study.numerics)
    core = _fit_core(study, solver, tee, timing)
    if isinstance(core, FitResult):
        return core
    coords, (coarse, problem), x, bounds, check, runs = core
    t = time.perf_counter()
    sens = sensitivities(problem, len(x), solver)
    out = _statistics(study, coords, x, bounds, check, timing, problem if sens is not None else None, sens)
    out.starts = runs
    timing["statistics"] = time.perf_counter() - t
    if out.parameters and out.ssr is not None:
        t = time.perf_counter()
        _profile_intervals(coords, _profile_problem(coords, coarse, problem, out), solver, out)
        timing["profiles"] = time.perf_counter() - t
        t = time.perf_counter()
        out.curves = _curves(coords, x, out, problem, sens)
        timing["curves"] = time.perf_counter() - t
    if compare and study.fit.rivals and out.ssr is not None:
        t = time.perf_counter()
        out.rivals = _rivals(study, out, solver)
        timing["rivals"] = time.perf_counter() - t
    timing["total"] = time.perf_counter() - t0
    out.timing = timing
    return out


def _fit_core(study: Study, solver, tee: bool, timing: dict):
    """Multistart, then mesh refinement of the best: (coords, problem, x, bounds, check, runs), or a failed
    FitResult."""
    from scipy.stats import qmc

    from tubeyield.solve import OK_CONDITIONS
    coords = coordinates(study)
    given = dict(study.fit.bounds)
    bounds = coords.bounds(given)
    lows, highs = np.array([b[0] for b in bounds]), np.array([b[1] for b in bounds])
    x0 = np.clip(coords.start(), lows, highs)
    points = [("the study's values", x0)]
    if study.fit.starts > 1:
        region = coords.start_region(bounds, given)
        lo, hi = np.array([r[0] for r in region]), np.array([r[1] for r in region])
        u = qmc.LatinHypercube(d=len(x0), seed=0).random(study.fit.starts - 1)
        points += [(f"Latin hypercube {i + 1}", lo + row * (hi - lo)) for i, row in enumerate(u)]

    runs, best = [], None
    problem = None
    for label, x_start in points:
        run = {"from": label, "ssr": None, "status": None}
        runs.append(run)
        try:
            starts = [dense_start(coords.study, coords.par(x_start), e) for e in coords.study.experiments]
        except SimulationFailed as exc:
            run["status"] = f"start simulation failed: {exc}"
            continue
        t = time.perf_counter()
        if problem is None:
            problem = _build(coords, bounds, x_start, [study.fit.elements] * len(study.experiments), starts)
            first = True
        else:
            _restart(problem, coords, x_start, starts)
            first = False
        timing["build"] = timing.get("build", 0.0) + time.perf_counter() - t
        t = time.perf_counter()
        res = solver.solve(problem.m, tee=tee, reuse_structure=not first,
                           options=None if first else {"max_iter": START_MAX_ITER})
        timing["solve"] = timing.get("solve", 0.0) + time.perf_counter() - t
        condition = res.solver.termination_condition
        run["status"] = str(condition)
        run["iterations"] = solver.last_stats.get("iterations")
        if condition in OK_CONDITIONS:
            from tubeyield.modeling import pyo
            run["ssr"] = float(pyo.value(problem.m.ssr))
            run["x"] = _x(problem, len(x0)).tolist()
            if best is None or run["ssr"] < best["ssr"]:
                best = run
    if best is None:
        return _failed(study, coords, "Ipopt did not converge from any start: "
                       + "; ".join(f"{r['from']}: {r['status']}" for r in runs), timing)
    for r in runs:
        r["best"] = r is best or (r["ssr"] is not None and
                                  abs(r["ssr"] - best["ssr"]) <= SAME_MINIMUM * max(best["ssr"], 1e-300))

    x = np.array(best["x"])
    mesh = list(problem.mesh)
    check: dict = {}
    coarse = problem            # the multistart's NLP, at the best point after the first pass
    tolerance = study.numerics.check_tolerance
    for refinement in range(MAX_REFINE + 1):
        if refinement or runs[-1] is not best:
            # back to the best point (on the same NLP), or after a failed check a new NLP on the refined mesh
            try:
                starts = [dense_start(coords.study, coords.par(x), e) for e in coords.study.experiments]
            except SimulationFailed as exc:
                return _failed(study, coords, f"the simulation at the estimates failed: {exc}", timing)
            t = time.perf_counter()
            if refinement:
                problem = _build(coords, bounds, x, mesh, starts)
            else:
                _restart(problem, coords, x, starts)
            timing["build"] = timing.get("build", 0.0) + time.perf_counter() - t
            t = time.perf_counter()
            res = solver.solve(problem.m, tee=tee, reuse_structure=not refinement)
            timing["solve"] = timing.get("solve", 0.0) + time.perf_counter() - t
            if res.solver.termination_condition not in OK_CONDITIONS:
                return _failed(study, coords, f"Ipopt did not converge at the best point on the mesh of "
                                              f"{problem.describe()} element(s) per interval "
                                              f"({res.solver.termination_condition})", timing)
            x = _x(problem, len(x0))
        model = _model_at_samples(coords, problem)
        t = time.perf_counter()
        try:
            ref = [simulate_experiment(coords.study, coords.par(x), e) for e in coords.study.experiments]
        except SimulationFailed as exc:
            return _failed(study, coords, f"the re-simulation at the estimates failed: {exc}", timing)
        timing["check"] = timing.get("check", 0.0) + time.perf_counter() - t
        scale = max(max(v for _, v in e.start) for e in coords.study.experiments)
        errors = [np.nan_to_num(np.abs(a - b), nan=0.0).max(axis=0) / scale for a, b in zip(model, ref)]  # per sample
        diff = max(float(np.nanmax(err)) for err in errors)
        check = {"max_rel_difference": diff, "tolerance": tolerance, "elements_per_interval": problem.describe(),
                 "passed": diff <= tolerance,
                 "integrator": "scipy solve_ivp LSODA, rtol 1e-10 (stirred tanks: start-up transient and root)"}
        if check["passed"]:
            break
        mesh = _refined(coords.study, mesh, errors, tolerance)
    return coords, (coarse, problem), x, bounds, check, runs


# ------------------------------------------------------------------------------------------------- statistics


def jacobian(coords: Coordinates, x: np.ndarray, study: Study | None = None) -> np.ndarray:
    """d(weighted residuals)/d(coordinates) by central differences on the scipy simulation (step 1e-4, rtol
    1e-12: truncation and integration noise both near 1e-8 relative)."""
    study = study or coords.study
    P = len(x)
    cols = []
    for i in range(P):
        h = JACOBIAN_STEP * max(1.0, abs(x[i]))
        xp, xm = x.copy(), x.copy()
        xp[i] += h
        xm[i] -= h
        cols.append((residuals(study, coords.par(xp), JACOBIAN_RTOL)
                     - residuals(study, coords.par(xm), JACOBIAN_RTOL)) / (2 * h))
    return np.column_stack(cols)


def model_jacobian(coords: Coordinates, problem: _Problem, sens: dict) -> np.ndarray:
    """d(weighted residuals)/d(coordinates) from the NLP's sensitivities, in the order of estimate.residuals."""
    rows = []
    for k, (at, e) in enumerate(zip(problem.blocks, coords.study.experiments)):
        b = problem.m.E[k]
        for j, i, _, sd in samples(coords.study, e):
            rows.append(1000.0 * sens[id(b.u[j, at[i]])] / sd)
    return np.array(rows)


def _statistics(study: Study, coords: Coordinates, x, bounds, check, timing, problem=None, sens=None) -> FitResult:
    """The linearized statistics at the estimates x: residuals from the scipy re-simulation; the Jacobian from the
    NLP's sensitivities (exact for the verified discretization), or by central differences on the simulation when
    the solver cannot give them."""
    known = bool(study.fit.error)
    res = residuals(coords.study, coords.par(x))
    J = model_jacobian(coords, problem, sens) if sens is not None else jacobian(coords, x)
    # relative sensitivities: logarithmic coordinates are relative already; others are scaled by their size
    scales = np.array([1.0 if coords.logarithmic(i) else max(abs(v), 1.0) for i, v in enumerate(x)])
    lin = stats.linearized(J, res, known, scales)
    names = list(coords.paths)
    weak = stats.weak_directions(lin, names, stats.NOT_DETERMINED)
    poor = [w for w in stats.weak_directions(lin, names, stats.POORLY_DETERMINED) if w[0] >= stats.NOT_DETERMINED]
    not_identified = [" and ".join(w) for _, w in weak]
    poorly = [" and ".join(w) for _, w in poor]
    warnings = []
    cov = lin.cov
    tq = stats.t_quantile(lin.dof)
    G, h, _ = coords.linear_forms()
    values_lin = G @ x + h
    cov_lin = G @ cov @ G.T if cov is not None else None
    params = []
    for i, e in enumerate(coords.estimands):
        at_bound = bool(min(x[i] - bounds[i][0], bounds[i][1] - x[i]) <= 1e-6 * max(1.0, abs(x[i])))
        if at_bound:
            warnings.append(f"{e.path} ended at its bound: the data do not hold it inside the range given")
        v = values_lin[i]
        se_lin = math.sqrt(max(cov_lin[i, i], 0.0)) if cov_lin is not None else None
        value = coords.to_user(i, v, x)
        if se_lin is None:
            se = low = high = None
        else:
            low, high = coords.to_user(i, v - tq * se_lin, x), coords.to_user(i, v + tq * se_lin, x)
            se = abs(value) * se_lin if coords.logarithmic(i) else se_lin
        params.append(FitParameter(e.path, value, coords.unit(i, x), se, low, high, at_bound))
    if not_identified:
        warnings.append("not determined by the data: " + "; ".join(not_identified))
    if poorly:
        warnings.append("poorly determined by the data (the variance along these combinations is over a "
                        "million times the best determined one): " + "; ".join(poorly))
    per_exp, k = [], 0
    for e in coords.study.experiments:
        n = len(samples(coords.study, e))
        per_exp.append({"id": e.id, "vessel": e.vessel, "T": e.T, "programme": bool(e.programme), "samples": n,
                        "ssr": float(res[k:k + n] @ res[k:k + n])})
        k += n
    lof = stats.lack_of_fit(lin.ssr, lin.dof, known)
    if lof.get("test") and not lof["passed"]:
        warnings.append(f"lack of fit: the weighted SSR {lin.ssr:.4g} is improbable for {lin.dof} degrees of "
                        f"freedom (P = {lof['p_value']:.2g}): the network or the stated measurement error is wrong")
    summary = _residual_summary(coords.study, res)
    worst = max((abs(v) for v in res / math.sqrt(lin.s2)), default=0.0)
    if worst > 4.0:
        warnings.append(f"a residual of {worst:.1f} standard deviations: check that sample (an outlier or a "
                        "mistyped value)")
    status = st.OPTIMAL if check.get("passed") and not not_identified else st.UNVERIFIED
    message = "" if status == st.OPTIMAL else "NOT VERIFIED: " + "; ".join(
        (["the re-simulation differs by %.2e" % check.get("max_rel_difference", float("nan"))]
         if not check.get("passed") else []) + (["parameters not identifiable"] if not_identified else []))
    sigma = math.sqrt(lin.ssr / lin.dof) if not known else None      # mol/L: residuals are in units of 1 mol/L
    out = FitResult(status, study.name, params, lin.ssr, lin.n, lin.dof, sigma, lin.ssr if known else None,
                    stats.correlation(cov), [float(v) for v in lin.singular], not_identified, coords.T_c, check,
                    per_exp, coords.values_si(x), [], timing, message, warnings)
    out.poorly_determined = poorly
    out.lack_of_fit = lof
    out.residual_summary = summary
    out.information = stats.information_criteria(lin.ssr, lin.n, lin.p, known)
    if weak or poor:
        out.suggestions = _suggestions(coords, x, lin, [w for _, w in weak + poor])
    out.kinetics = _kinetics(study, coords, x, cov, out.status)
    return out


def _residual_summary(study: Study, res: np.ndarray) -> list[dict]:
    by: dict[str, list[float]] = {}
    k = 0
    for e in study.experiments:
        for j, _, _, _ in samples(study, e):
            by.setdefault(study.symbols[j], []).append(float(res[k]))
            k += 1
    return [{"species": s, "samples": len(v), "rms": float(np.sqrt(np.mean(np.square(v)))), "mean": float(np.mean(v))}
            for s, v in by.items()]


def _kinetics(study: Study, coords: Coordinates, x, cov, status: str) -> dict:
    """What `--kinetics` reads: the fitted values in SI by path, the estimates and covariance in coordinates, the
    linear forms from coordinates to each path, and the network the fit belongs to."""
    G, h, tr = coords.linear_forms()
    return {"fitted_study": study.name, "status": status, "values": coords.values_si(x),
            "x": [float(v) for v in x], "cov": cov.tolist() if cov is not None else [], "G": G.tolist(),
            "h": h.tolist(), "transforms": list(tr), "T_centre": coords.T_c,
            "T_range": [min(_run_temperatures(study)), max(_run_temperatures(study))],
            "network": {r.id: r.equation for r in study.reactions}}


def _run_temperatures(study: Study) -> list[float]:
    return [T for e in study.experiments for T in ([p[1] for p in e.programme] or [e.T])]


# ---------------------------------------------------------------------------------------------- design advice


def _suggestions(coords: Coordinates, x, lin: stats.Linearized, weak: list[dict]) -> list[str]:
    """For each weak combination, the candidate run that would see it best: measuring a species not measured in an
    existing run, an existing run 20 K colder than the coldest or hotter than the hottest, or an existing batch
    run sampled three times as long. Scored by the change of the weighted predictions along the combination (a
    central difference), against that of the present data."""
    study = coords.study
    sd_common = math.sqrt(lin.s2) * 1000.0 if not study.fit.error else None     # mol/m^3 per unit weight
    sd_of = {s: (a + r * 1000.0) or 1000.0 for s, (a, r) in dict(study.fit.error).items()}
    T_low = min(e.T for e in study.experiments) - T_STEP_DESIGN
    T_high = max(e.T for e in study.experiments) + T_STEP_DESIGN
    out = []
    for combo in weak:
        v = np.zeros(len(x))
        for name, w in combo.items():
            v[coords.paths.index(name)] = w
        v = v / np.linalg.norm(v)
        h = 1e-3

        def along(run: Experiment) -> np.ndarray:
            return (simulate_experiment(study, coords.par(x + h * v), run, rtol=1e-10)
                    - simulate_experiment(study, coords.par(x - h * v), run, rtol=1e-10)) / (2 * h)

        present = float(np.linalg.norm((residuals(study, coords.par(x + h * v), 1e-10)
                                        - residuals(study, coords.par(x - h * v), 1e-10)) / (2 * h)))
        candidates: list[tuple[float, str]] = []
        for e in study.experiments:
            measured = [s for s, _ in e.series]
            variants = []
            if not e.programme and e.vessel != "stirred":
                variants += [(f"run {e.id} repeated at {T_low:.0f} K", replace(e, T=T_low)),
                             (f"run {e.id} repeated at {T_high:.0f} K", replace(e, T=T_high))]
            if e.vessel != "stirred":
                variants.append((f"run {e.id} sampled to {3 * e.times[-1] / 60:.3g} min",
                                 replace(e, times=tuple(np.linspace(e.times[-1] / 12, 3 * e.times[-1], 12)))))
            try:
                dc = along(e)
            except SimulationFailed:
                continue
            kept = np.asarray(e.times) > 0
            for j, s in enumerate(study.symbols):
                if s not in measured:
                    w = sd_common or min(sd_of.values())
                    candidates.append((float(np.linalg.norm(dc[j][kept]) / w), f"measuring {s} in run {e.id}"))
            for label, run in variants:
                try:
                    dv = along(run)
                except SimulationFailed:
                    continue
                kept = np.asarray(run.times) > 0
                score = math.sqrt(sum((np.linalg.norm(dv[study.symbols.index(s)][kept])
                                       / (sd_common or sd_of.get(s, 1000.0))) ** 2 for s in measured))
                candidates.append((score, f"{label}, measuring {', '.join(measured)}"))
        if not candidates:
            continue
        score, label = max(candidates)
        gain = score / present if present > 0 else math.inf
        out.append(f"{' and '.join(combo)}: {label} would see this combination "
                   + (f"{gain:.3g} times as strongly as the present data" if math.isfinite(gain) else
                      "where the present data do not see it at all"))
    return out


# ------------------------------------------------------------------------------------------------ fitted curves


def _curves(coords: Coordinates, x, out: FitResult, problem: _Problem, sens: dict | None) -> list[dict]:
    """For the report: each run's data, fitted values and fitted curves (s, mol/L), with the 95 % confidence band of
    the fitted curve from the linearized covariance (delta method: var = s^T Cov s with the NLP's sensitivities s).
    Batch and plug-flow curves are the collocation solution at its points (verified against scipy to the check
    tolerance); a stirred tank's curve is simulated over residence time, its band exact at the runs' rows and
    interpolated between them."""
    from tubeyield.modeling import pyo
    study = coords.study
    cov = np.array(out.kinetics["cov"]) if out.kinetics.get("cov") else None
    tq = stats.t_quantile(out.dof)
    par = coords.par(x)
    curves = []
    for k, e in enumerate(study.experiments):
        measured = [s for s, _ in e.series]
        idx = study.symbols.index
        b = problem.m.E[k]
        at = simulate_experiment(study, par, e)
        if e.vessel == "stirred":
            order = np.argsort(e.times)
            grid = np.linspace(0.5 * min(e.times), 1.2 * max(e.times), 30)
            c = simulate_experiment(study, par, replace(e, times=tuple(grid)), rtol=1e-8)
            points = [i for i in order]
            row_t = np.array(e.times)[order]
        else:
            taus = sorted({z for _, z in b.u.index_set()})
            grid = np.array(taus) * float(e.times[-1])
            c = np.array([[1000.0 * pyo.value(b.u[j, z]) for z in taus] for j in range(len(study.symbols))])
            points = taus
        band = {}
        if cov is not None and sens is not None:
            for s in measured:
                j = idx(s)
                rows = [sens.get(id(b.u[j, z])) for z in points]
                var = np.array([float(r @ cov @ r) if r is not None else 0.0 for r in rows])
                half = tq * np.sqrt(np.maximum(var, 0.0)) / 1000.0
                band[s] = (np.interp(grid, row_t, half) if e.vessel == "stirred" else half).tolist()
        curves.append({
            "id": e.id, "vessel": e.vessel, "T": e.T, "t": grid.tolist(),
            "model": {s: (c[idx(s)] / 1000.0).tolist() for s in measured}, "band": band,
            "data": {s: {"t": [t for t, v in zip(e.times, vals) if t > 0 and not math.isnan(v)],
                         "c": [v / 1000.0 for t, v in zip(e.times, vals) if t > 0 and not math.isnan(v)],
                         "fit": [m / 1000.0 for t, m, v in zip(e.times, at[idx(s)], vals)
                                 if t > 0 and not math.isnan(v)]}
                     for s, vals in e.series}})
    return curves


# ------------------------------------------------------------------------------------------ profile likelihood


def _profile_intervals(coords: Coordinates, problem: _Problem, solver, out: FitResult) -> None:
    """95 % profile-likelihood intervals: for each reported parameter, the values where the SSR, minimized over the
    other parameters, reaches stats.profile_level (Bates and Watts 1988, ch. 6; Venzon and Moolgavkar, Appl.
    Statist. 37 (1988) 87, for the profile idea). The parameter's linear form g . x (ln k at the reaction's own
    T_ref, an energy, an order) is held by the NLP's own hold constraint (_build), so each point re-solves the one
    built solver from the last point. Each end is then checked by the scipy re-simulation at the re-fitted
    parameters there (the largest SSR difference is reported). The end is found by the secant method on the signed root of SSR - SSR_min
    (nearly linear in the parameter: the profile t function), from the linearized end. Sets profile_low /
    profile_high (None where the SSR stays below the level up to a bound) and warns where they differ from the
    linearized interval by more than 20 % of its half-width."""
    from tubeyield.modeling import pyo

    from tubeyield.solve import OK_CONDITIONS
    m = problem.m
    known = out.chi_square is not None
    ssr_min = float(pyo.value(m.ssr))
    level = stats.profile_level(ssr_min, out.dof, known)
    depth = math.sqrt(level - ssr_min)
    P = len(coords.estimands)
    x_opt = [pyo.value(m.x[i]) for i in range(P)]
    snapshot = [(v, v.value) for v in m.component_data_objects(pyo.Var, descend_into=True)]
    G, h, _ = coords.linear_forms()
    cov_lin = None
    if out.kinetics.get("cov"):
        cov_lin = G @ np.array(out.kinetics["cov"]) @ G.T
    differences: list[float] = []
    for i, p in enumerate(out.parameters):
        g = G[i]
        value0 = float(g @ np.array(x_opt))

        def gap(v):
            """sqrt(SSR(v) - SSR_min) - depth, or None when the re-solve fails."""
            _hold(m, g, v)
            # from the last point, cold (without Ipopt's warm-start options, whose solver would be a second build of
            # this NLP): with no bounds on the states the last solution is interior, and 3-6 iterations suffice
            res = solver.solve(m, reuse_structure=True)
            if res.solver.termination_condition not in OK_CONDITIONS:
                return None
            last[:] = [float(pyo.value(m.ssr)), [pyo.value(m.x[q]) for q in range(P)]]
            return math.sqrt(max(last[0] - ssr_min, 0.0)) - depth

        half = math.sqrt(cov_lin[i, i]) * stats.t_quantile(out.dof) if cov_lin is not None else 0.1 * max(
            1.0, abs(value0))
        ends = []
        for side in (-1.0, 1.0):
            for var, val in snapshot:
                if not (var.lb is not None and var.lb == var.ub):
                    var.set_value(val, skip_validation=True)
            last: list = []
            ends.append(_profile_end(gap, value0, side, half, depth))
            if ends[-1] is not None and last:
                # the end's re-fitted parameters, re-simulated: does the SSR there hold without the mesh?
                try:
                    sim = residuals(coords.study, coords.par(np.array(last[1])))
                    differences.append(abs(float(sim @ sim) - last[0]))
                except SimulationFailed:
                    differences.append(math.inf)
        low, high = (coords.to_user(i, e + h[i], np.array(x_opt)) if e is not None else None for e in ends)
        p.profile_low, p.profile_high = low, high
        if p.low is not None and low is not None and high is not None:
            lin_half = 0.5 * (p.high - p.low)
            if max(abs(low - p.low), abs(high - p.high)) > 0.2 * lin_half:
                out.warnings.append(f"{p.path}: the profile-likelihood interval ({low:.4g} to {high:.4g}) differs "
                                    f"from the linearized one ({p.low:.4g} to {p.high:.4g}): the model is far "
                                    "from linear in this parameter; trust the profile interval")
        elif low is None or high is None:
            out.warnings.append(f"{p.path}: the profile-likelihood interval could not be closed on one side (the SSR "
                                "stays below the 95 % level up to the parameter's bound, or a re-solve failed)")
    _hold(m, None, 0.0)
    for var, val in snapshot:
        if not (var.lb is not None and var.lb == var.ub):
            var.set_value(val, skip_validation=True)
    if differences:
        worst = max(differences)
        out.profile_check = {"ends": len(differences), "max_ssr_difference": worst, "level_rise": level - ssr_min,
                             "share": worst / (level - ssr_min), "elements_per_interval": problem.describe(),
                             "passed": worst <= PROFILE_CHECK * (level - ssr_min)}
        if not out.profile_check["passed"]:
            out.warnings.append(f"the profile-likelihood ends, re-simulated, differ in SSR by {worst:.3g}, "
                                f"{100 * worst / (level - ssr_min):.2g} % of the rise that defines them: the profile "
                                "intervals are approximate")


def _profile_problem(coords: Coordinates, coarse: _Problem, final: _Problem, out: FitResult) -> _Problem:
    """The NLP the profiles re-solve: the multistart's coarser one (cheaper) when its SSR at its optimum agrees with
    the re-simulation there to PROFILE_CHECK of the rise that defines the interval ends, else the verified one."""
    from tubeyield.modeling import pyo
    if coarse is final:
        return final
    x = np.array([pyo.value(coarse.m.x[i]) for i in range(len(coords.estimands))])
    try:
        sim = residuals(coords.study, coords.par(x))
    except SimulationFailed:
        return final
    rise = stats.profile_level(out.ssr, out.dof, out.chi_square is not None) - out.ssr
    return coarse if abs(float(sim @ sim) - float(pyo.value(coarse.m.ssr))) <= PROFILE_CHECK * rise else final


def _profile_end(gap, value0: float, side: float, half: float, depth: float) -> float | None:
    """Where gap(v) = 0 on one side of value0: secant steps on the profile t function, bracketed once found
    (Illinois variant of regula falsi), within PROFILE_SOLVES re-solves; None when it cannot be closed."""
    a, ga = 0.0, -depth                         # offsets from value0 along `side`
    b = half if half > 0 else 1.0
    gb = gap(value0 + side * b)
    solves = 1
    while gb is not None and gb < 0 and solves < PROFILE_SOLVES:
        # not yet beyond the level: extrapolate (the profile t is nearly linear), at least 1.5x, at most 4x
        step = (b - a) * (-gb) / (gb - ga) if gb != ga else b
        a, ga = b, gb
        b = b + min(max(step, 0.5 * b), 3.0 * b)
        gb = gap(value0 + side * b)
        solves += 1
    if gb is None or gb < 0:
        return None
    side_a = 0
    while solves < PROFILE_SOLVES and abs(gb - ga) > 0 and abs(b - a) > 1e-4 * half:
        c = b - gb * (b - a) / (gb - ga)
        gc = gap(value0 + side * c)
        solves += 1
        if gc is None:
            break
        if abs(gc) <= 1e-4 * depth:
            return value0 + side * c
        if gc > 0:
            b, gb = c, gc
            if side_a == 1:
                ga *= 0.5
            side_a = 1
        else:
            a, ga = c, gc
            if side_a == -1:
                gb *= 0.5
            side_a = -1
    c = b - gb * (b - a) / (gb - ga) if gb != ga else b
    return value0 + side * c


# ------------------------------------------------------------------------------------------------------ rivals


def rival_study(study: Study, rival) -> Study:
    """The study with a rival network in place of its own: the experiments and [fit] settings kept; the estimated
    paths of reactions the rival has, and k (with Ea when the study estimates any Ea) of reactions only it has."""
    ids = {r.id for r in rival.reactions}
    own = {r.id for r in study.reactions}
    keep = [p for p in study.fit.estimate if p.split(".")[1] in ids]
    with_ea = any(p.endswith(".Ea") for p in study.fit.estimate)
    for r in rival.reactions:
        if r.id not in own:
            keep.append(f"reaction.{r.id}.k")
            if with_ea:
                keep.append(f"reaction.{r.id}.Ea")
    bounds = tuple((p, b) for p, b in study.fit.bounds if p in keep)
    spec = replace(study.fit, estimate=tuple(keep), bounds=bounds, rivals=())
    return replace(study, name=f"{study.name} with {rival.ref}", species=rival.species, reactions=rival.reactions,
                   fit=spec, kinetics=None)


def _rivals(study: Study, main: FitResult, solver) -> list[dict]:
    """Each rival network fitted to the same data, and the comparison: SSR, parameters, AICc, BIC, Akaike weights,
    and for nested pairs (one network's reactions and estimated paths a subset of the other's) the likelihood-ratio
    (or extra-sum-of-squares F) test."""
    known = bool(study.fit.error)
    rows = [{"network": "this study", "status": main.status, "ssr": main.ssr, "p": len(main.parameters),
             "n": main.n_data, **main.information, "reactions": [r.id for r in study.reactions],
             "paths": list(study.fit.estimate)}]
    for rival in study.fit.rivals:
        rs = rival_study(study, rival)
        timing: dict = {}
        row = {"network": rival.ref, "reactions": [r.id for r in rival.reactions], "paths": list(rs.fit.estimate)}
        core = _fit_core(rs, solver, False, timing) if rs.fit.estimate else None
        if core is None or isinstance(core, FitResult):
            row.update(status=st.FAILED, ssr=None, p=len(rs.fit.estimate), n=main.n_data,
                       message=core.message if isinstance(core, FitResult) else "nothing to estimate")
            rows.append(row)
            continue
        coords, _, x, _, check, _ = core
        res = residuals(coords.study, coords.par(x))
        ssr = float(res @ res)
        row.update(status=st.OPTIMAL if check.get("passed") else st.UNVERIFIED, ssr=ssr, p=len(x), n=res.size,
                   values=coords.values_si(x), **stats.information_criteria(ssr, res.size, len(x), known))
        rows.append(row)
    ok = [r for r in rows if r.get("ssr") is not None]
    for r, w in zip(ok, stats.akaike_weights([r["aicc"] for r in ok])):
        r["weight"] = w
    base = rows[0]
    for r in rows[1:]:
        if r.get("ssr") is None:
            continue
        small, big = (r, base) if r["p"] < base["p"] else (base, r)
        nested = set(small["reactions"]) <= set(big["reactions"]) and set(small["paths"]) <= set(big["paths"]) \
            and small["p"] < big["p"]
        r["nested"] = nested
        if nested:
            r["test"] = stats.nested_test(small["ssr"], small["p"], big["ssr"], big["p"], base["n"], known)
            r["test"]["bigger"] = big["network"]
    return rows


def _failed(study, coords, message, timing) -> FitResult:
    return FitResult(st.FAILED, study.name, [], None, 0, 0, None, None, [], [], [], coords.T_c, {}, [], {}, [],
                     timing, message)

