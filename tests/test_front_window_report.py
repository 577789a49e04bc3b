"""Fronts (epsilon-constraint, Haimes, Lasdon and Wismer 1971), window maps and the HTML report."""

import dataclasses
import json
import re
import subprocess
import sys
from html.parser import HTMLParser

import numpy as np
import pytest

from helpers import SCENARIOS, demo_text, study_from_toml
from tubeyield.jobs.front import front
from tubeyield.jobs.optimize import optimize
from tubeyield.jobs.window import window
from tubeyield.reactor.simulate import simulate
from tubeyield.solve.multistart import violation
from tubeyield.study import load_study
from tubeyield.study.metric import parse_limit
from tubeyield.study.schema import WindowSpec


@pytest.fixture(scope="module")
def demo():
    return load_study(SCENARIOS / "oxidation.toml")


@pytest.fixture(scope="module")
def demo_front(demo):
    return front(demo, points=11)


def test_front_is_monotone_and_non_dominated(demo_front):
    pts = demo_front.front_points()
    assert demo_front.status == "done" and len(pts) == 11
    x = np.array([p["x"] for p in pts])
    y = np.array([p["y"] for p in pts])
    # both maximized: along increasing x, y must fall (a trade-off), and no point may dominate another
    assert np.all(np.diff(x) > 0) and np.all(np.diff(y) < 0)
    for i in range(len(pts)):
        for j in range(len(pts)):
            if i != j:
                assert not (x[j] >= x[i] and y[j] >= y[i])
    assert all(p["check"] < 1e-6 for p in pts)


def _central_slope(pts, i):
    return (pts[i + 1]["y"] - pts[i - 1]["y"]) / (pts[i + 1]["x"] - pts[i - 1]["x"])


def _best_y_with_x_at_least(study, x: float) -> float:
    """The front's y at level x, by a plain optimization with the level as one more limit."""
    level = parse_limit(f"{study.front.x.text} >= {x!r}", "test", set(study.symbols))
    goal = dataclasses.replace(study.goal, metric=study.front.y, sense="max", limits=study.goal.limits + (level,))
    result = optimize(dataclasses.replace(study, goal=goal))
    assert result.status == "optimal"
    return result.goal["value"]


def test_front_slope_matches_finite_differences_of_the_front(demo, demo_front):
    # The reported slope dy/dx (the optimum's sensitivity to the level) must be the slope of the front itself: at
    # interior points, the central difference of the neighbours (second-order accurate; common practice). Both
    # metrics are maximized, so the slope is negative: more conversion costs selectivity.
    # This front is concave, so the slope at a point also lies between the secants to its two neighbours. Its last
    # tenth is steep (the slope goes from -3.4 to -4.4 and on), so at the two points next to the x-end the central
    # difference of the neighbours is biased by the curvature (-3.45 against -3.37 at the second): there the slope is
    # checked against a central difference of +-0.002 in x, each side a separate optimization.
    pts = demo_front.front_points()
    for i in range(1, len(pts) - 1):
        left = (pts[i]["y"] - pts[i - 1]["y"]) / (pts[i]["x"] - pts[i - 1]["x"])
        right = (pts[i + 1]["y"] - pts[i]["y"]) / (pts[i + 1]["x"] - pts[i]["x"])
        assert right <= pts[i]["trade_off"] <= left < 0, i
        if i < len(pts) - 3:
            assert pts[i]["trade_off"] == pytest.approx(_central_slope(pts, i), rel=2e-2), i
    h = 2e-3
    for i in (len(pts) - 3, len(pts) - 2):
        x = pts[i]["x"]
        local = (_best_y_with_x_at_least(demo, x + h) - _best_y_with_x_at_least(demo, x - h)) / (2 * h)
        assert pts[i]["trade_off"] == pytest.approx(local, rel=5e-3), i
    # The first level sits on the study's own limit conversion:A >= 0.80, the same constraint twice: the slope there
    # is the one-sided derivative, checked by the second-order forward difference -(3 y0 - 4 y1 + y2) / (2 h).
    h = pts[1]["x"] - pts[0]["x"]
    forward = -(3 * pts[0]["y"] - 4 * pts[1]["y"] + pts[2]["y"]) / (2 * h)
    assert pts[0]["trade_off"] == pytest.approx(forward, rel=3e-2)


