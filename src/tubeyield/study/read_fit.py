"""[[experiment]] and [fit]: lab runs with their measurement files, and what to estimate from them.

A measurement file is CSV with units in the header, e.g.

    # lines starting with '#' are comments
    t [min], A [mol/L], B [mol/L]
    0.5, 0.81, 0.20
    1.0, 0.62,

The first column is the time (batch) or residence time (plug flow, stirred tank); every other column is a species of
the network, or `run` to hold several runs in one file (`run = "..."` in the experiment picks its rows). Empty cells
are samples not taken. Units are read by pint; times must increase within a batch or plug-flow run (a stirred tank's
rows are separate steady states, in any order, replicates allowed).

Parameters a fit can estimate (`[fit] estimate`), by the sweep paths:
  reaction.<id>.k          rate constant at T_ref            reaction.<id>.Ea        activation energy
  reaction.<id>.dH         heat of reaction (the equilibrium's van 't Hoff term of a reversible step)
  reaction.<id>.<law>      a constant of the rate law (K of a reversible step, K.<s> and dH.<s> of adsorption)
  reaction.<id>.order.<s>  a forward order
"""

from __future__ import annotations

import csv
import io
import math
import re

from tubeyield.errors import StudyError
from tubeyield.study import caps
from tubeyield.study.schema import Experiment, FitSpec, Reaction
from tubeyield.study.toml import Table, number
from tubeyield.study.units import MAGNITUDE_CAPS, parse_quantity, to_si, ureg

# plug: a liquid plug-flow run sampled at residence times (constant density: the batch balance in residence time);
# stirred: a liquid stirred tank, one steady state per residence time
VESSELS = ("batch", "plug", "stirred")
_HEADER = re.compile(r"^\s*([A-Za-z_][\w.+\-()]*)\s*(?:\[(.*)\])?\s*$")
MAX_PROGRAMME = 1000                 # points of a temperature programme


def read_experiments(entries: list, symbols: set[str], reader) -> tuple[Experiment, ...]:
    """Every [[experiment]], its measurement file read through `reader(ref, key)` -> (path for messages, text)."""
    out: list[Experiment] = []
    for i, body in enumerate(entries):
        if not isinstance(body, dict):
            raise StudyError(f"experiment[{i}]", "a table of keys (id, vessel, T, start, data)")
        t = Table(body, f"experiment[{i}]")
        eid = t.take("id", f"run{i + 1}", types=str)
        t = Table(body, f"experiment.{eid}")
        if any(e.id == eid for e in out):
            raise StudyError(t.key("id"), f"a unique experiment id; {eid!r} is used twice")
        vessel = t.take("vessel", "batch", types=str)
        if vessel not in VESSELS:
            raise StudyError(t.key("vessel"), f"one of {', '.join(VESSELS)}, got {vessel!r}")
        T, programme = _temperature(t, vessel)
        start_t = t.table("start", what="the concentrations at time zero (batch) or at the inlet (plug), "
                                        "e.g. { A = '1 mol/L' }")
        start = {}
        for s, v in start_t.data.items():
            if s not in symbols:
                raise StudyError(start_t.key(s), f"a species of the network, got {s!r}")
            start[s] = to_si(v, "concentration", start_t.key(s))
            if start[s] < 0:
                raise StudyError(start_t.key(s), f"a concentration of at least 0, got {v!r}")
        start_t.seen.update(start_t.data)
        if not any(start.values()):
            raise StudyError(t.key("start"), "at least one species with a positive concentration")
        ref = t.take("data", types=str, what="the measurement file (CSV with units in the header)")
        run = t.take("run", None, types=str)
        t.close(("id", "vessel", "T", "start", "data", "run"))
        where, text = reader(ref, t.key("data"))
        times, series = read_measurements(text, where, symbols, run, ordered=vessel != "stirred")
        if vessel == "stirred" and any(x <= 0 for x in times):
            raise StudyError("tau", "positive residence times for a stirred-tank run (each row is a steady state)",
                             file=where)
        out.append(Experiment(eid, vessel, T, tuple(start.items()), times, series, ref, programme))
    caps.at_most(len(out), caps.MAX_EXPERIMENTS, "experiment", "a number of experiments")
    return tuple(out)


