"""Study loading: valid files become SI dataclasses; malformed files give one StudyError naming the key."""

import copy
import math
import tomllib

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from helpers import BASE_TOML, SCENARIOS
from tubeyield.errors import StudyError
from tubeyield.study import load_study, study_from_dict
from tubeyield.study.equation import parse_equation
from tubeyield.study.units import to_si


def test_demo_study_loads_in_si():
    study = load_study(SCENARIOS / "oxidation.toml")
    main = study.reaction("main")
    # 0.010 L/(mol s) = 1e-5 m^3/(mol s); 60 kJ/mol = 60000 J/mol
    assert math.exp(main.k.ln_k_ref) == pytest.approx(1e-5, rel=1e-12)
    assert main.k.Ea == 60000.0 and main.k.T_ref == 350.0
    assert study.feed.flow == pytest.approx(2e-3 / 60, rel=1e-12)
    assert dict(study.feed.conc)["A"] == pytest.approx(1000.0)
    tau = study.decision("tau")
    assert (tau.low, tau.high, tau.unit) == (30.0, 5400.0, "min")
    assert study.decision("ratio.O").high == 3.0
    assert [lim.text for lim in study.goal.limits] == ["conversion:A >= 0.80", "yield:C <= 0.10", "T <= 400 K"]
    assert study.includes and study.includes[0].ref == "oxidation-network.toml"


def test_units_convert_and_offset_temperatures():
    assert to_si("80 degC", "temperature", "k") == pytest.approx(353.15)
    assert to_si("2 L/min", "flow", "k") == pytest.approx(2e-3 / 60)
    assert to_si("2 bar", "pressure", "k") == pytest.approx(2e5)


def test_pre_exponential_factor_equals_reference_form(base_doc):
    # k(T) = A exp(-Ea/RT): give A so that k(350 K) is 0.1 1/s and compare with the reference form.
    R = 8.314462618
    A = 0.1 / math.exp(-50000 / (R * 350))
    del base_doc["reaction"][0]["k"]
    base_doc["reaction"][0]["A"] = f"{A!r} 1/s"
    study = study_from_dict(base_doc)
    r = study.reaction("r1")
    assert math.exp(r.k.ln_value(350.0, math)) == pytest.approx(0.1, rel=1e-12)
    assert math.exp(r.k.ln_value(400.0, math)) == pytest.approx(A * math.exp(-50000 / (R * 400)), rel=1e-12)


def test_equation_parsing():
    eq = parse_equation("A + 2 B -> C", "k")
    assert eq.reactants == (("A", 1.0), ("B", 2.0)) and eq.products == (("C", 1.0),) and not eq.reversible
    assert parse_equation("A <=> B", "k").reversible
    assert parse_equation("2A -> B", "k").reactants == (("A", 2.0),)


def test_reversible_and_adsorption_units(base_doc):
    base_doc["reaction"][0].update(equation="A <=> B", K="4.0")
    base_doc["reaction"][1].update(law="adsorption", adsorption={"A": {"K": "0.5 L/mol"}}, denominator_power=2)
    study = study_from_dict(base_doc)
    assert study.reaction("r1").law.ln_K_ref == pytest.approx(math.log(4.0))
    # 0.5 L/mol = 5e-4 m^3/mol
    assert math.exp(study.reaction("r2").law.terms[0][1].ln_K_ref) == pytest.approx(5e-4)


def test_include_shares_one_network(tmp_path):
    (tmp_path / "net.toml").write_text(
        '[species.A]\n[species.B]\n[[reaction]]\nid = "r"\nequation = "A -> B"\nk = "1 1/s"\n')
    body = BASE_TOML.split("[feed]")[1]
    for name in ("s1", "s2"):
        (tmp_path / f"{name}.toml").write_text(
            f'[study]\nname = "{name}"\ninclude = "net.toml"\n[feed]' + body.replace('"yield:B"', '"yield:B"'))
    studies = [load_study(tmp_path / f"{n}.toml") for n in ("s1", "s2")]
    assert all(s.reactions[0].id == "r" for s in studies)


def _set(doc, path, value):
    """Set doc[path] where path is a tuple of keys/indices; value None deletes the key."""
    node = doc
    for p in path[:-1]:
        node = node[p]
    if value is None:
        del node[path[-1]]
    else:
        node[path[-1]] = value


