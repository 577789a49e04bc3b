"""Fits of every kind of lab run against independent implementations written here (closed forms, scipy's
least_squares, matrix exponentials, quadrature): a reversible step, plug-flow and stirred-tank runs, a temperature
programme, an estimated order; rival networks; and the hand-off to the other jobs (--kinetics, sweeps drawn from the
fit, the fitted network for include).

All data are invented for the tests (seeded noise); the closed forms are textbook results (Levenspiel, Chemical
Reaction Engineering, 3rd ed. 1999, ch. 3 and 5: first-order, n-th order and series reactions in batch, plug-flow and
stirred-tank reactors).
"""

import json
import math
import shutil
import subprocess
import sys

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.linalg import expm
from scipy.optimize import least_squares

from tubeyield.jobs.fit import fit
from tubeyield.study import load_study

R = 8.314462618

HEAD = """
[species.A]
[species.B]
[species.C]
{reactions}
[feed]
flow = "1 L/min"
conc = {{ A = "1 mol/L" }}
[operate]
tau = ["10 s", "1000 s"]
T = ["300 K", "400 K"]
[goal]
maximize = "yield:B"
key = "A"
{experiments}
[fit]
{fit}
"""


def write(tmp_path, reactions, experiments, fit_keys, files, name="study.toml"):
    for fname, text in files.items():
        (tmp_path / fname).write_text(text)
    (tmp_path / name).write_text(HEAD.format(reactions=reactions, experiments=experiments, fit=fit_keys))
    return tmp_path / name


def csv(header, rows):
    return header + "\n" + "\n".join(", ".join(f"{v:.12g}" for v in row) for row in rows) + "\n"


def scipy_fit(res, x0):
    sol = least_squares(res, x0, method="lm", xtol=1e-15, ftol=1e-15, gtol=1e-15)
    ssr = float(sol.fun @ sol.fun)
    cov = ssr / (sol.fun.size - len(x0)) * np.linalg.inv(sol.jac.T @ sol.jac)
    return sol.x, cov, ssr


# ---------------------------------------------------------------------------------------- a reversible step


def test_reversible_series_fit_agrees_with_a_matrix_exponential_fit(tmp_path):
    """A <=> B -> C, first order: dc/dt = M c, c(t) = expm(M t) c0 (a linear system; exact). Estimated: k1, K of
    the reversible step and k2, against scipy least_squares on the matrix exponential."""
    kf, K, k2 = 0.02, 1.5, 0.006
    times = np.linspace(15.0, 450.0, 14)

    def conc(kf, K, k2):
        M = np.array([[-kf, kf / K, 0.0], [kf, -kf / K - k2, 0.0], [0.0, k2, 0.0]])
        return np.array([expm(M * t) @ [1.0, 0.0, 0.0] for t in times]).T

    rng = np.random.default_rng(11)
    data = conc(kf, K, k2) + rng.normal(0.0, 0.004, (3, times.size))
    data = np.maximum(data, 0.0)
    rows = [(t, a, b) for t, a, b in zip(times, data[0], data[1])]
    reactions = ('[[reaction]]\nid = "iso"\nequation = "A <=> B"\nk = "0.01 1/s"\nK = 1.0\n'
                 '[[reaction]]\nid = "on"\nequation = "B -> C"\nk = "0.01 1/s"\n')
    exp = '[[experiment]]\nT = "298.15 K"\nstart = { A = "1 mol/L" }\ndata = "r.csv"\n'
    path = write(tmp_path, reactions, exp, 'estimate = ["reaction.iso.k", "reaction.iso.K", "reaction.on.k"]',
                 {"r.csv": csv("t [s], A [mol/L], B [mol/L]", rows)})
    result = fit(load_study(path))
    assert result.status == "optimal", result.message

    def res(p):
        return (conc(math.exp(p[0]), math.exp(p[1]), math.exp(p[2]))[:2] - data[:2]).ravel()

    x, cov, ssr = scipy_fit(res, [math.log(0.01), 0.0, math.log(0.01)])
    got = {p.path: p for p in result.parameters}
    assert result.ssr == pytest.approx(ssr, rel=1e-6)
    for i, path in enumerate(("reaction.iso.k", "reaction.iso.K", "reaction.on.k")):
        assert got[path].value == pytest.approx(math.exp(x[i]), rel=1e-5), path
        assert got[path].se == pytest.approx(math.exp(x[i]) * math.sqrt(cov[i, i]), rel=2e-2), path
    assert got["reaction.iso.K"].unit == ""                  # K of A <=> B is dimensionless


