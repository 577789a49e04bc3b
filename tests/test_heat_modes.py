"""Heat modes and phases beyond the reference checks: cooled tubes, adiabatic tanks, gas feeds with ratio decisions.

The collocation model and the reference simulation are compared at every optimum (the job's own check), and the
physics is checked at limits where the answer is known (common practice): a cooled tube with a very large wall
coefficient runs at the coolant temperature, so it must match the isothermal tube at that temperature.
"""

import numpy as np
import pytest

from helpers import study_from_toml
from tubeyield.jobs.evaluate import evaluate
from tubeyield.jobs.optimize import optimize

NETWORK = """
[species.A]
Cp = "150 J/(mol*K)"
[species.B]
Cp = "150 J/(mol*K)"
[species.C]
Cp = "150 J/(mol*K)"
[species.S]
label = "solvent"
Cp = "80 J/(mol*K)"
[[reaction]]
id = "first"
equation = "A -> B"
k = "0.02 1/s"
T_ref = "350 K"
Ea = "60 kJ/mol"
dH = "-80 kJ/mol"
[[reaction]]
id = "second"
equation = "B -> C"
k = "0.004 1/s"
T_ref = "350 K"
Ea = "90 kJ/mol"
dH = "-60 kJ/mol"
[feed]
flow = "1 L/min"
conc = { A = "1 mol/L", S = "10 mol/L" }
"""


def cooled(U: str, tau='["10 s", "600 s"]', T_cool='["300 K", "370 K"]', limits="[]"):
    return study_from_toml(NETWORK + f"""
[reactor]
heat = "cooled"
U = "{U}"
diameter = "20 mm"
[operate]
tau = {tau}
T_in = "330 K"
T_cool = {T_cool}
[goal]
maximize = "yield:B"
limits = {limits}
""")


def test_cooled_tube_with_huge_wall_coefficient_is_isothermal():
    hot = cooled("1e9 W/(m^2*K)", tau='"200 s"', T_cool='"350 K"')
    iso = study_from_toml(NETWORK + '[operate]\ntau = "200 s"\nT = "350 K"\n[goal]\nmaximize = "yield:B"\n')
    a = evaluate(hot, {"tau": 200.0, "T_in": 350.0, "T_cool": 350.0})
    b = evaluate(iso, {"tau": 200.0, "T": 350.0})
    assert a.metrics["yield:B"]["value"] == pytest.approx(b.metrics["yield:B"]["value"], rel=1e-5)


def test_cooled_tube_optimum_with_hot_spot_limit():
    study = cooled("300 W/(m^2*K)", limits='["T <= 360 K"]')
    res = optimize(study)
    assert res.status == "optimal" and res.check.passed
    assert max(res.profile["T_K"]) <= 360.0 + 1e-6
    # the reference simulation at the optimum agrees on the hot spot
    sim = evaluate(study, res.decisions_si)
    assert sim.limits[0]["value"] == pytest.approx(max(res.profile["T_K"]), abs=0.05)


