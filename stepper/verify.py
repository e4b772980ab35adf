"""Numeric verification: the symbolic results against an independent numeric route.

At a few random points inside the metric's domain (parameters and coordinates
chosen with the declared signs, free functions replaced by fixed random
polynomials, points where the metric is singular or degenerate skipped), the
metric is evaluated with mpmath at high precision and its Christoffel
symbols, Riemann tensor, Ricci tensor and scalar curvature are computed by
finite differences in :mod:`stepper.numeric`, which shares no code with the
symbolic route.  The symbolic results, evaluated at the same points, are
compared component by component; the largest relative deviation of each
quantity is reported.
"""

from __future__ import annotations

import random
from dataclasses import dataclass
from typing import Mapping, Sequence

import mpmath
import sympy

from . import numeric
from .sampling import signed_sample

#: Working precision of the check (decimal digits).
DIGITS = 30
#: A deviation above this fails the check.
TOLERANCE = mpmath.mpf("1e-15")
#: Points at which the results are compared.
POINTS = 3
SEED = 20261201


@dataclass(frozen=True)
class NumericCheck:
    """Largest relative deviation per quantity, and where it was measured."""

    deviations: dict[str, float]
    points: list[dict[str, str]]
    parameters: dict[str, sympy.Rational]
    functions: dict[str, sympy.Expr]
    digits: int
    tolerance: float
    passed: bool
    note: str = ""


def _sample(symbol: sympy.Symbol, rng: random.Random) -> sympy.Rational:
    """A random rational of the right sign, between about 0.4 and 2.6 in size
    (a symbol of unknown sign is positive three times in four)."""
    return signed_sample(symbol, rng, 400, 2600, positive_share=0.75)


def _concrete_functions(functions: Sequence[sympy.Expr], rng: random.Random) -> dict:
    """Each free function f(x, ...) becomes 1 + sum of small random linear and quadratic terms."""
    out = {}
    for f in functions:
        body = sympy.Integer(1)
        for a in f.args:
            body += sympy.Rational(rng.randint(-30, 30), 100) * a + sympy.Rational(rng.randint(-20, 20), 100) * a**2
        out[f] = body
    return out


def _dirac_delta(x, *order):
    """DiracDelta (and its derivatives) away from its support: zero; at the support the point is not used."""
    if x == 0:
        raise ValueError("a point on the support of a delta distribution")
    return mpmath.mpf(0)


def _heaviside(x, *at_zero):
    if x == 0:
        raise ValueError("a point where a step function jumps")
    return mpmath.mpf(1) if x > 0 else mpmath.mpf(0)


#: The distributions that derivatives of |x| and sign(x) bring into symbolic results, evaluated at the random
#: points (where their argument is not zero); everything else is mpmath's.
MODULES = [{"DiracDelta": _dirac_delta, "Heaviside": _heaviside}, "mpmath"]


def _substitute(expr: sympy.Expr, functions: Mapping, values: Mapping) -> sympy.Expr:
    if functions:
        expr = expr.xreplace(functions).doit()
    return expr.xreplace(values)


def _size_spread(g: mpmath.matrix) -> int:
    """Decimal orders of magnitude between the largest and the smallest nonzero component of ``g``."""
    sizes = [abs(g[i, j]) for i in range(g.rows) for j in range(g.cols) if g[i, j] != 0]
    if not sizes:
        return 0
    return int(mpmath.floor(mpmath.log10(max(sizes) / min(sizes))))


