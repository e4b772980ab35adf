"""A metric: coordinates, the symmetric matrix g_ij, and what it was built from.

Build one from a TOML file with :func:`stepper.metricfile.load_metric`, or in
Python with :meth:`Metric.from_matrix`::

    t, r = sympy.symbols("t r", real=True)
    a = sympy.Function("a")(t)
    m = Metric.from_matrix([t, r], sympy.Matrix([[-1, 0], [0, a**2]]))
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterable, Sequence

import sympy
from sympy.core.function import AppliedUndef

from .algebra import as_expression, printer_stable
from .errors import InputError
from .record import AnsatzRequest, MatterRequest, MetricRecord, OrbitRequest

__all__ = ["AnsatzRequest", "LINE_ELEMENT_CONVENTION", "MatterRequest", "Metric", "OrbitRequest"]

#: How a line element maps to the matrix; printed in every report.
LINE_ELEMENT_CONVENTION = (
    "ds^2 = g_ij dx^i dx^j summed over all i and j, so a cross term 2 f dx^i dx^j "
    "(i != j) gives g_ij = g_ji = f, and a term f dx^i dx^j written once gives g_ij = f/2"
)


@dataclass(frozen=True)
class Metric(MetricRecord):
    """An n-dimensional metric g_ij in coordinates x^i (n >= 2), as the engine receives it."""

    @classmethod
    def from_matrix(cls, coordinates: Sequence[sympy.Symbol], matrix, title: str = "Untitled metric",
                    abbreviations: Iterable[tuple[str, sympy.Expr]] = (), notes: str = "") -> "Metric":
        """A metric from coordinates and a symmetric sympy Matrix (the Python entry point).

        Parameters and free functions are read off the matrix: every free
        symbol that is not a coordinate is a parameter, every undefined
        function applied to coordinates is a free function.
        """
        coordinates = tuple(coordinates)
        rows = [list(row) for row in (matrix.tolist() if hasattr(matrix, "tolist") else matrix)]
        if any(isinstance(entry, str) for row in rows for entry in row):
            raise InputError("matrix entries must be sympy expressions, not text (use stepper.load_metric for text)")
        try:
            entries = [[as_expression(e) for e in row] for row in rows]
        except TypeError as err:
            raise InputError(f"matrix entries must be exact sympy expressions or integers ({err})") from None
        if any(e.has(sympy.Float) for row in entries for e in row):
            raise InputError("matrix entries must be exact: use sympy.Rational instead of floating-point numbers")
        matrix = sympy.ImmutableMatrix([[printer_stable(e) for e in row] for row in entries])
        _validate(coordinates, matrix)
        free = set().union(*(e.free_symbols for e in matrix))
        parameters = tuple(sorted(free - set(coordinates), key=lambda s: s.name))
        functions = tuple(sorted(set().union(*(e.atoms(AppliedUndef) for e in matrix)),
                                 key=sympy.default_sort_key))
        assumptions = tuple((s.name, _assumption_word(s)) for s in parameters + coordinates)
        return cls(coordinates, matrix, title, parameters, functions, tuple(abbreviations), None, notes,
                   assumptions)


def _assumption_word(symbol: sympy.Symbol) -> str:
    for word in ("positive", "negative", "nonnegative", "nonpositive", "nonzero", "real"):
        if getattr(symbol, f"is_{word}"):
            return word
    return "complex"


def _validate(coordinates: tuple, matrix: sympy.ImmutableMatrix) -> None:
    if not coordinates:
        raise InputError("no coordinates given")
    if len(set(coordinates)) != len(coordinates):
        raise InputError("a coordinate is declared twice")
    for c in coordinates:
        if not isinstance(c, sympy.Symbol):
            raise InputError(f"coordinate {c} is not a symbol")
    n = len(coordinates)
    if n < 2:
        raise InputError("a metric needs at least 2 coordinates")
    if matrix.rows != matrix.cols:
        raise InputError(f"the metric matrix is {matrix.rows} x {matrix.cols}, not square")
    if matrix.rows != n:
        raise InputError(f"the metric matrix is {matrix.rows} x {matrix.cols} but there are {n} coordinates")
    for i in range(n):
        for j in range(i, n):
            if matrix[i, j].has(sympy.I):
                raise InputError(f"the metric is not real: g[{coordinates[i]},{coordinates[j]}] = {matrix[i, j]} "
                                 "(write the components of a real metric)")
    for i in range(n):
        for j in range(i + 1, n):
            if sympy.cancel(matrix[i, j] - matrix[j, i]) != 0:
                raise InputError(
                    f"the metric matrix is not symmetric: g[{coordinates[i]},{coordinates[j]}] "
                    f"!= g[{coordinates[j]},{coordinates[i]}]")
