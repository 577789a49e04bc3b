"""Network checks: stoichiometric consistency by LP and irreducible infeasible subsets (Gevorgyan, Poolman and Fell, Bioinformatics 24 (2008)
2245), exact element balances, reachability from the feed."""

import shutil
import subprocess
import sys

import numpy as np

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


def _masses_exist(N) -> bool:
    """Independent of HiGHS: scipy.optimize.linprog on N^T m = 0, m >= 1."""
    from scipy.optimize import linprog
    res = linprog(np.ones(N.shape[0]), A_eq=N.T, b_eq=np.zeros(N.shape[1]), bounds=[(1, 1e4)] * N.shape[0],
                  method="highs")
    return res.status == 0


def _assert_irreducible(net, faulty):
    cols = [net.reaction_ids.index(r) for r in faulty]
    assert not _masses_exist(net.matrix[:, cols])                       # these cannot conserve mass together
    for k in cols:                                                      # any one of them removed, the rest can
        assert _masses_exist(net.matrix[:, [c for c in cols if c != k]])


def test_unbalanced_reactions_are_located_together(base_doc):
    # r1 "A -> B", r2 "B -> 2 C" and r3 "A -> C" cannot conserve mass: m_A = m_B = 2 m_C = m_C. Any two of them can:
    # the fault is all three, and all three are named (the smallest set to relax, one reaction, named only one).
    base_doc["reaction"][1]["equation"] = "B -> 2 C"
    base_doc["reaction"].append({"id": "r3", "equation": "A -> C", "k": "0.01 1/s"})
    for s in base_doc["species"].values():
        s.pop("formula")
    study = study_from_dict(base_doc)
    net = Network.of(study)
    consistent, _, faulty = stoichiometric_consistency(net)
    assert not consistent
    assert sorted(faulty) == ["r1", "r2", "r3"]
    _assert_irreducible(net, faulty)
    assert "r1, r2, r3" in " ".join(check_network(study).errors())


def test_an_irreducible_fault_among_consistent_reactions(base_doc):
    # A -> B, B -> C, C -> A are consistent; "C -> A + B" breaks them. Irreducible sets: {cyc, bad} (m_C = m_A
    # and m_C = m_A + m_B) or {r1, r2, bad}; either is a correct answer, and it must be irreducible.
    base_doc["reaction"].append({"id": "cyc", "equation": "C -> A", "k": "0.01 1/s"})
    base_doc["reaction"].append({"id": "bad", "equation": "C -> A + B", "k": "0.01 1/s"})
    for s in base_doc["species"].values():
        s.pop("formula")
    net = Network.of(study_from_dict(base_doc))
    consistent, _, faulty = stoichiometric_consistency(net)
    assert not consistent and "bad" in faulty
    assert set(faulty) in ({"cyc", "bad"}, {"r1", "r2", "bad"})
    _assert_irreducible(net, faulty)


def test_mass_balance_mixes_formulas_and_molar_masses(base_doc):
    # A has a formula (C2H4, 28.05 g/mol), B only a molar mass: r1 "A -> B" with 30 g/mol cannot balance.
    base_doc["species"]["B"].pop("formula")
    base_doc["species"]["B"]["molar_mass"] = "30 g/mol"
    report = check_network(study_from_dict(base_doc))
    assert any("reaction r1" in e and "molar masses do not balance" in e for e in report.mass_errors), report.errors()
    assert not report.valid
    # with the formula's own mass (standard atomic weights: 2 x 12.011 + 4 x 1.008 = 28.054 g/mol) it balances
    base_doc["species"]["B"]["molar_mass"] = "28.054 g/mol"
    base_doc["species"]["C"].pop("formula")
    base_doc["species"]["C"]["molar_mass"] = "28.054 g/mol"
    assert check_network(study_from_dict(base_doc)).valid


def test_independent_reactions_of_a_large_chain_are_found_quickly():
    # a chain of 400 first-order steps plus one repeated step: rank 400, the repeat is dependent
    N = np.zeros((401, 401))
    for j in range(400):
        N[j, j], N[j + 1, j] = -1, 1
    N[:, 400] = N[:, 3]
    net = Network(tuple(f"S{i}" for i in range(401)), tuple(f"r{j}" for j in range(401)), N)
    assert net.independent_reactions() == tuple(f"r{j}" for j in range(400))
    assert net.rank == 400


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
    shutil.copytree(SCENARIOS / "lab", tmp_path / "lab")        # the demo's lab runs, which check reads too
    r = _cli("check", str(tmp_path / "s.toml"))
    assert r.returncode == 2
    assert "reaction over" in r.stderr and "element H does not balance" in r.stderr
