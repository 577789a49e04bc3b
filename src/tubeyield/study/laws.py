"""Rate laws: one class per law, collected in LAWS, which the loader, the models, the reference simulation, the sweep
paths and the reachability check all read.

Every law has the forward rate constant k(T) (Arrhenius, common to all laws: keys k or A, T_ref, Ea) and forward
orders (key `orders`); a law adds its own keys and constants. A law class declares

    name, keys, reversible, source        its name in the study file, the keys it reads, whether it runs backwards
    k_power(n) -> p                       k's unit is concentration^p / time (default 1 - n for total order n)
    read(t, ctx) -> law                   parse its keys (a study.toml.Table) to SI; StudyError names the key
    rate(k, forward, conc, T, mx, dH)     the rate, mol/(m^3 s), from k(T), prod c^n, concentrations (mol/m^3) and T;
                                          `mx` is numpy or pyomo.environ, so one expression serves model and simulation
    constants() -> {name: value}          its numbers, as stored (logarithms for positive constants): each becomes a
                                          variable pinned in the model, so sweeps vary it without a rebuild
    with_constants(values) -> law         the same law with those numbers replaced (floats or Pyomo variables)
    paths() -> {path: LawPath}            what `reaction.<id>.<path>` may vary in a sweep, with its unit kind
    reverse_orders                        species whose presence lets it run backwards (reachability)

Adding a law is one class in this module (DEVELOPERS.md: "A rate law").
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Callable, ClassVar, Mapping

from tubeyield.errors import StudyError
from tubeyield.study.kinetics import VantHoff, concentration_product
from tubeyield.study.toml import Table, number
from tubeyield.study.units import QUANTITY_KINDS, rate_constant_to_si, to_si


@dataclass(frozen=True)
class LawContext:
    """What a law's reader knows about its reaction: the parsed equation, forward orders and their sum, the
    reference temperature of k (K), the species symbols, and a reader for order tables."""
    reactants: tuple[tuple[str, float], ...]
    products: tuple[tuple[str, float], ...]
    orders: tuple[tuple[str, float], ...]
    forward_order: float
    T_ref: float
    symbols: frozenset
    read_orders: Callable[[Table, str, dict], tuple]


@dataclass(frozen=True)
class LawPath:
    """A law constant a sweep may vary: `constant` is the name in constants(); the value given (SI of `kind`; for
    kind "constant", concentration^power without time) is stored as ln when `log`."""
    constant: str
    kind: str
    power: float | None = None
    log: bool = False


class RateLaw:
    name: ClassVar[str]
    keys: ClassVar[tuple[str, ...]] = ()
    reversible: ClassVar[bool] = False
    source: ClassVar[str] = ""
    reverse_orders: tuple = ()

    @classmethod
    def read(cls, t: Table, ctx: LawContext) -> "RateLaw":
        raise NotImplementedError

    @classmethod
    def k_power(cls, forward_order: float) -> float:
        """The concentration power p of k's unit, concentration^p / time (a power law of total order n: 1 - n)."""
        return 1.0 - forward_order

    def rate(self, k, forward, conc: dict, T, mx, dH):
        raise NotImplementedError

    def constants(self) -> dict[str, float]:
        return {}

    def with_constants(self, values: Mapping[str, object]) -> "RateLaw":
        return self

    def paths(self) -> dict[str, LawPath]:
        return {}

    def with_path(self, path: str, value_si: float) -> "RateLaw":
        """The law with the constant behind sweep path `path` set to `value_si` (SI)."""
        p = self.paths()[path]
        if p.log and not value_si > 0:
            raise StudyError(path, f"a positive value; sampled {value_si:g}")
        return self.with_constants({**self.constants(), p.constant: math.log(value_si) if p.log else value_si})

    def describe(self) -> str:
        """The rate law in words for `check` (the forward orders are shown beside it)."""
        return self.name

    def study_keys(self) -> dict:
        """The law's own keys as a study file writes them (quantities as strings with units), for writing a
        network back (a fitted network for `include`)."""
        return {}

    def constant_table(self) -> list[tuple[str, float, str]]:
        """The law's constants at T_ref as (sweep path, value, unit) for reports: concentration powers in mol/L,
        energies in kJ/mol (from paths(), so a new law's constants are shown without more code)."""
        values = self.constants()
        out = []
        for path, p in self.paths().items():
            v = values[p.constant]
            if p.log:
                v = math.exp(v)
            if p.kind == "constant":
                out.append((path, v * 1e-3 ** (p.power or 0.0), concentration_unit(p.power or 0.0)))
            elif p.kind == "molar_energy":
                out.append((path, v / 1000.0, "kJ/mol"))
            else:
                out.append((path, v, QUANTITY_KINDS[p.kind][0]))
        return out


def concentration_unit(power: float) -> str:
    """(mol/L)^power written as an engineer would: '', 'mol/L', 'L/mol', '(mol/L)^0.5'."""
    if power == 0:
        return ""
    if power == 1:
        return "mol/L"
    if power == -1:
        return "L/mol"
    return f"(mol/L)^{power:g}"


