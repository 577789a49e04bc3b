"""A fitted network written back as a study fragment ([species.*] and [[reaction]] only, for `include`), and the fit's
covariance as CSV: what `tubeyield fit --save` hands on."""

from __future__ import annotations

import io
import math
from datetime import datetime, timezone

from tubeyield import __version__
from tubeyield.study.schema import Study
from tubeyield.study.units import rate_constant_from_si
from tubeyield.study.variation import apply_values


def _value(v) -> str:
    """A TOML value: strings quoted, numbers as written, tables inline."""
    if isinstance(v, dict):
        return "{ " + ", ".join(f"{k} = {_value(x)}" for k, x in v.items()) + " }"
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float)):
        return f"{int(v)}" if float(v).is_integer() else f"{v:.10g}"
    return '"' + str(v).replace("\\", "\\\\").replace('"', '\\"') + '"'


def network_toml(study: Study, result) -> str:
    """The study's species and reactions with the fitted values in place, in the units the study used; each fitted
    value carries its 95 % profile-likelihood (or linearized) interval as a comment."""
    fitted = apply_values(study, result.values_si)
    notes = {}
    for p in result.parameters:
        low, high = (p.profile_low, p.profile_high) if p.profile_low is not None and p.profile_high is not None \
            else (p.low, p.high)
        rng = f"{low:.4g} to {high:.4g}" if low is not None and high is not None else "interval not determined"
        notes[p.path] = f"fitted ({result.status}): 95 % {rng} {p.unit}".rstrip()
    when = datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M UTC")
    out = [f"# The network of study {study.name!r} with the kinetics fitted by tubeyield {__version__} on {when}",
           f"# from {len(study.experiments)} lab run(s); fitted values are marked. Include it from a study:",
           "#   [study]", '#   include = "fitted-network.toml"', ""]
    for s in fitted.species:
        out.append(f"[species.{s.symbol}]")
        if s.label:
            out.append(f"label = {_value(s.label)}")
        if s.formula:
            out.append(f"formula = {_value(s.formula)}")
        if s.molar_mass is not None:
            out.append(f'molar_mass = "{s.molar_mass * 1e3:.10g} g/mol"')
        if s.Cp is not None:
            out.append(f'Cp = "{s.Cp:.10g} J/(mol*K)"')
        out.append("")
    for r in fitted.reactions:
        k, unit = rate_constant_from_si(math.exp(r.k.ln_k_ref), r.k_power, r.k_unit)
        keys = {"id": r.id, "equation": r.equation, "law": r.law.name, "orders": dict(r.orders),
                "k": f"{k:.8g} {unit}", "T_ref": f"{r.k.T_ref:.10g} K", "Ea": f"{r.k.Ea / 1e3:.8g} kJ/mol"}
        if r.dH is not None:
            keys["dH"] = f"{r.dH / 1e3:.8g} kJ/mol"
        keys.update(r.law.study_keys())
        out.append("[[reaction]]")
        for key, v in keys.items():
            note = notes.get(f"reaction.{r.id}.{key}")
            out.append(f"{key} = {_value(v)}" + (f"    # {note}" if note else ""))
        for path, note in notes.items():
            rid, name = path.split(".", 2)[1:]
            if rid == r.id and name not in keys:          # law constants and orders, fitted
                out.append(f"# {name}: {note}")
        out.append("")
    return "\n".join(out)


def covariance_csv(result) -> str:
    """The covariance of the estimates in the estimation coordinates (ln k at the centring temperature, energies in
    kJ/mol, ln of positive law constants, orders), with the estimates: what sweeps draw from."""
    k = result.kinetics
    paths = list(result.values_si)
    buf = io.StringIO()
    buf.write(f"# covariance of the estimation coordinates (ln k at T_c = {result.T_centre:.6g} K; energies in kJ/mol; "
              "ln of positive law constants; orders)\n")
    buf.write("parameter,estimate," + ",".join(paths) + "\n")
    cov = k.get("cov") or []
    for i, p in enumerate(paths):
        row = cov[i] if cov else [math.nan] * len(paths)
        buf.write(f"{p},{k['x'][i]:.12g}," + ",".join(f"{v:.12g}" for v in row) + "\n")
    return buf.getvalue()
