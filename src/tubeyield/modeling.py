"""The Pyomo modelling layer tubeyield uses, loaded without `pyomo.environ`.

`import pyomo.environ` imports the plug-ins of every Pyomo package (GDP, MindtPy, APPSI, trust region, NEOS, the
writers of every file format ...): about 0.23 s of every command on the bench machine, against about 0.14 s for the
core modelling components with the two plug-in packages tubeyield needs. Those are Pyomo's DAE transformations
(`dae.collocation`, registered by `pyomo.dae.plugins`) and its model writers (`pyomo.repn.plugins`; the NL writer).
Pyomo's own `ipopt` interface (numerics.solver = "executable") still imports `pyomo.environ` when it is asked for.

Modules write `from tubeyield.modeling import pyo` and use `pyo.Var`, `pyo.value`, ... as with
`import pyomo.environ as pyo`; `pyo` is `pyomo.core`, which defines the same modelling names.
"""

from __future__ import annotations

import importlib

import pyomo.core as pyo

for _package in ("pyomo.repn", "pyomo.dae"):
    importlib.import_module(_package + ".plugins").load()

__all__ = ["pyo"]
