"""Checks of the plug-flow and stirred-tank models against closed-form results of the textbooks.

Sources:
  [L] O. Levenspiel, Chemical Reaction Engineering, 3rd ed., Wiley 1999 (chapter numbers as cited; equation numbers
      from memory, not read).
  [F] H. S. Fogler, Elements of Chemical Reaction Engineering (editions as cited).
Every check runs both the collocation model (through the optimize job) and the scipy reference simulation.
"""

import math

import pytest

from helpers import study_from_toml
from tubeyield.jobs.evaluate import evaluate
from tubeyield.jobs.optimize import optimize

REL = 1e-6   # against a closed form


def first_order(kind: str, k: float, tau: float, extra_reactor: str = "") -> str:
    return f"""
[species.A]
[species.B]
[[reaction]]
id = "r"
equation = "A -> B"
k = "{k!r} 1/s"
[feed]
flow = "1 L/s"
conc = {{ A = "2 mol/L" }}
[reactor]
kind = "{kind}"
{extra_reactor}
[operate]
tau = "{tau!r} s"
T = "300 K"
[goal]
maximize = "conversion:A"
"""


@pytest.mark.parametrize("k,tau", [(0.1, 5.0), (1.0, 3.0), (2.5, 0.4)])
def test_first_order_plug_flow(k, tau):
    # [L] ch. 5, plug flow, first order: C_A = C_A0 exp(-k tau)
    study = study_from_toml(first_order("plug", k, tau))
    expected = 1.0 - math.exp(-k * tau)
    res = optimize(study, starts=1)
    assert res.status == "optimal"
    assert res.metrics["conversion:A"]["value"] == pytest.approx(expected, rel=REL)
    assert evaluate(study, res.decisions_si).metrics["conversion:A"]["value"] == pytest.approx(expected, rel=REL)
    assert res.check.passed


def test_reference_integration_falls_back_to_bdf_and_stays_exact(monkeypatch):
    # When LSODA exceeds its call budget (it can stall on stiff networks) the segment is integrated again by BDF;
    # forced here with a tiny budget, the result must still be the closed form of [L] ch. 5, C_A = C_A0 exp(-k tau).
    from tubeyield.reactor import simulate as sim_module
    monkeypatch.setattr(sim_module, "LSODA_CALL_BUDGET", 5)
    study = study_from_toml(first_order("plug", 1.0, 3.0))
    sim = sim_module.simulate(study, {"tau": 3.0, "T": 300.0})
    assert "BDF where LSODA stalled (1 of 1 segment(s))" in sim.integrator
    assert sim.metric(study.goal.metric) == pytest.approx(1.0 - math.exp(-3.0), rel=REL)


@pytest.mark.parametrize("k,tau", [(0.1, 5.0), (1.0, 3.0)])
def test_first_order_stirred_tank(k, tau):
    # [L] ch. 5, mixed flow, first order: C_A = C_A0 / (1 + k tau)
    study = study_from_toml(first_order("stirred", k, tau))
    expected = 1.0 - 1.0 / (1.0 + k * tau)
    res = optimize(study, starts=1)
    assert res.metrics["conversion:A"]["value"] == pytest.approx(expected, rel=REL)
    assert evaluate(study, res.decisions_si).metrics["conversion:A"]["value"] == pytest.approx(expected, rel=REL)


def test_tanks_in_series_approach_plug_flow():
    # [L] ch. 6, N equal tanks, first order: C_A/C_A0 = (1 + k tau / N)^-N
    k, tau, n = 0.5, 4.0, 5
    study = study_from_toml(first_order("stirred-series", k, tau, f"tanks = {n}"))
    res = optimize(study, starts=1)
    assert res.metrics["conversion:A"]["value"] == pytest.approx(1 - (1 + k * tau / n) ** -n, rel=REL)


