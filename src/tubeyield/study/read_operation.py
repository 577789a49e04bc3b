"""How the reactor runs: [feed], [reactor] and [operate] (the decisions) -> Feed, Reactor, Decision (SI)."""

from __future__ import annotations

import math

from tubeyield.errors import StudyError
from tubeyield.study import caps
from tubeyield.study.modes import HEAT_MODES, REACTOR_KINDS
from tubeyield.study.schema import Decision, Feed, Reactor
from tubeyield.study.toml import Table, number
from tubeyield.study.units import to_si, unit_text

PHASES = ("liquid", "gas")


def read_feed(t: Table, symbols: set[str]) -> Feed:
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
        y = number(v, key, low=0.0)
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


def read_reactor(t: Table) -> Reactor:
    kind = t.take("kind", "plug", types=str)
    if kind not in REACTOR_KINDS:
        raise StudyError(t.key("kind"), f"one of {', '.join(REACTOR_KINDS)}, got {kind!r}")
    heat = t.take("heat", "isothermal", types=str)
    if heat not in HEAT_MODES:
        raise StudyError(t.key("heat"), f"one of {', '.join(HEAT_MODES)}, got {heat!r}")
    if not REACTOR_KINDS[kind].axial and HEAT_MODES[heat].axial_only:
        allowed = [h for h, m in HEAT_MODES.items() if not m.axial_only]
        raise StudyError(t.key("heat"), f"{', '.join(repr(h) for h in allowed)} for a {kind} reactor; "
                                        f"'{heat}' needs a tube (kind = 'plug')")
    elements = int(number(t.take("elements", 40), t.key("elements"), low=1, integer=True))
    points = int(number(t.take("points", 3), t.key("points"), low=1, integer=True))
    if points > 10:
        raise StudyError(t.key("points"), f"1 to 10 collocation points per element, got {points}")
    caps.at_most(elements, caps.MAX_ELEMENTS, t.key("elements"), "a number of elements")
    zones = int(number(t.take("zones", 1 if heat != "zones" else 4), t.key("zones"), low=1, integer=True))
    if heat != "zones" and t.has("zones"):
        raise StudyError(t.key("zones"), "only for heat = 'zones'")
    tanks = int(number(t.take("tanks", 3 if REACTOR_KINDS[kind].tanks else 1), t.key("tanks"), low=1, integer=True))
    caps.at_most(zones, caps.MAX_ZONES, t.key("zones"), "a number of zones")
    caps.at_most(tanks, caps.MAX_TANKS, t.key("tanks"), "a number of tanks")
    if not REACTOR_KINDS[kind].tanks and t.has("tanks"):
        raise StudyError(t.key("tanks"), "only for kind = 'stirred-series'")
    U = t.take("U", None)
    U = to_si(U, "heat_transfer", t.key("U")) if U is not None else None
    d = t.take("diameter", None)
    d = to_si(d, "length", t.key("diameter")) if d is not None else None
    if HEAT_MODES[heat].wall and (U is None or d is None):
        missing = "U" if U is None else "diameter"
        raise StudyError(t.key(missing), "a wall heat-transfer coefficient U and a tube diameter for heat = 'cooled'")
    if d is not None and d <= 0:
        raise StudyError(t.key("diameter"), "a positive diameter")
    if U is not None and U < 0:
        raise StudyError(t.key("U"), "a non-negative heat-transfer coefficient")
    grading = number(t.take("grading", 1.0), t.key("grading"))
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


def read_operate(t: Table, reactor: Reactor, feed: Feed, symbols: set[str]) -> list[Decision]:
    t.close(_OPERATE_KEYS)
    if not t.has("tau"):
        raise StudyError(t.key("tau"), "the residence time, a value '2 min' or a range ['10 s', '60 min']")
    out = [_decision(t.data["tau"], t.key("tau"), "tau", "time", "s")]
    heat = reactor.heat
    needs_T = "T" in reactor.mode.decisions
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
        if reactor.mode.wall:
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
