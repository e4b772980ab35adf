"""Exact arithmetic under the curvature chain.

The chain (``stepper.chain``) never touches sympy's simplifier directly: it
combines elements with ``+ - * /``, differentiates them with
:meth:`Arithmetic.diff`, and asks :meth:`Arithmetic.zero_test` whether a
result vanishes.  Two arithmetics implement that contract:

* :class:`FieldArithmetic` -- elements are quotients of integer polynomials in
  a fixed list of generators: the coordinates and parameters, ``sin x`` and
  ``cos x`` (or ``sinh x`` and ``cosh x``) for each argument ``x`` that occurs,
  and every partial derivative of each free function up to a fixed order.
  The relations ``cos^2 x = 1 - sin^2 x`` and ``cosh^2 x = 1 + sinh^2 x`` are
  applied after every operation and denominators are kept free of ``cos x``,
  which makes the representation canonical: an element is zero exactly when
  its numerator is the zero polynomial.  Zero tests are therefore proofs.
* :class:`ExpressionArithmetic` -- plain sympy expressions, for metrics with
  functions the field cannot hold (``sqrt``, ``log``, ``exp``, trigonometric
  functions of compound arguments).  A zero test first tries sympy's
  ``cancel`` and ``simplify``; when they cannot decide, it evaluates the
  expression at random points and says so.

:func:`choose_arithmetic` picks the field whenever every metric component fits.
"""

from __future__ import annotations

import itertools
import random
from dataclasses import dataclass
from typing import Iterable, Sequence

import sympy
from sympy.core.function import AppliedUndef
from sympy.polys.rings import PolyElement, ring

from .record import as_expression  # noqa: F401  (re-exported for the engine)
from .sampling import signed_sample

#: How many orders of derivatives of free functions the field holds beyond
#: those in the metric.  The chain differentiates the metric at most three
#: times (the contracted Bianchi identity differentiates the Einstein tensor).
EXTRA_DERIVATIVE_ORDERS = 3

#: Polynomials in more generators than this are shown unfactored: multivariate
#: factoring costs far more than the rest of the derivation there.
FACTOR_GENERATORS_LIMIT = 6


@dataclass(frozen=True)
class ZeroTest:
    """Outcome of asking whether an element vanishes.

    ``vanishes`` is True (proven), False (proven non-zero) or None (not
    decided symbolically); ``evidence`` says in words how it was decided.
    """

    vanishes: bool | None
    evidence: str
    #: How it was decided, as data for the exporters: "canonical form", "cancel", "simplify", "sampled"
    #: (vanishes at ``points`` random points to ``digits`` digits), "no point" (no sample point could be
    #: evaluated) or "point" (non-zero at a sample point, ``magnitude`` its size there).
    how: str = ""
    points: int = 0
    digits: int = 0
    magnitude: float | None = None

    def as_data(self) -> dict:
        """The fields an exporter words the test from (recorded in a step's params)."""
        data: dict = {"how": self.how, "vanishes": self.vanishes}
        if self.how == "sampled":
            data.update(points=self.points, digits=self.digits)
        if self.magnitude is not None:
            data["magnitude"] = self.magnitude
        return data


class UnsupportedByField(Exception):
    """An expression uses something the rational-function field cannot hold."""


def printer_stable(expr: sympy.Expr) -> sympy.Expr:
    """The same expression in a form that sympy's string printer and sympify
    map to itself.

    Reading evaluates ``2*(a + b)`` by distributing the number over the sum.
    The printer writes a product as ``p*F1*F2/(q*D1*D2)``; when F1 (or D1) is
    a sum and p (or q) is not 1, reading would distribute, so the number is
    multiplied into that sum here, which is what reading would do.
    """
    if expr.is_Atom:
        return expr
    args = [printer_stable(a) for a in expr.args]
    if not isinstance(expr, sympy.Mul):
        return expr.func(*args) if args != list(expr.args) else expr
    rebuilt = sympy.Mul(*args)
    if not isinstance(rebuilt, sympy.Mul):
        return rebuilt
    coefficient, _ = rebuilt.as_coeff_Mul()
    if coefficient == 1 or not coefficient.is_Rational:
        return rebuilt
    factors = [f for f in rebuilt.as_ordered_factors() if not f.is_Number]
    numerator = [f for f in factors if not (f.is_Pow and f.exp.is_negative)]
    denominator = [f for f in factors if f.is_Pow and f.exp.is_negative]
    p, q = coefficient.p, coefficient.q
    if p != 1 and numerator and isinstance(numerator[0], sympy.Add):
        numerator[0] = sympy.expand(p * numerator[0])
        p = 1
    if q != 1 and denominator and isinstance(denominator[0].base, sympy.Add) and denominator[0].exp == -1:
        denominator[0] = 1 / sympy.expand(q * denominator[0].base)
        q = 1
    if (p, q) == (coefficient.p, coefficient.q):
        return rebuilt
    return printer_stable(sympy.Mul(sympy.Rational(p, q), *numerator, *denominator))