def test_adiabatic_tanks_in_series_satisfy_their_balances():
    study = study_from_toml(NETWORK + """
[reactor]
kind = "stirred-series"
tanks = 3
heat = "adiabatic"
[operate]
tau = ["10 s", "900 s"]
T_in = ["300 K", "340 K"]
[goal]
maximize = "yield:B"
limits = ["T <= 370 K"]
""")
    res = optimize(study)
    assert res.status == "optimal" and res.check.passed
    assert max(res.profile["T_K"]) <= 370 + 1e-6
    # Every tank of the optimum satisfies the steady-state balances written here from the rate laws (Fogler,
    # Elements of Chemical Reaction Engineering, 5th ed. 2016, ch. 12: adiabatic CSTR, constant Cp):
    #   c_i - c_i,prev = tau_k sum_j nu_ij r_j,   sum c_prev Cp (T - T_prev) = tau_k sum_j (-dH_j) r_j
    R = 8.314462618
    tau_k = res.decisions_si["tau"] / 3
    c_prev, T_prev = np.array([1000.0, 0.0, 0.0]), res.decisions_si["T_in"]
    cp_stream = 1000.0 * 150.0 + 10000.0 * 80.0                     # J/(m^3 K): A and the solvent S
    for _, tank in res.profile.iterrows():
        c = np.array([tank["C_A_mol_per_m3"], tank["C_B_mol_per_m3"], tank["C_C_mol_per_m3"]])
        T = tank["T_K"]
        r1 = 0.02 * np.exp(-60e3 / R * (1 / T - 1 / 350)) * c[0]
        r2 = 0.004 * np.exp(-90e3 / R * (1 / T - 1 / 350)) * c[1]
        mass = c - c_prev - tau_k * np.array([-r1, r1 - r2, r2])
        energy = cp_stream * (T - T_prev) - tau_k * (80e3 * r1 + 60e3 * r2)
        assert np.max(np.abs(mass)) <= 1e-6 * 1000.0 and abs(energy) <= 1e-6 * cp_stream * T
        c_prev, T_prev = c, T
    # adiabatic: temperature rises from tank to tank
    assert list(res.profile["T_K"]) == sorted(res.profile["T_K"])


def test_an_adiabatic_tank_with_several_steady_states_is_simulated_from_its_start_up():
    """Newton from the feed fails in the first tank (ignition); the reference simulation then follows the
    start-up transient (the ignited state, above 460 K) and the result satisfies the balances."""
    study = study_from_toml(NETWORK + """
[reactor]
kind = "stirred-series"
tanks = 3
heat = "adiabatic"
[operate]
tau = "300 s"
T_in = "320 K"
[goal]
maximize = "yield:B"
""")
    ev = evaluate(study, {"tau": 300.0, "T_in": 320.0})
    T1 = ev.profile["T_K"].iloc[0]
    # an independent start-up from the feed with scipy: the first tank's transient, then its end state
    from scipy.integrate import solve_ivp
    R, tau_k, cp = 8.314462618, 100.0, 1000.0 * 150.0 + 10000.0 * 80.0

    def tank(t, y):
        a, b, T = y
        r1 = 0.02 * np.exp(-60e3 / R * (1 / T - 1 / 350)) * a
        r2 = 0.004 * np.exp(-90e3 / R * (1 / T - 1 / 350)) * b
        return [(1000.0 - a) / tau_k - r1, -b / tau_k + r1 - r2, (320.0 - T) / tau_k + (80e3 * r1 + 60e3 * r2) / cp]
    sol = solve_ivp(tank, (0, 200 * tau_k), [1000.0, 0.0, 320.0], method="LSODA", rtol=1e-10, atol=1e-10)
    assert T1 == pytest.approx(sol.y[2, -1], abs=1e-5) and T1 > 460.0


def test_gas_feed_with_ratio_and_balance_species():
    study = study_from_toml("""
[species.A]
[species.O]
[species.B]
[species.N]
label = "nitrogen (inert balance)"
[[reaction]]
id = "r"
equation = "A + O -> B"
k = "5 m^3/(mol*s)"
[feed]
phase = "gas"
flow = "10 L/s"
pressure = "2 bar"
T = "500 K"
fractions = { A = 0.1 }
balance = "N"
[operate]
tau = ["0.1 s", "5 s"]
T = "500 K"
ratio = { O = [0.5, 4.0] }
[goal]
maximize = "conversion:A"
limits = ["outlet:O <= 0.004 mol/L"]
""")
    res = optimize(study)
    assert res.status == "optimal" and res.check.passed
    # mole fractions at the inlet: O = ratio * 0.1 taken from the nitrogen
    r = res.decisions_si["ratio.O"]
    assert 0.5 <= r <= 4.0
    assert res.outlet["O"]["conc"] <= 0.004 * (1 + 1e-6)
