"""The Result of an optimization or evaluation: what the command line prints, --json writes and reports read."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from tubeyield import __version__
from tubeyield.reactor.verify import Check


@dataclass
class Result:
    status: str                                   # optimal | infeasible | failed
    study: str
    goal: dict                                    # {metric, sense, value, unit}
    decisions: dict                               # name -> {value, unit, low, high} (profiles: value list + z)
    metrics: dict                                 # text -> {value, unit}
    outlet: dict                                  # species -> {conc, conc_unit, flow, flow_unit}
    limits: list                                  # LimitReport dicts
    bounds: list                                  # BoundReport dicts
    check: Check | None
    starts: dict
    timing: dict
    message: str = ""
    warnings: list = field(default_factory=list)
    conflicts: list = field(default_factory=list) # infeasible: the limits that cannot hold together
    volume_m3: float | None = None
    decisions_si: dict = field(default_factory=dict, repr=False)
    profile_data: object = field(default=None, repr=False)  # the axial profile: row dicts, or a pandas DataFrame

    @property
    def profile(self):
        """The axial profile (pandas DataFrame, one row per collocation point; CSV on disk). Kept as plain rows until
        asked for: pandas costs 0.2 s to import, and a command that prints the result does not need it."""
        if isinstance(self.profile_data, list):
            import pandas as pd
            self.profile_data = pd.DataFrame(self.profile_data)
        return self.profile_data

    def to_dict(self) -> dict:
        return finite_json({
            "tool": f"tubeyield {__version__}", "status": self.status, "study": self.study, "message": self.message,
            "goal": self.goal, "decisions": self.decisions, "metrics": self.metrics, "outlet": self.outlet,
            "volume_m3": self.volume_m3, "limits": self.limits, "bounds": self.bounds, "conflicts": self.conflicts,
            "check": self.check.to_dict() if self.check else None, "starts": self.starts, "timing": self.timing,
            "warnings": self.warnings, "decisions_si": self.decisions_si,
        })

    def point(self) -> dict:
        """The operating point to simulate again (SI by decision name): profile decisions as piecewise-linear
        functions of z through their values at their positions (a list alone does not say where its values sit)."""
        return point_of(self.decisions_si, self.decisions)

    def to_frame(self):
        """One row per number of the result (pandas): decisions, goal, metrics, limits, outlet concentrations, with
        columns part, name, value, unit and, for limits, active, marginal and holds."""
        import pandas as pd
        rows = []
        for name, d in self.decisions.items():
            value = d["value"] if not isinstance(d["value"], list) else None
            rows.append({"part": "decision", "name": name, "value": value, "unit": d.get("unit", "")})
        if self.goal.get("value") is not None:
            rows.append({"part": "goal", "name": self.goal["metric"], "value": self.goal["value"],
                         "unit": self.goal.get("unit", "")})
        rows += [{"part": "metric", "name": k, "value": m["value"], "unit": m["unit"]} for k, m in self.metrics.items()]
        for lim in self.limits:
            rows.append({"part": "limit", "name": lim["text"], "value": lim["value"], "unit": lim["unit"],
                         "active": lim.get("active"), "marginal": lim.get("marginal"), "holds": lim.get("holds")})
        rows += [{"part": "outlet", "name": s, "value": o["conc"], "unit": o["conc_unit"]}
                 for s, o in self.outlet.items()]
        return pd.DataFrame(rows)


def point_of(decisions_si: dict, decisions: dict) -> dict:
    """`decisions_si` with each profile (a list of values) turned into a PiecewiseLinear over the positions `z`
    recorded in `decisions` (as a Result or its saved JSON holds them)."""
    from tubeyield.reactor.simulate import PiecewiseLinear
    out = dict(decisions_si)
    for name, v in decisions_si.items():
        if isinstance(v, list):
            z = (decisions.get(name) or {}).get("z")
            if not z or len(z) != len(v):
                raise ValueError(f"the profile {name!r} has no positions for its {len(v)} values")
            out[name] = PiecewiseLinear(list(z), list(v))
    return out


def finite_json(obj):
    """JSON has no NaN or infinity: write them as null."""
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {k: finite_json(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [finite_json(v) for v in obj]
    return obj
