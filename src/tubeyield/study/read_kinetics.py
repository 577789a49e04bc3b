"""Fitted kinetics from a saved fit (`tubeyield fit --save DIR` writes DIR/fit.json), applied over a study's own
values: `--kinetics DIR/fit.json` on optimize, simulate, front, window, sweep and robust.

The fit file says which network it was fitted to (reaction ids and equations); it is applied only to a study with
the same reactions, and each fitted path must be a parameter of that study. The values replace the study's; the
estimates and covariance in the estimation coordinates go with the study (Study.kinetics), so that sweeps and robust
points can draw from the fit's uncertainty.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

from tubeyield.errors import StudyError
from tubeyield.study import caps
from tubeyield.study.read_fit import fit_path
from tubeyield.study.schema import FittedKinetics, Study
from tubeyield.study.variation import apply_values

TRANSFORMS = ("exp", "kilo", "same")


def read_fitted(path) -> dict:
    """The `kinetics` document of a fit file, checked for form (a StudyError naming the file and key)."""
    path = Path(path)
    where = str(path)
    try:
        if path.stat().st_size > caps.MAX_FILE_BYTES:
            raise StudyError("", f"a fit file of at most {caps.MAX_FILE_BYTES:,} bytes", file=where)
        doc = json.loads(path.read_text(encoding="utf-8"))
    except FileNotFoundError:
        raise StudyError("--kinetics", f"an existing fit file (written by 'tubeyield fit --save DIR' as DIR/fit.json); "
                                       f"{where} does not exist") from None
    except IsADirectoryError:
        raise StudyError("--kinetics", f"a fit file, not a folder: {where}/fit.json?") from None
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise StudyError("", f"a fit file written by 'tubeyield fit --save' (JSON): {exc}", file=where) from None
    if not isinstance(doc, dict) or not isinstance(doc.get("kinetics"), dict):
        raise StudyError("kinetics", "a fit file written by 'tubeyield fit --save' (it has no 'kinetics' part)",
                         file=where)
    return {**doc["kinetics"], "source": where}


def fitted_from_dict(d: dict, where: str = "kinetics") -> FittedKinetics:
    """FittedKinetics from its JSON form (a fit file's `kinetics`, or a study document's), checked."""
    def bad(key, expected):
        return StudyError(f"kinetics.{key}", expected, file=where)

    values = d.get("values")
    if not isinstance(values, dict) or not values:
        raise bad("values", "the fitted values by study path")
    for p, v in values.items():
        if not isinstance(p, str) or not _finite(v):
            raise bad("values", f"finite numbers by study path, got {p!r}: {v!r}")
    n = len(values)
    x, h = d.get("x", []), d.get("h", [])
    G, cov, transforms = d.get("G", []), d.get("cov", []), d.get("transforms", [])
    if not (isinstance(x, list) and all(_finite(v) for v in x)):
        raise bad("x", "the estimates (finite numbers)")
    p = len(x)
    if not (isinstance(G, list) and len(G) == n and all(isinstance(r, list) and len(r) == p and
                                                          all(_finite(v) for v in r) for r in G)):
        raise bad("G", f"{n} rows of {p} numbers")
    if not (isinstance(h, list) and len(h) == n and all(_finite(v) for v in h)):
        raise bad("h", f"{n} numbers")
    if not (isinstance(transforms, list) and len(transforms) == n and all(t in TRANSFORMS for t in transforms)):
        raise bad("transforms", f"{n} of {', '.join(TRANSFORMS)}")
    if cov and not (isinstance(cov, list) and len(cov) == p and all(isinstance(r, list) and len(r) == p and
                                                                    all(_finite(v) for v in r) for r in cov)):
        raise bad("cov", f"a {p} x {p} covariance matrix, or none")
    T_range = d.get("T_range", [])
    if not (isinstance(T_range, list) and len(T_range) in (0, 2) and all(_finite(v) for v in T_range)):
        raise bad("T_range", "the coldest and hottest temperature of the lab runs")
    return FittedKinetics(source=str(d.get("source", where)), fitted_study=str(d.get("fitted_study", "")),
                          status=str(d.get("status", "")), values=tuple((k, float(v)) for k, v in values.items()),
                          x=tuple(float(v) for v in x), cov=tuple(tuple(float(v) for v in r) for r in cov),
                          G=tuple(tuple(float(v) for v in r) for r in G), h=tuple(float(v) for v in h),
                          transforms=tuple(transforms), T_range=tuple(float(v) for v in T_range))


def with_kinetics(study: Study, fitted: FittedKinetics, network: dict | None = None) -> Study:
    """The study with the fitted values in place of its own. `network` (reaction id -> equation, from the fit
    file) must match the study's reactions, so that a fit is never applied to another network."""
    where = fitted.source
    if network is not None:
        mine = {r.id: r.equation for r in study.reactions}
        if {k: " ".join(str(v).split()) for k, v in network.items()} != \
                {k: " ".join(v.split()) for k, v in mine.items()}:
            diff = sorted(set(network.items()) ^ set(mine.items()))
            raise StudyError("kinetics.network", "a fit of this study's network; the reactions differ in "
                             + "; ".join(f"{k}: {v}" for k, v in diff[:4]), file=where)
    for p in fitted.paths:
        fit_path(p, study.reactions, f"kinetics.values.{p}")
    try:
        applied = apply_values(study, dict(fitted.values))
    except StudyError as exc:
        raise exc.in_file(where) from None
    from dataclasses import replace
    return replace(applied, kinetics=fitted)


def load_kinetics(study: Study, path) -> Study:
    """`--kinetics FIT.json`: the study with the fit's values applied (read_fitted, with_kinetics)."""
    doc = read_fitted(path)
    try:
        fitted = fitted_from_dict(doc, str(path))
        return with_kinetics(study, fitted, doc.get("network") if isinstance(doc.get("network"), dict) else None)
    except StudyError as exc:
        if not exc.file:
            raise exc.in_file(str(path)) from None
        raise


def _finite(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


def extrapolation(study: Study, at: dict | None = None) -> str | None:
    """A warning when the study's temperatures reach beyond those of the lab runs its kinetics were fitted to:
    starting "EXTRAPOLATED KINETICS" when the point `at` (decision -> SI value or profile) itself lies beyond them,
    a plain note when only the decision ranges do."""
    k = study.kinetics
    if k is None or not k.T_range:
        return None
    margin = 1.0                                  # K: a rounding of the run temperatures is not an extrapolation
    runs = f"the lab runs the kinetics were fitted to ({k.T_range[0]:.1f} to {k.T_range[1]:.1f} K)"

    def beyond(values):
        return [t for t in values if t < k.T_range[0] - margin or t > k.T_range[1] + margin]

    hot = [d.name for d in study.decisions if d.si_unit == "K"]
    point = [t for name in hot for t in (at.get(name) if isinstance(at.get(name), list) else [at.get(name)])
             if t is not None] if at else []
    if beyond(point):
        return (f"EXTRAPOLATED KINETICS: the point's temperatures ({min(point):.1f} to {max(point):.1f} K) reach "
                f"beyond {runs}; its numbers rest on kinetics outside the data")
    ranged = [t for d in study.decisions if d.si_unit == "K" for t in (d.low, d.high)]
    if beyond(ranged):
        return (f"the decision ranges ({min(ranged):.1f} to {max(ranged):.1f} K) reach beyond {runs}: there the "
                "fitted kinetics are extrapolated")
    return None
