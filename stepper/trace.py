"""The trace file: a derivation record written as JSON and read back, byte for byte the same.

:func:`trace_json` writes a :class:`~stepper.record.Derivation`;
:func:`load_trace` reads one back, so that every exporter can work from a
saved trace alone (``stepper render``), and ``load_trace(text)`` written
again gives ``text``.  The layout is described by the JSON Schema shipped
beside this module (``trace.schema.json``).

Values are tagged so that reading back needs no guessing:

* a sympy expression is ``{"expr": "<sympy's string form>"}``;
* a verdict is ``{"statement": ..., "holds": true | false | null, "evidence": ...}``;
* every other string is text; numbers, booleans and null are themselves.

Every symbol and function an expression uses is declared under
``declarations`` (name and assumption word; function names and their
arguments).  Reading an expression never evaluates text: it is parsed with
Python's ``ast`` module (which only parses) and built from the declared
names, a fixed list of sympy functions and exact integers; anything else
is refused with a one-line :class:`~stepper.errors.InputError`.
"""

from __future__ import annotations

import ast
import json
import os
import re
import tempfile
from pathlib import Path
from typing import Any, Callable

import sympy
from sympy.core.function import AppliedUndef

from .version import __version__
from .errors import InputError
from .record import MODEL_KINDS, MatterModel
from .record import (ASSUMPTION_WORDS, FUNCTION_SIGN_WORDS, PLOT_SHADES, STAGES, AnsatzRequest, Derivation, FrameRequest, FunctionSign,
                     MatterRequest, MetricRecord, OrbitRequest, PlotRequest, Simplification, Step, StepKind, Verdict)

TRACE_FORMAT = "stepper trace"
TRACE_FORMAT_VERSION = 2

#: The JSON Schema of the trace, shipped with the package.
SCHEMA_PATH = Path(__file__).resolve().parent / "trace.schema.json"

#: Largest trace file read back (bytes); a rotating black hole's trace is about a megabyte.
MAX_TRACE_BYTES = 256 * 1024 * 1024

_VERDICT_KEYS = ("statement", "holds", "evidence")
_IDENTIFIER = re.compile(r"[A-Za-z][A-Za-z0-9_]*\Z")


class TraceFormatError(InputError):
    """A trace file that stepper cannot read back (a one-line message)."""


# ---------------------------------------------------------------------------
# Writing
# ---------------------------------------------------------------------------

def expression_text(expr: sympy.Expr) -> str:
    """The string printer's form, which :func:`load_trace` reads back."""
    return sympy.sstr(expr, order="lex")


def assumption_word(symbol: sympy.Symbol) -> str:
    """The word that re-creates ``symbol`` exactly; an error if none does."""
    for word, keywords in ASSUMPTION_WORDS.items():
        if sympy.Symbol(symbol.name, **{k: True for k in keywords}) == symbol:
            return word
    raise ValueError(f"the symbol {symbol.name} has assumptions a trace cannot record")


