"""The report: reports/<study>/index.html (self-contained, figures inline), figures as PNG and SVG, tables as CSV.

Built only from saved results (optimum.json, optimum-profile.csv, front.json, window.json, sweep-summary.json and the
inputs/ copy of the study), so `tubeyield report RESULT_DIR` rebuilds it at any time.
"""

from __future__ import annotations

from tubeyield.status import SOLVED

import base64
import datetime as _dt
import json
import platform
from importlib import metadata
from pathlib import Path

import jinja2
import pandas as pd

from tubeyield import __version__
from tubeyield.errors import StudyError
from tubeyield.report import figures
from tubeyield.report.files import saved, write_atomic
from tubeyield.report.summary import summary
from tubeyield.report.text import CAUTION, fmt, relaxed_text
from tubeyield.study.units import rate_constant_from_si

TEMPLATES = Path(__file__).parent / "templates"


def _load_json(path: Path):
    if not path.exists():
        return None
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (OSError, json.JSONDecodeError) as exc:
        raise StudyError(str(path), f"a result file written by tubeyield ({exc})") from None


def _study_from_inputs(result_dir: Path):
    """The study saved with the results (inputs/sources.json, rebuilt in memory), and its files as
    [(name, text)] for the report's inputs section."""
    from tubeyield.report.files import SOURCES
    from tubeyield.study import study_from_sources
    sources = result_dir / "inputs" / SOURCES
    if not sources.is_file():
        raise StudyError(str(result_dir / "inputs"), "the study's inputs as saved by --save (inputs/sources.json; "
                                                     "results saved by an earlier version: run --save again)")
    try:
        document = sources.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        raise StudyError(str(sources), f"a readable file ({exc})") from None
    # the report reads saved results, not the study's optional sections: a section that cannot be read (a
    # measurement file the run did not need) is left out, as the jobs do
    study = study_from_sources(document, need=())
    files = [(Path(study.path).name, study.source)] + [(f.ref, f.text) for f in study.includes]
    return study, files


