"""Optima held short of the true optimum by state bounds, checked against single shooting with scipy alone.

State bounds guard Ipopt's iterates but are not part of the model (reactor/plug.py, TRACE_DIP_SHARE and
PlugModel.free_inert_stages; jobs/refine.py): where the collocation solution dips below one, the optimizer stops at
the bound. The cases here were found that way and are fixed; where no fix applies the user is told by a warning. The
references use nothing of tubeyield's model, rate code or reference simulation: the plain-array balances of
tests/benchmarks/problem.py integrated by solve_ivp (LSODA, rtol 1e-10, atol 1e-14; tests/benchmarks/baseline_scipy.py),
searched by scipy.optimize (minimize_scalar's bounded Brent search; SLSQP with finite-difference gradients).
"""

import sys
from pathlib import Path

import dataclasses

import pytest
from scipy.optimize import minimize_scalar

sys.path.insert(0, str(Path(__file__).resolve().parent / "benchmarks"))

from baseline_scipy import Shooting  # noqa: E402
from helpers import study_from_toml  # noqa: E402
from problem import from_study  # noqa: E402
from run import demo_text, network_text, start_of  # noqa: E402
from tubeyield import status as st  # noqa: E402
from tubeyield.jobs.optimize import HELD_BY_STATE_BOUND, optimize  # noqa: E402


def test_a_stiff_network_reaches_the_optimum_single_shooting_finds():
    # The benchmark's invented 16-species network (tests/benchmarks/run.py, `network_text`): 32 reactions, rate
    # constants over 12 decades, traces consumed as fast as they form. The reference is a Brent search over the
    # residence time at the temperature tubeyield found optimal (its lower bound) and 5 K above it.
    study = study_from_toml(network_text(16), "stiff16")
    result = optimize(study, starts=1)
    assert result.status == st.OPTIMAL, result.message
    assert result.check.passed
    assert not [w for w in result.warnings if w.startswith(HELD_BY_STATE_BOUND)]
    tau = result.decisions_si["tau"]
    T = result.decisions_si["T"]
    assert T == pytest.approx(320.0, abs=1e-6)           # the lower bound: the slow chain gains from the cold

    shoot = Shooting(from_study(study))

    def yield_at(tau_s, T_K):
        u, u0 = shoot.outlet(shoot.pack(tau_s, 1.0, T_K))
        return shoot.pb.metric("yield", shoot.pb.product, u, u0)

    def best_over_tau(T_K):
        best = minimize_scalar(lambda t: -yield_at(t, T_K), bounds=(100.0, 900.0), method="bounded",
                               options={"xatol": 1e-3})
        assert best.success
        return best.x, -best.fun

    tau_ref, y_ref = best_over_tau(T)
    # the yield is flat at the optimum (0.4395 over tau 365-380 s), so the value is the sharp test and tau the loose one
    assert result.goal["value"] == pytest.approx(y_ref, abs=1e-7)
    assert tau == pytest.approx(tau_ref, rel=1e-2)
    assert yield_at(tau, T) == pytest.approx(result.goal["value"], abs=1e-7)
    # and a warmer reactor is worse at its own best residence time: the lower temperature bound is right to bind
    assert best_over_tau(T + 5.0)[1] < y_ref - 1e-4


AGING = """
[species.F]
[[reaction]]
id = "aging"
equation = "E -> F"
k = "1e-12 1/s"
"""


