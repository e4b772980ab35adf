"""Collecting the steps of a derivation as the engine computes them.

A :class:`Step` is one equation of the derivation: what kind of computation
it is, the general formula, the formula instantiated at its indices, the
exact result, and the ids of the earlier steps whose results it used.  A
:class:`Tracer` collects steps in order and checks, as they arrive, that ids
are unique and that every step only uses steps recorded before it.  The
arithmetic that produced a result never appears here: only sympy expressions.
"""

from __future__ import annotations

from typing import Mapping

import sympy

from .record import Result, Simplification, Step, Verdict

__all__ = ["Components", "Result", "Simplification", "Step", "TraceError", "Tracer", "Verdict"]

#: Components of a tensor keyed by comma-joined coordinate names, e.g. "r,t,t".
Components = Mapping[str, sympy.Expr]


class TraceError(Exception):
    """A step broke the rules of the record (duplicate id, forward use)."""


class Tracer:
    """Collects steps in the order they were computed."""

    def __init__(self) -> None:
        self.steps: list[Step] = []
        self._ids: set[str] = set()

    def record(self, step: Step) -> Step:
        if step.id in self._ids:
            raise TraceError(f"step id {step.id!r} recorded twice")
        missing = [u for u in step.uses if u not in self._ids]
        if missing:
            raise TraceError(f"step {step.id!r} uses unrecorded steps {missing}")
        self.steps.append(step)
        self._ids.add(step.id)
        return step

    def __contains__(self, step_id: str) -> bool:
        return step_id in self._ids

    def get(self, step_id: str) -> Step:
        for step in self.steps:
            if step.id == step_id:
                return step
        raise KeyError(step_id)
