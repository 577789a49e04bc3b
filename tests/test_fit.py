"""Fitting kinetics at several temperatures, checked against an independent implementation (scipy least_squares on
the closed-form solution, written here), and the fit's bad input.

Invented data (tests only): A -> B -> C, first order, k1 = 0.020 1/s and k2 = 0.008 1/s at 350 K, Ea 60 and 45 kJ/mol,
batch runs at 330, 350 and 370 K from 1 mol/L of A, 12 samples each, Gaussian noise of 0.005 mol/L (seeded, readings
below zero clipped to zero).
"""

import math
import subprocess
import sys

import numpy as np
import pytest
from scipy.optimize import least_squares

from tubeyield.jobs.fit import fit
from tubeyield.study import load_study

R = 8.314462618
TRUE = {"k1": 0.020, "k2": 0.008, "E1": 60e3, "E2": 45e3}
TEMPS = (330.0, 350.0, 370.0)
TIMES = np.linspace(20.0, 400.0, 12)


def exact(T, k1, k2, E1, E2, times=TIMES):
    """A -> B -> C, first order, from (1, 0): c_A = exp(-a1 t), c_B = a1 / (a2 - a1) (exp(-a1 t) - exp(-a2 t))
    (series reactions in a batch; Levenspiel, Chemical Reaction Engineering, 3rd ed. 1999, ch. 8)."""
    a1 = k1 * math.exp(-E1 / R * (1 / T - 1 / 350.0))
    a2 = k2 * math.exp(-E2 / R * (1 / T - 1 / 350.0))
    return np.array([np.exp(-a1 * times), a1 / (a2 - a1) * (np.exp(-a1 * times) - np.exp(-a2 * times))])


def data():
    rng = np.random.default_rng(7)
    # negative readings are refused as input (a lab reports 0 below its detection limit): clipped at 0
    return {T: np.maximum(exact(T, *TRUE.values()) + rng.normal(0.0, 0.005, (2, TIMES.size)), 0.0)
            for T in TEMPS}


STUDY = """
[species.A]
[species.B]
[species.C]
[[reaction]]
id = "first"
equation = "A -> B"
k = "0.01 1/s"
T_ref = "350 K"
Ea = "50 kJ/mol"
[[reaction]]
id = "second"
equation = "B -> C"
k = "0.01 1/s"
T_ref = "350 K"
Ea = "50 kJ/mol"
[feed]
flow = "1 L/min"
conc = { A = "1 mol/L" }
[operate]
tau = "100 s"
T = "350 K"
[goal]
maximize = "yield:B"
key = "A"
EXPERIMENTS
[fit]
estimate = ["reaction.first.k", "reaction.first.Ea", "reaction.second.k", "reaction.second.Ea"]
FIT_EXTRA
"""


def write(tmp_path, csv_text=None, experiments=None, fit_extra=""):
    runs = []
    if csv_text is None:
        lines = ["run, t [min], A [mol/L], B [mol/L]"]
        for T, y in data().items():
            lines += [f"T{T:g}, {t / 60:.10g}, {a:.12g}, {b:.12g}" for t, a, b in zip(TIMES, *y)]
        csv_text = "\n".join(lines) + "\n"
    (tmp_path / "runs.csv").write_text(csv_text)
    if experiments is None:
        for T in TEMPS:
            runs.append(f'[[experiment]]\nid = "T{T:g}"\nT = "{T:g} K"\nstart = {{ A = "1 mol/L" }}\n'
                        f'data = "runs.csv"\nrun = "T{T:g}"\n')
        experiments = "\n".join(runs)
    (tmp_path / "study.toml").write_text(STUDY.replace("EXPERIMENTS", experiments).replace("FIT_EXTRA", fit_extra))
    return tmp_path / "study.toml"


def scipy_fit():
    """The same least-squares problem by scipy (Levenberg-Marquardt on the closed form): ln k(350 K), Ea in kJ/mol."""
    d = data()

    def res(p):
        k1, E1, k2, E2 = math.exp(p[0]), 1e3 * p[1], math.exp(p[2]), 1e3 * p[3]
        return np.concatenate([(exact(T, k1, k2, E1, E2) - d[T]).ravel() for T in TEMPS])

    sol = least_squares(res, [math.log(0.012), 50.0, math.log(0.006), 40.0], method="lm", jac="3-point", xtol=1e-15,
                        ftol=1e-15, gtol=1e-15)
    ssr = float(sol.fun @ sol.fun)
    cov = ssr / (sol.fun.size - 4) * np.linalg.inv(sol.jac.T @ sol.jac)
    return sol.x, cov, ssr


