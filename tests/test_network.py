"""Network checks: stoichiometric consistency by LP/MILP (Gevorgyan, Poolman and Fell, Bioinformatics 24 (2008)
2245), exact element balances, reachability from the feed."""

import subprocess
import sys

import pytest

from helpers import SCENARIOS
from tubeyield.chemistry.consistency import check_network, stoichiometric_consistency
from tubeyield.chemistry.network import Network, reactions_that_cannot_start
from tubeyield.study import load_study, study_from_dict


def test_demo_network_is_valid():
    study = load_study(SCENARIOS / "oxidation.toml")
    report = check_network(study)
    assert report.valid, report.errors()
    net = Network.of(study)
    assert net.rank == 4 and net.independent_reactions() == ("main", "over", "side", "dimer")
    # conserved masses: N^T m = 0 for the masses found by the LP
    import numpy as np
    m = np.array([report.masses[s] for s in net.species])
    assert np.allclose(net.matrix.T @ m, 0, atol=1e-9) and (m >= 1 - 1e-9).all()


def test_unbalanced_reaction_is_located(base_doc):
    # r2 "B -> 2 C" together with r1 "A -> B" and r3 "A -> C" cannot conserve mass: m_A = m_B = 2 m_C = m_C.
    # Relaxing r2 alone (or r3 alone) restores consistency, so the smallest faulty set has one reaction.
    base_doc["reaction"][1]["equation"] = "B -> 2 C"
    base_doc["reaction"].append({"id": "r3", "equation": "A -> C", "k": "0.01 1/s"})
    for s in base_doc["species"].values():
        s.pop("formula")
    study = study_from_dict(base_doc)
    consistent, _, faulty = stoichiometric_consistency(Network.of(study))
    assert not consistent
    assert len(faulty) == 1 and faulty[0] in ("r2", "r3")


def test_each_reaction_of_a_fault_is_named_when_it_alone_breaks(base_doc):
    # A -> B, B -> C, C -> A consistent; adding "A -> 2 A + B"-like creation: r4 "C -> A + B" breaks only with r4.
    base_doc["reaction"].append({"id": "cyc", "equation": "C -> A", "k": "0.01 1/s"})
    base_doc["reaction"].append({"id": "bad", "equation": "C -> A + B", "k": "0.01 1/s"})
    for s in base_doc["species"].values():
        s.pop("formula")
    consistent, _, faulty = stoichiometric_consistency(Network.of(study_from_dict(base_doc)))
    assert not consistent and faulty == ("bad",)


def test_element_balance_names_reaction_and_element(base_doc):
    base_doc["species"]["B"]["formula"] = "C2H6"
    report = check_network(study_from_dict(base_doc))
    assert any("reaction r1" in e and "element H" in e and "4 on the left, 6 on the right" in e
               for e in report.element_errors), report.element_errors
    assert not report.valid


def test_reachability_and_untouched_species(base_doc):
    base_doc["species"]["Z"] = {}
    base_doc["species"]["Y"] = {}
    base_doc["reaction"].append({"id": "needs_z", "equation": "Z -> Y", "k": "1 1/s"})
    base_doc["species"]["I"] = {}
    study = study_from_dict(base_doc)
    assert reactions_that_cannot_start(study) == ("needs_z",)
    report = check_network(study)
    assert any("species I takes part in no reaction" in w for w in report.warnings)


def _cli(*args):
    return subprocess.run([sys.executable, "-m", "tubeyield", *args], capture_output=True, text=True, timeout=120)


def test_cli_check_demo_ok():
    r = _cli("check", str(SCENARIOS / "oxidation.toml"))
    assert r.returncode == 0, r.stderr
    assert "consistent" in r.stdout and "rank 4" in r.stdout and r.stdout.rstrip().endswith("valid")


def test_cli_check_json_is_clean_json():
    import json
    r = _cli("check", str(SCENARIOS / "oxidation.toml"), "--json")
    assert r.returncode == 0
    data = json.loads(r.stdout)
    assert data["valid"] and data["rank"] == 4


def test_cli_user_error_is_one_line_exit_2(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text((SCENARIOS / "oxidation.toml").read_text().replace('flow = "2 L/min"', 'flow = "2 L"'))
    (tmp_path / "oxidation-network.toml").write_text((SCENARIOS / "oxidation-network.toml").read_text())
    r = _cli("check", str(bad))
    assert r.returncode == 2
    assert r.stderr.count("\n") == 1 and r.stderr.startswith(f"error: {bad}: feed.flow:") and "Traceback" not in r.stderr


def test_cli_inconsistent_network_exit_2(tmp_path):
    net = (SCENARIOS / "oxidation-network.toml").read_text().replace('"B + O -> C + 2 W"', '"B + O -> C + W"')
    (tmp_path / "oxidation-network.toml").write_text(net)
    (tmp_path / "s.toml").write_text((SCENARIOS / "oxidation.toml").read_text())
    r = _cli("check", str(tmp_path / "s.toml"))
    assert r.returncode == 2
    assert "reaction over" in r.stderr and "element H does not balance" in r.stderr
