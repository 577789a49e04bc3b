"""Any legal species symbol works everywhere: names the tool uses internally (T, tau, z, V, F, x) live in their own
namespace, so a species called T (a common symbol for toluene) is just a species."""

import pytest

from helpers import study_from_toml
from tubeyield.chemistry.consistency import check_network
from tubeyield.jobs.evaluate import evaluate
from tubeyield.jobs.optimize import optimize

# Invented kinetics (tests only): a series chain tau -> T -> z, plus inert x, V and F.
CHAIN = """
[species.tau]
Cp = "150 J/(mol*K)"
[species.T]
Cp = "150 J/(mol*K)"
[species.z]
Cp = "150 J/(mol*K)"
[species.x]
Cp = "75 J/(mol*K)"
[species.V]
Cp = "75 J/(mol*K)"
[species.F]
Cp = "75 J/(mol*K)"
[[reaction]]
id = "first"
equation = "tau -> T"
k = "0.1 1/s"
T_ref = "350 K"
Ea = "50 kJ/mol"
dH = "-20 kJ/mol"
[[reaction]]
id = "second"
equation = "T -> z"
k = "0.05 1/s"
T_ref = "350 K"
Ea = "70 kJ/mol"
dH = "-20 kJ/mol"
[feed]
flow = "1 L/min"
conc = { tau = "1 mol/L", x = "2 mol/L", V = "0.5 mol/L", F = "0.1 mol/L" }
[goal]
maximize = "yield:T"
key = "tau"
limits = ["conversion:tau >= 0.3", "outlet:z <= 0.4 mol/L", "T <= 400 K"]
"""

CASES = {
    "plug isothermal": '[reactor]\nkind = "plug"\nheat = "isothermal"\nelements = 20\n'
                       '[operate]\ntau = ["1 s", "100 s"]\nT = ["300 K", "400 K"]\n',
    "plug adiabatic": '[reactor]\nkind = "plug"\nheat = "adiabatic"\nelements = 20\n'
                      '[operate]\ntau = ["1 s", "100 s"]\nT_in = ["300 K", "380 K"]\n',
    "stirred series": '[reactor]\nkind = "stirred-series"\ntanks = 3\nheat = "isothermal"\n'
                      '[operate]\ntau = ["1 s", "100 s"]\nT = ["300 K", "400 K"]\n',
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_species_named_like_internal_quantities(case):
    study = study_from_toml(CHAIN + CASES[case], "names")
    assert set(study.symbols) == {"tau", "T", "z", "x", "V", "F"}
    assert check_network(study).valid
    mid = {d.name: 0.5 * (d.low + d.high) for d in study.decisions}
    ev = evaluate(study, mid)
    # inert species pass through unchanged (mass balance of the chain: tau + T + z = 1 mol/L)
    assert ev.outlet["x"]["conc"] == pytest.approx(2.0, rel=1e-9)
    assert ev.outlet["tau"]["conc"] + ev.outlet["T"]["conc"] + ev.outlet["z"]["conc"] == pytest.approx(1.0, rel=1e-8)
    res = optimize(study, starts=2)
    assert res.status == "optimal", res.message
    assert res.check.passed
    assert 0.0 < res.goal["value"] < 1.0
