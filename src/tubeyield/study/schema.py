"""The study as typed, frozen dataclasses, in SI units (mol, m^3, s, K, J, Pa).

Built only by `study.load`; read by everything else. Nothing here knows about units or files.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass, field, replace

from tubeyield.study.kinetics import Arrhenius, concentration_product
from tubeyield.study.laws import PowerLaw, RateLaw
from tubeyield.study.metric import Limit, Metric
from tubeyield.study.modes import HEAT_MODES, REACTOR_KINDS, HeatMode, ReactorKind


@dataclass(frozen=True)
class Species:
    symbol: str
    label: str = ""
    formula: str | None = None
    molar_mass: float | None = None   # kg/mol
    Cp: float | None = None           # molar heat capacity, J/(mol K)


@dataclass(frozen=True)
class Reaction:
    id: str
    equation: str
    reactants: tuple[tuple[str, float], ...]
    products: tuple[tuple[str, float], ...]
    orders: tuple[tuple[str, float], ...]      # forward orders
    k: Arrhenius                               # forward rate constant k(T)
    law: RateLaw = PowerLaw()                  # the rate law (study/laws.py): its own keys and constants
    dH: float | None = None                    # heat of reaction at T_ref, J per mol of reaction as written
    k_unit: str = ""                           # the unit the study gave k (or A) in, for reports ('' = SI)

    @property
    def reversible(self) -> bool:
        return self.law.reversible

    @property
    def reverse_orders(self) -> tuple:
        return self.law.reverse_orders

    @property
    def k_power(self) -> float:
        """The concentration power p of k's unit, concentration^p / time (from the law and the forward orders)."""
        return self.law.k_power(sum(n for _, n in self.orders))

    def stoichiometry(self) -> dict[str, float]:
        """Net coefficients: negative for consumed, positive for formed."""
        net: dict[str, float] = {}
        for s, c in self.reactants:
            net[s] = net.get(s, 0.0) - c
        for s, c in self.products:
            net[s] = net.get(s, 0.0) + c
        return net

    def rate_expression(self, conc: dict, T, mx):
        """Rate of reaction (mol/(m^3 s)) from concentrations (mol/m^3) and T (K): the law's rate of k(T) and the
        forward concentration product. `mx` is a math namespace with `exp` (numpy or pyomo.environ): the same code
        serves the Pyomo model and the scipy reference simulation."""
        k = mx.exp(self.k.ln_value(T, mx))
        return self.law.rate(k, concentration_product(conc, self.orders), conc, T, mx, self.dH)

    def heat_of_reaction(self, T, heat_capacity_change: float):
        """dH(T) = dH(T_ref) + dCp (T - T_ref), with dCp = sum nu_i Cp_i constant (Kirchhoff's law)."""
        dH = 0.0 if self.dH is None else self.dH
        return dH + heat_capacity_change * (T - self.k.T_ref)


@dataclass(frozen=True)
class Feed:
    phase: str                                 # liquid | gas
    flow: float                                # volumetric flow at the inlet, m^3/s
    conc: tuple[tuple[str, float], ...] = ()   # liquid: inlet concentrations, mol/m^3
    pressure: float | None = None              # gas: Pa
    fractions: tuple[tuple[str, float], ...] = ()  # gas: inlet mole fractions (the balance species included)
    balance: str | None = None                 # gas: the species that makes the fractions sum to one
    T: float | None = None                     # feed temperature, K (gas: the temperature the flow is measured at)

    def inlet(self) -> dict[str, float]:
        """Liquid: concentrations in mol/m^3; gas: mole fractions."""
        return dict(self.conc if self.phase == "liquid" else self.fractions)


@dataclass(frozen=True)
class Reactor:
    kind: str = "plug"            # plug | stirred | stirred-series
    heat: str = "isothermal"      # isothermal | zones | free | adiabatic | cooled
    elements: int = 40            # finite elements along the tube
    points: int = 3               # Radau collocation points per element
    zones: int = 1                # heat = zones
    tanks: int = 1                # kind = stirred-series
    U: float | None = None        # wall heat-transfer coefficient, W/(m^2 K) (heat = cooled)
    diameter: float | None = None # tube diameter, m (heat = cooled: area per volume 4/d)
    grading: float = 1.0          # ratio of the last element's length to the first (1 = uniform mesh)

    @property
    def mode(self) -> HeatMode:
        """What the heat mode is (study/modes.py): its decisions and the balances it adds."""
        return HEAT_MODES[self.heat]

    @property
    def form(self) -> ReactorKind:
        """What the reactor kind is (study/modes.py): axial or tanks, and its model class."""
        return REACTOR_KINDS[self.kind]