# (description, mutations [(path, value or None to delete)], expected key path in the message, expected text)
MALFORMED = [
    ("missing feed", [(("feed",), None)], "feed", "missing"),
    ("missing flow", [(("feed", "flow"), None)], "feed.flow", "missing"),
    ("missing tau", [(("operate", "tau"), None)], "operate.tau", "residence time"),
    ("missing goal", [(("goal",), None)], "goal", "missing"),
    ("missing equation", [(("reaction", 0, "equation"), None)], "reaction.r1.equation", "missing"),
    ("unknown species in equation", [(("reaction", 0, "equation"), "A -> Q")], "reaction.r1.equation", "'Q'"),
    ("bad unit", [(("reaction", 0, "Ea"), "50 kJ/furlong_squared")], "reaction.r1.Ea", "known unit"),
    ("wrong dimension", [(("reaction", 0, "Ea"), "50 K")], "reaction.r1.Ea", "molar energy"),
    ("second order k in 1/s", [(("reaction", 0, "orders"), {"A": 2})], "reaction.r1.k", "concentration^-1/time"),
    ("negative order", [(("reaction", 0, "orders"), {"A": -1})], "reaction.r1.orders.A", "non-negative"),
    ("duplicate reaction id", [(("reaction", 1, "id"), "r1")], "reaction[1].id", "unique"),
    ("empty network", [(("reaction",), [])], "reaction", "empty"),
    ("no species", [(("species",), {})], "species", "at least one"),
    ("non-numeric quantity", [(("feed", "conc", "A"), "lots mol/L")], "feed.conc.A", "number followed by a unit"),
    ("range low > high", [(("operate", "T"), ["400 K", "300 K"])], "operate.T", "low <= high"),
    ("unknown key hint", [(("reactor", "elemnts"), 10)], "reactor.elemnts", "did you mean 'elements'"),
    ("unknown top-level table", [(("reactr",), {})], "reactr", "did you mean 'reactor'"),
    ("unknown law", [(("reaction", 0, "law"), "magic")], "reaction.r1.law", "power"),
    ("no arrow", [(("reaction", 0, "equation"), "A = B")], "reaction.r1.equation", "arrow"),
    ("reversible without K", [(("reaction", 0, "equation"), "A <=> B")], "reaction.r1.K", "equilibrium"),
    ("reversible law on ->", [(("reaction", 0, "law"), "reversible")], "reaction.r1.law", "'<=>'"),
    ("both k and A", [(("reaction", 0, "A"), "1e6 1/s")], "reaction.r1.k", "exactly one"),
    ("Ea without T_ref", [(("reaction", 0, "T_ref"), None)], "reaction.r1.T_ref", "missing"),
    ("negative concentration", [(("feed", "conc", "A"), "-1 mol/L")], "feed.conc.A", "non-negative"),
    ("no positive feed", [(("feed", "conc", "A"), "0 mol/L")], "feed.conc", "positive inlet"),
    ("bad phase", [(("feed", "phase"), "plasma")], "feed.phase", "liquid"),
    ("bad reactor kind", [(("reactor", "kind"), "tube")], "reactor.kind", "plug"),
    ("bad heat mode", [(("reactor", "heat"), "warm")], "reactor.heat", "isothermal"),
    ("cooled without U", [(("reactor", "heat"), "cooled")], "reactor.U", "heat-transfer"),
    ("bad metric", [(("goal", "maximize"), "happiness:B")], "goal.maximize", "kind:species"),
    ("metric of unknown species", [(("goal", "maximize"), "yield:Z")], "goal.maximize", "'Z'"),
    ("bad limit", [(("goal", "limits"), ["conversion:A > 0.5"])], "goal.limits[0]", ">="),
    ("limit wrong unit", [(("goal", "limits"), ["T <= 400 mol"])], "goal.limits[0]", "temperature"),
    ("max and min", [(("goal", "minimize"), "yield:C")], "goal.maximize", "exactly one"),
    ("key not fed", [(("goal", "key"), "B")], "goal.key", "not fed"),
    ("string for number", [(("reactor", "elements"), "many")], "reactor.elements", "integer"),
    ("boolean for number", [(("reactor", "elements"), True)], "reactor.elements", "integer"),
    ("negative residence time", [(("operate", "tau"), ["-1 s", "10 s"])], "operate.tau", "positive"),
    ("bad formula", [(("species", "A", "formula"), "C2Xq4")], "species.A.formula", "element"),
    ("species symbol", [(("species", "2A"), {})], "species.2A", "symbol"),
    ("zero coefficient", [(("reaction", 0, "equation"), "0 A -> B")], "reaction.r1.equation", "positive"),
    ("no net change", [(("reaction", 0, "equation"), "A -> A")], "reaction.r1.equation", "no net change"),
    ("T_in for isothermal", [(("operate", "T_in"), "300 K")], "operate.T_in", "only for"),
    ("ratio and conc", [(("operate", "ratio"), {"A": [1, 2]})], "operate.ratio.A", "not both"),
    ("adsorption missing table", [(("reaction", 0, "law"), "adsorption")], "reaction.r1.adsorption", "missing"),
    ("not a table", [(("feed",), "hot")], "feed", "table"),
]


