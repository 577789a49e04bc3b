"""Starting points for the local NLP solver: a space-filling design over the free decisions, screened by the
reference simulation.

A Latin hypercube (McKay, Beckman and Conover, Technometrics 21 (1979) 239-245) spreads candidate
operating points over the decision box. Each is simulated (cheap, at a loose tolerance) and ranked: points that meet
every limit first, by goal; then the others by how far they miss. The best few seed Ipopt, each initialized from its
own simulation, so every local solve starts near a consistent profile. On several cores the design's points are
simulated in forked copies of the process (solve/forked.py), which hand back each point's goal and limit misses; the
few points that seed Ipopt are then simulated again here, where their profiles are needed (a simulation holds
functions and cannot be handed between processes), to the same numbers.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

import numpy as np

from tubeyield.errors import SimulationFailed
from tubeyield.reactor.simulate import Simulation, simulate
from tubeyield.solve import forked
from tubeyield.study.schema import Study

SCREEN_RTOL = 1e-7


@dataclass
class Candidate:
    decisions: dict
    simulation: Simulation | None
    goal: float
    violation: float          # sum of limit violations, each relative to its bound scale
    label: str = "screened design"   # where the start comes from
    elsewhere: bool = False   # simulated in a forked copy: `simulation` is made here when the point is used

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


def screened_point(study: Study, p: dict) -> Candidate:
    """Point p simulated and scored; a point whose simulation fails gets an infinite violation and no simulation."""
    try:
        sim = simulate(study, p, rtol=SCREEN_RTOL)
        goal = sim.metric(study.goal.metric)
        v = violation(study, sim)
        if not np.isfinite(goal):
            raise SimulationFailed("goal is not finite")
    except (SimulationFailed, ArithmeticError):  # a point where the model cannot be evaluated: a bad start
        sim, goal, v = None, -np.inf if study.goal.sense == "max" else np.inf, np.inf
    return Candidate(p, sim, goal, v)


def screen(study: Study, points: list[dict], workers: int = 1) -> list[Candidate]:
    """Simulate each point and rank them (a point whose simulation fails is kept with an infinite violation). With
    `workers` > 1 the points are simulated on that many cores, and the candidates that come back from a forked copy
    carry their scores only (`elsewhere`; `simulated_here` makes their simulation)."""
    if workers > 1 and len(points) > 1 and forked.can_fork():
        # (where no copy can be made, the points are simulated here with their simulations kept: scores alone would
        # only mean simulating the starts twice)
        def scored(i):
            c = screened_point(study, points[i])
            return c.goal, c.violation, c.simulation is not None
        out = [Candidate(p, None, goal, v, elsewhere=ok)
               for p, (goal, v, ok) in zip(points, forked.forked_map(scored, len(points), workers))]
    else:
        out = [screened_point(study, p) for p in points]
    out.sort(key=lambda c: c.rank_key(study.goal.sense))
    return out


def simulated_here(study: Study, c: Candidate) -> Candidate:
    """`c` with its simulation, made in this process when it was screened in a forked copy: the same code on the same
    point gives the same numbers."""
    if not c.elsewhere:
        return c
    here = screened_point(study, c.decisions)
    return dataclasses.replace(c, simulation=here.simulation, elsewhere=False) if here.simulation is not None else \
        dataclasses.replace(c, elsewhere=False)


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
           screened: list[Candidate] | None = None, workers: int = 1) -> list[Candidate]:
    """The `n_starts` best of a screened design of max(16, oversample x n_starts, 4 per decision) points, simulated
    on `workers` cores.

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
        ranked = screen(study, design(study, n, seed), workers)
    for k in range(rounds):
        if not study.goal.limits or (ranked and ranked[0].violation <= 0) or n_free == 0:
            break
        n *= 2
        ranked = sorted(ranked + screen(study, design(study, n, seed + 1 + k), workers),
                        key=lambda c: c.rank_key(study.goal.sense))
    usable = []
    for c in ranked:
        if len(usable) == n_starts:
            break
        c = simulated_here(study, c)
        if c.simulation is not None:
            usable.append(c)
    return usable
