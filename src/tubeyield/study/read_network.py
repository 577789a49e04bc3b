"""The reaction network of a study file: [species.*] and [[reaction]] tables -> Species and Reaction (SI)."""

from __future__ import annotations

import difflib
import math

from tubeyield.errors import StudyError
from tubeyield.study.equation import SYMBOL, parse_equation
from tubeyield.study.schema import GAS_CONSTANT, Arrhenius, Reaction, Species, VantHoff
from tubeyield.study.toml import Table, number
from tubeyield.study.units import rate_constant_to_si, to_si

LAWS = ("power", "reversible", "adsorption")


def read_species(data: dict, path: str) -> list[Species]:
    out = []
    for symbol, body in data.items():
        key = f"{path}.{symbol}"
        if not SYMBOL.match(symbol):
            raise StudyError(key, "a species symbol of letters, digits and '_' starting with a letter")
        t = Table(body, key)
        label = t.take("label", "", types=str)
        formula = t.take("formula", None, types=str)
        if formula is not None:
            from tubeyield.chemistry.formula import parse_formula
            parse_formula(formula, t.key("formula"))
        mm = t.take("molar_mass", None)
        mm = to_si(mm, "molar_mass", t.key("molar_mass")) if mm is not None else None
        if mm is not None and mm <= 0:
            raise StudyError(t.key("molar_mass"), f"a positive molar mass, got {t.data['molar_mass']!r}")
        cp = t.take("Cp", None)
        cp = to_si(cp, "molar_heat_capacity", t.key("Cp")) if cp is not None else None
        if cp is not None and cp <= 0:
            raise StudyError(t.key("Cp"), f"a positive heat capacity, got {t.data['Cp']!r}")
        t.close(("label", "formula", "molar_mass", "Cp"))
        out.append(Species(symbol, label, formula, mm, cp))
    return out


# ------------------------------------------------------------------------------------------------------- reactions

_REACTION_KEYS = ("id", "equation", "law", "orders", "reverse_orders", "k", "A", "T_ref", "Ea", "K", "dH",
                  "adsorption", "denominator_power", "label")


def read_reactions(entries: list) -> list["_RawReaction"]:
    """First pass: keep each reaction's raw table with its key path; resolved once all species are known."""
    out, ids = [], set()
    for i, body in enumerate(entries):
        key = f"reaction[{i}]"
        t = Table(body, key)
        rid = t.take("id", None, types=str)
        if rid is None:
            raise StudyError(f"{key}.id", "a reaction id such as 'main'; the key is missing")
        if not SYMBOL.match(rid):
            raise StudyError(f"{key}.id", f"an id of letters, digits and '_' starting with a letter, got {rid!r}")
        if rid in ids:
            raise StudyError(f"{key}.id", f"a unique reaction id; {rid!r} is used twice")
        ids.add(rid)
        t.close(_REACTION_KEYS)
        out.append(_RawReaction(rid, body))
    return out


class _RawReaction:
    def __init__(self, rid: str, body: dict, file: str | None = None):
        self.id = rid
        self.body = body
        self.file = file          # the included network file it came from (None: the study itself)


