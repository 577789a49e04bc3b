"""Linear-programming checks of a reaction network, solved with HiGHS (highspy).

Stoichiometric (mass) consistency: a network is consistent when strictly positive species masses m exist with
N^T m = 0, i.e. every reaction conserves mass. We solve the sparse LP  min sum m  s.t. N^T m = 0, 1 <= m <= M.
When it is infeasible, HiGHS computes an irreducible infeasible subset (IIS) of its rows: reactions that cannot
conserve mass together, while any one of them removed leaves the rest consistent. All of them are named (another
such set may exist as well; mending this one and checking again finds it).

Masses: a species' molar mass is the one given, or its formula's (standard atomic weights from the periodictable
package, after IUPAC/CIAAW); every reaction whose species all have a mass is checked against them, formulas and
given masses mixed, and a reaction whose species all have formulas is also balanced element by element, exactly.

References
----------
A. Gevorgyan, M. G. Poolman and D. A. Fell, "Detection of stoichiometric inconsistencies in biomolecular models",
Bioinformatics 24(19) (2008) 2245-2251: the LP test for positive conserved masses and locating inconsistent parts.
J. W. Chinneck, Feasibility and Infeasibility in Optimization, Springer 2008, ch. 6-7: irreducible infeasible
subsets of linear programs.
Element balances from formulas are exact integer arithmetic (common practice).
"""

from __future__ import annotations

import contextlib
import dataclasses
import os
from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np

from tubeyield.study.formula import parse_formula
from tubeyield.chemistry.network import Network, reactions_that_cannot_start
from tubeyield.study.schema import Study

MASS_UPPER = 1.0e4      # masses are sought in [1, MASS_UPPER]: any positive solution can be scaled into it


@dataclass
class CheckReport:
    consistent: bool | None = None                 # stoichiometric consistency (None: not run)
    masses: dict[str, float] = field(default_factory=dict)
    faulty_reactions: tuple[str, ...] = ()
    element_errors: list[str] = field(default_factory=list)
    mass_errors: list[str] = field(default_factory=list)
    warnings: list[str] = field(default_factory=list)

    @property
    def valid(self) -> bool:
        return bool(self.consistent) and not self.element_errors and not self.mass_errors

    def to_frame(self):
        """One row per check (pandas): stoichiometric consistency, then each element or mass balance error and each
        warning, with columns check, ok, detail."""
        import pandas as pd
        rows = [{"check": "stoichiometric consistency", "ok": self.consistent,
                 "detail": ", ".join(self.faulty_reactions)}]
        rows += [{"check": "element balance", "ok": False, "detail": e} for e in self.element_errors]
        rows += [{"check": "mass balance", "ok": False, "detail": e} for e in self.mass_errors]
        rows += [{"check": "warning", "ok": None, "detail": w} for w in self.warnings]
        return pd.DataFrame(rows)

    def errors(self) -> list[str]:
        out = []
        if self.consistent is False:
            out.append("stoichiometrically inconsistent: no positive species masses conserve mass in every reaction; "
                       "these reactions cannot conserve mass together, and any one of them removed, the rest can: "
                       f"{', '.join(self.faulty_reactions) or '(not located)'}")
        return out + self.element_errors + self.mass_errors


_highs_started = False


def _highs():
    """A quiet HiGHS instance. The first construction in a process prints a banner on fd 1: hide it."""
    global _highs_started
    import highspy
    if _highs_started:
        h = highspy.Highs()
    else:
        with _fd1_to_devnull():
            h = highspy.Highs()
        _highs_started = True
    h.setOptionValue("output_flag", False)
    return h


@contextlib.contextmanager
def _fd1_to_devnull():
    import sys
    sys.stdout.flush()
    saved = os.dup(1)
    devnull = os.open(os.devnull, os.O_WRONLY)
    try:
        os.dup2(devnull, 1)
        yield
    finally:
        os.dup2(saved, 1)
        os.close(saved)
        os.close(devnull)


def _consistency_lp(N: np.ndarray):
    """HiGHS holding  min sum m  s.t. N^T m = 0 (one row per reaction), 1 <= m <= MASS_UPPER, built sparse."""
    n_sp, n_rx = N.shape
    h = _highs()
    h.addVars(n_sp, np.ones(n_sp), np.full(n_sp, MASS_UPPER))
    h.changeColsCost(n_sp, np.arange(n_sp, dtype=np.int32), np.ones(n_sp))
    for j in range(n_rx):
        idx = np.nonzero(N[:, j])[0].astype(np.int32)
        h.addRow(0.0, 0.0, len(idx), idx, N[idx, j].astype(float))
    return h


def stoichiometric_consistency(net: Network) -> tuple[bool, dict[str, float], tuple[str, ...]]:
    """(consistent, masses, an irreducible set of reactions at fault) by the LP and IIS of the module docstring."""
    import highspy
    h = _consistency_lp(net.matrix)
    h.run()
    status = h.getModelStatus()
    if status == highspy.HighsModelStatus.kOptimal:
        return True, dict(zip(net.species, np.array(h.getSolution().col_value).tolist())), ()
    if status != highspy.HighsModelStatus.kInfeasible:
        raise RuntimeError(f"HiGHS could not decide the consistency LP: {h.modelStatusToString(status)}")
    return False, {}, irreducible_inconsistent_set(net)