def build_report(result_dir, out_dir=None) -> Path:
    """Write the report for the results in `result_dir` to `out_dir` (default reports/<study>); return index.html."""
    result_dir = Path(result_dir)
    if not result_dir.is_dir():
        raise StudyError(str(result_dir), "a directory of saved results (from --save)")
    study, inputs = _study_from_inputs(result_dir)
    out = Path(out_dir) if out_dir else Path("reports") / study.name
    fig_dir, tab_dir = out / "figures", out / "tables"
    optimum = _load_json(saved(result_dir, "optimize"))
    front = _load_json(saved(result_dir, "front"))
    window_d = _load_json(saved(result_dir, "window"))
    sweep = _load_json(saved(result_dir, "sweep-report"))
    fit = _fit_context(_load_json(saved(result_dir, "fit")))
    robust = _load_json(saved(result_dir, "robust"))
    figs: dict = dict.fromkeys(("fit", "profiles", "front", "window", "sweep"))
    tables: dict = {}
    if fit and fit.get("curves"):
        figs["fit"] = _inline(figures.save(figures.fit_curves(fit, f"{study.name}: fitted kinetics"),
                                           fig_dir / "fit"))

    if optimum:
        tables["decisions"], tables["limits"] = _optimum_tables(optimum, tab_dir)
        profile_csv = saved(result_dir, "optimize-profile")
        if profile_csv.exists():
            profile = pd.read_csv(profile_csv)
            write_atomic(tab_dir / "profile.csv", profile.to_csv(index=False))
            figs["profiles"] = _inline(figures.save(
                figures.profiles(profile, study.symbols, f"{study.name}: profiles at the optimum",
                                 T_limits=[(lim.text, lim.bound) for lim in study.goal.limits
                                           if lim.metric is None and lim.sense == "<="],
                                 T_cool=optimum.get("decisions_si", {}).get("T_cool"),
                                 space_time=study.feed.phase == "gas"),
                fig_dir / "profiles"))
    front_stats, front_decisions = {}, []
    if front and front.get("points"):
        figs["front"] = _inline(figures.save(figures.front(front, f"{study.name}: {front['y']} against {front['x']}"),
                                             fig_dir / "front"))
        tables["front"], front_decisions = _chosen_front_points(front)
        from tubeyield.jobs.front import front_table
        write_atomic(tab_dir / "front.csv", front_table(front).to_csv(index=False))
        ok = [p for p in front["points"] if p["status"] in SOLVED]
        front_stats = {"ok": sum(not p["dominated"] for p in ok), "dominated": sum(p["dominated"] for p in ok),
                       "bad": len(front["points"]) - len(ok),
                       "worst_check": max((p["check"] or 0.0) for p in ok) if ok else 0.0}
    window = None
    if window_d:
        from tubeyield.jobs.window import WindowResult
        window = WindowResult.from_dict(window_d)
        figs["window"] = _inline(figures.save(figures.window_maps(window, f"{study.name}: operating window"),
                                              fig_dir / "window"))
        _window_csv(window, tab_dir / "window.csv")
    if sweep:
        cols = {k: (v["values"], v.get("unit", "")) for k, v in sweep.get("distributions", {}).items()}
        if cols:
            figs["sweep"] = _inline(figures.save(figures.histogram_grid(cols, f"{study.name}: scenario sweep"),
                                                 fig_dir / "sweep"))
        if sweep.get("table_csv"):
            write_atomic(tab_dir / "sweep.csv", sweep["table_csv"])

    from tubeyield.chemistry.consistency import check_network
    from tubeyield.chemistry.network import Network
    net = Network.of(study)
    report = check_network(study)
    env = jinja2.Environment(loader=jinja2.FileSystemLoader(str(TEMPLATES)), autoescape=True,
                             undefined=jinja2.StrictUndefined)
    env.globals["fmt"] = fmt
    html = env.get_template("report.html").render(
        study=study, tool=f"tubeyield {__version__}",
        written=_dt.datetime.now().astimezone().strftime("%Y-%m-%d %H:%M %Z"),
        study_file=Path(study.path).name, caution=CAUTION, css=(TEMPLATES / "report.css").read_text(),
        network=_network_context(study, net, report), optimum=optimum, tables=tables, figures=figs,
        front=front, front_stats=front_stats, front_decisions=front_decisions, window=window,
        window_fixed=", ".join(f"{k} = {fmt(v)} {window.units.get(k) or ''}".rstrip()
                               for k, v in (window.fixed.items() if window else [])) or "none",
        window_share=float(window.window.mean()) if window else 0.0, sweep=sweep,
        points=study.reactor.points, inputs=inputs, provenance=_provenance(),
        assumptions=_assumptions(study), summary=summary(optimum, window, sweep, report.errors(), fit, robust),
        fit=fit, num=_numbers(fit, sweep, robust), robust=robust,
        robust_decision_names=[n for n, d in ((robust or {}).get("decisions") or {}).items() if not d.get("fixed")],
        robust_limit_names=[lim.text for lim in study.goal.limits],
        robust_decision_value=lambda p, name: _robust_value(study, p, name),
        kinetics_applied=Path(study.kinetics.source).name if study.kinetics is not None else "")
    index = out / "index.html"
    write_atomic(index, html)
    return index


def _inline(saved: dict) -> dict:
    return {"b64": base64.b64encode(saved["png"]).decode("ascii"), "png_path": saved["png_path"],
            "svg_path": saved["svg_path"]}


def _optimum_tables(opt: dict, tab_dir: Path):
    bounds = {(b["decision"], b["side"]) for b in opt.get("bounds", [])}
    decisions = []
    for name, d in opt.get("decisions", {}).items():
        if isinstance(d["value"], list):
            value = f"profile {fmt(d['min'])} to {fmt(d['max'])} {d['unit']}"
        else:
            value = f"{fmt(d['value'])} {d['unit']}".strip()
        rng = "fixed" if d.get("fixed") else f"{fmt(d['low'])} to {fmt(d['high'])} {d['unit']}".strip()
        note = "at lower bound" if (name, "low") in bounds else "at upper bound" if (name, "high") in bounds else ""
        decisions.append({"decision": name, "value": value, "range": rng, "note": note})
    limits = [{"text": lim["text"], "value": f"{fmt(lim['value'])} {lim['unit']}".strip(), "active": lim["active"],
               "marginal": f"{lim['marginal']:+.4g} {lim['marginal_unit']}" if lim["active"] else "0",
               "holds": relaxed_text(lim) if lim.get("relaxed") else ""} for lim in opt.get("limits", [])]
    limits += [{"text": f"{b['decision']} {'lower' if b['side'] == 'low' else 'upper' if b['side'] == 'high' else 'fixed'}"
                        f" {'bound' if b['side'] != 'fixed' else 'value'}",
                "value": f"{fmt(b['bound'])} {b['unit']}".strip(), "active": b["side"] != "fixed",
                "marginal": f"{b['marginal']:+.4g} {b['marginal_unit']}", "holds": ""} for b in opt.get("bounds", [])]
    write_atomic(tab_dir / "decisions.csv", pd.DataFrame(decisions).to_csv(index=False))
    write_atomic(tab_dir / "limits.csv", pd.DataFrame(limits).to_csv(index=False))
    metrics = [{"metric": k, "value": v["value"], "unit": v["unit"]} for k, v in opt.get("metrics", {}).items()]
    write_atomic(tab_dir / "metrics.csv", pd.DataFrame(metrics).to_csv(index=False))
    return decisions, limits


