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

from tubeyield.errors import StudyError
from tubeyield.jobs.scenario import Scenario, apply_values, scenarios, study_fingerprint
from tubeyield.jobs.store import Store
from tubeyield.study.schema import Study

MEMORY = 32          # finished scenarios a worker remembers for warm starts
MAX_ATTEMPTS = 3     # a scenario in flight when a worker process died is retried this often


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
        if r.rate.Ea < 0:
            raise StudyError(f"reaction.{r.id}.Ea", f"a non-negative activation energy; sampled {r.rate.Ea:g} J/mol")
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
    from tubeyield.reactor.verify import compare, reference
    from tubeyield.solve import OK_CONDITIONS

    state = _state(base)
    model, solver = state.model, state.solver
    options = dict(sc.numerics.ipopt)
    vec = _vector(base, scenario.as_dict())
    if state.memory:
        near = min(state.memory, key=lambda m: float(np.sum((m[0] - vec) ** 2)))
        model.set_parameters(sc)
        model.restore(near[1])
        res = solver.solve(model.m, options=options, reuse_structure=True, warmstart=True)
        if res.solver.termination_condition in OK_CONDITIONS:
            check = compare(model, reference(model), sc.numerics.check_tolerance)
            if check.passed:
                row = _row_from_model(sc, model, check, solver.last_stats.get("iterations"))
                row["start"] = "warm"
                _remember(state, vec, model)
                return row
    result = optimize(sc, solver=solver, model=model)
    if result.status == "optimal":
        _remember(state, vec, model)
    return _row_from_result(result, start="cold")


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


def sweep(study: Study, store_path, *, workers: int | None = None, dask: str | None = None, resume: bool = False,
          progress: bool = True) -> SweepOutcome:
    if study.sweep is None:
        raise StudyError("sweep", "a [sweep] table with 'vary'")
    t0 = time.perf_counter()
    all_scenarios = scenarios(study)
    source = study.sources_json()
    with Store(store_path) as store:
        store.bind(study_fingerprint(study), source, study.sweep.run, resume)
        done = store.done_ids()
        todo = [s for s in all_scenarios if s.id not in done]
        counts: dict = {}
        interrupted = False
        where = "nothing to run"
        if todo:
            from tubeyield.jobs.executor import DaskExecutor, LocalExecutor
            executor = DaskExecutor(dask) if dask else LocalExecutor(workers)
            where = executor.describe()
            try:
                interrupted = _drive(executor, study, todo, store, counts, progress)
            finally:
                executor.shutdown(cancel=True)
    return SweepOutcome(len(all_scenarios), len(all_scenarios) - len(todo), sum(counts.values()), counts,
                        time.perf_counter() - t0, interrupted, where)


def _drive(executor, study: Study, todo: list[Scenario], store: Store, counts: dict, progress: bool) -> bool:
    """Submit every scenario, commit each result as it arrives. Returns True when interrupted (Ctrl-C)."""
    from tqdm import tqdm
    shared = executor.share(study)
    attempts = {s.id: 0 for s in todo}
    pending = list(todo)
    bar = tqdm(total=len(todo), unit="scenario", file=sys.stderr, disable=not progress, mininterval=0.5,
               dynamic_ncols=True, smoothing=0.1)
    try:
        while pending:
            futures = {executor.submit(run_scenario, shared, s): s for s in pending}
            pending = []
            try:
                for fut in executor.as_completed(futures):
                    s = futures[fut]
                    try:
                        row = fut.result()
                    except BrokenProcessPool:
                        raise
                    except Exception as exc:  # the task itself was lost (e.g. a Dask worker died too often)
                        row = {"id": s.id, "idx": s.index, "inputs": s.as_dict(), "status": "failed",
                               "error": f"task lost: {type(exc).__name__}: {exc}"[:2000]}
                    store.put(row)
                    counts[row["status"]] = counts.get(row["status"], 0) + 1
                    bar.update(1)
                    bar.set_postfix({k: v for k, v in sorted(counts.items())}, refresh=False)
            except BrokenProcessPool:
                # A worker process died (a crash in a native library): fresh pool, retry what did not finish.
                finished = store.done_ids()
                executor.restart()
                for s in futures.values():
                    if s.id in finished:
                        continue
                    attempts[s.id] += 1
                    if attempts[s.id] >= MAX_ATTEMPTS:
                        store.put({"id": s.id, "idx": s.index, "inputs": s.as_dict(), "status": "failed",
                                   "error": "the worker process died while running this scenario, "
                                            f"{MAX_ATTEMPTS} times"})
                        counts["failed"] = counts.get("failed", 0) + 1
                        bar.update(1)
                    else:
                        pending.append(s)
        return False
    except KeyboardInterrupt:
        return True
    finally:
        bar.close()
