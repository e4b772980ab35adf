"""A metric: coordinates, the symmetric matrix g_ij, and what it was built from.

Build one from a TOML file with :func:`stepper.metricfile.load_metric`, or in
Python with :meth:`Metric.from_matrix`::

    t, r = sympy.symbols("t r", real=True)
    a = sympy.Function("a")(t)
    m = Metric.from_matrix([t, r], sympy.Matrix([[-1, 0], [0, a**2]]))
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from typing import Iterable, Sequence

import sympy
from sympy.core.function import AppliedUndef

from .algebra import as_expression, printer_stable
from .errors import InputError
from .record import (AnsatzRequest, FrameRequest, FunctionSign, MatterModel, MatterRequest, MetricRecord,
                     OrbitRequest, PlotRequest)

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
                    abbreviations: Iterable[tuple[str, sympy.Expr]] = (), notes: str = "", *,
                    matter: MatterRequest | None = None, ansatz: AnsatzRequest | None = None,
                    orbit: OrbitRequest | None = None, plots: Sequence[PlotRequest] = (),
                    frame: FrameRequest | None = None, function_signs: Sequence[FunctionSign] = ()) -> "Metric":
        """A metric from coordinates and a symmetric sympy Matrix (the Python entry point).

        Parameters and free functions are read off the matrix: every free
        symbol that is not a coordinate is a parameter, every undefined
        function applied to coordinates is a free function.

        The optional requests are the metric file's tables as record objects (:mod:`stepper.record`):
        ``matter`` ([matter], with its region and model), ``ansatz`` ([ansatz]; its unknowns may be the
        functions A(r) or A, or their names), ``orbit`` ([orbit]), ``plots`` ([[plot]]), ``frame``
        ([frame]) and ``function_signs`` (the signs in [functions]).  Each is checked as the metric file's
        table is, with the same one-line :class:`InputError`; values must be exact sympy numbers and
        expressions, never text.
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
        requests = _requests(coordinates, matrix, parameters, functions, matter=matter, ansatz=ansatz, orbit=orbit,
                             plots=plots, frame=frame, function_signs=function_signs)
        return cls(coordinates, matrix, title, parameters, functions, tuple(abbreviations), None, notes,
                   assumptions, **requests)


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


# ---------------------------------------------------------------------------
# The requests of Metric.from_matrix, checked as the metric file's tables are
# ---------------------------------------------------------------------------

