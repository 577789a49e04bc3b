"""The starts of one optimization on several cores (solve/forked.py): the same result as one at a time, and nothing
lost when a forked copy fails.

Reference: the serial loop itself. Starts differ only in their initial values (the built solver, options and start
values are the same in a forked copy), so a forked start must reproduce the serial one to the last bit: the same
Ipopt iterations, goal values, decisions and multipliers (common practice for a parallel rewrite of a deterministic
loop: compare with the serial result).
"""

from __future__ import annotations

import os
import sys

import pytest

from helpers import SCENARIOS
from tubeyield.jobs.optimize import optimize
from tubeyield.solve import forked
from tubeyield.study import load_study

pytestmark = pytest.mark.skipif(not sys.platform.startswith("linux"), reason="the starts are forked on Linux only")


def test_forked_map_returns_every_result_in_order():
    parent = os.getpid()
    out = forked.forked_map(lambda i: (i * i, os.getpid() == parent), 7, 3)
    assert [v for v, _ in out] == [i * i for i in range(7)]
    # which process takes which task depends on timing, so only the values are asserted; one worker computes all
    # of them in this process
    assert forked.forked_map(lambda i: os.getpid() == parent, 4, 1) == [True] * 4


def test_a_task_that_fails_or_dies_in_a_copy_is_computed_here():
    parent = os.getpid()

    def raising(i):
        if os.getpid() != parent:
            raise RuntimeError("a failure in the copy")
        return i + 100

    def dying(i):
        if os.getpid() != parent:
            os._exit(3)                      # the copy ends without handing anything back
        return -i

    assert forked.forked_map(raising, 5, 2) == [100, 101, 102, 103, 104]
    assert forked.forked_map(dying, 5, 2) == [0, -1, -2, -3, -4]


def test_a_failure_here_stops_the_copies_and_is_raised(monkeypatch):
    parent = os.getpid()
    made = []
    fork = os.fork

    def recorded_fork():
        pid = fork()
        if pid:
            made.append(pid)
        return pid

    monkeypatch.setattr(os, "fork", recorded_fork)

    def task(i):
        if os.getpid() == parent:
            raise ValueError("here")
        import time
        time.sleep(30)                       # a copy still working when this process gives up
        return i

    import time
    t = time.perf_counter()
    with pytest.raises(ValueError, match="here"):
        forked.forked_map(task, 4, 2)
    assert time.perf_counter() - t < 20      # the copy was stopped, not waited for
    assert len(made) == 1
    with pytest.raises(ChildProcessError):
        os.waitpid(made[0], os.WNOHANG)      # and reaped: it is no child of this process any more


def test_the_demo_optimum_is_the_same_with_its_starts_on_two_cores():
    import threading
    assert forked.can_fork(), f"another thread runs in the test process: {threading.enumerate()}"
    study = load_study(SCENARIOS / "oxidation.toml")
    serial = optimize(study, starts=4, workers=1, relax=True)
    parallel = optimize(study, starts=4, workers=2, relax=True)
    assert serial.status == parallel.status == "optimal"
    assert parallel.timing["start_workers"] == 2 and "start_workers" not in serial.timing
    a, b = serial.to_dict(), parallel.to_dict()
    assert [(r["from"], r["status"], r["iterations"], r["goal"]) for r in a["starts"]["runs"]] == \
        [(r["from"], r["status"], r["iterations"], r["goal"]) for r in b["starts"]["runs"]]
    assert a["goal"] == b["goal"] and a["decisions"] == b["decisions"]
    assert a["limits"] == b["limits"]                      # marginals and their relaxed re-solves included
    # the relaxed re-solves ran two steps at a time on two cores, and the second step of each stopped the search
    assert sum(len(lim.get("relaxed", [])) >= 2 for lim in b["limits"]) >= 2
    from tubeyield.report.text import optimum_summary
    text = optimum_summary(parallel)
    assert "on 2 cores" in text and "start_workers" not in text and "on 2 cores" not in optimum_summary(serial)
    assert serial.check.max_rel_error == parallel.check.max_rel_error


def test_no_fork_while_another_thread_runs():
    import threading
    stop = threading.Event()
    other = threading.Thread(target=stop.wait)
    other.start()
    try:
        assert not forked.can_fork()
        parent = os.getpid()
        assert forked.forked_map(lambda i: os.getpid() == parent, 3, 2) == [True, True, True]
    finally:
        stop.set()
        other.join()
    assert forked.can_fork()


