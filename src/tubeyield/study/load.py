"""TOML study file -> Study (SI units), with errors that name the file, the key path and what was expected.

Every key a table may hold is listed where the table is read; anything else is an error with a did-you-mean hint, so a
misspelt key never silently falls back to a default.
"""

from __future__ import annotations

import difflib
import math
import tomllib
from dataclasses import replace
from pathlib import Path

from tubeyield.errors import StudyError
from tubeyield.study.equation import SYMBOL, parse_equation
from tubeyield.study.metric import Metric, parse_limit, parse_metric
from tubeyield.study.schema import (Arrhenius, Decision, Feed, FrontSpec, Goal, Numerics, Reaction, Reactor,
                                    Species, Study, SweepSpec, VantHoff, Variation, WindowSpec)
from tubeyield.study.units import parse_quantity, rate_constant_to_si, to_si, unit_text

LAWS = ("power", "reversible", "adsorption")
PHASES = ("liquid", "gas")
KINDS = ("plug", "stirred", "stirred-series")
HEAT = ("isothermal", "zones", "free", "adiabatic", "cooled")
RUNS = ("optimize", "front", "evaluate")


class Table:
    """A TOML table with its key path; `take` reads a key, `close` rejects any key not read."""

    def __init__(self, data, path: str):
        if not isinstance(data, dict):
            raise StudyError(path, f"a table (key = value pairs), got {type(data).__name__} {data!r}")
        self.data = data
        self.path = path
        self.seen: set[str] = set()

    def key(self, name: str) -> str:
        return f"{self.path}.{name}" if self.path else name

    def has(self, name: str) -> bool:
        return name in self.data

    def take(self, name: str, default=..., *, types=None, what: str | None = None):
        self.seen.add(name)
        if name not in self.data:
            if default is ...:
                raise StudyError(self.key(name), f"{what or 'a value'}; the key is missing")
            return default
        value = self.data[name]
        if types is not None and (not isinstance(value, types) or isinstance(value, bool) and bool not in _tuple(types)):
            raise StudyError(self.key(name), f"{what or _type_names(types)}, got {value!r}")
        return value

    def table(self, name: str, default=..., *, what: str | None = None) -> "Table | None":
        value = self.take(name, default, what=what or f"a [{self.key(name)}] table")
        if value is None:
            return None
        return Table(value, self.key(name))

    def close(self, allowed: tuple[str, ...] | None = None) -> None:
        known = tuple(allowed) if allowed is not None else tuple(self.seen)
        for k in self.data:
            if k not in self.seen and k not in known:
                hint = difflib.get_close_matches(k, known, n=1, cutoff=0.6)
                extra = f"; did you mean '{hint[0]}'?" if hint else (f"; known keys: {', '.join(sorted(known))}" if known else "")
                raise StudyError(self.key(k), f"no such key here{extra}")


def _tuple(t):
    return t if isinstance(t, tuple) else (t,)


def _type_names(types) -> str:
    names = {str: "a string", int: "an integer", float: "a number", bool: "true or false", list: "a list", dict: "a table"}
    return " or ".join(names.get(t, t.__name__) for t in _tuple(types))


def _number(value, key: str, *, low: float | None = None, integer: bool = False) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise StudyError(key, f"{'an integer' if integer else 'a number'}, got {value!r}")
    if integer and not float(value).is_integer():
        raise StudyError(key, f"an integer, got {value!r}")
    if not math.isfinite(value):
        raise StudyError(key, f"a finite number, got {value!r}")
    if low is not None and value < low:
        raise StudyError(key, f"a number >= {low:g}, got {value!r}")
    return float(value)


# ----------------------------------------------------------------------------------------------------------- files


def load_study(path) -> Study:
    """Read a study file. Every user mistake comes out as a StudyError naming the file."""
    path = Path(path)
    doc, text = _read_toml(path)
    try:
        return study_from_dict(doc, path=str(path), source=text)
    except StudyError as exc:
        raise exc.in_file(str(path)) from None


