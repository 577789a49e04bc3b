"""Chemical equations such as "A + 2 B -> C" (irreversible) and "A <=> B" (reversible)."""

from __future__ import annotations

import re
from dataclasses import dataclass

from tubeyield.errors import StudyError

SYMBOL = re.compile(r"^[A-Za-z_][A-Za-z0-9_]*$")
_TERM = re.compile(r"^\s*(\d+(?:\.\d*)?|\.\d+)?\s*([A-Za-z_][A-Za-z0-9_]*)\s*$")


@dataclass(frozen=True)
class Equation:
    reactants: tuple[tuple[str, float], ...]
    products: tuple[tuple[str, float], ...]
    reversible: bool


def parse_equation(text, key: str) -> Equation:
    """Parse one equation. Coefficients are positive numbers written before the symbol ("2 B" or "2B")."""
    if not isinstance(text, str) or not text.strip():
        raise StudyError(key, f"an equation such as 'A + 2 B -> C' or 'A <=> B', got {text!r}")
    if "<=>" in text:
        left, _, right = text.partition("<=>")
        reversible = True
    elif "->" in text:
        left, _, right = text.partition("->")
        reversible = False
    else:
        raise StudyError(key, f"an arrow '->' (irreversible) or '<=>' (reversible) in {text!r}")
    if "->" in right or "<=>" in right:
        raise StudyError(key, f"exactly one arrow in {text!r}")
    reactants = _side(left, key, text, "left")
    products = _side(right, key, text, "right")
    return Equation(reactants, products, reversible)


def _side(side: str, key: str, text: str, name: str) -> tuple[tuple[str, float], ...]:
    if not side.strip():
        raise StudyError(key, f"at least one species on the {name} side of {text!r}")
    terms: dict[str, float] = {}
    for raw in side.split("+"):
        m = _TERM.match(raw)
        if not m:
            raise StudyError(key, f"terms like '2 B' separated by '+', could not read {raw.strip()!r} in {text!r}")
        coef = float(m.group(1)) if m.group(1) else 1.0
        if coef <= 0:
            raise StudyError(key, f"positive coefficients, got {coef:g} for {m.group(2)} in {text!r}")
        terms[m.group(2)] = terms.get(m.group(2), 0.0) + coef
    return tuple(terms.items())
