"""TOML study file -> Study (SI units), with errors that name the file, the key path and what was expected.

The front door: files and includes here, one module per part of the file (read_network, read_operation, read_goal,
read_sweep), the TOML table helper in toml.py.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

from tubeyield.errors import StudyError
from tubeyield.study.read_goal import read_front, read_goal, read_numerics, read_window
from tubeyield.study.read_network import merge_unique, read_reactions, read_species, resolve_reaction
from tubeyield.study.read_operation import read_feed, read_operate, read_reactor
from tubeyield.study.read_sweep import read_sweep
from tubeyield.study.schema import Feed, Reaction, Reactor, Species, Study
from tubeyield.study.toml import Table, read_toml

def load_study(path) -> Study:
    """Read a study file. Every user mistake comes out as a StudyError naming the file."""
    path = Path(path)
    doc, text = read_toml(path)
    try:
        return study_from_dict(doc, path=str(path), source=text)
    except StudyError as exc:
        raise exc.in_file(str(path)) from None


TOP_KEYS = ("study", "species", "reaction", "feed", "reactor", "operate", "goal", "front", "window", "sweep", "numerics")


def study_from_dict(doc: dict, *, path: str = "", source: str = "") -> Study:
    top = Table(doc, "")
    head = top.table("study", {})
    name = head.take("name", Path(path).stem or "study", types=str)
    description = head.take("description", "", types=str)
    include = head.take("include", None, types=(str, list), what="a network file path or a list of them")
    head.close()

    species: list[Species] = []
    reactions: list[Reaction] = []
    includes: list[tuple[str, str]] = []
    for inc in ([include] if isinstance(include, str) else include or []):
        if not isinstance(inc, str):
            raise StudyError("study.include", f"file paths as strings, got {inc!r}")
        inc_path = (Path(path).parent / inc) if path else Path(inc)
        if not inc_path.is_file():
            raise StudyError("study.include", f"an existing network file; {str(inc_path)!r} does not exist")
        inc_doc, inc_text = read_toml(inc_path)
        try:
            net = Table(inc_doc, "")
            species += read_species(net.take("species", {}, types=dict, what="a table of species"), "species")
            included = read_reactions(net.take("reaction", [], types=list, what="[[reaction]] entries"))
            for r in included:
                r.file = str(inc_path)
            reactions += included
            net.close(("species", "reaction", "study"))
        except StudyError as exc:
            raise exc.in_file(str(inc_path)) from None
        includes.append((str(inc_path), inc_text))

    own_species = read_species(top.take("species", {}, types=dict, what="a table of species"), "species")
    merge_unique(species, own_species, "species", lambda s: s.symbol)
    symbols = {s.symbol for s in species}
    if not symbols:
        raise StudyError("species", "at least one species, e.g. [species.A]")
    own_reactions = read_reactions(top.take("reaction", [], types=list, what="[[reaction]] entries"))
    merge_unique(reactions, own_reactions, "reaction", lambda r: r.id)
    if not reactions:
        raise StudyError("reaction", "at least one [[reaction]]; the network is empty")
    resolved = []
    for i, r in enumerate(reactions):
        try:
            resolved.append(resolve_reaction(r, symbols, i))
        except StudyError as exc:
            raise (exc.in_file(r.file) if r.file else exc) from None
    reactions = resolved

    by_symbol = {s.symbol: s for s in species}
    feed = read_feed(top.table("feed"), symbols)
    reactor = read_reactor(top.table("reactor", {}))
    decisions = read_operate(top.table("operate"), reactor, feed, symbols)
    goal = read_goal(top.table("goal"), symbols, reactions, feed, decisions)
    front = read_front(top.table("front", None), symbols)
    window = read_window(top.table("window", None), decisions)
    numerics = read_numerics(top.table("numerics", {}))
    top.close(TOP_KEYS)

    _check_heat_needs(reactor, reactions, by_symbol, feed, decisions)
    study = Study(name=name, species=tuple(species), reactions=tuple(reactions), feed=feed, reactor=reactor,
                  decisions=tuple(decisions), goal=goal, front=front, window=window, numerics=numerics,
                  description=description, path=path, source=source, includes=tuple(includes))
    sweep = read_sweep(top.table("sweep", None), study)
    return replace(study, sweep=sweep) if sweep else study


def _check_heat_needs(reactor: Reactor, reactions, species: dict[str, Species], feed: Feed, decisions) -> None:
    if reactor.heat in ("adiabatic", "cooled"):
        for r in reactions:
            if r.dH is None:
                raise StudyError(f"reaction.{r.id}.dH", f"the heat of reaction for heat = '{reactor.heat}'")
        for s in species.values():
            if s.Cp is None:
                raise StudyError(f"species.{s.symbol}.Cp", f"a molar heat capacity for heat = '{reactor.heat}'")
    if feed.phase == "gas" and reactor.heat == "free" and feed.T is None:
        raise StudyError("feed.T", "the feed temperature (at which the gas flow is measured) for heat = 'free'")