def test_the_demo_front_is_the_same_with_its_two_ends_at_once_on_two_cores():
    from tubeyield.jobs.front import front
    study = load_study(SCENARIOS / "oxidation.toml")
    serial = front(study, points=7, workers=1).to_dict()
    parallel = front(study, points=7, workers=2).to_dict()
    assert serial["status"] == parallel["status"] == "done"
    # the x-end in a forked copy while this process solves the y-end, each end's starts on one of the two cores
    assert parallel["timing"]["end_processes"] == 2 and "end_processes" not in serial["timing"]
    for end in ("y_optimum", "x_optimum"):
        a, b = serial["ends"][end], parallel["ends"][end]
        assert [(r["iterations"], r["goal"]) for r in a["starts"]["runs"]] == \
            [(r["iterations"], r["goal"]) for r in b["starts"]["runs"]]
        assert a["goal"] == b["goal"] and a["decisions"] == b["decisions"] and a["limits"] == b["limits"]
    keys = ("level", "status", "x", "y", "trade_off", "decisions", "iterations")
    assert [{k: p.get(k) for k in keys} for p in serial["points"]] == \
        [{k: p.get(k) for k in keys} for p in parallel["points"]]
    assert len(parallel["points"]) == 7


def test_first_here_computes_task_zero_in_this_process_before_the_others(monkeypatch):
    parent = os.getpid()
    here = []
    indices = forked._indices

    def slow_here(tasks_r):
        # this process comes late to the pipe of indices: without first_here the copy takes task 0
        if os.getpid() == parent:
            import time
            time.sleep(0.5)
        yield from indices(tasks_r)

    monkeypatch.setattr(forked, "_indices", slow_here)

    def task(i):
        if os.getpid() == parent:
            here.append(i)
        return i, os.getpid() == parent

    out = forked.forked_map(task, 3, 2, first_here=True)
    assert [i for i, _ in out] == [0, 1, 2]
    assert out[0] == (0, True) and here[0] == 0        # its effects stay in this process, and it came first
    here.clear()
    assert forked.forked_map(task, 3, 2)[0] == (0, False) and 0 not in here    # the race first_here removes


def test_a_models_bounds_are_put_back_as_they_were():
    # what the front sets aside while its x-end is solved on the model its y-end left (jobs/front.py _ends)
    import dataclasses
    from tubeyield.jobs.problem import prepare
    study = load_study(SCENARIOS / "oxidation.toml")
    model = prepare(study)
    before = [(v.lb, v.ub) for v in model._variables()]
    state = model.bounds_state()
    assert model.free_inert_stages()                    # the demo's products C and D feed nothing back
    handle = next(h for h in model.limits if h.level is not None)
    handle.set_bound(handle.bound * 0.9)
    model.study = dataclasses.replace(study, name="another")
    assert [(v.lb, v.ub) for v in model._variables()] != before
    model.restore_bounds(state)
    assert [(v.lb, v.ub) for v in model._variables()] == before
    assert not model.inert_stages_free and model.study is study
    assert model.free_inert_stages()                    # freed again from the bounds put back


def test_screening_on_two_cores_gives_the_same_starts_with_their_simulations():
    import numpy as np
    from tubeyield.solve import multistart
    study = load_study(SCENARIOS / "oxidation.toml")
    serial = multistart.starts(study, 4)
    parallel = multistart.starts(study, 4, workers=2)
    assert [(c.decisions, c.goal, c.violation) for c in serial] == \
        [(c.decisions, c.goal, c.violation) for c in parallel]
    z = np.linspace(0.0, 1.0, 11)
    for a, b in zip(serial, parallel):
        assert not b.elsewhere and b.simulation is not None
        assert all(np.array_equal(a.simulation.states_at(z).flows[s], b.simulation.states_at(z).flows[s])
                   for s in study.symbols)
    # the points came back from the copies as scores: only the starts were simulated again here
    design = multistart.design(study, 32)
    scored = multistart.screen(study, design, workers=2)
    assert all(c.simulation is None and c.elsewhere == (c.violation < float("inf")) for c in scored)
    assert sum(c.elsewhere for c in scored) > 0
    assert [(c.decisions, c.goal) for c in scored] == [(c.decisions, c.goal) for c in multistart.screen(study, design)]