class _Writer:
    """Turns record values into tagged JSON data and collects the symbols and functions they use."""

    def __init__(self) -> None:
        self.symbols: dict[str, sympy.Symbol] = {}
        self.functions: dict[str, int] = {}
        self.texts: dict[sympy.Basic, str] = {}  # a result recurs in the steps that use it: printed once

    def expression(self, expr) -> dict:
        if isinstance(expr, int) and not isinstance(expr, bool):
            expr = sympy.Integer(expr)
        if expr in self.texts:
            return {"expr": self.texts[expr]}
        for symbol in sorted(expr.free_symbols, key=lambda s: s.name):
            if not isinstance(symbol, sympy.Symbol) or isinstance(symbol, sympy.Dummy):
                raise ValueError(f"a recorded expression holds a placeholder symbol {symbol}")
            known = self.symbols.setdefault(symbol.name, symbol)
            if known != symbol:
                raise ValueError(f"two symbols named {symbol.name} with different assumptions")
        for applied in expr.atoms(AppliedUndef):
            self.functions[applied.func.__name__] = len(applied.args)
        self.texts[expr] = expression_text(expr)
        return {"expr": self.texts[expr]}

    def value(self, value: Any) -> Any:
        if value is None or isinstance(value, (bool, int, float, str)):
            return value
        if isinstance(value, sympy.Basic):
            return self.expression(value)
        if isinstance(value, Verdict):
            return {"statement": value.statement, "holds": value.holds, "evidence": value.evidence}
        if isinstance(value, dict) or hasattr(value, "items"):
            out = {}
            for key, inner in value.items():
                if not isinstance(key, str):
                    raise ValueError(f"a recorded table has a key that is not text: {key!r}")
                out[key] = self.value(inner)
            if set(out) == set(_VERDICT_KEYS) or (set(out) == {"expr"} and isinstance(out["expr"], str)):
                raise ValueError(f"a recorded table looks like a tagged value: {sorted(out)}")
            return out
        if isinstance(value, (list, tuple)):
            return [self.value(v) for v in value]
        raise ValueError(f"a recorded value of type {type(value).__name__} cannot be written")

    def step(self, step: Step) -> dict:
        return {
            "id": step.id,
            "kind": step.kind.value,
            "stage": step.stage,
            "quantity": step.quantity,
            "component": step.component,
            "annotation": step.annotation,
            "formula": step.formula,
            "substituted": step.substituted,
            "uses": list(step.uses),
            "params": self.value(dict(step.params)),
            "result": self.value(step.result),
            "simplifications": [{"rewrite": s.rewrite,
                                 "before": None if s.before is None else self.expression(s.before),
                                 "before_terms": s.before_size,
                                 "after": self.expression(s.after)} for s in step.simplifications],
        }

    def metric(self, m: MetricRecord) -> dict:
        n = m.dimension
        for symbol in tuple(m.coordinates) + tuple(m.parameters):
            self.expression(symbol)
        # Declared signs of free functions: written only when there are some, so that a metric without
        # them has the same trace as before they existed.
        signs = {"function_signs": [s.as_data() for s in m.function_signs]} if m.function_signs else {}
        return {
            "title": m.title,
            "notes": m.notes,
            "coordinates": list(m.names),
            "dimension": n,
            "assumptions": {name: word for name, word in m.assumptions},
            "parameters": [p.name for p in m.parameters],
            "functions": {f.func.__name__: [a.name for a in f.args] for f in m.functions},
            **signs,
            "abbreviations": {name: self.expression(value) for name, value in m.abbreviations},
            "line_element": m.line_element,
            "line_element_expression": (None if m.line_element_expression is None
                                        else self.expression(m.line_element_expression)),
            "components": {f"{m.names[i]},{m.names[j]}": self.expression(m.matrix[i, j])
                           for i in range(n) for j in range(n) if m.matrix[i, j] != 0},
            "requests": self.requests(m),
        }

    def model(self, model: MatterModel) -> dict:
        """[matter.model]: its kind and the expressions that declare it (absent ones are None or empty)."""
        optional = lambda e: None if e is None else self.expression(e)
        return {"kind": model.kind, "density": optional(model.density), "pressure": optional(model.pressure),
                "velocity": [self.expression(e) for e in model.velocity], "field": optional(model.field),
                "potential": self.expression(model.potential),
                "vector_potential": [self.expression(e) for e in model.vector_potential]}

    def requests(self, m: MetricRecord) -> dict:
        """What was asked beyond curvature: matter, an ansatz to solve, an orbit."""
        out: dict = {}
        if m.matter is not None:
            r = m.matter
            out["matter"] = {
                "units": r.units, "cosmological_constant": self.expression(r.cosmological_constant),
                "kappa": self.expression(r.kappa), "time": r.time.name,
                "newton": None if r.newton is None else r.newton.name,
                "light": None if r.light is None else r.light.name,
                "region": {s.name: [self.expression(lo), self.expression(hi)] for s, lo, hi in r.region}}
            if r.model is not None:
                out["matter"]["model"] = self.model(r.model)
            for symbol in (r.newton, r.light):
                if symbol is not None:
                    self.expression(symbol)
        if m.ansatz is not None:
            out["ansatz"] = {"unknowns": [self.expression(f) for f in m.ansatz.unknowns],
                             "cosmological_constant": self.expression(m.ansatz.cosmological_constant)}
        if m.orbit is not None:
            o = m.orbit
            out["orbit"] = {"kind": o.kind, "time": o.time.name,
                            "values": {s.name: self.expression(v) for s, v in o.values},
                            "start": {s.name: self.expression(v) for s, v in o.start},
                            "velocity": {s.name: self.expression(v) for s, v in o.velocity},
                            "span": self.expression(o.span)}
            for s, _ in o.values:
                self.expression(s)
        if m.plots:
            out["plots"] = [{"quantities": list(p.quantities), "along": p.along.name,
                             "range": [self.expression(p.low), self.expression(p.high)],
                             "values": {s.name: self.expression(v) for s, v in p.values},
                             "shade": p.shade or None} for p in m.plots]
            for p in m.plots:
                for s in (p.along, *(s for s, _ in p.values)):
                    self.expression(s)
        if m.frame is not None:
            names = m.names
            out["frame"] = {"kind": m.frame.kind, "index": m.frame.index,
                            "vectors": {label: {names[i]: self.expression(c) for i, c in enumerate(components) if c != 0}
                                        for label, components in m.frame.vectors}}
        return out