# ------------------------------------------------------------------------------- plug flow and stirred tanks


def test_plug_flow_and_stirred_tank_runs_fit_their_closed_forms(tmp_path):
    """A -> B -> C, first order, at 340 K: plug-flow runs at several residence times (the batch solution in tau)
    and stirred-tank runs (c_A = 1/(1 + k1 tau), c_B = k1 tau / ((1 + k1 tau)(1 + k2 tau))), fitted together; the
    reference is scipy least_squares on the two closed forms."""
    k1, k2 = 0.015, 0.005
    taus = np.array([20.0, 50.0, 90.0, 140.0, 200.0, 300.0, 420.0])

    def plug(k1, k2, t=taus):
        a = np.exp(-k1 * t)
        return np.array([a, k1 / (k2 - k1) * (a - np.exp(-k2 * t))])

    def tank(k1, k2, t=taus):
        return np.array([1 / (1 + k1 * t), k1 * t / ((1 + k1 * t) * (1 + k2 * t))])

    rng = np.random.default_rng(5)
    dp = plug(k1, k2) + rng.normal(0, 0.003, (2, taus.size))
    dt = tank(k1, k2) + rng.normal(0, 0.003, (2, taus.size))
    files = {"plug.csv": csv("tau [s], A [mol/L], B [mol/L]", zip(taus, *dp)),
             "tank.csv": csv("tau [min], A [mol/L], B [mol/L]", [(t / 60, a, b) for t, a, b in
                                                                 zip(taus[::-1], *dt[:, ::-1])])}   # any row order
    reactions = ('[[reaction]]\nid = "one"\nequation = "A -> B"\nk = "0.01 1/s"\n'
                 '[[reaction]]\nid = "two"\nequation = "B -> C"\nk = "0.01 1/s"\n')
    exps = ('[[experiment]]\nid = "tube"\nvessel = "plug"\nT = "340 K"\nstart = { A = "1 mol/L" }\ndata = "plug.csv"\n'
            '[[experiment]]\nid = "tank"\nvessel = "stirred"\nT = "340 K"\nstart = { A = "1 mol/L" }\n'
            'data = "tank.csv"\n')
    path = write(tmp_path, reactions, exps, 'estimate = ["reaction.one.k", "reaction.two.k"]', files)
    result = fit(load_study(path))
    assert result.status == "optimal", result.message

    def res(p):
        a, b = math.exp(p[0]), math.exp(p[1])
        return np.concatenate([(plug(a, b) - dp).ravel(), (tank(a, b) - dt).ravel()])

    x, cov, ssr = scipy_fit(res, [math.log(0.01), math.log(0.008)])
    got = {p.path: p for p in result.parameters}
    assert result.ssr == pytest.approx(ssr, rel=1e-6)
    assert got["reaction.one.k"].value == pytest.approx(math.exp(x[0]), rel=1e-6)
    assert got["reaction.two.k"].value == pytest.approx(math.exp(x[1]), rel=1e-6)
    assert got["reaction.two.k"].se == pytest.approx(math.exp(x[1]) * math.sqrt(cov[1, 1]), rel=2e-2)
    tank_curve = next(c for c in result.curves if c["id"] == "tank")
    assert tank_curve["vessel"] == "stirred" and len(tank_curve["band"]["B"]) == len(tank_curve["t"])


# ---------------------------------------------------------------------------------- a temperature programme