# --------------------------------------------------------------------------
# Generators of the field
# --------------------------------------------------------------------------

@dataclass(frozen=True)
class _Pair:
    """sin/cos (circular) or sinh/cosh (hyperbolic) of one argument symbol."""

    argument: sympy.Symbol
    hyperbolic: bool


RECIPROCAL_FUNCTIONS = {
    sympy.tan: lambda a: sympy.sin(a) / sympy.cos(a),
    sympy.cot: lambda a: sympy.cos(a) / sympy.sin(a),
    sympy.sec: lambda a: 1 / sympy.cos(a),
    sympy.csc: lambda a: 1 / sympy.sin(a),
    sympy.tanh: lambda a: sympy.sinh(a) / sympy.cosh(a),
    sympy.coth: lambda a: sympy.cosh(a) / sympy.sinh(a),
    sympy.sech: lambda a: 1 / sympy.cosh(a),
    sympy.csch: lambda a: 1 / sympy.sinh(a),
}
"""tan, cot, sec, csc and their hyperbolic kin through sin, cos, sinh and cosh."""


def _rewrite_for_field(expr: sympy.Expr) -> sympy.Expr:
    """Rewrite tan, cot, sec, csc, tanh, coth, sech, csch through sin/cos, sinh/cosh and
    expand multiple angles such as sin(2x) = 2 sin x cos x."""
    for head, rule in RECIPROCAL_FUNCTIONS.items():
        if expr.has(head):
            expr = expr.replace(head, rule)
    if expr.has(sympy.sin, sympy.cos, sympy.sinh, sympy.cosh):
        expr = sympy.expand_trig(expr)
    return expr


def _function_derivatives(applied: sympy.Expr, max_order: int) -> list[sympy.Expr]:
    """f(x, y) and all its partial derivatives up to ``max_order``, in a fixed order."""
    args = applied.args
    out = [applied]
    for order in range(1, max_order + 1):
        for combo in itertools.combinations_with_replacement(range(len(args)), order):
            variables = [(args[i], combo.count(i)) for i in sorted(set(combo))]
            out.append(sympy.Derivative(applied, *variables))
    return out


def _derivative_orders(expr: sympy.Derivative) -> dict[sympy.Symbol, int]:
    return {var: int(count) for var, count in expr.variable_count}


class _Scan:
    """Collect what a set of expressions needs from the field, or fail."""

    def __init__(self, coordinates: Sequence[sympy.Symbol]):
        self.coordinates = tuple(coordinates)
        self.symbols: set[sympy.Symbol] = set()
        self.pairs: set[_Pair] = set()
        self.functions: dict[sympy.Expr, int] = {}  # applied function -> highest order seen

    def visit(self, expr: sympy.Expr) -> None:
        if expr.is_Rational:
            return
        if expr.is_Symbol:
            self.symbols.add(expr)
            return
        if isinstance(expr, (sympy.Add, sympy.Mul)):
            for arg in expr.args:
                self.visit(arg)
            return
        if isinstance(expr, sympy.Pow):
            if not (expr.exp.is_Integer):
                raise UnsupportedByField(f"non-integer power {expr}")
            self.visit(expr.base)
            return
        if isinstance(expr, (sympy.sin, sympy.cos, sympy.sinh, sympy.cosh)):
            arg = expr.args[0]
            if not arg.is_Symbol:
                raise UnsupportedByField(f"{expr.func.__name__} of a compound argument")
            hyperbolic = isinstance(expr, (sympy.sinh, sympy.cosh))
            self.pairs.add(_Pair(arg, hyperbolic))
            self.symbols.add(arg)
            return
        if isinstance(expr, AppliedUndef):
            if not all(a in self.coordinates for a in expr.args):
                raise UnsupportedByField(f"function {expr} of non-coordinate arguments")
            self.functions.setdefault(expr, 0)
            return
        if isinstance(expr, sympy.Derivative) and isinstance(expr.expr, AppliedUndef):
            order = sum(_derivative_orders(expr).values())
            base = expr.expr
            self.functions[base] = max(self.functions.get(base, 0), order)
            return
        raise UnsupportedByField(f"{type(expr).__name__} is not held by the field")