def _requests(coordinates: tuple, matrix: sympy.ImmutableMatrix, parameters: tuple, functions: tuple,
              **given) -> dict:
    """The requests as record objects, each checked by the metric file's reader of the same table
    (:mod:`stepper.metricfile`), which is handed the record's values as exact expressions."""
    from . import metricfile as file
    names = [c.name for c in coordinates]
    symbols = {s.name: s for s in coordinates + parameters}
    function_names = {f.func.__name__: f for f in functions}
    used = set().union(*(e.free_symbols for e in matrix))
    out: dict = {}
    matter = given["matter"]
    if matter is not None:
        _expect(matter, MatterRequest, "matter", "MatterRequest(time=t, ...)")
        out["matter"] = _matter(file, matter, coordinates, symbols, function_names)
    if given["ansatz"] is not None:
        ansatz = _expect(given["ansatz"], AnsatzRequest, "ansatz", "AnsatzRequest(unknowns=(A, B))")
        unknowns = ansatz.unknowns if isinstance(ansatz.unknowns, (tuple, list)) else (ansatz.unknowns,)
        table = {"unknowns": [_function_name(u) for u in unknowns],
                 "cosmological_constant": _exact(ansatz.cosmological_constant, "ansatz.cosmological_constant")}
        out["ansatz"] = file._ansatz_request(table, coordinates, _with_constants(symbols, ansatz), function_names,
                                             matrix)
    if given["orbit"] is not None:
        orbit = _expect(given["orbit"], OrbitRequest, "orbit", "OrbitRequest(time=t, kind=..., ...)")
        table = {"kind": orbit.kind, "time": _name(orbit.time, "orbit.time"),
                 "values": _pairs(orbit.values, "orbit.values"), "start": _pairs(orbit.start, "orbit.start"),
                 "velocity": _pairs(orbit.velocity, "orbit.velocity"), "span": _exact(orbit.span, "orbit.span")}
        out["orbit"] = file._orbit_request(table, coordinates, symbols, function_names, used)
    plots = given["plots"]
    if plots:
        if isinstance(plots, PlotRequest):
            plots = (plots,)
        tables = []
        for number, plot in enumerate(plots, start=1):
            plot = _expect(plot, PlotRequest, f"plot {number}", "PlotRequest(quantities=(...), along=r, ...)")
            quantities = [plot.quantities] if isinstance(plot.quantities, str) else list(plot.quantities)
            tables.append({"quantity": quantities, "along": _name(plot.along, f"plot {number}.along"),
                           "range": [_exact(plot.low, f"plot {number}.range"), _exact(plot.high, f"plot {number}.range")],
                           "values": _pairs(plot.values, f"plot {number}.values"), "shade": plot.shade})
        known = dict(symbols)
        if matter is not None:
            known.update({s.name: s for s in out["matter"].cosmological_constant.free_symbols})
        out["plots"] = file._plot_requests(tables, coordinates, known, function_names, used, out.get("matter"))
    frame = given["frame"]
    if frame is not None:
        frame = _expect(frame, FrameRequest, "frame", "FrameRequest(kind=..., vectors=((name, components), ...))")
        vectors = {}
        for entry in frame.vectors:
            if not (isinstance(entry, (tuple, list)) and len(entry) == 2 and isinstance(entry[0], str)
                    and isinstance(entry[1], (tuple, list)) and len(entry[1]) == len(names)):
                raise InputError(f"frame.vectors: each vector must be (name, its {len(names)} components)")
            label, components = entry
            vectors[label] = {n: _exact(c, f"frame.vectors.{label}.{n}", allow_imaginary=True)
                              for n, c in zip(names, components) if c != 0}
        table = {"kind": frame.kind, "index": frame.index, "vectors": vectors}
        out["frame"] = file._frame_request(table, coordinates, _vocabulary(symbols, function_names))
    signs = tuple(given["function_signs"])
    for sign in signs:
        _expect(sign, FunctionSign, "function_signs", "FunctionSign(\"A\", \"positive\")")
        f = function_names.get(sign.function)
        if f is None:
            raise InputError(f"function_signs: '{sign.function}' is not a free function of the metric "
                             f"({', '.join(function_names) or 'it has none'})")
        if sign.along and sign.along not in {a.name for a in f.args if isinstance(a, sympy.Symbol)}:
            raise InputError(f"function_signs: '{sign.function}' does not depend on '{sign.along}'")
    if signs:
        out["function_signs"] = signs
    return out


def _matter(file, matter: MatterRequest, coordinates: tuple, symbols: dict, functions: dict) -> MatterRequest:
    symbols = dict(symbols)
    for name, given in (("G", matter.newton), ("c", matter.light)):
        if given is not None and matter.units == "physical":
            if not isinstance(given, sympy.Symbol):
                raise InputError(f"matter.units = \"physical\" needs a symbol for '{name}', not {given}")
            symbols[name] = given
    region = {}
    for entry in matter.region:
        if not (isinstance(entry, (tuple, list)) and len(entry) == 3):
            raise InputError("matter.region: each range must be (symbol, low, high)")
        symbol, low, high = entry
        where = f"matter.region.{_name(symbol, 'matter.region')}"
        region[symbol.name] = [_exact(low, where), _exact(high, where)]
    table = {"units": matter.units, "time": _name(matter.time, "matter.time"),
             "cosmological_constant": _exact(matter.cosmological_constant, "matter.cosmological_constant"),
             "region": region}
    checked = file._matter_request(table, coordinates, _with_constants(symbols, matter), functions)
    model = getattr(matter, "model", None)
    if model is not None:
        _check_model(model, coordinates, functions)
    return dataclasses.replace(checked, model=model) if model is not None else checked


