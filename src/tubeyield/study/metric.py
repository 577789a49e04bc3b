"""Metrics ("yield:B") and limits ("conversion:A >= 0.9", "T <= 420 K").

Definitions (Levenspiel, Chemical Reaction Engineering, 3rd ed. 1999, ch. 7 and 8; Fogler, Elements of Chemical
Reaction Engineering, 5th ed. 2016, ch. 8), with F molar flows, 0 the inlet and A the key reactant:

- conversion:A     X_A = (F_A0 - F_A) / F_A0
- yield:B          Y_B = (F_B - F_B0) / F_A0 * f_B   (f_B: stoichiometric factor along the path from A to B, the
                   product of |nu_s| / nu_p over its reactions, chemistry.network.yield_paths)
- selectivity:B    S_B = (F_B - F_B0) / (F_A0 - F_A) * f_B   (overall selectivity)
- outlet:B         outlet concentration of B, mol/m^3 inside
- productivity:B   net production rate per reactor volume, (F_B - F_B0) / V, mol/(m^3 s) inside
- margin           (sum of product values - feed costs) per mol of key reactant fed, in the study's currency
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from tubeyield.errors import StudyError
from tubeyield.study.units import to_si, unit_text

METRIC_KINDS = ("conversion", "yield", "selectivity", "outlet", "productivity", "margin")
# SI unit of each metric kind, and the kind of quantity a limit bound must have.
SI_UNIT = {"conversion": "", "yield": "", "selectivity": "", "outlet": "mol/m^3", "productivity": "mol/(m^3*s)",
           "margin": "", "T": "K"}
_BOUND_KIND = {"conversion": "dimensionless", "yield": "dimensionless", "selectivity": "dimensionless",
               "outlet": "concentration", "margin": "dimensionless", "T": "temperature"}
_LIMIT = re.compile(r"^\s*([A-Za-z_][A-Za-z0-9_:]*)\s*(>=|<=)\s*(.+?)\s*$")


@dataclass(frozen=True)
class Metric:
    kind: str               # one of METRIC_KINDS
    species: str | None     # None for margin

    @property
    def text(self) -> str:
        return self.kind if self.species is None else f"{self.kind}:{self.species}"

    @property
    def si_unit(self) -> str:
        return SI_UNIT[self.kind]


@dataclass(frozen=True)
class Limit:
    """A limit on a metric at the outlet, or on the temperature everywhere along the reactor (metric None)."""
    text: str
    metric: Metric | None   # None: the temperature T along the whole reactor
    sense: str              # ">=" or "<="
    bound: float            # SI
    unit: str               # the user's unit of the bound, for reporting

    @property
    def name(self) -> str:
        return "T" if self.metric is None else self.metric.text


def parse_metric(text, key: str, species: set[str]) -> Metric:
    if not isinstance(text, str):
        raise StudyError(key, f"a metric such as 'yield:B', got {text!r}")
    t = text.strip()
    if t == "margin":
        return Metric("margin", None)
    kind, sep, sp = t.partition(":")
    if not sep or kind not in METRIC_KINDS or kind == "margin":
        raise StudyError(key, f"a metric of the form kind:species with kind one of "
                              f"{', '.join(k for k in METRIC_KINDS if k != 'margin')}, or 'margin'; got {text!r}")
    if sp not in species:
        raise StudyError(key, f"a species of the network after '{kind}:', got {sp!r} (species: {', '.join(sorted(species))})")
    return Metric(kind, sp)


def parse_limit(text, key: str, species: set[str]) -> Limit:
    if not isinstance(text, str):
        raise StudyError(key, f"a limit such as 'conversion:A >= 0.9' or 'T <= 420 K', got {text!r}")
    m = _LIMIT.match(text)
    if not m:
        raise StudyError(key, f"a limit of the form '<metric> >= <value>' or '<metric> <= <value>', got {text!r}")
    name, sense, bound_text = m.groups()
    if name == "T":
        metric = None
        kind = "T"
    else:
        metric = parse_metric(name, key, species)
        kind = metric.kind
    if kind == "productivity":
        from tubeyield.study.units import rate_constant_to_si
        bound = rate_constant_to_si(bound_text, 1.0, key)
    else:
        bound = to_si(bound_text, _BOUND_KIND[kind], key)
    return Limit(text.strip(), metric, sense, bound, unit_text(bound_text))
