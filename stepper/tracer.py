"""The record of a derivation: a list of steps, each a small immutable value.

A :class:`Step` is one equation of the derivation: what kind of computation
it is, the general formula, the formula instantiated at its indices, the
exact result, and the ids of the earlier steps whose results it used.  A
:class:`Tracer` collects steps in order and checks, as they arrive, that ids
are unique and that every step only uses steps recorded before it.  The
arithmetic that produced a result never appears here: only sympy expressions.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping, Union

import sympy

#: Components of a tensor keyed by comma-joined coordinate names, e.g. "r,t,t".
Components = Mapping[str, sympy.Expr]


@dataclass(frozen=True)
class Verdict:
    """A yes/no statement with the evidence for it.

    ``holds`` is True or False when decided, None when the algebra could not
    decide (the evidence then says what was seen numerically).
    """

    statement: str
    holds: bool | None
    evidence: str


Result = Union[sympy.Expr, Mapping[str, sympy.Expr], Verdict, None]


@dataclass(frozen=True)
class Simplification:
    """One rewrite of a raw result: before, after, and what was applied.

    ``before`` is None when the raw expression was too long to be worth
    keeping; ``before_size`` then still says how long it was.
    """

    rewrite: str
    before: sympy.Expr | None
    after: sympy.Expr
    before_size: int = 0


@dataclass(frozen=True)
class Step:
    """One recorded equation of the derivation."""

    id: str
    kind: str
    annotation: str
    formula: str
    uses: tuple[str, ...]
    result: Result
    params: Mapping[str, Any] = field(default_factory=dict)
    substituted: str = ""
    simplifications: tuple[Simplification, ...] = ()


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
