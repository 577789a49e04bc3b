"""The sweep job: every scenario of [sweep], on local processes or a Dask cluster, into a SQLite store.

Each worker (process, or thread of a Dask worker) keeps, per study, one prepared model and one solver for the whole
sweep. A scenario only re-pins the parameter variables (kinetics, feed, decisions the scenario fixes), so the built
Ipopt solver is reused; the scenario is warm-started from the nearest scenario this worker has finished (primal and
dual values), verified by re-simulation, and solved cold from screened starting points when the warm solve fails or
does not verify. Every outcome, failures included, becomes one row in the store.
"""

from __future__ import annotations

import math
import os
import socket
import sys
import threading
import time
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass

import numpy as np

from tubeyield import status as st
from tubeyield.errors import StudyError
from tubeyield.jobs.scenario import Scenario, scenarios, study_fingerprint
from tubeyield.study.variation import apply_values
from tubeyield.jobs.store import Store
from tubeyield.study.schema import Study

MEMORY = 32          # finished scenarios a worker remembers for warm starts
MAX_ATTEMPTS = 3     # a scenario lost with its worker is submitted again this often before it is recorded lost


# ------------------------------------------------------------------------------------------------------- worker

_local = threading.local()


@dataclass
class _WorkerState:
    model: object
    solver: object
    memory: list          # [(scaled input vector, snapshot)]


def _state(study: Study) -> _WorkerState:
    cache = getattr(_local, "states", None)
    if cache is None:
        cache = _local.states = {}
    key = study_fingerprint(study)
    if key not in cache:
        from tubeyield.jobs.problem import prepare
        from tubeyield.solve import make_solver
        cache[key] = _WorkerState(prepare(study), make_solver(study.numerics), [])
    return cache[key]


def _vector(study: Study, values: dict) -> np.ndarray:
    """Scenario inputs on a log scale (relative changes), to find the nearest finished scenario."""
    return np.array([math.log(x) if x > 0 else x for x in (values[v.path] for v in study.sweep.vary)])


def run_scenario(study: Study, scenario: Scenario) -> dict:
    """One scenario, never raising: the result row for the store."""
    t0 = time.perf_counter()
    row = {"id": scenario.id, "idx": scenario.index, "inputs": scenario.as_dict(),
           "worker": f"{socket.gethostname()}:{os.getpid()}:{threading.get_ident() % 10000}"}
    try:
        sc = _bounded(apply_values(study, scenario.as_dict()))
        _check_scenario(sc)
        run = study.sweep.run
        if run == "optimize":
            row.update(_optimize(study, sc, scenario))
        elif run == "evaluate":
            row.update(_evaluate(sc))
        else:
            row.update(_front(sc))
    except StudyError as exc:
        row.update(status="failed", error=f"invalid scenario: {exc.line()}")
    except Exception as exc:  # a failure of one scenario is recorded, never fatal to the sweep
        row.update(status="failed", error=f"{type(exc).__name__}: {exc}"[:2000])
    row["seconds"] = time.perf_counter() - t0
    return row


def _bounded(sc: Study) -> Study:
    """The scenario with every Ipopt solve bounded by sweep.time_limit (warm re-solves and cold starts alike)."""
    import dataclasses
    options = dict(sc.numerics.ipopt)
    options["max_wall_time"] = min(float(sc.sweep.time_limit), float(options.get("max_wall_time", float("inf"))))
    return dataclasses.replace(sc, numerics=dataclasses.replace(sc.numerics, ipopt=tuple(options.items())))


def _check_scenario(sc: Study) -> None:
    """Sampled values can leave the physical range (a normal distribution has tails): say so, do not solve."""
    for r in sc.reactions:
        if r.k.Ea < 0:
            raise StudyError(f"reaction.{r.id}.Ea", f"a non-negative activation energy; sampled {r.k.Ea:g} J/mol")
    for s, c in sc.feed.conc:
        if c < 0:
            raise StudyError(f"feed.conc.{s}", f"a non-negative concentration; sampled {c:g} mol/m^3")
    if sc.feed.flow <= 0:
        raise StudyError("feed.flow", "a positive flow")
    for d in sc.decisions:
        if d.low > d.high or (d.si_unit in ("s", "K") and d.low <= 0):
            raise StudyError(f"operate.{d.name}", f"a positive value within its range; got {d.low:g}")
    from tubeyield.study.load import check_damkohler
    check_damkohler(sc.reactions, sc.feed, sc.decisions, sc.goal)