def _temperature(t: Table, vessel: str) -> tuple[float, tuple]:
    """The experiment's T: a quantity, or a programme [[time, temperature], ...] (batch and plug flow), followed
    piecewise linearly and held after its last point. Returns (T, programme); for a programme T is the
    time-weighted reciprocal mean over its span (where the fit centres the Arrhenius terms)."""
    value = t.take("T", what="the experiment's temperature, e.g. '340 K', or a programme [['0 min', '330 K'], "
                             "['20 min', '350 K']]")
    if not isinstance(value, list):
        T = to_si(value, "temperature", t.key("T"))
        if T <= 0:
            raise StudyError(t.key("T"), "an absolute temperature above 0 K")
        return T, ()
    if vessel == "stirred":
        raise StudyError(t.key("T"), "one temperature for a stirred-tank run (its rows are steady states)")
    if not 2 <= len(value) <= MAX_PROGRAMME:
        raise StudyError(t.key("T"), f"a programme of 2 to {MAX_PROGRAMME} [time, temperature] points")
    pts = []
    for i, pair in enumerate(value):
        key = f"{t.key('T')}[{i}]"
        if not (isinstance(pair, list) and len(pair) == 2):
            raise StudyError(key, "a [time, temperature] pair such as ['10 min', '345 K']")
        tt, TT = to_si(pair[0], "time", f"{key}[0]"), to_si(pair[1], "temperature", f"{key}[1]")
        if TT <= 0:
            raise StudyError(f"{key}[1]", "an absolute temperature above 0 K")
        if tt < 0 or (pts and tt <= pts[-1][0]):
            raise StudyError(f"{key}[0]", "times from 0 that increase from point to point")
        pts.append((tt, TT))
    span = pts[-1][0] - pts[0][0]
    # reciprocal mean of T over the programme (trapezoid rule on 1/T between the points)
    inv = sum(0.5 * (1 / a[1] + 1 / b[1]) * (b[0] - a[0]) for a, b in zip(pts[:-1], pts[1:])) / span
    return 1.0 / inv, tuple(pts)


def read_measurements(text: str, where: str, symbols: set[str], run: str | None, *, ordered: bool = True):
    """(times in s, ((species, values in mol/m^3 with NaN where not sampled), ...)) from a measurement CSV. With
    `ordered`, times must increase (batch and plug-flow runs); otherwise rows are separate steady states."""
    rows = list(csv.reader(io.StringIO(text)))
    rows = [r for r in rows if any(c.strip() for c in r) and not r[0].lstrip().startswith("#")]
    if len(rows) < 2:
        raise StudyError("", "a header row and at least one row of measurements", file=where)
    columns = []
    for j, cell in enumerate(rows[0]):
        m = _HEADER.match(cell)
        if not m:
            raise StudyError(f"column {j + 1}", f"a header such as 't [min]' or 'A [mol/L]', got {cell!r}",
                             file=where)
        columns.append((m.group(1), (m.group(2) or "").strip()))
    names = [c[0] for c in columns]
    if len(set(names)) != len(names):
        raise StudyError("header", f"each column once, got {', '.join(names)}", file=where)
    tc = 1 if names[0] == "run" and len(names) > 1 else 0          # the time column (after a leading run column)
    time_name, time_unit = columns[tc]
    if time_name not in ("t", "time", "tau"):
        raise StudyError(f"column {tc + 1}", f"the time first, headed 't [unit]', 'time [unit]' or 'tau [unit]'; "
                                             f"got {rows[0][tc]!r}", file=where)
    time_factor = _factor(time_unit, "s", "time", f"column {tc + 1}", where)
    has_run = "run" in names
    if run is not None and not has_run:
        raise StudyError("header", f"a 'run' column (the experiment picks run {run!r})", file=where)
    if has_run and run is None:
        raise StudyError("header", "one run per experiment: the file has a 'run' column, so give the experiment "
                                   "run = '<name>'", file=where)
    species = []
    for j, (name, unit) in enumerate(columns, start=1):
        if name == "run" or j == tc + 1:
            continue
        if name not in symbols:
            raise StudyError(f"column {j}", f"a species of the network or 'run'; {name!r} is not one "
                                            f"(species: {', '.join(sorted(symbols))})", file=where)
        species.append((j - 1, name, _factor(unit, "mol/m^3", "concentration", f"column {j}", where)))
    if not species:
        raise StudyError("header", "at least one measured species column", file=where)
    run_col = names.index("run") if has_run else None
    times: list[float] = []
    values: dict[str, list[float]] = {s: [] for _, s, _ in species}
    for n, row in enumerate(rows[1:], start=2):
        if run_col is not None and (row[run_col].strip() if run_col < len(row) else "") != run:
            continue
        if len(row) > len(columns):
            raise StudyError(f"row {n}", f"at most {len(columns)} cells, got {len(row)}", file=where)
        row = row + [""] * (len(columns) - len(row))
        tkey = f"row {n}, column {tc + 1}"
        t = _cell(row[tc], tkey, where)
        if t is None:
            raise StudyError(tkey, "a time in every row", file=where)
        t *= time_factor
        if t > MAGNITUDE_CAPS["time"]:
            raise StudyError(tkey, f"a time of at most {MAGNITUDE_CAPS['time']:g} s (tubeyield's cap), got "
                                   f"{row[tc].strip()}", file=where)
        if t < 0:
            raise StudyError(tkey, f"a time of at least 0, got {row[tc].strip()}", file=where)
        if ordered and times and t <= times[-1]:
            raise StudyError(tkey, f"times that increase from row to row, got {row[tc].strip()} after "
                                   f"{times[-1] / time_factor:g}", file=where)
        times.append(t)
        for j, s, factor in species:
            v = _cell(row[j], f"row {n}, column {j + 1}", where)
            if v is not None and v < 0:
                raise StudyError(f"row {n}, column {j + 1}", f"a concentration of at least 0, got {row[j].strip()}",
                                 file=where)
            if v is not None and v * factor > MAGNITUDE_CAPS["concentration"]:
                raise StudyError(f"row {n}, column {j + 1}", "a concentration of at most "
                                 f"{MAGNITUDE_CAPS['concentration'] / 1000:g} mol/L (tubeyield's cap), got "
                                 f"{row[j].strip()}", file=where)
            values[s].append(math.nan if v is None else v * factor)
    if not times:
        raise StudyError("run", f"rows of run {run!r}; the file has none", file=where)
    caps.at_most(len(times), caps.MAX_SAMPLES, f"{where}", "a number of sampling times")
    return tuple(times), tuple((s, tuple(v)) for s, v in values.items())