def trace_data(derivation: Derivation) -> dict:
    """Everything in the trace, as plain JSON data (no timings: same input, same bytes)."""
    writer = _Writer()
    metric = writer.metric(derivation.metric)
    steps = [writer.step(s) for s in derivation.steps]
    results = writer.value(dict(derivation.results))
    return {
        "format": TRACE_FORMAT,
        "version": TRACE_FORMAT_VERSION,
        "written_by": {"stepper": __version__, "sympy": sympy.__version__},
        "declarations": {
            "symbols": {name: assumption_word(writer.symbols[name]) for name in sorted(writer.symbols)},
            "functions": {name: writer.functions[name] for name in sorted(writer.functions)},
        },
        "metric": metric,
        "arithmetic": derivation.arithmetic,
        "arithmetic_description": derivation.arithmetic_description,
        "conventions": dict(derivation.conventions),
        "conventions_latex": dict(derivation.conventions_latex),
        "convention_data": writer.value(dict(derivation.convention_data)),
        "steps": steps,
        "results": results,
        **({"stopped": {"reason": derivation.stopped["reason"], "during": derivation.stopped["during"],
                        "finished": list(derivation.stopped["finished"])}} if derivation.stopped else {}),
    }


def trace_json(derivation: Derivation) -> str:
    return json.dumps(trace_data(derivation), indent=1, ensure_ascii=True) + "\n"


# ---------------------------------------------------------------------------
# Reading
# ---------------------------------------------------------------------------

#: sympy's names that may appear in a recorded expression, and what they build.
_SYMPY_FUNCTIONS: dict[str, Callable] = {
    name: getattr(sympy, name) for name in (
        "sin", "cos", "tan", "cot", "sec", "csc", "sinh", "cosh", "tanh", "coth",
        "asin", "acos", "atan", "asinh", "acosh", "atanh",
        "exp", "log", "sqrt", "Abs", "sign", "Heaviside", "DiracDelta", "Derivative", "Rational")}
_SYMPY_CONSTANTS = {"pi": sympy.pi, "E": sympy.E, "I": sympy.I}

#: Deepest nesting of an expression read back.
MAX_EXPRESSION_DEPTH = 400
#: Largest exact power of a number computed while reading (bits of the result).
MAX_POWER_BITS = 100_000


