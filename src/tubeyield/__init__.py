"""tubeyield: operating windows for tubular reactors running series and parallel reactions.

The Python API (tubeyield.api) is re-exported here: `import tubeyield as ty; ty.optimize("study.toml").to_frame()`.
"""

__version__ = "0.1.0"

_API = ("CheckReport", "FitResult", "FrontResult", "Result", "RobustResult", "Study", "StudyError", "SweepOutcome",
        "WindowResult", "check", "fit", "front", "load", "load_study", "optimize", "report", "robust", "simulate",
        "sweep", "sweep_summary", "window", "with_kinetics")
__all__ = list(_API)


def __getattr__(name: str):
    # lazy: `import tubeyield` stays cheap (the command line imports only what a command needs)
    if name in _API:
        from tubeyield import api
        return getattr(api, name)
    raise AttributeError(f"module 'tubeyield' has no attribute {name!r}")