def test_reversible_first_order_plug_flow():
    # [L] ch. 3 (batch) with tau for t, ch. 5: A <=> B first order both ways, C_B0 = 0:
    # X_A = X_Ae (1 - exp(-(k1 + k2) tau)), X_Ae = K / (1 + K), K = k1 / k2.
    k1, K, tau = 0.3, 2.5, 4.0
    k2 = k1 / K
    text = first_order("plug", k1, tau).replace('equation = "A -> B"', f'equation = "A <=> B"\nK = "{K}"')
    study = study_from_toml(text)
    Xe = K / (1 + K)
    expected = Xe * (1 - math.exp(-(k1 + k2) * tau))
    res = optimize(study, starts=1)
    assert res.metrics["conversion:A"]["value"] == pytest.approx(expected, rel=REL)
    assert evaluate(study, res.decisions_si).metrics["conversion:A"]["value"] == pytest.approx(expected, rel=REL)


def series(kind: str, k1: float, k2: float, tau_range=("0.05 s", "30 s")) -> str:
    return f"""
[species.A]
[species.B]
[species.C]
[[reaction]]
id = "first"
equation = "A -> B"
k = "{k1!r} 1/s"
[[reaction]]
id = "second"
equation = "B -> C"
k = "{k2!r} 1/s"
[feed]
flow = "1 L/s"
conc = {{ A = "1 mol/L" }}
[reactor]
kind = "{kind}"
[operate]
tau = ["{tau_range[0]}", "{tau_range[1]}"]
T = "300 K"
[goal]
maximize = "outlet:B"
"""


# (k1, k2, tau_opt, C_Bmax/C_A0): values recomputed by us from the closed forms of [L] ch. 8 (plug and mixed flow).
PLUG_SERIES = [(1.0, 0.5, 1.386294, 0.500000), (0.5, 0.2, 3.054302, 0.542884)]
TANK_SERIES = [(1.0, 0.5, 1.414214, 0.343146), (0.5, 0.2, 3.162278, 0.375247)]


@pytest.mark.parametrize("k1,k2,tau_tab,cb_tab", PLUG_SERIES)
def test_series_plug_flow_optimum(k1, k2, tau_tab, cb_tab):
    # [L] ch. 8, A -> B -> C first order, plug flow: tau_opt = ln(k2/k1)/(k2 - k1), C_Bmax/C_A0 = (k1/k2)^(k2/(k2-k1))
    tau_opt = math.log(k2 / k1) / (k2 - k1)
    cb_max = (k1 / k2) ** (k2 / (k2 - k1))
    assert (tau_opt, cb_max) == pytest.approx((tau_tab, cb_tab), abs=1e-6)   # the table above
    res = optimize(study_from_toml(series("plug", k1, k2)))
    assert res.status == "optimal"
    assert res.decisions_si["tau"] == pytest.approx(tau_opt, rel=REL)
    assert res.metrics["outlet:B"]["value"] == pytest.approx(cb_max, rel=REL)   # mol/L, C_A0 = 1 mol/L
    assert res.starts["reached_best"] >= 1


@pytest.mark.parametrize("k1,k2,tau_tab,cb_tab", TANK_SERIES)
def test_series_stirred_tank_optimum(k1, k2, tau_tab, cb_tab):
    # [L] ch. 8, mixed flow: tau_opt = 1/sqrt(k1 k2), C_Bmax/C_A0 = 1/(1 + sqrt(k2/k1))^2
    tau_opt = 1 / math.sqrt(k1 * k2)
    cb_max = 1 / (1 + math.sqrt(k2 / k1)) ** 2
    assert (tau_opt, cb_max) == pytest.approx((tau_tab, cb_tab), abs=1e-6)
    res = optimize(study_from_toml(series("stirred", k1, k2)))
    assert res.decisions_si["tau"] == pytest.approx(tau_opt, rel=REL)
    assert res.metrics["outlet:B"]["value"] == pytest.approx(cb_max, rel=REL)


