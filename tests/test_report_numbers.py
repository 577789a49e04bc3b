"""Numbers in the report's network table as the study wrote them: rate constants in the study's own units, and the
constants of the rate law (equilibrium, adsorption) shown beside them.

Unit conversions are checked against hand arithmetic (1 L = 1e-3 m^3, 1 min = 60 s: common practice)."""

import pytest

from helpers import study_from_toml
from tubeyield.chemistry.consistency import check_network
from tubeyield.chemistry.network import Network
from tubeyield.report.html import _network_context
from tubeyield.study.units import rate_constant_from_si

NETWORK = """
[species.A]
[species.B]
[species.C]
[[reaction]]
id = "second"
equation = "A + B -> C"
k = "0.010 L/(mol*s)"
T_ref = "350 K"
Ea = "40 kJ/mol"
[[reaction]]
id = "back"
equation = "C <=> A + B"
law = "reversible"
k = "0.3 1/min"
K = "2.5 mol/L"
T_ref = "350 K"
Ea = "50 kJ/mol"
dH = "20 kJ/mol"
[[reaction]]
id = "surface"
equation = "A -> C"
law = "adsorption"
k = "0.2 1/s"
T_ref = "350 K"
adsorption = { B = { K = "4 L/mol", dH = "-15 kJ/mol" } }
[feed]
flow = "1 L/min"
conc = { A = "1 mol/L", B = "1 mol/L" }
[operate]
tau = "100 s"
T = "350 K"
[goal]
maximize = "yield:C"
key = "A"
"""


def rows():
    st = study_from_toml(NETWORK)
    ctx = _network_context(st, Network.of(st), check_network(st))
    return {r["id"]: r for r in ctx["reactions"]}


def test_rate_constants_are_shown_in_the_units_the_study_used():
    r = rows()
    assert r["second"]["k"] == "0.01 L/(mol*s)"            # 1e-5 m^3/(mol s) internally
    assert r["back"]["k"] == "0.3 1/min"                    # 0.005 1/s internally
    assert rate_constant_from_si(1e-5, -1.0, "") == (1e-5, "m^3/(mol*s)")   # no unit known: SI, written out


def test_law_constants_are_shown_in_mol_per_litre():
    r = rows()
    assert r["back"]["constants"] == "K = 2.5 mol/L"        # 2500 mol/m^3 internally
    assert r["surface"]["constants"] == "K.B = 4 L/mol; dH.B = -15 kJ/mol"
    assert r["second"]["constants"] == ""


@pytest.mark.parametrize("si, power, unit, expected", [
    (1e-5, -1.0, "L/(mol*s)", 0.01),                        # 1e-5 m^3/(mol s) * 1e3 L/m^3
    (1e-5, -1.0, "L/(mol*min)", 0.6),                       # ... * 60 s/min
    (2.0, 1.0, "mol/(L*h)", 2.0 * 1e-3 * 3600),             # mol/(m^3 s) -> mol/(L h)
    (0.25, 0.0, "1/h", 900.0),
])
def test_rate_constant_from_si_inverts_the_conversion(si, power, unit, expected):
    value, shown = rate_constant_from_si(si, power, unit)
    assert value == pytest.approx(expected, rel=1e-12) and shown == unit


def test_a_window_cell_on_a_limit_holds_within_the_check_tolerance():
    """An optimum on a limit lies on the window's boundary: cells that meet the limit to the simulation's accuracy
    (the study's check tolerance, relative) are inside, cells beyond it are not."""
    from tubeyield.jobs.window import _holds
    st = study_from_toml(NETWORK.replace("[goal]", "[goal]\nlimits = [\"conversion:A >= 0.8\"]"))
    tol = st.numerics.check_tolerance
    text = st.goal.limits[0].text
    assert _holds(st, {text: 0.8 * (1 - 0.5 * tol)})[text]
    assert not _holds(st, {text: 0.8 * (1 - 5 * tol)})[text]
