"""Terminal summaries of results: plain text, aligned columns, units everywhere."""

from __future__ import annotations

from tubeyield.status import SOLVED

CAUTION = ("Model predictions only: verify with calorimetry and a hazard study before any design or operation; "
           "follow local codes and licensed engineering practice.")


def fmt(v, digits: int = 5) -> str:
    if v is None:
        return "-"
    if isinstance(v, float):
        return f"{v:.{digits}g}"
    return str(v)


def relaxed_text(lim: dict) -> str:
    """'relaxed to 0.798: +0.000399 (100 % of marginal x change), to 0.792: +0.00131 (82 %); the marginal holds
    (within 10 %) to 0.798'."""
    unit = f" {lim['unit']}" if lim["unit"] else ""
    tries = []
    for s in lim["relaxed"]:
        at = f"{fmt(s['bound'], 4)}{unit}"
        if not s["solved"]:
            tries.append(f"to {at}: the re-solve failed")
        elif s["predicted"]:
            tries.append(f"to {at}: {s['gain']:+.3g} ({100 * s['gain'] / s['predicted']:.0f} % of marginal x change)")
        else:
            tries.append(f"to {at}: {s['gain']:+.3g}")
    held = (f"the marginal holds (within 10 %) to {fmt(lim['holds_to'], 4)}{unit}" if lim["holds_to"] is not None
            else "the marginal holds only for smaller changes")
    return "relaxed " + ", ".join(tries) + "; " + held


def hot_spot_text(lim: dict) -> str:
    """'highest T 398.2 K at 12 % of the volume (residence time 14.3 s)' for a temperature limit's extreme."""
    where = lim["where"]
    word = "highest" if "<=" in lim["text"] else "lowest"
    value = f"{fmt(lim['value'])} {lim['unit']}".rstrip()
    if "tank" in where:
        place = f"in tank {where['tank']}"
    else:
        place = f"at {100 * where['z']:.3g} % of the volume (residence time {fmt(where['residence_time_s'], 4)} s)"
    extra = f"; held by tightening the limit at the mesh points by {lim['tightened_by_K']:.3g} K" \
        if lim.get("tightened_by_K") else ""
    state = "" if lim.get("holds", True) else " (EXCEEDED)"
    return f"{word} T {value}{state} {place}{extra}"


def _decision_lines(result) -> list[str]:
    lines = []
    width = max((len(n) for n in result.decisions), default=4)
    at_bound = {(b["decision"], b["side"]) for b in result.bounds}
    for name, d in result.decisions.items():
        if isinstance(d["value"], list):
            val = f"profile {fmt(d['min'])} to {fmt(d['max'])} {d['unit']}"
        else:
            val = f"{fmt(d['value'])} {d['unit']}".rstrip()
        rng = "fixed" if d.get("fixed") else (f"[{fmt(d['low'])}, {fmt(d['high'])}]" if "low" in d else "")
        flag = "  at lower bound" if (name, "low") in at_bound else "  at upper bound" if (name, "high") in at_bound else ""
        lines.append(f"  {name:<{width}}  {val:<24} {rng}{flag}")
    return lines