class _ExpressionReader:
    """Builds sympy expressions from the string printer's form, using only declared names."""

    def __init__(self, symbols: dict[str, sympy.Symbol], functions: dict[str, sympy.FunctionClass]):
        self.names: dict[str, Any] = dict(_SYMPY_CONSTANTS)
        self.names.update(symbols)
        self.calls: dict[str, Callable] = dict(_SYMPY_FUNCTIONS)
        self.calls.update(functions)

    def read(self, text: str, where: str) -> sympy.Expr:
        if not isinstance(text, str):
            raise TraceFormatError(f"{where}: an expression must be text")
        try:
            tree = ast.parse(text, mode="eval")
        except (SyntaxError, ValueError, RecursionError, MemoryError):
            raise TraceFormatError(f"{where}: {_brief(text)!r} is not an expression stepper writes") from None
        try:
            return self.node(tree.body, where, 0)
        except RecursionError:
            raise TraceFormatError(f"{where}: expression nested too deeply") from None

    def node(self, node: ast.AST, where: str, depth: int):
        if depth > MAX_EXPRESSION_DEPTH:
            raise TraceFormatError(f"{where}: expression nested too deeply")
        deeper = depth + 1
        if isinstance(node, ast.BinOp) and isinstance(node.op, (ast.Add, ast.Sub)):
            terms = []
            while isinstance(node, ast.BinOp) and isinstance(node.op, (ast.Add, ast.Sub)):
                right = self.node(node.right, where, deeper)
                terms.append(right if isinstance(node.op, ast.Add) else -right)
                node = node.left
            terms.append(self.node(node, where, deeper))
            return sympy.Add(*reversed(terms))
        if isinstance(node, ast.BinOp):
            left, right = self.node(node.left, where, deeper), self.node(node.right, where, deeper)
            if isinstance(node.op, ast.Mult):
                return left * right
            if isinstance(node.op, ast.Div):
                if right == 0:
                    raise TraceFormatError(f"{where}: division by zero")
                return left / right
            if isinstance(node.op, ast.Pow):
                self.check_power(left, right, where)
                return left ** right
        elif isinstance(node, ast.UnaryOp) and isinstance(node.op, (ast.USub, ast.UAdd)):
            value = self.node(node.operand, where, deeper)
            return -value if isinstance(node.op, ast.USub) else value
        elif isinstance(node, ast.Constant) and type(node.value) is int:
            return sympy.Integer(node.value)
        elif isinstance(node, ast.Name):
            if node.id in self.names:
                return self.names[node.id]
            raise TraceFormatError(f"{where}: unknown name {node.id!r} (not declared in the trace)")
        elif isinstance(node, ast.Tuple):
            return sympy.Tuple(*(self.node(e, where, deeper) for e in node.elts))
        elif isinstance(node, ast.Call) and isinstance(node.func, ast.Name) and not node.keywords:
            function = self.calls.get(node.func.id)
            if function is None:
                raise TraceFormatError(f"{where}: unknown function {node.func.id!r} (not declared in the trace)")
            return function(*(self.node(a, where, deeper) for a in node.args))
        raise TraceFormatError(f"{where}: {type(node).__name__} is not part of an expression stepper writes")

    @staticmethod
    def check_power(base, exponent, where: str) -> None:
        if base.is_Number and exponent.is_Integer:
            bits = max(abs(sympy.Rational(base).p).bit_length(), abs(sympy.Rational(base).q).bit_length())
            if bits * abs(int(exponent)) > MAX_POWER_BITS:
                raise TraceFormatError(f"{where}: a power too large to compute")


def _brief(text: str, limit: int = 60) -> str:
    return text if len(text) <= limit else text[:limit - 3] + "..."


