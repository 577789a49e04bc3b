"""The one unit registry (pint) and the conversions at the boundary.

Every quantity a user writes is a string such as "60 kJ/mol" or "2 L/min". It is parsed here once, checked against the
dimension the key expects, and handed on as a float in SI units (mol, m^3, s, K, J, Pa). Nothing past the loader sees
a unit.
"""

from __future__ import annotations

import math
import re
import sys
from functools import lru_cache

from tubeyield.errors import StudyError


def _pint_without_dask():
    """Import pint without its dask support. When dask is installed (tubeyield's distributed sweeps use it), pint
    imports dask.base at its own import to interoperate with dask arrays, and with it jinja2, yaml and psutil: about
    0.09 s of every command on the bench machine, for a feature tubeyield never uses (its quantities are floats in SI
    units past the loader). A None entry in sys.modules makes the import system report dask as absent while pint
    loads (the import system's documented meaning of None there); dask imports normally afterwards."""
    hide = "dask" not in sys.modules
    if hide:
        sys.modules["dask"] = None
    try:
        import pint
    finally:
        if hide and sys.modules.get("dask", ...) is None:
            del sys.modules["dask"]
    return pint


pint = _pint_without_dask()


def _registry() -> pint.UnitRegistry:
    """pint's registry, its parsed definitions cached on disk in the user's cache folder (0.03 s to load instead of
    0.15 s to parse on every command); without a writable cache folder it is parsed as before."""
    try:
        return pint.UnitRegistry(autoconvert_offset_to_baseunit=True, cache_folder=":auto:")
    except Exception:  # noqa: BLE001 - any cache trouble (read-only home, corrupt cache): parse the definitions
        return pint.UnitRegistry(autoconvert_offset_to_baseunit=True)


ureg = _registry()
# The pound-mole of US practice: the amount whose mass in pounds equals the molar mass (453.59237 mol, exact).
ureg.define("pound_mole = 453.59237 * mole = lbmol = lb_mol")
Quantity = ureg.Quantity

# Expected kinds of quantity: SI unit the numerics use, and an example shown in error messages.
QUANTITY_KINDS: dict[str, tuple[str, str]] = {
    "time": ("s", "a time such as '90 s' or '5 min'"),
    "temperature": ("K", "a temperature such as '350 K' or '80 degC'"),
    "concentration": ("mol/m^3", "a concentration such as '1.0 mol/L'"),
    "flow": ("m^3/s", "a volumetric flow such as '2 L/min'"),
    "molar_energy": ("J/mol", "a molar energy such as '60 kJ/mol'"),
    "molar_heat_capacity": ("J/(mol*K)", "a molar heat capacity such as '75 J/(mol*K)'"),
    "pressure": ("Pa", "a pressure such as '2 bar'"),
    "molar_mass": ("kg/mol", "a molar mass such as '106.2 g/mol'"),
    "length": ("m", "a length such as '25 mm'"),
    "heat_transfer": ("W/(m^2*K)", "a heat-transfer coefficient such as '400 W/(m^2*K)'"),
    "volume": ("m^3", "a volume such as '5 L'"),
    "dimensionless": ("", "a plain number such as 0.5"),
}

# Magnitudes no study needs, refused where they are read: beyond them the kinetics overflow or the integrator hangs
# (a temperature of 1e308 K made exp() of the Arrhenius term infinite). The largest |value| of each kind, in SI;
# signs are checked where the key is read.
MAGNITUDE_CAPS: dict[str, float] = {
    "time": 1e9,                  # s (about 30 years)
    "temperature": 1e4,           # K
    "concentration": 1e6,         # mol/m^3 (1000 mol/L)
    "flow": 1e6,                  # m^3/s
    "molar_energy": 1e7,          # J/mol (10,000 kJ/mol)
    "molar_heat_capacity": 1e5,   # J/(mol K)
    "pressure": 1e9,              # Pa (10 kbar)
    "molar_mass": 1e3,            # kg/mol
    "length": 1e4,                # m
    "heat_transfer": 1e12,        # W/(m^2 K) (1e9 is used to approach an isothermal wall)
    "volume": 1e9,                # m^3
    "dimensionless": 1e12,
}

_NUMBER_UNIT = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")


@lru_cache(maxsize=256)
def _unit(text: str):
    return ureg.Unit(text) if text else ureg.dimensionless


def parse_quantity(value, key: str) -> "pint.Quantity":
    """Parse '60 kJ/mol' (or a bare number) into a pint Quantity; a StudyError names `key` when it cannot."""
    if isinstance(value, bool):
        raise StudyError(key, f"a number with units, got {value!r}")
    if isinstance(value, (int, float)):
        if not math.isfinite(value):
            raise StudyError(key, f"a finite number, got {value!r}")
        return Quantity(float(value), ureg.dimensionless)
    if not isinstance(value, str):
        raise StudyError(key, f"a quantity written as a string such as '350 K', got {type(value).__name__} {value!r}")
    match = _NUMBER_UNIT.match(value)
    if not match:
        raise StudyError(key, f"a number followed by a unit such as '350 K', got {value!r}")
    number, unit_text = match.groups()
    try:
        magnitude = float(number)
        unit = _unit(unit_text.strip())
    except Exception as exc:  # pint raises several exception types for unknown or malformed units
        raise StudyError(key, f"a known unit, could not read {unit_text!r} in {value!r} ({type(exc).__name__})") from None
    if not math.isfinite(magnitude):
        raise StudyError(key, f"a finite number, got {value!r}")
    return Quantity(magnitude, unit)


