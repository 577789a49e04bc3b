"""tubeyield: operating windows for tubular reactors running series and parallel reactions.

The Python API (tubeyield.api) is re-exported here: `import tubeyield as ty; ty.optimize("study.toml").to_frame()`.
"""

__version__ = "0.1.0"

_API = ("CheckReport", "FitResult", "FrontResult", "Result", "RobustResult", "Study", "StudyError", "SweepOutcome",
        "WindowResult", "check", "fit", "front", "load", "load_study", "optimize", "report", "robust", "simulate",
        "sweep", "sweep_summary", "window", "with_kinetics")
__all__ = list(_API)


def _no_scipy_preload() -> None:
    """Pyomo registers a hook that, whenever scipy is first imported (pint and our integrators import it), also imports
    scipy.stats, sparse, spatial and integrate so that Pyomo's optional features find them. scipy.stats alone costs
    about 0.3 s of every command; tubeyield imports what it uses itself, and scipy loads its submodules on first
    attribute access, so the hook's callback is dropped here, before scipy is imported. Guarded: with a Pyomo that
    names things otherwise this does nothing."""
    try:
        from pyomo.common import dependencies
    except ImportError:  # pragma: no cover - pyomo is a core dependency
        return
    indicator = getattr(dependencies, "scipy_available", None)
    if getattr(indicator, "_callback", None) is getattr(dependencies, "_finalize_scipy", object()):
        indicator._callback = None


_no_scipy_preload()


def __getattr__(name: str):
    # lazy: `import tubeyield` stays cheap (the command line imports only what a command needs)
    if name in _API:
        from tubeyield import api
        return getattr(api, name)
    raise AttributeError(f"module 'tubeyield' has no attribute {name!r}")
