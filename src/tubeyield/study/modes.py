"""Reactor kinds and heat modes: what each one is, in one registry that the loader, the models, the reference
simulation and the jobs read (no comparisons of kind or heat strings elsewhere).

A reactor kind names its model class and how it is simulated; a heat mode says which temperature decisions it takes
and which balances it adds. Adding one is an entry here plus the model code it names (DEVELOPERS.md).
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class ReactorKind:
    name: str
    model: str                 # "module:Class" of its ReactorModel (imported when built)
    axial: bool                # a position along the reactor (collocation mesh, profiles in z)
    tanks: bool                # a number of tanks (stirred-series)
    summary: str


@dataclass(frozen=True)
class HeatMode:
    name: str
    decisions: tuple[str, ...]  # its temperature decisions ("T.<k>" for zones)
    energy_balance: bool        # temperature is a state, from the energy balance
    wall: bool                  # heat exchange with a coolant through the wall (U, diameter)
    profile: bool               # temperature decided along the reactor (zones, a free profile)
    axial_only: bool            # only for kinds with an axial position
    summary: str


REACTOR_KINDS: dict[str, ReactorKind] = {k.name: k for k in (
    ReactorKind("plug", "tubeyield.reactor.plug:PlugModel", True, False, "ideal plug flow (tube)"),
    ReactorKind("stirred", "tubeyield.reactor.stirred:StirredModel", False, False, "one ideally mixed tank"),
    ReactorKind("stirred-series", "tubeyield.reactor.stirred:StirredModel", False, True,
                "equal ideally mixed tanks in series"),
)}

HEAT_MODES: dict[str, HeatMode] = {h.name: h for h in (
    HeatMode("isothermal", ("T",), False, False, False, False, "one temperature"),
    HeatMode("zones", ("T",), False, False, True, True, "equal zones, each its own temperature"),
    HeatMode("free", ("T",), False, False, True, True, "an optimized axial temperature profile"),
    HeatMode("adiabatic", ("T_in",), True, False, False, False, "no heat exchange; the inlet temperature decided"),
    HeatMode("cooled", ("T_in", "T_cool"), True, True, False, False,
             "heat exchange with a coolant; inlet and coolant temperatures decided"),
)}
