"""The summary a design review reads first: the recommended point, what limits it, its margins, how it was verified,
how robust it is, and everything that should stop a reviewer, in words.

A pure function of the saved results (optimum.json, window.json, sweep-summary.json as dicts); the report template
renders it at the top of the page.
"""

from __future__ import annotations

from tubeyield import status as st
from tubeyield.report.text import fmt

NOISE = 1e-7              # a margin below this share of the bound is solver noise: shown as 0
FEW_SCENARIOS = 0.9        # a recommended point meeting every limit in fewer scenarios than this share is flagged


def _quantity(value, unit: str, digits: int = 4) -> str:
    return f"{fmt(value, digits)} {unit}".rstrip() if value is not None else "-"


def summary(optimum: dict | None, window=None, sweep: dict | None = None, network_errors=(),
            fit: dict | None = None, robust: dict | None = None) -> dict:
    """{"headline", "point": [(decision, value)], "limits": [{text, value, margin, binding, marginal, holds}],
    "verification", "robustness", "stops": [reasons a reviewer should not accept the point as it stands]}.
    `network_errors` are the network check's errors (a network that cannot conserve mass is a stop)."""
    stops: list[str] = [f"NETWORK CHECK: {e}" for e in network_errors]
    if fit is not None:
        if fit.get("not_identified"):
            stops.append("FIT: the data do not determine " + "; ".join(fit["not_identified"])
                         + " (the kinetics behind this point are not known from the lab runs)")
        elif fit.get("status") != st.OPTIMAL:
            stops.append(f"FIT {str(fit.get('status')).upper()}: {fit.get('message') or 'see the kinetics section'}")
        stops += [f"FIT: {p['path']} ended at its bound" for p in fit.get("parameters", []) if p.get("at_bound")]
    out = {"headline": "", "point": [], "limits": [], "verification": "", "robustness": "", "window_note": "",
           "stops": stops, "robust": None, "limits_at": "the recommended point"}
    if not optimum:
        if robust is not None:
            _recommend_robust(out, robust, {"metric": robust["goal"]["metric"]})
            if out["robust"] is not None:
                return out
        out["headline"] = "No optimization result was saved: run `tubeyield optimize STUDY --save DIR`."
        stops.append("there is no verified operating point in this report")
        return out
    status = optimum["status"]
    g = optimum["goal"]
    word = "maximize" if g.get("sense") == "max" else "minimize"
    if status in st.SOLVED and g.get("value") is not None:
        out["headline"] = (f"Recommended operating point ({status}): {g['metric']} = "
                           f"{_quantity(g['value'], g.get('unit', ''), 5)} (goal: {word} {g['metric']}).")
    elif status == st.INFEASIBLE:
        out["headline"] = "No operating point within the decision ranges meets every limit (infeasible)."
    else:
        out["headline"] = f"The optimization did not give an operating point ({status})."
    stops += [w for w in optimum.get("warnings", []) if w.startswith("EXTRAPOLATED KINETICS")]
    if status == st.UNVERIFIED:
        stops.append("NOT VERIFIED: " + (optimum.get("message") or "the re-simulation disagrees with the model"))
    elif status == st.INFEASIBLE:
        stops.append("INFEASIBLE: " + (optimum.get("message") or "the limits cannot hold together"))
    elif status not in st.SOLVED:
        stops.append(f"FAILED: {optimum.get('message') or status}")

    for name, d in optimum.get("decisions", {}).items():
        if isinstance(d.get("value"), list):
            value = f"profile from {fmt(d['min'], 4)} to {fmt(d['max'], 4)} {d['unit']}".rstrip()
        else:
            value = _quantity(d["value"], d.get("unit", ""))
        note = ""
        for b in optimum.get("bounds", []):
            if b["decision"] == name and b["side"] in ("low", "high"):
                where = f"at its {'lower' if b['side'] == 'low' else 'upper'} bound"
                share = b.get("share", 1.0)
                note = where if share >= 1.0 else f"{100 * share:.0f} % of its points {where}"
        out["point"].append((name, value + (f" ({note})" if note else "")))

    for lim in optimum.get("limits", []):
        unit = lim.get("unit", "")
        margin = lim.get("margin")
        holds = lim.get("holds", margin is None or margin >= -1e-9 * max(1.0, abs(lim.get("bound") or 0.0)))
        if lim.get("active"):
            marginal = f"{lim['marginal']:+.3g} {lim['marginal_unit']}"
            if lim.get("relaxed"):
                marginal += (f"; holds to {_quantity(lim['holds_to'], unit)}" if lim.get("holds_to") is not None
                             else "; holds only for small changes")
        else:
            marginal = "0 (not binding)"
        scale = max(abs(lim.get("bound") or 0.0), 1e-12)
        if margin is not None and (lim.get("active") or abs(margin) <= NOISE * scale):
            margin_text = _quantity(0.0, unit) if abs(margin) <= NOISE * scale else _quantity(margin, unit)
        else:
            margin_text = _quantity(margin, unit) if margin is not None else "-"
        out["limits"].append({"text": lim["text"], "value": _quantity(lim["value"], unit), "margin": margin_text,
                              "binding": bool(lim.get("active")), "marginal": marginal, "holds": bool(holds)})
        if status in st.SOLVED and not holds:
            stops.append(f"{lim['text']} is exceeded at the recommended point (by {_quantity(-margin, unit)})")

    c = optimum.get("check")
    if c:
        out["verification"] = (f"Re-simulated with {c.get('integrator', 'scipy')}: largest outlet-flow difference "
                               f"{c['max_rel_error']:.1e} (tolerance {c['tolerance']:.0e}), "
                               f"{'passed' if c['passed'] else 'NOT passed'}, on {c['elements']} elements.")
        if not c["passed"] and status != st.UNVERIFIED:
            stops.append("the re-simulation does not agree with the model within its tolerance")

    rb = (sweep or {}).get("robust")
    if rb and rb.get("rows"):
        target = rb.get("target", 0.95)
        nominal = next((r for r in rb["rows"] if r["label"] == "nominal optimum"), None)
        best = next((r for r in rb["rows"] if r["label"] == rb.get("best")), None)
        parts = []
        if nominal is not None:
            parts.append(f"the optimum meets every limit in {100 * nominal['share']:.0f} % of "
                         f"{rb['scenarios']} scenarios")
            if nominal["share"] < FEW_SCENARIOS and not (robust and robust.get("status") == st.OPTIMAL):
                stops.append(f"under the sweep's uncertainty the optimum meets every limit in only "
                             f"{100 * nominal['share']:.0f} % of the scenarios (target {100 * target:.0f} %)")
        if best is not None and best is not nominal:
            parts.append(f"{best['label']} meets them in {100 * best['share']:.0f} % "
                         f"(mean {g['metric']} {fmt(best['mean'], 4)})")
        out["robustness"] = "Sweep: " + "; ".join(parts) + "." if parts else ""
    if robust is not None:
        _recommend_robust(out, robust, g)
    if window is not None:
        share = float(window.window.mean())
        point_holds = status == st.OPTIMAL and all(lim.get("holds", True) for lim in out["limits"])
        if share == 0.0 and point_holds:
            # the optimum meets every limit, so the window exists: it is narrower than the map's cells (an optimum
            # on two active limits leaves a sliver along their edges)
            cells = window.window.shape
            out["window_note"] = (f"No cell of the {cells[1]} x {cells[0]} window map meets every limit: around the "
                                  "optimum (which meets them) the window is narrower than one cell. A finer [window] "
                                  "grid or narrower ranges show its extent; with so little room, small changes in "
                                  "the inputs can break a limit.")
        elif share == 0.0:
            stops.append("the window map has no cell where every limit holds")
    return out


