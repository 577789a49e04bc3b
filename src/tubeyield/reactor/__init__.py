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


def build(study: Study, elements: int | None = None) -> ReactorModel:
    """The collocation (plug) or algebraic (stirred) model of `study`, with decisions at their mid-range values."""
    with paused_gc():
        if study.reactor.kind == "plug":
            from tubeyield.reactor.plug import PlugModel
            return PlugModel(study, elements)
        from tubeyield.reactor.stirred import StirredModel
        return StirredModel(study, elements)


__all__ = ["ReactorModel", "build", "paused_gc"]
