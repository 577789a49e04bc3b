"""Summary of a sweep store: distributions, which variations matter, and how robust candidate operating points are.

- Influence: Spearman's rank correlation between each varied input and the optimum and each optimal decision
  (C. Spearman, Am. J. Psychol. 15 (1904) 72; scipy.stats.spearmanr): monotone effects, insensitive to scale.
- Robustness: a candidate operating point is simulated in every scenario; its reliability is the share of scenarios
  in which every limit holds. The recommended point is the candidate with the best mean goal among those meeting the
  limits in at least the study's share (sweep.share) of the scenarios: a sampled chance constraint (sample average
  approximation; A. Shapiro, D. Dentcheva and A. Ruszczynski, Stochastic Programming: Modeling and Theory, SIAM 2009, ch. 5),
  over a finite pool of candidates: the nominal optimum, the study's named candidates, the median of the scenario
  optima, scenario optima spread over the range of the goal, and a backed-off optimum. It is the best of that pool,
  not a global optimum.
- Back-off: optima sit on active limits, so they hold in about half of the scenarios at best. The backed-off optimum
  is the nominal problem re-optimized with every limit tightened by b standard deviations of its quantity over the
  scenarios (at the nominal optimum), with the smallest b, found by bisection, that meets the target share (the
  back-off idea of design under uncertainty; e.g. V. Bahri, J. A. Bandoni and J. A. Romagnoli, AIChE J. 42 (1996) 983).
"""

from __future__ import annotations

from pathlib import PurePath

import numpy as np

from tubeyield.errors import StudyError
from tubeyield.jobs.evaluate import points_in_scenarios
from tubeyield.jobs.store import open_existing
from tubeyield.study.schema import Study
from tubeyield.study.units import decision_to_user

MAX_POOL = 12   # scenario optima added to the candidate pool


def study_of_store(meta: dict) -> Study:
    """Rebuild the study from the sources the store keeps, in memory: nothing read back from a store is written to
    any path it names. Stores of earlier versions kept the study text with included files appended after
    '# --- <path>' lines; those are read too, each include matched by its file name."""
    from tubeyield.study import study_from_sources, study_from_text
    from tubeyield.study.toml import parse_toml
    text = meta.get("study")
    if not text:
        raise StudyError("meta.study", "a store written by 'tubeyield sweep' (it keeps the study text)")
    if text.lstrip().startswith("{"):
        return study_from_sources(text, need=("sweep",))
    main, *blocks = text.split("\n# --- ")
    by_name = {}
    for block in blocks:
        path, _, body = block.partition("\n")
        by_name[PurePath(path).name] = body
    include = parse_toml(main).get("study", {}).get("include", [])
    refs = [include] if isinstance(include, str) else include if isinstance(include, list) else []
    return study_from_text(main, path="study.toml",
                           includes={r: by_name.get(PurePath(r).name, "") for r in refs if isinstance(r, str)})


def _user(study: Study, name: str, v):
    d = study.decision(name)
    if isinstance(v, list):
        return None
    return decision_to_user(v, d)


def _tightened(study: Study, b: float, spread: list[float]) -> Study:
    import dataclasses
    limits = []
    for lim, s in zip(study.goal.limits, spread):
        bound = lim.bound + b * s if lim.sense == ">=" else lim.bound - b * s
        limits.append(dataclasses.replace(lim, bound=bound))
    return dataclasses.replace(study, goal=dataclasses.replace(study.goal, limits=tuple(limits)))


