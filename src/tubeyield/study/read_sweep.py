"""[sweep]: varied study paths (parsed in study/variation.py), sampling, run mode, robustness share, candidates."""

from __future__ import annotations

from tubeyield.errors import StudyError
from tubeyield.study import caps
from tubeyield.study.schema import Study, SweepSpec
from tubeyield.study.toml import Table, number
from tubeyield.study.units import to_si

RUNS = ("optimize", "front", "evaluate")


def read_sweep(t: Table | None, study: Study) -> SweepSpec | None:
    if t is None:
        return None
    from tubeyield.study.variation import parse_variation
    from_fit = t.take("fit_uncertainty", False, types=bool)
    vary_t = t.table("vary", {}, what="a table mapping study paths to values or distributions")
    vary = tuple(parse_variation(path, body, f"{vary_t.key(path)}", study) for path, body in vary_t.data.items())
    vary_t.seen.update(vary_t.data)
    if not vary and not from_fit:
        raise StudyError(vary_t.path or "sweep.vary", "at least one varied path, e.g. 'reaction.over.Ea' = "
                                                      "{ normal = [...] }, or fit_uncertainty = true")
    sampled = [v for v in vary if v.distribution] or from_fit
    samples = int(number(t.take("samples", 0), t.key("samples"), integer=True, low=0))
    if sampled and samples < 1:
        raise StudyError(t.key("samples"), "the number of samples (>= 1) for the distributions in 'vary' and the "
                                           "fit's uncertainty")
    caps.at_most(samples, caps.MAX_SCENARIOS, t.key("samples"), "a number of samples")
    combinations = 1
    for v in vary:
        combinations *= len(v.values) if v.distribution is None else 1
    caps.at_most(combinations * max(samples, 1), caps.MAX_SCENARIOS, vary_t.path,
                 "a number of scenarios (grid combinations times samples)")
    seed = int(number(t.take("seed", 0), t.key("seed"), integer=True, low=0))
    run = t.take("run", "optimize", types=str)
    if run not in RUNS:
        raise StudyError(t.key("run"), f"one of {', '.join(RUNS)}, got {run!r}")
    if run == "front" and study.front is None:
        raise StudyError(t.key("run"), "a [front] table for run = 'front'")
    time_limit = to_si(t.take("time_limit", "300 s"), "time", t.key("time_limit"))
    if time_limit <= 0:
        raise StudyError(t.key("time_limit"), f"a positive time per scenario, got {t.data['time_limit']!r}")
    caps.at_most(time_limit, caps.MAX_TIME_LIMIT, t.key("time_limit"), "a time per scenario (s)")
    share = number(t.take("share", 0.95), t.key("share"))
    if not 0 < share <= 1:
        raise StudyError(t.key("share"), f"a share between 0 and 1, got {share:g}")
    cand_t = t.table("candidates", {}, what="a table of named operating points, e.g. { safe = { tau = '5 min' } }")
    candidates = []
    for name, body in cand_t.data.items():
        key = cand_t.key(name)
        ct = Table(body, key)
        values = {}
        for d in study.decisions:
            kind = {"s": "time", "K": "temperature", "": "dimensionless"}[d.si_unit]
            if ct.has(d.name):
                values[d.name] = to_si(ct.take(d.name), kind, ct.key(d.name))
                if not d.low - 1e-12 * abs(d.low) <= values[d.name] <= d.high + 1e-12 * abs(d.high):
                    raise StudyError(ct.key(d.name), "a value within the decision's range in [operate]")
            elif d.fixed:
                values[d.name] = d.low
            else:
                raise StudyError(ct.key(d.name), "a value for every decision with a range; the key is missing")
        ct.close(tuple(d.name for d in study.decisions))
        candidates.append((name, tuple(values.items())))
    caps.at_most(len(candidates), caps.MAX_CANDIDATES, cand_t.path, "a number of candidates")
    cand_t.seen.update(cand_t.data)
    if run == "evaluate" and not candidates and any(not d.fixed for d in study.decisions):
        raise StudyError(t.key("candidates"), "named operating points to evaluate (run = 'evaluate'), or a study "
                                              "whose decisions are all fixed")
    t.close()
    return SweepSpec(vary, samples, seed, run, time_limit, share, tuple(candidates), from_fit)