class _Reader:
    """Turns tagged JSON data back into record values."""

    def __init__(self, declarations: dict):
        symbols = {}
        for name, word in _mapping(declarations.get("symbols", {}), "declarations.symbols").items():
            _identifier(name, "declarations.symbols")
            if word not in ASSUMPTION_WORDS:
                raise TraceFormatError(f"declarations.symbols: unknown assumption {word!r} for {name}")
            symbols[name] = sympy.Symbol(name, **{k: True for k in ASSUMPTION_WORDS[word]})
        functions = {}
        for name, arity in _mapping(declarations.get("functions", {}), "declarations.functions").items():
            _identifier(name, "declarations.functions")
            if name in symbols or name in _SYMPY_FUNCTIONS or name in _SYMPY_CONSTANTS:
                raise TraceFormatError(f"declarations.functions: {name!r} is declared twice")
            functions[name] = sympy.Function(name)
        self.symbols = symbols
        self.functions = functions
        self.expressions = _ExpressionReader(symbols, functions)

    def expression(self, data, where: str) -> sympy.Expr:
        if not (isinstance(data, dict) and set(data) == {"expr"}):
            raise TraceFormatError(f"{where}: expected an expression {{\"expr\": ...}}")
        return self.expressions.read(data["expr"], where)

    def value(self, data, where: str):
        if data is None or isinstance(data, (bool, int, float, str)):
            return data
        if isinstance(data, list):
            return [self.value(v, f"{where}[{k}]") for k, v in enumerate(data)]
        if isinstance(data, dict):
            if set(data) == {"expr"} and isinstance(data["expr"], str):
                return self.expression(data, where)
            if set(data) == set(_VERDICT_KEYS):
                return self.verdict(data, where)
            return {key: self.value(v, f"{where}.{key}") for key, v in data.items()}
        raise TraceFormatError(f"{where}: unexpected value")

    def verdict(self, data, where: str) -> Verdict:
        if not isinstance(data.get("statement"), str) or not isinstance(data.get("evidence"), str) \
                or data.get("holds") not in (True, False, None):
            raise TraceFormatError(f"{where}: a verdict needs a statement, holds (true, false or null) and evidence")
        return Verdict(data["statement"], data["holds"], data["evidence"])

    def symbol(self, name, where: str) -> sympy.Symbol:
        if name not in self.symbols:
            raise TraceFormatError(f"{where}: {name!r} is not a declared symbol")
        return self.symbols[name]

    def step(self, data, where: str, known: set[str]) -> Step:
        data = _mapping(data, where)
        try:
            kind = StepKind(data["kind"])
        except (KeyError, ValueError):
            raise TraceFormatError(f"{where}: unknown step kind {data.get('kind')!r}") from None
        step_id = _text(data.get("id"), f"{where}.id")
        if step_id in known:
            raise TraceFormatError(f"{where}: step id {step_id!r} recorded twice")
        uses = tuple(_text(u, f"{where}.uses") for u in _list(data.get("uses", []), f"{where}.uses"))
        missing = [u for u in uses if u not in known]
        if missing:
            raise TraceFormatError(f"{where}: step {step_id!r} uses steps not recorded before it: {missing}")
        simplifications = tuple(
            Simplification(_text(s.get("rewrite"), f"{where}.simplifications"),
                           None if s.get("before") is None else self.expression(s["before"], f"{where}.before"),
                           self.expression(s.get("after"), f"{where}.after"),
                           int(s.get("before_terms", 0)))
            for s in (_mapping(x, f"{where}.simplifications") for x in
                      _list(data.get("simplifications", []), f"{where}.simplifications")))
        stage = _text(data.get("stage", ""), f"{where}.stage")
        if stage not in STAGES:
            raise TraceFormatError(f"{where}: unknown stage {stage!r}")
        return Step(id=step_id, kind=kind, annotation=_text(data.get("annotation", ""), f"{where}.annotation"),
                    stage=stage, quantity=_text(data.get("quantity", ""), f"{where}.quantity"),
                    component=_text(data.get("component", ""), f"{where}.component"),
                    formula=_text(data.get("formula", ""), f"{where}.formula"), uses=uses,
                    result=self.value(data.get("result"), f"{where}.result"),
                    params=_mapping(self.value(data.get("params", {}), f"{where}.params"), f"{where}.params"),
                    substituted=_text(data.get("substituted", ""), f"{where}.substituted"),
                    simplifications=simplifications)

    def metric(self, data) -> MetricRecord:
        data = _mapping(data, "metric")
        names = [_identifier(n, "metric.coordinates") for n in _list(data.get("coordinates"), "metric.coordinates")]
        coordinates = tuple(self.symbol(n, "metric.coordinates") for n in names)
        if len(set(names)) != len(names) or len(names) < 2 or data.get("dimension") != len(names):
            raise TraceFormatError("metric: the coordinates and the dimension do not agree")
        parameters = tuple(self.symbol(n, "metric.parameters") for n in _list(data.get("parameters", []),
                                                                               "metric.parameters"))
        functions = []
        for name, arguments in _mapping(data.get("functions", {}), "metric.functions").items():
            if name not in self.functions:
                raise TraceFormatError(f"metric.functions: {name!r} is not a declared function")
            functions.append(self.functions[name](*(self.symbol(a, "metric.functions")
                                                    for a in _list(arguments, "metric.functions"))))
        n = len(names)
        rows = [[sympy.Integer(0)] * n for _ in range(n)]
        for key, value in _mapping(data.get("components", {}), "metric.components").items():
            parts = key.split(",")
            if len(parts) != 2 or not all(p in names for p in parts):
                raise TraceFormatError(f"metric.components: {key!r} does not name two coordinates")
            rows[names.index(parts[0])][names.index(parts[1])] = self.expression(value, f"metric.components.{key}")
        line_element = data.get("line_element")
        requests = _mapping(data.get("requests", {}), "metric.requests")
        return MetricRecord(
            coordinates=coordinates, matrix=sympy.ImmutableMatrix(rows),
            title=_text(data.get("title", ""), "metric.title"), parameters=parameters, functions=tuple(functions),
            abbreviations=tuple((_identifier(k, "metric.abbreviations"), self.expression(v, f"metric.abbreviations.{k}"))
                                for k, v in _mapping(data.get("abbreviations", {}), "metric.abbreviations").items()),
            line_element=None if line_element is None else _text(line_element, "metric.line_element"),
            line_element_expression=(None if data.get("line_element_expression") is None else
                                     self.expression(data["line_element_expression"], "metric.line_element_expression")),
            notes=_text(data.get("notes", ""), "metric.notes"),
            assumptions=tuple((_identifier(k, "metric.assumptions"), _text(v, "metric.assumptions"))
                              for k, v in _mapping(data.get("assumptions", {}), "metric.assumptions").items()),
            function_signs=self.function_signs(data.get("function_signs", []), functions),
            matter=self.matter(requests.get("matter")), ansatz=self.ansatz(requests.get("ansatz")),
            orbit=self.orbit(requests.get("orbit")), plots=self.plots(requests.get("plots", [])),
            frame=self.frame(requests.get("frame"), names))

    def function_signs(self, data, functions: list) -> tuple[FunctionSign, ...]:
        """The declared signs of free functions (absent from traces of metrics without them)."""
        where = "metric.function_signs"
        arguments = {f.func.__name__: [a.name for a in f.args] for f in functions}
        out = []
        for entry in _list(data, where):
            entry = _mapping(entry, where)
            name, along = entry.get("function"), entry.get("derivative")
            if name not in arguments:
                raise TraceFormatError(f"{where}: {name!r} is not a function of the metric")
            if along is not None and along not in arguments[name]:
                raise TraceFormatError(f"{where}: {name} does not depend on {along!r}")
            if entry.get("sign") not in FUNCTION_SIGN_WORDS:
                raise TraceFormatError(f"{where}: unknown sign {entry.get('sign')!r} for {name}")
            out.append(FunctionSign(name, entry["sign"], along or ""))
        return tuple(out)

    def matter(self, data) -> MatterRequest | None:
        if data is None:
            return None
        where = "metric.requests.matter"
        data = _mapping(data, where)
        optional = {k: None if data.get(k) is None else self.symbol(data[k], where) for k in ("newton", "light")}
        return MatterRequest(
            time=self.symbol(data.get("time"), where), units=_text(data.get("units"), where),
            cosmological_constant=self.expression(data.get("cosmological_constant"), where),
            newton=optional["newton"], light=optional["light"], model=self.model(data.get("model")),
            region=tuple((self.symbol(name, where), self.expression(bounds[0], where), self.expression(bounds[1], where))
                         for name, bounds in _mapping(data.get("region", {}), where).items()
                         if len(_list(bounds, where)) == 2))

    def model(self, data) -> MatterModel | None:
        if data is None:
            return None
        where = "metric.requests.matter.model"
        data = _mapping(data, where)
        kind = data.get("kind")
        if kind not in MODEL_KINDS:
            raise TraceFormatError(f"{where}: unknown kind {kind!r}")
        optional = lambda key: None if data.get(key) is None else self.expression(data[key], f"{where}.{key}")
        return MatterModel(kind, density=optional("density"), pressure=optional("pressure"),
                           velocity=tuple(self.expression(e, where) for e in _list(data.get("velocity", []), where)),
                           field=optional("field"), potential=optional("potential") or sympy.Integer(0),
                           vector_potential=tuple(self.expression(e, where)
                                                  for e in _list(data.get("vector_potential", []), where)))

    def ansatz(self, data) -> AnsatzRequest | None:
        if data is None:
            return None
        where = "metric.requests.ansatz"
        data = _mapping(data, where)
        return AnsatzRequest(unknowns=tuple(self.expression(u, where) for u in _list(data.get("unknowns"), where)),
                             cosmological_constant=self.expression(data.get("cosmological_constant"), where))

    def orbit(self, data) -> OrbitRequest | None:
        if data is None:
            return None
        where = "metric.requests.orbit"
        data = _mapping(data, where)

        def pairs(key):
            return tuple((self.symbol(k, where), self.expression(v, where))
                         for k, v in _mapping(data.get(key, {}), where).items())
        return OrbitRequest(time=self.symbol(data.get("time"), where), kind=_text(data.get("kind"), where),
                            values=pairs("values"), start=pairs("start"), velocity=pairs("velocity"),
                            span=self.expression(data.get("span"), where))


    def frame(self, data, names: list[str]) -> FrameRequest | None:
        """The metric file's [frame] (absent from traces of metrics without one)."""
        if data is None:
            return None
        where = "metric.requests.frame"
        data = _mapping(data, where)
        kind, index = data.get("kind"), data.get("index")
        if kind not in ("orthonormal", "null") or index not in ("up", "down"):
            raise TraceFormatError(f"{where}: an unknown kind or index")
        vectors = []
        for label, components in _mapping(data.get("vectors", {}), where).items():
            values = [sympy.Integer(0)] * len(names)
            for name, value in _mapping(components, where).items():
                if name not in names:
                    raise TraceFormatError(f"{where}: {name!r} is not a coordinate")
                values[names.index(name)] = self.expression(value, where)
            vectors.append((_identifier(label, where), tuple(values)))
        return FrameRequest(kind=kind, vectors=tuple(vectors), index=index)

    def plots(self, data) -> tuple[PlotRequest, ...]:
        """The [[plot]] requests (absent from traces of metrics without them)."""
        where = "metric.requests.plots"
        out = []
        for entry in _list(data, where):
            entry = _mapping(entry, where)
            bounds = _list(entry.get("range"), where)
            shade = entry.get("shade") or ""
            if len(bounds) != 2 or shade not in ("",) + PLOT_SHADES:
                raise TraceFormatError(f"{where}: a range of two values and an energy condition (or null) to shade")
            out.append(PlotRequest(
                quantities=tuple(_text(q, where) for q in _list(entry.get("quantities"), where)),
                along=self.symbol(entry.get("along"), where),
                low=self.expression(bounds[0], where), high=self.expression(bounds[1], where),
                values=tuple((self.symbol(k, where), self.expression(v, where))
                             for k, v in _mapping(entry.get("values", {}), where).items()),
                shade=shade))
        return tuple(out)


