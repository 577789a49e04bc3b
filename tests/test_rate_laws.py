"""Rate laws from the registry (study/laws.py): values, closed forms, and constants that sweeps vary without a rebuild.

References:
  [FBD] Froment, Bischoff and De Wilde, Chemical Reactor Analysis and Design, 3rd ed., Wiley 2011, ch. 2:
        the Hougen-Watson rate forms (adsorption in the denominator).
  [HW]  Hougen and Watson, Chemical Process Principles III, Wiley 1947; Fogler, Elements of Chemical Reaction
        Engineering, 5th ed. 2016, ch. 10 (from memory): bimolecular surface reaction, r = k K_A c_A K_B c_B /
        (1 + K_A c_A + K_B c_B)^2.
The closed form for an equimolar feed of A and B in plug flow is integrated by hand from that rate law
(tau = int dc / r), and the outlet is also integrated with scipy's solve_ivp.
"""

import math

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from helpers import study_from_toml
from tubeyield.jobs.evaluate import evaluate
from tubeyield.jobs.optimize import optimize
from tubeyield.jobs.problem import prepare
from tubeyield.study.variation import apply_values
from tubeyield.study.laws import LAWS, Adsorption, LangmuirHinshelwood, PowerLaw, Reversible

# Invented kinetics (tests only).
LH = """
[species.A]
[species.B]
[species.C]
[[reaction]]
id = "surface"
equation = "A + B -> C"
law = "langmuir-hinshelwood"
k = "0.02 mol/(L*s)"
T_ref = "400 K"
Ea = "40 kJ/mol"
adsorption = { A = { K = "2 L/mol", dH = "-15 kJ/mol" }, B = { K = "2 L/mol", dH = "-15 kJ/mol" } }
[feed]
flow = "1 L/min"
conc = { A = "1 mol/L", B = "1 mol/L" }
[reactor]
kind = "plug"
heat = "isothermal"
elements = 40
[operate]
tau = ["1 s", "900 s"]
T = ["380 K", "420 K"]
[goal]
maximize = "conversion:A"
key = "A"
limits = ["conversion:A <= 0.7"]
"""


def test_every_law_is_registered_once_with_its_source():
    assert set(LAWS) == {"power", "reversible", "adsorption", "langmuir-hinshelwood"}
    for name, law in LAWS.items():
        assert law.name == name and law.source


def test_law_rate_values_against_the_formulas():
    from tubeyield.study.kinetics import VantHoff
    conc, T, k = {"A": 300.0, "B": 200.0, "C": 50.0}, 410.0, 0.7
    K_A, K_B = VantHoff(math.log(2e-3), 400.0, -15e3), VantHoff(math.log(1e-3), 400.0, -5e3)
    ka, kb = (math.exp(v.ln_value(T, math)) for v in (K_A, K_B))
    forward = conc["A"] * conc["B"]
    assert PowerLaw().rate(k, forward, conc, T, math, None) == k * forward
    ads = Adsorption((("A", K_A), ("B", K_B)), 2.0)
    assert ads.rate(k, forward, conc, T, math, None) == pytest.approx(k * forward / (1 + ka * 300 + kb * 200) ** 2,
                                                                      rel=1e-14)
    lh = LangmuirHinshelwood(("A", "B"), (("A", K_A), ("B", K_B)))
    assert lh.rate(k, forward, conc, T, math, None) == pytest.approx(
        k * ka * 300 * kb * 200 / (1 + ka * 300 + kb * 200) ** 2, rel=1e-14)
    rev = Reversible((("C", 1.0),), math.log(4e-3), 400.0, -1.0)
    K = 4e-3 * math.exp(20e3 / 8.314462618 * (1 / T - 1 / 400.0))          # van 't Hoff with dH = -20 kJ/mol
    assert rev.rate(k, forward, conc, T, math, -20e3) == pytest.approx(k * (forward - 50.0 / K), rel=1e-12)


def test_langmuir_hinshelwood_plug_flow_against_its_closed_form_and_scipy():
    study = study_from_toml(LH, "lh")
    tau, T = 300.0, 400.0
    ev = evaluate(study, {"tau": tau, "T": T})
    x = ev.metrics["conversion:A"]["value"]
    k, K, c0 = 0.02 * 1000.0, 2e-3, 1000.0                                 # SI at T_ref: mol/(m^3 s), m^3/mol
    c = c0 * (1 - x)
    # tau = (1/(k K^2)) [ (1/c - 1/c0) + 4 K ln(c0/c) + 4 K^2 (c0 - c) ]   (equimolar A and B, c_A = c_B = c)
    tau_closed = ((1 / c - 1 / c0) + 4 * K * math.log(c0 / c) + 4 * K ** 2 * (c0 - c)) / (k * K ** 2)
    assert tau_closed == pytest.approx(tau, rel=1e-7)
    sol = solve_ivp(lambda _, y: [-k * K * y[0] * K * y[0] / (1 + 2 * K * y[0]) ** 2], (0, tau), [c0],
                    method="Radau", rtol=1e-11, atol=1e-10)
    assert x == pytest.approx(1 - sol.y[0, -1] / c0, abs=1e-8)
    assert 0.2 < x < 0.9


