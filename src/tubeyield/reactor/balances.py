"""The pieces of the mole and energy balances shared by the collocation model (plug.py, stirred.py) and the scipy
reference simulation (simulate.py): scaling, inlet, concentrations and wall heat transfer, written once over plain
arithmetic (floats, numpy arrays or Pyomo expressions). Each side assembles the balances below from these pieces and
the shared rate laws in its own form (named Pyomo expressions; a vectorized right-hand side).

Scaling. The axial coordinate is z = V / V_total in [0, 1] and the state is the scaled molar flow
u_i = F_i / (v0 C_s), with v0 the inlet volumetric flow and C_s a concentration scale: for a liquid the inlet
concentration of the key reactant (constant density, so u_i = C_i / C_s), for a gas the inlet total concentration
P / (R T_feed). With the residence time tau = V_total / v0 (space time at inlet conditions):

  plug flow       du_i/dz = tau R_i(C, T) / C_s
                  (sum_i u_i Cp_i) dT/dz = tau / C_s [ sum_j (-dH_j(T)) r_j + U a (T_cool - T) ]
  stirred tank k  u_k,i - u_k-1,i = tau_k R_i(C_k, T_k) / C_s
                  (sum_i u_k-1,i Cp_i)(T_k - T_k-1) = tau_k / C_s [ sum_j (-dH_j(T_k)) r_j + U a (T_cool - T_k) ]

Concentrations: liquid C_i = C_s u_i; ideal gas, isobaric C_i = P/(R T) u_i / sum_k u_k, so the volumetric flow
follows the total moles and the temperature.

References
----------
O. Levenspiel, Chemical Reaction Engineering, 3rd ed., Wiley 1999, ch. 5 (plug flow and mixed flow, expansion).
H. S. Fogler, Elements of Chemical Reaction Engineering, 5th ed., Pearson 2016, ch. 11-12 (energy balances with
heat of reaction from Kirchhoff's law and wall heat transfer U a, a = 4/D for a tube).
"""

from __future__ import annotations

import numpy as np

from tubeyield.study.kinetics import GAS_CONSTANT
from tubeyield.study.schema import Study


def concentration_scale(study: Study) -> float:
    """Structural concentration scale for a liquid: the key reactant's inlet concentration (mol/m^3)."""
    return dict(study.feed.conc)[study.goal.key] if study.feed.phase == "liquid" else 1.0


def inlet(study: Study, par, ratio: dict, T_inlet, c_ref: float):
    """Scaled inlet flows u0 and the scale C_s, from parameters, feed-ratio decisions and the inlet temperature.

    A ratio decision sets the inlet of species s to ratio_s times that of the key reactant; for a gas the balance
    species gives up the same fraction. Returns (u0, C_s, balance_fraction or None).
    """
    key = study.goal.key
    symbols = study.symbols
    if study.feed.phase == "liquid":
        u0 = {s: par[f"in:{s}"] / c_ref for s in symbols}
        for s, r in ratio.items():
            u0[s] = r * par[f"in:{key}"] / c_ref
        return u0, c_ref, None
    T_feed = par["T_feed"] if "T_feed" in par else T_inlet
    c_s = par["P"] / (GAS_CONSTANT * T_feed)
    u0 = {s: par[f"in:{s}"] for s in symbols}
    balance = None
    if ratio:
        bal = study.feed.balance
        taken = 0.0
        for s, r in ratio.items():
            u0[s] = r * par[f"in:{key}"]
            taken = taken + u0[s]
        u0[bal] = par[f"in:{bal}"] - taken
        balance = u0[bal]
    return u0, c_s, balance


def concentrations(study: Study, u: dict, T, c_s, par) -> dict:
    """Concentrations (mol/m^3) from scaled flows at temperature T."""
    if study.feed.phase == "liquid":
        return {s: c_s * u[s] for s in study.symbols}
    total = 0.0
    for s in study.symbols:
        total = total + u[s]
    c_tot = par["P"] / (GAS_CONSTANT * T)
    return {s: c_tot * u[s] / total for s in study.symbols}


def wall_term(study: Study, par, T, T_cool):
    """U a (T_cool - T), W/m^3, with a = 4/D; zero unless heat = 'cooled'."""
    if not study.reactor.mode.wall:
        return 0.0
    return par["U"] * 4.0 / study.reactor.diameter * (T_cool - T)


def math_for(T):
    """The math namespace for T: numpy for numbers and arrays, pyomo.environ for Pyomo expressions."""
    if isinstance(T, (int, float, np.ndarray, np.floating)):
        return np
    from tubeyield.modeling import pyo
    return pyo
