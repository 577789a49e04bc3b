"""The Python API (tubeyield.api, re-exported as `tubeyield`): every job from a notebook, pandas tables back, and the
same numbers as the command line."""

import json
import shutil
import subprocess
import sys

import numpy as np
import pytest

import tubeyield as ty
from helpers import SCENARIOS


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    """The demo study with a small window, a 5-point front and an evaluate sweep of 3 scenarios."""
    d = tmp_path_factory.mktemp("api")
    shutil.copy(SCENARIOS / "oxidation-network.toml", d)
    text = (SCENARIOS / "oxidation.toml").read_text()
    text = text.replace("points = [60, 60]", "points = [12, 10]").replace("points = 21", "points = 5")
    head, _, _ = text.partition("[sweep]")
    text = head + ('[sweep]\nrun = "evaluate"\nvary = { "reaction.over.Ea" = { values = ["83 kJ/mol", "85 kJ/mol", '
                   '"87 kJ/mol"] } }\n[sweep.candidates]\nhere = { tau = "2 min", T = "340 K", "ratio.O" = 2.0 }\n')
    (d / "demo.toml").write_text(text)
    return d


def test_optimize_matches_the_command_line_and_gives_a_table(demo):
    best = ty.optimize(demo / "demo.toml")
    assert isinstance(best, ty.Result) and best.status == "optimal"
    cli = subprocess.run([sys.executable, "-m", "tubeyield", "optimize", str(demo / "demo.toml"), "--json"],
                         capture_output=True, text=True)
    assert cli.returncode == 0, cli.stderr
    assert json.loads(cli.stdout)["goal"]["value"] == pytest.approx(best.goal["value"], rel=1e-9)
    table = best.to_frame()
    goal = table[(table.part == "goal")]
    assert goal.value.iloc[0] == best.goal["value"]
    limits = table[table.part == "limit"].set_index("name")
    assert bool(limits.loc["conversion:A >= 0.80", "active"]) and limits.loc["T <= 400 K", "marginal"] == 0.0
    assert set(table[table.part == "decision"].name) == {"tau", "T", "ratio.O"}


def test_simulate_takes_units_or_si_and_agrees(demo):
    study = ty.load(demo / "demo.toml")
    with_units = ty.simulate(study, tau="2 min", T="340 K", **{"ratio.O": "2"})
    in_si = ty.simulate(study, {"tau": 120.0, "T": 340.0, "ratio.O": 2.0})
    assert with_units.goal["value"] == in_si.goal["value"]
    assert with_units.status in ("meets limits", "misses limits") and not with_units.warnings
    assert "ratio.O not set" in " ".join(ty.simulate(study, tau="2 min", T="340 K").warnings)


def test_front_and_window_tables(demo):
    study = ty.load(demo / "demo.toml")
    fr = ty.front(study)
    frame = fr.to_frame()
    assert len(frame) == len(fr.points) == 5 and {"conversion:A", "selectivity:B", "status"} <= set(frame.columns)
    best = ty.optimize(study, relax=False)
    w = ty.window(study, at=best)
    cells = w.to_frame()
    assert len(cells) == 12 * 10
    assert cells["window"].mean() == pytest.approx(float(np.mean(w.window)))
    assert w.optimum["x"] == pytest.approx(best.decisions["tau"]["value"])


def test_sweep_into_a_store_and_back_as_a_table(demo, tmp_path):
    out = ty.sweep(demo / "demo.toml", tmp_path / "s.sqlite", workers=1)
    table = out.to_frame()
    assert out.total == 3 and len(table) == 3 and set(table.status) == {"evaluated"}
    assert sorted(table["in:reaction.over.Ea"]) == pytest.approx([83e3, 85e3, 87e3])


def test_a_mistake_is_a_study_error_naming_the_key(demo, tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text((demo / "demo.toml").read_text().replace('x = "tau"', 'x = "nonsense"'))
    shutil.copy(SCENARIOS / "oxidation-network.toml", tmp_path)
    with pytest.raises(ty.StudyError) as err:
        ty.window(bad)
    assert "window.x" in err.value.line()
    assert ty.check(bad).to_frame()["ok"].iloc[0]            # the window mistake does not stop the network check