def _optimize(base: Study, sc: Study, scenario: Scenario) -> dict:
    from tubeyield.jobs.optimize import optimize

    state = _state(base)
    model, solver = state.model, state.solver
    options = dict(sc.numerics.ipopt)
    vec = _vector(base, scenario.as_dict())
    if state.memory:
        near = min(state.memory, key=lambda m: float(np.sum((m[0] - vec) ** 2)))
        model.set_parameters(sc)
        model.restore(near[1])
        res = solver.solve(model.m, options=options, reuse_structure=True, warmstart=True)
        check = _kept(model, sc, res)
        if check is not None:
            row = _row_from_model(sc, model, check, solver.last_stats.get("iterations"))
            row["start"] = "warm"
            _remember(state, vec, model)
            return row
    result = optimize(sc, solver=solver, model=model)
    if result.status == "optimal":
        if model.edges is not None and result.check is not None and result.check.edges is not None \
                and list(result.check.edges) != list(model.edges):
            # The verification needed a finer mesh than the shared model's (the check, or a state bound holding the
            # optimum): warm re-solves on the coarse model would need it again for every later scenario, each then
            # optimized cold. The shared model moves to that mesh.
            model = _on_finer_mesh(state, base, sc, result, solver, options)
        if model is not None:
            _remember(state, vec, model)
    return _row_from_result(result, start="cold")


def _on_finer_mesh(state: _WorkerState, base: Study, sc: Study, result, solver, options: dict):
    """The shared model rebuilt on the mesh a scenario's verification ended on and solved at that scenario's
    optimum, so that later scenarios start warm from it (the worker's remembered solutions belong to the old model
    and are dropped). None, the old model kept, when the rebuilt model does not reach a verified, unheld optimum."""
    from tubeyield.jobs.problem import prepare
    from tubeyield.reactor.simulate import simulate
    from tubeyield.solve.options import REFINE_OPTIONS
    finer = prepare(base, result.check.edges)
    if result.check.released:
        finer.free_inert_stages()
    finer.set_parameters(sc)
    finer.set_decisions(result.decisions_si)
    finer.initialize(simulate(sc, finer.decision_values(), T_profile=finer.temperature_function()))
    res = solver.solve(finer.m, options={**REFINE_OPTIONS, **options})
    if _kept(finer, sc, res) is None:
        return None
    state.model = finer
    state.memory.clear()
    return finer


def _kept(model, sc: Study, res):
    """The check of a solve on the shared model that the sweep keeps without a cold optimization, or None: kept
    when it converged, no state bound holds it and the re-simulation passes. A held solve is optimized cold, where
    the verification deals with the bound (jobs/refine.py): measured on the demo's highest conversion with a dimer
    that feeds a reaction, warm re-solves on a coarse shared model ended held at 0.98598 where the scenarios' optima
    are 0.9978-0.9983."""
    from tubeyield.reactor.verify import compare, reference
    from tubeyield.solve import OK_CONDITIONS
    if res.solver.termination_condition not in OK_CONDITIONS or model.state_bound_holds():
        return None
    check = compare(model, reference(model), sc.numerics.check_tolerance)
    return check if check.passed else None


def _remember(state: _WorkerState, vec, model) -> None:
    state.memory.append((vec, model.snapshot()))
    if len(state.memory) > MEMORY:
        state.memory.pop(0)


def _row_from_model(sc: Study, model, check, iterations) -> dict:
    from tubeyield.reactor.metrics import metric_display
    from tubeyield.reactor.metrics import all_metrics
    from tubeyield.solve.marginals import limit_reports
    metrics = {m.text: metric_display(m, model.metric_value(m))[0] for m in all_metrics(sc)}
    return {"status": "optimal", "goal": metrics[sc.goal.metric.text], "decisions": model.decision_values(),
            "metrics": metrics, "limits": [r.to_dict() for r in limit_reports(model)],
            "detail": {"check": check.to_dict()}, "iterations": iterations}