def _factor(unit: str, si: str, kind: str, key: str, where: str) -> float:
    if not unit:
        raise StudyError(key, f"a unit in brackets in the header, e.g. '[{'min' if kind == 'time' else 'mol/L'}]'",
                         file=where)
    try:
        q = parse_quantity(f"1 {unit}", key)
        return float(q.to(ureg(si)).magnitude)
    except StudyError:
        raise StudyError(key, f"a known unit, could not read {unit!r}", file=where) from None
    except Exception:  # pint: a dimensionality error
        raise StudyError(key, f"a unit of {kind}, got {unit!r}", file=where) from None


def _cell(text: str, key: str, where: str) -> float | None:
    text = text.strip()
    if not text:
        return None
    try:
        v = float(text)
    except ValueError:
        raise StudyError(key, f"a number or an empty cell, got {text!r}", file=where) from None
    if not math.isfinite(v):
        raise StudyError(key, f"a finite number, got {text!r}", file=where)
    return v


def fit_path(path, reactions, key: str) -> tuple[str, str]:
    """(reaction id, name) of an estimable path 'reaction.<id>.<name>' (module docstring); a StudyError naming
    `key` otherwise."""
    by_id = {r.id: r for r in reactions}
    parts = path.split(".") if isinstance(path, str) else []
    if len(parts) < 3 or parts[0] != "reaction" or parts[1] not in by_id:
        raise StudyError(key, f"a path 'reaction.<id>.<k|Ea|dH|law constant|order.<species>>' with an id of the "
                              f"network ({', '.join(sorted(by_id))}); got {path!r}")
    r = by_id[parts[1]]
    name = ".".join(parts[2:])
    law_paths = r.law.paths()
    if name in ("k", "Ea") or name in law_paths:
        return r.id, name
    if name == "dH":
        if not r.reversible:
            raise StudyError(key, f"'dH' only for a reversible step (its equilibrium's temperature dependence); "
                                  f"reaction {r.id!r} is not reversible, and a fit of concentrations does not see "
                                  "its heat")
        return r.id, name
    if name.startswith("order.") and name[len("order."):] in dict(r.orders):
        return r.id, name
    choices = ["k", "Ea"] + (["dH"] if r.reversible else []) + list(law_paths) + \
        [f"order.{s}" for s, _ in r.orders]
    raise StudyError(key, f"one of {', '.join(choices)} after 'reaction.{r.id}.', got {name!r}")


def _bound_to_si(value, name: str, reaction: Reaction, key: str) -> float:
    from tubeyield.study.units import rate_constant_to_si
    if name == "k":
        return rate_constant_to_si(value, reaction.k_power, key)
    if name in ("Ea", "dH"):
        return to_si(value, "molar_energy", key)
    if name.startswith("order."):
        return number(value, key)
    lp = reaction.law.paths()[name]
    if lp.kind == "constant":
        return rate_constant_to_si(value, lp.power or 0.0, key, per="none")
    return to_si(value, lp.kind, key)


def _positive(name: str, reaction: Reaction) -> bool:
    """Whether the parameter is estimated as a logarithm (rate constants and positive law constants)."""
    return name == "k" or (name in reaction.law.paths() and reaction.law.paths()[name].log)