def test_the_first_slope_is_the_same_on_a_front_model_rebuilt_on_a_finer_mesh(demo, demo_front, monkeypatch):
    # When the ends were verified on a finer mesh the front's model is rebuilt on it and does not hold the y-end's
    # multipliers; the first level is then solved on it for the slope the limit conversion:A >= 0.80 sets there.
    # Forced here on the same mesh: the slope must be the one read from the y-end's own multipliers.
    import tubeyield.jobs.front as front_job
    monkeypatch.setattr(front_job, "_finest_mesh", lambda model, *ends: list(model.edges))
    rebuilt = front_job.front(demo, points=11)
    assert rebuilt.timing["build"] > 0.01                     # the front model was built again
    first, expected = rebuilt.points[0]["trade_off"], demo_front.points[0]["trade_off"]
    assert expected is not None and first == pytest.approx(expected, rel=1e-6)
    assert [p["x"] for p in rebuilt.points] == pytest.approx([p["x"] for p in demo_front.points], abs=1e-7)


def test_front_ends_equal_single_metric_optima(demo, demo_front):
    spec = demo.front
    y_best = optimize(dataclasses.replace(demo, goal=dataclasses.replace(demo.goal, metric=spec.y)))
    x_best = optimize(dataclasses.replace(demo, goal=dataclasses.replace(demo.goal, metric=spec.x)))
    pts = demo_front.front_points()
    assert pts[0]["y"] == pytest.approx(y_best.goal["value"], rel=1e-6)
    assert pts[-1]["x"] == pytest.approx(x_best.goal["value"], rel=1e-6)


def test_front_knee_is_the_farthest_point_from_the_chord(demo_front):
    pts = demo_front.points
    k = demo_front.knee
    assert 0 < k < len(pts) - 1
    x = np.array([p["x"] for p in pts])
    y = np.array([p["y"] for p in pts])
    xr, yr = (x - x[0]) / (x[-1] - x[0]), (y - y[-1]) / (y[0] - y[-1])
    assert k == int(np.argmax(xr + yr))


def test_a_straight_front_has_no_knee():
    # The knee is the point farthest outside the chord between the ends (I. Das, Structural Optimization 18, 1999).
    # On a straight front every point lies on the chord, and a bulge under 1 % of the box's diagonal is no knee; a
    # quarter circle (both metrics maximized) has its knee at 45 degrees, 0.29 of the diagonal outside the chord.
    from tubeyield.jobs.front import _knee

    def pts(x, y):
        return [{"status": "optimal", "x": float(a), "y": float(b), "dominated": False} for a, b in zip(x, y)]

    x = np.linspace(0.2, 0.9, 11)
    assert _knee(pts(x, 1.5 - 0.8 * x), "max", "max") is None
    bulge = 0.005 * 0.56 * np.sin(np.pi * (x - 0.2) / 0.7)       # 0.5 % of the y range (0.56) at the middle
    assert _knee(pts(x, 1.5 - 0.8 * x + bulge), "max", "max") is None
    assert _knee(pts(x, 1.5 - 0.8 * x + 10 * bulge), "max", "max") == 5
    t = np.linspace(0.0, np.pi / 2, 11)
    assert _knee(pts(np.sin(t), np.cos(t)), "max", "max") == 5
    # x maximized, y minimized: the quarter circle mirrored, its knee again in the middle
    assert _knee(pts(np.sin(t), 2.0 - np.cos(t)), "max", "min") == 5


def test_dominated_points_are_marked():
    from tubeyield.jobs.front import _mark_dominated
    pts = [{"status": "optimal", "x": 1.0, "y": 3.0, "dominated": False},
           {"status": "optimal", "x": 2.0, "y": 2.0, "dominated": False},
           {"status": "optimal", "x": 1.5, "y": 1.0, "dominated": False},     # dominated by (2, 2)
           {"status": "infeasible", "x": None, "y": None, "dominated": False}]
    _mark_dominated(pts, "max", "max")
    assert [p["dominated"] for p in pts] == [False, False, True, False]


def _feasible_by_simulation(study, point):
    return violation(study, simulate(study, point)) <= 1e-9


