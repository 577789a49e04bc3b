"""Sweeps: scenario generation, the store, and runs with real processes (local pool, Dask scheduler and workers),
killed part-way and resumed. Every process a test starts is bounded in time and shut down."""

import json
import os
import signal
import socket
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from helpers import SCENARIOS, study_from_toml
from tubeyield.errors import StudyError
from tubeyield.jobs.scenario import scenarios
from tubeyield.jobs.store import Store, StoreLocked

# A small invented network for sweep tests: the series scheme with uncertain kinetics.
SWEEP_STUDY = """
[study]
name = "sweep-test"
[species.A]
[species.B]
[species.C]
[[reaction]]
id = "first"
equation = "A -> B"
k = "0.02 1/s"
T_ref = "350 K"
Ea = "60 kJ/mol"
[[reaction]]
id = "second"
equation = "B -> C"
k = "0.005 1/s"
T_ref = "350 K"
Ea = "85 kJ/mol"
[feed]
flow = "1 L/min"
conc = { A = "1 mol/L" }
[reactor]
elements = 20
[operate]
tau = ["10 s", "2000 s"]
T = ["300 K", "400 K"]
[goal]
maximize = "yield:B"
limits = ["conversion:A >= 0.6"]
[numerics]
starts = 2
[sweep]
samples = SAMPLES
seed = 11
vary = { "reaction.second.Ea" = { normal = ["85 kJ/mol", "3 kJ/mol"] }, "reaction.first.k" = { lognormal = ["0.02 1/s", 0.2] } }
"""


def write_study(tmp_path, samples=40) -> Path:
    p = tmp_path / "sweep-test.toml"
    p.write_text(SWEEP_STUDY.replace("SAMPLES", str(samples)))
    return p


def test_scenarios_are_seeded_latin_hypercube_samples(tmp_path):
    study = study_from_toml(SWEEP_STUDY.replace("SAMPLES", "50"))
    a, b = scenarios(study), scenarios(study)
    assert [s.id for s in a] == [s.id for s in b] and len({s.id for s in a}) == 50
    ea = np.array([s.as_dict()["reaction.second.Ea"] for s in a])
    # Latin hypercube: the probability-integral transforms fall one in each of the 50 equal strata
    u = stats.norm.cdf(ea, loc=85e3, scale=3e3)
    assert sorted(np.floor(u * 50).astype(int)) == list(range(50))
    k = np.array([s.as_dict()["reaction.first.k"] for s in a])
    assert np.median(k) == pytest.approx(0.02, rel=0.05)


def test_grid_values_make_a_cartesian_product():
    text = SWEEP_STUDY.replace("SAMPLES", "3").replace(
        '"reaction.first.k" = { lognormal = ["0.02 1/s", 0.2] }',
        '"operate.T" = { values = ["320 K", "340 K"] }, "feed.conc.A" = { values = ["1 mol/L", "2 mol/L", "3 mol/L"] }')
    sc = scenarios(study_from_toml(text))
    assert len(sc) == 2 * 3 * 3
    assert {(s.as_dict()["operate.T"], s.as_dict()["feed.conc.A"]) for s in sc} == \
        {(t, c) for t in (320.0, 340.0) for c in (1000.0, 2000.0, 3000.0)}


@pytest.mark.parametrize("vary,key", [
    ('{ "reaction.nope.Ea" = { values = ["1 kJ/mol"] } }', "sweep.vary.reaction.nope.Ea"),
    ('{ "reaction.first.Ea" = { gamma = [1, 2] } }', "sweep.vary.reaction.first.Ea.gamma"),
    ('{ "reaction.first.k" = { values = ["1 L/(mol*s)"] } }', "sweep.vary.reaction.first.k.values[0]"),
    ('{ "feed.conc.Q" = { values = ["1 mol/L"] } }', "sweep.vary.feed.conc.Q"),
    ('{ "__import__(os)" = { values = [1] } }', "sweep.vary.__import__(os)"),
])
def test_bad_sweep_paths_are_study_errors(vary, key):
    text = SWEEP_STUDY.replace("SAMPLES", "3").split("vary = ")[0] + f"vary = {vary}\n"
    with pytest.raises(StudyError) as info:
        study_from_toml(text)
    assert info.value.line().startswith(key), info.value.line()