def _back_off(study: Study, nominal_results, scenario_values, pool, target: float):
    """The smallest back-off b (bisection) whose re-optimized point meets every limit in `target` of the
    scenarios. Returns (label, point, results), or the reason there is none (a string)."""
    from tubeyield.jobs.optimize import optimize
    spread = []
    for k in range(len(study.goal.limits)):
        v = np.array([r[2][k] for r in nominal_results], dtype=float)
        spread.append(float(np.nanstd(v)) if np.isfinite(v).any() else 0.0)
    if not any(s > 0 for s in spread):
        return "the limit quantities do not vary over the scenarios at the nominal optimum (nothing to back off from)"
    cache = {}

    def trial(b):
        if b not in cache:
            r = optimize(_tightened(study, b, spread), starts=2)
            if r.status != "optimal":
                cache[b] = (None, None, 0.0)
            else:
                res = points_in_scenarios(study, [r.point()], scenario_values, pool)[0]
                cache[b] = (dict(r.decisions_si), res, float(np.mean([x[1] for x in res])))
        return cache[b]

    lo, hi = 0.0, 1.0
    while trial(hi)[2] < target and hi < 8.0 and trial(hi)[0] is not None:
        lo, hi = hi, hi * 2
    if trial(hi)[0] is None:
        best = max((v[2] for v in cache.values() if v[0] is not None), default=None)
        return (f"with the limits tightened by {hi:g} standard deviations of their spread no operating point meets "
                "them (the tightened study is infeasible)"
                + (f"; the best share reached on the way was {100 * best:.1f} %" if best is not None else ""))
    if trial(hi)[2] < target:
        return (f"even with the limits tightened by {hi:g} standard deviations the re-optimized point meets every "
                f"limit in only {100 * trial(hi)[2]:.1f} % of the scenarios (target {100 * target:.0f} %)")
    for _ in range(7):
        mid = 0.5 * (lo + hi)
        if trial(mid)[0] is not None and trial(mid)[2] >= target:
            hi = mid
        else:
            lo = mid
    point, res, _ = trial(hi)
    return (f"backed-off optimum (limits tightened by {hi:.2f} sd)", point, res)


def summarize(store_path, study: Study | None = None, *, workers: int | None = None, robust: bool = True) -> dict:
    store = open_existing(store_path)
    try:
        meta = store.meta()
        rows = store.rows()
        table = store.table()
    finally:
        store.close()
    study = study or study_of_store(meta)
    counts: dict = {}
    for r in rows:
        counts[r["status"]] = counts.get(r["status"], 0) + 1
    good = [r for r in rows if r["status"] in ("optimal", "evaluated") and r["goal"] is not None]
    goal = study.goal.metric.text
    summary = {"store": str(store_path), "n": len(rows), "counts": ", ".join(f"{v} {k}" for k, v in sorted(counts.items())),
               "counts_by_status": counts, "run": meta.get("run", ""), "goal": goal, "share": study.sweep.share,
               "distributions": {}, "influence": [], "robust": None,
               "table_csv": table.to_csv(index=False) if len(table) else ""}
    if not good:
        return summary
    dist = {goal: {"values": [r["goal"] for r in good], "unit": ""}}
    free = [d for d in study.decisions if not d.fixed]
    if meta.get("run") == "optimize":
        for d in free:
            vals = [_user(study, d.name, r["decisions"].get(d.name)) for r in good if r["decisions"]]
            if all(v is not None for v in vals):
                dist[d.name] = {"values": vals, "unit": d.unit}
    summary["distributions"] = dist

    from scipy.stats import spearmanr
    # every varied input: the vary paths and, with fit_uncertainty, the fitted parameters drawn from the fit
    paths = list(dict.fromkeys([v.path for v in study.sweep.vary] + [p for r in good for p in r["inputs"]]))
    for path in paths:
        if any(path not in r["inputs"] for r in good):
            continue
        x = np.array([r["inputs"][path] for r in good], dtype=float)
        if np.ptp(x) == 0:
            continue
        row = {"path": path}
        y = np.array([r["goal"] for r in good], dtype=float)
        row["rho"] = float(spearmanr(x, y).statistic) if np.ptp(y) > 0 else 0.0
        for name in dist:
            if name == goal:
                continue
            yy = np.array(dist[name]["values"], dtype=float)
            row[f"rho:{name}"] = float(spearmanr(x, yy).statistic) if np.ptp(yy) > 0 else 0.0
        summary["influence"].append(row)
    summary["influence"].sort(key=lambda r: -abs(r["rho"]))

    if robust and free:
        summary["robust"] = _robustness(study, rows, good, workers)
    return summary


