"""Sweep scenarios: variations (parsed in study/variation.py) applied to a Study, and the scenario list.

(The paths are listed in study/variation.py.)
"""

from __future__ import annotations

import dataclasses
import hashlib
import itertools
import json
import math
from dataclasses import dataclass, replace

import numpy as np

from tubeyield.errors import StudyError
from tubeyield.study.schema import Study, Variation


def apply_values(study: Study, values: dict[str, float]) -> Study:
    """The study with each path set to its SI value. Paths were validated when the sweep was read."""
    for path, v in values.items():
        study = _apply(study, path, float(v))
    return study


def _apply(study: Study, path: str, v: float) -> Study:
    parts = path.split(".")
    if parts[0] == "reaction":
        rid, attr = parts[1], ".".join(parts[2:])
        if attr in ("k", "k_factor") and v <= 0:
            raise StudyError(path, f"a positive value; sampled {v:g}")
        rs = []
        for r in study.reactions:
            if rid in ("*", r.id):
                if attr == "k":
                    r = replace(r, k=replace(r.k, ln_k_ref=math.log(v)))
                elif attr == "k_factor":
                    r = replace(r, k=replace(r.k, ln_k_ref=r.k.ln_k_ref + math.log(v)))
                elif attr == "Ea":
                    r = replace(r, k=replace(r.k, Ea=v))
                elif attr == "dH":
                    r = replace(r, dH=v)
                else:                                   # a constant of the rate law (study/laws.py)
                    try:
                        r = replace(r, law=r.law.with_path(attr, v))
                    except StudyError as exc:
                        raise StudyError(path, exc.expected) from None
            rs.append(r)
        return replace(study, reactions=tuple(rs))
    if parts[0] == "feed":
        if parts[1] == "conc":
            conc = dict(study.feed.conc)
            conc[parts[2]] = v
            return replace(study, feed=replace(study.feed, conc=tuple(conc.items())))
        return replace(study, feed=replace(study.feed, **{parts[1]: v}))
    if parts[0] == "operate":
        return study.with_decisions({".".join(parts[1:]): v})
    if parts[0] == "species":
        sp = tuple(replace(s, Cp=v) if s.symbol == parts[1] else s for s in study.species)
        return replace(study, species=sp)
    if path == "reactor.U":
        return replace(study, reactor=replace(study.reactor, U=v))
    raise KeyError(path)


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


def scenarios(study: Study) -> list[Scenario]:
    """The sweep's scenarios: the cartesian product of the grid values, times the Latin-hypercube samples of the
    distributions (McKay, Beckman and Conover, Technometrics 21 (1979) 239; scipy.stats.qmc, seeded)."""
    from scipy.stats import qmc
    spec = study.sweep
    grid = [v for v in spec.vary if v.distribution is None]
    dist = [v for v in spec.vary if v.distribution is not None]
    grid_points = list(itertools.product(*[[(v.path, x) for x in v.values] for v in grid])) if grid else [()]
    if dist:
        u = qmc.LatinHypercube(d=len(dist), seed=spec.seed).random(spec.samples)
        columns = [_sample(v, u[:, k]) for k, v in enumerate(dist)]
        samples = [tuple((v.path, float(col[i])) for v, col in zip(dist, columns)) for i in range(spec.samples)]
    else:
        samples = [()]
    fp = study_fingerprint(study)
    out = []
    for i, (g, smp) in enumerate(itertools.product(grid_points, samples)):
        values = tuple(g) + tuple(smp)
        key = json.dumps({"study": fp, "run": spec.run, "values": [(p, repr(float(x))) for p, x in values]})
        out.append(Scenario(hashlib.sha256(key.encode()).hexdigest()[:20], i, values))
    return out
