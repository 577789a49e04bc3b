"""Shared test helpers: paths, a small valid study, and studies written inline."""

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
SCENARIOS = ROOT / "scenarios"

# A small valid study used as the base for malformed-study tests (invented kinetics, for tests only).
BASE_TOML = """
[study]
name = "base"
[species.A]
formula = "C2H4"
[species.B]
formula = "C2H4"
[species.C]
formula = "C2H4"
[[reaction]]
id = "r1"
equation = "A -> B"
k = "0.1 1/s"
T_ref = "350 K"
Ea = "50 kJ/mol"
[[reaction]]
id = "r2"
equation = "B -> C"
k = "0.05 1/s"
T_ref = "350 K"
Ea = "70 kJ/mol"
[feed]
flow = "1 L/min"
conc = { A = "1 mol/L" }
[reactor]
kind = "plug"
heat = "isothermal"
elements = 20
[operate]
tau = ["1 s", "100 s"]
T = ["300 K", "400 K"]
[goal]
maximize = "yield:B"
key = "A"
limits = ["conversion:A >= 0.5"]
"""




def study_from_toml(text: str, name: str = "inline"):
    """A Study from TOML text (for reference checks whose inputs are written in the test)."""
    from tubeyield.study import study_from_dict
    return study_from_dict(tomllib.loads(text), path=f"{name}.toml", source=text)


def demo_text() -> str:
    """The demo study's text without its lab runs and [fit] (which name files under scenarios/lab/): for tests that
    copy the study elsewhere or build it from text."""
    text = (SCENARIOS / "oxidation.toml").read_text()
    return text.split("# Lab runs")[0]