def test_store_refuses_a_second_sweep_and_another_study(tmp_path):
    path = tmp_path / "s.sqlite"
    with Store(path) as first:
        first.bind("abc", "text", "optimize", resume=False)
        with pytest.raises(StoreLocked):
            Store(path)
    with Store(path) as again:
        again.put({"id": "x", "idx": 0, "inputs": {}, "status": "optimal"})
        with pytest.raises(StudyError, match="another study"):
            again.bind("other", "text", "optimize", resume=True)
        with pytest.raises(StudyError, match="--resume"):
            again.bind("abc", "text", "optimize", resume=False)
        again.bind("abc", "text", "optimize", resume=True)


# ------------------------------------------------------------------------------------------- real processes

def _env():
    env = dict(os.environ)
    env["PYTHONUNBUFFERED"] = "1"
    return env


def _sweep_cmd(study, store, *extra):
    return [sys.executable, "-m", "tubeyield", "sweep", str(study), "--store", str(store), "--quiet", *extra]


def _rows(store) -> dict:
    db = sqlite3.connect(str(store))
    try:
        rows = db.execute("SELECT id, status, goal, decisions FROM scenarios").fetchall()
    finally:
        db.close()
    ids = [r[0] for r in rows]
    assert len(ids) == len(set(ids))
    return {r[0]: (r[1], r[2], json.loads(r[3]) if r[3] else None) for r in rows}


def _count(store) -> int:
    if not Path(store).exists():
        return 0
    try:
        db = sqlite3.connect(str(store), timeout=5)
        try:
            return db.execute("SELECT COUNT(*) FROM scenarios").fetchone()[0]
        finally:
            db.close()
    except sqlite3.OperationalError:
        return 0


def _wait_for_rows(store, n, proc, timeout=180):
    t0 = time.time()
    while time.time() - t0 < timeout:
        if _count(store) >= n:
            return
        if proc.poll() is not None:
            raise AssertionError(f"sweep ended early: {proc.returncode} {proc.stderr.read() if proc.stderr else ''}")
        time.sleep(0.1)
    raise AssertionError(f"fewer than {n} rows after {timeout} s")


def _same(a: dict, b: dict):
    assert a.keys() == b.keys()
    for k in a:
        assert a[k][0] == b[k][0], k
        if a[k][1] is not None:
            assert a[k][1] == pytest.approx(b[k][1], rel=1e-6), k
            for name in a[k][2]:
                assert a[k][2][name] == pytest.approx(b[k][2][name], rel=1e-4), (k, name)


