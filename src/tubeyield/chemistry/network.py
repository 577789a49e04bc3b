"""The reaction network of a study: species order, stoichiometric matrix, rank, and what the feed can start."""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from tubeyield.study.schema import Study


@dataclass(frozen=True)
class Network:
    species: tuple[str, ...]
    reaction_ids: tuple[str, ...]
    matrix: np.ndarray            # stoichiometric matrix N, species x reactions (net coefficients)

    @classmethod
    def of(cls, study: Study) -> "Network":
        symbols = study.symbols
        index = {s: i for i, s in enumerate(symbols)}
        N = np.zeros((len(symbols), len(study.reactions)))
        for j, r in enumerate(study.reactions):
            for s, c in r.stoichiometry().items():
                N[index[s], j] = c
        N.setflags(write=False)
        return cls(symbols, tuple(r.id for r in study.reactions), N)

    @cached_property
    def rank(self) -> int:
        return int(np.linalg.matrix_rank(self.matrix)) if self.matrix.size else 0

    def independent_reactions(self) -> tuple[str, ...]:
        """A largest set of reactions with linearly independent stoichiometry, chosen in the order written:
        each column is kept when its component orthogonal to the columns kept so far (Gram-Schmidt, applied twice
        for stability) is not negligible, the tolerance matching numpy's matrix_rank."""
        chosen: list[int] = []
        basis = np.zeros((self.matrix.shape[0], 0))
        scale = float(np.max(np.abs(self.matrix))) if self.matrix.size else 1.0
        tol = max(self.matrix.shape) * np.finfo(float).eps * max(scale, 1.0) * 10
        for j in range(self.matrix.shape[1]):
            v = self.matrix[:, j].astype(float)
            for _ in range(2):
                v = v - basis @ (basis.T @ v)
            norm = float(np.linalg.norm(v))
            if norm > tol:
                basis = np.column_stack([basis, v / norm])
                chosen.append(j)
        return tuple(self.reaction_ids[j] for j in chosen)

    def untouched_species(self) -> tuple[str, ...]:
        return tuple(s for i, s in enumerate(self.species) if not np.any(self.matrix[i]))


def fed_species(study: Study) -> set[str]:
    fed = {s for s, v in study.feed.inlet().items() if v > 0}
    fed |= {d.name[6:] for d in study.decisions if d.name.startswith("ratio.") and d.high > 0}
    return fed


def reactions_that_cannot_start(study: Study) -> tuple[str, ...]:
    """Reactions whose rate stays zero for this feed: every species with a positive order must be reachable.

    Reachability closure: start from the fed species; a reaction that can run (all its forward-order species present,
    or for a reversible one all its reverse-order species present) makes the species on its other side present.
    """
    present = set(fed_species(study))
    can_run: set[str] = set()
    changed = True
    while changed:
        changed = False
        for r in study.reactions:
            forward = all(s in present for s, n in r.orders if n > 0)
            backward = r.reversible and all(s in present for s, n in r.reverse_orders if n > 0)
            if forward or backward:
                new = ({s for s, _ in r.products} if forward else set()) | ({s for s, _ in r.reactants} if backward else set())
                if r.id not in can_run or not new <= present:
                    can_run.add(r.id)
                    if not new <= present:
                        present |= new
                        changed = True
    return tuple(r.id for r in study.reactions if r.id not in can_run)


def _named_products(study: Study) -> set[str]:
    """Species whose yield or selectivity the study names (goal, limits, front)."""
    metrics = [study.goal.metric] + [lim.metric for lim in study.goal.limits if lim.metric is not None]
    if study.front is not None:
        metrics += [study.front.x, study.front.y]
    return {m.species for m in metrics if m is not None and m.kind in ("yield", "selectivity")}


def carriers(study: Study) -> dict[str, str]:
    """For each reaction with products, the product that carries the reacting species onward (the rest are
    co-products, such as water from a condensation): a product whose yield or selectivity the study names; else the
    product receiving the largest mass (nu * M, when every product has a molar mass or formula); else the first
    product written (common practice)."""
    named = _named_products(study)
    masses: dict[str, float] | None = None
    out = {}
    for r in study.reactions:
        products = [s for s, c in r.stoichiometry().items() if c > 0]
        if not products:
            continue
        chosen = [s for s in products if s in named]
        if not chosen and len(products) > 1:
            if masses is None:
                from tubeyield.chemistry.consistency import species_masses
                masses = species_masses(study)
            if all(s in masses for s in products):
                net = r.stoichiometry()
                chosen = [max(products, key=lambda s: net[s] * masses[s])]
        out[r.id] = (chosen or products)[0]
    return out


def yield_paths(study: Study) -> dict[str, tuple[float, tuple[str, ...]]]:
    """The stoichiometric path from the key reactant to each product it forms, through intermediates.

    Breadth first over the reactions in the order written: a reaction that consumes a species on a path (nu_s < 0)
    extends the path to its carrier product p (see `carriers`) with the factor |nu_s| / nu_p. A product's yield
    factor is the product of the factors along its shortest path, so that mol of key reactant are counted once
    along a chain: for A -> 2 B, B -> C the factors are 1/2 for B and 1/2 for C, and Y_B + Y_C = X_A. Returns
    product -> (factor, reaction ids along the path). Levenspiel, Chemical Reaction Engineering, 3rd ed. 1999,
    ch. 8 (yields in series reactions), generalized to stoichiometric coefficients.
    """
    key = study.goal.key
    carrier = carriers(study)
    paths: dict[str, tuple[float, tuple[str, ...]]] = {key: (1.0, ())}
    frontier = [key]
    while frontier:
        nxt = []
        for s in frontier:
            factor, via = paths[s]
            for r in study.reactions:
                net = r.stoichiometry()
                p = carrier.get(r.id)
                if net.get(s, 0) < 0 and p is not None and p not in paths:
                    paths[p] = (factor * -net[s] / net[p], via + (r.id,))
                    nxt.append(p)
        frontier = nxt
    del paths[key]
    return paths


def co_products(study: Study) -> set[str]:
    """Products that no reaction path from the key reactant carries (water, CO2, HCl from a condensation...)."""
    produced = {s for r in study.reactions for s, c in r.stoichiometry().items() if c > 0}
    return produced - set(yield_paths(study)) - {study.goal.key}


def yield_factor(study: Study, product: str) -> tuple[float, tuple[str, ...]]:
    """The factor that turns (F_p - F_p0) / F_key,0 into a yield: along the stoichiometric path from the key
    reactant (`yield_paths`); for a product off every path (a co-product), |nu_key| / nu_p of the first reaction
    forming it from the key reactant; (1.0, ()) when none does (then the yield is mol formed per mol fed)."""
    path = yield_paths(study).get(product)
    if path is not None:
        return path
    key = study.goal.key
    for r in study.reactions:
        net = r.stoichiometry()
        if net.get(key, 0) < 0 and net.get(product, 0) > 0:
            return -net[key] / net[product], (r.id,)
    return 1.0, ()