def read_fit(t: Table | None, reactions: tuple[Reaction, ...], experiments: tuple[Experiment, ...],
             symbols: set[str], read_rival=None) -> FitSpec | None:
    """[fit]: estimate = ['reaction.<id>.k', ...], optional bounds, the error model, starts, rival networks.
    `read_rival(ref, key)` -> Rival reads a rival network file (load.py)."""
    if t is None:
        return None
    if not experiments:
        raise StudyError("experiment", "at least one [[experiment]] with measurements for [fit]")
    paths = t.take("estimate", types=list, what="a list of parameter paths such as 'reaction.main.k'")
    if not paths:
        raise StudyError(t.key("estimate"), "at least one parameter path to estimate")
    by_id = {r.id: r for r in reactions}
    parsed = [fit_path(p, reactions, f"{t.key('estimate')}[{i}]") for i, p in enumerate(paths)]
    if len(set(paths)) != len(paths):
        raise StudyError(t.key("estimate"), "each path once")
    bounds_t = t.table("bounds", {}, what="a table of [low, high] per estimated path")
    bounds = []
    for p, body in bounds_t.data.items():
        key = bounds_t.key(p)
        if p not in paths:
            raise StudyError(key, "a path listed in estimate")
        if not (isinstance(body, list) and len(body) == 2):
            raise StudyError(key, "[low, high], e.g. ['20 kJ/mol', '150 kJ/mol']")
        rid, name = parsed[paths.index(p)]
        r = by_id[rid]
        low, high = (_bound_to_si(v, name, r, key) for v in body)
        if _positive(name, r) and low <= 0:
            raise StudyError(key, "positive bounds for a rate or equilibrium constant (it is estimated as its "
                                  "logarithm)")
        if not low < high:
            raise StudyError(key, f"low below high, got {body!r}")
        bounds.append((p, (low, high)))
    bounds_t.seen.update(bounds_t.data)
    err_t = t.table("error", {}, what="the measurement error per species, e.g. { A = '0.01 mol/L', B = '2 %' }")
    error = []
    measured = {s for e in experiments for s, _ in e.series}
    for s, v in err_t.data.items():
        key = err_t.key(s)
        if s not in measured:
            raise StudyError(key, f"a measured species ({', '.join(sorted(measured))}), got {s!r}")
        if isinstance(v, str) and v.strip().endswith("%"):
            rel = number(float(v.strip()[:-1]) if _is_number(v.strip()[:-1]) else math.nan, key, low=0.0) / 100
            if rel <= 0:
                raise StudyError(key, "a positive relative standard deviation")
            error.append((s, (0.0, rel)))
        else:
            sd = to_si(v, "concentration", key)
            if sd <= 0:
                raise StudyError(key, "a positive standard deviation")
            error.append((s, (sd, 0.0)))
    err_t.seen.update(err_t.data)
    if error and {s for s, _ in error} != measured:
        missing = sorted(measured - {s for s, _ in error})
        raise StudyError(err_t.path, f"an error for every measured species, or none (then one common standard "
                                     f"deviation is estimated from the residuals); missing: {', '.join(missing)}")
    n_data = sum(1 for e in experiments for _, v in e.series for i, x in enumerate(v)
                 if not math.isnan(x) and e.times[i] > 0)
    if n_data <= len(paths):
        raise StudyError(t.key("estimate"), f"fewer parameters than measured values; {len(paths)} parameter(s) "
                                            f"and {n_data} value(s) after time zero")
    elements = int(number(t.take("elements", 1), t.key("elements"), integer=True, low=1))
    caps.at_most(elements, 64, t.key("elements"), "a number of elements per sampling interval")
    starts = int(number(t.take("starts", 4), t.key("starts"), integer=True, low=1))
    caps.at_most(starts, caps.MAX_STARTS, t.key("starts"), "a number of starting points")
    rival_refs = t.take("rivals", [], types=list, what="a list of rival network files")
    rivals = []
    for i, ref in enumerate(rival_refs):
        key = f"{t.key('rivals')}[{i}]"
        if not isinstance(ref, str):
            raise StudyError(key, f"a network file path, got {ref!r}")
        if read_rival is None:
            raise StudyError(key, "a study read from a file (rival networks are relative to its folder)")
        rivals.append(read_rival(ref, key))
    caps.at_most(len(rivals), 20, t.key("rivals"), "a number of rival networks")
    t.close(("estimate", "bounds", "error", "elements", "starts", "rivals"))
    return FitSpec(tuple(paths), tuple(bounds), tuple(error), elements, starts, tuple(rivals))


def _is_number(text: str) -> bool:
    try:
        float(text)
        return True
    except ValueError:
        return False
