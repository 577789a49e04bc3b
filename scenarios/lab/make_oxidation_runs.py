"""INVENTED lab data for the tubeyield demo: twelve batch runs of the fictional oxidation in oxidation.toml.

Nothing here was measured. The runs are simulated from the "true" kinetics below (made up, and deliberately a little
different from the rough values in oxidation-network.toml, so that the demo's fit has something to find), with
seeded Gaussian noise of 0.004 mol/L on every reading (readings below zero reported as 0, as a lab's detection limit
would), and rounded to 0.1 mmol/L. Run it again to regenerate oxidation-runs.csv exactly:

    python scenarios/lab/make_oxidation_runs.py

Integration: scipy's Radau at rtol 1e-12 (independent of tubeyield's own code).
"""

import math
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp

R = 8.314462618
T_REF = 350.0
# (k at 350 K in L/(mol s), Ea in kJ/mol): the invented truth
TRUE = {"main": (0.0115, 63.0), "over": (0.0017, 88.0), "side": (0.0008, 100.0), "dimer": (0.0055, 35.0)}
TEMPERATURES = (325.0, 340.0, 355.0, 370.0)     # K
RATIOS = (1.0, 2.0, 3.0)                        # mol O per mol A at the start, A0 = 1 mol/L
NOISE = 0.004                                   # mol/L
SAMPLES = 8
SPECIES = ("A", "O", "B", "C", "D", "E", "W")
MEASURED = ("A", "B", "C", "D", "E")


def k(name, T):
    k350, Ea = TRUE[name]
    return k350 * math.exp(-Ea * 1e3 / R * (1.0 / T - 1.0 / T_REF))


def rhs(t, c, T):
    A, O, B, C, D, E, W = np.maximum(c, 0.0)
    r_main, r_over, r_side, r_dimer = k("main", T) * A * O, k("over", T) * B * O, k("side", T) * A * O, \
        k("dimer", T) * B * B
    return [-r_main - r_side, -r_main - r_over - r_side, r_main - r_over - 2 * r_dimer, r_over, r_side, r_dimer,
            r_main + 2 * r_over + r_side + r_dimer]


def main() -> None:
    rng = np.random.default_rng(2026)
    lines = ["# INVENTED DATA for the tubeyield demo (fictional chemistry; see make_oxidation_runs.py): no lab measured",
             "# these numbers. Batch runs from A = 1 mol/L, noise 0.004 mol/L.",
             "run, t [min], A [mol/L], B [mol/L], C [mol/L], D [mol/L], E [mol/L]"]
    for T in TEMPERATURES:
        for ratio in RATIOS:
            run = f"T{T:.0f}-O{ratio:.0f}"
            t_end = 3.0 / (k("main", T) * ratio)                     # s: about 95 % of A converted
            times = np.round(np.linspace(t_end / SAMPLES, t_end, SAMPLES) / 60.0, 2) * 60.0
            c0 = [1.0, ratio, 0.0, 0.0, 0.0, 0.0, 0.0]
            sol = solve_ivp(rhs, (0.0, times[-1]), c0, method="Radau", t_eval=times, rtol=1e-12, atol=1e-14,
                            args=(T,))
            for i, t in enumerate(times):
                readings = [max(sol.y[SPECIES.index(s), i] + rng.normal(0.0, NOISE), 0.0) for s in MEASURED]
                lines.append(f"{run}, {t / 60.0:.2f}, " + ", ".join(f"{v:.4f}" for v in readings))
    out = Path(__file__).with_name("oxidation-runs.csv")
    out.write_text("\n".join(lines) + "\n")
    print(f"wrote {out} ({len(lines) - 3} rows)")


if __name__ == "__main__":
    main()