def _recommend_robust(out: dict, robust: dict, g: dict) -> None:
    """A robust point that passed its checks is the recommendation: its decisions, its validated share and what it
    costs against the nominal optimum; the nominal optimum's limit table stays, labelled as such. A robust run that
    failed, or whose point meets the limits in few fresh scenarios, is a stop."""
    points = {p["name"]: p for p in robust.get("points", [])}
    mine, nominal = points.get("robust point"), points.get("nominal optimum")
    if robust.get("status") != st.OPTIMAL or mine is None:
        out["stops"].append(f"ROBUST {str(robust.get('status')).upper()}: {robust.get('message') or 'no robust point'}")
        return
    n = mine["n"]
    out["headline"] = (f"Recommended operating point (robust): expected {g['metric']} {fmt(mine['expected_goal'], 5)}; "
                       f"meets every limit in {100 * mine['share']:.1f} % of {n} fresh scenarios "
                       f"(95 % {100 * mine['share_low']:.1f}-{100 * mine['share_high']:.1f} %).")
    out["point"] = [(name, f"{fmt(d['value'], 4)} {d['unit']}".rstrip() if not isinstance(d["value"], list)
                     else "profile") for name, d in robust.get("decisions", {}).items()]
    out["limits_at"] = "the nominal optimum (for comparison; the robust point's violation rates are below)"
    if out["verification"]:
        out["verification"] = "Nominal optimum: " + out["verification"]
    tr = robust.get("training") or {}
    if tr.get("kept"):
        out["verification"] += (f" Robust point: simulated in its {tr['kept']} training scenarios, "
                                f"{tr['meet_every_limit']} meet every limit.")
    rows = [p for p in (nominal, points.get(next((k for k in points if k.startswith("backed-off")), "")), mine) if p]
    out["robust"] = {
        "rows": [{"name": p["name"], "expected": fmt(p["expected_goal"], 5),
                  "share": f"{100 * p['share']:.1f} % ({100 * p['share_low']:.1f}-{100 * p['share_high']:.1f} %)",
                  "violations": ", ".join(f"{k} {100 * v:.1f} %" for k, v in p["violations"].items() if v > 0)
                  or "none"} for p in rows],
        "price": (f"Robustness costs {fmt(nominal['expected_goal'] - mine['expected_goal'], 3)} in expected "
                  f"{g['metric']} against the nominal optimum, which meets every limit in only "
                  f"{100 * nominal['share']:.1f} % of the same scenarios." if nominal else ""),
        "bound": (robust.get("guarantee") or {}).get("statement", "")}
    promise = robust.get("guarantee") or {}
    if promise.get("contradicted_by_validation"):
        out["stops"].append(f"the robust point meets every limit in {100 * mine['share']:.1f} % of the fresh "
                            f"scenarios (95 % interval up to {100 * mine['share_high']:.1f} %), below the "
                            f"{100 * promise['promised_share']:.1f} % its run promises")
    if mine["share"] < FEW_SCENARIOS:
        out["stops"].append(f"the robust point meets every limit in only {100 * mine['share']:.1f} % of the fresh "
                            "scenarios")