def resolve_reaction(raw, symbols: set[str], index: int) -> Reaction:
    if isinstance(raw, Reaction):
        return raw
    t = Table(raw.body, f"reaction.{raw.id}")
    eq_text = t.take("equation", what="an equation such as 'A + 2 B -> C'")
    eq = parse_equation(eq_text, t.key("equation"))
    for s, _ in eq.reactants + eq.products:
        if s not in symbols:
            hint = difflib.get_close_matches(s, symbols, n=1)
            raise StudyError(t.key("equation"), f"species declared under [species]; {s!r} in {eq_text!r} is not"
                                                 + (f" (did you mean {hint[0]!r}?)" if hint else ""))
    net = {}
    for s, c in eq.reactants:
        net[s] = net.get(s, 0) - c
    for s, c in eq.products:
        net[s] = net.get(s, 0) + c
    if all(abs(v) < 1e-12 for v in net.values()):
        raise StudyError(t.key("equation"), f"a reaction that changes something; {eq_text!r} has no net change")

    law = t.take("law", "reversible" if eq.reversible else "power", types=str)
    if law not in LAWS:
        raise StudyError(t.key("law"), f"one of {', '.join(LAWS)}, got {law!r}")
    if eq.reversible != (law == "reversible"):
        raise StudyError(t.key("law"), "law 'reversible' with a '<=>' equation" if eq.reversible else
                         f"a '<=>' equation for law 'reversible'; {eq_text!r} is written with '->'")

    orders = _orders(t, "orders", dict(eq.reactants), symbols)
    total = sum(n for _, n in orders)
    T_ref = t.take("T_ref", None)
    T_ref_si = to_si(T_ref, "temperature", t.key("T_ref")) if T_ref is not None else None
    if T_ref_si is not None and T_ref_si <= 0:
        raise StudyError(t.key("T_ref"), f"an absolute temperature above 0 K, got {T_ref!r}")
    Ea = t.take("Ea", None)
    Ea_si = to_si(Ea, "molar_energy", t.key("Ea")) if Ea is not None else 0.0
    if Ea_si < 0:
        raise StudyError(t.key("Ea"), f"a non-negative activation energy, got {Ea!r}")
    has_k, has_A = t.has("k"), t.has("A")
    if has_k == has_A:
        raise StudyError(t.key("k"), "either k (rate constant at T_ref) or A (pre-exponential factor), exactly one")
    if has_k:
        k = rate_constant_to_si(t.take("k"), 1.0 - total, t.key("k"))
        if k <= 0:
            raise StudyError(t.key("k"), f"a positive rate constant, got {t.data['k']!r}")
        if T_ref_si is None and Ea_si != 0:
            raise StudyError(t.key("T_ref"), "the temperature at which k is given (with Ea); the key is missing")
        T_ref_si = T_ref_si or 298.15
        rate = Arrhenius(math.log(k), T_ref_si, Ea_si)
    else:
        A = rate_constant_to_si(t.take("A"), 1.0 - total, t.key("A"))
        if A <= 0:
            raise StudyError(t.key("A"), f"a positive pre-exponential factor, got {t.data['A']!r}")
        T_ref_si = T_ref_si or 298.15
        # k(T_ref) = A exp(-Ea/(R T_ref)), kept as a logarithm: no underflow for large Ea.
        rate = Arrhenius(math.log(A) - Ea_si / (GAS_CONSTANT * T_ref_si), T_ref_si, Ea_si)

    dH = t.take("dH", None)
    dH_si = to_si(dH, "molar_energy", t.key("dH")) if dH is not None else None

    reverse_orders, equilibrium = (), None
    if law == "reversible":
        reverse_orders = _orders(t, "reverse_orders", dict(eq.products), symbols)
        dn = sum(n for _, n in reverse_orders) - total
        K = t.take("K", what="the equilibrium constant K_c at T_ref")
        K_si = rate_constant_to_si(K, dn, t.key("K"), per="none")
        if K_si <= 0:
            raise StudyError(t.key("K"), f"a positive equilibrium constant, got {K!r}")
        equilibrium = VantHoff(math.log(K_si), T_ref_si, dH_si or 0.0)
    elif t.has("reverse_orders") or t.has("K"):
        bad = "reverse_orders" if t.has("reverse_orders") else "K"
        raise StudyError(t.key(bad), "only for law = 'reversible'")

    adsorption, power = (), 1.0
    if law == "adsorption":
        ads = t.table("adsorption", what="a table of adsorption constants, e.g. { A = { K = '0.5 L/mol' } }")
        terms = []
        for s, body in ads.data.items():
            akey = ads.key(s)
            if s not in symbols:
                raise StudyError(akey, f"a species of the network, got {s!r}")
            at = Table(body, akey)
            K = rate_constant_to_si(at.take("K", what="an adsorption constant such as '0.5 L/mol'"), -1.0, at.key("K"), per="none")
            if K <= 0:
                raise StudyError(at.key("K"), "a positive adsorption constant")
            dHa = at.take("dH", None)
            dHa = to_si(dHa, "molar_energy", at.key("dH")) if dHa is not None else 0.0
            at.close(("K", "dH"))
            terms.append((s, VantHoff(math.log(K), T_ref_si, dHa)))
        ads.seen.update(ads.data)
        if not terms:
            raise StudyError(t.key("adsorption"), "at least one adsorbing species")
        adsorption = tuple(terms)
        power = number(t.take("denominator_power", 1.0), t.key("denominator_power"), low=0.0)
    elif t.has("adsorption") or t.has("denominator_power"):
        bad = "adsorption" if t.has("adsorption") else "denominator_power"
        raise StudyError(t.key(bad), "only for law = 'adsorption'")
    t.take("id"), t.take("label", "")
    t.close(_REACTION_KEYS)
    return Reaction(id=raw.id, equation=eq_text, reactants=eq.reactants, products=eq.products, law=law,
                    orders=orders, rate=rate, reverse_orders=reverse_orders, equilibrium=equilibrium,
                    adsorption=adsorption, denominator_power=power, dH=dH_si)


def _orders(t: Table, name: str, default: dict[str, float], symbols: set[str]) -> tuple[tuple[str, float], ...]:
    given = t.take(name, None, types=dict, what="a table of orders such as { A = 1, B = 0.5 }")
    if given is None:
        return tuple(default.items())
    out = []
    for s, n in given.items():
        key = f"{t.key(name)}.{s}"
        if s not in symbols:
            raise StudyError(key, f"a species of the network, got {s!r}")
        n = number(n, key)
        if n < 0:
            raise StudyError(key, f"a non-negative order, got {n:g} (a negative order makes the rate infinite as the "
                                  "concentration falls to zero; use law = 'adsorption' for inhibition)")
        out.append((s, n))
    return tuple(out)


def merge_unique(into: list, new: list, where: str, ident) -> None:
    seen = {ident(x) for x in into}
    for x in new:
        if ident(x) in seen:
            raise StudyError(f"{where}.{ident(x)}", "a unique id; it is defined twice (here and in an included file)")
        seen.add(ident(x))
        into.append(x)