def optimum_summary(result) -> str:
    g = result.goal
    out = [f"{result.study}: {result.status.upper() if result.status == 'unverified' else result.status}  "
           f"({'maximize' if g['sense'] == 'max' else 'minimize'} {g['metric']})"]
    if result.message:
        out.append(f"  {result.message}")
    if g.get("value") is not None:
        out.append(f"  {g['metric']} = {fmt(g['value'], 6)} {g.get('unit', '')}".rstrip())
    if result.decisions:
        out += ["", {"optimal": "operating point", "unverified": "operating point (NOT verified)"}.get(
            result.status, "closest operating point")]
        out += _decision_lines(result)
        if result.volume_m3 is not None:
            out.append(f"  reactor volume {fmt(result.volume_m3 * 1000.0)} L")
    if result.metrics:
        out += ["", "outlet"]
        width = max(len(k) for k in result.metrics)
        for k, m in result.metrics.items():
            out.append(f"  {k:<{width}}  {fmt(m['value'])} {m['unit']}".rstrip())
    rows = [(lim["text"], fmt(lim["value"]) + (f" {lim['unit']}" if lim["unit"] else ""), lim["marginal"],
             lim["marginal_unit"]) for lim in result.limits if lim.get("active")]
    rows += [(f"{b['decision']} {'lower' if b['side'] == 'low' else 'upper'} bound" if b["side"] != "fixed"
              else f"{b['decision']} (fixed)", f"{fmt(b['bound'])} {b['unit']}".rstrip(), b["marginal"],
              b["marginal_unit"]) for b in result.bounds]
    if result.status in SOLVED:
        out += ["", "what limits the optimum"]
        if rows:
            w = max(len(r[0]) for r in rows)
            for name, value, marginal, unit in rows:
                out.append(f"  {name:<{w}}  {value:<14} marginal {marginal:+.4g} {unit}")
            for lim in result.limits:
                if lim.get("relaxed"):
                    out.append(f"  {lim['text']}: " + relaxed_text(lim))
            inactive = [lim["text"] for lim in result.limits if not lim.get("active")]
            if inactive:
                out.append(f"  not binding: {', '.join(inactive)}")
        else:
            out.append("  nothing: the optimum is interior (no limit or bound is active)")
        for lim in result.limits:
            if "where" in lim and (lim.get("heat") != "isothermal" or not lim.get("holds", True)):
                out.append(f"  {lim['text']}: " + hot_spot_text(lim))
    if result.conflicts:
        out += ["", "conflicting limits"]
        for c in result.conflicts:
            state = "holds at its bound" if c["holds"] else f"missed by {fmt(c['missed_by'])} {c['unit']}".rstrip()
            out.append(f"  {c['limit']}: {state}")
    if result.check is not None:
        c = result.check
        out += ["", "verification",
                f"  re-simulated ({c.integrator}): largest outlet-flow difference {c.max_rel_error:.2e} "
                f"({c.worst_species}), tolerance {c.tolerance:.0e}: {'passed' if c.passed else 'NOT passed'}",
                f"  mesh {c.elements} elements" + (f" after {c.refinements} refinement(s)" if c.refinements else "")]
        out += [f"  {n}" for n in c.notes]
    if result.starts.get("n"):
        s = result.starts
        cores = result.timing.get("start_workers")
        out.append(f"starts: {s['ok']} of {s['n']} converged, {s['reached_best']} reached the best point"
                   + (f" (on {cores} cores: solve and ipopt below add up the cores' time)" if cores else ""))
    t = result.timing
    if "total" in t:
        out.append("time: " + f"{t['total']:.2f} s (" + ", ".join(f"{k} {v:.2f}" for k, v in t.items()
                                                               if k not in ("total", "start_workers")) + ")")
    for w in result.warnings:
        out.append(f"warning: {w}")
    out += ["", CAUTION]
    return "\n".join(out)


def evaluation_summary(result, notes=()) -> str:
    g = result.goal
    out = [f"{result.study}: simulated operating point ({result.status})"]
    out += [f"  note: {n}" for n in notes]
    word = "maximize" if g["sense"].startswith("max") else "minimize"
    out.append(f"  goal ({word} {g['metric']}): {fmt(g['value'])} {g['unit']}".rstrip())
    out += ["", "operating point"] + _decision_lines(result)
    out.append(f"  reactor volume {fmt(result.volume_m3 * 1000.0)} L")
    out += ["", "outlet"]
    width = max(len(k) for k in result.metrics)
    for k, m in result.metrics.items():
        out.append(f"  {k:<{width}}  {fmt(m['value'])} {m['unit']}".rstrip())
    if result.limits:
        out += ["", "limits"]
        width = max(len(lim["text"]) for lim in result.limits)
        for lim in result.limits:
            value = f"{fmt(lim['value'])} {lim['unit']}".rstrip()
            margin = f"{fmt(abs(lim['margin']))} {lim['unit']}".rstrip()
            state = f"holds, {margin} to spare" if lim["holds"] else f"MISSED by {margin}"
            out.append(f"  {lim['text']:<{width}}  {value:<14} {state}")
    out.append(f"\n{result.message}")
    out += ["", CAUTION]
    return "\n".join(out)


def front_summary(result) -> str:
    out = [f"{result.study}: front of {result.y} ({result.y_sense}) against {result.x} ({result.x_sense}): "
           f"{result.status}"]
    if result.message:
        out.append(f"  {result.message}")
    rows = []
    for i, p in enumerate(result.points):
        mark = "knee" if i == result.knee else ("dominated" if p["dominated"] else "")
        if p["status"] not in SOLVED:
            rows.append(f"  {i:>3}  level {fmt(p['level'])}: not attainable")
            continue
        dec = "  ".join(f"{k} {fmt(v, 4)}" for k, v in p["decisions"].items() if not isinstance(v, list))
        rows.append(f"  {i:>3}  {result.x} {fmt(p['x'])}  {result.y} {fmt(p['y'])}  "
                    f"d{result.y}/d{result.x} {fmt(p['trade_off'], 4)}  {dec}  {mark}".rstrip())
    out += rows
    t = result.timing
    if t:
        at_once = " (the two at once, in 2 processes)" if t.get("end_processes") == 2 else ""
        out.append("time: " + ", ".join(f"{k} {v:.2f} s" + (at_once if k == "ends" else "")
                                        for k, v in t.items() if k != "end_processes"))
    out += ["", CAUTION]
    return "\n".join(out)


