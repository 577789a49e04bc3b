"""[robust]: the robust operating point's settings (schema.RobustSpec). The uncertain parameters are [sweep]'s
distributions and, with fit_uncertainty, the fit's; [robust] says how many scenarios, which share must meet the
limits, the goal over the scenarios and the validation."""

from __future__ import annotations

from tubeyield.errors import StudyError
from tubeyield.study import caps
from tubeyield.study.schema import RobustSpec
from tubeyield.study.toml import Table, number

OBJECTIVES = ("mean", "worst")
MAX_ROBUST_SCENARIOS = 500      # training scenarios: each is a copy of the collocation model in one NLP
MAX_VALIDATION = 100_000


def read_robust(t: Table | None) -> RobustSpec:
    """The [robust] table, or the defaults when the study has none."""
    if t is None:
        return RobustSpec()
    scenarios = int(number(t.take("scenarios", 50), t.key("scenarios"), integer=True, low=1))
    caps.at_most(scenarios, MAX_ROBUST_SCENARIOS, t.key("scenarios"), "a number of scenarios")
    share = number(t.take("share", 1.0), t.key("share"))
    check_share(share, t.key("share"))
    objective = t.take("objective", "mean", types=str)
    if objective not in OBJECTIVES:
        raise StudyError(t.key("objective"), f"one of {', '.join(OBJECTIVES)}, got {objective!r}")
    validation = int(number(t.take("validation", 400), t.key("validation"), integer=True, low=1))
    caps.at_most(validation, MAX_VALIDATION, t.key("validation"), "a number of validation scenarios")
    confidence = number(t.take("confidence", 0.99), t.key("confidence"))
    if not 0 < confidence < 1:
        raise StudyError(t.key("confidence"), f"a confidence between 0 and 1 (exclusive), got {confidence:g}")
    seed = int(number(t.take("seed", 11), t.key("seed"), integer=True, low=0))
    elements = int(number(t.take("elements", 20), t.key("elements"), integer=True, low=1))
    caps.at_most(elements, caps.MAX_ELEMENTS, t.key("elements"), "a number of elements")
    t.close(("scenarios", "share", "objective", "validation", "confidence", "seed", "elements"))
    return RobustSpec(scenarios, share, objective, validation, confidence, seed, elements)


def check_share(share: float, key: str) -> None:
    if not 0 < share <= 1:
        raise StudyError(key, f"a share of the scenarios in (0, 1], got {share:g}")
