"""Verification and mesh refinement of a solved optimization model.

Every optimum is re-simulated by the reference integrator at its own decisions. While the outlet flows differ by more
than `numerics.check_tolerance`, the mesh is refined where the collocation residual says the error is: twice the
elements, placed by equidistribution of the estimated error (reactor.mesh), and the problem is re-solved from the
re-simulated profile (a temperature profile decision carried over by interpolation). A refined solve that stalls is
tried again with the recovery options (adaptive barrier, more iterations) before the refinement gives up and the
result is flagged.

The re-simulation verifies the model at the point, not that the point is optimal: a solver's lower bound on a state
(a guard for the iterations, not a limit of the reactor) can hold the optimum where the collocation polynomial dips
below it. Where one holds (ReactorModel.state_bound_holds), the bounds of species that feed nothing back are dropped
inside elements (ReactorModel.free_inert_stages), or else the elements holding it are split in two, and the problem
is solved again. Measured on the demo network's highest conversion under a byproduct cap: held at 0.985983, freed
0.998138, the value single shooting with scipy finds.

Reactor-wide temperature limits are constraints at the collocation points only; the temperature between them can
pass the limit (an overshooting profile polynomial, a hot spot of an energy balance between points). They are checked
on the re-simulation, where the true extreme is found between grid points, and where one is exceeded the constraint
at the points is tightened by the excess and the problem re-solved (warm start), a few times at most.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

from tubeyield.jobs.problem import prepare, timed_solve
from tubeyield.reactor.mesh import breakpoints, equidistribute, min_element
from tubeyield.reactor.model import ReactorModel
from tubeyield.reactor.verify import FLOOR_SHARE, Check, compare, reference
from tubeyield.solve import ACCEPTABLE_CONDITIONS, OK_CONDITIONS
from tubeyield.solve.options import RECOVERY_OPTIONS, REFINE_OPTIONS
from tubeyield.study.schema import Study

TIGHTENING_ROUNDS = 4      # re-solves that tighten a temperature limit exceeded between mesh points
HOLD_SPLITS = 8            # re-solves with the elements split where a state bound holds the optimum


@dataclass
class HotSpot:
    """The extreme temperature along the reactor for one temperature limit, from the re-simulation."""
    limit: str
    value: float              # K
    z: float                  # position: fraction of the reactor volume (plug), tank number (tanks)
    excess: float             # K past the limit (<= 0: the limit holds)
    tightened_by: float = 0.0  # K the constraint at the collocation points was tightened by

    def to_dict(self) -> dict:
        return {"limit": self.limit, "T_K": self.value, "z": self.z, "excess_K": self.excess,
                "tightened_by_K": self.tightened_by}


AFTER_ACCEPTABLE_ITERATIONS = 500   # the recovery's iteration budget after a refined solve ended acceptable


@dataclass
class Verified:
    model: ReactorModel
    check: Check
    simulation: object
    hot_spots: list
    limits_hold: bool         # every temperature limit holds on the re-simulation (within the check tolerance)
    acceptable_only: bool = False   # a refined mesh's solve stopped at Ipopt's acceptable level only


def _checked(model: ReactorModel, tol: float, timing: dict):
    t = time.perf_counter()
    sim = reference(model)
    check = compare(model, sim, tol)
    timing["check"] = timing.get("check", 0.0) + time.perf_counter() - t
    return sim, check


def verify_and_refine(study: Study, model: ReactorModel, solver, options: dict, timing: dict,
                      tee: bool = False, extend=None) -> Verified:
    """Re-simulate, refine the mesh until the check passes (or numerics.max_elements), then hold the temperature
    limits between mesh points. The returned model may be a new, finer one; `extend(model)` adds to each finer
    model what the caller added to the first beyond the study's goal and limits (a front's level constraint)."""
    tol = study.numerics.check_tolerance
    sim, check = _checked(model, tol, timing)
    notes, refinements, splits, acceptable_only = [], 0, 0, False
    while model.edges is not None:
        if not check.passed:
            n_new = min(2 * model.elements, study.numerics.max_elements)
            if n_new <= model.elements:
                notes.append(f"the mesh reached numerics.max_elements = {study.numerics.max_elements}")
                break
            floor = FLOOR_SHARE * sum(abs(v) for v in sim.u_in.values())
            edges = equidistribute(model.edges, model.element_errors(sim, floor), n_new, study.reactor.points,
                                   fixed=breakpoints(study.reactor.zones))
            what = f"the refined mesh of {n_new} elements"
        else:
            held = model.state_bound_holds()
            if not held or splits >= HOLD_SPLITS:
                break
            inert = set(model.inert_species())
            if any(s in inert and model.inside_element(z) for s, z, _ in held) \
                    and _freed_and_solved(model, solver, options, timing, tee):
                notes.append(f"the solver's lower bound on {held[0][0]} held the optimum; the bounds of "
                             f"{', '.join(sorted(inert))} inside elements (species no rate uses) were released")
                sim, check = _checked(model, tol, timing)
                continue
            edges = split_elements(model.edges, {model.element_of(z) for _, z, _ in held}, study.reactor.points)
            if len(edges) - 1 > study.numerics.max_elements or len(edges) == len(model.edges):
                break
            splits += 1
            what = f"the mesh with the elements split where a state bound held the optimum ({len(edges) - 1} elements)"
            notes.append(f"the solver's lower bound on {held[0][0]} held the optimum at z = {held[0][1]:.4g}; "
                         f"its element was split ({len(edges) - 1} elements)")
        finer, acceptable = _refined(study, model, sim, edges, solver, options, timing, tee, extend)
        if finer is None:
            notes.append(f"{what} did not converge, even with the recovery options")
            break
        model, refinements = finer, refinements + 1
        acceptable_only = acceptable_only or acceptable
        sim, check = _checked(model, tol, timing)
    model, sim, check, hot, held = _hold_temperature_limits(study, model, sim, check, solver, options, timing, tee)
    check.refinements = refinements
    check.notes = notes + check.notes
    check.released = tuple(model.inert_species()) if model.inert_stages_free else ()
    return Verified(model, check, sim, hot, held, acceptable_only)


def _freed_and_solved(model: ReactorModel, solver, options: dict, timing: dict, tee: bool) -> bool:
    """Free the stage bounds of species that feed nothing back (ReactorModel.free_inert_stages) and solve again from
    the held point, on the same written problem (only bounds change). False, with the model as it was, when there
    was nothing to free or the solve did not converge."""
    snap = model.snapshot()
    if not model.free_inert_stages():
        return False
    res = timed_solve(solver, model, timing, options=options, reuse_structure=True, tee=tee)
    if res.solver.termination_condition in OK_CONDITIONS:
        return True
    model.bound_inert_stages()
    model.restore(snap)
    return False


def split_elements(edges, elements, points: int) -> list[float]:
    """The mesh with each of the given elements cut in two halves (halves shorter than min_element are not made)."""
    shortest = min_element(points)
    out = list(edges)
    for k in sorted(elements):
        if edges[k + 1] - edges[k] >= 2 * shortest:
            out.append(0.5 * (edges[k] + edges[k + 1]))
    return sorted(out)


def _refined(study: Study, model: ReactorModel, sim, edges: list, solver, options: dict, timing: dict, tee: bool,
             extend=None):
    """The problem on the mesh `edges`, solved from `sim`: (model, stopped at Ipopt's acceptable level only), or
    (None, False) when it does not converge. A solve that ends at the acceptable level is
    kept when the recovery options, given at most AFTER_ACCEPTABLE_ITERATIONS, do no better (the re-simulation still
    judges the mesh, and the result is flagged): measured on an invented 16-species network with rate constants over
    12 decades, the refined mesh reached the acceptable level in 332 iterations and the recovery then ran to its
    limit of 3000 (120 s)."""
    decisions = model.decision_values()
    T_fun = model.temperature_function()
    t = time.perf_counter()
    finer = prepare(study, edges, scale_hint=model.goal_scale, start=sim)
    if extend is not None:
        extend(finer)
    timing["build"] = timing.get("build", 0.0) + time.perf_counter() - t
    if "T" in finer.decisions and finer.decisions["T"].profile:
        decisions["T"] = [T_fun(z) for z in finer.profile_positions()]
    acceptable = None
    for extra in (REFINE_OPTIONS, RECOVERY_OPTIONS):
        opts = {**extra, **options}
        if acceptable is not None:
            opts["max_iter"] = min(int(opts.get("max_iter", AFTER_ACCEPTABLE_ITERATIONS)), AFTER_ACCEPTABLE_ITERATIONS)
        finer.set_decisions(decisions)
        finer.initialize(sim)
        res = timed_solve(solver, finer, timing, options=opts, tee=tee)
        if res.solver.termination_condition in OK_CONDITIONS:
            return finer, False
        if res.solver.termination_condition in ACCEPTABLE_CONDITIONS:
            if acceptable is not None:
                return finer, True
            acceptable = finer.snapshot()
    if acceptable is not None:
        finer.restore(acceptable)
        return finer, True
    return None, False


def temperature_extremes(study: Study, sim) -> list[HotSpot]:
    """For each temperature limit: the true extreme along the reactor on the re-simulation and its excess."""
    out = []
    for lim in study.goal.limits:
        if lim.metric is not None:
            continue
        value, z = sim.temperature_extreme("max" if lim.sense == "<=" else "min")
        excess = value - lim.bound if lim.sense == "<=" else lim.bound - value
        out.append(HotSpot(lim.text, value, z, excess))
    return out


def _hold_temperature_limits(study, model, sim, check, solver, options, timing, tee):
    """Tighten temperature limits exceeded between mesh points until the re-simulation meets them."""
    hot = temperature_extremes(study, sim)
    allowed = [study.numerics.check_tolerance * next(l.bound for l in study.goal.limits if l.text == h.limit)
               for h in hot]
    handles = {lh.limit.text: lh for lh in model.limits if lh.limit.metric is None}
    shift = {h.limit: 0.0 for h in hot}
    for _ in range(TIGHTENING_ROUNDS):
        over = [(h, a) for h, a in zip(hot, allowed) if h.excess > a and h.limit in handles]
        if not over or model.edges is None:
            break
        for h, _a in over:
            shift[h.limit] += 1.05 * h.excess
            _tighten(handles[h.limit], shift[h.limit], model.T_scale)
        # only a pinned bound moved: the written NL and the built solver are reused
        res = timed_solve(solver, model, timing, options=options, warmstart=True, reuse_structure=True, tee=tee)
        if res.solver.termination_condition not in OK_CONDITIONS:
            check.notes.append("tightening a temperature limit exceeded between mesh points did not converge")
            break
        sim, check = _checked(model, study.numerics.check_tolerance, timing)
        hot = temperature_extremes(study, sim)
    for h in hot:
        h.tightened_by = shift.get(h.limit, 0.0)
    held = all(h.excess <= a for h, a in zip(hot, allowed))
    if not held:
        worst = max(hot, key=lambda h: h.excess)
        check.notes.append(f"{worst.limit} is exceeded by {worst.excess:.3g} K between mesh points "
                           f"(at z = {worst.z:.4g})")
    return model, sim, check, hot, held


def _tighten(handle, shift: float, T_scale: float) -> None:
    """Move the bound of a temperature limit's constraints (at the collocation points) inwards by `shift` K."""
    lim = handle.limit
    handle.set_bound(lim.bound - shift if lim.sense == "<=" else lim.bound + shift)
