"""Molecular formulas such as "C8H10", "CH3COOH", "Ca(OH)2" -> element counts (exact integers)."""

from __future__ import annotations

import re
from collections import Counter

from tubeyield.errors import StudyError

ELEMENTS = frozenset("""H He Li Be B C N O F Ne Na Mg Al Si P S Cl Ar K Ca Sc Ti V Cr Mn Fe Co Ni Cu Zn Ga Ge As Se Br
Kr Rb Sr Y Zr Nb Mo Tc Ru Rh Pd Ag Cd In Sn Sb Te I Xe Cs Ba La Ce Pr Nd Pm Sm Eu Gd Tb Dy Ho Er Tm Yb Lu Hf Ta W Re
Os Ir Pt Au Hg Tl Pb Bi Po At Rn Fr Ra Ac Th Pa U Np Pu Am Cm Bk Cf Es Fm Md No Lr Rf Db Sg Bh Hs Mt Ds Rg Cn Nh Fl
Mc Lv Ts Og D""".split())
_TOKEN = re.compile(r"([A-Z][a-z]?)(\d*)|(\()|(\))(\d*)")


def parse_formula(text: str, key: str) -> dict[str, int]:
    """Element counts of a formula; parentheses may nest. A StudyError names `key` for anything unreadable."""
    stack: list[Counter] = [Counter()]
    pos = 0
    text_s = text.strip()
    if not text_s:
        raise StudyError(key, "a molecular formula such as 'C8H10', got an empty string")
    while pos < len(text_s):
        m = _TOKEN.match(text_s, pos)
        if not m:
            raise StudyError(key, f"a molecular formula of element symbols and counts such as 'C8H10'; "
                                  f"could not read {text_s[pos:]!r} in {text!r}")
        element, count, opening, closing, group_count = m.groups()
        if element:
            if element not in ELEMENTS:
                raise StudyError(key, f"element symbols of the periodic table; {element!r} in {text!r} is not one")
            stack[-1][element] += int(count) if count else 1
        elif opening:
            stack.append(Counter())
        else:
            if len(stack) == 1:
                raise StudyError(key, f"balanced parentheses in {text!r}")
            group = stack.pop()
            n = int(group_count) if group_count else 1
            for el, c in group.items():
                stack[-1][el] += c * n
        pos = m.end()
    if len(stack) != 1:
        raise StudyError(key, f"balanced parentheses in {text!r}")
    return dict(stack[0])