# ------------------------------------------------------------------------------------------------------------ laws


@dataclass(frozen=True)
class PowerLaw(RateLaw):
    """r = k(T) prod c_i^n_i (Levenspiel, Chemical Reaction Engineering, 3rd ed. 1999, ch. 2)."""
    name: ClassVar[str] = "power"
    source: ClassVar[str] = "Levenspiel, Chemical Reaction Engineering, 3rd ed. 1999, ch. 2"

    @classmethod
    def read(cls, t: Table, ctx: LawContext) -> "PowerLaw":
        return cls()

    def rate(self, k, forward, conc, T, mx, dH):
        return k * forward


@dataclass(frozen=True)
class Reversible(RateLaw):
    """r = k(T) (prod_reactants c^n - prod_products c^m / K_c(T)), K_c by van 't Hoff with the reaction's dH
    (Fogler, Elements of Chemical Reaction Engineering, 5th ed. 2016, ch. 3: reversible rate laws)."""
    name: ClassVar[str] = "reversible"
    keys: ClassVar[tuple[str, ...]] = ("K", "reverse_orders")
    reversible: ClassVar[bool] = True
    source: ClassVar[str] = "Fogler, Elements of Chemical Reaction Engineering, 5th ed. 2016, ch. 3"
    reverse_orders: tuple = ()
    ln_K_ref: float = 0.0         # ln of K_c at T_ref, SI units from the orders
    T_ref: float = 298.15
    dn: float = 0.0               # reverse minus forward total order: K_c's concentration power

    @classmethod
    def read(cls, t: Table, ctx: LawContext) -> "Reversible":
        reverse = ctx.read_orders(t, "reverse_orders", dict(ctx.products))
        dn = sum(n for _, n in reverse) - ctx.forward_order
        K = t.take("K", what="the equilibrium constant K_c at T_ref")
        K_si = rate_constant_to_si(K, dn, t.key("K"), per="none")
        if K_si <= 0:
            raise StudyError(t.key("K"), f"a positive equilibrium constant, got {K!r}")
        return cls(reverse, math.log(K_si), ctx.T_ref, dn)

    def equilibrium(self, dH) -> VantHoff:
        return VantHoff(self.ln_K_ref, self.T_ref, 0.0 if dH is None else dH)

    def rate(self, k, forward, conc, T, mx, dH):
        K = mx.exp(self.equilibrium(dH).ln_value(T, mx))
        return k * (forward - concentration_product(conc, self.reverse_orders) / K)

    def constants(self):
        return {"lnK": self.ln_K_ref}

    def with_constants(self, values):
        return replace(self, ln_K_ref=values["lnK"])

    def paths(self):
        return {"K": LawPath("lnK", "constant", power=self.dn, log=True)}

    def study_keys(self) -> dict:
        (_, K, unit), = self.constant_table()
        return {"K": f"{K:.8g} {unit}".strip() if unit else float(f"{K:.8g}"),
                "reverse_orders": dict(self.reverse_orders)}


class AdsorbingLaw(RateLaw):
    """What the adsorption laws share: adsorption terms (species, K_i(T)) in `self.terms`, the Langmuir denominator
    1 + sum K_i c_i, and their constants (ln K_i and dH_i of each species) pinned and varied as K.<s>, dH.<s>."""

    def denominator(self, conc, T, mx):
        value = 1.0
        for s, ads in self.terms:
            value = value + mx.exp(ads.ln_value(T, mx)) * conc[s]
        return value

    def constants(self):
        return adsorption_constants(self.terms)

    def with_constants(self, values):
        return replace(self, terms=adsorption_with(self.terms, values))

    def paths(self):
        return adsorption_paths(self.terms)

    def study_keys(self) -> dict:
        return {"adsorption": {s: {"K": f"{math.exp(ads.ln_K_ref) * 1e3:.8g} L/mol", "dH": f"{ads.dH / 1e3:.8g} kJ/mol"}
                               for s, ads in self.terms}}


@dataclass(frozen=True)
class Adsorption(AdsorbingLaw):
    """r = k(T) prod c_i^n_i / (1 + sum K_i(T) c_i)^m, each K_i by van 't Hoff (Langmuir-Hinshelwood-Hougen-Watson
    form; Froment, Bischoff and De Wilde, Chemical Reactor Analysis and Design, 3rd ed. 2011, ch. 2)."""
    name: ClassVar[str] = "adsorption"
    keys: ClassVar[tuple[str, ...]] = ("adsorption", "denominator_power")
    source: ClassVar[str] = "Froment, Bischoff and De Wilde, Chemical Reactor Analysis and Design, 3rd ed. 2011, ch. 2"
    terms: tuple[tuple[str, VantHoff], ...] = ()   # (species, K_i(T)), K_i in 1/concentration
    power: float = 1.0

    @classmethod
    def read(cls, t: Table, ctx: LawContext) -> "Adsorption":
        terms = read_adsorption(t, ctx)
        return cls(terms, number(t.take("denominator_power", 1.0), t.key("denominator_power"), low=0.0))

    def rate(self, k, forward, conc, T, mx, dH):
        return k * forward / self.denominator(conc, T, mx) ** self.power

    def study_keys(self) -> dict:
        return {**super().study_keys(), "denominator_power": self.power}



