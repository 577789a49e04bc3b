"""Starting points for the local NLP solver: a space-filling design over the free decisions, screened by the
reference simulation.

A Latin hypercube (McKay, Beckman and Conover, Technometrics 21 (1979) 239-245) spreads candidate
operating points over the decision box. Each is simulated (cheap, at a loose tolerance) and ranked: points that meet
every limit first, by goal; then the others by how far they miss. The best few seed Ipopt, each initialized from its
own simulation, so every local solve starts near a consistent profile.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tubeyield.errors import SimulationFailed
from tubeyield.reactor.simulate import Simulation, simulate
from tubeyield.study.schema import Study

SCREEN_RTOL = 1e-7


@dataclass
class Candidate:
    decisions: dict
    simulation: Simulation | None
    goal: float
    violation: float          # sum of limit violations, each relative to its bound scale
    label: str = "screened design"   # where the start comes from

    def rank_key(self, sense: str):
        feasible = self.violation <= 1e-9
        return (0 if feasible else 1, self.violation if not feasible else 0.0, -self.goal if sense == "max" else self.goal)


def latin_hypercube(n: int, d: int, seed: int) -> np.ndarray:
    """n points in [0, 1)^d, one in each of the n equal slices of every axis, placed at random within its slice
    (McKay, Beckman and Conover 1979, the basic design). Written with numpy rather than taken from scipy.stats.qmc:
    importing scipy.stats costs about 0.3 s, paid on every optimization from the command line for these few lines."""
    rng = np.random.default_rng(seed)
    slices = np.argsort(rng.random((d, n)), axis=1).T        # a random permutation of 0..n-1 per axis
    return (slices + rng.random((n, d))) / n


def design(study: Study, n: int, seed: int = 0) -> list[dict]:
    """n operating points: a Latin hypercube over the free decisions (fixed decisions keep their value); residence
    time and positive ratios are spread on a log scale, which suits rate processes spanning decades."""
    free = [d for d in study.decisions if not d.fixed]
    fixed = {d.name: d.low for d in study.decisions if d.fixed}
    if not free:
        return [dict(fixed)]
    sample = latin_hypercube(n, len(free), seed)
    points = []
    for row in sample:
        p = dict(fixed)
        for d, x in zip(free, row):
            if d.name == "tau" and d.low > 0:
                p[d.name] = float(np.exp(np.log(d.low) + x * (np.log(d.high) - np.log(d.low))))
            else:
                p[d.name] = float(d.low + x * (d.high - d.low))
        points.append(p)
    return points


def limit_misses(study: Study, sim: Simulation) -> list[tuple[float, float, float]]:
    """For each limit of the study, in order: (its quantity on the simulation in SI, how far it misses its bound,
    negative when it holds with room, the scale a miss is measured against: 1 for fractions, the bound otherwise)."""
    out = []
    for lim in study.goal.limits:
        if lim.metric is None:
            value = sim.max_temperature() if lim.sense == "<=" else sim.min_temperature()
            scale = lim.bound
        else:
            value = sim.metric(lim.metric)
            scale = 1.0 if lim.metric.kind in ("conversion", "yield", "selectivity") else max(abs(lim.bound), 1e-300)
        out.append((value, (value - lim.bound) if lim.sense == "<=" else (lim.bound - value), scale))
    return out


def violation(study: Study, sim: Simulation) -> float:
    """The sum of the limits' misses, each relative to its scale (0 when every limit holds)."""
    return sum(max(0.0, miss) / scale for _, miss, scale in limit_misses(study, sim))


def screen(study: Study, points: list[dict]) -> list[Candidate]:
    """Simulate each point; a point whose simulation fails is kept with an infinite violation."""
    out = []
    for p in points:
        try:
            sim = simulate(study, p, rtol=SCREEN_RTOL)
            goal = sim.metric(study.goal.metric)
            v = violation(study, sim)
            if not np.isfinite(goal):
                raise SimulationFailed("goal is not finite")
        except (SimulationFailed, ArithmeticError):  # a point where the model cannot be evaluated: a bad start
            sim, goal, v = None, -np.inf if study.goal.sense == "max" else np.inf, np.inf
        out.append(Candidate(p, sim, goal, v))
    out.sort(key=lambda c: c.rank_key(study.goal.sense))
    return out


def rerank(study: Study, screened: list[Candidate]) -> list[Candidate]:
    """The same simulated points ranked for another goal or other limits (no new simulations)."""
    out = []
    for c in screened:
        if c.simulation is None:
            continue
        out.append(Candidate(c.decisions, c.simulation, c.simulation.metric(study.goal.metric),
                             violation(study, c.simulation)))
    out.sort(key=lambda c: c.rank_key(study.goal.sense))
    return out


def starts(study: Study, n_starts: int, seed: int = 0, oversample: int = 8, rounds: int = 2,
           screened: list[Candidate] | None = None) -> list[Candidate]:
    """The `n_starts` best of a screened design of max(16, oversample x n_starts, 4 per decision) points.

    When no screened point meets every limit (a narrow window), up to `rounds` more designs of twice the size are
    screened first: simulations cost milliseconds, while starting from a point outside the limits costs a
    minimum-violation solve of its own."""
    n_free = sum(1 for d in study.decisions if not d.fixed)
    n = max(16, oversample * n_starts, 4 * n_free)
    if screened is not None:
        ranked = rerank(study, screened)
        if ranked and (ranked[0].violation <= 0 or not study.goal.limits):
            return ranked[:n_starts]
    else:
        ranked = screen(study, design(study, n, seed))
    for k in range(rounds):
        if not study.goal.limits or (ranked and ranked[0].violation <= 0) or n_free == 0:
            break
        n *= 2
        ranked = sorted(ranked + screen(study, design(study, n, seed + 1 + k)),
                        key=lambda c: c.rank_key(study.goal.sense))
    usable = [c for c in ranked if c.simulation is not None]
    return usable[:n_starts]
