"""The study's numbers that a sweep may change, by name, and reactions whose constants are those parameters.

In the Pyomo model each parameter is a variable pinned by equal bounds; the solver plug-in hands pinned variables to
casadi as parameters, so a new scenario changes bounds only and reuses the built solver. In the reference
simulation the same names hold plain floats.
"""

from __future__ import annotations

from dataclasses import replace

from tubeyield.study.kinetics import Arrhenius
from tubeyield.study.schema import Reaction, Study


def study_parameters(study: Study) -> dict[str, float]:
    """Every number the balances use that is not structural, in SI: kinetics, heat effects, feed, heat transfer."""
    p: dict[str, float] = {}
    for r in study.reactions:
        p[f"lnk:{r.id}"] = r.k.ln_k_ref
        p[f"Ea:{r.id}"] = r.k.Ea
        p[f"dH:{r.id}"] = r.dH or 0.0
        for name, v in r.law.constants().items():       # the law's own constants (study/laws.py)
            p[f"law:{r.id}:{name}"] = v
    inlet = study.feed.inlet()
    for s in study.symbols:
        p[f"in:{s}"] = inlet.get(s, 0.0)
        p[f"Cp:{s}"] = next(sp.Cp for sp in study.species if sp.symbol == s) or 0.0
    p["U"] = study.reactor.U or 0.0
    p["flow"] = study.feed.flow
    if study.feed.phase == "gas":
        p["P"] = study.feed.pressure
    if study.feed.T is not None:
        p["T_feed"] = study.feed.T
    return p


def parametric_reactions(study: Study, par) -> tuple[Reaction, ...]:
    """The study's reactions with their constants replaced by `par[name]` (Pyomo variables or floats).

    The reaction's own `rate_expression` then builds the rate from these objects, so the kinetics code is shared.
    """
    out = []
    for r in study.reactions:
        k = Arrhenius(par[f"lnk:{r.id}"], r.k.T_ref, par[f"Ea:{r.id}"])
        law = r.law.with_constants({name: par[f"law:{r.id}:{name}"] for name in r.law.constants()})
        # forward orders are structural in the reactor models; a fit that estimates one passes order:<id>:<s>
        orders = tuple((s, par.get(f"order:{r.id}:{s}", n)) for s, n in r.orders)
        out.append(replace(r, k=k, law=law, dH=par[f"dH:{r.id}"], orders=orders))
    return tuple(out)