def to_si(value, kind: str, key: str) -> float:
    """Parse `value` and convert it to the SI unit of `kind`; a wrong dimension is a StudyError naming the key."""
    si_unit, example = QUANTITY_KINDS[kind]
    q = parse_quantity(value, key)
    target = _unit(si_unit)
    if q.dimensionality != target.dimensionality:
        raise StudyError(key, f"{example}; got {value!r}, which has dimension {_dims(q)}")
    si = _clean(float(q.to(target).magnitude))
    if abs(si) > MAGNITUDE_CAPS[kind]:
        raise StudyError(key, f"{example}, of magnitude at most {MAGNITUDE_CAPS[kind]:g} {si_unit}".rstrip()
                              + f" (tubeyield's cap); got {value!r}")
    return si


def _clean(x: float) -> float:
    """Drop the last-bit noise of unit factors (1 mol/L -> 1000.0 mol/m^3, not 999.9999999999999)."""
    return float(f"{x:.15g}")


def rate_constant_to_si(value, concentration_power: float, key: str, *, per: str = "time") -> float:
    """Convert a rate-type constant whose unit must be concentration^power / time (per='time') or
    concentration^power (per='none'), e.g. a second-order rate constant '0.05 L/(mol*s)' has power -1."""
    q = parse_quantity(value, key)
    expected = (ureg.mol / ureg.m**3) ** concentration_power
    if per == "time":
        expected = expected / ureg.s
    ratio = (q / expected).to_base_units()
    bad = {d: e for d, e in ratio.dimensionality.items() if abs(e) > 1e-9}
    if bad:
        shown = _pretty_power(concentration_power)
        need = f"concentration^{shown}" + ("/time" if per == "time" else "")
        example = _example_rate_unit(concentration_power, per)
        raise StudyError(key, f"a quantity of dimension {need} (for example {example!r}); got {value!r}, "
                              f"which has dimension {_dims(q)}")
    return _clean(float(ratio.magnitude))


def rate_constant_from_si(si_value: float, concentration_power: float, user_unit: str) -> tuple[float, str]:
    """(value, unit) of an SI rate constant of unit concentration^power/time in the user's unit text ('' keeps SI,
    written out: 1/s, m^3/(mol*s), ...)."""
    if not user_unit:
        p = concentration_power
        unit = ("1/s" if p == 0 else "mol/(m^3*s)" if p == 1 else "m^3/(mol*s)" if p == -1
                else f"(mol/m^3)^{_pretty_power(p)}/s")
        return si_value, unit
    si = ((ureg.mol / ureg.m**3) ** concentration_power) / ureg.s
    return float(Quantity(si_value, si).to(_unit(user_unit)).magnitude), user_unit


def _pretty_power(p: float) -> str:
    return str(int(p)) if float(p).is_integer() else f"{p:g}"


def _example_rate_unit(power: float, per: str) -> str:
    tail = "/s" if per == "time" else ""
    if abs(power) < 1e-12:
        return "0.1 1/s" if per == "time" else "2.0"
    if power == -1:
        return "0.05 L/(mol*s)" if per == "time" else "0.5 L/mol"
    if power == 1:
        return "0.01 mol/(L*s)" if per == "time" else "2 mol/L"
    return f"1.0 (mol/L)^{_pretty_power(power)}{tail}"


def _dims(q) -> str:
    d = q.dimensionality
    return "dimensionless" if not d else str(d)


def convert(si_value: float, si_unit: str, user_unit: str) -> float:
    """Convert an SI magnitude to the user's unit."""
    if si_unit == user_unit:
        return si_value
    return float(Quantity(si_value, _unit(si_unit)).to(_unit(user_unit)).magnitude)


def decision_to_user(value, decision):
    """An SI decision value (or a profile: a list of values) in the unit the user wrote the decision in."""
    if isinstance(value, (list, tuple)):
        return [decision_to_user(v, decision) for v in value]
    return convert(value, decision.si_unit, decision.unit) if decision.unit else value


def decisions_to_user(study, values: dict) -> dict:
    """SI decision values by name -> the units the user wrote each decision in (a profile given as a function of z
    is shown as 'profile')."""
    return {name: "profile" if callable(v) else decision_to_user(v, study.decision(name)) for name, v in values.items()}


def unit_step(user_unit: str, si_unit: str) -> float:
    """SI size of one user unit taken as a difference (one degC step is one K), for marginal values per unit."""
    if not user_unit:
        return 1.0
    q = Quantity(1.0, _unit(user_unit)) - Quantity(0.0, _unit(user_unit))
    return float(q.to(_unit(si_unit)).magnitude)


def unit_text(value) -> str:
    """The unit part of a user's quantity string ('' for a bare number)."""
    if isinstance(value, str):
        m = _NUMBER_UNIT.match(value)
        if m:
            return m.group(2).strip()
    return ""