def _robustness(study: Study, rows, good, workers) -> dict:
    scenario_values = [r["inputs"] for r in rows if r["status"] != "failed" or "invalid scenario" not in (r["error"] or "")]
    invalid = len(rows) - len(scenario_values)
    left_out = (f"{invalid} scenario(s) were left out of the shares: their sampled inputs are outside the physical "
                "range (e.g. a negative activation energy from a normal tail)." if invalid else "")
    pool: list[tuple[str, dict]] = []
    from tubeyield.jobs.optimize import optimize
    nominal = optimize(study)
    if nominal.status == "optimal" and not any(isinstance(v, list) for v in nominal.decisions_si.values()):
        pool.append(("nominal optimum", dict(nominal.decisions_si)))
    pool += [(name, dict(values)) for name, values in study.sweep.candidates]
    optimal = [r for r in good if r["decisions"] and not any(isinstance(v, list) for v in r["decisions"].values())]
    if optimal:
        names = [d.name for d in study.decisions]
        med = {n: float(np.median([r["decisions"][n] for r in optimal])) for n in names}
        pool.append(("median of scenario optima", med))
        order = sorted(optimal, key=lambda r: r["goal"])
        picks = np.unique(np.linspace(0, len(order) - 1, min(MAX_POOL, len(order))).round().astype(int))
        for k in picks:
            pool.append((f"optimum of scenario {order[k]['idx']}", dict(order[k]["decisions"])))
    target = study.sweep.share
    executor = None
    if (workers or 2) > 1:
        from tubeyield.jobs.executor import LocalExecutor
        executor = LocalExecutor(workers)
    try:
        procs = executor.pool if executor else None
        results = points_in_scenarios(study, [p for _, p in pool], scenario_values, procs)
        why_not = ""
        if pool and pool[0][0] == "nominal optimum":
            backed = _back_off(study, results[0], scenario_values, procs, target)
            if isinstance(backed, str):
                why_not = f"No backed-off optimum: {backed}."
            else:
                pool.append(backed[:2])
                results.append(backed[2])
        else:
            why_not = (f"No backed-off optimum: the nominal optimization ended {nominal.status}"
                       + (f" ({nominal.message})" if nominal.message else "") + ".")
    finally:
        if executor:
            executor.shutdown()
    names = [d.name for d in study.decisions if not d.fixed]
    table = []
    for (label, point), res in zip(pool, results):
        g = np.array([x[0] for x in res], dtype=float)
        ok = np.array([x[1] for x in res], dtype=bool)
        table.append({"label": label, "point": point, "values": [f"{_user(study, n, point[n]):.5g}" for n in names],
                      "share": float(ok.mean()) if ok.size else 0.0,
                      "mean": float(np.nanmean(g)) if np.isfinite(g).any() else None,
                      "p05": float(np.nanpercentile(g, 5)) if np.isfinite(g).any() else None})
    sense = 1 if study.goal.sense == "max" else -1
    meeting = [t for t in table if t["share"] >= target - 1e-12 and t["mean"] is not None]
    if meeting:
        best = max(meeting, key=lambda t: sense * t["mean"])
        text = (f"Recommended: {best['label']}, which meets every limit in {100 * best['share']:.1f} % of "
                f"{len(scenario_values)} scenarios (target {100 * target:.0f} %) with mean {study.goal.metric.text} "
                f"{best['mean']:.4g}.")
    else:
        best = max(table, key=lambda t: t["share"]) if table else None
        text = (f"No candidate meets every limit in {100 * target:.0f} % of the scenarios; the most reliable is "
                f"{best['label']} at {100 * best['share']:.1f} %." if best else
                "No candidate points: the nominal optimization did not give one, the study names no candidates, and "
                "no scenario was solved to an optimum.")
    text = " ".join(t for t in (text, why_not, left_out) if t)
    table.sort(key=lambda t: (-t["share"], -sense * (t["mean"] or 0.0)))
    return {"text": text, "decisions": names, "rows": table, "best": best["label"] if best else None,
            "target": target, "scenarios": len(scenario_values), "left_out": len(rows) - len(scenario_values)}