@dataclass(frozen=True)
class Decision:
    """An operating decision: optimized between low and high, or fixed when low == high. SI values."""
    name: str                     # tau | T | T_in | T_cool | ratio.<species>
    low: float
    high: float
    unit: str                     # the user's unit, for reporting
    si_unit: str

    @property
    def fixed(self) -> bool:
        return self.low == self.high

    def with_value(self, value: float) -> "Decision":
        return replace(self, low=value, high=value)


@dataclass(frozen=True)
class Goal:
    metric: Metric
    sense: str                    # max | min
    key: str                      # key reactant
    limits: tuple[Limit, ...] = ()
    value: tuple[tuple[str, float], ...] = ()   # margin: value per mol at the outlet
    cost: tuple[tuple[str, float], ...] = ()    # margin: cost per mol fed
    currency: str = ""


@dataclass(frozen=True)
class FrontSpec:
    x: Metric
    y: Metric
    points: int = 21
    x_sense: str = "max"          # max | min: which way each metric is better
    y_sense: str = "max"


@dataclass(frozen=True)
class WindowSpec:
    x: str                        # decision names
    y: str
    points: tuple[int, int] = (60, 60)
    others: str = "optimum"       # optimum | optimized
    fix: tuple[tuple[str, float], ...] = ()


@dataclass(frozen=True)
class Variation:
    path: str                     # e.g. reaction.over.Ea
    values: tuple[float, ...] = ()           # grid values, SI
    distribution: str | None = None          # normal | lognormal | uniform | triangular
    parameters: tuple[float, ...] = ()       # SI
    unit: str = ""


@dataclass(frozen=True)
class SweepSpec:
    vary: tuple[Variation, ...]
    samples: int = 0
    seed: int = 0
    run: str = "optimize"         # optimize | front | evaluate
    time_limit: float = 300.0     # seconds per scenario
    share: float = 0.95           # robustness: share of samples in which every limit must hold
    candidates: tuple[tuple[str, tuple[tuple[str, float], ...]], ...] = ()   # named operating points (SI)
    fit_uncertainty: bool = False  # draw the fitted parameters jointly from the fit given with --kinetics


@dataclass(frozen=True)
class RobustSpec:
    """[robust]: one operating point for many scenarios of the uncertain parameters ([sweep]'s distributions and
    the fit's uncertainty): N training scenarios in one NLP, the share of them whose limits must hold (the rest
    discarded greedily), the goal over them (mean or worst), M fresh scenarios for validation, the confidence of
    the stated violation bound, and the seed of the draws."""
    scenarios: int = 50
    share: float = 1.0
    objective: str = "mean"       # mean | worst
    validation: int = 400
    confidence: float = 0.99
    seed: int = 11
    elements: int = 20            # collocation elements of each scenario's copy (at most the study's)


@dataclass(frozen=True)
class Numerics:
    starts: int = 4
    check_tolerance: float = 1e-6
    max_elements: int = 640
    solver: str = "bundled"       # bundled (casadi's Ipopt) | executable (an ipopt on PATH)
    ipopt: tuple[tuple[str, object], ...] = ()
    time_limit: float = 3600.0    # s: wall time of one command (each Ipopt solve, and the whole job)


@dataclass(frozen=True)
class SourceFile:
    """A file the study was read from: an include as the study names it (relative to the study's folder) and its
    text. The study's own text is `Study.source`."""
    ref: str
    text: str


@dataclass(frozen=True)
class Experiment:
    """One lab run: a batch (samples over time), a liquid plug-flow run (samples at residence times) or a liquid
    stirred tank (one steady state per residence time), from known start (or inlet) concentrations, with its
    measurements (SI; NaN where a species was not sampled). The temperature is constant, or a programme of
    (time, temperature) points followed piecewise linearly and held after the last (batch and plug flow)."""
    id: str
    vessel: str                                       # "batch", "plug" or "stirred"
    T: float                                          # K: the temperature, or the programme's reciprocal mean
    start: tuple[tuple[str, float], ...]              # species -> mol/m^3 at time zero / the inlet
    times: tuple[float, ...]                          # s, increasing (stirred: the residence time of each row)
    series: tuple[tuple[str, tuple[float, ...]], ...]  # species -> mol/m^3 at each time
    data: str = ""                                    # the measurement file as the study names it
    programme: tuple[tuple[float, float], ...] = ()   # ((t in s, T in K), ...); empty: constant T

    def temperature(self, t: float) -> float:
        """T at time t (s): the constant, or the programme interpolated linearly and held past its ends."""
        if not self.programme:
            return self.T
        pts = self.programme
        if t <= pts[0][0]:
            return pts[0][1]
        for (t0, T0), (t1, T1) in zip(pts[:-1], pts[1:]):
            if t <= t1:
                return T0 + (T1 - T0) * (t - t0) / (t1 - t0)
        return pts[-1][1]


