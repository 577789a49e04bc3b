"""Reactor models built from a Study by pure functions, and the scipy reference simulation."""

from __future__ import annotations

import contextlib
import gc

from tubeyield.reactor.model import ReactorModel
from tubeyield.study.schema import Study


@contextlib.contextmanager
def paused_gc():
    """Pause the cyclic garbage collector while a large object graph is built: Pyomo models allocate many small
    objects, and collections triggered mid-build rescan every live model (measured: builds of 0.04 s took 0.14 s)."""
    was = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was:
            gc.enable()


@contextlib.contextmanager
def frozen_heap():
    """Keep the objects alive on entry out of the cyclic collector's scans while a loop of many small solves runs:
    the models and solvers built before it live on, and every full collection rescanned them (on the demo's
    21-point front the levels took 0.94-1.13 s with them scanned and 0.88-0.99 s without, medians of 5 runs).
    Objects made inside are collected as usual, so a model discarded there is freed; the frozen ones go back to
    the collector on exit (gc.freeze and gc.unfreeze). A heap someone else froze is left as it is."""
    if gc.get_freeze_count():
        yield
        return
    gc.freeze()
    try:
        yield
    finally:
        gc.unfreeze()


def state_scales(sim, floor_share: float = 1e-9) -> dict:
    """Typical size of each species' scaled flow in a simulation (see `Simulation.typical_sizes`)."""
    return sim.typical_sizes(floor_share)


def build(study: Study, mesh=None, state_scale: dict | None = None) -> ReactorModel:
    """The collocation (plug) or algebraic (stirred) model of `study`, with decisions at their mid-range values.
    `mesh` is a number of elements or a list of element edges on [0, 1] (plug flow; default the study's
    elements); `state_scale` divides each species' scaled flow (see `state_scales`); default 1."""
    import importlib
    module, _, cls = study.reactor.form.model.partition(":")     # the kind's model class (study/modes.py)
    model_class = getattr(importlib.import_module(module), cls)
    with paused_gc():
        return model_class(study, mesh, state_scale)


__all__ = ["ReactorModel", "build", "frozen_heap", "paused_gc", "state_scales"]