def test_window_feasible_region_agrees_with_direct_simulation(demo):
    opt = optimize(demo)
    w = window(demo, opt.decisions_si)
    assert w.maps["yield:B"].shape == (60, 60)
    rng = np.random.default_rng(1)
    for _ in range(25):
        i, j = rng.integers(60), rng.integers(60)
        point = dict(opt.decisions_si, tau=float(w.x_values[i] * 60.0), T=float(w.y_values[j]))
        sim = simulate(demo, point)
        assert w.maps["yield:B"][j, i] == pytest.approx(sim.metric(demo.goal.metric), abs=1e-7)
        assert bool(w.window[j, i]) == _feasible_by_simulation(demo, point)
    # the optimum lies in (or on the edge of) the window
    assert w.window.any()


def test_window_cell_by_cell_for_zones_agrees_with_simulation():
    text = demo_text().split("[sweep]")[0]
    text = text.replace('heat = "isothermal"', 'heat = "zones"\nzones = 2') \
        .replace('x = "tau"\ny = "T"\npoints = [60, 60]', 'x = "T.1"\ny = "T.2"\npoints = [5, 4]')
    net = (SCENARIOS / "oxidation-network.toml").read_text()
    study = study_from_toml(text.replace('include = "oxidation-network.toml"', "") + net)
    base = {"tau": 180.0, "T.1": 350.0, "T.2": 330.0, "ratio.O": 2.0}
    w = window(study, base, workers=2)
    assert "per cell" in w.method
    for j, t2 in enumerate(w.y_values):
        for i, t1 in enumerate(w.x_values):
            point = dict(base, **{"T.1": float(t1), "T.2": float(t2)})
            assert bool(w.window[j, i]) == _feasible_by_simulation(study, point)
            assert w.maps["yield:B"][j, i] == pytest.approx(simulate(study, point).metric(study.goal.metric), abs=1e-7)


def test_window_with_others_optimized_is_at_least_the_fixed_map(demo):
    small = dataclasses.replace(demo, window=WindowSpec("tau", "T", (4, 3), "optimized"))
    opt = optimize(demo)
    w_opt = window(small, opt.decisions_si)
    w_fix = window(dataclasses.replace(small, window=dataclasses.replace(small.window, others="optimum")),
                   opt.decisions_si)
    # re-optimizing ratio.O in each cell can only improve the goal where the cell's optimum meets the limits
    better = w_opt.maps["yield:B"] >= w_fix.maps["yield:B"] - 1e-7
    assert w_opt.window.any() and better[w_opt.window].all()


class _Sections(HTMLParser):
    def __init__(self):
        super().__init__()
        self.ids, self.images, self.tables, self.text = set(), [], 0, []

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if "id" in a:
            self.ids.add(a["id"])
        if tag == "img":
            self.images.append(a.get("src", ""))
        if tag == "table":
            self.tables += 1

    def handle_data(self, data):
        self.text.append(data)


def _cli(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "tubeyield", *args], capture_output=True, text=True, timeout=600,
                          cwd=cwd)


def test_cli_pipeline_writes_a_complete_report(tmp_path):
    study = SCENARIOS / "oxidation.toml"
    res = tmp_path / "results"
    assert _cli("optimize", str(study), "--save", str(res)).returncode == 0
    r = _cli("front", str(study), "--points", "7", "--save", str(res))
    assert r.returncode == 0, r.stderr
    r = _cli("window", str(study), "--at", str(res / "optimum.json"), "--save", str(res))
    assert r.returncode == 0, r.stderr
    out = tmp_path / "report"
    r = _cli("report", str(res), "--out", str(out))
    assert r.returncode == 0, r.stderr
    html = (out / "index.html").read_text()
    p = _Sections()
    p.feed(html)
    for section in ("network", "optimum", "profiles", "front", "window", "verification", "inputs", "provenance",
                    "cautions"):
        assert section in p.ids, section
    assert len(p.images) == 3 and all(src.startswith("data:image/png;base64,") for src in p.images)
    text = " ".join(p.text)
    for needle in ("What limits the optimum", "marginal", "knee", "calorimetry", "hazard study", "tubeyield 0.1.0",
                   "[goal]", "operating window", "stoichiometric", "passed"):
        assert needle.lower() in text.lower(), needle
    for fig in ("profiles", "front", "window"):
        assert (out / "figures" / f"{fig}.png").stat().st_size > 1000
        assert (out / "figures" / f"{fig}.svg").read_text().lstrip().startswith("<?xml")
    for table in ("decisions", "limits", "metrics", "profile", "front", "window"):
        assert (out / "tables" / f"{table}.csv").stat().st_size > 50
    front_data = json.loads((res / "front.json").read_text())
    assert front_data["status"] == "done" and len(front_data["points"]) == 7
    # self-contained: zipped, moved and unpacked elsewhere, every link still resolves inside the report folder
    import shutil
    import zipfile
    archive = shutil.make_archive(str(tmp_path / "handed-on"), "zip", out)
    shutil.rmtree(out)
    moved = tmp_path / "elsewhere" / "report"
    zipfile.ZipFile(archive).extractall(moved)
    html = (moved / "index.html").read_text()
    assert str(tmp_path) not in html and "file:" not in html
    links = re.findall(r'(?:href|src)="([^"#][^"]*)"', html)
    files = [u for u in links if not u.startswith("data:")]
    assert files and all((moved / u).is_file() for u in files), [u for u in files if not (moved / u).is_file()]