def numeric_check(coordinates: Sequence[sympy.Symbol], matrix: sympy.Matrix, parameters: Sequence[sympy.Symbol],
                  functions: Sequence[sympy.Expr], results: Mapping[str, object],
                  points: int = POINTS, digits: int = DIGITS) -> NumericCheck:
    """Compare ``results`` (christoffel, riemann, ricci, scalar) with finite differences of ``matrix``."""
    rng = random.Random(SEED)
    n = len(coordinates)
    names = [c.name for c in coordinates]
    concrete = _concrete_functions(functions, rng)
    parameter_values = {p: _sample(p, rng) for p in parameters}
    g = sympy.Matrix(matrix).subs(concrete).doit().subs(parameter_values)
    metric_function = sympy.lambdify([coordinates], g, modules=MODULES, docstring_limit=0)
    dependencies = sorted({frozenset(k for k, x in enumerate(coordinates) if x in value.free_symbols)
                           for value in g}, key=sorted)

    def metric(x):
        return mpmath.matrix(metric_function(list(x)))

    quantities = {"christoffel": 3, "riemann": 4, "ricci": 2}
    prepared = {}
    for quantity, rank in quantities.items():
        comps = results.get(quantity, {})
        keys = list(comps)
        exprs = [_substitute(comps[k], concrete, parameter_values) for k in keys]
        index_keys = [tuple(names.index(part) for part in k.split(",")) for k in keys]
        function = sympy.lambdify([coordinates], exprs, modules=MODULES, docstring_limit=0) if exprs else None
        prepared[quantity] = (index_keys, function)
    scalar_function = sympy.lambdify([coordinates], _substitute(results["scalar"], concrete, parameter_values),
                                     modules=MODULES, docstring_limit=0)

    worst = {q: mpmath.mpf(0) for q in list(quantities) + ["scalar"]}
    used_points = []
    attempts = 0
    spread_note = ""
    with mpmath.workdps(digits + 10):
        while len(used_points) < points and attempts < 60:
            attempts += 1
            point = [mpmath.mpf(v.p) / v.q for v in (_sample(c, rng) for c in coordinates)]
            try:
                spread = _size_spread(metric(point))
                if spread > digits:
                    spread_note = (f"the metric's components differ in size by a factor of about 10^{spread}, "
                                   f"more than a {digits}-digit numeric check can resolve")
                    continue
                reference = numeric.curvature(metric, point, dps=digits, with_kretschmann=False,
                                              dependencies=dependencies)
                symbolic = {}
                for quantity, (index_keys, function) in prepared.items():
                    values = function(point) if function is not None else []
                    symbolic[quantity] = {k: mpmath.mpf(v) for k, v in zip(index_keys, values)}
                symbolic_scalar = mpmath.mpf(scalar_function(point))
            except (ZeroDivisionError, ValueError, TypeError, OverflowError):
                continue
            if not all(mpmath.isfinite(v) and mpmath.im(v) == 0 for table in symbolic.values() for v in table.values()):
                continue
            if not mpmath.isfinite(symbolic_scalar):
                continue
            numeric_tables = {
                "christoffel": reference.christoffel,
                "riemann": reference.riemann,
                "ricci": {(i, j): reference.ricci[i, j] for i in range(n) for j in range(n)},
            }
            for quantity in quantities:
                worst[quantity] = max(worst[quantity], numeric.compare(symbolic[quantity], numeric_tables[quantity]))
            worst["scalar"] = max(worst["scalar"], numeric.compare({(): symbolic_scalar}, {(): reference.scalar}))
            used_points.append({name: mpmath.nstr(value, 12) for name, value in zip(names, point)})
    passed = bool(used_points) and all(v <= TOLERANCE for v in worst.values())
    if spread_note and not used_points:
        note = spread_note
    elif not used_points:
        note = f"no usable point in {attempts} tries (the metric was singular, degenerate or not real there)"
    elif len(used_points) < points:
        note = f"only {len(used_points)} of {points} random points were usable"
    else:
        note = ""
    return NumericCheck(
        deviations={q: float(mpmath.nstr(v, 3, min_fixed=0, max_fixed=0)) for q, v in worst.items()},
        points=used_points,
        parameters={p.name: v for p, v in parameter_values.items()},
        functions={f.func.__name__: body for f, body in concrete.items()},
        digits=digits,
        tolerance=float(mpmath.nstr(TOLERANCE, 3)),
        passed=passed,
        note=note,
    )
