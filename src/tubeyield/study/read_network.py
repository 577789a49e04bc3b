"""The reaction network of a study file: [species.*] and [[reaction]] tables -> Species and Reaction (SI)."""

from __future__ import annotations

import difflib
import math

from tubeyield.errors import StudyError
from tubeyield.study.equation import SYMBOL, parse_equation
from tubeyield.study.formula import parse_formula
from tubeyield.study.kinetics import GAS_CONSTANT, Arrhenius
from tubeyield.study.laws import LAW_KEYS, LAWS, LawContext
from tubeyield.study.schema import Reaction, Species
from tubeyield.study.toml import Table, number
from tubeyield.study.units import rate_constant_to_si, to_si, unit_text


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

_COMMON_KEYS = ("id", "equation", "law", "orders", "k", "A", "T_ref", "Ea", "dH", "label")
_REACTION_KEYS = _COMMON_KEYS + tuple(k for k in LAW_KEYS if k not in _COMMON_KEYS)


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

    name = t.take("law", "reversible" if eq.reversible else "power", types=str)
    if name not in LAWS:
        hint = difflib.get_close_matches(name, LAWS, n=1)
        raise StudyError(t.key("law"), f"one of {', '.join(LAWS)}, got {name!r}"
                                       + (f" (did you mean {hint[0]!r}?)" if hint else ""))
    law_cls = LAWS[name]
    if eq.reversible != law_cls.reversible:
        raise StudyError(t.key("law"), "a law for reversible reactions (reversible) with a '<=>' equation"
                         if eq.reversible else
                         f"a '<=>' equation for law {name!r}; {eq_text!r} is written with '->'")
    for other in LAW_KEYS:
        if other not in law_cls.keys and other not in _COMMON_KEYS and t.has(other):
            owners = [n for n, c in LAWS.items() if other in c.keys]
            raise StudyError(t.key(other), f"only for law = {' or '.join(repr(o) for o in owners)}")

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
    k_unit = unit_text(t.data["k"] if has_k else t.data["A"])
    if has_k:
        k = rate_constant_to_si(t.take("k"), law_cls.k_power(total), t.key("k"))
        if k <= 0:
            raise StudyError(t.key("k"), f"a positive rate constant, got {t.data['k']!r}")
        if T_ref_si is None and Ea_si != 0:
            raise StudyError(t.key("T_ref"), "the temperature at which k is given (with Ea); the key is missing")
        T_ref_si = T_ref_si or 298.15
        rate = Arrhenius(math.log(k), T_ref_si, Ea_si)
    else:
        A = rate_constant_to_si(t.take("A"), law_cls.k_power(total), t.key("A"))
        if A <= 0:
            raise StudyError(t.key("A"), f"a positive pre-exponential factor, got {t.data['A']!r}")
        T_ref_si = T_ref_si or 298.15
        # k(T_ref) = A exp(-Ea/(R T_ref)), kept as a logarithm: no underflow for large Ea.
        rate = Arrhenius(math.log(A) - Ea_si / (GAS_CONSTANT * T_ref_si), T_ref_si, Ea_si)

    dH = t.take("dH", None)
    dH_si = to_si(dH, "molar_energy", t.key("dH")) if dH is not None else None
    ctx = LawContext(eq.reactants, eq.products, orders, total, T_ref_si, frozenset(symbols),
                     lambda table, key, default: _orders(table, key, default, symbols))
    law = law_cls.read(t, ctx)
    t.take("id"), t.take("label", "")
    t.close(_REACTION_KEYS)
    return Reaction(id=raw.id, equation=eq_text, reactants=eq.reactants, products=eq.products, orders=orders,
                    k=rate, law=law, dH=dH_si, k_unit=k_unit)


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