@dataclass(frozen=True)
class LangmuirHinshelwood(AdsorbingLaw):
    """Bimolecular surface reaction between two adsorbed reactants on one kind of site, surface reaction rate
    controlling: r = k(T) K_A c_A K_B c_B / (1 + sum K_i(T) c_i)^2 (Hougen and Watson, Chemical Process
    Principles III, 1947; Fogler, Elements of Chemical Reaction Engineering, 5th ed. 2016, ch. 10, from memory).
    The sum runs over every adsorbing species listed (the two reactants, and products or inerts that compete)."""
    name: ClassVar[str] = "langmuir-hinshelwood"
    keys: ClassVar[tuple[str, ...]] = ("adsorption",)
    source: ClassVar[str] = "Hougen and Watson 1947; Fogler, 5th ed. 2016, ch. 10"
    pair: tuple[str, str] = ("", "")
    terms: tuple[tuple[str, VantHoff], ...] = ()

    @classmethod
    def read(cls, t: Table, ctx: LawContext) -> "LangmuirHinshelwood":
        reactants = [s for s, _ in ctx.reactants]
        if len(reactants) != 2 or any(c != 1 for _, c in ctx.reactants):
            raise StudyError(t.key("equation"), "two different reactants, each with coefficient 1 (A + B -> ...), "
                                                "for law 'langmuir-hinshelwood'")
        if any(n != 1 for _, n in ctx.orders) or {s for s, _ in ctx.orders} != set(reactants):
            raise StudyError(t.key("orders"), "first order in each reactant (the default) for law "
                                              "'langmuir-hinshelwood'")
        terms = read_adsorption(t, ctx)
        missing = [s for s in reactants if s not in dict(terms)]
        if missing:
            raise StudyError(t.key("adsorption"), f"an adsorption constant for each reactant; {missing[0]!r} has none")
        return cls((reactants[0], reactants[1]), terms)

    @classmethod
    def k_power(cls, forward_order: float) -> float:
        return 1.0                   # K_A c_A K_B c_B is dimensionless: k is a rate, mol/(m^3 s)

    def rate(self, k, forward, conc, T, mx, dH):
        K = dict(self.terms)
        a, b = self.pair
        K_a, K_b = mx.exp(K[a].ln_value(T, mx)), mx.exp(K[b].ln_value(T, mx))
        return k * K_a * forward * K_b / self.denominator(conc, T, mx) ** 2



LAWS: dict[str, type[RateLaw]] = {law.name: law for law in (PowerLaw, Reversible, Adsorption, LangmuirHinshelwood)}
LAW_KEYS: tuple[str, ...] = tuple(dict.fromkeys(k for law in LAWS.values() for k in law.keys))


# --------------------------------------------------------------------------------------- shared by adsorption laws


def read_adsorption(t: Table, ctx: LawContext) -> tuple[tuple[str, VantHoff], ...]:
    """`adsorption = { A = { K = "0.5 L/mol", dH = "-20 kJ/mol" } }`: each K_i(T) by van 't Hoff about T_ref."""
    ads = t.table("adsorption", what="a table of adsorption constants, e.g. { A = { K = '0.5 L/mol' } }")
    terms = []
    for s, body in ads.data.items():
        akey = ads.key(s)
        if s not in ctx.symbols:
            raise StudyError(akey, f"a species of the network, got {s!r}")
        at = Table(body, akey)
        K = rate_constant_to_si(at.take("K", what="an adsorption constant such as '0.5 L/mol'"), -1.0, at.key("K"),
                                per="none")
        if K <= 0:
            raise StudyError(at.key("K"), "a positive adsorption constant")
        dHa = at.take("dH", None)
        dHa = to_si(dHa, "molar_energy", at.key("dH")) if dHa is not None else 0.0
        at.close(("K", "dH"))
        terms.append((s, VantHoff(math.log(K), ctx.T_ref, dHa)))
    ads.seen.update(ads.data)
    if not terms:
        raise StudyError(t.key("adsorption"), "at least one adsorbing species")
    return tuple(terms)


def adsorption_constants(terms) -> dict[str, float]:
    out = {}
    for s, ads in terms:
        out[f"lnK.{s}"] = ads.ln_K_ref
        out[f"dH.{s}"] = ads.dH
    return out


def adsorption_with(terms, values) -> tuple:
    return tuple((s, VantHoff(values[f"lnK.{s}"], ads.T_ref, values[f"dH.{s}"])) for s, ads in terms)


def adsorption_paths(terms) -> dict[str, LawPath]:
    out = {}
    for s, _ in terms:
        out[f"K.{s}"] = LawPath(f"lnK.{s}", "constant", power=-1.0, log=True)
        out[f"dH.{s}"] = LawPath(f"dH.{s}", "molar_energy")
    return out