def _mapping(value, where: str) -> dict:
    if not isinstance(value, dict):
        raise TraceFormatError(f"{where}: expected an object")
    return value


def _list(value, where: str) -> list:
    if not isinstance(value, list):
        raise TraceFormatError(f"{where}: expected a list")
    return value


def _text(value, where: str) -> str:
    if not isinstance(value, str):
        raise TraceFormatError(f"{where}: expected text")
    return value


def _identifier(value, where: str) -> str:
    if not isinstance(value, str) or not _IDENTIFIER.match(value):
        raise TraceFormatError(f"{where}: {_brief(str(value))!r} is not a name (letters, digits, _)")
    return value


def trace_schema() -> dict:
    """The JSON Schema every trace stepper writes validates against."""
    return json.loads(SCHEMA_PATH.read_text(encoding="utf-8"))


def schema_problem(data: Any) -> str:
    """The first way ``data`` breaks the trace schema, in one line ('' when it validates)."""
    from jsonschema import Draft202012Validator
    error = next(iter(sorted(Draft202012Validator(trace_schema()).iter_errors(data), key=lambda e: list(e.path))), None)
    if error is None:
        return ""
    where = "/".join(str(p) for p in error.path) or "the top level"
    return f"at {where}: {_brief(' '.join(error.message.split()), 120)}"