# --------------------------------------------------------------------------
# The field
# --------------------------------------------------------------------------

class RationalFunction:
    """An element num/den of the field; always in canonical form.

    Canonical form: ``num`` has degree at most 1 in every ``cos``/``cosh``
    generator, ``den`` has none of them, gcd(num, den) = 1 and ``den`` has a
    positive leading coefficient.
    """

    __slots__ = ("field", "num", "den", "_hash")

    def __init__(self, field: "FieldArithmetic", num: PolyElement, den: PolyElement):
        self.field = field
        self.num = num
        self.den = den
        self._hash = None

    # arithmetic -------------------------------------------------------
    def _coerce(self, other) -> "RationalFunction":
        if isinstance(other, RationalFunction):
            return other
        if isinstance(other, (int, sympy.Integer, sympy.Rational)):
            return self.field.constant(other)
        return NotImplemented

    def __add__(self, other):
        other = self._coerce(other)
        if other is NotImplemented:
            return other
        f = self.field
        if not self.num:
            return other
        if not other.num:
            return self
        if self.den == other.den:
            return f.make(self.num + other.num, self.den)
        g = self.den.gcd(other.den)
        left, right = self.den.exquo(g), other.den.exquo(g)
        return f.make(self.num * right + other.num * left, left * other.den)

    __radd__ = __add__

    def __neg__(self):
        return RationalFunction(self.field, -self.num, self.den)

    def __sub__(self, other):
        other = self._coerce(other)
        if other is NotImplemented:
            return other
        return self + (-other)

    def __rsub__(self, other):
        return (-self) + other

    def __mul__(self, other):
        other = self._coerce(other)
        if other is NotImplemented:
            return other
        f = self.field
        if not self.num or not other.num:
            return f.zero
        # Cross-cancel first: both operands are already in lowest terms.
        a, d = self.num.cancel(other.den) if other.den != 1 else (self.num, other.den)
        c, b = other.num.cancel(self.den) if self.den != 1 else (other.num, self.den)
        return f.make(a * c, b * d, reduced_fraction=True)

    __rmul__ = __mul__

    def __truediv__(self, other):
        other = self._coerce(other)
        if other is NotImplemented:
            return other
        if not other.num:
            raise ZeroDivisionError("division by an element that is zero")
        return self * self.field.make(other.den, other.num)

    def __rtruediv__(self, other):
        return self._coerce(other) / self

    def __pow__(self, exponent: int):
        if not isinstance(exponent, int):
            return NotImplemented
        if exponent < 0:
            return self.field.one / (self ** -exponent)
        result = self.field.one
        base = self
        while exponent:
            if exponent & 1:
                result = result * base
            exponent >>= 1
            if exponent:
                base = base * base
        return result

    def __eq__(self, other):
        other = self._coerce(other)
        if other is NotImplemented:
            return False
        return self.num == other.num and self.den == other.den

    def __hash__(self):
        if self._hash is None:
            self._hash = hash((self.num, self.den))
        return self._hash

    def __bool__(self):
        return bool(self.num)

    def __repr__(self):
        return f"RationalFunction({self.field.to_expr(self)})"


