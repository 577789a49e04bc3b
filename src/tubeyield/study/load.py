"""TOML study file -> Study (SI units), with errors that name the file, the key path and what was expected.

The front door: files and includes here, one module per part of the file (read_network, read_operation, read_goal,
read_sweep), the TOML table helper in toml.py.
"""

from __future__ import annotations

import math
import re
from dataclasses import replace
from pathlib import Path

from tubeyield.errors import StudyError
from tubeyield.study.read_goal import read_front, read_goal, read_numerics, read_window
from tubeyield.study.read_network import merge_unique, read_reactions, read_species, resolve_reaction
from tubeyield.study.read_operation import read_feed, read_operate, read_reactor
from tubeyield.study.read_fit import read_experiments, read_fit
from tubeyield.study.read_robust import read_robust
from tubeyield.study.read_sweep import read_sweep
from tubeyield.study import caps
from tubeyield.study.kinetics import GAS_CONSTANT
from tubeyield.study.schema import Feed, Reactor, Rival, SourceFile, Species, Study
from tubeyield.study.toml import Table, parse_toml, read_text

NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9 _.+()-]{0,99}$")
OPTIONAL_SECTIONS = ("front", "window", "sweep", "fit", "robust")


def load_study(path, *, need=OPTIONAL_SECTIONS) -> Study:
    """Read a study file and its includes. Every user mistake comes out as a StudyError naming the file.

    `need` lists the optional sections ([front], [window], [sweep]) whose mistakes are errors; a mistake in any other
    optional section is kept on the study (`Study.section_errors`) and the section left out, so that a job is not
    refused over a section it does not use."""
    path = Path(path)
    text = read_text(path, "study file")
    return study_from_text(text, path=str(path), includes=_IncludesOnDisk(path), need=need)


def study_from_text(text: str, *, path: str = "", includes=None, need=OPTIONAL_SECTIONS) -> Study:
    """A study from its TOML text. `includes` maps an include as the study writes it to that file's text (a dict,
    or the disk reader `load_study` uses); nothing is read from or written to disk for a dict."""
    try:
        doc = parse_toml(text)
        return study_from_dict(doc, path=path, source=text, includes=includes, need=need)
    except StudyError as exc:
        raise exc.in_file(path or "study") from None


def study_from_sources(document: str, *, need=OPTIONAL_SECTIONS) -> Study:
    """Rebuild a study from `Study.sources_json()` (a sweep store, saved inputs): entirely in memory, nothing is
    written to any path the document names."""
    import json
    try:
        doc = json.loads(document)
        name, text, includes = doc["name"], doc["study"], doc["includes"]
        if not (isinstance(name, str) and isinstance(text, str) and isinstance(includes, dict)
                and all(isinstance(k, str) and isinstance(v, str) for k, v in includes.items())):
            raise TypeError("unexpected types")
    except (ValueError, KeyError, TypeError) as exc:
        raise StudyError("sources", f"a study document written by tubeyield ({exc})") from None
    study = study_from_text(text, path=Path(name).name, includes=dict(includes), need=need)
    if isinstance(doc.get("kinetics"), dict):
        from tubeyield.study.read_kinetics import fitted_from_dict, with_kinetics
        study = with_kinetics(study, fitted_from_dict(doc["kinetics"], "sources"))
    return study


TOP_KEYS = ("study", "species", "reaction", "feed", "reactor", "operate", "goal", "front", "window", "sweep", "numerics",
            "experiment", "fit", "robust")


class _IncludesOnDisk:
    """Network files named by a study on disk: relative paths inside the study's folder, each read once."""

    def __init__(self, study_path: Path):
        self.folder = study_path.parent

    def __call__(self, ref: str, key: str = "study.include", what: str = "network file") -> tuple[str, str]:
        """(the file's path for messages, its text)."""
        rel = Path(ref)
        if rel.is_absolute() or ".." in rel.parts or "\0" in ref or not ref.strip():
            raise StudyError(key, f"a {what} path relative to the study's folder, without '..'; got {ref!r}")
        target = self.folder / rel
        try:
            inside = target.resolve().is_relative_to(self.folder.resolve())
        except OSError:
            inside = False
        if not inside:
            raise StudyError(key, f"a {what} inside the study's folder; {ref!r} leads outside it (a link?): copy "
                                  "it next to the study")
        if not target.is_file():
            raise StudyError(key, f"an existing {what}; {ref!r} " + ("is a folder" if target.is_dir() else
                                                                     "does not exist"))
        return str(target), read_text(target, what)