def irreducible_inconsistent_set(net: Network) -> tuple[str, ...]:
    """Reactions forming an irreducible infeasible subset of the consistency LP. HiGHS's IIS finder (row priority)
    narrows the search; a deletion filter over its rows (Chinneck, ch. 6: drop each reaction in turn, keep it
    dropped while the rest stays infeasible) makes the set irreducible (HiGHS's set need not be: measured, it
    returned three reactions of which two were already inconsistent)."""
    h = _consistency_lp(net.matrix)
    h.setOptionValue("iis_strategy", 2)
    h.run()
    status, iis = h.getIis()
    rows = sorted(set(int(i) for i in iis.row_index_)) if iis.valid_ else []
    keep = rows if rows and _infeasible(net.matrix[:, rows]) else list(range(net.matrix.shape[1]))
    for j in list(keep):
        trial = [k for k in keep if k != j]
        if trial and _infeasible(net.matrix[:, trial]):
            keep = trial
    return tuple(net.reaction_ids[j] for j in keep)


def _infeasible(N: np.ndarray) -> bool:
    import highspy
    h = _consistency_lp(N)
    h.run()
    return h.getModelStatus() == highspy.HighsModelStatus.kInfeasible


def element_balance(study: Study) -> list[str]:
    """Exact element balance of every reaction whose species all have formulas. One message per unbalanced element."""
    formulas = {s.symbol: parse_formula(s.formula, f"species.{s.symbol}.formula") for s in study.species if s.formula}
    errors = []
    for r in study.reactions:
        touched = list(r.stoichiometry())
        if not all(s in formulas for s in touched):
            continue
        left: dict[str, Fraction] = {}
        right: dict[str, Fraction] = {}
        for side, terms in ((left, r.reactants), (right, r.products)):
            for s, c in terms:
                for el, n in formulas[s].items():
                    side[el] = side.get(el, Fraction(0)) + Fraction(c).limit_denominator(10**6) * n
        for el in sorted(set(left) | set(right)):
            a, b = left.get(el, Fraction(0)), right.get(el, Fraction(0))
            if a != b:
                errors.append(f"reaction {r.id} ({r.equation}): element {el} does not balance "
                              f"({_fmt(a)} on the left, {_fmt(b)} on the right)")
    return errors


def species_masses(study: Study) -> dict[str, float]:
    """Molar mass of each species that has one, in kg/mol: the given molar_mass, or its formula's."""
    import periodictable
    out = {}
    for sp in study.species:
        if sp.molar_mass:
            out[sp.symbol] = sp.molar_mass
        elif sp.formula:
            counts = parse_formula(sp.formula, f"species.{sp.symbol}.formula")
            out[sp.symbol] = sum(n * periodictable.elements.symbol(el).mass for el, n in counts.items()) / 1000.0
    return out


def molar_mass_balance(study: Study, rel_tol: float = 1e-3) -> list[str]:
    """Mass balance of every reaction whose species all have a molar mass (given, or from the formula), unless all
    have formulas (then the exact element balance decides)."""
    mm = species_masses(study)
    has_formula = {s.symbol for s in study.species if s.formula}
    errors = []
    for r in study.reactions:
        net = r.stoichiometry()
        if all(s in has_formula for s in net) or not all(s in mm for s in net):
            continue
        produced = sum(c * mm[s] for s, c in net.items())
        scale = sum(abs(c) * mm[s] for s, c in net.items()) / 2
        if abs(produced) > rel_tol * scale:
            errors.append(f"reaction {r.id} ({r.equation}): molar masses do not balance "
                          f"(net {produced * 1e3:+.4g} g per mol of reaction)")
    return errors


def _fmt(x: Fraction) -> str:
    return str(x.numerator) if x.denominator == 1 else f"{float(x):g}"


def check_network(study: Study) -> CheckReport:
    net = Network.of(study)
    report = CheckReport()
    report.consistent, report.masses, report.faulty_reactions = stoichiometric_consistency(net)
    report.element_errors = element_balance(study)
    report.mass_errors = molar_mass_balance(study)
    fed = {s for s, v in study.feed.inlet().items() if v > 0}
    for s in net.untouched_species():
        if s not in fed:
            report.warnings.append(f"species {s} takes part in no reaction and is not fed")
    for rid in reactions_that_cannot_start(study):
        report.warnings.append(f"reaction {rid} cannot run from this feed: a species it needs is never present")
    for r in study.reactions:
        for s, n in r.orders:
            if n == 0 and s in dict(r.reactants):
                report.warnings.append(f"reaction {r.id} is zero order in its reactant {s}: its rate does not fall "
                                       "as the reactant is used up, so the model holds only while it lasts")
    masses = species_masses(dataclasses.replace(study, species=tuple(dataclasses.replace(sp, molar_mass=None)
                                                                    for sp in study.species)))
    for sp in study.species:
        if sp.molar_mass and sp.symbol in masses and abs(sp.molar_mass - masses[sp.symbol]) > 0.01 * sp.molar_mass:
            report.warnings.append(f"species {sp.symbol}: molar_mass {sp.molar_mass * 1e3:.5g} g/mol differs from its "
                                   f"formula's {masses[sp.symbol] * 1e3:.5g} g/mol; the given molar_mass is used")
    missing = [s.symbol for s in study.species if not s.formula]
    if missing and len(missing) < len(study.species):
        report.warnings.append(f"no formula for {', '.join(missing)}: element balances skipped where they take part")
    return report
