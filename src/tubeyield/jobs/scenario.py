"""Sweep scenarios: variations (parsed in study/variation.py) applied to a Study, and the scenario list.

(The paths are listed in study/variation.py.)
"""

from __future__ import annotations

import dataclasses
import hashlib
import itertools
import json
from dataclasses import dataclass

import numpy as np

from tubeyield.study.schema import FittedKinetics, Study, Variation


# ------------------------------------------------------------------------------------------------------ scenarios


@dataclass(frozen=True)
class Scenario:
    id: str              # hash of the study and the scenario's values: the same inputs always get the same id
    index: int           # position in the sweep (for ordering only)
    values: tuple        # ((path, SI value), ...)

    def as_dict(self) -> dict:
        return dict(self.values)


def study_fingerprint(study: Study) -> str:
    """A hash of everything that defines the numbers (not file names, comments or the sweep spec)."""
    core = dataclasses.replace(study, sweep=None, path="", source="", includes=(), front=None, window=None,
                               numerics=dataclasses.replace(study.numerics, time_limit=3600.0))
    return hashlib.sha256(repr(core).encode()).hexdigest()[:16]


def _sample(v: Variation, u: np.ndarray) -> np.ndarray:
    """Map uniform [0, 1) samples through the inverse distribution function of `v`."""
    from scipy import stats
    p = v.parameters
    if v.distribution == "normal":
        return stats.norm.ppf(u, loc=p[0], scale=p[1])
    if v.distribution == "lognormal":
        return p[0] * np.exp(p[1] * stats.norm.ppf(u))
    if v.distribution == "uniform":
        return p[0] + u * (p[1] - p[0])
    low, mode, high = p
    return stats.triang.ppf(u, c=(mode - low) / (high - low), loc=low, scale=high - low)


def fit_draws(kinetics: FittedKinetics, u: np.ndarray) -> list[dict]:
    """Joint draws of the fitted parameters from uniform [0, 1) samples u (n x p): x = x_hat + L z with z standard
    normal (the inverse normal of u) and L L^T the fit's covariance in the estimation coordinates (a multivariate
    normal, correlations kept; an eigen-factor where Cholesky fails on a numerically semi-definite matrix), then
    each path's SI value through the fit's linear forms (FittedKinetics.values_at)."""
    from scipy import stats
    cov = np.asarray(kinetics.cov, dtype=float)
    try:
        L = np.linalg.cholesky(cov)
    except np.linalg.LinAlgError:
        w, V = np.linalg.eigh(cov)
        L = V * np.sqrt(np.clip(w, 0.0, None))
    z = stats.norm.ppf(u)
    x_hat = np.asarray(kinetics.x, dtype=float)
    # forward orders are structural in the reactor models (a built model is re-solved per scenario): they stay at
    # their estimates, and only the constants are drawn
    return [{p: v for p, v in kinetics.values_at(x_hat + L @ row).items() if ".order." not in p} for row in z]


def scenarios(study: Study) -> list[Scenario]:
    """The sweep's scenarios: the cartesian product of the grid values, times the Latin-hypercube samples of the
    distributions and, with fit_uncertainty, of the fitted parameters drawn jointly from the fit (McKay, Beckman and
    Conover, Technometrics 21 (1979) 239; scipy.stats.qmc, seeded)."""
    from scipy.stats import qmc
    spec = study.sweep
    grid = [v for v in spec.vary if v.distribution is None]
    dist = [v for v in spec.vary if v.distribution is not None]
    grid_points = list(itertools.product(*[[(v.path, x) for x in v.values] for v in grid])) if grid else [()]
    p_fit = len(study.kinetics.x) if spec.fit_uncertainty and study.kinetics is not None else 0
    if dist or p_fit:
        u = qmc.LatinHypercube(d=len(dist) + p_fit, seed=spec.seed).random(spec.samples)
        columns = [_sample(v, u[:, k]) for k, v in enumerate(dist)]
        drawn = fit_draws(study.kinetics, u[:, len(dist):]) if p_fit else [{}] * spec.samples
        samples = [tuple((v.path, float(col[i])) for v, col in zip(dist, columns)) + tuple(drawn[i].items())
                   for i in range(spec.samples)]
    else:
        samples = [()]
    fp = study_fingerprint(study)
    out = []
    for i, (g, smp) in enumerate(itertools.product(grid_points, samples)):
        values = tuple(g) + tuple(smp)
        key = json.dumps({"study": fp, "run": spec.run, "values": [(p, repr(float(x))) for p, x in values]})
        out.append(Scenario(hashlib.sha256(key.encode()).hexdigest()[:20], i, values))
    return out
