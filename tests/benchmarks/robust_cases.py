"""Benchmarks of the robust job (`make bench`, case i): the demo on its fitted kinetics, with the catalyst activity
and the fit's uncertainty, at N = 10, 20 and 50 training scenarios (cost against N), and with a required share of
0.9 (the front of expected yield against the share held)."""

from __future__ import annotations

import dataclasses
import json
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def _demo_with_fit(tmp: Path):
    from tubeyield.jobs.fit import fit
    from tubeyield.study import load_study
    from tubeyield.study.read_kinetics import load_kinetics
    study = load_study(ROOT / "scenarios" / "oxidation.toml")
    result = fit(dataclasses.replace(study, fit=dataclasses.replace(study.fit, rivals=())))
    path = tmp / "fit.json"
    path.write_text(json.dumps({"kinetics": result.kinetics}))
    return load_kinetics(study, path)


def case_robust(rows: list, notes: list, tmp: Path, quick: bool) -> None:
    from tubeyield.jobs.robust import robust
    study = _demo_with_fit(tmp)
    sizes = [10, 20] if quick else [10, 20, 50]
    runs = []
    for n in sizes:
        t0 = time.perf_counter()
        r = robust(study, scenarios=n, validation=100 if quick else 400)
        seconds = time.perf_counter() - t0
        runs.append({"scenarios": n, "seconds": seconds, "status": r.status, "goal": r.goal["value"],
                     "share": r.points[-1]["share"] if r.points else None,
                     "nominal_share": r.points[0]["share"] if r.points else None,
                     "solve_s": r.timing.get("solve"), "build_s": r.timing.get("build"),
                     "validation_s": r.timing.get("validation"), "iterations": r.timing.get("iterations")})
    t0 = time.perf_counter()
    fr = robust(study, scenarios=20 if quick else 50, share=0.9, validation=100 if quick else 400)
    front_s = time.perf_counter() - t0
    rows.append({"case": "i", "description": "robust point of the demo (fitted kinetics, catalyst activity)",
                 "runs": runs, "front": fr.front, "front_s": front_s, "front_status": fr.status,
                 "front_share": fr.points[-1]["share"] if fr.points else None})


def report_lines(by: dict) -> list:
    r = by.get("i")
    if not r:
        return []
    out = ["", "## Robust point", "", f"i: {r['description']}, 2 workers for the validation:", "",
           "| training scenarios | time [s] | build [s] | NLP solve [s] | validation [s] | Ipopt iterations | expected yield | robust share | nominal share |",
           "| --- | --- | --- | --- | --- | --- | --- | --- | --- |"]
    for x in r["runs"]:
        out.append(f"| {x['scenarios']} | {x['seconds']:.1f} | {x['build_s'] or 0:.1f} | {x['solve_s'] or 0:.1f} | "
                   f"{x['validation_s'] or 0:.1f} | {x['iterations']} | {x['goal']:.5f} | "
                   f"{100 * (x['share'] or 0):.1f} % | {100 * (x['nominal_share'] or 0):.1f} % |")
    out += ["", f"Front of expected yield against the share of training scenarios held (required 0.9, "
                f"{r['front_s']:.1f} s): " + ", ".join(f"{100 * f['share']:.0f} % -> {f['goal']:.5f}"
                                                       for f in r["front"]) + "."]
    return out


def targets(by: dict, line) -> None:
    r = by.get("i")
    if not r:
        return
    big = max(r["runs"], key=lambda x: x["scenarios"])
    line(f"robust point, {big['scenarios']} scenarios of the demo, under 30 s on 2 cores", f"{big['seconds']:.1f} s",
         big["seconds"] < 30.0, "see the stage times")
    small, large = r["runs"][0], r["runs"][-1]
    growth = (large["solve_s"] / small["solve_s"]) / (large["scenarios"] / small["scenarios"])
    line("NLP cost close to linear in the number of scenarios", f"x{large['solve_s'] / small['solve_s']:.1f} for "
         f"x{large['scenarios'] / small['scenarios']:.0f} scenarios", growth <= 1.5, f"{growth:.2f}x of linear")
    line("a front of yield against the required share", f"{len(r['front'])} points", len(r["front"]) > 1)