def _read_toml(path: Path) -> tuple[dict, str]:
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise StudyError("", "an existing study file; no such file", file=str(path)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise StudyError("", f"a readable UTF-8 text file ({exc.__class__.__name__}: {exc})", file=str(path)) from None
    try:
        return tomllib.loads(text), text
    except tomllib.TOMLDecodeError as exc:
        raise StudyError("", f"valid TOML ({exc})", file=str(path)) from None


TOP_KEYS = ("study", "species", "reaction", "feed", "reactor", "operate", "goal", "front", "window", "sweep", "numerics")


def study_from_dict(doc: dict, *, path: str = "", source: str = "") -> Study:
    top = Table(doc, "")
    head = top.table("study", {})
    name = head.take("name", Path(path).stem or "study", types=str)
    description = head.take("description", "", types=str)
    include = head.take("include", None, types=(str, list), what="a network file path or a list of them")
    head.close()

    species: list[Species] = []
    reactions: list[Reaction] = []
    includes: list[tuple[str, str]] = []
    for inc in ([include] if isinstance(include, str) else include or []):
        if not isinstance(inc, str):
            raise StudyError("study.include", f"file paths as strings, got {inc!r}")
        inc_path = (Path(path).parent / inc) if path else Path(inc)
        if not inc_path.is_file():
            raise StudyError("study.include", f"an existing network file; {str(inc_path)!r} does not exist")
        inc_doc, inc_text = _read_toml(inc_path)
        try:
            net = Table(inc_doc, "")
            species += _read_species(net.take("species", {}, types=dict, what="a table of species"), "species")
            included = _read_reactions(net.take("reaction", [], types=list, what="[[reaction]] entries"))
            for r in included:
                r.file = str(inc_path)
            reactions += included
            net.close(("species", "reaction", "study"))
        except StudyError as exc:
            raise exc.in_file(str(inc_path)) from None
        includes.append((str(inc_path), inc_text))

    own_species = _read_species(top.take("species", {}, types=dict, what="a table of species"), "species")
    _merge_unique(species, own_species, "species", lambda s: s.symbol)
    symbols = {s.symbol for s in species}
    if not symbols:
        raise StudyError("species", "at least one species, e.g. [species.A]")
    own_reactions = _read_reactions(top.take("reaction", [], types=list, what="[[reaction]] entries"))
    _merge_unique(reactions, own_reactions, "reaction", lambda r: r.id)
    if not reactions:
        raise StudyError("reaction", "at least one [[reaction]]; the network is empty")
    resolved = []
    for i, r in enumerate(reactions):
        try:
            resolved.append(_resolve_reaction(r, symbols, i))
        except StudyError as exc:
            raise (exc.in_file(r.file) if r.file else exc) from None
    reactions = resolved

    by_symbol = {s.symbol: s for s in species}
    feed = _read_feed(top.table("feed"), symbols)
    reactor = _read_reactor(top.table("reactor", {}))
    decisions = _read_operate(top.table("operate"), reactor, feed, symbols)
    goal = _read_goal(top.table("goal"), symbols, reactions, feed, decisions)
    front = _read_front(top.table("front", None), symbols)
    window = _read_window(top.table("window", None), decisions)
    numerics = _read_numerics(top.table("numerics", {}))
    top.close(TOP_KEYS)

    _check_heat_needs(reactor, reactions, by_symbol, feed, decisions)
    study = Study(name=name, species=tuple(species), reactions=tuple(reactions), feed=feed, reactor=reactor,
                  decisions=tuple(decisions), goal=goal, front=front, window=window, numerics=numerics,
                  description=description, path=path, source=source, includes=tuple(includes))
    sweep = _read_sweep(top.table("sweep", None), study)
    return replace(study, sweep=sweep) if sweep else study


def _merge_unique(into: list, new: list, where: str, ident) -> None:
    seen = {ident(x) for x in into}
    for x in new:
        if ident(x) in seen:
            raise StudyError(f"{where}.{ident(x)}", "a unique id; it is defined twice (here and in an included file)")
        seen.add(ident(x))
        into.append(x)


# --------------------------------------------------------------------------------------------------------- species


def _read_species(data: dict, path: str) -> list[Species]:
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


def _read_reactions(entries: list) -> list["_RawReaction"]:
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


def _resolve_reaction(raw, symbols: set[str], index: int) -> Reaction:
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
        from tubeyield.study.schema import GAS_CONSTANT
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
        power = _number(t.take("denominator_power", 1.0), t.key("denominator_power"), low=0.0)
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
        n = _number(n, key)
        if n < 0:
            raise StudyError(key, f"a non-negative order, got {n:g} (a negative order makes the rate infinite as the "
                                  "concentration falls to zero; use law = 'adsorption' for inhibition)")
        out.append((s, n))
    return tuple(out)


# ------------------------------------------------------------------------------------------------------------ feed


def _read_feed(t: Table, symbols: set[str]) -> Feed:
    phase = t.take("phase", "liquid", types=str)
    if phase not in PHASES:
        raise StudyError(t.key("phase"), f"one of {', '.join(PHASES)}, got {phase!r}")
    flow = to_si(t.take("flow", what="the volumetric feed flow such as '2 L/min'"), "flow", t.key("flow"))
    if flow <= 0:
        raise StudyError(t.key("flow"), f"a positive flow, got {t.data['flow']!r}")
    T = t.take("T", None)
    T = to_si(T, "temperature", t.key("T")) if T is not None else None
    if T is not None and T <= 0:
        raise StudyError(t.key("T"), "an absolute temperature above 0 K")
    if phase == "liquid":
        conc_t = t.table("conc", what="inlet concentrations such as { A = '1 mol/L' }")
        conc = []
        for s, v in conc_t.data.items():
            key = conc_t.key(s)
            if s not in symbols:
                raise StudyError(key, f"a species of the network, got {s!r}")
            c = to_si(v, "concentration", key)
            if c < 0:
                raise StudyError(key, f"a non-negative concentration, got {v!r}")
            conc.append((s, c))
        conc_t.seen.update(conc_t.data)
        if not any(c > 0 for _, c in conc):
            raise StudyError(conc_t.path, "at least one species with a positive inlet concentration")
        for bad in ("pressure", "fractions", "balance"):
            if t.has(bad):
                raise StudyError(t.key(bad), "only for phase = 'gas'")
        t.close(("phase", "flow", "T", "conc"))
        return Feed("liquid", flow, tuple(conc), T=T)
    if t.has("conc"):
        raise StudyError(t.key("conc"), "for a gas feed, mole 'fractions' and 'pressure' instead of concentrations")
    pressure = to_si(t.take("pressure", what="the pressure such as '2 bar'"), "pressure", t.key("pressure"))
    if pressure <= 0:
        raise StudyError(t.key("pressure"), "a positive absolute pressure")
    frac_t = t.table("fractions", what="inlet mole fractions such as { A = 0.2, N2 = 0.8 }")
    balance = t.take("balance", None, types=str)
    fractions = []
    for s, v in frac_t.data.items():
        key = frac_t.key(s)
        if s not in symbols:
            raise StudyError(key, f"a species of the network, got {s!r}")
        y = _number(v, key, low=0.0)
        if y > 1:
            raise StudyError(key, f"a mole fraction between 0 and 1, got {v!r}")
        fractions.append((s, y))
    frac_t.seen.update(frac_t.data)
    total = sum(y for _, y in fractions)
    if balance is not None:
        if balance not in symbols:
            raise StudyError(t.key("balance"), f"a species of the network, got {balance!r}")
        if balance in dict(fractions):
            raise StudyError(t.key("balance"), f"a species without its own fraction; {balance!r} has one")
        if total > 1 + 1e-12:
            raise StudyError(frac_t.path, f"fractions summing to at most 1 (the balance takes the rest), sum is {total:g}")
        fractions.append((balance, max(0.0, 1.0 - total)))
    elif abs(total - 1) > 1e-9:
        raise StudyError(frac_t.path, f"mole fractions summing to 1 (or a 'balance' species), sum is {total:g}")
    t.close(("phase", "flow", "T", "pressure", "fractions", "balance"))
    return Feed("gas", flow, (), pressure, tuple(fractions), balance, T)


# --------------------------------------------------------------------------------------------------------- reactor


def _read_reactor(t: Table) -> Reactor:
    kind = t.take("kind", "plug", types=str)
    if kind not in KINDS:
        raise StudyError(t.key("kind"), f"one of {', '.join(KINDS)}, got {kind!r}")
    heat = t.take("heat", "isothermal", types=str)
    if heat not in HEAT:
        raise StudyError(t.key("heat"), f"one of {', '.join(HEAT)}, got {heat!r}")
    if kind != "plug" and heat in ("zones", "free"):
        raise StudyError(t.key("heat"), f"'isothermal', 'adiabatic' or 'cooled' for a {kind} reactor; "
                                        f"'{heat}' needs kind = 'plug'")
    elements = int(_number(t.take("elements", 40), t.key("elements"), low=1, integer=True))
    points = int(_number(t.take("points", 3), t.key("points"), low=1, integer=True))
    if points > 10:
        raise StudyError(t.key("points"), f"1 to 10 collocation points per element, got {points}")
    zones = int(_number(t.take("zones", 1 if heat != "zones" else 4), t.key("zones"), low=1, integer=True))
    if heat != "zones" and t.has("zones"):
        raise StudyError(t.key("zones"), "only for heat = 'zones'")
    tanks = int(_number(t.take("tanks", 1 if kind != "stirred-series" else 3), t.key("tanks"), low=1, integer=True))
    if kind != "stirred-series" and t.has("tanks"):
        raise StudyError(t.key("tanks"), "only for kind = 'stirred-series'")
    U = t.take("U", None)
    U = to_si(U, "heat_transfer", t.key("U")) if U is not None else None
    d = t.take("diameter", None)
    d = to_si(d, "length", t.key("diameter")) if d is not None else None
    if heat == "cooled" and (U is None or d is None):
        missing = "U" if U is None else "diameter"
        raise StudyError(t.key(missing), "a wall heat-transfer coefficient U and a tube diameter for heat = 'cooled'")
    if d is not None and d <= 0:
        raise StudyError(t.key("diameter"), "a positive diameter")
    if U is not None and U < 0:
        raise StudyError(t.key("U"), "a non-negative heat-transfer coefficient")
    grading = _number(t.take("grading", 1.0), t.key("grading"))
    if grading <= 0:
        raise StudyError(t.key("grading"), f"a positive ratio of last to first element length, got {grading:g}")
    if heat == "zones" and elements % zones:
        elements = zones * math.ceil(elements / zones)  # each zone holds whole elements
    t.close()
    return Reactor(kind, heat, elements, points, zones, tanks, U, d, grading)


# --------------------------------------------------------------------------------------------------------- operate

_OPERATE_KEYS = ("tau", "T", "T_in", "T_cool", "ratio")


def _decision(value, key: str, name: str, kind: str, si_unit: str) -> Decision:
    """A single value fixes the decision; a list [low, high] lets the optimizer choose within it."""
    if isinstance(value, list):
        if len(value) != 2:
            raise StudyError(key, f"a range [low, high] or a single value, got {value!r}")
        low, high = (to_si(v, kind, f"{key}[{i}]") for i, v in enumerate(value))
        unit = unit_text(value[1]) or unit_text(value[0])
        if low > high:
            raise StudyError(key, f"a range with low <= high, got {value!r}")
    else:
        low = high = to_si(value, kind, key)
        unit = unit_text(value)
    if kind == "temperature" and low <= 0:
        raise StudyError(key, "absolute temperatures above 0 K")
    if kind == "time" and low <= 0:
        raise StudyError(key, f"a positive residence time, got {value!r}")
    if kind == "dimensionless" and low < 0:
        raise StudyError(key, f"a non-negative ratio, got {value!r}")
    return Decision(name, low, high, unit, si_unit)


def _read_operate(t: Table, reactor: Reactor, feed: Feed, symbols: set[str]) -> list[Decision]:
    t.close(_OPERATE_KEYS)
    if not t.has("tau"):
        raise StudyError(t.key("tau"), "the residence time, a value '2 min' or a range ['10 s', '60 min']")
    out = [_decision(t.data["tau"], t.key("tau"), "tau", "time", "s")]
    heat = reactor.heat
    needs_T = heat in ("isothermal", "zones", "free")
    if needs_T:
        if not t.has("T"):
            raise StudyError(t.key("T"), f"the reactor temperature (value or range) for heat = '{heat}'")
        for bad in ("T_in", "T_cool"):
            if t.has(bad):
                raise StudyError(t.key(bad), f"only for heat = 'adiabatic' or 'cooled' (the feed enters at T for '{heat}')")
        T = _decision(t.data["T"], t.key("T"), "T", "temperature", "K")
        if heat == "zones":
            out += [Decision(f"T.{i + 1}", T.low, T.high, T.unit, "K") for i in range(reactor.zones)]
        else:
            out.append(T)
    else:
        if t.has("T"):
            raise StudyError(t.key("T"), f"no reactor temperature for heat = '{heat}' (it follows from the energy "
                                         "balance); set the inlet temperature T_in")
        if t.has("T_in"):
            out.append(_decision(t.data["T_in"], t.key("T_in"), "T_in", "temperature", "K"))
        elif feed.T is not None:
            out.append(Decision("T_in", feed.T, feed.T, "K", "K"))
        else:
            raise StudyError(t.key("T_in"), f"the inlet temperature (operate.T_in or feed.T) for heat = '{heat}'")
        if heat == "cooled":
            if not t.has("T_cool"):
                raise StudyError(t.key("T_cool"), "the coolant temperature for heat = 'cooled'")
            out.append(_decision(t.data["T_cool"], t.key("T_cool"), "T_cool", "temperature", "K"))
        elif t.has("T_cool"):
            raise StudyError(t.key("T_cool"), "only for heat = 'cooled'")
    ratio = t.take("ratio", {}, types=dict, what="a table of feed ratios such as { O = [0.5, 3.0] }")
    inlet = feed.inlet()
    for s in ratio:
        key = f"{t.key('ratio')}.{s}"
        if s not in symbols:
            raise StudyError(key, f"a species of the network, got {s!r}")
        if s in inlet and not (feed.phase == "gas" and s == feed.balance):
            raise StudyError(key, f"either feed.{'conc' if feed.phase == 'liquid' else 'fractions'}.{s} or a feed "
                                  f"ratio for {s}, not both")
        if feed.phase == "gas" and (feed.balance is None or feed.balance == s):
            raise StudyError(key, "a 'balance' species in the gas feed (other than the ratio species) to take up the "
                                  "change in fractions")
        out.append(_decision(ratio[s], key, f"ratio.{s}", "dimensionless", ""))
    return out


# ------------------------------------------------------------------------------------------------------------ goal


def _read_goal(t: Table, symbols: set[str], reactions, feed: Feed, decisions) -> Goal:
    has_max, has_min = t.has("maximize"), t.has("minimize")
    if has_max == has_min:
        raise StudyError(t.key("maximize"), "exactly one of maximize or minimize, e.g. maximize = 'yield:B'")
    sense = "max" if has_max else "min"
    metric = parse_metric(t.take("maximize" if has_max else "minimize"), t.key("maximize" if has_max else "minimize"), symbols)
    fed = {s for s, v in feed.inlet().items() if v > 0} | {d.name[6:] for d in decisions if d.name.startswith("ratio.")}
    default_key = next((s for r in reactions for s, _ in r.reactants if s in fed), None)
    key = t.take("key", default_key, types=str)
    if key is None:
        raise StudyError(t.key("key"), "the key reactant (a fed species that reacts); none could be inferred")
    if key not in symbols:
        raise StudyError(t.key("key"), f"a species of the network, got {key!r}")
    if key not in fed:
        raise StudyError(t.key("key"), f"a species present in the feed, {key!r} is not fed")
    if key in {d.name[6:] for d in decisions if d.name.startswith("ratio.")}:
        raise StudyError(t.key("key"), f"a key reactant with its own feed concentration, not a ratio species ({key!r})")
    limits_raw = t.take("limits", [], types=list, what="a list of limits such as ['conversion:A >= 0.9']")
    limits = tuple(parse_limit(text, f"{t.key('limits')}[{i}]", symbols) for i, text in enumerate(limits_raw))
    value = _prices(t, "value", symbols)
    cost = _prices(t, "cost", symbols)
    currency = t.take("currency", "", types=str)
    if metric.kind == "margin" and not value:
        raise StudyError(t.key("value"), "values per mol of the products for the goal 'margin', e.g. { B = 30.0 }")
    t.close(("maximize", "minimize", "key", "limits", "value", "cost", "currency"))
    return Goal(metric, sense, key, limits, value, cost, currency)


def _prices(t: Table, name: str, symbols: set[str]) -> tuple[tuple[str, float], ...]:
    data = t.take(name, {}, types=dict, what="a table of prices per mol such as { B = 30.0 }")
    out = []
    for s, v in data.items():
        key = f"{t.key(name)}.{s}"
        if s not in symbols:
            raise StudyError(key, f"a species of the network, got {s!r}")
        out.append((s, _number(v, key)))
    return tuple(out)


# ------------------------------------------------------------------------------------------ front, window, numerics


def _read_front(t: Table | None, symbols: set[str]) -> FrontSpec | None:
    if t is None:
        return None
    x = parse_metric(t.take("x", what="the metric on the x axis, e.g. 'conversion:A'"), t.key("x"), symbols)
    y = parse_metric(t.take("y", what="the metric on the y axis, e.g. 'selectivity:B'"), t.key("y"), symbols)
    if x == y:
        raise StudyError(t.key("y"), "a metric other than x")
    points = int(_number(t.take("points", 21), t.key("points"), integer=True, low=3))
    senses = []
    for axis in ("x_sense", "y_sense"):
        v = t.take(axis, "max", types=str)
        if v not in ("max", "min"):
            raise StudyError(t.key(axis), f"'max' or 'min' (which way the metric is better), got {v!r}")
        senses.append(v)
    t.close()
    return FrontSpec(x, y, points, *senses)


def _read_window(t: Table | None, decisions) -> WindowSpec | None:
    if t is None:
        return None
    names = [d.name for d in decisions]
    axes = []
    for axis in ("x", "y"):
        name = t.take(axis, what=f"a decision for the {axis} axis, one of {', '.join(names)}", types=str)
        if name not in names:
            hint = difflib.get_close_matches(name, names, n=1)
            raise StudyError(t.key(axis), f"a decision, one of {', '.join(names)}, got {name!r}"
                                          + (f"; did you mean {hint[0]!r}?" if hint else ""))
        if next(d for d in decisions if d.name == name).fixed:
            raise StudyError(t.key(axis), f"a decision with a range; {name!r} is fixed in [operate]")
        axes.append(name)
    if axes[0] == axes[1]:
        raise StudyError(t.key("y"), "a decision other than x")
    pts = t.take("points", [60, 60], types=(list, int))
    pts = [pts, pts] if isinstance(pts, int) else pts
    if len(pts) != 2:
        raise StudyError(t.key("points"), f"[nx, ny] or one number, got {pts!r}")
    pts = tuple(int(_number(p, f"{t.key('points')}[{i}]", integer=True, low=2)) for i, p in enumerate(pts))
    others = t.take("others", "optimum", types=str)
    if others not in ("optimum", "optimized"):
        raise StudyError(t.key("others"), f"'optimum' (others fixed at the optimum) or 'optimized' (re-optimized in "
                                          f"every cell), got {others!r}")
    fix_t = t.table("fix", {})
    fix = []
    for name, v in fix_t.data.items():
        if name not in names or name in axes:
            raise StudyError(fix_t.key(name), f"a decision other than the two axes, one of "
                                              f"{', '.join(n for n in names if n not in axes)}")
        d = next(d for d in decisions if d.name == name)
        kind = {"s": "time", "K": "temperature", "": "dimensionless"}[d.si_unit]
        fix.append((name, to_si(v, kind, fix_t.key(name))))
    fix_t.seen.update(fix_t.data)
    t.close()
    return WindowSpec(axes[0], axes[1], pts, others, tuple(fix))


def _read_numerics(t: Table) -> Numerics:
    starts = int(_number(t.take("starts", 4), t.key("starts"), integer=True, low=1))
    tol = _number(t.take("check_tolerance", 1e-6), t.key("check_tolerance"))
    if not 0 < tol < 1:
        raise StudyError(t.key("check_tolerance"), f"a relative tolerance between 0 and 1, got {tol:g}")
    max_el = int(_number(t.take("max_elements", 640), t.key("max_elements"), integer=True, low=1))
    solver = t.take("solver", "bundled", types=str)
    if solver not in ("bundled", "executable"):
        raise StudyError(t.key("solver"), f"'bundled' (the Ipopt in the casadi wheel) or 'executable' (an ipopt on "
                                          f"PATH), got {solver!r}")
    ipopt = t.take("ipopt", {}, types=dict, what="a table of Ipopt options such as { max_iter = 500 }")
    from tubeyield.solve.options import user_option_problem
    for k, v in ipopt.items():
        problem = user_option_problem(k, v)
        if problem:
            raise StudyError(f"{t.key('ipopt')}.{k}", problem)
    t.close()
    return Numerics(starts, tol, max_el, solver, tuple(ipopt.items()))


def _read_sweep(t: Table | None, study: Study) -> SweepSpec | None:
    if t is None:
        return None
    from tubeyield.study.variation import parse_variation
    vary_t = t.table("vary", what="a table mapping study paths to values or distributions")
    vary = tuple(parse_variation(path, body, f"{vary_t.key(path)}", study) for path, body in vary_t.data.items())
    vary_t.seen.update(vary_t.data)
    if not vary:
        raise StudyError(vary_t.path, "at least one varied path, e.g. 'reaction.over.Ea' = { normal = [...] }")
    sampled = [v for v in vary if v.distribution]
    samples = int(_number(t.take("samples", 0), t.key("samples"), integer=True, low=0))
    if sampled and samples < 1:
        raise StudyError(t.key("samples"), "the number of samples (>= 1) for the distributions in 'vary'")
    seed = int(_number(t.take("seed", 0), t.key("seed"), integer=True, low=0))
    run = t.take("run", "optimize", types=str)
    if run not in RUNS:
        raise StudyError(t.key("run"), f"one of {', '.join(RUNS)}, got {run!r}")
    if run == "front" and study.front is None:
        raise StudyError(t.key("run"), "a [front] table for run = 'front'")
    time_limit = to_si(t.take("time_limit", "300 s"), "time", t.key("time_limit"))
    share = _number(t.take("share", 0.95), t.key("share"))
    if not 0 < share <= 1:
        raise StudyError(t.key("share"), f"a share between 0 and 1, got {share:g}")
    cand_t = t.table("candidates", {}, what="a table of named operating points, e.g. { safe = { tau = '5 min' } }")
    candidates = []
    for name, body in cand_t.data.items():
        key = cand_t.key(name)
        ct = Table(body, key)
        values = {}
        for d in study.decisions:
            kind = {"s": "time", "K": "temperature", "": "dimensionless"}[d.si_unit]
            if ct.has(d.name):
                values[d.name] = to_si(ct.take(d.name), kind, ct.key(d.name))
                if not d.low - 1e-12 * abs(d.low) <= values[d.name] <= d.high + 1e-12 * abs(d.high):
                    raise StudyError(ct.key(d.name), f"a value within the decision's range in [operate]")
            elif d.fixed:
                values[d.name] = d.low
            else:
                raise StudyError(ct.key(d.name), "a value for every decision with a range; the key is missing")
        ct.close(tuple(d.name for d in study.decisions))
        candidates.append((name, tuple(values.items())))
    cand_t.seen.update(cand_t.data)
    if run == "evaluate" and not candidates and any(not d.fixed for d in study.decisions):
        raise StudyError(t.key("candidates"), "named operating points to evaluate (run = 'evaluate'), or a study "
                                              "whose decisions are all fixed")
    t.close()
    return SweepSpec(vary, samples, seed, run, time_limit, share, tuple(candidates))


# ------------------------------------------------------------------------------------------------- cross checks


def _check_heat_needs(reactor: Reactor, reactions, species: dict[str, Species], feed: Feed, decisions) -> None:
    if reactor.heat in ("adiabatic", "cooled"):
        for r in reactions:
            if r.dH is None:
                raise StudyError(f"reaction.{r.id}.dH", f"the heat of reaction for heat = '{reactor.heat}'")
        for s in species.values():
            if s.Cp is None:
                raise StudyError(f"species.{s.symbol}.Cp", f"a molar heat capacity for heat = '{reactor.heat}'")
    if feed.phase == "gas" and reactor.heat == "free" and feed.T is None:
        raise StudyError("feed.T", "the feed temperature (at which the gas flow is measured) for heat = 'free'")