@pytest.mark.parametrize("extra", ["", AGING], ids=["dimer-in-no-rate", "dimer-in-a-rate"])
def test_the_highest_conversion_under_a_byproduct_cap_is_the_one_single_shooting_finds(extra):
    # The demo network with all its limits (the benchmark's front case): maximize conversion:A subject to
    # yield:C <= 0.10. tubeyield stopped at 0.985983 (0.985890 with a bound of zero), reported optimal and verified,
    # held there by the dimer E's state bound at the first collocation point (multiplier 8.1e3), while SLSQP on single
    # shooting reaches 0.998138, from the screened start and from tubeyield's point alike.
    # - As the demo has it, E enters no rate law: the verification finds the bound holding the optimum and frees
    #   the stage values inside elements of such species (PlugModel.free_inert_stages), then solves again.
    # - With a negligible reaction E -> F (k = 1e-12 1/s) E enters a rate law and keeps its bounds; the optimum is
    #   held at 0.985983 again on the starting mesh, and the verification splits the element that holds it
    #   (jobs/refine.py, split_elements): once is enough here.
    study = study_from_toml(demo_text(all_limits=True) + extra, "front-x-end")
    x = study.front.x
    goal = dataclasses.replace(study.goal, metric=x, sense="max")
    result = optimize(dataclasses.replace(study, goal=goal))
    assert result.status == st.OPTIMAL, result.message
    assert not [w for w in result.warnings if w.startswith(HELD_BY_STATE_BOUND)], result.warnings
    assert result.check.refinements == (1 if extra else 0)
    said = "its element was split (41 elements)" if extra else "the bounds of C, D, E, W inside elements"
    assert any(said in n for n in result.check.notes), result.check.notes      # and the user is told how

    pb = from_study(study)
    shoot = Shooting(pb)
    target = (x.kind, pb.species.index(x.species))
    d = result.decisions_si
    at_tubeyield = shoot.pack(d["tau"], d["ratio.O"], d["T"])
    s0 = start_of(dataclasses.replace(study, goal=goal))      # the best point of the screened design
    for x0 in (shoot.pack(s0["tau"], s0["ratio.O"], s0["T"]), at_tubeyield):
        best = shoot.optimize(x0, goal=target)
        assert best["success"], best["status"]
        assert best["value"] > 0.998                               # well past where the bounds used to hold it
        assert result.goal["value"] == pytest.approx(best["value"], abs=1e-7)
    u, u0 = shoot.outlet(at_tubeyield)
    assert pb.metric("yield", pb.species.index("C"), u, u0) <= 0.10 + 1e-7   # tubeyield's point meets the cap


def test_an_optimum_held_by_a_state_bound_is_said():
    # Where the element cannot be split (here the mesh may not grow past its 40 elements: numerics.max_elements) the
    # optimum stays held, and the user is told; a front that ends there says so too.
    text = demo_text(all_limits=True) + AGING + "\n[numerics]\nmax_elements = 40\n"
    study = study_from_toml(text, "front-x-end-capped")
    goal = dataclasses.replace(study.goal, metric=study.front.x, sense="max")
    result = optimize(dataclasses.replace(study, goal=goal))
    assert result.goal["value"] == pytest.approx(0.985983, abs=1e-6)
    held = [w for w in result.warnings if w.startswith(HELD_BY_STATE_BOUND)]
    assert held and "state of E at 0.003876" in held[0], result.warnings
    # The demo's own goal is not held.
    y_best = optimize(study)
    assert not [w for w in y_best.warnings if w.startswith(HELD_BY_STATE_BOUND)], y_best.warnings
    # A front to that end: its last level is held there as well, and said so, point and front alike (the other
    # levels are not held).
    from tubeyield.jobs.front import front
    fr = front(study, points=5)
    assert fr.points[-1]["held"] and "state of E at 0.003876" in fr.points[-1]["held"], fr.points[-1]
    assert [bool(p.get("held")) for p in fr.points] == [False] * 4 + [True]
    assert "1 of 5 levels may lie further out" in fr.message and "an end of the front may lie further" in fr.message


def _held_sweep():
    import tubeyield.jobs.sweep as sweep_job
    from tubeyield.jobs.scenario import scenarios
    sweep_job._local.states = {}          # no shared model left from another test of the same study
    text = demo_text(all_limits=True).replace('maximize = "yield:B"', 'maximize = "conversion:A"') + AGING
    text += ('\n[sweep]\nsamples = 3\nseed = 7\nrun = "optimize"\n'
             'vary = { "reaction.*.k_factor" = { uniform = [0.95, 1.05] } }\n')
    study = study_from_toml(text, "sweep-x-end")
    return study, list(scenarios(study))