def test_a_temperature_ramp_fits_the_arrhenius_integral(tmp_path):
    """A -> B, first order, in a batch heated from 320 K to 360 K over 10 min and held: c_A(t) = exp(-int_0^t
    k(T(s)) ds), the integral by scipy.integrate.quad (an independent reference). Estimated: k at 340 K and Ea."""
    k_ref, Ea = 0.0015, 70e3
    times = np.array([60.0, 150.0, 240.0, 330.0, 420.0, 540.0, 660.0, 780.0, 900.0])

    def T_of(t):
        return 320.0 + 40.0 * min(t, 600.0) / 600.0

    def c_A(k_ref, Ea):
        k = lambda s: k_ref * math.exp(-Ea / R * (1 / T_of(s) - 1 / 340.0))
        return np.array([math.exp(-quad(k, 0.0, t, points=[600.0] if t > 600 else None, epsabs=1e-14,
                                        epsrel=1e-13)[0]) for t in times])

    rng = np.random.default_rng(3)
    data = c_A(k_ref, Ea) + rng.normal(0, 0.003, times.size)
    reactions = '[[reaction]]\nid = "one"\nequation = "A -> B"\nk = "0.001 1/s"\nT_ref = "340 K"\nEa = "50 kJ/mol"\n'
    exp = ('[[experiment]]\nT = [["0 min", "320 K"], ["10 min", "360 K"], ["20 min", "360 K"]]\n'
           'start = { A = "1 mol/L" }\ndata = "ramp.csv"\n')
    path = write(tmp_path, reactions, exp, 'estimate = ["reaction.one.k", "reaction.one.Ea"]',
                 {"ramp.csv": csv("t [s], A [mol/L]", zip(times, data))})
    study = load_study(path)
    assert study.experiments[0].programme and 320 < study.experiments[0].T < 360
    result = fit(study)
    assert result.status == "optimal", result.message

    def res(p):
        return c_A(math.exp(p[0]), 1e3 * p[1]) - data

    x, cov, ssr = scipy_fit(res, [math.log(0.001), 50.0])
    got = {p.path: p for p in result.parameters}
    assert result.ssr == pytest.approx(ssr, rel=1e-6)
    assert got["reaction.one.k"].value == pytest.approx(math.exp(x[0]), rel=1e-5)
    assert got["reaction.one.Ea"].value == pytest.approx(x[1], rel=1e-5)
    assert got["reaction.one.Ea"].se == pytest.approx(math.sqrt(cov[1, 1]), rel=2e-2)


# ------------------------------------------------------------------------------------------- an order


def test_an_estimated_order_agrees_with_the_nth_order_closed_form(tmp_path):
    """A -> B at order n: c_A = (c0^(1-n) + (n - 1) k t)^(1/(1-n)) (Levenspiel ch. 3), c0 = 1 mol/L.
    Estimated: k and n, against scipy least_squares on the closed form (k in SI, (mol/m^3)^(1-n)/s)."""
    k_L, n = 0.01, 1.6                      # k in (mol/L)^(1-n)/s
    times = np.linspace(10.0, 400.0, 14)

    def c_A(k_L, n):
        return (1.0 + (n - 1.0) * k_L * times) ** (1.0 / (1.0 - n))

    rng = np.random.default_rng(8)
    data = c_A(k_L, n) + rng.normal(0, 0.002, times.size)
    reactions = '[[reaction]]\nid = "one"\nequation = "A -> B"\norders = { A = 1.5 }\nk = "0.01 (mol/L)^-0.5/s"\n'
    exp = '[[experiment]]\nT = "298.15 K"\nstart = { A = "1 mol/L" }\ndata = "n.csv"\n'
    path = write(tmp_path, reactions, exp, 'estimate = ["reaction.one.k", "reaction.one.order.A"]',
                 {"n.csv": csv("t [s], A [mol/L]", zip(times, data))})
    result = fit(load_study(path))
    assert result.status == "optimal", result.message

    def res(p):
        return c_A(math.exp(p[0]), p[1]) - data

    x, cov, ssr = scipy_fit(res, [math.log(0.01), 1.5])
    got = {p.path: p for p in result.parameters}
    assert result.ssr == pytest.approx(ssr, rel=1e-5)
    assert got["reaction.one.order.A"].value == pytest.approx(x[1], abs=1e-5)
    assert got["reaction.one.order.A"].se == pytest.approx(math.sqrt(cov[1, 1]), rel=3e-2)
    # k is reported in SI at the fitted order (its unit moves with the order): (mol/m^3)^(1-n)/s
    n_hat = x[1]
    assert got["reaction.one.k"].value == pytest.approx(math.exp(x[0]) * 1000.0 ** (1.0 - n_hat), rel=1e-4)
    assert "mol/m^3" in got["reaction.one.k"].unit


