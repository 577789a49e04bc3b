"""Estimation coordinates: what the optimizer moves when a fit estimates the study paths in [fit] estimate.

- `reaction.<id>.k`: ln k at the centring temperature T_c, the reciprocal mean of the experiments' temperatures
  (the centred, or reparameterized, Arrhenius equation: Schwaab and Pinto, Chem. Eng. Sci. 62 (2007) 2750), so that
  ln k and Ea are nearly uncorrelated;
- `reaction.<id>.Ea`, `.dH`, `.dH.<s>`: the energy in kJ/mol;
- a positive law constant (`.K`, `.K.<s>`): its logarithm at the reaction's T_ref;
- `reaction.<id>.order.<s>`: the order itself.

Every reported parameter (k at the reaction's own T_ref, Ea, K, ...) is then transform(g . x + h), with g and h
from the coordinates and transform exp (logarithmic coordinates), kilo (kJ/mol -> J/mol) or same. The linear part
carries the covariance exactly (intervals are taken there and mapped, so rate constants stay positive), and the
same (G, h, transform) draws SI values from the fit's uncertainty in sweeps and robust points.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from tubeyield.reactor.parameters import study_parameters
from tubeyield.study.kinetics import GAS_CONSTANT, Arrhenius
from tubeyield.study.laws import concentration_unit
from tubeyield.study.read_fit import fit_path
from tubeyield.study.schema import Study
from tubeyield.study.units import rate_constant_from_si

LN_SPAN = 25.0                       # a logarithmic coordinate may move this far from its start without bounds
DEFAULT_BOUNDS = {"Ea": (0.0, 500.0), "dH": (-1000.0, 1000.0), "order": (0.0, 4.0)}   # kJ/mol; orders
START_SPREAD = {"log": math.log(10.0), "energy": 0.3, "order": 0.5}   # multistart region without user bounds


@dataclass(frozen=True)
class Estimand:
    """One estimated path: its reaction, name, and how its coordinate maps to the model's parameters."""
    path: str
    rid: str
    name: str          # k, Ea, dH, a law path (K, K.A, dH.A) or order.<s>
    kind: str          # "k", "Ea", "energy" (dH and law energies), "log" (positive law constants), "order"
    par: str           # the model parameter it sets (reactor/parameters.py names; order:<rid>:<s> for orders)