def _with_unit(text: str, unit: str | None) -> str:
    return f"{text} {unit}" if unit else text


def window_summary(w) -> str:
    share = float(w.window.mean())
    out = [f"{w.study}: {w.goal} over {w.x} [{w.x_unit}] and {w.y} [{w.y_unit}], "
           f"{len(w.x_values)} x {len(w.y_values)} cells ({w.method})",
           "  other decisions: " + (", ".join(_with_unit(f"{k} = {fmt(v)}", w.units.get(k)) for k, v in w.fixed.items())
                                    or "none"),
           f"  every limit holds in {100 * share:.1f} % of the map"]
    for text, h in w.holds.items():
        out.append(f"  {text}: holds in {100 * float(h.mean()):.1f} %")
    if w.window.any():
        import numpy as np
        goal = np.where(w.window, w.maps[w.goal], np.nan)
        j, i = np.unravel_index(np.nanargmax(goal), goal.shape)
        out.append(f"  best cell inside the window: {_with_unit(f'{w.x} {fmt(w.x_values[i])}', w.x_unit)}, "
                   f"{_with_unit(f'{w.y} {fmt(w.y_values[j])}', w.y_unit)}, "
                   f"{_with_unit(f'{w.goal} {fmt(goal[j, i])}', w.units.get(w.goal))}")
    out.append(f"time: {w.timing.get('total', 0):.2f} s")
    out += ["", CAUTION]
    return "\n".join(out)


def sweep_summary(summary: dict) -> str:
    out = [f"sweep store {summary['store']}: {summary['n']} scenarios ({summary['counts']}); run: {summary['run']}"]
    for name, d in summary["distributions"].items():
        import numpy as np
        v = np.array([x for x in d["values"] if x is not None], dtype=float)
        if v.size:
            p5, p50, p95 = np.percentile(v, [5, 50, 95])
            out.append(f"  {name:<14} median {fmt(p50)}  5-95 % {fmt(p5)} to {fmt(p95)} {d['unit']}".rstrip())
    if summary["influence"]:
        out.append(f"what matters most for {summary['goal']} (Spearman rank correlation)")
        for row in summary["influence"]:
            out.append(f"  {row['path']:<28} {row['rho']:+.3f}")
    rb = summary.get("robust")
    if rb:
        out.append(f"robustness over {rb['scenarios']} scenarios (every limit holds in at least "
                   f"{100 * rb['target']:.0f} %):")
        for row in rb["rows"]:
            vals = ", ".join(f"{n} {v}" for n, v in zip(rb["decisions"], row["values"]))
            out.append(f"  {row['label']:<28} {100 * row['share']:5.1f} %  mean {fmt(row['mean'])}  ({vals})")
        out.append(f"  {rb['text']}")
    out += ["", CAUTION]
    return "\n".join(out)


def fit_summary(result) -> str:
    """The fit for the terminal: status, parameters with standard errors and 95 % intervals, residual statistics,
    correlations, verification."""
    out = [f"{result.study}: fit {result.status}" + (f"  {result.message}" if result.message else "")]
    if not result.parameters:
        return "\n".join(out)
    width = max(len(p.path) for p in result.parameters)
    out.append(f"  {'parameter':<{width}}  {'estimate':>11}  {'std. error':>10}  {'95 % linearized':<22}  "
               "95 % profile likelihood")
    for p in result.parameters:
        se = fmt(p.se, 3) if p.se is not None else "-"
        ci = f"{fmt(p.low, 4)} to {fmt(p.high, 4)}" if p.low is not None else "-"
        pl = (f"{fmt(p.profile_low, 4) if p.profile_low is not None else 'open'} to "
              f"{fmt(p.profile_high, 4) if p.profile_high is not None else 'open'}")
        flag = "  (at its bound)" if p.at_bound else ""
        out.append(f"  {p.path:<{width}}  {fmt(p.value, 6):>11}  {se:>10}  {ci:<22}  {pl} {p.unit}{flag}")
    out.append(f"  rate constants at each reaction's T_ref; estimated as ln k at T_c = {result.T_centre:.2f} K "
               "and Ea (centred Arrhenius)")
    dof = f"{result.n_data} values, {result.dof} degrees of freedom"
    if result.chi_square is not None:
        p_value = result.lack_of_fit.get("p_value")
        out.append(f"  weighted SSR (chi-square) {fmt(result.chi_square, 5)}, {dof}, P(chi2 > SSR) = {p_value:.3g}")
    else:
        out.append(f"  SSR {fmt(result.ssr, 6)} (mol/L)^2, {dof}; estimated standard deviation "
                   f"{fmt(result.sigma, 4)} mol/L")
    if result.residual_summary:
        out.append("  residuals (in standard deviations): " + ", ".join(
            f"{r['species']} RMS {r['rms'] / (1 if result.chi_square is not None else (result.sigma or 1)):.2f} "
            f"mean {r['mean'] / (1 if result.chi_square is not None else (result.sigma or 1)):+.2f}"
            for r in result.residual_summary))
    if result.starts:
        ok = [r for r in result.starts if r.get("ssr") is not None]
        best = sum(1 for r in result.starts if r.get("best"))
        out.append(f"  starts: {len(ok)} of {len(result.starts)} converged, {best} reached the best fit")
    if result.correlation and len(result.correlation) > 1:
        names = [p.path.split(".", 1)[1] for p in result.parameters]
        pairs = [(abs(result.correlation[i][j]), names[i], names[j], result.correlation[i][j])
                 for i in range(len(names)) for j in range(i)]
        top = max(pairs)
        out.append(f"  largest correlation {top[3]:+.3f} ({top[1]}, {top[2]})")
    for e in result.experiments:
        out.append(f"  experiment {e['id']}: {e['vessel']} at {e['T']:.2f} K, {e['samples']} values, "
                   f"SSR {fmt(e['ssr'], 4)}")
    c = result.check
    if c:
        out.append(f"  re-simulated ({c['integrator']}): largest difference {c['max_rel_difference']:.1e} of the "
                   f"largest start concentration (tolerance {c['tolerance']:.0e}), "
                   f"{'passed' if c['passed'] else 'NOT passed'}, {c['elements_per_interval']} element(s) per "
                   "sampling interval")
    for w in result.warnings:
        out.append(f"  warning: {w}")
    for t in result.suggestions:
        out.append(f"  to determine {t}")
    if result.rivals:
        out.append("  rival networks (same data): " + "; ".join(_rival_line(r) for r in result.rivals))
    out.append(CAUTION)
    return "\n".join(out)


