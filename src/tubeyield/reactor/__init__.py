"""Reactor models built from a Study by pure functions, and the scipy reference simulation."""

from __future__ import annotations

from tubeyield.reactor.model import ReactorModel
from tubeyield.study.schema import Study


def build(study: Study, elements: int | None = None) -> ReactorModel:
    """The collocation (plug) or algebraic (stirred) model of `study`, with decisions at their mid-range values."""
    if study.reactor.kind == "plug":
        from tubeyield.reactor.plug import PlugModel
        return PlugModel(study, elements)
    from tubeyield.reactor.stirred import StirredModel
    return StirredModel(study, elements)


__all__ = ["ReactorModel", "build"]
