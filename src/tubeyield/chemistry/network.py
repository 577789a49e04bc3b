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


def yield_factor(study: Study, product: str) -> tuple[float, str | None]:
    """|nu_key| / nu_product from the first reaction that consumes the key reactant and forms the product.

    Returns (factor, reaction id); (1.0, None) when no single reaction links the two (then yield is per mol fed).
    """
    key = study.goal.key
    for r in study.reactions:
        net = r.stoichiometry()
        if net.get(key, 0) < 0 and net.get(product, 0) > 0:
            return -net[key] / net[product], r.id
    return 1.0, None