def _row_from_result(r, start: str) -> dict:
    return {"status": r.status, "goal": r.goal.get("value"), "decisions": r.decisions_si,
            "metrics": {k: v["value"] for k, v in r.metrics.items()}, "limits": r.limits,
            "detail": {"check": r.check.to_dict() if r.check else None, "message": r.message,
                       "conflicts": r.conflicts, "starts": {k: v for k, v in r.starts.items() if k != "runs"}},
            "iterations": sum((x.get("iterations") or 0) for x in r.starts.get("runs", [])), "start": start,
            "error": r.message if r.status == "failed" else None}


def candidate_points(sc: Study) -> list[tuple[str, dict]]:
    if sc.sweep.candidates:
        return [(name, dict(values)) for name, values in sc.sweep.candidates]
    return [("fixed point", {d.name: d.low for d in sc.decisions})]


def _evaluate(sc: Study) -> dict:
    from tubeyield.jobs.evaluate import evaluate
    detail = {}
    first = None
    for name, values in candidate_points(sc):
        r = evaluate(sc, values)
        detail[name] = {"goal": r.goal["value"], "meets_limits": r.status == "meets limits",
                        "metrics": {k: v["value"] for k, v in r.metrics.items()}, "limits": r.limits}
        first = first or (r, name)
    r, name = first
    return {"status": "evaluated", "goal": r.goal["value"], "decisions": dict(candidate_points(sc)[0][1]),
            "metrics": {k: v["value"] for k, v in r.metrics.items()}, "limits": r.limits, "detail": detail}


def _front(sc: Study) -> dict:
    from tubeyield.jobs.front import front
    f = front(sc)
    pts = f.front_points()
    return {"status": f.status, "goal": None, "decisions": None, "metrics": None, "limits": None,
            "detail": {"x": f.x, "y": f.y, "knee": f.knee, "message": f.message,
                       "points": [{"x": p["x"], "y": p["y"], "decisions": p["decisions"]} for p in pts]},
            "error": f.message if f.status not in ("done", "single point") else None}


# ------------------------------------------------------------------------------------------------------- driver


@dataclass
class SweepOutcome:
    total: int
    already: int
    ran: int
    counts: dict
    seconds: float
    interrupted: bool
    where: str
    stopped: str = ""          # why the sweep stopped before the end (no workers left), "" when it did not
    not_run: int = 0           # scenarios neither finished nor recorded (run them with --resume)
    store: str = ""            # the store's path

    def to_frame(self):
        """Every scenario the store holds, one row each (pandas; Store.table)."""
        from tubeyield.jobs.store import open_existing
        with open_existing(self.store) as store:
            return store.table()


POLL = 2.0                     # s between checks on the workers while waiting for results


def sweep(study: Study, store_path, *, workers: int | None = None, dask: str | None = None, resume: bool = False,
          retry_failed: bool = False, progress: bool = True, worker_wait: float = 120.0) -> SweepOutcome:
    """Run every scenario of study.sweep into the store. A resume runs what the store lacks and what was lost with
    a worker (`lost`); with `retry_failed`, the scenarios that failed numerically as well. With no worker left for
    `worker_wait` seconds (a Dask cluster whose workers are gone), the sweep stops and says how many did not run."""
    if study.sweep is None:
        raise StudyError("sweep", "a [sweep] table with 'vary'")
    check_fit_uncertainty(study)
    if retry_failed and not resume:
        raise StudyError("--retry-failed", "--resume as well (it re-runs the failed scenarios of an existing store)")
    t0 = time.perf_counter()
    all_scenarios = scenarios(study)
    with Store(store_path) as store:
        store.bind(study_fingerprint(study), study.sources_json(), study.sweep.run, resume)
        if resume:
            store.forget(store.ids_with_status((st.LOST, st.FAILED) if retry_failed else (st.LOST,)))
        done = store.done_ids()
        todo = [s for s in all_scenarios if s.id not in done]
        counts: dict = {}
        outcome = SweepOutcome(len(all_scenarios), len(all_scenarios) - len(todo), 0, counts, 0.0, False,
                               "nothing to run", store=str(store_path))
        if todo:
            from tubeyield.jobs.executor import DaskExecutor, LocalExecutor
            executor = DaskExecutor(dask) if dask else LocalExecutor(workers)
            outcome.where = executor.describe()
            try:
                _drive(executor, study, todo, store, outcome, progress, worker_wait)
            finally:
                executor.shutdown(cancel=True)
    outcome.ran = sum(counts.values())
    outcome.seconds = time.perf_counter() - t0
    return outcome