@pytest.fixture(scope="module")
def reference_run(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("ref")
    study = write_study(tmp)
    store = tmp / "ref.sqlite"
    r = subprocess.run(_sweep_cmd(study, store, "--workers", "2"), capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    rows = _rows(store)
    assert len(rows) == 40 and all(v[0] == "optimal" for v in rows.values())
    return rows


@pytest.mark.slow
def test_sigkill_part_way_then_resume_equals_uninterrupted(tmp_path, reference_run):
    study = write_study(tmp_path)
    store = tmp_path / "s.sqlite"
    proc = subprocess.Popen(_sweep_cmd(study, store, "--workers", "2"), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, start_new_session=True, env=_env())
    try:
        _wait_for_rows(store, 8, proc)
        os.killpg(proc.pid, signal.SIGKILL)          # the driver and its workers, at once
        proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
    partial = _count(store)
    assert 8 <= partial < 40
    r = subprocess.run(_sweep_cmd(study, store, "--workers", "2", "--resume"), capture_output=True, text=True,
                       timeout=600)
    assert r.returncode == 0, r.stderr
    assert f"{partial} already in the store" in r.stdout
    _same(_rows(store), reference_run)


@pytest.mark.slow
def test_ctrl_c_keeps_finished_scenarios_and_resume_completes(tmp_path, reference_run):
    study = write_study(tmp_path)
    store = tmp_path / "s.sqlite"
    proc = subprocess.Popen(_sweep_cmd(study, store, "--workers", "2"), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, start_new_session=True, env=_env())
    try:
        _wait_for_rows(store, 5, proc)
        os.killpg(proc.pid, signal.SIGINT)
        out, err = proc.communicate(timeout=60)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
    assert proc.returncode == 130 and "--resume" in err
    r = subprocess.run(_sweep_cmd(study, store, "--resume"), capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    _same(_rows(store), reference_run)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


class DaskCluster:
    """A real `dask scheduler` and worker processes on 127.0.0.1."""

    def __init__(self, tmp, n_workers=2):
        self.port = _free_port()
        self.address = f"tcp://127.0.0.1:{self.port}"
        self.procs = []
        self.log = open(tmp / "dask.log", "w")
        self.procs.append(subprocess.Popen(
            [sys.executable, "-m", "distributed.cli.dask_scheduler", "--host", "127.0.0.1", "--port",
             str(self.port), "--no-dashboard"], stdout=self.log, stderr=subprocess.STDOUT, start_new_session=True))
        self.workers = []
        for _ in range(n_workers):
            w = subprocess.Popen([sys.executable, "-m", "distributed.cli.dask_worker", self.address, "--nthreads", "1",
                                  "--no-nanny", "--no-dashboard", "--death-timeout", "60"],
                                 stdout=self.log, stderr=subprocess.STDOUT, start_new_session=True)
            self.procs.append(w)
            self.workers.append(w)
        from distributed import Client
        t0 = time.time()
        with Client(self.address, timeout=60) as c:
            while len(c.scheduler_info()["workers"]) < n_workers:
                if time.time() - t0 > 90:
                    raise AssertionError("Dask workers did not start")
                time.sleep(0.2)

    def close(self):
        for p in reversed(self.procs):
            if p.poll() is None:
                os.killpg(p.pid, signal.SIGTERM)
        for p in self.procs:
            try:
                p.wait(timeout=20)
            except subprocess.TimeoutExpired:
                os.killpg(p.pid, signal.SIGKILL)
                p.wait(timeout=10)
        self.log.close()


@pytest.fixture
def dask_cluster(tmp_path):
    cluster = DaskCluster(tmp_path)
    try:
        yield cluster
    finally:
        cluster.close()


@pytest.mark.slow
def test_sweep_through_a_real_dask_cluster(tmp_path, dask_cluster, reference_run):
    study = write_study(tmp_path)
    store = tmp_path / "d.sqlite"
    r = subprocess.run(_sweep_cmd(study, store, "--dask", dask_cluster.address), capture_output=True, text=True,
                       timeout=600)
    assert r.returncode == 0, r.stderr
    assert "Dask scheduler" in r.stdout and "2 worker(s)" in r.stdout
    rows = _rows(store)
    _same(rows, reference_run)
    db = sqlite3.connect(str(store))
    workers = {w.split(":")[1] for (w,) in db.execute("SELECT worker FROM scenarios")}
    db.close()
    assert len(workers) == 2          # both Dask workers took scenarios


@pytest.mark.slow
def test_killing_a_dask_worker_mid_sweep_loses_nothing(tmp_path, dask_cluster, reference_run):
    study = write_study(tmp_path)
    store = tmp_path / "d.sqlite"
    proc = subprocess.Popen(_sweep_cmd(study, store, "--dask", dask_cluster.address), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, start_new_session=True, env=_env())
    try:
        _wait_for_rows(store, 6, proc)
        victim = dask_cluster.workers[0]
        os.killpg(victim.pid, signal.SIGKILL)
        out, err = proc.communicate(timeout=600)
    finally:
        if proc.poll() is None:
            os.killpg(proc.pid, signal.SIGKILL)
    assert proc.returncode == 0, err
    _same(_rows(store), reference_run)


def test_sweep_report_summarizes_and_the_report_shows_it(tmp_path, reference_run):
    # a small sweep into a store, then its summary and the report section
    study = write_study(tmp_path, samples=12)
    store = tmp_path / "small.sqlite"
    r = subprocess.run(_sweep_cmd(study, store, "--workers", "1"), capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    res = tmp_path / "results"
    r = subprocess.run([sys.executable, "-m", "tubeyield", "optimize", str(study), "--save", str(res)],
                       capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    r = subprocess.run([sys.executable, "-m", "tubeyield", "sweep-report", str(store), "--save", str(res),
                        "--workers", "2"], capture_output=True, text=True, timeout=600)
    assert r.returncode == 0, r.stderr
    assert "Spearman" in r.stdout and "robustness over 12 scenarios" in r.stdout
    summary = json.loads((res / "sweep-summary.json").read_text())
    assert summary["n"] == 12 and {row["path"] for row in summary["influence"]} == \
        {"reaction.second.Ea", "reaction.first.k"}
    assert summary["robust"]["rows"] and all(0 <= row["share"] <= 1 for row in summary["robust"]["rows"])
    r = subprocess.run([sys.executable, "-m", "tubeyield", "report", str(res), "--out", str(tmp_path / "rep")],
                       capture_output=True, text=True, timeout=300)
    assert r.returncode == 0, r.stderr
    html = (tmp_path / "rep" / "index.html").read_text()
    assert 'id="sweep"' in html and "Spearman" in html and "share of scenarios meeting every limit" in html
