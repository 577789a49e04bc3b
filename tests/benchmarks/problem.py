"""The benchmark problem as plain arrays, for the baselines (which do not use tubeyield's model code).

A liquid plug-flow reactor with power-law Arrhenius kinetics: maximize a yield subject to limits on conversion and
yields, over residence time, temperature (one, per zone, or a profile) and a feed ratio. Scaled like tubeyield's
model: tau over its upper bound, T over the largest temperature bound, states u_i = C_i / C_A0.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

R = 8.314462618


@dataclass
class Problem:
    species: list
    N: np.ndarray               # species x reactions
    orders: np.ndarray          # reactions x species
    lnk: np.ndarray             # ln k at T_ref, SI
    Ea: np.ndarray
    Tref: np.ndarray
    c_ref: float                # key inlet concentration, mol/m^3
    u_in: np.ndarray            # inlet scaled flows (ratio species 0)
    key: int
    product: int                # goal: yield of this species (factor 1 in the bench networks)
    ratio_species: int | None
    tau: tuple                  # (low, high) s
    T: tuple                    # (low, high) K
    ratio: tuple                # (low, high)
    heat: str                   # isothermal | zones | free
    zones: int
    limits: list                # [(kind, species index, sense, bound)] kind: conversion | yield
    T_scale: float

    def rates(self, u, T, xp=np):
        """Reaction rates (mol/(m^3 s)) for scaled states u and temperature T (xp: numpy or casadi)."""
        out = []
        for j in range(len(self.lnk)):
            r = xp.exp(self.lnk[j] - self.Ea[j] / R * (1.0 / T - 1.0 / self.Tref[j]))
            for i, n in enumerate(self.orders[j]):
                if n:
                    c = self.c_ref * u[i]
                    r = r * (c if n == 1 else c ** n)
            out.append(r)
        return out

    def inlet(self, ratio, xp=np):
        u0 = [self.u_in[i] for i in range(len(self.species))]
        if self.ratio_species is not None:
            u0[self.ratio_species] = ratio * self.u_in[self.key]
        return u0

    def metric(self, kind, i, u_out, u0):
        """conversion, yield and selectivity as tubeyield defines them (stoichiometric factor 1 here)."""
        if kind == "conversion":
            return 1.0 - u_out[i] / u0[i]
        if kind == "selectivity":
            return (u_out[i] - u0[i]) / (u0[self.key] - u_out[self.key])
        return (u_out[i] - u0[i]) / u0[self.key]


def from_study(study) -> Problem:
    sym = list(study.symbols)
    idx = {s: k for k, s in enumerate(sym)}
    N = np.zeros((len(sym), len(study.reactions)))
    orders = np.zeros((len(study.reactions), len(sym)))
    for j, r in enumerate(study.reactions):
        if r.law.name != "power":
            raise ValueError("the bench baselines take power-law networks")
        for s, c in r.stoichiometry().items():
            N[idx[s], j] = c
        for s, n in r.orders:
            orders[j, idx[s]] = n
    conc = dict(study.feed.conc)
    c_ref = conc[study.goal.key]
    ratio = [d for d in study.decisions if d.name.startswith("ratio.")]
    T_dec = [d for d in study.decisions if d.name == "T" or d.name.startswith("T.")]
    limits = []
    for lim in study.goal.limits:
        if lim.metric is None:
            continue   # temperature limits are decision bounds in these cases
        limits.append((lim.metric.kind, idx[lim.metric.species], lim.sense, lim.bound))
    temps = [d.high for d in study.decisions if d.si_unit == "K"] + \
            [lim.bound for lim in study.goal.limits if lim.metric is None]
    T_high = min([T_dec[0].high] + [lim.bound for lim in study.goal.limits if lim.metric is None and lim.sense == "<="])
    return Problem(sym, N, orders, np.array([r.k.ln_k_ref for r in study.reactions]),
                   np.array([r.k.Ea for r in study.reactions]), np.array([r.k.T_ref for r in study.reactions]),
                   c_ref, np.array([conc.get(s, 0.0) / c_ref for s in sym]), idx[study.goal.key],
                   idx[study.goal.metric.species], idx[ratio[0].name[6:]] if ratio else None,
                   (study.decision("tau").low, study.decision("tau").high), (T_dec[0].low, T_high),
                   (ratio[0].low, ratio[0].high) if ratio else (1.0, 1.0), study.reactor.heat, study.reactor.zones,
                   limits, max(temps))