def gas_first_order(kind: str, eps: float, tau: float) -> str:
    # Pure A feed, A -> (1 + eps) B: the expansion factor is eps = y_A0 delta = eps.
    coef = 1.0 + eps
    return f"""
[species.A]
[species.B]
[[reaction]]
id = "r"
equation = "A -> {coef!r} B"
k = "1 1/s"
[feed]
phase = "gas"
flow = "1 L/s"
pressure = "1 bar"
fractions = {{ A = 1.0 }}
[reactor]
kind = "{kind}"
[operate]
tau = "{tau!r} s"
T = "500 K"
[goal]
maximize = "conversion:A"
"""


# X = 0.9: k tau for eps = -0.5, 0, 1, 2 (recomputed from [L] ch. 5, first order with expansion): plug and mixed flow.
GAS = [(-0.5, 1.601293, 4.95), (0.0, 2.302585, 9.0), (1.0, 3.705170, 17.1), (2.0, 5.107755, 25.2)]


@pytest.mark.parametrize("eps,ktau_plug,ktau_tank", GAS)
def test_gas_phase_expansion(eps, ktau_plug, ktau_tank):
    # [L] ch. 5; [F] appendix A.1 eq. A-5: plug k tau = (1+eps) ln(1/(1-X)) - eps X; mixed k tau = X(1+eps X)/(1-X)
    X = 0.9
    plug = (1 + eps) * math.log(1 / (1 - X)) - eps * X
    tank = X * (1 + eps * X) / (1 - X)
    assert (plug, tank) == pytest.approx((ktau_plug, ktau_tank), abs=1e-6)
    for kind, ktau in (("plug", plug), ("stirred", tank)):
        study = study_from_toml(gas_first_order(kind, eps, ktau))
        res = optimize(study, starts=1)
        assert res.metrics["conversion:A"]["value"] == pytest.approx(X, rel=REL), kind
        assert evaluate(study, res.decisions_si).metrics["conversion:A"]["value"] == pytest.approx(X, rel=REL), kind


def test_gas_phase_worked_example_volume():
    # [F] 3rd ed., Example 4-4 (inputs confirmed; V = 80.7 ft3 from memory): eps = 1, C_A0 = 0.00415 lbmol/ft3,
    # F_A0 = 0.425 lbmol/s, k = 3.07 1/s, X = 0.8. From the formula of [L] ch. 5: V = v0 tau = 80.69 ft3.
    ft3 = 0.3048 ** 3
    v0 = 0.425 / 0.00415 * ft3                         # m^3/s
    tau = (2 * math.log(1 / 0.2) - 0.8) / 3.07          # s
    assert v0 * tau / ft3 == pytest.approx(80.7, abs=0.05)
    # The same case as a study: pure A at the pressure that gives C_A0 at 500 K.
    c0 = 0.00415 * 453.59237 / ft3                      # mol/m^3
    P = c0 * 8.314462618 * 500.0
    text = gas_first_order("plug", 1.0, tau).replace('pressure = "1 bar"', f'pressure = "{P!r} Pa"') \
        .replace('k = "1 1/s"', 'k = "3.07 1/s"').replace('flow = "1 L/s"', 'flow = "0.425 lbmol/s / (0.00415 lbmol/ft^3)"')
    study = study_from_toml(text.replace('flow = "0.425 lbmol/s / (0.00415 lbmol/ft^3)"', f'flow = "{v0!r} m^3/s"'))
    res = optimize(study, starts=1)
    assert res.metrics["conversion:A"]["value"] == pytest.approx(0.8, rel=REL)
    assert res.volume_m3 / ft3 == pytest.approx(80.69, abs=0.01)


