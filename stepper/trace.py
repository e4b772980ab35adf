"""The trace file: a derivation written as JSON, byte for byte the same for the
same input.

Expressions are written with sympy's string printer, so that
``sympy.sympify(text, locals=symbols)`` reads each back to the same
expression when ``symbols`` maps the names listed under ``metric`` to symbols
with their assumptions (and free functions to sympy functions).
"""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path
from typing import Any

import sympy

from .algebra import printer_stable
from .chain import Derivation
from .tracer import Simplification, Step, Verdict

TRACE_FORMAT_VERSION = 1


def expression_text(expr: sympy.Expr) -> str:
    """The string printer's form: what sympify reads back."""
    return sympy.sstr(expr, order="lex")


def _value(result: Any) -> Any:
    if result is None:
        return None
    if isinstance(result, Verdict):
        return {"statement": result.statement, "holds": result.holds, "evidence": result.evidence}
    if isinstance(result, dict):
        return {key: _value(value) for key, value in result.items()}
    if isinstance(result, (bool, int, str, float)):
        return result
    if isinstance(result, (list, tuple)):
        return [_value(v) for v in result]
    return expression_text(result)


def _simplification(s: Simplification) -> dict:
    return {"rewrite": s.rewrite,
            "before": None if s.before is None else expression_text(s.before),
            "before_terms": s.before_size,
            "after": expression_text(s.after)}


def step_record(step: Step) -> dict:
    """A step as plain JSON data."""
    return {
        "id": step.id,
        "kind": step.kind,
        "annotation": step.annotation,
        "formula": step.formula,
        "substituted": step.substituted,
        "uses": list(step.uses),
        "params": _value(dict(step.params)),
        "result": _value(step.result),
        "simplifications": [_simplification(s) for s in step.simplifications],
    }


def metric_record(derivation: Derivation) -> dict:
    m = derivation.metric
    return {
        "title": m.title,
        "notes": m.notes,
        "coordinates": list(m.names),
        "dimension": m.dimension,
        "assumptions": {name: word for name, word in m.assumptions},
        "parameters": [p.name for p in m.parameters],
        "functions": {expression_text(f.func): [a.name for a in f.args] for f in m.functions},
        "abbreviations": {name: expression_text(value) for name, value in m.abbreviations},
        "line_element": m.line_element,
        "components": {f"{m.names[i]},{m.names[j]}": expression_text(printer_stable(m.matrix[i, j]))
                       for i in range(m.dimension) for j in range(m.dimension) if m.matrix[i, j] != 0},
        "requests": requests_record(m),
    }


def requests_record(m) -> dict:
    """What was asked beyond curvature: matter, an ansatz to solve, an orbit."""
    out: dict = {}
    if m.matter is not None:
        r = m.matter
        out["matter"] = {"units": r.units, "cosmological_constant": expression_text(r.cosmological_constant),
                         "kappa": expression_text(r.kappa), "time": r.time.name,
                         "region": {s.name: [expression_text(lo), expression_text(hi)] for s, lo, hi in r.region}}
    if m.ansatz is not None:
        out["ansatz"] = {"unknowns": [expression_text(f) for f in m.ansatz.unknowns],
                         "cosmological_constant": expression_text(m.ansatz.cosmological_constant)}
    if m.orbit is not None:
        from .geodesics import orbit_params
        out["orbit"] = _value(orbit_params(m.orbit))
    return out


def trace_data(derivation: Derivation) -> dict:
    """Everything in the trace, as plain JSON data (no timings: same input, same bytes)."""
    return {
        "format": "stepper trace",
        "version": TRACE_FORMAT_VERSION,
        "metric": metric_record(derivation),
        "arithmetic": derivation.arithmetic,
        "conventions": dict(derivation.conventions),
        "steps": [step_record(s) for s in derivation.steps],
        "results": _value(derivation.results),
    }


def trace_json(derivation: Derivation) -> str:
    return json.dumps(trace_data(derivation), indent=1, ensure_ascii=True) + "\n"


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