def test_arrhenius_fit_at_three_temperatures_agrees_with_scipy(tmp_path):
    result = fit(load_study(write(tmp_path)))
    assert result.status == "optimal", result.message
    x, cov, ssr = scipy_fit()
    assert result.ssr == pytest.approx(ssr, rel=1e-6)
    p = {q.path: q for q in result.parameters}
    assert p["reaction.first.k"].value == pytest.approx(math.exp(x[0]), rel=1e-5)
    assert p["reaction.second.k"].value == pytest.approx(math.exp(x[2]), rel=1e-5)
    assert p["reaction.first.Ea"].value == pytest.approx(x[1], rel=1e-5)
    assert p["reaction.second.Ea"].value == pytest.approx(x[3], rel=1e-5)
    # linearized standard errors: delta method for k, directly for Ea
    assert p["reaction.first.k"].se == pytest.approx(math.exp(x[0]) * math.sqrt(cov[0, 0]), rel=1e-2)
    assert p["reaction.first.Ea"].se == pytest.approx(math.sqrt(cov[1, 1]), rel=1e-2)
    # the true values lie inside the 95 % intervals (seeded data; a check of sense, not of coverage)
    assert p["reaction.first.Ea"].low < 60.0 < p["reaction.first.Ea"].high
    assert p["reaction.second.k"].low < 0.008 < p["reaction.second.k"].high
    # centred at the reciprocal mean temperature, ln k and Ea are far less correlated than with k taken at a
    # reference outside the experiments (298.15 K here, from scipy's covariance mapped linearly)
    a = -1000.0 / R * (1 / 298.15 - 1 / 350.0)           # d ln k(298.15 K) / d Ea[kJ/mol]
    G = np.array([[1.0, a], [0.0, 1.0]])
    c298 = G @ cov[:2, :2] @ G.T
    far = c298[0, 1] / math.sqrt(c298[0, 0] * c298[1, 1])
    assert abs(far) > 0.95 and abs(result.correlation[0][1]) < 0.7
    # profile likelihood of Ea (first), recomputed by scipy: the other three parameters re-fitted at each fixed Ea,
    # the ends where SSR = SSR_min (1 + F(1, N - p; 0.95) / (N - p)) (Bates and Watts 1988, ch. 6), by brentq
    from scipy.optimize import brentq
    from scipy.stats import f
    d = data()
    N = 2 * TIMES.size * len(TEMPS)
    level = ssr * (1 + f.ppf(0.95, 1, N - 4) / (N - 4))

    def profile(E):
        def res(q):
            return np.concatenate([(exact(T, math.exp(q[0]), math.exp(q[1]), 1e3 * E, 1e3 * q[2]) - d[T]).ravel()
                                   for T in TEMPS])
        r = least_squares(res, [x[0], x[2], x[3]], method="lm", xtol=1e-14, ftol=1e-14, gtol=1e-14)
        return float(r.fun @ r.fun) - level

    se = math.sqrt(cov[1, 1])
    low, high = brentq(profile, x[1] - 5 * se, x[1]), brentq(profile, x[1], x[1] + 5 * se)
    half = 0.5 * (high - low)
    q = p["reaction.first.Ea"]
    assert q.profile_low == pytest.approx(low, abs=0.01 * half) and q.profile_high == pytest.approx(high, abs=0.01 * half)
    assert result.T_centre == pytest.approx(3 / sum(1 / T for T in TEMPS))


