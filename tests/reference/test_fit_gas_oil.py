"""Kinetic fitting against a published parameter-estimation benchmark.

Catalytic cracking of gas oil (Tjoa and Biegler, Ind. Eng. Chem. Res. 30 (1991) 376; the data and model as published
in the COPS 3.0 collection, Dolan, More and Munson, Argonne ANL/MCS-TM-246, 2004): A -> B at theta1 c_A^2,
B -> C at theta2 c_B, A -> C at theta3 c_A^2, batch from c = (1, 0), least squares on both measured species at 20
sampling times after t = 0 (the t = 0 row is the start). Published optimum: SSR 5.2366e-3 (COPS; from memory).
Least-squares optimum recomputed independently with scipy.optimize.least_squares on a scipy Radau integration
(rtol 1e-12): theta = (11.8467, 8.3445, 1.0014), SSR 5.236596e-3, linearized standard errors (0.335, 0.316, 0.359)
with s^2 = SSR / (40 - 3). The data are dimensionless; they are read here as mol/L and seconds.
"""

import math

import pytest

from tubeyield.jobs.fit import fit
from tubeyield.study import load_study

DATA = """\
0.000 1.0000 0.0000 | 0.025 0.8105 0.2000 | 0.050 0.6208 0.2886 | 0.075 0.5258 0.3010 | 0.100 0.4345 0.3215
0.125 0.3903 0.3123 | 0.150 0.3342 0.2716 | 0.175 0.3034 0.2551 | 0.200 0.2735 0.2258 | 0.225 0.2405 0.1959
0.250 0.2283 0.1789 | 0.300 0.2071 0.1457 | 0.350 0.1669 0.1198 | 0.400 0.1530 0.0909 | 0.450 0.1339 0.0719
0.500 0.1265 0.0561 | 0.550 0.1200 0.0460 | 0.650 0.0990 0.0280 | 0.750 0.0870 0.0190 | 0.850 0.0770 0.0140
0.950 0.0690 0.0100
"""

STUDY = """
[study]
name = "gas-oil"
[species.A]
[species.B]
[species.C]
[[reaction]]
id = "to_B"
equation = "A -> B"
orders = { A = 2 }
k = "1 L/(mol*s)"
[[reaction]]
id = "B_to_C"
equation = "B -> C"
k = "1 1/s"
[[reaction]]
id = "A_to_C"
equation = "A -> C"
orders = { A = 2 }
k = "1 L/(mol*s)"
[feed]
flow = "1 L/min"
conc = { A = "1 mol/L" }
[operate]
tau = "1 s"
T = "298.15 K"
[goal]
maximize = "yield:B"
key = "A"
[[experiment]]
id = "cracking"
vessel = "batch"
T = "298.15 K"
start = { A = "1 mol/L" }
data = "gas-oil.csv"
[fit]
estimate = ["reaction.to_B.k", "reaction.B_to_C.k", "reaction.A_to_C.k"]
"""


def gas_oil_csv() -> str:
    rows = ["t [s], A [mol/L], B [mol/L]"]
    for chunk in DATA.replace("\n", " | ").split("|"):
        if chunk.strip():
            t, a, b = chunk.split()
            rows.append(f"{t}, {a}, {b}")
    return "\n".join(rows) + "\n"


@pytest.fixture(scope="module")
def result(tmp_path_factory):
    d = tmp_path_factory.mktemp("gasoil")
    (d / "gas-oil.csv").write_text(gas_oil_csv())
    (d / "study.toml").write_text(STUDY)
    return fit(load_study(d / "study.toml")), d / "study.toml"


def test_gas_oil_optimum_and_standard_errors(result):
    result, _ = result
    assert result.status == "optimal", result.message
    assert result.n_data == 40 and result.dof == 37
    assert result.ssr == pytest.approx(5.236596e-3, rel=1e-5)
    values = {p.path: p for p in result.parameters}
    for path, theta, se in (("reaction.to_B.k", 11.8467, 0.335), ("reaction.B_to_C.k", 8.3445, 0.316),
                            ("reaction.A_to_C.k", 1.0014, 0.359)):
        p = values[path]
        assert p.value == pytest.approx(theta, abs=2e-4), path
        assert p.se == pytest.approx(se, abs=2e-3), path
        assert p.low < theta < p.high and p.low > 0          # intervals in ln k stay positive
    assert result.check["passed"]
    assert not result.not_identified
    # profile-likelihood intervals close on both sides and hold the estimate; for theta3, which the data fix
    # weakly, the profile interval departs from the linearized one, and the fit says so
    for p in result.parameters:
        assert p.profile_low is not None and p.profile_low < p.value < p.profile_high
    assert any("reaction.A_to_C.k" in w and "profile-likelihood" in w for w in result.warnings)
    # s = sqrt(SSR / dof), in the data's unit
    assert result.sigma == pytest.approx(math.sqrt(5.236596e-3 / 37), rel=1e-5)


def test_the_python_api_fits_the_same_and_gives_a_table(result):
    import tubeyield as ty
    first, path = result
    again = ty.fit(path)
    table = again.to_frame()
    assert list(table["path"]) == [p.path for p in first.parameters]
    assert table["value"].tolist() == pytest.approx([p.value for p in first.parameters], rel=1e-9)


def test_the_fitted_values_are_saved_in_si_for_the_study_paths(result):
    result, _ = result
    assert result.values_si == pytest.approx({"reaction.to_B.k": 11.8467e-3, "reaction.B_to_C.k": 8.3445,
                                              "reaction.A_to_C.k": 1.0014e-3}, rel=2e-4)   # L/(mol s) -> m^3/(mol s)


def test_fit_save_and_report_show_the_kinetics(result, tmp_path):
    import subprocess
    import sys
    _, path = result
    out, rep = tmp_path / "out", tmp_path / "rep"
    r = subprocess.run([sys.executable, "-m", "tubeyield", "fit", str(path), "--save", str(out)], capture_output=True,
                       text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    r = subprocess.run([sys.executable, "-m", "tubeyield", "report", str(out), "--out", str(rep)],
                       capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    html = (rep / "index.html").read_text()
    assert 'id="kinetics"' in html and "95 % profile likelihood" in html and "reaction.A_to_C.k" in html
    assert (rep / "figures" / "fit.png").stat().st_size > 1000 and (out / "inputs" / "gas-oil.csv").is_file()