def load_trace(text: str | bytes, validate: bool = True) -> Derivation:
    """The derivation a trace holds; a :class:`TraceFormatError` for anything stepper did not write.

    ``validate`` checks the data against the shipped schema first (skip it only for text stepper
    has just written itself)."""
    if isinstance(text, bytes):
        try:
            text = text.decode("utf-8")
        except UnicodeDecodeError:
            raise TraceFormatError("the trace is not UTF-8 text") from None
    try:
        data = json.loads(text)
    except (json.JSONDecodeError, RecursionError) as err:
        raise TraceFormatError(f"the trace is not valid JSON ({getattr(err, 'msg', 'nested too deeply')})") from None
    data = _mapping(data, "trace")
    if data.get("format") != TRACE_FORMAT:
        raise TraceFormatError("this is not a stepper trace (its 'format' is not \"stepper trace\")")
    if data.get("version") != TRACE_FORMAT_VERSION:
        raise TraceFormatError(f"trace format version {data.get('version')!r} cannot be read by this stepper "
                               f"(it reads version {TRACE_FORMAT_VERSION}); derive the metric again")
    if validate:
        problem = schema_problem(data)
        if problem:
            raise TraceFormatError(f"the trace does not follow stepper's trace schema {problem}")
    reader = _Reader(_mapping(data.get("declarations", {}), "declarations"))
    metric = reader.metric(data.get("metric"))
    steps: list[Step] = []
    known: set[str] = set()
    for number, step in enumerate(_list(data.get("steps"), "steps"), start=1):
        steps.append(reader.step(step, f"steps[{number}]", known))
        known.add(steps[-1].id)
    return Derivation(
        metric=metric, steps=tuple(steps), results=_mapping(reader.value(data.get("results", {}), "results"), "results"),
        arithmetic=_text(data.get("arithmetic"), "arithmetic"),
        arithmetic_description=_text(data.get("arithmetic_description", ""), "arithmetic_description"),
        conventions={k: _text(v, "conventions") for k, v in _mapping(data.get("conventions", {}), "conventions").items()},
        conventions_latex={k: _text(v, "conventions_latex")
                           for k, v in _mapping(data.get("conventions_latex", {}), "conventions_latex").items()},
        convention_data=_mapping(reader.value(data.get("convention_data", {}), "convention_data"), "convention_data"),
        stopped=_stopped(data.get("stopped")))