def _rival_line(r: dict) -> str:
    if r.get("ssr") is None:
        return f"{r['network']}: {r['status']}"
    text = f"{r['network']}: SSR {fmt(r['ssr'], 5)}, {r['p']} parameters, AICc {r['aicc']:.1f}, weight {r['weight']:.3g}"
    test = r.get("test") or {}
    if test.get("test"):
        from tubeyield.report.html import nested_verdict
        text += f"; {nested_verdict(test)}"
    return text


def robust_summary(result) -> str:
    """The robust point for the terminal: the decisions, the goal over the scenarios, the guarantee, the front of
    goal against share, and the validation of the nominal, backed-off and robust points side by side."""
    out = [f"{result.study}: robust point {result.status}" + (f"  {result.message}" if result.message else "")]
    if not result.decisions:
        return "\n".join(out + [CAUTION])
    g = result.goal
    out.append(f"  {g['objective']} {g['metric']} over the {result.scenarios} training scenarios: {fmt(g['value'], 5)} "
               f"(the nominal optimum: {fmt(g.get('nominal'), 5)} at the nominal parameters)")
    out.append("  decisions: " + ", ".join(
        f"{n} {fmt(d['value'], 5) if not isinstance(d['value'], list) else 'profile'} {d['unit']}".rstrip()
        for n, d in result.decisions.items()))
    out.append(f"  {result.decision_count} decision(s); {result.discarded} scenario(s) discarded (share required "
               f"{100 * result.share_required:.0f} %)")
    if result.guarantee.get("statement"):
        out.append(f"  scenario bound: {result.guarantee['statement']}")
    tr = result.training
    out.append(f"  training scenarios simulated at the point: {tr['meet_every_limit']} of {tr['kept']} meet every "
               f"limit (tolerance {tr['tolerance']:.0e})")
    if tr.get("start") and tr["start"] != "the nominal optimum":
        out.append("  Ipopt did not converge from the nominal optimum at the first try; it started again from "
                   f"{tr['start']}")
    if len(result.front) > 1:
        out.append("  front (share of training scenarios whose limits hold -> goal): " + ", ".join(
            f"{100 * f['share']:.0f} % -> {fmt(f['goal'], 5)}" for f in result.front))
    out.append(f"  validation on {result.validation} fresh scenarios:")
    width = max(len(p["name"]) for p in result.points)
    for p in result.points:
        worst = ", ".join(f"{k} {100 * v:.1f} %" for k, v in p["violations"].items() if v > 0) or "none"
        out.append(f"    {p['name']:<{width}}  expected {fmt(p['expected_goal'], 5)}  meets every limit in "
                   f"{100 * p['share']:.1f} % (95 % {100 * p['share_low']:.1f}-{100 * p['share_high']:.1f} %); "
                   f"violations: {worst}")
    for w in result.warnings:
        out.append(f"  warning: {w}")
    out.append(CAUTION)
    return "\n".join(out)