# ----------------------------------------------------------------------------------------------- rivals


SERIES = ('[[reaction]]\nid = "one"\nequation = "A -> B"\nk = "0.01 1/s"\nT_ref = "350 K"\nEa = "50 kJ/mol"\n'
          '[[reaction]]\nid = "two"\nequation = "B -> C"\nk = "0.01 1/s"\nT_ref = "350 K"\nEa = "50 kJ/mol"\n')
PARALLEL = "[species.A]\n[species.B]\n[species.C]\n" + SERIES + \
    '[[reaction]]\nid = "direct"\nequation = "A -> C"\nk = "0.001 1/s"\nT_ref = "350 K"\nEa = "50 kJ/mol"\n'


def _series_data(k_direct: float):
    """A -> B -> C (and A -> C at k_direct) at 330 and 360 K, A and B sampled, noise 0.004 mol/L."""
    rng = np.random.default_rng(21)
    times = np.linspace(20, 400, 10)
    rows = []
    for T in (330.0, 360.0):
        k1 = 0.02 * math.exp(-60e3 / R * (1 / T - 1 / 350))
        k2 = 0.008 * math.exp(-45e3 / R * (1 / T - 1 / 350))
        k3 = k_direct * math.exp(-60e3 / R * (1 / T - 1 / 350))
        a = np.exp(-(k1 + k3) * times)
        b = k1 / (k2 - k1 - k3) * (a - np.exp(-k2 * times))
        for t, x, y in zip(times, a + rng.normal(0, 0.004, times.size), b + rng.normal(0, 0.004, times.size)):
            rows.append((f"T{T:.0f}", t, max(x, 0), max(y, 0)))
    text = "run, t [s], A [mol/L], B [mol/L]\n" + "\n".join(f"{r}, {t:.10g}, {x:.10g}, {y:.10g}"
                                                             for r, t, x, y in rows)
    exps = "".join(f'[[experiment]]\nid = "T{T}"\nT = "{T} K"\nstart = {{ A = "1 mol/L" }}\ndata = "d.csv"\n'
                   f'run = "T{T}"\n' for T in (330, 360))
    return text, exps


@pytest.mark.parametrize("k_direct, bigger_needed", [(0.0, False), (0.004, True)])
def test_a_rival_network_is_compared_by_aicc_and_a_nested_test(tmp_path, k_direct, bigger_needed):
    """The series network against a rival that adds A -> C: when the data have no direct path the extra reaction is
    not supported (the extra-sum-of-squares test does not reject the smaller network, which has the larger Akaike
    weight); when they do, the test rejects it."""
    text, exps = _series_data(k_direct)
    (tmp_path / "parallel.toml").write_text(PARALLEL)
    keys = ('estimate = ["reaction.one.k", "reaction.one.Ea", "reaction.two.k", "reaction.two.Ea"]\n'
            'rivals = ["parallel.toml"]')
    path = write(tmp_path, SERIES, exps, keys, {"d.csv": text})
    result = fit(load_study(path))
    assert result.status == "optimal", result.message
    mine, rival = result.rivals
    assert rival["network"] == "parallel.toml" and rival["p"] == 6 and mine["p"] == 4
    assert rival["nested"] and rival["test"]["bigger"] == "parallel.toml"
    assert rival["ssr"] <= mine["ssr"] * (1 + 1e-9)          # more parameters never fit worse
    p_value = rival["test"]["p_value"]
    if bigger_needed:
        assert p_value < 1e-3 and rival["weight"] > 0.99
    else:
        assert p_value > 0.05 and mine["weight"] > rival["weight"]


