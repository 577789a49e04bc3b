"""What every command pays before it starts: the start design and the imports.

The design is checked against the definition of a Latin hypercube (McKay, Beckman and Conover, Technometrics 21
(1979) 239-245): each axis cut into n equal slices holds exactly one of the n points in every slice. The import
checks are structural, not timed (speed is measured by `make bench`): the optimize command must not load modules it
does not use.
"""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np

from tubeyield.solve.multistart import latin_hypercube


def test_latin_hypercube_one_point_per_slice():
    for n, d, seed in ((16, 3, 0), (7, 5, 3), (1, 2, 0), (64, 1, 11)):
        u = latin_hypercube(n, d, seed)
        assert u.shape == (n, d)
        assert np.all(u >= 0.0) and np.all(u < 1.0)
        for axis in range(d):
            slices = np.floor(u[:, axis] * n).astype(int)
            assert sorted(slices.tolist()) == list(range(n)), (n, d, seed, axis)


def test_latin_hypercube_seeded():
    assert np.array_equal(latin_hypercube(12, 3, 4), latin_hypercube(12, 3, 4))
    assert not np.array_equal(latin_hypercube(12, 3, 4), latin_hypercube(12, 3, 5))


def test_latin_hypercube_uniform_marginals():
    # each coordinate is uniform on [0, 1): over many points the mean is 1/2 and the variance 1/12
    u = latin_hypercube(4000, 2, 1)
    assert np.allclose(u.mean(axis=0), 0.5, atol=0.01)
    assert np.allclose(u.var(axis=0), 1.0 / 12.0, rtol=0.02)


def test_optimize_command_imports_only_what_it_uses():
    code = ("import sys, json, tubeyield.cli, tubeyield.jobs.optimize, tubeyield.report.text; "
            "print(json.dumps(sorted(m for m in sys.modules if m.split('.')[0] in "
            "('scipy', 'pandas', 'matplotlib', 'pyomo', 'dask', 'jinja2'))))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    loaded = set(json.loads(out.stdout.strip().splitlines()[-1]))
    # scipy.stats (about 0.3 s) was loaded by a hook of Pyomo's whenever scipy was imported; plotting and tables are
    # for the report; pyomo.environ loads every Pyomo plug-in (tubeyield.modeling loads the two it needs); dask (with
    # jinja2) came with pint's dask support (tubeyield.study.units)
    for heavy in ("scipy.stats", "scipy.interpolate", "matplotlib", "pandas", "pyomo.environ", "pyomo.gdp", "dask",
                  "jinja2"):
        assert heavy not in loaded, f"{heavy} is imported by the optimize command's modules"
    # what the lean import must still provide: the collocation transformation and the NL writer
    assert "pyomo.dae.plugins.colloc" in loaded and "pyomo.repn.plugins.nl_writer" in loaded


def test_pint_loads_without_dask_and_dask_still_imports_afterwards():
    # tubeyield.study.units hides dask from pint's import only; a sweep on a Dask cluster imports it later
    code = ("import sys, json; import tubeyield.study.units as u; before = 'dask' in sys.modules; "
            "import pint.compat, dask; "
            "print(json.dumps([before, pint.compat.HAS_DASK, dask.delayed(sum)([1, 2, 3]).compute(), "
            "u.convert(2.0, 'L/min', 'm^3/s')]))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert out.returncode == 0, out.stderr
    before, pint_dask, total, flow = json.loads(out.stdout.strip().splitlines()[-1])
    assert before is False and pint_dask is False and total == 6
    assert abs(flow - 2e-3 / 60.0) < 1e-18


def test_frozen_heap_spares_live_objects_collects_new_garbage_and_leaves_a_freeze_alone():
    # The front's levels run with the heap alive on entry frozen (Python's gc.freeze): a cycle made inside must
    # still be collected, everything goes back to the collector on exit, and a freeze made by someone else stays.
    import gc
    import weakref

    from tubeyield.reactor import frozen_heap

    class Node:
        pass

    assert gc.get_freeze_count() == 0
    with frozen_heap():
        assert gc.get_freeze_count() > 0
        a, b = Node(), Node()
        a.other, b.other = b, a              # a reference cycle: only the cyclic collector frees it
        gone = weakref.ref(a)
        del a, b
        gc.collect()
        assert gone() is None
    assert gc.get_freeze_count() == 0
    gc.freeze()
    try:
        frozen = gc.get_freeze_count()
        with frozen_heap():
            pass
        # neither thawed (0) nor frozen further; frozen objects freed by reference counting leave the count, so it
        # may have fallen by a few
        assert 0 < gc.get_freeze_count() <= frozen
    finally:
        gc.unfreeze()


def test_the_command_exits_quickly_with_mains_code_after_the_exit_handlers_and_complete_output(tmp_path):
    # cli.run ends the process with os._exit once main() has returned: the exit handlers must still run, the output
    # must be complete, and the code must be main's (0 for a good study, 2 for a user's mistake)
    from pathlib import Path
    study = Path(__file__).resolve().parents[1] / "scenarios" / "oxidation.toml"
    code = ("import atexit, sys; atexit.register(lambda: print('handler ran', file=sys.stderr)); "
            "from tubeyield.cli import run; sys.argv = ['tubeyield'] + sys.argv[1:]; run()")
    ok = subprocess.run([sys.executable, "-c", code, "check", str(study)], capture_output=True, text=True, timeout=120)
    assert ok.returncode == 0, ok.stderr
    assert "handler ran" in ok.stderr
    whole = subprocess.run([sys.executable, "-c", "import sys; from tubeyield.cli import main; "
                            "raise SystemExit(main(sys.argv[1:]))", "check", str(study)],
                           capture_output=True, text=True, timeout=120)
    assert whole.returncode == 0 and ok.stdout == whole.stdout and len(ok.stdout) > 200
    bad = subprocess.run([sys.executable, "-m", "tubeyield", "check", str(tmp_path / "missing.toml")],
                         capture_output=True, text=True, timeout=120)
    assert bad.returncode == 2 and "missing.toml" in bad.stderr and "Traceback" not in bad.stderr
