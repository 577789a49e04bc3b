"""The Python front door: one function per job, returning the same typed results the command line prints.

    import tubeyield as ty
    study = ty.load("scenarios/oxidation.toml")
    best = ty.optimize(study)                 # a Result: best.status, best.goal, best.to_frame()
    ty.simulate(study, tau="2 min", T="340 K").to_frame()
    ty.front(study).to_frame()                # one row per level
    ty.window(study, at=best).to_frame()      # one row per cell

Every function takes a Study or the path of a study file. Mistakes in a study raise tubeyield.StudyError (its
`line()` is the one-line message the command line prints). Results are model predictions only: verify with
calorimetry and a hazard study before any design or operation.
"""

from __future__ import annotations

from pathlib import Path

from tubeyield.chemistry.consistency import CheckReport
from tubeyield.errors import StudyError
from tubeyield.jobs.fit import FitResult
from tubeyield.jobs.front import FrontResult
from tubeyield.jobs.result import Result
from tubeyield.jobs.robust import RobustResult
from tubeyield.jobs.sweep import SweepOutcome
from tubeyield.jobs.window import WindowResult
from tubeyield.study import Study, load_study

__all__ = ["CheckReport", "FitResult", "FrontResult", "Result", "RobustResult", "Study", "StudyError", "SweepOutcome",
           "WindowResult", "check", "fit", "front", "load", "load_study", "optimize", "report", "robust", "simulate",
           "sweep", "sweep_summary", "window", "with_kinetics"]


def load(path) -> Study:
    """Read a study file (and its includes) into a Study, in SI units."""
    return load_study(path)


def _study(study, need: str | None = None) -> Study:
    """A Study from a Study or a path. With `need` (front, window, sweep): one that has that section, and a mistake
    in it is raised; mistakes in sections the job does not use are not errors (as on the command line)."""
    if not isinstance(study, Study):
        study = load_study(study, need=(need,) if need else ())
    if need is not None:
        for section, error in study.section_errors:
            if section == need:
                raise error
        if getattr(study, need) is None:
            raise StudyError(need, f"a [{need}] table in the study", file=study.path or None)
    return study


def check(study) -> CheckReport:
    """The network checks: stoichiometric consistency (HiGHS), element and mass balances, reachability."""
    from tubeyield.chemistry.consistency import check_network
    return check_network(_study(study))


def fit(study) -> FitResult:
    """The [fit] parameters estimated from the study's [[experiment]] runs, with linearized statistics
    (jobs/fit.py); `to_frame()` gives the parameter table."""
    from tubeyield.jobs.fit import fit as _fit
    return _fit(_study(study, "fit"))


def with_kinetics(study, fit_file) -> Study:
    """The study with the kinetics of a saved fit (`tubeyield fit --save DIR` writes DIR/fit.json) in place of its
    own, as `--kinetics` does; refused for a study whose network differs from the fitted one."""
    from tubeyield.study.read_kinetics import load_kinetics
    return load_kinetics(_study(study), fit_file)


def robust(study, *, scenarios: int | None = None, share: float | None = None, validation: int | None = None,
           workers: int | None = None) -> RobustResult:
    """One operating point that keeps the limits in many scenarios of the uncertain parameters ([sweep]
    distributions, the fit's uncertainty), validated on fresh scenarios beside the nominal optimum (jobs/robust.py);
    `to_frame()` gives the validated points."""
    from tubeyield.jobs.robust import robust as _robust
    return _robust(_study(study, "sweep"), scenarios=scenarios, share=share, validation=validation, workers=workers)


def optimize(study, *, starts: int | None = None, seed: int = 0, relax: bool = True,
             workers: int | None = None) -> Result:
    """The best operating point, verified by re-simulation; `relax` re-solves each active limit at relaxed bounds to
    say how far its marginal value holds. The starts run on `workers` cores (default: all; 1 for one at a time)."""
    from tubeyield.jobs.optimize import optimize as _optimize
    from tubeyield.solve.forked import usable_cores
    return _optimize(_study(study), starts=starts, seed=seed, relax=relax, workers=workers or usable_cores())


def simulate(study, values: dict | None = None, **settings) -> Result:
    """The reference simulation at given decisions: `simulate(study, tau="2 min", T="340 K")` (strings with units,
    as on the command line) or `simulate(study, {"tau": 120.0, "T": 340.0})` (SI floats). Decisions not given take the
    middle of their range; the notes say so (`result.warnings`)."""
    from tubeyield.jobs.evaluate import evaluate, parse_settings
    st = _study(study)
    given = dict(values or {}, **settings)
    texts = [f"{k}={v}" if isinstance(v, str) else f"{k}={v!r} {_si_unit(st, k)}".rstrip() for k, v in given.items()]
    si, notes = parse_settings(st, texts)
    result = evaluate(st, si)
    result.warnings = list(result.warnings) + list(notes)
    return result


def _si_unit(study: Study, name: str) -> str:
    try:
        return study.decision(name).si_unit
    except KeyError:
        return ""


def front(study, *, points: int | None = None, workers: int | None = None) -> FrontResult:
    """The Pareto front of the study's [front] metrics. Its two single-metric ends are solved at once, and their
    starts, on `workers` cores (default: all; 1 for one after the other); the front is the same."""
    from tubeyield.jobs.front import front as _front
    from tubeyield.solve.forked import usable_cores
    return _front(_study(study, "front"), points=points, workers=workers or usable_cores())


def window(study, *, at: Result | dict | None = None, workers: int | None = None) -> WindowResult:
    """Maps of the goal and every limit over the study's [window] decisions. The other decisions sit at `at` (a
    Result, or SI values by decision name); without it the study is optimized first."""
    from tubeyield import status as _status
    from tubeyield.jobs.window import optimum_marker, window as _window
    st = _study(study, "window")
    if at is None:
        at = optimize(st, relax=False)
    if isinstance(at, Result):
        base, solved = at.point(), at.status in _status.SOLVED
    else:
        base, solved = dict(at), True
    if set(base) != {d.name for d in st.decisions}:
        raise StudyError("at", f"values for every decision of the study ({', '.join(d.name for d in st.decisions)})")
    return _window(st, base, workers=workers, optimum=optimum_marker(st, base) if solved else None)


def sweep(study, store, *, workers: int | None = None, dask: str | None = None, resume: bool = False,
          retry_failed: bool = False, progress: bool = False) -> SweepOutcome:
    """Every scenario of the study's [sweep] into the SQLite store; `.to_frame()` gives the store as a table."""
    from tubeyield.jobs.sweep import sweep as _sweep
    return _sweep(_study(study, "sweep"), store, workers=workers, dask=dask, resume=resume,
                  retry_failed=retry_failed, progress=progress)


def sweep_summary(store, *, workers: int | None = None) -> dict:
    """Distributions, influence and robustness of a sweep store (what `tubeyield sweep-report` prints)."""
    from tubeyield.jobs.sweep_summary import summarize
    return summarize(store, workers=workers)


def report(result_dir, out=None) -> Path:
    """The HTML report from results saved in `result_dir` (by `--save` or `save`); returns the index.html path."""
    from tubeyield.report.html import build_report
    return build_report(result_dir, out)
