"""Fractional orders (0 < n < 1): finite, smooth rates at zero concentration, an effect of the regularization that is
bounded and checked against the exact power law, and no solver chatter on the terminal."""

import subprocess
import sys

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from helpers import study_from_toml
from tubeyield.reactor.simulate import simulate
from tubeyield.study.kinetics import FRACTIONAL_ORDER_DELTA, power_factor

# Invented kinetics (tests only): A + O -> B, r = k c_A c_O^0.5; B + O -> C, r = k2 c_B c_O^0.5.
HALF_ORDER = """
[species.A]
formula = "C2H4"
[species.O]
formula = "O"
[species.B]
formula = "C2H4O"
[species.C]
formula = "C2H4O2"
[[reaction]]
id = "main"
equation = "A + O -> B"
orders = { A = 1, O = 0.5 }
k = "0.02 (mol/L)^-0.5/s"
T_ref = "350 K"
Ea = "50 kJ/mol"
[[reaction]]
id = "over"
equation = "B + O -> C"
orders = { B = 1, O = 0.5 }
k = "0.004 (mol/L)^-0.5/s"
T_ref = "350 K"
Ea = "80 kJ/mol"
[feed]
flow = "1 L/min"
conc = { A = "1 mol/L" }
[reactor]
elements = 20
[operate]
tau = ["10 s", "2000 s"]
T = ["320 K", "380 K"]
ratio = { O = [0.6, 1.5] }
[goal]
maximize = "yield:B"
key = "A"
limits = ["conversion:A >= 0.5"]
[front]
x = "conversion:A"
y = "selectivity:B"
points = 5
"""


@pytest.mark.parametrize("n", [0.1, 0.5, 0.9])
def test_regularized_power_is_within_its_stated_bound(n):
    # c (c + d)^(n-1) = c^n (1 + d/c)^(n-1), and Bernoulli's inequality gives 1 - (1-n) d/c <= (1 + d/c)^(n-1) <= 1
    c = np.logspace(-6, 4, 200)           # mol/m^3
    rel = np.abs(power_factor(c, n) - c ** n) / c ** n
    assert np.all(rel <= (1 - n) * FRACTIONAL_ORDER_DELTA / c * (1 + 1e-9) + 1e-15)
    assert power_factor(0.0, n) == 0.0
    # the slope at zero is finite: delta^(n - 1)
    h = 1e-18
    assert power_factor(h, n) / h == pytest.approx(FRACTIONAL_ORDER_DELTA ** (n - 1), rel=1e-6)


def test_half_order_simulation_matches_the_exact_power_law():
    """scipy's Radau on the exact rate law c_A c_O^0.5 (no regularization) against tubeyield's reference simulation."""
    study = study_from_toml(HALF_ORDER, "half")
    tau, T, ratio = 900.0, 360.0, 1.0
    sim = simulate(study, {"tau": tau, "T": T, "ratio.O": ratio})
    R = 8.314462618
    k1 = 0.02 * 1000 ** -0.5 * np.exp(-50e3 / R * (1 / T - 1 / 350))   # SI: (mol/m^3)^-0.5 / s
    k2 = 0.004 * 1000 ** -0.5 * np.exp(-80e3 / R * (1 / T - 1 / 350))

    def rhs(t, c):
        a, o, b, _ = np.maximum(c, 0.0)
        r1, r2 = k1 * a * np.sqrt(o), k2 * b * np.sqrt(o)
        return [-r1, -r1 - r2, r1 - r2, r2]

    exact = solve_ivp(rhs, (0, tau), [1000.0, 1000.0 * ratio, 0.0, 0.0], method="Radau", rtol=1e-12, atol=1e-12)
    flows = sim.outlet_flows()
    v0 = study.feed.flow
    for s, c in zip("AOBC", exact.y[:, -1]):
        assert flows[s] / v0 == pytest.approx(c, rel=1e-8, abs=1e-9)


@pytest.mark.slow
@pytest.mark.parametrize("job", ["optimize", "front"])
def test_no_solver_chatter_on_the_terminal(tmp_path, job):
    path = tmp_path / "half.toml"
    path.write_text(HALF_ORDER)
    out = subprocess.run([sys.executable, "-m", "tubeyield", job, str(path)], capture_output=True, text=True,
                         timeout=600)
    assert out.returncode == 0, out.stderr
    assert out.stderr == ""
    for word in ("NaN detected", "CasADi", "Ipopt", "EXIT:", "WARNING"):
        assert word not in out.stdout