def _read_includes(include, reader) -> list[tuple[str, str, str]]:
    """[(ref as written, path for messages, text)] for the study's includes, each file once."""
    refs = [include] if isinstance(include, str) else include or []
    out, seen = [], {}
    for i, ref in enumerate(refs):
        if not isinstance(ref, str):
            raise StudyError("study.include", f"file paths as strings, got {ref!r}")
        if reader is None:
            raise StudyError("study.include", "a study read from a file (includes are relative to its folder)")
        if isinstance(reader, dict):
            if ref not in reader:
                raise StudyError("study.include", f"the text of the included file {ref!r}; it is missing")
            where, text = ref, reader[ref]
        else:
            where, text = reader(ref)
        key = Path(where).resolve() if not isinstance(reader, dict) else ref
        if key in seen:
            raise StudyError(f"study.include[{i}]", f"each network file once; {ref!r} is the same file as "
                                                    f"{seen[key]!r}")
        seen[key] = ref
        out.append((ref, where, text))
    return out


def study_from_dict(doc: dict, *, path: str = "", source: str = "", includes=None,
                    need=OPTIONAL_SECTIONS) -> Study:
    top = Table(doc, "")
    head = top.table("study", {})
    name = head.take("name", Path(path).stem or "study", types=str)
    if not NAME.match(name) or ".." in name:
        raise StudyError("study.name", "a name of letters, digits, spaces and . _ + - ( ), starting with a letter or "
                                       f"digit, at most 100 characters and without '..' (it names report folders); "
                                       f"got {name!r}")
    description = head.take("description", "", types=str)
    include = head.take("include", None, types=(str, list), what="a network file path or a list of them")
    head.close()
    if includes is None and path:
        includes = _IncludesOnDisk(Path(path))

    species: list[Species] = []
    reactions: list = []
    sources: list[SourceFile] = []
    for ref, where, text in _read_includes(include, includes):
        try:
            net = Table(parse_toml(text), "")
            if net.has("study"):
                raise StudyError("study", "only [species.*] and [[reaction]] in an included network file; nested "
                                          "includes and [study] settings there are not read: list every network "
                                          "file in the study's own [study].include")
            species += read_species(net.take("species", {}, types=dict, what="a table of species"), "species")
            included = read_reactions(net.take("reaction", [], types=list, what="[[reaction]] entries"))
            for r in included:
                r.file = where
            reactions += included
            net.close(("species", "reaction"))
        except StudyError as exc:
            raise exc.in_file(where) from None
        sources.append(SourceFile(ref, text))

    own_species = read_species(top.take("species", {}, types=dict, what="a table of species"), "species")
    merge_unique(species, own_species, "species", lambda s: s.symbol)
    symbols = {s.symbol for s in species}
    if not symbols:
        raise StudyError("species", "at least one species, e.g. [species.A]")
    caps.at_most(len(symbols), caps.MAX_SPECIES, "species", "a number of species")
    own_reactions = read_reactions(top.take("reaction", [], types=list, what="[[reaction]] entries"))
    merge_unique(reactions, own_reactions, "reaction", lambda r: r.id)
    if not reactions:
        raise StudyError("reaction", "at least one [[reaction]]; the network is empty")
    caps.at_most(len(reactions), caps.MAX_REACTIONS, "reaction", "a number of reactions")
    files = {r.id: r.file for r in reactions}
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
    numerics = read_numerics(top.table("numerics", {}))
    deferred = []

    def optional(section: str, read):
        try:
            return read()
        except StudyError as exc:
            if section in need:
                raise
            deferred.append((section, exc))
            return None

    data_files: list[SourceFile] = []

    def read_data(ref: str, key: str, what: str = "measurement file") -> tuple[str, str]:
        if includes is None:
            raise StudyError(key, f"a study read from a file ({what}s are relative to its folder)")
        if isinstance(includes, dict):
            if ref not in includes:
                raise StudyError(key, f"the text of the {what} {ref!r}; it is missing")
            where, text = ref, includes[ref]
        else:
            where, text = includes(ref, key, what)
        if all(f.ref != ref for f in data_files):
            data_files.append(SourceFile(ref, text))
        return where, text

    def read_lab():
        runs = read_experiments(top.take("experiment", [], types=list, what="[[experiment]] entries"), symbols,
                                read_data)
        for e in runs:
            if e.vessel != "batch" and feed.phase == "gas":
                raise StudyError(f"experiment.{e.id}.vessel", f"'batch', or '{e.vessel}' for a liquid study only (a "
                                                              "gas changes volume as it reacts; not fitted yet)")

        def read_rival(ref: str, key: str) -> Rival:
            where, text = read_data(ref, key, "rival network file")
            return _rival(ref, where, text, runs)

        return runs, read_fit(top.table("fit", None), tuple(reactions), runs, symbols, read_rival)

    experiments, fit = optional("fit", read_lab) or ((), None)
    front = optional("front", lambda: read_front(top.table("front", None), symbols))
    window = optional("window", lambda: read_window(top.table("window", None), decisions))
    robust = optional("robust", lambda: read_robust(top.table("robust", None)))
    top.close(TOP_KEYS)

    _check_heat_needs(reactor, reactions, by_symbol, feed, decisions)
    try:
        check_damkohler(reactions, feed, decisions, goal)
    except StudyError as exc:
        raise exc.in_file(files.get(exc.key.split(".")[1]) or path) from None
    study = Study(name=name, species=tuple(species), reactions=tuple(reactions), feed=feed, reactor=reactor,
                  decisions=tuple(decisions), goal=goal, front=front, window=window, numerics=numerics,
                  experiments=experiments, fit=fit, robust=robust,
                  description=description, path=path, source=source, includes=tuple(sources + data_files))
    sweep = optional("sweep", lambda: read_sweep(top.table("sweep", None), study))
    return replace(study, sweep=sweep, section_errors=tuple(deferred))