def check_fit_uncertainty(study: Study) -> None:
    """sweep.fit_uncertainty needs a fit with a covariance to draw from (--kinetics)."""
    if not study.sweep.fit_uncertainty:
        return
    if study.kinetics is None:
        raise StudyError("sweep.fit_uncertainty", "a fit to draw from: give --kinetics DIR/fit.json (written by "
                                                  "'tubeyield fit --save DIR')", file=study.path or None)
    if not study.kinetics.cov:
        raise StudyError("sweep.fit_uncertainty", f"a fit with a covariance; {study.kinetics.source} has none (its "
                                                  "parameters are not all determined by the data)",
                         file=study.path or None)


def _lost_row(s: Scenario, why: str) -> dict:
    return {"id": s.id, "idx": s.index, "inputs": s.as_dict(), "status": st.LOST, "error": why[:2000]}


def _drive(executor, study: Study, todo: list[Scenario], store: Store, outcome: SweepOutcome, progress: bool,
           worker_wait: float) -> None:
    """Submit every scenario and commit each result as it arrives. A task lost with its worker (a dead process, a
    cluster that dropped it) is submitted again, up to MAX_ATTEMPTS times, and recorded as `lost`, never as a
    numerical failure. Ctrl-C and a cluster without workers stop the sweep; what did not run is not recorded."""
    from tqdm import tqdm
    counts = outcome.counts
    shared = executor.share(study)
    attempts = {s.id: 0 for s in todo}
    queue, running = list(todo), {}
    idle_since = None
    # no monitor thread (tqdm starts one per process, for good): the bar is updated as each result arrives anyway,
    # and a process with another thread running does not fork the starts of an optimization (solve/forked.py)
    bar = type("SweepBar", (tqdm,), {"monitor_interval": 0})(
        total=len(todo), unit="scenario", file=sys.stderr, disable=not progress, mininterval=0.5, dynamic_ncols=True,
        smoothing=0.1)

    def record(row: dict) -> None:
        store.put(row)
        counts[row["status"]] = counts.get(row["status"], 0) + 1
        bar.update(1)
        bar.set_postfix({k: v for k, v in sorted(counts.items())}, refresh=False)

    def again(s: Scenario, why: str) -> None:
        attempts[s.id] += 1
        if attempts[s.id] < MAX_ATTEMPTS:
            queue.append(s)
        else:
            record(_lost_row(s, f"lost {MAX_ATTEMPTS} times with its worker; last: {why}"))

    try:
        while queue or running:
            for s in queue:
                running[executor.submit(run_scenario, shared, s)] = s
            queue = []
            broken = False
            finished = executor.wait_some(list(running), POLL)
            if not finished:
                if executor.workers() == 0:
                    idle_since = idle_since or time.monotonic()
                    if time.monotonic() - idle_since > worker_wait:
                        outcome.stopped = f"no worker for {worker_wait:g} s"
                        outcome.not_run = len(running)
                        return
                else:
                    idle_since = None
                continue
            idle_since = None
            for fut in finished:
                s = running.pop(fut)
                try:
                    row = executor.result(fut)
                except BrokenProcessPool:
                    broken = True
                    again(s, "the worker process died")
                except Exception as exc:  # the task, not the scenario, failed: lost with its worker
                    again(s, f"{type(exc).__name__}: {exc}")
                else:
                    record(row)
            if broken:
                # A local worker process died (a crash in a native library): every task of the pool is gone with
                # it. A fresh pool; what was still running goes again.
                executor.restart()
                for s in list(running.values()):
                    again(s, "the worker pool was restarted")
                running = {}
    except KeyboardInterrupt:
        outcome.interrupted = True
    finally:
        bar.close()