def _check_model(model, coordinates: tuple, functions: dict) -> None:
    """A [matter.model] given as a record: its kind, what that kind needs, exact expressions."""
    from .record import MODEL_KINDS
    _expect(model, MatterModel, "matter.model", "MatterModel(\"perfect fluid\", density=rho, pressure=p)")
    if model.kind not in MODEL_KINDS:
        raise InputError(f"'matter.model.kind' must be one of {', '.join(repr(k) for k in MODEL_KINDS)}, "
                         f"not {model.kind!r}")
    needed = {"perfect fluid": ("density", "pressure"), "dust": ("density",), "scalar field": ("field",),
              "electromagnetic field": ("vector_potential",)}[model.kind]
    for key in needed:
        if getattr(model, key) in (None, ()):
            raise InputError(f"matter.model ({model.kind}) needs '{key}'")
    for key in ("density", "pressure", "field", "potential"):
        if getattr(model, key) is not None:
            _exact(getattr(model, key), f"matter.model.{key}")
    for key in ("velocity", "vector_potential"):
        components = getattr(model, key)
        if components and len(components) != len(coordinates):
            raise InputError(f"matter.model.{key} needs one component per coordinate ({len(coordinates)})")
        for name, c in zip(coordinates, components):
            _exact(c, f"matter.model.{key}.{name}")


def _expect(value, kind: type, where: str, example: str):
    if not isinstance(value, kind):
        raise InputError(f"{where} must be a stepper.{kind.__name__}, e.g. {example}, not {type(value).__name__}")
    return value


def _exact(value, where: str, allow_imaginary: bool = False) -> sympy.Expr:
    """An exact sympy value (a Python integer is taken as one); text and floating-point numbers are refused."""
    if isinstance(value, str):
        raise InputError(f"{where} must be a sympy expression, not text (use stepper.load_metric for text)")
    if isinstance(value, float):
        raise InputError(f"{where} must be exact: use sympy.Rational instead of floating-point numbers")
    try:
        value = as_expression(value)
    except TypeError:
        raise InputError(f"{where} must be an exact sympy expression or integer, not {type(value).__name__}") from None
    if value.has(sympy.Float):
        raise InputError(f"{where} must be exact: use sympy.Rational instead of floating-point numbers")
    if value.has(sympy.I) and not allow_imaginary:
        raise InputError(f"{where} must be real")
    return value


def _name(symbol, where: str) -> str:
    if not isinstance(symbol, sympy.Symbol):
        raise InputError(f"{where} must be a sympy Symbol, not {symbol!r}")
    return symbol.name


def _pairs(pairs, where: str) -> dict:
    """(symbol, value) pairs (or a dict of them) as the table {name: value}."""
    items = pairs.items() if isinstance(pairs, dict) else pairs
    table = {}
    for entry in items:
        if not (isinstance(entry, (tuple, list)) and len(entry) == 2):
            raise InputError(f"{where} must be (symbol, value) pairs")
        table[_name(entry[0], where)] = _exact(entry[1], f"{where}.{entry[0]}")
    return table


def _function_name(unknown) -> str:
    if isinstance(unknown, str):
        return unknown
    if isinstance(unknown, AppliedUndef):
        return unknown.func.__name__
    if isinstance(unknown, sympy.core.function.UndefinedFunction):
        return unknown.__name__
    raise InputError(f"ansatz.unknowns must name free functions of the metric, not {unknown!r}")


def _with_constants(symbols: dict, request) -> dict:
    """The symbols a request's cosmological constant may use: in Python any symbol (a metric file declares
    them in [symbols])."""
    lam = getattr(request, "cosmological_constant", None)
    extra = {s.name: s for s in lam.free_symbols} if isinstance(lam, sympy.Basic) else {}
    return {**extra, **symbols}


def _vocabulary(symbols: dict, functions: dict):
    from .parse import Vocabulary
    return Vocabulary(symbols, functions, {})
