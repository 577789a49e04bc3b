"""The robust operating point: checked against a closed form, against the nominal optimum of single scenarios,
against a direct simulation of every validation scenario, and on the demo and an adiabatic study of our own for its
out-of-sample share; and its bad input.

Invented kinetics (tests only). Closed forms: a first-order reaction in a plug-flow reactor converts
X = 1 - exp(-k tau) (Levenspiel, Chemical Reaction Engineering, 3rd ed. 1999, ch. 5).
"""

import json
import math
import shutil
import subprocess
import sys

import pytest

from helpers import SCENARIOS, study_from_toml
from tubeyield.jobs.evaluate import in_scenarios
from tubeyield.jobs.optimize import optimize
from tubeyield.jobs.robust import draws, guarantee, robust
from tubeyield.study.variation import apply_values

SERIES = """
[species.A]
[species.B]
[species.C]
[[reaction]]
id = "one"
equation = "A -> B"
k = "0.01 1/s"
[[reaction]]
id = "two"
equation = "B -> C"
k = "0.002 1/s"
[feed]
flow = "1 L/min"
conc = { A = "1 mol/L" }
[reactor]
elements = 20
[operate]
tau = ["10 s", "2000 s"]
T = "298.15 K"
[goal]
maximize = "yield:B"
key = "A"
limits = ["conversion:A >= 0.9"]
[sweep]
samples = 20
vary = { "reaction.one.k" = { uniform = ["0.008 1/s", "0.012 1/s"] } }
[robust]
scenarios = 12
validation = 60
"""


def test_one_uncertain_rate_constant_gives_the_worst_scenarios_closed_form():
    """k1 uncertain, tau the only decision, conversion:A >= 0.9 binding (the unconstrained optimum ln(k2/k1)/(k2 -
    k1) = 201 s converts only 87 %): every scenario must convert 90 %, so tau = ln(10) / min(k1) over the training
    scenarios, which is also the nominal optimum of the worst scenario."""
    study = study_from_toml(SERIES)
    result = robust(study, workers=1)
    assert result.status == "optimal", result.message
    training = draws(study, 12, study.robust.seed)
    worst = min(training, key=lambda v: v["reaction.one.k"])
    tau = math.log(10.0) / worst["reaction.one.k"]
    assert result.decisions_si["tau"] == pytest.approx(tau, rel=1e-6)
    alone = optimize(apply_values(study, worst), relax=False)
    assert alone.status == "optimal"
    assert result.decisions_si["tau"] == pytest.approx(alone.decisions_si["tau"], rel=1e-6)
    # the nominal optimum (k1 = 0.01) needs a shorter tube, so it misses the limit where k1 is smaller
    nominal, mine = result.points[0], result.points[-1]
    assert nominal["name"] == "nominal optimum" and mine["name"] == "robust point"
    assert nominal["share"] < mine["share"]


def test_with_one_scenario_the_robust_point_is_that_scenarios_optimum():
    study = study_from_toml(SERIES.replace('limits = ["conversion:A >= 0.9"]', 'limits = ["conversion:A >= 0.5"]'))
    result = robust(study, scenarios=1, workers=1)
    assert result.status == "optimal", result.message
    only = draws(study, 1, study.robust.seed)[0]
    alone = optimize(apply_values(study, only), relax=False)
    assert result.decisions_si["tau"] == pytest.approx(alone.decisions_si["tau"], rel=1e-6)
    assert result.goal["value"] == pytest.approx(alone.goal["value"], rel=1e-7)


def test_the_validated_shares_agree_with_a_simulation_of_every_fresh_scenario():
    study = study_from_toml(SERIES)
    result = robust(study, validation=40, workers=1)
    fresh = draws(study, 40, study.robust.seed + 7919)
    for p in result.points:
        point = {"tau": p["point"]["tau"], "T": 298.15}
        rows = in_scenarios((study, point, fresh, study.numerics.check_tolerance))
        assert p["meets"] == sum(1 for r in rows if r[1]) and p["n"] == 40, p["name"]
        assert p["expected_goal"] == pytest.approx(sum(r[0] for r in rows) / 40, rel=1e-12)


