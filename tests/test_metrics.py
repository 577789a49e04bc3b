"""Yields along stoichiometric paths and co-products.

Reference: for a chain A -> nu B -> ..., the key reactant consumed is distributed over the products carried along the
paths, so the yields (with the path factors) add up to the conversion (Levenspiel, Chemical Reaction Engineering,
3rd ed. 1999, ch. 8: series and parallel reactions, mass balance on the key reactant). The outlet is integrated
independently with scipy's solve_ivp (Radau) from the rate laws written here.
"""

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from helpers import study_from_toml
from tubeyield.chemistry.network import co_products, yield_paths
from tubeyield.jobs.evaluate import evaluate
from tubeyield.reactor.metrics import all_metrics

# Invented kinetics (tests only): a condensation A + E -> B + W, B splitting into two C, and a parallel A -> D + W.
NETWORK = """
[species.A]
formula = "C4H8O2"
[species.E]
formula = "C2H6O"
[species.B]
formula = "C6H12O2"
[species.W]
formula = "H2O"
[species.C]
formula = "C3H6O"
[species.D]
formula = "C4H6O"
[[reaction]]
id = "condense"
equation = "A + E -> W + B"
k = "0.02 L/(mol*s)"
T_ref = "350 K"
Ea = "50 kJ/mol"
[[reaction]]
id = "split"
equation = "B -> 2 C"
k = "0.01 1/s"
T_ref = "350 K"
Ea = "60 kJ/mol"
[[reaction]]
id = "dehydrate"
equation = "A -> D + W"
k = "0.004 1/s"
T_ref = "350 K"
Ea = "40 kJ/mol"
[feed]
flow = "1 L/min"
conc = { A = "1 mol/L", E = "2 mol/L" }
[reactor]
kind = "plug"
heat = "isothermal"
elements = 30
[operate]
tau = ["1 s", "600 s"]
T = ["320 K", "380 K"]
[goal]
maximize = "yield:B"
key = "A"
"""


def test_paths_through_intermediates_and_co_products():
    study = study_from_toml(NETWORK, "paths")
    paths = yield_paths(study)
    assert paths == {"B": (1.0, ("condense",)), "C": (0.5, ("condense", "split")), "D": (1.0, ("dehydrate",))}
    assert co_products(study) == {"W"}                    # water is carried by no path (lighter than B and D)
    shown = {m.text for m in all_metrics(study)}
    assert {"yield:B", "yield:C", "yield:D", "selectivity:C"} <= shown
    assert not {m for m in shown if m.endswith(":W")}


def test_yields_along_paths_sum_to_the_conversion_against_scipy():
    study = study_from_toml(NETWORK, "paths")
    tau, T = 30.0, 360.0
    ev = evaluate(study, {"tau": tau, "T": T})

    R = 8.314462618
    def k(k_ref, Ea):
        return k_ref * np.exp(-Ea / R * (1 / T - 1 / 350.0))
    k1, k2, k3 = k(0.02e-3, 50e3), k(0.01, 60e3), k(0.004, 40e3)     # SI: m^3/(mol s), 1/s, 1/s

    def rhs(_, c):
        A, E, B, W, C, D = c
        r1, r2, r3 = k1 * A * E, k2 * B, k3 * A
        return [-r1 - r3, -r1, r1 - r2, r1 + r3, 2 * r2, r3]
    sol = solve_ivp(rhs, (0, tau), [1000.0, 2000.0, 0, 0, 0, 0], method="Radau", rtol=1e-10, atol=1e-9)
    A, _, B, _, C, D = sol.y[:, -1]
    x_ref = 1 - A / 1000.0
    y_ref = {"B": B / 1000.0, "C": 0.5 * C / 1000.0, "D": D / 1000.0}

    m = {k: v["value"] for k, v in ev.metrics.items()}
    assert m["conversion:A"] == pytest.approx(x_ref, abs=1e-6)
    for s, y in y_ref.items():
        assert m[f"yield:{s}"] == pytest.approx(y, abs=1e-6)
    assert m["yield:B"] + m["yield:C"] + m["yield:D"] == pytest.approx(m["conversion:A"], abs=1e-9)
    assert m["selectivity:B"] + m["selectivity:C"] + m["selectivity:D"] == pytest.approx(1.0, abs=1e-8)
    assert 0.05 < x_ref < 0.95                              # a point where the shares are all visible


def test_a_named_co_product_is_reported_per_mol_of_key_reactant():
    study = study_from_toml(NETWORK.replace('maximize = "yield:B"', 'maximize = "yield:W"'), "water")
    # the study asks for water: it is then carried by the first reaction, and the heavier B becomes the co-product
    assert yield_paths(study)["W"] == (1.0, ("condense",))
    assert "yield:W" in {m.text for m in all_metrics(study)}
