"""Linear-programming checks of a reaction network, solved with HiGHS (highspy).

Stoichiometric (mass) consistency: a network is consistent when strictly positive species masses m exist with
N^T m = 0, i.e. every reaction conserves mass. We solve the LP  min sum m  s.t. N^T m = 0, 1 <= m <= M.
When it is infeasible, a mixed-integer program finds the fewest reactions whose balance must be relaxed for masses
to exist: those reactions are reported as the fault.

References
----------
A. Gevorgyan, M. G. Poolman and D. A. Fell, "Detection of stoichiometric inconsistencies in biomolecular models",
Bioinformatics 24(19) (2008) 2245-2251: the LP test for positive conserved masses and the use of mixed-integer
programming to locate the smallest inconsistent parts.
Element balances from formulas are exact integer arithmetic (common practice).
"""

from __future__ import annotations

import contextlib
import os
from dataclasses import dataclass, field
from fractions import Fraction

import numpy as np

from tubeyield.chemistry.formula import parse_formula
from tubeyield.chemistry.network import Network, reactions_that_cannot_start
from tubeyield.study.schema import Study

MASS_UPPER = 1.0e4      # masses are sought in [1, MASS_UPPER]: any positive solution can be scaled into it
SLACK_UPPER = 1.0e6


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

    def errors(self) -> list[str]:
        out = []
        if self.consistent is False:
            out.append("stoichiometrically inconsistent: no positive species masses conserve mass in every reaction; "
                       f"smallest set of reactions at fault: {', '.join(self.faulty_reactions) or '(not located)'}")
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


def _solve(cost, lower, upper, A, row_lower, row_upper, integer=()):
    """min cost.x s.t. row_lower <= A x <= row_upper, lower <= x <= upper (x[integer] integer). Returns (status, x)."""
    import highspy
    A = np.asarray(A, dtype=float)
    n_row, n_col = A.shape
    lp = highspy.HighsLp()
    lp.num_col_, lp.num_row_ = n_col, n_row
    lp.col_cost_ = np.asarray(cost, float)
    lp.col_lower_, lp.col_upper_ = np.asarray(lower, float), np.asarray(upper, float)
    lp.row_lower_, lp.row_upper_ = np.asarray(row_lower, float), np.asarray(row_upper, float)
    start, index, value = [0], [], []
    for j in range(n_col):
        nz = np.nonzero(A[:, j])[0]
        index += nz.tolist()
        value += A[nz, j].tolist()
        start.append(len(index))
    lp.a_matrix_.format_ = highspy.MatrixFormat.kColwise
    lp.a_matrix_.start_ = np.array(start, dtype=np.int32)
    lp.a_matrix_.index_ = np.array(index, dtype=np.int32)
    lp.a_matrix_.value_ = np.array(value, dtype=float)
    if integer:
        kinds = [highspy.HighsVarType.kContinuous] * n_col
        for j in integer:
            kinds[j] = highspy.HighsVarType.kInteger
        lp.integrality_ = kinds
    h = _highs()
    h.passModel(lp)
    h.run()
    status = h.getModelStatus()
    if status == highspy.HighsModelStatus.kOptimal:
        return "optimal", np.array(h.getSolution().col_value)
    if status == highspy.HighsModelStatus.kInfeasible:
        return "infeasible", None
    return h.modelStatusToString(status), None


def stoichiometric_consistency(net: Network) -> tuple[bool, dict[str, float], tuple[str, ...]]:
    """(consistent, masses, smallest set of faulty reactions) by the LP and MILP described in the module docstring."""
    N = net.matrix
    n_sp, n_rx = N.shape
    status, m = _solve(np.ones(n_sp), np.ones(n_sp), np.full(n_sp, MASS_UPPER), N.T, np.zeros(n_rx), np.zeros(n_rx))
    if status == "optimal":
        return True, dict(zip(net.species, m.tolist())), ()
    # Locate: N^T m + p - q = 0 with p, q <= SLACK_UPPER * y_j, y binary; minimize the number of relaxed reactions.
    # Columns: m (n_sp), p (n_rx), q (n_rx), y (n_rx).
    I = np.eye(n_rx)
    Z = np.zeros((n_rx, n_rx))
    balance = np.hstack([N.T, I, -I, Z])
    link_p = np.hstack([np.zeros((n_rx, n_sp)), I, Z, -SLACK_UPPER * I])
    link_q = np.hstack([np.zeros((n_rx, n_sp)), Z, I, -SLACK_UPPER * I])
    A = np.vstack([balance, link_p, link_q])
    rl = np.concatenate([np.zeros(n_rx), np.full(2 * n_rx, -np.inf)])
    ru = np.zeros(3 * n_rx)
    cost = np.concatenate([np.zeros(n_sp + 2 * n_rx), np.ones(n_rx)])
    lower = np.concatenate([np.ones(n_sp), np.zeros(3 * n_rx)])
    upper = np.concatenate([np.full(n_sp, MASS_UPPER), np.full(2 * n_rx, SLACK_UPPER), np.ones(n_rx)])
    status, x = _solve(cost, lower, upper, A, rl, ru, integer=range(n_sp + 2 * n_rx, n_sp + 3 * n_rx))
    if status != "optimal":
        return False, {}, ()
    y = x[n_sp + 2 * n_rx:]
    return False, {}, tuple(rid for rid, v in zip(net.reaction_ids, y) if v > 0.5)


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


def molar_mass_balance(study: Study, rel_tol: float = 1e-3) -> list[str]:
    """Mass balance from molar masses, for reactions whose species have molar masses but not all formulas."""
    mm = {s.symbol: s.molar_mass for s in study.species if s.molar_mass}
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
    missing = [s.symbol for s in study.species if not s.formula]
    if missing and len(missing) < len(study.species):
        report.warnings.append(f"no formula for {', '.join(missing)}: element balances skipped where they take part")
    return report