def test_a_validation_that_contradicts_the_promise_is_said(monkeypatch):
    """Fresh scenarios from a slower catalyst than the training ones (k1 below every training value) stand in for a
    problem where the scenario bound does not hold: the robust point, made to convert 90 % in every training
    scenario, misses the limit in nearly all of them. The result says the validation contradicts its promise and the
    report's summary makes it a stop; with fresh scenarios drawn as the training ones it says nothing."""
    import tubeyield.jobs.robust as robust_job
    from tubeyield.report.summary import summary

    study = study_from_toml(SERIES)
    honest = robust(study, validation=60, workers=1)
    assert honest.status == "optimal", honest.message
    assert honest.guarantee["contradicted_by_validation"] is False and not honest.warnings

    real_draws = robust_job.draws

    def slower(study_, n, seed):
        rows = real_draws(study_, n, seed)
        if seed == study_.robust.seed:
            return rows                                      # the training scenarios
        return [{**r, "reaction.one.k": 0.7 * r["reaction.one.k"]} for r in rows]

    monkeypatch.setattr(robust_job, "draws", slower)
    result = robust(study, validation=60, workers=1)
    assert result.status == "optimal", result.message
    assert result.points[-1]["share"] < 0.1
    assert result.guarantee["contradicted_by_validation"] is True
    assert any("this run promises" in w for w in result.warnings), result.warnings
    box = summary(None, robust=result.to_dict())
    assert any("its run promises" in s for s in box["stops"]), box["stops"]
    assert not any("its run promises" in s for s in summary(None, robust=honest.to_dict())["stops"])


def test_the_scenario_bound_is_the_published_formula():
    """Campi and Garatti (2008): with d decisions and N scenarios, eps solves sum_{i<d} C(N,i) eps^i (1-eps)^(N-i)
    = beta; for d = 1 that is (1 - eps)^N = beta, eps = 1 - beta^(1/N) (the classical one-dimensional case)."""
    assert guarantee(50, 1, 0, 0.99) == pytest.approx(1 - 0.01 ** (1 / 50), rel=1e-9)
    eps = guarantee(50, 3, 0, 0.99)
    from scipy.stats import binom
    assert binom.cdf(2, 50, eps) == pytest.approx(0.01, rel=1e-6)
    assert guarantee(2, 3, 0, 0.99) is None                 # fewer scenarios than decisions: no bound


@pytest.mark.slow
def test_the_demo_robust_point_meets_its_bound_out_of_sample(tmp_path):
    """The demo's robust point (50 training scenarios of the catalyst activity, 3 decisions) meets every limit in
    at least the share the scenario bound promises (1 - eps at 99 %), on 400 fresh scenarios, and in more of them
    than the nominal optimum."""
    shutil.copy(SCENARIOS / "oxidation-network.toml", tmp_path)
    text = (SCENARIOS / "oxidation.toml").read_text().split("# Lab runs")[0].replace("fit_uncertainty = true\n", "")
    (tmp_path / "demo.toml").write_text(text)
    r = subprocess.run([sys.executable, "-m", "tubeyield", "robust", str(tmp_path / "demo.toml"), "--json", "--save",
                        str(tmp_path / "out")], capture_output=True, text=True, timeout=900)
    assert r.returncode == 0, r.stderr
    result = json.loads(r.stdout)
    mine = result["points"][-1]
    assert mine["name"] == "robust point" and mine["n"] == 400
    assert mine["share"] >= 1 - result["guarantee"]["epsilon"]
    assert mine["share"] > result["points"][0]["share"]
    report = subprocess.run([sys.executable, "-m", "tubeyield", "report", str(tmp_path / "out"), "--out",
                             str(tmp_path / "rep")], capture_output=True, text=True, timeout=300)
    assert report.returncode == 0, report.stderr
    html = (tmp_path / "rep" / "index.html").read_text()
    assert "Recommended operating point (robust)" in html and 'id="robust"' in html