def _rival(ref: str, where: str, text: str, runs) -> Rival:
    """A rival network file ([fit] rivals): species and reactions only, holding every species the experiments start
    with or measure."""
    try:
        net = Table(parse_toml(text), "")
        species = read_species(net.take("species", {}, types=dict, what="a table of species"), "species")
        raw = read_reactions(net.take("reaction", [], types=list, what="[[reaction]] entries"))
        net.close(("species", "reaction"))
        symbols = {s.symbol for s in species}
        if not raw:
            raise StudyError("reaction", "at least one [[reaction]] in a rival network")
        needed = sorted({s for e in runs for s, _ in e.series} | {s for e in runs for s, v in e.start if v})
        missing = [s for s in needed if s not in symbols]
        if missing:
            raise StudyError("species", "every species the experiments start with or measure; missing "
                                        + ", ".join(missing))
        reactions = tuple(resolve_reaction(r, symbols, i) for i, r in enumerate(raw))
    except StudyError as exc:
        raise exc.in_file(where) from None
    return Rival(ref, tuple(species), reactions)


def check_damkohler(reactions, feed: Feed, decisions, goal) -> None:
    """Refuse rate constants that make a reaction complete within 1e-12 of the residence time at the study's
    hottest temperature (an overflowing or hopelessly stiff model; usually a unit mistake). The Damkoehler number
    Da = k(T) tau c^(n-1) (common practice), in logarithms so that no exp() overflows."""
    temps = [d.high for d in decisions if d.si_unit == "K"] + ([feed.T] if feed.T else [])
    temps += [lim.bound for lim in goal.limits if lim.metric is None]
    tau = max(d.high for d in decisions if d.name == "tau")
    if feed.phase == "liquid":
        c = sum(v for _, v in feed.conc) + sum(d.high for d in decisions if d.name.startswith("ratio.")) \
            * dict(feed.conc).get(goal.key, 0.0)
    else:
        c = feed.pressure / (GAS_CONSTANT * (min(temps) if temps else 298.15))
    c = max(c, 1e-300)
    for r in reactions:
        T = max(temps) if temps else r.k.T_ref
        ln_da = r.k.ln_value(T, math) + math.log(tau) - r.k_power * math.log(c)
        if ln_da > math.log(caps.MAX_DAMKOHLER):
            raise StudyError(f"reaction.{r.id}.k", f"a rate constant whose Damkoehler number k tau c^(n-1) stays "
                                                   f"below {caps.MAX_DAMKOHLER:g} over the study's temperatures and "
                                                   f"residence times; it is e^{ln_da:.0f} at {T:g} K and {tau:g} s "
                                                   "(check the units of k, A and Ea, or model the step as "
                                                   "instantaneous)")


def _check_heat_needs(reactor: Reactor, reactions, species: dict[str, Species], feed: Feed, decisions) -> None:
    if reactor.mode.energy_balance:
        for r in reactions:
            if r.dH is None:
                raise StudyError(f"reaction.{r.id}.dH", f"the heat of reaction for heat = '{reactor.heat}'")
        for s in species.values():
            if s.Cp is None:
                raise StudyError(f"species.{s.symbol}.Cp", f"a molar heat capacity for heat = '{reactor.heat}'")
    if feed.phase == "gas" and reactor.heat == "free" and feed.T is None:
        raise StudyError("feed.T", "the feed temperature (at which the gas flow is measured) for heat = 'free'")