def test_langmuir_hinshelwood_reads_its_keys_and_refuses_others():
    from tubeyield.errors import StudyError
    with pytest.raises(StudyError, match="only for law = 'adsorption'"):
        study_from_toml(LH.replace('law = "langmuir-hinshelwood"', 'law = "langmuir-hinshelwood"\n'
                                   'denominator_power = 2'), "bad")
    with pytest.raises(StudyError, match="an adsorption constant for each reactant; 'B'"):
        study_from_toml(LH.replace(', B = { K = "2 L/mol", dH = "-15 kJ/mol" }', ''), "bad")
    with pytest.raises(StudyError, match="two different reactants"):
        study_from_toml(LH.replace('equation = "A + B -> C"', 'equation = "A -> C"'), "bad")


def test_law_constants_are_pinned_so_a_sweep_varies_them_without_a_rebuild():
    base = study_from_toml(LH, "lh")
    changed = apply_values(base, {"reaction.surface.K.A": 5e-3, "reaction.surface.dH.B": -30e3})
    assert changed.reaction("surface").law.terms[0][1].ln_K_ref == pytest.approx(math.log(5e-3))
    model = prepare(base)
    reused = optimize(changed, model=model)                # the base model, its pinned constants moved
    fresh = optimize(changed)
    assert reused.status == fresh.status == "optimal"
    assert reused.goal["value"] == pytest.approx(fresh.goal["value"], rel=1e-8)
    # The optimum is a curve (conversion <= 0.7 with conversion maximized: any tau, T on conversion = 0.7), so the
    # two runs may stop at different points of it. What shows the constants were moved: the reference simulation
    # with the changed constants reaches the limit at the reused model's point, and with the base constants it does not.
    def conversion(study):
        return evaluate(study, reused.decisions_si).metrics["conversion:A"]["value"]
    assert conversion(changed) == pytest.approx(0.7, rel=1e-6)
    assert conversion(base) != pytest.approx(0.7, rel=1e-3)


def test_sweep_paths_of_law_constants_parse_with_units():
    text = LH + '[sweep]\nvary = { "reaction.surface.K.A" = { values = ["1 L/mol", "3 L/mol"] } }\n'
    study = study_from_toml(text, "lh")
    assert [v * 1e3 for v in study.sweep.vary[0].values] == pytest.approx([1.0, 3.0])
    from tubeyield.errors import StudyError
    with pytest.raises(StudyError, match="one of k, k_factor, Ea, dH, K.A, dH.A, K.B, dH.B"):
        study_from_toml(LH + '[sweep]\nvary = { "reaction.surface.K.C" = { values = ["1 L/mol"] } }\n', "lh")
    with pytest.raises(StudyError, match="concentration\\^-1"):
        study_from_toml(LH + '[sweep]\nvary = { "reaction.surface.K.A" = { values = ["1 1/s"] } }\n', "lh")


def test_reversible_K_is_a_sweep_path():
    text = """
[species.A]
[species.B]
[[reaction]]
id = "iso"
equation = "A <=> B"
k = "0.1 1/s"
K = "3"
T_ref = "350 K"
[feed]
flow = "1 L/min"
conc = { A = "1 mol/L" }
[reactor]
heat = "isothermal"
[operate]
tau = "600 s"
T = "350 K"
[goal]
maximize = "conversion:A"
"""
    study = study_from_toml(text, "rev")
    for K in (3.0, 9.0):
        ev = evaluate(apply_values(study, {"reaction.iso.K": K}), {"tau": 600.0, "T": 350.0})
        # after 60 time constants the outlet sits at equilibrium: X = K / (1 + K)
        assert ev.metrics["conversion:A"]["value"] == pytest.approx(K / (1 + K), rel=1e-9)
    assert np.isfinite(K)


def test_the_simulation_gives_one_state_and_a_batch_of_states_the_same_rates():
    # The reference simulation evaluates the rate laws on Python floats for one state (LSODA's calls) and on numpy
    # arrays for several (BDF's Jacobian); both must give the same right-hand side to round-off (common practice:
    # the reference must not depend on which integrator asked; a product of a matrix with one column and with two
    # may sum in another order, so the last bit may differ).
    from helpers import SCENARIOS
    from tubeyield.reactor.simulate import simulate
    from tubeyield.study import load_study

    for study, decisions in ((study_from_toml(LH), {"tau": 30.0, "T": 405.0}),
                             (load_study(SCENARIOS / "oxidation.toml"), {"tau": 600.0, "T": 360.0, "ratio.O": 1.5})):
        sim = simulate(study, {d.name: decisions.get(d.name, d.low) for d in study.decisions})
        n = len(study.symbols)
        rng = np.random.default_rng(3)
        for z in (0.0, 0.37, 1.0):
            y = np.abs(sim.segments[0][2].sol(z)) * rng.uniform(0.5, 1.5, n)     # a state near the reactor's
            one = sim.rhs(z, y)
            batch = sim.rhs(z, np.column_stack([y, 0.5 * y]))
            np.testing.assert_allclose(one, batch[:, 0], rtol=1e-14, atol=1e-300, err_msg=f"{study.name} {z}")
            assert not np.array_equal(batch[:, 0], batch[:, 1])
