"""The report's summary box says, in words, what should stop a reviewer (report/summary.py), from saved results."""

import pytest

from tubeyield.report.summary import summary


def _optimum(status="optimal", **over):
    base = {"status": status, "message": "", "goal": {"metric": "yield:B", "sense": "max", "value": 0.5, "unit": ""},
            "decisions": {"tau": {"value": 2.0, "unit": "min"}},
            "bounds": [],
            "limits": [{"text": "conversion:A >= 0.80", "value": 0.8, "unit": "", "active": True, "marginal": -0.2,
                        "marginal_unit": "yield:B per unit of conversion:A", "bound": 0.8, "sense": ">=",
                        "margin": 2e-11, "relaxed": [{}], "holds_to": 0.7984},
                       {"text": "T <= 400 K", "value": 343.4, "unit": "K", "active": False, "marginal": 0.0,
                        "marginal_unit": "yield:B per K", "bound": 400.0, "sense": "<=", "margin": 56.6}],
            "check": {"max_rel_error": 8.8e-11, "tolerance": 1e-6, "passed": True, "elements": 40,
                      "integrator": "scipy"}}
    base.update(over)
    return base


def test_a_verified_optimum_has_no_stops_and_shows_margins_and_marginal_ranges():
    s = summary(_optimum())
    assert s["stops"] == [] and s["headline"].startswith("Recommended operating point (optimal): yield:B = 0.5")
    conv, temp = s["limits"]
    assert conv["margin"] == "0" and conv["binding"] and "holds to 0.7984" in conv["marginal"]
    assert temp["margin"] == "56.6 K" and temp["marginal"] == "0 (not binding)"
    assert "passed, on 40 elements" in s["verification"]


@pytest.mark.parametrize("status,word", [("unverified", "NOT VERIFIED"), ("infeasible", "INFEASIBLE"),
                                         ("failed", "FAILED")])
def test_a_point_that_is_not_verified_or_not_found_is_a_stop(status, word):
    s = summary(_optimum(status, message="the re-simulation differs by 3e-4"))
    assert s["stops"] and s["stops"][0].startswith(word)


def test_an_exceeded_limit_and_a_fragile_point_are_stops():
    opt = _optimum()
    opt["limits"][1].update(value=402.5, margin=-2.5, holds=False)
    sweep = {"robust": {"target": 0.95, "scenarios": 200, "best": "backed-off optimum",
                        "rows": [{"label": "nominal optimum", "share": 0.05, "mean": 0.51},
                                 {"label": "backed-off optimum", "share": 0.955, "mean": 0.47}]}}
    s = summary(opt, sweep=sweep)
    assert any("T <= 400 K is exceeded" in x and "2.5 K" in x for x in s["stops"])
    assert any("only 5 % of the scenarios" in x for x in s["stops"])
    assert "backed-off optimum meets them in 96 %" in s["robustness"]


def test_no_saved_optimum_says_so():
    s = summary(None)
    assert "No optimization result" in s["headline"] and s["stops"]


def test_a_network_that_fails_its_check_is_a_stop():
    out = summary(_optimum(), network_errors=["stoichiometrically inconsistent: back, surface"])
    assert any(s.startswith("NETWORK CHECK:") and "back, surface" in s for s in out["stops"])
    assert not summary(_optimum())["stops"]


class _Window:
    def __init__(self, holds):
        import numpy as np
        self.window = np.array(holds, dtype=bool)


def test_an_empty_window_map_around_a_verified_optimum_is_a_note_not_a_stop():
    empty = _Window([[False] * 14] * 12)
    s = summary(_optimum(), empty)
    assert s["stops"] == [] and "14 x 12 window map" in s["window_note"] and "narrower than one cell" in s["window_note"]
    s = summary(_optimum("unverified", message="the re-simulation differs"), empty)
    assert "the window map has no cell where every limit holds" in s["stops"] and not s["window_note"]
    assert not summary(_optimum(), _Window([[True, False]]))["window_note"]


def test_a_fit_that_does_not_determine_its_parameters_is_a_stop():
    fit = {"status": "unverified", "message": "NOT VERIFIED: parameters not identifiable",
           "not_identified": ["reaction.one.k and reaction.two.k"], "parameters": []}
    s = summary(_optimum(), fit=fit)
    assert any("do not determine reaction.one.k and reaction.two.k" in x for x in s["stops"])
    good = {"status": "optimal", "not_identified": [], "parameters": [{"path": "reaction.one.k", "at_bound": True}]}
    assert summary(_optimum(), fit=good)["stops"] == ["FIT: reaction.one.k ended at its bound"]