def test_parallel_reactions_stirred_tank_exit():
    # [F] 5th ed., Example 8-1 (exit concentrations confirmed): A -> X order 0 (k1 = 1e-4 mol/(dm3 s)), A -> B order 1
    # (k2 = 1.5e-3 1/s), A -> Y order 2 (k3 = 8e-3 dm3/(mol s)); C_A0 = 0.4 mol/dm3; at tau = 783.8 s the tank runs
    # at C_A = sqrt(k1/k3) = 0.1118, with C_X = 0.0783, C_B = 0.132, C_Y = 0.0786 (published, rounded).
    text = """
[species.A]
[species.X]
[species.B]
[species.Y]
[[reaction]]
id = "to_x"
equation = "A -> X"
orders = { A = 0 }
k = "1e-4 mol/(L*s)"
[[reaction]]
id = "to_b"
equation = "A -> B"
k = "1.5e-3 1/s"
[[reaction]]
id = "to_y"
equation = "A -> Y"
orders = { A = 2 }
k = "8e-3 L/(mol*s)"
[feed]
flow = "2 L/s"
conc = { A = "0.4 mol/L" }
[reactor]
kind = "stirred"
[operate]
tau = "783.8 s"
T = "300 K"
[goal]
maximize = "outlet:B"
"""
    study = study_from_toml(text)
    res = optimize(study, starts=1)
    out = {s: res.outlet[s]["conc"] for s in "AXBY"}
    assert out["A"] == pytest.approx(math.sqrt(1e-4 / 8e-3), rel=2e-4)
    assert out["X"] == pytest.approx(0.0783, rel=5e-3)
    assert out["B"] == pytest.approx(0.132, rel=5e-3)
    assert out["Y"] == pytest.approx(0.0786, rel=5e-3)
    assert res.volume_m3 * 1000 == pytest.approx(1566, rel=2e-3)   # V = 1566 dm3, published (from memory)


def _closed_form_conversion(kind: str, k: float, tau: float, tanks: int) -> float:
    # [L] ch. 5 and 6, first order at constant temperature: plug C_A/C_A0 = exp(-k tau); one mixed tank
    # 1/(1 + k tau); N equal tanks (1 + k tau/N)^-N
    if kind == "plug":
        return 1.0 - math.exp(-k * tau)
    n = tanks if kind == "stirred-series" else 1
    return 1.0 - (1.0 + k * tau / n) ** -n


def _every_kind_and_mode():
    from tubeyield.study.modes import HEAT_MODES, REACTOR_KINDS
    return [(k, h) for k, kind in REACTOR_KINDS.items() for h, mode in HEAT_MODES.items()
            if kind.axial or not mode.axial_only]


@pytest.mark.parametrize("kind,heat", _every_kind_and_mode())
def test_first_order_closed_form_in_every_reactor_kind_and_heat_mode(kind, heat):
    """Every registered kind and heat mode, run where the closed form applies: a reaction with no heat effect
    (dH = 0) at 300 K everywhere (fixed zones or profile at 300 K; inlet and coolant at 300 K)."""
    from tubeyield.study.modes import HEAT_MODES
    mode = HEAT_MODES[heat]
    k, tau, tanks = 0.4, 3.0, 4
    text = first_order(kind, k, tau, f'heat = "{heat}"' + (f"\ntanks = {tanks}" if kind == "stirred-series" else "")
                       + ('\nU = "500 W/(m^2*K)"\ndiameter = "20 mm"' if mode.wall else ""))
    text = text.replace('[species.A]\n[species.B]', '[species.A]\nCp = "100 J/(mol*K)"\n[species.B]\nCp = "100 J/(mol*K)"')
    text = text.replace('k = "0.4 1/s"', 'k = "0.4 1/s"\ndH = "0 kJ/mol"')
    temps = {"T": 'T = "300 K"', "T_in": 'T_in = "300 K"', "T_cool": 'T_cool = "300 K"'}
    text = text.replace('T = "300 K"\n', "\n".join(temps[d] for d in mode.decisions) + "\n")
    study = study_from_toml(text)
    expected = _closed_form_conversion(kind, k, tau, tanks)
    res = optimize(study, starts=1)
    assert res.status == "optimal", res.message
    assert res.metrics["conversion:A"]["value"] == pytest.approx(expected, rel=REL)
    assert evaluate(study, res.point()).metrics["conversion:A"]["value"] == pytest.approx(expected, rel=REL)