def test_sweep_re_solves_held_by_a_state_bound_are_optimized_cold(monkeypatch):
    # A sweep re-solves each scenario warm on one shared model. On the x-end with E -> F above, the first scenario
    # is optimized cold and its verification splits the held element. Had the shared model kept its mesh (forced
    # here), warm re-solves on it ended held at 0.985983 for every later scenario, reported optimal. A held re-solve
    # falls back to the cold optimization. The scenarios scale every rate constant by a common factor (0.95-1.05).
    import tubeyield.jobs.sweep as sweep_job
    monkeypatch.setattr(sweep_job, "_on_finer_mesh", lambda *args: None)
    study, cases = _held_sweep()
    rows = [sweep_job.run_scenario(study, s) for s in cases]
    assert [r["status"] for r in rows] == ["optimal"] * 3, rows
    assert [r["start"] for r in rows] == ["cold"] * 3
    goals = [r["goal"] for r in rows]
    assert all(g > 0.997 for g in goals), goals
    assert len({round(g, 6) for g in goals}) == 3, goals     # each scenario its own optimum, no common wall


def test_a_sweep_moves_its_shared_model_to_the_mesh_a_scenario_needed():
    # The same sweep as it runs: after the first scenario's split the shared model takes the 41-element mesh, and
    # the later scenarios are warm re-solves on it (each cold before: about 1 s against 0.05 s), equal to cold
    # optimizations of the same scenarios.
    from tubeyield.jobs.sweep import run_scenario
    from tubeyield.study.variation import apply_values
    study, cases = _held_sweep()
    rows = [run_scenario(study, s) for s in cases]
    assert [r["status"] for r in rows] == ["optimal"] * 3, rows
    assert [r["start"] for r in rows] == ["cold", "warm", "warm"]
    assert all(r["detail"]["check"]["elements"] == 41 for r in rows)
    for r, s in zip(rows[1:], cases[1:]):
        cold = optimize(apply_values(study, s.as_dict()))
        assert cold.status == st.OPTIMAL
        assert r["goal"] == pytest.approx(cold.goal["value"], abs=1e-7)


def test_a_front_whose_x_end_needed_released_bounds_solves_every_level_near_it():
    # x and y of opposite senses: the x-end (highest conversion under yield:C <= 0.10) is optimized on its own model,
    # where the verification releases the bounds of C, D, E, W inside elements (the test above). The front's levels
    # were solved on the y-end's model with the bounds in place: the level at conversion 0.98851 was infeasible
    # there (the bounds cap it at 0.98598) and failed, and the front ended "partial". The front model now gets the
    # bounds released when an end's verification released them. Reference: SLSQP on single shooting (scipy alone).
    from scipy.optimize import minimize

    from tubeyield.jobs.front import front
    text = demo_text(all_limits=True).replace('"conversion:A >= 0.80"', '"conversion:A >= 0.95"').replace(
        'y = "selectivity:B"\npoints = 21', 'y = "yield:D"\ny_sense = "min"\npoints = 6')
    study = study_from_toml(text, "front-opposite-senses")
    result = front(study)
    assert result.status == st.DONE, result.message
    assert result.ends["x_optimum"]["check"]["released"] == ["C", "D", "E", "W"]
    assert [p["status"] for p in result.points] == [st.OPTIMAL] * 6
    point = result.points[4]
    assert 0.9862 < point["x"] < 0.9979                         # inside the range the bounds used to cut off

    pb = from_study(study)
    shoot = Shooting(pb)
    d = point["decisions"]
    x0 = shoot.pack(d["tau"] * 60.0, d["ratio.O"], d["T"])      # minutes in the point's decisions
    index = {name: pb.species.index(name) for name in ("A", "C", "D")}

    def metric(kind, name, x):
        return pb.metric(kind, index[name], *shoot.outlet(x))

    cons = [{"type": "ineq", "fun": lambda x: metric("conversion", "A", x) - point["level"]},
            {"type": "ineq", "fun": lambda x: 0.10 - metric("yield", "C", x)}]
    best = minimize(lambda x: metric("yield", "D", x), x0, method="SLSQP", bounds=[(0.0, 1.0)] * len(x0),
                    constraints=cons, options={"ftol": 1e-14, "maxiter": 300, "eps": 1e-8})
    assert best.success, best.message
    assert point["y"] == pytest.approx(best.fun, abs=1e-7)
