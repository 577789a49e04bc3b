"""Sweep variations in the study file: paths such as "reaction.over.Ea" parsed (never evaluated) and checked.

Paths:
  reaction.<id>.k        rate constant at T_ref (units of the reaction's order)
  reaction.<id>.k_factor multiplier on k (catalyst activity); reaction.*.k_factor scales every reaction
  reaction.<id>.Ea       activation energy (k at T_ref kept)
  reaction.<id>.dH       heat of reaction
  reaction.<id>.<law>    a constant of the reaction's rate law (study/laws.py: K for reversible, K.<s> and dH.<s>
                         for the adsorption laws)
  feed.conc.<species>    inlet concentration (liquid)
  feed.flow              volumetric feed flow
  feed.T                 feed temperature
  operate.<decision>     fixes a decision (tau, T, T.<zone>, T_in, T_cool, ratio.<species>)
  species.<s>.Cp         molar heat capacity
  reactor.U              wall heat-transfer coefficient

A fit may also set reaction.<id>.order.<s>, a forward order (structural in the reactor models: never swept).
"""

from __future__ import annotations

import math
from dataclasses import replace

from tubeyield.errors import StudyError
from tubeyield.study.schema import Study, Variation
from tubeyield.study.units import rate_constant_to_si, to_si, unit_text

DISTRIBUTIONS = {"normal": 2, "lognormal": 2, "uniform": 2, "triangular": 3}


def _path_kind(path: str, key: str, study: Study):
    """(quantity kind, concentration power for rate constants) of a path; a StudyError if the path is unknown."""
    parts = path.split(".")
    head = parts[0]
    if head == "reaction" and len(parts) >= 3:
        rid, attr = parts[1], ".".join(parts[2:])
        if rid != "*" and rid not in {r.id for r in study.reactions}:
            raise StudyError(key, f"a reaction id after 'reaction.', got {rid!r} "
                                  f"(reactions: {', '.join(r.id for r in study.reactions)})")
        if rid == "*" and attr != "k_factor":
            raise StudyError(key, "'reaction.*' only with k_factor (a common multiplier on every rate constant)")
        if attr == "k":
            return "rate", study.reaction(rid).k_power
        kinds = {"k_factor": "dimensionless", "Ea": "molar_energy", "dH": "molar_energy"}
        if attr in kinds:
            return kinds[attr], None
        law_paths = study.reaction(rid).law.paths()
        if attr in law_paths:
            lp = law_paths[attr]
            return lp.kind, lp.power
        raise StudyError(key, f"one of {', '.join(['k', 'k_factor', 'Ea', 'dH'] + list(law_paths))} after "
                              f"'reaction.{rid}.', got {attr!r}")
    if head == "feed" and len(parts) == 3 and parts[1] == "conc":
        if study.feed.phase != "liquid":
            raise StudyError(key, "feed.conc.<species> only for a liquid feed")
        if parts[2] not in study.symbols:
            raise StudyError(key, f"a species after 'feed.conc.', got {parts[2]!r}")
        return "concentration", None
    if head == "feed" and len(parts) == 2 and parts[1] in ("flow", "T"):
        return ("flow" if parts[1] == "flow" else "temperature"), None
    if head == "operate" and len(parts) >= 2:
        name = ".".join(parts[1:])
        names = [d.name for d in study.decisions]
        if name not in names:
            raise StudyError(key, f"a decision after 'operate.', one of {', '.join(names)}; got {name!r}")
        d = study.decision(name)
        return {"s": "time", "K": "temperature", "": "dimensionless"}[d.si_unit], None
    if head == "species" and len(parts) == 3 and parts[2] == "Cp":
        if parts[1] not in study.symbols:
            raise StudyError(key, f"a species after 'species.', got {parts[1]!r}")
        return "molar_heat_capacity", None
    if path == "reactor.U":
        return "heat_transfer", None
    raise StudyError(key, "a study path such as reaction.<id>.Ea, reaction.<id>.k, reaction.*.k_factor, "
                          f"feed.conc.<species>, feed.flow, feed.T, operate.<decision>, species.<s>.Cp or reactor.U; got {path!r}")


def _value(v, kind, power, key):
    if kind == "rate":
        return rate_constant_to_si(v, power, key)
    if kind == "constant":                     # concentration^power, no time (equilibrium, adsorption constants)
        return rate_constant_to_si(v, power, key, per="none")
    return to_si(v, kind, key)