class FieldArithmetic:
    """Exact arithmetic in Q(parameters, coordinates, sin, cos, f, f', ...)
    modulo cos^2 + sin^2 = 1 and cosh^2 - sinh^2 = 1.

    Built once per metric from the expressions it must hold.
    """

    name = "field"
    description = (
        "canonical form of a rational function in the coordinates, parameters, "
        "sine/cosine pairs and derivatives of free functions, reduced with "
        "cos² = 1 − sin² (cosh² = 1 + sinh²) and a cosine-free denominator"
    )

    @property
    def rewrite(self) -> str:
        """The rewrite applied to every result, named for the generators this metric needs."""
        rules = []
        if any(sign < 0 for _, _, sign in self._relations):
            rules.append("cos² = 1 − sin²")
        if any(sign > 0 for _, _, sign in self._relations):
            rules.append("cosh² = 1 + sinh²")
        return "canonical rational form" + (", with " + " and ".join(rules) if rules else "")

    def __init__(self, coordinates: Sequence[sympy.Symbol], expressions: Iterable[sympy.Expr]):
        scan = _Scan(coordinates)
        prepared = []
        for expr in expressions:
            expr = _rewrite_for_field(as_expression(expr))
            scan.visit(expr)
            prepared.append(expr)
        self.coordinates = tuple(coordinates)
        pairs = sorted(scan.pairs, key=lambda p: (p.hyperbolic, p.argument.name))
        plain = sorted(scan.symbols, key=lambda s: s.name)
        functions = sorted(scan.functions, key=sympy.default_sort_key)

        originals: list[sympy.Expr] = []  # what each generator stands for
        for pair in pairs:
            sine = sympy.sinh if pair.hyperbolic else sympy.sin
            cosine = sympy.cosh if pair.hyperbolic else sympy.cos
            originals += [cosine(pair.argument), sine(pair.argument)]
        originals += plain
        for applied in functions:
            originals += _function_derivatives(applied, scan.functions[applied] + EXTRA_DERIVATIVE_ORDERS)
        self._originals = originals
        names = [f"g{i}" for i in range(len(originals))] or ["g0"]
        self.ring, *gens = ring(",".join(names), sympy.ZZ)
        if not originals:
            gens = []
        self._gen_of = {orig: gen for orig, gen in zip(originals, gens)}
        self._gen_index = {orig: i for i, orig in enumerate(originals)}
        # (cos index, sin index, sign) with cos^2 = 1 + sign * sin^2
        self._relations = []
        for k, pair in enumerate(pairs):
            sign = 1 if pair.hyperbolic else -1
            self._relations.append((2 * k, 2 * k + 1, sign))
        self._reduction_cache: dict[tuple[int, int], PolyElement] = {}
        self._factor_cache: dict = {}
        self._derivative_rules = [self._rules_for(x) for x in self.coordinates]
        self.zero = RationalFunction(self, self.ring.zero, self.ring.one)
        self.one = RationalFunction(self, self.ring.one, self.ring.one)
        self._prepared = prepared

    # construction ------------------------------------------------------
    def constant(self, value) -> RationalFunction:
        value = sympy.Rational(value)
        return self.make(self.ring(int(value.p)), self.ring(int(value.q)))

    def from_expr(self, expr: sympy.Expr) -> RationalFunction:
        """Convert a sympy expression built only from the field's generators."""
        return self._convert(_rewrite_for_field(as_expression(expr)))

    def _convert(self, expr: sympy.Expr) -> RationalFunction:
        if expr in self._gen_of:
            return self.make(self._gen_of[expr], self.ring.one, reduced_fraction=True)
        if expr.is_Rational:
            return self.constant(expr)
        if isinstance(expr, sympy.Add):
            total = self.zero
            for arg in expr.args:
                total = total + self._convert(arg)
            return total
        if isinstance(expr, sympy.Mul):
            product = self.one
            for arg in expr.args:
                product = product * self._convert(arg)
            return product
        if isinstance(expr, sympy.Pow) and expr.exp.is_Integer:
            return self._convert(expr.base) ** int(expr.exp)
        raise UnsupportedByField(f"{expr} is not held by this field")

    def make(self, num: PolyElement, den: PolyElement, reduced_fraction: bool = False) -> RationalFunction:
        """Bring num/den to canonical form."""
        if not num:
            return RationalFunction(self, self.ring.zero, self.ring.one)
        if self._relations:
            reduced_num, reduced_den = self._reduce(num), self._reduce(den)
            if reduced_num != num or reduced_den != den:
                reduced_fraction = False  # the rewrite may have made common factors appear
            num, den = reduced_num, reduced_den
            den_free = self._cosine_free_denominator(num, den)
            if den_free is not None:
                num, den = den_free
                reduced_fraction = False
            if not num:
                return RationalFunction(self, self.ring.zero, self.ring.one)
        if not reduced_fraction:
            num, den = num.cancel(den)
        elif den.LC < 0:
            num, den = -num, -den
        return RationalFunction(self, num, den)

    def _power_of_relation(self, relation: int, half: int) -> PolyElement:
        """(1 + sign * s^2) ** half for the given relation."""
        key = (relation, half)
        if key not in self._reduction_cache:
            _, s_index, sign = self._relations[relation]
            s = self.ring.gens[s_index]
            self._reduction_cache[key] = (1 + sign * s**2) ** half
        return self._reduction_cache[key]

    def _reduce(self, poly: PolyElement) -> PolyElement:
        """Replace cos^2 by 1 - sin^2 (cosh^2 by 1 + sinh^2) until every cosine has degree <= 1."""
        for relation, (c_index, _, _) in enumerate(self._relations):
            if poly.degree(c_index) < 2:
                continue
            high: dict[int, dict] = {}
            kept = {}
            for monom, coeff in poly.items():
                k = monom[c_index]
                if k < 2:
                    kept[monom] = coeff
                else:
                    reduced = monom[:c_index] + (k % 2,) + monom[c_index + 1:]
                    high.setdefault(k // 2, {})[reduced] = coeff
            result = self.ring.from_dict(kept) if kept else self.ring.zero
            for half, terms in high.items():
                result += self.ring.from_dict(terms) * self._power_of_relation(relation, half)
            poly = result
        return poly

    def _cosine_free_denominator(self, num, den):
        """Multiply by the conjugate until no cosine is left in the denominator."""
        changed = False
        for relation, (c_index, _, _) in enumerate(self._relations):
            if den.degree(c_index) < 1:
                continue
            c = self.ring.gens[c_index]
            d1 = den.coeff_wrt(c_index, 1) if hasattr(den, "coeff_wrt") else _coefficient_in(den, c_index, 1)
            d0 = den - d1 * c
            conj = d0 - d1 * c
            num = self._reduce(num * conj)
            den = self._reduce(den * conj)
            changed = True
        return (num, den) if changed else None

    def pack(self, element: RationalFunction) -> tuple[dict, dict]:
        """Plain data for sending an element to another process."""
        return dict(element.num), dict(element.den)

    def unpack(self, data: tuple[dict, dict]) -> RationalFunction:
        num, den = data
        return RationalFunction(self, self.ring.from_dict(num) if num else self.ring.zero, self.ring.from_dict(den))

    # calculus -------------------------------------------------------------
    def _rules_for(self, x: sympy.Symbol) -> list[tuple[int, PolyElement]]:
        """For each generator with non-zero derivative along x: (index, derivative)."""
        rules = []
        gens = self.ring.gens
        for i, orig in enumerate(self._originals):
            d = None
            if orig == x:
                d = self.ring.one
            elif isinstance(orig, (sympy.sin, sympy.cos, sympy.sinh, sympy.cosh)) and orig.args[0] == x:
                partner = {sympy.sin: sympy.cos, sympy.cos: sympy.sin,
                           sympy.sinh: sympy.cosh, sympy.cosh: sympy.sinh}[orig.func](x)
                sign = -1 if isinstance(orig, sympy.cos) else 1
                d = sign * gens[self._gen_index[partner]]
            elif isinstance(orig, (AppliedUndef, sympy.Derivative)):
                base = orig.expr if isinstance(orig, sympy.Derivative) else orig
                if x in base.args:
                    target = sympy.Derivative(orig, x) if isinstance(orig, AppliedUndef) else sympy.Derivative(base, *(orig.variables + (x,)))
                    target = _canonical_derivative(target)
                    if target not in self._gen_index:
                        d = _TooDeep(orig, x)
                    else:
                        d = gens[self._gen_index[target]]
            if d is not None:
                rules.append((i, d))
        return rules

    def _diff_poly(self, poly: PolyElement, coordinate_index: int) -> PolyElement:
        result = self.ring.zero
        for i, d in self._derivative_rules[coordinate_index]:
            if poly.degree(i) <= 0:
                continue
            if isinstance(d, _TooDeep):
                raise d.error()
            result += poly.diff(self.ring.gens[i]) * d
        return result

    def diff(self, element: RationalFunction, coordinate_index: int) -> RationalFunction:
        """Partial derivative along the coordinate with this index (quotient rule)."""
        num, den = element.num, element.den
        dn = self._diff_poly(num, coordinate_index)
        if den == 1:
            return self.make(dn, den)
        dd = self._diff_poly(den, coordinate_index)
        if not dd:
            return self.make(dn, den)
        # d(n/D) = (n' D - n D') / D^2, with the gcd of D and D' taken out first.
        g = den.gcd(dd)
        den_g, dd_g = den.exquo(g), dd.exquo(g)
        return self.make(dn * den_g - num * dd_g, den * den_g)

    # queries --------------------------------------------------------------
    def zero_test(self, element: RationalFunction) -> ZeroTest:
        if not element.num:
            return ZeroTest(True, "its canonical rational form is 0", "canonical form")
        return ZeroTest(False, "its canonical rational form has a non-zero numerator", "canonical form")

    def is_constant(self, element: RationalFunction) -> bool:
        return all(not self.diff(element, i) for i in range(len(self.coordinates)))

    def to_expr(self, element: RationalFunction) -> sympy.Expr:
        """A sympy expression for display: numerator over factored denominator,
        each factor written with whichever of sin^2 or cos^2 gives fewer terms."""
        if not element.num:
            return sympy.Integer(0)
        num = self._poly_to_expr(element.num, factor=len(element.num) <= 60)
        den = self._poly_to_expr(element.den, factor=True)
        return printer_stable(num / den)

    def _poly_to_expr(self, poly: PolyElement, factor: bool) -> sympy.Expr:
        """A polynomial as an expression: its monomial factor times the rest, the rest factored
        into irreducibles when that is cheap (few terms in few generators)."""
        if poly.is_ground:
            return sympy.Integer(int(poly.LC)) if poly else sympy.Integer(0)
        monomial, rest = self._split_monomial(poly)
        if monomial != 1:
            return self._as_expr(monomial) * self._poly_to_expr(rest, factor)
        used = sum(1 for i in range(self.ring.ngens) if poly.degree(i) > 0)
        if not factor or used > FACTOR_GENERATORS_LIMIT:
            return self._as_expr(self._nicer_trig_form(poly))
        key = (poly.ring, tuple(sorted(poly.items())))
        if key not in self._factor_cache:
            self._factor_cache[key] = poly.factor_list()
        content, factors = self._factor_cache[key]
        sign = 1
        parts = []
        for f, mult in factors:
            f = self._nicer_trig_form(f)
            if self._looks_negative(f):
                f = -f
                sign *= (-1) ** mult
            parts.append(self._as_expr(f) ** mult)
        return sympy.Mul(sympy.Integer(sign * int(content)), *parts)

    def _split_monomial(self, poly: PolyElement) -> tuple[PolyElement, PolyElement]:
        """(m, q) with poly = m q, m the largest monomial dividing every term."""
        exponents = tuple(min(monom[i] for monom in poly.keys()) for i in range(self.ring.ngens))
        if not any(exponents):
            return self.ring.one, poly
        monomial = self.ring.from_dict({exponents: 1})
        rest = self.ring.from_dict({tuple(e - m for e, m in zip(monom, exponents)): c for monom, c in poly.items()})
        return monomial, rest

    def _looks_negative(self, poly: PolyElement) -> bool:
        """More negative than positive coefficients or, on a tie, a negative
        coefficient on the term of highest degree in the coordinates."""
        negative = sum(1 for c in poly.values() if c < 0)
        if negative * 2 != len(poly):
            return negative * 2 > len(poly)
        coordinate_gens = [self._gen_index[x] for x in self.coordinates if x in self._gen_index]

        def weight(monom):
            return (sum(monom[i] for i in coordinate_gens), tuple(monom[i] for i in coordinate_gens), monom)
        leading = max(poly.keys(), key=weight)
        return poly[leading] < 0

    def _nicer_trig_form(self, poly: PolyElement) -> PolyElement:
        """Rewrite sin^2 as 1 - cos^2 where that shortens the polynomial."""
        for relation, (c_index, s_index, sign) in enumerate(self._relations):
            if poly.degree(s_index) < 2:
                continue
            # sin^2 = (cos^2 - 1) / sign
            high = {}
            kept = {}
            for monom, coeff in poly.items():
                k = monom[s_index]
                if k < 2:
                    kept[monom] = coeff
                else:
                    high.setdefault(k // 2, {})[monom[:s_index] + (k % 2,) + monom[s_index + 1:]] = coeff
            c = self.ring.gens[c_index]
            alternative = self.ring.from_dict(kept) if kept else self.ring.zero
            for half, terms in high.items():
                alternative += self.ring.from_dict(terms) * (sign * (c**2 - 1)) ** half
            if len(alternative) < len(poly):
                poly = alternative
        return poly

    def _as_expr(self, poly: PolyElement) -> sympy.Expr:
        return poly.as_expr(*self._originals) if self._originals else sympy.Integer(int(poly.LC))


class _TooDeep:
    def __init__(self, orig, x):
        self.orig, self.x = orig, x

    def error(self) -> Exception:
        return UnsupportedByField(f"derivative of {self.orig} along {self.x} exceeds the orders held")


def _canonical_derivative(d: sympy.Derivative) -> sympy.Derivative:
    """Derivative with variables grouped in the order of the function's arguments."""
    base = d.expr
    counts = _derivative_orders(d)
    return sympy.Derivative(base, *[(a, counts[a]) for a in base.args if counts.get(a)])


def _coefficient_in(poly: PolyElement, index: int, power: int) -> PolyElement:
    terms = {}
    for monom, coeff in poly.items():
        if monom[index] == power:
            terms[monom[:index] + (0,) + monom[index + 1:]] = coeff
    return poly.ring.from_dict(terms) if terms else poly.ring.zero


# --------------------------------------------------------------------------
# Fallback: sympy expressions
# --------------------------------------------------------------------------

class Expression:
    """A sympy expression kept in lowest terms (cancel) after every operation."""

    __slots__ = ("arith", "expr")

    def __init__(self, arith: "ExpressionArithmetic", expr: sympy.Expr):
        self.arith = arith
        self.expr = expr

    def _lift(self, other):
        if isinstance(other, Expression):
            return other.expr
        if isinstance(other, (int, sympy.Rational)):
            return sympy.Rational(other)
        return None

    def _make(self, expr):
        return self.arith.make(expr)

    def __add__(self, other):
        o = self._lift(other)
        return NotImplemented if o is None else self._make(self.expr + o)

    __radd__ = __add__

    def __sub__(self, other):
        o = self._lift(other)
        return NotImplemented if o is None else self._make(self.expr - o)

    def __rsub__(self, other):
        o = self._lift(other)
        return NotImplemented if o is None else self._make(o - self.expr)

    def __mul__(self, other):
        o = self._lift(other)
        return NotImplemented if o is None else self._make(self.expr * o)

    __rmul__ = __mul__

    def __truediv__(self, other):
        o = self._lift(other)
        if o is None:
            return NotImplemented
        if o == 0:
            raise ZeroDivisionError("division by an element that is zero")
        return self._make(self.expr / o)

    def __rtruediv__(self, other):
        o = self._lift(other)
        return NotImplemented if o is None else self._make(o / self.expr)

    def __neg__(self):
        return Expression(self.arith, -self.expr)

    def __pow__(self, k: int):
        return self._make(self.expr ** k)

    def __eq__(self, other):
        o = self._lift(other)
        return o is not None and self.expr == o

    def __hash__(self):
        return hash(self.expr)

    def __bool__(self):
        return self.expr != 0


class ExpressionArithmetic:
    """Plain sympy expressions; zero tests by cancel/simplify, then numerically."""

    name = "expression"
    rewrite = "sympy's cancel"
    description = "sympy's cancel after every operation; zero tests by sympy's simplify, then at random points"

    def __init__(self, coordinates: Sequence[sympy.Symbol], sample_symbols: Sequence[sympy.Symbol],
                 samples: int = 6, digits: int = 30, seed: int = 20261201):
        self.coordinates = tuple(coordinates)
        self._symbols = sorted(set(sample_symbols), key=lambda s: s.name)
        self._samples = samples
        self._digits = digits
        self._seed = seed
        self._zero_cache: dict = {}
        self.zero = Expression(self, sympy.Integer(0))
        self.one = Expression(self, sympy.Integer(1))

    def make(self, expr: sympy.Expr) -> Expression:
        return Expression(self, sympy.cancel(sympy.together(expr)))

    def from_expr(self, expr: sympy.Expr) -> Expression:
        return self.make(as_expression(expr))

    def pack(self, element: Expression) -> sympy.Expr:
        return element.expr

    def unpack(self, data: sympy.Expr) -> Expression:
        return Expression(self, data)

    def constant(self, value) -> Expression:
        return Expression(self, sympy.Rational(value))

    def diff(self, element: Expression, coordinate_index: int) -> Expression:
        return self.make(sympy.diff(element.expr, self.coordinates[coordinate_index]))

    def is_constant(self, element: Expression) -> bool:
        return all(self.zero_test(self.diff(element, i)).vanishes for i in range(len(self.coordinates)))

    def zero_test(self, element: Expression) -> ZeroTest:
        expr = element.expr
        if expr == 0:
            return ZeroTest(True, "cancel() reduces it to 0", "cancel")
        if expr in self._zero_cache:
            return self._zero_cache[expr]
        simplified = sympy.simplify(expr)
        if simplified == 0:
            outcome = ZeroTest(True, "simplify() reduces it to 0", "simplify")
        else:
            outcome = self._numeric_zero_test(simplified)
        self._zero_cache[expr] = outcome
        return outcome

    def _numeric_zero_test(self, expr: sympy.Expr) -> ZeroTest:
        rng = random.Random(self._seed)
        worst = 0
        functions = sorted(expr.atoms(AppliedUndef), key=sympy.default_sort_key)
        tried = 0
        for _ in range(self._samples * 4):
            if tried == self._samples:
                break
            point = {s: _sample_value(s, rng) for s in self._symbols}
            concrete = _concrete_functions(expr, functions, rng)
            value = concrete.subs(point).evalf(self._digits)
            if not value.is_number or value.has(sympy.zoo, sympy.nan) or not value.is_finite:
                continue
            if not value.is_real:  # outside the real domain of the expression: no evidence either way
                continue
            tried += 1
            worst = max(worst, abs(complex(value)))
        if tried == 0:
            return ZeroTest(None, "simplify() does not reduce it to 0 and no sample point could be evaluated", "no point")
        if worst < 10 ** (-(self._digits - 5)):
            return ZeroTest(None, f"vanishes at {tried} random points to {self._digits - 5} digits; "
                                  "not proven symbolically", "sampled", tried, self._digits - 5)
        magnitude = float(f"{float(worst):.3g}")
        return ZeroTest(False, f"non-zero at a random point (|value| = {magnitude:.3g})", "point", magnitude=magnitude)

    def to_expr(self, element: Expression) -> sympy.Expr:
        return printer_stable(sympy.factor_terms(element.expr))


def _sample_value(symbol: sympy.Symbol, rng: random.Random) -> sympy.Rational:
    """A random rational respecting the symbol's sign assumptions, 1.1 to 2.9 in size
    (a symbol of unknown sign is as often negative, then a third of that size)."""
    return signed_sample(symbol, rng, 1100, 2900, positive_share=0.5, negative_divisor=3)


def _concrete_functions(expr, functions, rng):
    """Replace each free function by a random polynomial in its arguments: of degree 4 in each argument, with
    every product of two arguments, so that no derivative a claim may hold (up to fourth order in one
    variable, mixed second ones) vanishes by the choice of the polynomial alone."""
    mapping = {}
    for f in functions:
        poly = sympy.Rational(rng.randint(5, 15), 7)
        for a in f.args:
            poly += sympy.Rational(rng.randint(1, 9), 11) * a + sympy.Rational(rng.randint(1, 9), 13) * a**2
        for a in f.args:
            poly += sympy.Rational(rng.randint(1, 9), 17) * a**3 + sympy.Rational(rng.randint(1, 9), 19) * a**4
        for i, a in enumerate(f.args):
            for b in f.args[i + 1:]:
                poly += sympy.Rational(rng.randint(1, 9), 23) * a * b
        mapping[f.func] = sympy.Lambda(f.args, poly)
    if not mapping:
        return expr
    return expr.subs({f: mapping[f.func](*f.args) for f in functions}).doit()


def choose_arithmetic(coordinates: Sequence[sympy.Symbol], components: Iterable[sympy.Expr],
                      parameters: Sequence[sympy.Symbol] = ()):
    """The field when it can hold every component, otherwise sympy expressions."""
    components = list(components)
    try:
        return FieldArithmetic(coordinates, components)
    except UnsupportedByField:
        return ExpressionArithmetic(coordinates, list(coordinates) + list(parameters))
