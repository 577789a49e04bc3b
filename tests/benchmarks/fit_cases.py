"""Benchmarks of the fit job (`make bench`, cases g and h).

g: the gas-oil cracking benchmark (Tjoa and Biegler 1991; data as in the COPS 3.0 collection): tubeyield's fit
   against a scipy script that does what an engineer would write without tubeyield: least_squares (trust region,
   finite-difference Jacobian) on solve_ivp's Radau at rtol 1e-12, atol 1e-14, from the same start. Both must reach
   the same SSR to 1e-8 (relative).
h: the demo's fit (6 parameters, 12 invented runs at 4 temperatures) with every statistic, profile-likelihood
   intervals included (the study as `make demo` runs it, rival network left out).
"""

from __future__ import annotations

import dataclasses
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT / "tests" / "reference"))


def _gas_oil_study(tmp: Path, starts: int):
    from test_fit_gas_oil import STUDY, gas_oil_csv
    from tubeyield.study import load_study
    d = tmp / f"gas-oil-{starts}"
    d.mkdir(exist_ok=True)
    (d / "gas-oil.csv").write_text(gas_oil_csv())
    (d / "study.toml").write_text(STUDY + f"starts = {starts}\n")
    return load_study(d / "study.toml")


def _scipy_gas_oil():
    """least_squares with a finite-difference Jacobian on a Radau integration (rtol 1e-12), from theta = (1, 1, 1)."""
    from scipy.integrate import solve_ivp
    from scipy.optimize import least_squares
    from test_fit_gas_oil import DATA
    rows = [tuple(float(v) for v in chunk.split()) for chunk in DATA.replace("\n", " | ").split("|") if chunk.strip()]
    t = np.array([r[0] for r in rows[1:]])
    y = np.array([[r[1], r[2]] for r in rows[1:]]).T

    def res(theta):
        a, b, c = theta

        def f(_, z):
            return [-(a + c) * z[0] ** 2, a * z[0] ** 2 - b * z[1]]
        sol = solve_ivp(f, (0.0, t[-1]), [1.0, 0.0], method="Radau", t_eval=t, rtol=1e-12, atol=1e-14)
        return (sol.y - y).ravel()

    t0 = time.perf_counter()
    sol = least_squares(res, [1.0, 1.0, 1.0], jac="2-point", xtol=1e-12, ftol=1e-12, gtol=1e-12)
    seconds = time.perf_counter() - t0
    J = sol.jac
    cov = float(sol.fun @ sol.fun) / (sol.fun.size - 3) * np.linalg.inv(J.T @ J)
    return {"seconds": seconds, "ssr": float(sol.fun @ sol.fun), "theta": sol.x.tolist(),
            "se": np.sqrt(np.diag(cov)).tolist(), "evaluations": int(sol.nfev)}


def _fit_seconds(result) -> dict:
    t = result.timing
    linear = sum(t.get(k, 0.0) for k in ("build", "solve", "check", "statistics"))
    return {"fit_linearized_s": linear, "fit_total_s": t.get("total"), "stages": dict(t)}


def case_fits(rows: list, notes: list, tmp: Path, quick: bool) -> None:
    from tubeyield.jobs.fit import fit
    from tubeyield.study import load_study
    # g: gas oil, one start (the scipy script has one too), and the default four
    fit(_gas_oil_study(tmp, 1))                                     # warm the imports and casadi
    one = fit(_gas_oil_study(tmp, 1))
    four = fit(_gas_oil_study(tmp, 4))
    ref = _scipy_gas_oil()
    g = {"case": "g", "description": "gas-oil fit, 3 parameters, 40 values", "status": one.status,
         "ssr": one.ssr, "scipy_ssr": ref["ssr"], "scipy_s": ref["seconds"], "scipy_evaluations": ref["evaluations"],
         "same_ssr": abs(one.ssr - ref["ssr"]) <= 1e-8 * ref["ssr"], "four_starts_s": four.timing.get("total"),
         **_fit_seconds(one)}
    g["speedup"] = ref["seconds"] / g["fit_linearized_s"] if g["same_ssr"] else None
    rows.append(g)
    if not g["same_ssr"]:
        notes.append(f"gas oil: tubeyield's SSR {one.ssr:.10g} and scipy's {ref['ssr']:.10g} differ by more than 1e-8")
    # h: the demo's fit, without the rival network
    study = load_study(ROOT / "scenarios" / "oxidation.toml")
    study = dataclasses.replace(study, fit=dataclasses.replace(study.fit, rivals=()))
    result = fit(study)
    rows.append({"case": "h", "description": "demo fit: 6 parameters, 12 runs at 4 temperatures, 480 values",
                 "status": result.status, "ssr": result.ssr, "starts": len(result.starts),
                 "profiles_closed": sum(p.profile_low is not None and p.profile_high is not None
                                        for p in result.parameters), "parameters": len(result.parameters),
                 **_fit_seconds(result)})


def report_lines(by: dict) -> list:
    fmt = lambda v, d=3: "-" if v is None else (f"{v:.{d}g}" if isinstance(v, float) else str(v))
    out = []
    g, h = by.get("g"), by.get("h")
    if g:
        out += ["", "## Kinetic fitting", "",
                f"g: {g['description']}. tubeyield, one start, with linearized statistics: "
                f"**{fmt(g['fit_linearized_s'])} s** (stages {_stages(g['stages'])}); with profile-likelihood "
                f"intervals and curves {fmt(g['fit_total_s'])} s; with its default 4 starts "
                f"{fmt(g['four_starts_s'])} s. scipy least_squares (finite-difference Jacobian, Radau rtol 1e-12): "
                f"{fmt(g['scipy_s'])} s ({g['scipy_evaluations']} residual evaluations). SSR {g['ssr']:.10g} against "
                f"{g['scipy_ssr']:.10g} ({'the same' if g['same_ssr'] else 'NOT the same'} to 1e-8); speed-up "
                f"**{fmt(g['speedup'])}x**."]
    if h:
        out += ["", f"h: {h['description']}: **{fmt(h['fit_total_s'])} s** with every statistic and "
                    f"{h['profiles_closed']} of {h['parameters']} profile-likelihood intervals closed, {h['starts']} "
                    f"starts (stages {_stages(h['stages'])})."]
    return out


def _stages(stages: dict) -> str:
    return ", ".join(f"{k} {v:.2f}" for k, v in stages.items() if k != "total")


def targets(by: dict, line) -> None:
    g, h = by.get("g"), by.get("h")
    if g:
        line("gas-oil fit with statistics in under 1 s", f"{g['fit_linearized_s']:.2f} s", g["fit_linearized_s"] < 1.0,
             "see the stage times")
        sp = g.get("speedup")
        line("gas-oil fit at least 20x faster than scipy least_squares, same SSR to 1e-8",
             f"{sp:.1f}x" if sp else "SSR differs", bool(sp and sp >= 20), f"short by {20 / sp:.1f}x" if sp else "")
    if h:
        line("demo fit (6 parameters, 12 runs) under 10 s with profile intervals", f"{h['fit_total_s']:.1f} s",
             h["fit_total_s"] < 10.0, "see the stage times")