def test_rival_networks_must_hold_the_measured_species(tmp_path):
    from tubeyield.errors import StudyError
    text, exps = _series_data(0.0)
    (tmp_path / "small.toml").write_text('[species.A]\n[species.C]\n[[reaction]]\nid = "x"\nequation = "A -> C"\n'
                                         'k = "0.01 1/s"\n')
    path = write(tmp_path, SERIES, exps, 'estimate = ["reaction.one.k"]\nrivals = ["small.toml"]', {"d.csv": text})
    with pytest.raises(StudyError, match="missing B"):
        load_study(path)


# ------------------------------------------------------------------------------------------------ hand-off


@pytest.fixture(scope="module")
def saved_fit(tmp_path_factory):
    """The series fit saved by the command line: fit.json, the fitted network and the covariance."""
    d = tmp_path_factory.mktemp("handoff")
    text, exps = _series_data(0.0)
    (d / "d.csv").write_text(text)
    keys = 'estimate = ["reaction.one.k", "reaction.one.Ea", "reaction.two.k", "reaction.two.Ea"]'
    study = HEAD.format(reactions=SERIES, experiments=exps, fit=keys)
    study += ('[sweep]\nsamples = 400\nseed = 3\nrun = "evaluate"\nfit_uncertainty = true\n'
              '[sweep.candidates]\nhere = { tau = "100 s", T = "350 K" }\n')
    (d / "study.toml").write_text(study)
    r = subprocess.run([sys.executable, "-m", "tubeyield", "fit", str(d / "study.toml"), "--save", str(d / "out")],
                       capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    return d


def test_optimize_on_the_fitted_kinetics_equals_a_study_including_the_fitted_network(saved_fit):
    import tubeyield as ty
    from tubeyield.study.read_kinetics import load_kinetics
    d = saved_fit
    values = json.loads((d / "out" / "fit.json").read_text())["values_si"]
    with_fit = load_kinetics(ty.load(d / "study.toml"), d / "out" / "fit.json")
    assert with_fit.reaction("one").k.Ea == pytest.approx(values["reaction.one.Ea"])
    assert math.exp(with_fit.reaction("two").k.ln_k_ref) == pytest.approx(values["reaction.two.k"])
    # the fitted network as a fragment: a study that includes it instead of its own reactions
    shutil.copy(d / "out" / "fitted-network.toml", d / "fitted-network.toml")
    text = HEAD.format(reactions="", experiments="", fit="").replace("[species.A]\n[species.B]\n[species.C]\n", "")
    text = text.replace("[fit]\n", "")
    (d / "included.toml").write_text('[study]\ninclude = "fitted-network.toml"\n' + text)
    included = ty.load(d / "included.toml")
    for rid in ("one", "two"):
        assert included.reaction(rid).k.Ea == pytest.approx(with_fit.reaction(rid).k.Ea, rel=1e-7)
        assert included.reaction(rid).k.ln_k_ref == pytest.approx(with_fit.reaction(rid).k.ln_k_ref, abs=1e-7)
    a, b = ty.optimize(with_fit, relax=False), ty.optimize(included, relax=False)
    assert a.status == b.status == "optimal"
    assert a.goal["value"] == pytest.approx(b.goal["value"], rel=1e-6)
    own = ty.optimize(ty.load(d / "study.toml"), relax=False)
    assert abs(own.goal["value"] - a.goal["value"]) > 1e-3          # the study's own rough values differ
    # T may go from 300 to 400 K, the runs were at 330 and 360 K: the optimum says where it rests on extrapolation
    T = a.decisions_si["T"]
    words = "EXTRAPOLATED KINETICS" if not 329 <= T <= 361 else "extrapolated"
    assert any(words in w for w in a.warnings), (T, a.warnings)
    assert not any("extrapolated" in w.lower() for w in own.warnings)


def test_a_sweep_draws_the_fitted_parameters_with_the_fits_covariance(saved_fit):
    """The scenarios' ln k and Ea, mapped back to the estimation coordinates, have the fit's mean and covariance
    (400 Latin-hypercube draws: within sampling error)."""
    import tubeyield as ty
    from tubeyield.jobs.scenario import scenarios
    from tubeyield.study.read_kinetics import load_kinetics
    d = saved_fit
    study = load_kinetics(ty.load(d / "study.toml"), d / "out" / "fit.json")
    k = study.kinetics
    G, h = np.array(k.G), np.array(k.h)
    rows = []
    for sc in scenarios(study):
        v = sc.as_dict()
        lin = [math.log(v[p]) if f == "exp" else v[p] / 1000.0 for p, f in zip(k.paths, k.transforms)]
        rows.append(np.linalg.solve(G, np.array(lin) - h))
    X = np.array(rows)
    cov = np.array(k.cov)
    assert X.mean(axis=0) == pytest.approx(np.array(k.x), abs=0.05 * float(np.sqrt(np.diag(cov)).max()))
    sample = np.cov(X.T)
    d_ = np.sqrt(np.diag(cov))
    assert np.sqrt(np.diag(sample)) == pytest.approx(d_, rel=0.1)
    corr, sample_corr = cov / np.outer(d_, d_), sample / np.outer(np.sqrt(np.diag(sample)), np.sqrt(np.diag(sample)))
    assert np.abs(corr - sample_corr).max() < 0.1


def test_kinetics_from_another_network_or_a_bad_file_are_refused(saved_fit, tmp_path):
    d = saved_fit
    other = (d / "study.toml").read_text().replace('equation = "B -> C"', 'equation = "B -> 2 C"')
    (d / "other.toml").write_text(other)
    (tmp_path / "bad.json").write_text('{"kinetics": {"values": {"reaction.one.k": "fast"}}}')
    for study, fit_file, words in ((d / "other.toml", d / "out" / "fit.json", "reactions differ"),
                                   (d / "study.toml", tmp_path / "bad.json", "kinetics.values"),
                                   (d / "study.toml", tmp_path / "missing.json", "does not exist")):
        r = subprocess.run([sys.executable, "-m", "tubeyield", "optimize", str(study), "--kinetics", str(fit_file)],
                           capture_output=True, text=True, timeout=300)
        assert r.returncode == 2 and "Traceback" not in r.stderr and words in r.stderr, r.stderr
    r = subprocess.run([sys.executable, "-m", "tubeyield", "sweep", str(d / "study.toml"), "--store",
                        str(tmp_path / "s.sqlite")], capture_output=True, text=True, timeout=300)
    assert r.returncode == 2 and "sweep.fit_uncertainty" in r.stderr and "--kinetics" in r.stderr, r.stderr


# ------------------------------------------------------------------------------------------------ bad input


BAD_KEYS = [
    ('T = [["0 min", "320 K"], ["0 min", "330 K"]]', "experiment.run1.T[1][0]", "increase"),
    ('T = "-5 K"', "experiment.run1.T", "above 0 K"),
    ('T = "1e6 K"', "experiment.run1.T", "cap"),
]


@pytest.mark.parametrize("line, key, words", BAD_KEYS)
def test_bad_experiment_keys_are_named(tmp_path, line, key, words):
    from tubeyield.errors import StudyError
    exp = f'[[experiment]]\n{line}\nstart = {{ A = "1 mol/L" }}\ndata = "a.csv"\n'
    path = write(tmp_path, SERIES, exp, 'estimate = ["reaction.one.k"]', {"a.csv": "t [s], A [mol/L]\n1, 0.5\n"
                                                                                   "2, 0.4\n"})
    with pytest.raises(StudyError) as err:
        load_study(path)
    assert key in err.value.line() and words in err.value.line()


def test_bad_estimate_paths_and_stirred_rows_are_named(tmp_path):
    from tubeyield.errors import StudyError
    exp = '[[experiment]]\nT = "350 K"\nstart = { A = "1 mol/L" }\ndata = "a.csv"\n'
    files = {"a.csv": "# a comment line is fine\nt [s], A [mol/L]\n1, 0.5\n2, 0.4\n3, 0.3\n"}
    for est, words in (('["reaction.one.dH"]', "only for a reversible step"),
                       ('["reaction.one.order.B"]', "order.A"),
                       ('["reaction.one.K"]', "one of k, Ea")):
        path = write(tmp_path, SERIES, exp, f"estimate = {est}", files)
        with pytest.raises(StudyError, match=words):
            load_study(path)
    tank = '[[experiment]]\nvessel = "stirred"\nT = "350 K"\nstart = { A = "1 mol/L" }\ndata = "t.csv"\n'
    path = write(tmp_path, SERIES, tank, 'estimate = ["reaction.one.k"]', {"t.csv": "tau [s], A [mol/L]\n0, 1\n"
                                                                                   "5, 0.9\n"})
    with pytest.raises(StudyError, match="positive residence times"):
        load_study(path)


# -------------------------------------------------------------------------------------------------- coverage


@pytest.mark.slow
def test_the_95_percent_intervals_cover_the_true_values_95_percent_of_the_time(tmp_path):
    """Coverage: 60 data sets simulated from known kinetics (A -> B, first order, k = 0.01 1/s at 345 K, Ea = 50
    kJ/mol, runs at 330 and 360 K, 8 samples each, Gaussian noise of 0.01 mol/L, seeded) are fitted with the error
    estimated from the residuals; the share of 95 % intervals that hold the true value must be consistent with 95 %
    (exact binomial test, scipy.stats.binomtest, at the 0.1 % level), for the linearized and the profile-likelihood
    intervals of both parameters. An interval too narrow or too wide by a factor of two fails it (about 68 % or
    99.99 % coverage)."""
    from scipy.stats import binomtest
    k_true, Ea_true = 0.01, 50.0
    times = np.linspace(20.0, 250.0, 8)
    reactions = '[[reaction]]\nid = "one"\nequation = "A -> B"\nk = "0.02 1/s"\nT_ref = "345 K"\nEa = "40 kJ/mol"\n'
    exps = "".join(f'[[experiment]]\nid = "T{T}"\nT = "{T} K"\nstart = {{ A = "1 mol/L" }}\ndata = "d.csv"\n'
                   f'run = "T{T}"\n' for T in (330, 360))
    rng = np.random.default_rng(2024)
    hits = {"k": [0, 0], "Ea": [0, 0]}
    n = 60
    for i in range(n):
        rows = ["run, t [s], A [mol/L]"]
        for T in (330, 360):
            k = k_true * math.exp(-Ea_true * 1e3 / R * (1 / T - 1 / 345.0))
            c = np.exp(-k * times) + rng.normal(0, 0.01, times.size)
            rows += [f"T{T}, {t:.6g}, {max(v, 0.0):.10g}" for t, v in zip(times, c)]
        d = tmp_path / f"rep{i}"
        d.mkdir()
        path = write(d, reactions, exps, 'estimate = ["reaction.one.k", "reaction.one.Ea"]\nstarts = 1',
                     {"d.csv": "\n".join(rows) + "\n"})
        result = fit(load_study(path), compare=False)
        assert result.status == "optimal", result.message
        got = {p.path.split(".")[-1]: p for p in result.parameters}
        for name, truth in (("k", k_true), ("Ea", Ea_true)):
            p = got[name]
            hits[name][0] += p.low < truth < p.high
            hits[name][1] += p.profile_low < truth < p.profile_high
    for name, (linear, profile) in hits.items():
        for kind, covered in (("linearized", linear), ("profile", profile)):
            assert binomtest(covered, n, 0.95).pvalue > 1e-3, (name, kind, covered, n)