@dataclass(frozen=True)
class Coordinates:
    study: Study                              # the study with every rate constant re-expressed at T_c
    estimands: tuple[Estimand, ...]
    T_c: float
    refs: tuple[tuple[str, float], ...]       # each reaction's own T_ref (K), where k is reported

    @property
    def paths(self) -> tuple[str, ...]:
        return tuple(e.path for e in self.estimands)

    # ---------------------------------------------------------------------------------------------- coordinates

    def start(self) -> np.ndarray:
        """The study's own values in coordinates: the fit's first starting point."""
        par = study_parameters(self.study)
        out = []
        for e in self.estimands:
            if e.kind == "order":
                out.append(dict(self.study.reaction(e.rid).orders)[e.name[len("order."):]])
            elif e.kind in ("Ea", "energy"):
                out.append(par[e.par] / 1000.0)
            else:
                out.append(par[e.par])
        return np.array(out, dtype=float)

    def bounds(self, given: dict) -> list[tuple[float, float]]:
        """Bounds in coordinates: the study's [fit] bounds (SI) or the defaults. Bounds on k are on k at the
        study's T_ref; at T_c they move with Ea (taken at the start value)."""
        x0 = self.start()
        out = []
        for e, x in zip(self.estimands, x0):
            if e.path in given:
                low, high = given[e.path]
                if e.kind == "k":
                    shift = self._shift(e.rid, x0)
                    out.append((math.log(low) + shift, math.log(high) + shift))
                elif e.kind == "log":
                    out.append((math.log(low), math.log(high)))
                elif e.kind in ("Ea", "energy"):
                    out.append((low / 1000.0, high / 1000.0))
                else:
                    out.append((low, high))
            elif e.kind in ("k", "log"):
                out.append((x - LN_SPAN, x + LN_SPAN))
            else:
                low, high = DEFAULT_BOUNDS["order" if e.kind == "order" else "Ea" if e.kind == "Ea" else "dH"]
                out.append((min(low, x), max(high, x)))
        return out

    def start_region(self, bounds, given: dict) -> list[tuple[float, float]]:
        """Where the multistart draws its other starting points: between the user's bounds where given, else a
        decade either way for logarithms, 30 % either way for energies, 0.5 for orders (inside the bounds)."""
        x0 = self.start()
        out = []
        for e, x, (low, high) in zip(self.estimands, x0, bounds):
            if e.path in given:
                out.append((low, high))
                continue
            if e.kind in ("k", "log"):
                a, b = x - START_SPREAD["log"], x + START_SPREAD["log"]
            elif e.kind == "order":
                a, b = x - START_SPREAD["order"], x + START_SPREAD["order"]
            else:
                spread = START_SPREAD["energy"] * abs(x) + 10.0
                a, b = x - spread, x + spread
            out.append((max(a, low), min(b, high)))
        return out

    def _shift(self, rid: str, x) -> float:
        """ln k(T_c) - ln k(T_ref) for reaction `rid` at coordinates x."""
        return -self.Ea(rid, x) / GAS_CONSTANT * (1.0 / self.T_c - 1.0 / self.T_ref(rid))

    def T_ref(self, rid: str) -> float:
        return dict(self.refs)[rid]

    def Ea(self, rid: str, x) -> float:
        p = f"reaction.{rid}.Ea"
        return 1000.0 * x[self.paths.index(p)] if p in self.paths else self.study.reaction(rid).k.Ea

    def par(self, x, base: dict | None = None) -> dict:
        """The model parameters (reactor/parameters.py names, plus order:<rid>:<s>) with the estimated ones from
        x (floats or Pyomo variables)."""
        par = dict(base if base is not None else study_parameters(self.study))
        for e, v in zip(self.estimands, x):
            par[e.par] = 1000.0 * v if e.kind in ("Ea", "energy") else v
        return par

    # ------------------------------------------------------------------------------------------ reported values

    def linear_forms(self) -> tuple[np.ndarray, np.ndarray, tuple[str, ...]]:
        """(G, h, transforms): each estimated path's SI value is transform(G[i] . x + h[i]); for k that is
        ln k at the reaction's own T_ref = ln k(T_c) - Ea/R (1/T_ref - 1/T_c)."""
        P = len(self.estimands)
        G, h, tr = np.zeros((P, P)), np.zeros(P), []
        for i, e in enumerate(self.estimands):
            G[i, i] = 1.0
            if e.kind == "k":
                a = -1.0 / GAS_CONSTANT * (1.0 / self.T_ref(e.rid) - 1.0 / self.T_c)
                ea = f"reaction.{e.rid}.Ea"
                if ea in self.paths:
                    G[i, self.paths.index(ea)] = 1000.0 * a
                else:
                    h[i] = a * self.study.reaction(e.rid).k.Ea
                tr.append("exp")
            elif e.kind == "log":
                tr.append("exp")
            elif e.kind in ("Ea", "energy"):
                tr.append("kilo")
            else:
                tr.append("same")
        return G, h, tuple(tr)

    def values_si(self, x) -> dict[str, float]:
        G, h, tr = self.linear_forms()
        r = G @ np.asarray(x, dtype=float) + h
        return {p: (math.exp(v) if f == "exp" else 1000.0 * v if f == "kilo" else float(v))
                for p, v, f in zip(self.paths, r, tr)}

    def _k_power_unit(self, rid: str, x) -> tuple[float, str]:
        """k's concentration power and the unit text to show it in: the study's, or SI at the fitted orders when
        the fit estimates an order of the reaction (k's unit then moves with the order)."""
        r = self.study.reaction(rid)
        if x is None or not any(e.rid == rid and e.kind == "order" for e in self.estimands):
            return r.k_power, r.k_unit
        orders = dict(r.orders)
        for e, v in zip(self.estimands, x):
            if e.rid == rid and e.kind == "order":
                orders[e.name[len("order."):]] = float(v)
        return r.law.k_power(sum(orders.values())), ""

    def to_user(self, i: int, linear_value: float, x=None) -> float:
        """A value of the i-th linear form (G[i] . x + h[i]) in the units the study uses for that parameter (`x`,
        the estimates, when the fit also estimates an order of a rate constant's reaction)."""
        e = self.estimands[i]
        if e.kind == "k":
            power, unit = self._k_power_unit(e.rid, x)
            return rate_constant_from_si(math.exp(linear_value), power, unit)[0]
        if e.kind == "log":
            power = self.study.reaction(e.rid).law.paths()[e.name].power or 0.0
            return math.exp(linear_value) * 1e-3 ** power            # SI -> (mol/L)^power
        return linear_value                                          # kJ/mol, or an order

    def unit(self, i: int, x=None) -> str:
        e = self.estimands[i]
        if e.kind == "k":
            power, unit = self._k_power_unit(e.rid, x)
            return rate_constant_from_si(1.0, power, unit)[1]
        if e.kind == "log":
            return concentration_unit(self.study.reaction(e.rid).law.paths()[e.name].power or 0.0)
        return "kJ/mol" if e.kind in ("Ea", "energy") else ""

    def logarithmic(self, i: int) -> bool:
        return self.estimands[i].kind in ("k", "log")


def estimand(path: str, study: Study) -> Estimand:
    rid, name = fit_path(path, study.reactions, path)
    if name == "k":
        return Estimand(path, rid, name, "k", f"lnk:{rid}")
    if name == "Ea":
        return Estimand(path, rid, name, "Ea", f"Ea:{rid}")
    if name == "dH":
        return Estimand(path, rid, name, "energy", f"dH:{rid}")
    if name.startswith("order."):
        return Estimand(path, rid, name, "order", f"order:{rid}:{name[len('order.'):]}")
    lp = study.reaction(rid).law.paths()[name]
    return Estimand(path, rid, name, "log" if lp.log else "energy", f"law:{rid}:{lp.constant}")


def coordinates(study: Study, paths=None) -> Coordinates:
    """The estimation coordinates of `paths` (default: study.fit.estimate), centred at the reciprocal mean
    temperature of the experiments."""
    temps = [e.T for e in study.experiments]
    T_c = len(temps) / sum(1.0 / T for T in temps)
    refs = tuple((r.id, r.k.T_ref) for r in study.reactions)
    centred = tuple(replace(r, k=Arrhenius(r.k.ln_value(T_c, math), T_c, r.k.Ea)) for r in study.reactions)
    centred_study = replace(study, reactions=centred)
    paths = tuple(paths if paths is not None else study.fit.estimate)
    return Coordinates(centred_study, tuple(estimand(p, study) for p in paths), T_c, refs)