def test_report_of_a_missing_directory_is_a_user_error(tmp_path):
    r = _cli("report", str(tmp_path / "nothing"))
    assert r.returncode == 2 and "error:" in r.stderr and "Traceback" not in r.stderr


def test_front_points_equal_cold_optimizations_at_their_level():
    # Continuation must not stop short: a warm-started point equals a cold multistart optimization of y with
    # x >= level as an ordinary limit. This configuration (T up to 400 K, 21 levels) once stopped 3e-6 short at
    # level 1, when Ipopt's unscaled tolerances were at their loose defaults.
    from tubeyield.study.metric import Limit
    text = demo_text().split("[window]")[0].replace('T = ["310 K", "420 K"]',
                                                                                  'T = ["310 K", "400 K"]')
    net = (SCENARIOS / "oxidation-network.toml").read_text()
    study = study_from_toml(text.replace('include = "oxidation-network.toml"', "") + net)
    fr = front(study, points=21)
    spec = study.front
    for index in (1, 10):
        p = fr.points[index]
        limits = study.goal.limits + (Limit("front level", spec.x, ">=", p["level"], ""),)
        cold = optimize(dataclasses.replace(study, goal=dataclasses.replace(study.goal, metric=spec.y,
                                                                            limits=limits)))
        assert p["y"] == pytest.approx(cold.goal["value"], rel=1e-8), index


def test_front_over_a_metric_with_units_sets_levels_in_si():
    # productivity:B is shown in mol/(L*h) but the model works in mol/(m^3*s): the levels must span the two
    # single-metric optima in the same units, every level must be met, and the slope must be the front's own.
    text = demo_text().split("[window]")[0].replace('tau = ["0.5 min", "90 min"]', 'tau = ["1 min", "90 min"]')
    text = text.replace('limits = ["conversion:A >= 0.80", "yield:C <= 0.10", "T <= 400 K"]', 'limits = ["T <= 400 K"]')
    text = text.replace('x = "conversion:A"\ny = "selectivity:B"', 'x = "productivity:B"\ny = "yield:B"')
    net = (SCENARIOS / "oxidation-network.toml").read_text()
    study = study_from_toml(text.replace('include = "oxidation-network.toml"', "") + net)
    fr = front(study, points=5)
    assert fr.status == "done" and all(p["status"] == "optimal" for p in fr.points)
    x_ends = [fr.ends[k]["metrics"]["productivity:B"]["value"] for k in ("y_optimum", "x_optimum")]
    assert x_ends[1] > 1.2 * x_ends[0]                    # a real trade-off, not a single point
    pts = fr.points
    # at the y-end the front is flat (dy/dx = 0), so y pins the point there, x at the other end
    assert pts[0]["y"] == pytest.approx(fr.ends["y_optimum"]["goal"]["value"], rel=1e-8)
    assert pts[-1]["x"] == pytest.approx(x_ends[1], rel=1e-6)
    assert np.all(np.diff([p["x"] for p in pts]) > 0) and np.all(np.diff([p["y"] for p in pts]) < 0)
    for i in range(1, len(pts) - 1):
        assert pts[i]["trade_off"] == pytest.approx(_central_slope(pts, i), rel=5e-2), i