@dataclass(frozen=True)
class Rival:
    """A rival network for the same data ([fit] rivals): its file as the study names it, species and reactions."""
    ref: str
    species: tuple[Species, ...]
    reactions: tuple[Reaction, ...]


@dataclass(frozen=True)
class FitSpec:
    """[fit]: the parameter paths to estimate, their optional SI bounds, the measurement error model
    (species -> (absolute sd in mol/m^3, relative sd); empty: one common sd estimated from the residuals), the
    collocation elements per sampling interval, the number of starting points, and rival networks to compare."""
    estimate: tuple[str, ...]
    bounds: tuple[tuple[str, tuple[float, float]], ...] = ()
    error: tuple[tuple[str, tuple[float, float]], ...] = ()
    elements: int = 1
    starts: int = 4
    rivals: tuple[Rival, ...] = ()


@dataclass(frozen=True)
class FittedKinetics:
    """Kinetics estimated by `tubeyield fit` and applied to a study (`--kinetics FIT.json`): the fitted values (SI,
    by study path), and what it takes to draw from the fit's uncertainty: the estimates x in the estimation
    coordinates and their covariance; each path's SI value is transform(G x + h) ("exp", "kilo" = 1000 times,
    "same")."""
    source: str                                       # the fit file as given
    fitted_study: str                                 # the name of the study that was fitted
    status: str
    values: tuple[tuple[str, float], ...]
    x: tuple[float, ...] = ()
    cov: tuple[tuple[float, ...], ...] = ()           # empty when the fit has no covariance (not identifiable)
    G: tuple[tuple[float, ...], ...] = ()
    h: tuple[float, ...] = ()
    transforms: tuple[str, ...] = ()
    T_range: tuple[float, ...] = ()                   # K: the coldest and hottest temperature of the lab runs

    @property
    def paths(self) -> tuple[str, ...]:
        return tuple(p for p, _ in self.values)

    def values_at(self, x) -> dict[str, float]:
        """The SI value of every fitted path at coordinates x."""
        import numpy as np
        r = np.asarray(self.G, dtype=float) @ np.asarray(x, dtype=float) + np.asarray(self.h, dtype=float)
        out = {}
        for p, v, f in zip(self.paths, r, self.transforms):
            out[p] = float(np.exp(v)) if f == "exp" else 1000.0 * float(v) if f == "kilo" else float(v)
        return out

    def to_dict(self) -> dict:
        return {"source": self.source, "fitted_study": self.fitted_study, "status": self.status,
                "values": dict(self.values), "x": list(self.x), "cov": [list(r) for r in self.cov],
                "G": [list(r) for r in self.G], "h": list(self.h), "transforms": list(self.transforms),
                "T_range": list(self.T_range)}


@dataclass(frozen=True)
class Study:
    name: str
    species: tuple[Species, ...]
    reactions: tuple[Reaction, ...]
    feed: Feed
    reactor: Reactor
    decisions: tuple[Decision, ...]
    goal: Goal
    front: FrontSpec | None = None
    window: WindowSpec | None = None
    sweep: SweepSpec | None = None
    robust: RobustSpec | None = None
    numerics: Numerics = field(default_factory=Numerics)
    experiments: tuple[Experiment, ...] = ()
    fit: FitSpec | None = None
    kinetics: FittedKinetics | None = None       # fitted kinetics applied over the study's own (--kinetics)
    description: str = ""
    path: str = ""
    source: str = ""              # the study text as read, for reports that reproduce
    includes: tuple[SourceFile, ...] = ()        # included network files, as the study names them
    section_errors: tuple = field(default=(), compare=False, repr=False)  # (section, StudyError) not read

    @functools.cached_property
    def symbols(self) -> tuple[str, ...]:
        """The species' symbols in order (kept once worked out: the simulation's right-hand side asks for them on
        every call)."""
        return tuple(s.symbol for s in self.species)

    def sources_json(self) -> str:
        """The study's text and its includes as one JSON document (kept by sweep stores and saved inputs), from
        which `study.study_from_sources` rebuilds the study in memory."""
        import json
        from pathlib import PurePath
        doc = {"name": PurePath(self.path).name or "study.toml", "study": self.source,
               "includes": {f.ref: f.text for f in self.includes}}
        if self.kinetics is not None:
            doc["kinetics"] = self.kinetics.to_dict()
        return json.dumps(doc)

    def decision(self, name: str) -> Decision:
        for d in self.decisions:
            if d.name == name:
                return d
        raise KeyError(name)

    def reaction(self, rid: str) -> Reaction:
        for r in self.reactions:
            if r.id == rid:
                return r
        raise KeyError(rid)

    def with_decisions(self, values: dict[str, float]) -> "Study":
        """The same study with some decisions fixed at the given SI values."""
        new = tuple(d.with_value(values[d.name]) if d.name in values else d for d in self.decisions)
        return replace(self, decisions=new)