def test_a_rate_constant_that_only_appears_in_a_sum_is_not_identified(tmp_path):
    """A -> B and A -> C with only A measured: the data fix k1 + k2, not k1 and k2 apart."""
    study = """
[species.A]
[species.B]
[species.C]
[[reaction]]
id = "one"
equation = "A -> B"
k = "0.02 1/s"
[[reaction]]
id = "two"
equation = "A -> C"
k = "0.01 1/s"
[feed]
flow = "1 L/min"
conc = { A = "1 mol/L" }
[operate]
tau = "100 s"
T = "298.15 K"
[goal]
maximize = "yield:B"
key = "A"
[[experiment]]
T = "298.15 K"
start = { A = "1 mol/L" }
data = "a.csv"
[fit]
estimate = ["reaction.one.k", "reaction.two.k"]
"""
    rows = ["t [s], A [mol/L]"] + [f"{t:g}, {math.exp(-0.03 * t):.8f}" for t in range(10, 110, 10)]
    (tmp_path / "a.csv").write_text("\n".join(rows) + "\n")
    (tmp_path / "s.toml").write_text(study)
    result = fit(load_study(tmp_path / "s.toml"))
    assert result.status != "optimal"
    assert result.not_identified == ["reaction.one.k and reaction.two.k"] or \
        result.not_identified == ["reaction.two.k and reaction.one.k"]
    # the run that would separate them: measuring a product (B or C) of run1; a hotter or longer run of A alone
    # cannot, since only the sum acts on A
    assert len(result.suggestions) == 1 and "measuring B in run run1" in result.suggestions[0] or \
        "measuring C in run run1" in result.suggestions[0], result.suggestions


BAD = [
    ("t [min], A [mol/L], X [mol/L]\n1, 0.5, 0.1\n", "column 3", "species of the network"),
    ("t [min], A\n1, 0.5\n", "column 2", "a unit in brackets"),
    ("t [min], A [K]\n1, 0.5\n", "column 2", "a unit of concentration"),
    ("t [min], A [mol/L]\n2, 0.5\n1, 0.6\n", "row 3, column 1", "increase"),
    ("t [min], A [mol/L]\n1, -0.5\n", "row 2, column 2", "at least 0"),
    ("t [min], A [mol/L]\n1, lots\n", "row 2, column 2", "a number or an empty cell"),
    ("A [mol/L], t [min]\n0.5, 1\n", "column 1", "the time first"),
]


@pytest.mark.parametrize("csv_text, where, words", BAD)
def test_a_bad_measurement_file_is_one_clear_error(tmp_path, csv_text, where, words):
    exp = '[[experiment]]\nT = "350 K"\nstart = { A = "1 mol/L" }\ndata = "runs.csv"\n'
    path = write(tmp_path, csv_text, exp)
    r = subprocess.run([sys.executable, "-m", "tubeyield", "fit", str(path)], capture_output=True, text=True,
                       timeout=120)
    assert r.returncode == 2, r.stderr
    assert "Traceback" not in r.stderr and "runs.csv" in r.stderr and where in r.stderr and words in r.stderr


def test_bad_fit_keys_are_named(tmp_path):
    exp = '[[experiment]]\nT = "350 K"\nstart = { A = "1 mol/L" }\ndata = "runs.csv"\n'
    csv_text = "t [min], A [mol/L]\n1, 0.5\n2, 0.3\n"
    for extra, key, words in (
            ('', "fit.estimate", "fewer parameters than measured values"),
            ('bounds = { "reaction.first.Ea" = ["90 kJ/mol", "10 kJ/mol"] }', "fit.bounds", "low below high"),
            ('error = { B = "0.01 mol/L" }', "fit.error.B", "a measured species")):
        path = write(tmp_path, csv_text, exp, extra)
        r = subprocess.run([sys.executable, "-m", "tubeyield", "fit", str(path)], capture_output=True, text=True,
                           timeout=120)
        assert r.returncode == 2 and key in r.stderr and words in r.stderr, (extra, r.stderr)
    text = path.read_text().replace('"reaction.first.k",', '"reaction.nothing.k",')
    path.write_text(text)
    r = subprocess.run([sys.executable, "-m", "tubeyield", "fit", str(path)], capture_output=True, text=True,
                       timeout=120)
    assert r.returncode == 2 and "fit.estimate[0]" in r.stderr and "reaction.<id>" in r.stderr


def test_a_plug_flow_run_in_a_gas_study_is_refused(tmp_path):
    from tubeyield.errors import StudyError
    exp = '[[experiment]]\nvessel = "plug"\nT = "350 K"\nstart = { A = "1 mol/L" }\ndata = "runs.csv"\n'
    path = write(tmp_path, "tau [s], A [mol/L]\n10, 0.5\n20, 0.3\n", exp)
    gas = path.read_text().replace('flow = "1 L/min"\nconc = { A = "1 mol/L" }',
                                   'phase = "gas"\nflow = "1 L/min"\npressure = "1 bar"\nT = "350 K"\n'
                                   'fractions = { A = 1.0 }')
    path.write_text(gas)
    with pytest.raises(StudyError, match="experiment.run1.vessel"):
        load_study(path)