def _stopped(data) -> dict | None:
    """Where a partial derivation stopped (``stopped`` in the trace), checked field by field."""
    if data is None:
        return None
    data = _mapping(data, "stopped")
    if data.get("reason") not in ("time limit", "interrupted"):
        raise TraceFormatError("stopped.reason must be \"time limit\" or \"interrupted\"")
    return {"reason": data["reason"], "during": _text(data.get("during"), "stopped.during"),
            "finished": [_text(name, "stopped.finished") for name in _list(data.get("finished"), "stopped.finished")]}


def read_trace_file(path: str | Path) -> Derivation:
    """Load a trace file, with one-line errors for a missing, unreadable or oversized file."""
    path = Path(path)
    if not path.is_file():
        raise TraceFormatError(f"{path}: no such trace file")
    if path.stat().st_size > MAX_TRACE_BYTES:
        raise TraceFormatError(f"{path}: larger than {MAX_TRACE_BYTES // (1024 * 1024)} MiB; not a trace stepper wrote")
    try:
        raw = path.read_bytes()
    except OSError as err:
        raise TraceFormatError(f"{path}: cannot be read ({err.strerror or err})") from None
    try:
        return load_trace(raw)
    except TraceFormatError as err:
        raise TraceFormatError(f"{path}: {err.message}") from None


def write_atomically(path: Path, text: str | bytes) -> None:
    """Write to a temporary file beside ``path`` and rename it over ``path``,
    so an interrupted run never leaves a half-written file."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    handle, temporary = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    umask = os.umask(0)
    os.umask(umask)
    os.chmod(temporary, 0o666 & ~umask)
    try:
        data = text if isinstance(text, bytes) else text.encode("utf-8")
        with os.fdopen(handle, "wb") as out:
            out.write(data)
            out.flush()
            os.fsync(out.fileno())
        os.replace(temporary, path)
    except BaseException:
        if os.path.exists(temporary):
            os.unlink(temporary)
        raise