ADIABATIC = """
[species.A]
Cp = "150 J/(mol*K)"
[species.B]
Cp = "150 J/(mol*K)"
[species.C]
Cp = "150 J/(mol*K)"
[species.S]
Cp = "75 J/(mol*K)"
[[reaction]]
id = "one"
equation = "A -> B"
k = "0.01 1/s"
T_ref = "330 K"
Ea = "70 kJ/mol"
dH = "-60 kJ/mol"
[[reaction]]
id = "two"
equation = "B -> C"
k = "0.001 1/s"
T_ref = "330 K"
Ea = "90 kJ/mol"
dH = "-80 kJ/mol"
[feed]
flow = "1 L/min"
conc = { A = "1 mol/L", S = "15 mol/L" }
T = "320 K"
[reactor]
heat = "adiabatic"
elements = 20
[operate]
tau = ["10 s", "1200 s"]
T_in = ["300 K", "345 K"]
[goal]
maximize = "yield:B"
key = "A"
limits = ["T <= 360 K"]
[sweep]
samples = 10
vary = { "reaction.one.dH" = { normal = ["-60 kJ/mol", "6 kJ/mol"] }, "reaction.two.k" = { lognormal = ["0.001 1/s", 0.3] } }
[robust]
scenarios = 12
validation = 200
"""


@pytest.mark.slow
def test_an_adiabatic_robust_point_holds_its_temperature_limit_out_of_sample():
    """An invented adiabatic exothermic series (solvent S as heat sink) with an uncertain heat of reaction and
    over-reaction rate: the robust point keeps the hot spot below 360 K in at least the bound's share of 200 fresh
    scenarios; the nominal optimum, which runs hot against the limit, does worse."""
    study = study_from_toml(ADIABATIC)
    result = robust(study, workers=1)
    assert result.status == "optimal", result.message
    nominal, mine = result.points[0], result.points[-1]
    eps = result.guarantee["epsilon"]
    assert mine["share"] >= 1 - eps, (mine["share"], eps)
    assert mine["violations"]["T <= 360 K"] <= nominal["violations"]["T <= 360 K"]
    assert nominal["violations"]["T <= 360 K"] > 0.1                   # the nominal optimum sits on the limit


def _cli(*args):
    return subprocess.run([sys.executable, "-m", "tubeyield", *args], capture_output=True, text=True, timeout=600)


def test_bad_robust_input_is_one_clear_error(tmp_path):
    path = tmp_path / "s.toml"
    path.write_text(SERIES)
    for args, words in ((["--share", "1.5"], "--share"), (["--share", "0"], "--share"),
                        (["--scenarios", "0"], "--scenarios"), (["--validation", "0"], "--validation")):
        r = _cli("robust", str(path), *args)
        assert r.returncode == 2 and "Traceback" not in r.stderr and words in r.stderr, (args, r.stderr)
    zones = SERIES.replace('T = "298.15 K"', 'T = ["290 K", "330 K"]').replace("[reactor]", '[reactor]\nheat = "zones"'
                                                                               '\nzones = 4')
    path.write_text(zones)
    r = _cli("robust", str(path), "--scenarios", "3")
    assert r.returncode == 2 and "at least as many scenarios as decisions (5)" in r.stderr, r.stderr
    path.write_text(SERIES.replace('{ uniform = ["0.008 1/s", "0.012 1/s"] }', '{ values = ["0.008 1/s"] }'))
    r = _cli("robust", str(path))
    assert r.returncode == 2 and "uncertain parameters" in r.stderr, r.stderr


def test_limits_that_no_point_holds_in_every_scenario_are_named(tmp_path):
    """Conversion 0.999 needs tau = ln(1000)/k1: 691 s at the nominal k1 = 0.01, up to 864 s where k1 = 0.008; with
    the tube capped at 700 s the slower scenarios cannot reach it, and the limit is named."""
    path = tmp_path / "s.toml"
    path.write_text(SERIES.replace('tau = ["10 s", "2000 s"]', 'tau = ["10 s", "700 s"]')
                    .replace('"conversion:A >= 0.9"', '"conversion:A >= 0.999"'))
    r = _cli("robust", str(path))
    assert r.returncode == 3, (r.returncode, r.stdout, r.stderr)
    assert "conversion:A >= 0.999 missed in" in r.stdout


def test_the_python_api_gives_the_validated_points_as_a_table():
    import tubeyield as ty
    result = ty.robust(study_from_toml(SERIES), scenarios=4, validation=20, workers=1)
    table = result.to_frame()
    assert list(table["point"]) == ["nominal optimum", "robust point"]
    assert table["share"].tolist() == [p["share"] for p in result.points]
    assert "violates:conversion:A >= 0.9" in table.columns