def _chosen_front_points(front: dict):
    """The ends, the knee and a few evenly spaced points between them."""
    pts = front["points"]
    ok = [i for i, p in enumerate(pts) if p["status"] in SOLVED and not p["dominated"]]
    if not ok:
        return [], []
    chosen = {ok[0]: f"end ({front['y']} best)", ok[-1]: f"end ({front['x']} best)"}
    if front.get("knee") is not None:
        chosen.setdefault(front["knee"], "knee")
    for i in [ok[len(ok) // 4], ok[len(ok) // 2], ok[3 * len(ok) // 4]]:
        chosen.setdefault(i, f"point {i}")
    names = [n for n, v in pts[ok[0]]["decisions"].items() if not isinstance(v, list)]
    rows = []
    for i in sorted(chosen):
        p = pts[i]
        rows.append({"label": chosen[i], "x": fmt(p["x"]), "y": fmt(p["y"]), "trade": fmt(p["trade_off"], 4),
                     "decisions": [fmt(p["decisions"][n]) for n in names], "active": "; ".join(p["active"])})
    return rows, names


def _window_csv(w, path: Path) -> None:
    write_atomic(path, w.to_frame().to_csv(index=False))


def _robust_value(study, p: dict, name: str) -> str:
    """A validated point's decision in the study's units (the points carry SI values; profiles are summarized)."""
    from tubeyield.study.units import decision_to_user
    d = (p.get("decisions") or {}).get(name)
    if d is not None:
        return "profile" if isinstance(d["value"], list) else f"{fmt(d['value'], 4)} {d['unit']}".rstrip()
    v = (p.get("point") or {}).get(name)
    if v is None:
        return "profile"
    dec = study.decision(name)
    return f"{fmt(decision_to_user(v, dec), 4)} {dec.unit}".rstrip()


def _numbers(fit, sweep, robust=None) -> dict:
    """Section numbers for the sections this report holds."""
    names = ["network"] + (["kinetics"] if fit else []) + ["optimum", "profiles", "front", "window"] + \
        (["sweep"] if sweep else []) + (["robust"] if robust else []) + ["verification", "inputs", "provenance",
                                                                           "cautions"]
    return {name: i + 1 for i, name in enumerate(names)}


def nested_verdict(test: dict) -> str:
    """A nested test in words: whether the bigger network's extra steps are supported by the data."""
    p = test["p_value"]
    shown = "P < 1e-15" if p < 1e-15 else f"P = {p:.2g}"
    if p < 0.05:
        return f"{test['test']} test, {shown}: {test['bigger']} fits significantly better; its extra steps are needed"
    return f"{test['test']} test, {shown}: no significant improvement from the extra steps of {test['bigger']}"


def _fit_context(fit: dict | None) -> dict | None:
    """A saved fit (fit.json) with the lines the template shows: the residual statement, the correlation rows, the
    starts, the singular values, the residuals in standard deviations, the rivals' tests."""
    if not fit:
        return None
    fit = dict(fit)
    known = fit.get("chi_square") is not None
    if known:
        fit["residual"] = f"weighted SSR (chi-square) {fmt(fit['chi_square'], 5)}"
    elif fit.get("ssr") is not None:
        fit["residual"] = (f"SSR {fmt(fit['ssr'], 5)} (mol/L)^2, estimated standard deviation "
                           f"{fmt(fit['sigma'], 4)} mol/L")
    else:
        fit["residual"] = "no estimate"
    for key, default in (("lack_of_fit", {}), ("starts", []), ("rivals", []), ("suggestions", []),
                         ("poorly_determined", []), ("residual_summary", []), ("profile_check", {})):
        fit.setdefault(key, default)
    names = [p["path"].split(".", 1)[1] for p in fit.get("parameters", [])]
    fit["names"] = names
    corr = fit.get("correlation") or []
    fit["correlation_rows"] = [{"name": n, "values": row} for n, row in zip(names, corr)] if len(names) > 1 else []
    starts = fit["starts"]
    ok = [r for r in starts if r.get("ssr") is not None]
    fit["starts_line"] = (f"Starting points: {len(ok)} of {len(starts)} converged, "
                          f"{sum(1 for r in starts if r.get('best'))} reached the best fit." if starts else "")
    sv = fit.get("singular_values") or []
    fit["singular_line"] = ", ".join(f"{v / sv[0]:.2g}" for v in sv) + " (relative to the largest)" if sv else "none"
    scale = 1.0 if known else (fit.get("sigma") or 1.0)
    fit["residual_rows"] = [{"species": r["species"], "samples": r.get("samples", r.get("values")),
                             "rms": r["rms"] / scale, "mean": r["mean"] / scale} for r in fit["residual_summary"]]
    for r in fit["rivals"]:
        test = r.get("test") or {}
        r["test_line"] = (nested_verdict(test) if test.get("test") else
                          ("not nested" if r.get("nested") is False else ""))
    return fit


def _network_context(study, net, report) -> dict:
    import math
    inlet = study.feed.inlet()
    species = [{"symbol": s.symbol, "label": s.label, "formula": s.formula or "", "Cp": fmt(s.Cp) if s.Cp else "",
                "feed": (f"{inlet[s.symbol] / 1000:.4g} mol/L" if study.feed.phase == "liquid" else
                         f"y = {inlet[s.symbol]:.4g}") if inlet.get(s.symbol) else ""} for s in study.species]
    reactions = []
    for r in study.reactions:
        k, k_unit = rate_constant_from_si(math.exp(r.k.ln_k_ref), r.k_power, r.k_unit)
        constants = "; ".join(f"{path} = {v:.4g} {unit}".rstrip() for path, v, unit in r.law.constant_table())
        reactions.append({"id": r.id, "equation": r.equation, "law": r.law.name,
                          "orders": ", ".join(f"{s}: {n:g}" for s, n in r.orders),
                          "k": f"{k:.4g} {k_unit}", "T_ref": fmt(r.k.T_ref), "Ea": fmt(r.k.Ea / 1000),
                          "dH": fmt(r.dH / 1000) if r.dH is not None else "", "constants": constants})
    matrix = [{"species": s, "values": [f"{v:g}" for v in row]} for s, row in zip(net.species, net.matrix)]
    return {"species": species, "reactions": reactions, "matrix": matrix, "reaction_ids": net.reaction_ids,
            "rank": net.rank, "independent": ", ".join(net.independent_reactions()),
            "consistent": "consistent" if report.consistent else "INCONSISTENT",
            "elements": ("balanced" if not report.element_errors else "NOT balanced")
                        if any(s.formula for s in study.species) else "not checked (no formulas)",
            "warnings": report.warnings, "errors": report.errors()}


def _assumptions(study) -> str:
    parts = ["constant density" if study.feed.phase == "liquid" else "ideal gas at constant pressure"]
    parts.append({"isothermal": "a uniform temperature", "zones": "uniform temperature in each zone",
                  "free": "a temperature profile that can be imposed exactly",
                  "adiabatic": "no heat exchange", "cooled": "a uniform coolant temperature and wall coefficient"}
                 [study.reactor.heat])
    return ", ".join(parts)


def _provenance() -> list:
    rows = [("tool", f"tubeyield {__version__}"), ("python", platform.python_version()),
            ("machine", f"{platform.system()} {platform.machine()}")]
    for pkg in ("pyomo", "casadi", "scipy", "numpy", "highspy", "pint", "matplotlib", "jinja2"):
        try:
            rows.append((pkg, metadata.version(pkg)))
        except metadata.PackageNotFoundError:
            pass
    rows.append(("NLP solver", "Ipopt (bundled in the casadi wheel), through Pyomo's NL writer"))
    return rows