def parse_variation(path: str, body, key: str, study: Study) -> Variation:
    kind, power = _path_kind(path, key, study)
    if not isinstance(body, dict) or len(body) != 1:
        raise StudyError(key, "one of { values = [...] } or a distribution { normal = [mean, sd] }, "
                              "{ lognormal = [median, sigma_ln] }, { uniform = [low, high] }, "
                              "{ triangular = [low, mode, high] }")
    (form, args), = body.items()
    if not isinstance(args, list):
        raise StudyError(f"{key}.{form}", f"a list, got {args!r}")
    if form == "values":
        if not args:
            raise StudyError(f"{key}.values", "at least one value")
        values = tuple(_value(v, kind, power, f"{key}.values[{i}]") for i, v in enumerate(args))
        return Variation(path, values=values, unit=unit_text(args[0]))
    if form not in DISTRIBUTIONS:
        raise StudyError(f"{key}.{form}", f"'values' or a distribution ({', '.join(DISTRIBUTIONS)}), got {form!r}")
    if len(args) != DISTRIBUTIONS[form]:
        raise StudyError(f"{key}.{form}", f"{DISTRIBUTIONS[form]} parameters, got {len(args)}")
    if form == "lognormal":
        median = _value(args[0], kind, power, f"{key}.{form}[0]")
        sigma = to_si(args[1], "dimensionless", f"{key}.{form}[1]")
        if median <= 0 or sigma <= 0:
            raise StudyError(f"{key}.{form}", "a positive median and a positive sigma of ln")
        params = (median, sigma)
    else:
        params = tuple(_value(v, kind, power, f"{key}.{form}[{i}]") for i, v in enumerate(args))
        if form == "normal" and params[1] <= 0:
            raise StudyError(f"{key}.{form}[1]", "a positive standard deviation")
        if form == "uniform" and params[0] >= params[1]:
            raise StudyError(f"{key}.{form}", f"low < high, got {args!r}")
        if form == "triangular" and not params[0] <= params[1] <= params[2] or form == "triangular" and params[0] == params[2]:
            raise StudyError(f"{key}.{form}", f"low <= mode <= high with low < high, got {args!r}")
    return Variation(path, distribution=form, parameters=params, unit=unit_text(args[0]))


# ------------------------------------------------------------------------------------------------ applying them


def apply_values(study: Study, values: dict[str, float]) -> Study:
    """The study with each path set to its SI value. Paths were validated when the sweep was read. Factors
    (k_factor) act last, on the values set here, whatever the order of the paths: a scenario that sets a rate
    constant (drawn from a fit) and a catalyst activity gets k = k_drawn * factor."""
    ordered = sorted(values.items(), key=lambda item: item[0].endswith(".k_factor"))
    for path, v in ordered:
        study = _apply(study, path, float(v))
    return study


def _apply(study: Study, path: str, v: float) -> Study:
    parts = path.split(".")
    if parts[0] == "reaction":
        rid, attr = parts[1], ".".join(parts[2:])
        if attr in ("k", "k_factor") and v <= 0:
            raise StudyError(path, f"a positive value; sampled {v:g}")
        rs = []
        for r in study.reactions:
            if rid in ("*", r.id):
                if attr == "k":
                    r = replace(r, k=replace(r.k, ln_k_ref=math.log(v)))
                elif attr == "k_factor":
                    r = replace(r, k=replace(r.k, ln_k_ref=r.k.ln_k_ref + math.log(v)))
                elif attr == "Ea":
                    r = replace(r, k=replace(r.k, Ea=v))
                elif attr == "dH":
                    r = replace(r, dH=v)
                elif attr.startswith("order."):             # a forward order (fits only: structural in models)
                    s = attr[len("order."):]
                    # k keeps its SI value; its unit changes with the order, so it is shown in SI from now on
                    r = replace(r, orders=tuple((q, v if q == s else n) for q, n in r.orders), k_unit="")
                else:                                   # a constant of the rate law (study/laws.py)
                    try:
                        r = replace(r, law=r.law.with_path(attr, v))
                    except StudyError as exc:
                        raise StudyError(path, exc.expected) from None
            rs.append(r)
        return replace(study, reactions=tuple(rs))
    if parts[0] == "feed":
        if parts[1] == "conc":
            conc = dict(study.feed.conc)
            conc[parts[2]] = v
            return replace(study, feed=replace(study.feed, conc=tuple(conc.items())))
        return replace(study, feed=replace(study.feed, **{parts[1]: v}))
    if parts[0] == "operate":
        return study.with_decisions({".".join(parts[1:]): v})
    if parts[0] == "species":
        sp = tuple(replace(s, Cp=v) if s.symbol == parts[1] else s for s in study.species)
        return replace(study, species=sp)
    if path == "reactor.U":
        return replace(study, reactor=replace(study.reactor, U=v))
    raise KeyError(path)