@pytest.mark.parametrize("name,mutations,key,text", MALFORMED, ids=[m[0] for m in MALFORMED])
def test_malformed_study_names_key(base_doc, name, mutations, key, text):
    for path, value in mutations:
        _set(base_doc, path, value)
    with pytest.raises(StudyError) as info:
        study_from_dict(base_doc)
    line = info.value.line()
    assert line.startswith(key + ":"), line
    assert text in line, line


def test_error_names_the_file(tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text(BASE_TOML.replace('Ea = "50 kJ/mol"', 'Ea = "50 kJ"'))
    with pytest.raises(StudyError) as info:
        load_study(bad)
    assert info.value.line().startswith(f"{bad}: reaction.r1.Ea:")


def test_error_in_included_network_names_that_file(tmp_path):
    (tmp_path / "net.toml").write_text('[species.A]\n[[reaction]]\nid = "r"\nequation = "A -> B"\nk = "1 1/s"\n')
    (tmp_path / "s.toml").write_text('[study]\ninclude = "net.toml"\n' + BASE_TOML.split("[[reaction]]")[0].split("[study]")[0])
    with pytest.raises(StudyError) as info:
        load_study(tmp_path / "s.toml")
    # B is declared nowhere: the mistake is in the network file, and the error says so
    assert info.value.line().startswith(f"{tmp_path / 'net.toml'}: reaction.r.equation:"), info.value.line()
    assert "'B'" in info.value.line()


def test_invalid_toml_and_missing_file(tmp_path):
    bad = tmp_path / "x.toml"
    bad.write_text("[feed\nflow = 1")
    with pytest.raises(StudyError, match="valid TOML"):
        load_study(bad)
    with pytest.raises(StudyError, match="no such file"):
        load_study(tmp_path / "none.toml")


# ---------------------------------------------------------------------------------------------- property: mutations

_JUNK = st.one_of(st.none(), st.booleans(), st.integers(-10**6, 10**6), st.floats(allow_nan=True),
                  st.text(max_size=12), st.lists(st.text(max_size=5), max_size=3),
                  st.dictionaries(st.text(max_size=4), st.integers(), max_size=2),
                  st.sampled_from(["1 mol/L", "350 K", "-3 s", "1e400 K", "nan K", "2 L/min", "A -> B", "A <=> Q",
                                   "yield:B", "T <= 4 K", "inf", "0 1/s", "1 kJ/mol", "[]", "", "  "]))


def _paths(node, prefix=()):
    out = [prefix] if prefix else []
    if isinstance(node, dict):
        for k, v in node.items():
            out += _paths(v, prefix + (k,))
    elif isinstance(node, list):
        for i, v in enumerate(node):
            out += _paths(v, prefix + (i,))
    return out


BASE_PATHS = _paths(tomllib.loads(BASE_TOML))


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.lists(st.tuples(st.sampled_from(BASE_PATHS), _JUNK, st.booleans()), min_size=1, max_size=4))
def test_mutated_studies_raise_only_study_errors(mutations):
    doc = tomllib.loads(BASE_TOML)
    for path, junk, delete in mutations:
        try:
            _set(doc, path, None if delete else junk)
        except (KeyError, IndexError, TypeError):
            continue  # the path vanished under an earlier mutation
    try:
        study_from_dict(copy.deepcopy(doc))
    except StudyError:
        pass
