"""Temperature dependence and concentration factors shared by every rate law (SI units).

GAS_CONSTANT is the CODATA 2018 exact value R = N_A k_B.
"""

from __future__ import annotations

from dataclasses import dataclass

GAS_CONSTANT = 8.314462618  # J/(mol K)


@dataclass(frozen=True)
class Arrhenius:
    """k(T) = k_ref exp(-Ea/R (1/T - 1/T_ref)), stored as ln k_ref so rate constants over many decades stay exact.

    The reference-temperature form decouples k_ref and Ea in fits and optimizers (common practice; see e.g.
    Schwaab and Pinto, Chem. Eng. Sci. 62 (2007) 2750, on reparameterizing the Arrhenius equation).
    """
    ln_k_ref: float   # natural log of the SI value at T_ref
    T_ref: float      # K
    Ea: float         # J/mol

    def ln_value(self, T, mx):
        return self.ln_k_ref - self.Ea / GAS_CONSTANT * (1.0 / T - 1.0 / self.T_ref)


@dataclass(frozen=True)
class VantHoff:
    """K(T) = K_ref exp(-dH/R (1/T - 1/T_ref)): equilibrium or adsorption constant (van 't Hoff equation)."""
    ln_K_ref: float
    T_ref: float
    dH: float

    def ln_value(self, T, mx):
        return self.ln_K_ref - self.dH / GAS_CONSTANT * (1.0 / T - 1.0 / self.T_ref)


# Orders between 0 and 1 make c^n infinitely steep at c = 0 (the solver then evaluates 0 * inf = NaN). Such a factor is
# written c (c + delta)^(n - 1): exactly 0 at c = 0, smooth, with slope delta^(n - 1) there, and within a relative
# (1 - n) delta / c of c^n for c >> delta (so below 1e-6 relative for concentrations above 1e-3 mol/m^3). A
# regularization of this kind is common practice for fractional-order kinetics in optimization models; the model and
# the reference simulation use the same form, and tests bound its effect against the exact power law.
FRACTIONAL_ORDER_DELTA = 1e-9     # mol/m^3


def power_factor(c, n):
    """c^n for the rate laws: exact for n = 0, 1 and n >= 1, regularized for 0 < n < 1 (see FRACTIONAL_ORDER_DELTA).
    An order that is itself a model variable (a fit that estimates it) takes the regularized form throughout:
    smooth in n and c, and within (n - 1) delta / c of c^n for n > 1 too."""
    if not isinstance(n, (int, float)):
        return c * (c + FRACTIONAL_ORDER_DELTA) ** (n - 1.0)
    if n == 0:
        return 1.0
    if n == 1:
        return c
    if n < 1:
        return c * (c + FRACTIONAL_ORDER_DELTA) ** (n - 1.0)
    return c ** n


def concentration_product(conc: dict, orders) -> object:
    """prod_i c_i^n_i over (species, order) pairs, with power_factor for each factor."""
    value = 1.0
    for s, n in orders:
        if isinstance(n, (int, float)) and n == 0:
            continue
        value = value * power_factor(conc[s], n)
    return value
