"""Exact arithmetic under the curvature chain.

The chain (``stepper.chain``) never touches sympy's simplifier directly: it
combines elements with ``+ - * /``, differentiates them with
:meth:`Arithmetic.diff`, and asks :meth:`Arithmetic.zero_test` whether a
result vanishes.  Two arithmetics implement that contract:

* :class:`FieldArithmetic` -- elements are quotients of integer polynomials in
  a fixed list of generators: the coordinates and parameters, ``sin x`` and
  ``cos x`` (or ``sinh x`` and ``cosh x``) for each argument ``x`` that occurs,
  every partial derivative of each free function up to a fixed order,
  exponentials (``exp(q t)``, see below) and square roots (``s`` with
  ``s^2 = p``, see below).
  The relations ``cos^2 x = 1 - sin^2 x``, ``cosh^2 x = 1 + sinh^2 x`` and
  ``s^2 = p`` are applied after every operation and denominators are kept free
  of ``cos x`` and of every root (multiplied by the conjugate), which makes the
  representation canonical: an element is zero exactly when its numerator is
  the zero polynomial.  Zero tests are therefore proofs.
* :class:`ExpressionArithmetic` -- plain sympy expressions, for metrics with
  functions the field cannot hold (``log``, trigonometric functions of compound
  arguments, roots of squares, ...).  A zero test first tries sympy's
  ``cancel`` and ``simplify``; when they cannot decide, it evaluates the
  expression at random points and says so.  :func:`choose_arithmetic` picks the
  field whenever every metric component fits, and otherwise records which
  subexpression forced the fallback (``slow_path_because``).

Exponentials.  Every argument of ``exp`` must be an element of the field built
from the other generators (coordinates, parameters, trigonometric pairs, free
functions).  Each argument ``a/D`` (canonical form) is split into its terms
``c m / D``; each term is brought to lowest terms and written as a rational
number times a primitive "atom" ``t`` (monomial with coefficient 1 over a
primitive denominator).  For each atom the field holds one generator
``E_t = exp(q_t t)``, ``q_t`` the positive rational gcd of the coefficients the
atom carries in all arguments, so ``exp(a + b) = exp(a) exp(b)`` and integer
multiples fold: ``exp(-2 Phi)`` is ``E^-2``, a power of ``E`` in the
denominator.  ``d E_t / dx = q_t (dt/dx) E_t``.  A rational constant term
(``exp(2 Phi + 1)``, or ``E`` itself) gets the atom ``1``: the generator
``exp(q)``, a transcendental number (Hermite-Lindemann) with derivative 0.

Why this stays canonical.  Read every coordinate and parameter as a variable
with its own derivation, and a free function as generic (its derivatives are
algebraically independent).  A logarithmic derivative ``df/f`` of an element
``f`` of the base field has only simple poles, and ``f`` without zeros or poles
is a unit of the coordinate ring, a constant (over Q the polynomial ring and the
circle's ring ``Q[c, s]/(c^2 + s^2 - 1)`` have no other units).  Hence
``exp(g)`` lies in the base field only for constant ``g``.  By the
Kolchin-Ostrowski theorem (exponentials ``y_i`` with ``dy_i / y_i`` in the
field are algebraically dependent over it only if some product of integer
powers lies in it; Risch's structure theorem and Ax's theorem say the same),
the ``E_t`` are algebraically independent over the base field as soon as no
non-trivial rational combination of the atoms is constant, which is checked
(trivially true for polynomial arguments: distinct monomials).  Over
``cosh``/``sinh`` the ring has the units ``cosh x +- sinh x = exp(+-x)``: when
an atom is the argument of a hyperbolic pair, every hyperbolic function is
rewritten through ``exp`` instead (so is any ``sinh``/``cosh`` of a compound
argument).  With the ``E_t`` independent transcendentals, the quotient of
polynomials in lowest terms is unique, so a zero test remains a proof.

Square roots.  ``sqrt(R)`` with ``R = n/d`` (canonical, free of cosines)
becomes the generator ``s = d sqrt(n/d)`` with ``s^2 = p = n d``, a polynomial
in the other generators (``sqrt(R) = s/d``; no absolute value is taken: ``s``
is defined as that product).  ``d s/dx = p' s / (2 p)``.  Numerators hold
``s`` at most linearly and denominators not at all (the conjugate ``d0 - d1
s`` is multiplied in, exactly as for ``cos``): the cosines themselves are the
roots ``sqrt(1 - sin^2)``.  This is canonical when the field is a Kummer
extension of degree ``2^k`` of the purely transcendental field the radicands
live in, i.e. when all radicands, the trigonometric ones ``1 -+ sin^2``
included, are independent modulo squares.  That is checked by factorisation:
the vectors over GF(2) of the odd-multiplicity parts (sign, primes of the
integer content, irreducible factors) must be linearly independent.  A
radicand that is a square (``sqrt(f^2) = |f|``) or a product of others times a
square is refused (the sign of the root it would equal is not known), nested
roots and other fractional powers are refused.
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

#: Numerators with fewer terms are brought to lowest terms with a gcd; longer ones by trial division with the
#: irreducible factors of the denominator (see :meth:`FieldArithmetic._cancel`).
CANCEL_BY_FACTORS_MIN_TERMS = 1

#: Denominators (after division by the factors already known) with more terms than this are not factored.
FACTOR_DENOMINATOR_TERMS_LIMIT = 60

#: A polynomial shown with more terms than this (after the metric's own factors are divided out) is shown as
#: it is: proving a long polynomial irreducible costs more than the rest of a derivation (Kerr-de Sitter).
DISPLAY_FACTOR_TERMS_LIMIT = 12

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
    """An expression uses something the rational-function field cannot hold.

    ``reason`` says in plain words what the field lacks, ``subexpression`` (a sympy expression, or None)
    is the part of the input that needs it; the message names both."""

    def __init__(self, reason: str, subexpression: sympy.Expr | None = None):
        self.reason = reason
        self.subexpression = subexpression
        super().__init__(reason if subexpression is None else f"{reason}: {subexpression}")

    def as_data(self) -> dict:
        """The reason as data for a step's params (text, and the subexpression when there is one)."""
        data: dict = {"reason": self.reason}
        if self.subexpression is not None:
            data["expression"] = self.subexpression
        return data


class _HyperbolicCollision(Exception):
    """An exponential's atom is the argument of a sinh/cosh pair (cosh x + sinh x = exp x)."""


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
    unchanged = all(new is old for new, old in zip(args, expr.args))
    if not isinstance(expr, sympy.Mul):
        return expr if unchanged else expr.func(*args)
    rebuilt = expr if unchanged else sympy.Mul(*args)
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


def _rewrite_for_field(expr: sympy.Expr, hyperbolic_as_exp: bool = False) -> sympy.Expr:
    """Rewrite tan, cot, sec, csc, tanh, coth, sech, csch through sin/cos, sinh/cosh and
    expand multiple angles such as sin(2x) = 2 sin x cos x; sinh and cosh of a compound argument (of every
    argument with ``hyperbolic_as_exp``) through exp; a fractional power of an exponential as one exponential
    (every quantity here is real, so exp(a)^r = exp(r a))."""
    for head, rule in RECIPROCAL_FUNCTIONS.items():
        if expr.has(head):
            expr = expr.replace(head, rule)
    if expr.has(sympy.sin, sympy.cos, sympy.sinh, sympy.cosh):
        expr = sympy.expand_trig(expr)
    if expr.has(sympy.sinh, sympy.cosh):
        expr = expr.replace(
            lambda e: isinstance(e, (sympy.sinh, sympy.cosh)) and (hyperbolic_as_exp or not e.args[0].is_Symbol),
            lambda e: (sympy.exp(e.args[0]) + (1 if isinstance(e, sympy.cosh) else -1) * sympy.exp(-e.args[0])) / 2)
    if expr.has(sympy.exp):
        expr = expr.replace(lambda e: e.is_Pow and isinstance(e.base, sympy.exp) and not e.exp.is_Integer,
                            lambda e: sympy.exp(e.exp * e.base.args[0]))
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
    """Collect what a set of expressions needs from the field, or fail naming the subexpression."""

    def __init__(self, coordinates: Sequence[sympy.Symbol]):
        self.coordinates = tuple(coordinates)
        self.symbols: set[sympy.Symbol] = set()
        self.pairs: set[_Pair] = set()
        self.functions: dict[sympy.Expr, int] = {}  # applied function -> highest order seen
        self.exponentials: set[sympy.Expr] = set()  # arguments of exp
        self.roots: set[sympy.Expr] = set()  # radicands of square roots

    def visit(self, expr: sympy.Expr, inside: str = "", in_exponent: bool = False) -> None:
        """``inside`` names what holds ``expr`` when no root may occur there (a root or an exponent),
        ``in_exponent`` says no exponential may occur there either."""
        if expr.is_Rational:
            return
        if expr.is_Symbol:
            self.symbols.add(expr)
            return
        if isinstance(expr, (sympy.Add, sympy.Mul)):
            for arg in expr.args:
                self.visit(arg, inside, in_exponent)
            return
        if expr is sympy.E:
            if in_exponent:
                raise UnsupportedByField("an exponential inside the argument of an exponential", expr)
            self.exponentials.add(sympy.Integer(1))
            return
        if isinstance(expr, sympy.exp):
            if in_exponent:
                raise UnsupportedByField("an exponential inside the argument of an exponential", expr)
            self.exponentials.add(expr.args[0])
            self.visit(expr.args[0], "the argument of an exponential", True)
            return
        if isinstance(expr, sympy.Pow):
            if expr.exp.is_Integer:
                self.visit(expr.base, inside, in_exponent)
                return
            if expr.exp.is_Rational and expr.exp.q == 2:
                if inside:
                    raise UnsupportedByField(f"a square root inside {inside}", expr)
                self.roots.add(expr.base)
                self.visit(expr.base, "a square root", in_exponent)
                return
            raise UnsupportedByField("a power with an exponent other than an integer or a half-integer", expr)
        if isinstance(expr, (sympy.sin, sympy.cos, sympy.sinh, sympy.cosh)):
            arg = expr.args[0]
            if not arg.is_Symbol:
                raise UnsupportedByField(f"{_FUNCTION_WORDS[type(expr)]} of a compound argument", expr)
            hyperbolic = isinstance(expr, (sympy.sinh, sympy.cosh))
            self.pairs.add(_Pair(arg, hyperbolic))
            self.symbols.add(arg)
            return
        if isinstance(expr, AppliedUndef):
            if not all(a in self.coordinates for a in expr.args):
                raise UnsupportedByField("a function of arguments other than coordinates", expr)
            self.functions.setdefault(expr, 0)
            return
        if isinstance(expr, sympy.Derivative) and isinstance(expr.expr, AppliedUndef):
            order = sum(_derivative_orders(expr).values())
            base = expr.expr
            self.functions[base] = max(self.functions.get(base, 0), order)
            return
        raise UnsupportedByField(f"{_FUNCTION_WORDS.get(type(expr), 'the function ' + type(expr).__name__)}, "
                                 "which the field does not hold", expr)


_FUNCTION_WORDS = {sympy.sin: "the sine", sympy.cos: "the cosine", sympy.sinh: "the hyperbolic sine",
                   sympy.cosh: "the hyperbolic cosine", sympy.log: "the logarithm", sympy.Abs: "the absolute value",
                   sympy.asin: "the inverse sine", sympy.acos: "the inverse cosine", sympy.atan: "the inverse tangent",
                   sympy.asinh: "the inverse hyperbolic sine", sympy.acosh: "the inverse hyperbolic cosine",
                   sympy.atanh: "the inverse hyperbolic tangent", sympy.Integral: "an integral",
                   sympy.Piecewise: "a piecewise expression", sympy.sign: "the sign function",
                   type(sympy.pi): "the number pi"}


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
        g = f._gcd_of_denominators(self.den, other.den)
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
        a, d = f._cancel(self.num, other.den) if other.den != 1 else (self.num, other.den)
        c, b = f._cancel(other.num, self.den) if self.den != 1 else (other.num, self.den)
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
        if type(other) is int and other == 0:  # the commonest question, without building the constant 0
            return not self.num
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


@dataclass(frozen=True)
class _Relation:
    """A generator g held at most linearly: g^2 = ``square`` (a polynomial free of every such generator).
    ``partner`` is the sine's index for cos^2 = 1 + sign sin^2 (``sign`` -1 circular, 1 hyperbolic);
    None (sign 0) for a square root."""

    index: int
    square: PolyElement
    partner: int | None = None
    sign: int = 0


@dataclass(frozen=True)
class _Exponential:
    """The generator exp(q t) for an atom t (num/den in the base ring)."""

    atom_num: PolyElement
    atom_den: PolyElement
    q: sympy.Rational
    original: sympy.Expr


class _Fails:
    """A derivative rule that cannot be applied (raised when a polynomial holding the generator is differentiated)."""

    def __init__(self, error: Exception):
        self._error = error

    def error(self) -> Exception:
        return self._error


def _lift(poly: PolyElement, target) -> PolyElement:
    """A polynomial of a smaller ring (whose generators are the first ones of ``target``) in ``target``."""
    if poly.ring is target:
        return poly
    pad = (0,) * (target.ngens - poly.ring.ngens)
    return target.from_dict({monom + pad: coeff for monom, coeff in poly.items()}) if poly else target.zero


def _poly_key(poly: PolyElement) -> tuple:
    return tuple(sorted(poly.items()))


#: Integer contents of radicands are factored only when what is left after trial division by the primes below
#: SMALL_PRIMES_BOUND is below FACTOR_INTEGER_LIMIT (a number of up to 2048 bits could take hours).
SMALL_PRIMES_BOUND = 10_000
FACTOR_INTEGER_LIMIT = 10**18


def _small_factorization(n: int, root: sympy.Expr) -> dict[int, int]:
    """The prime factorisation of a radicand's integer content, or UnsupportedByField when it is too hard."""
    found: dict[int, int] = {}
    for prime in sympy.primerange(2, SMALL_PRIMES_BOUND):
        if n == 1 or prime * prime > n:
            break
        while n % prime == 0:
            n //= prime
            found[prime] = found.get(prime, 0) + 1
    if n > 1:
        if n >= FACTOR_INTEGER_LIMIT:
            raise UnsupportedByField("a square root of a number with large prime factors", root)
        for prime, multiplicity in sympy.factorint(n).items():
            found[prime] = found.get(prime, 0) + multiplicity
    return found


def _rational_gcd(values: Iterable[sympy.Rational]) -> sympy.Rational:
    numerator, denominator = 0, 1
    for v in values:
        v = sympy.Rational(v)
        numerator = sympy.igcd(numerator, abs(int(v.p)))
        denominator = sympy.ilcm(denominator, int(v.q))
    return sympy.Rational(numerator, denominator)


class FieldArithmetic:
    """Exact arithmetic in Q(parameters, coordinates, sin, cos, f, f', ..., exp(q t), s)
    modulo cos^2 + sin^2 = 1, cosh^2 - sinh^2 = 1 and s^2 = p.

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
        if any(r.sign < 0 for r in self._relations):
            rules.append("cos² = 1 − sin²")
        if any(r.sign > 0 for r in self._relations):
            rules.append("cosh² = 1 + sinh²")
        if self._exponentials:
            rules.append("products of exponentials as one exponential of the sum")
        if self._roots:
            rules.append("s² = p for each square root s = √p")
        return "canonical rational form" + (", with " + " and ".join(rules) if rules else "")

    def __init__(self, coordinates: Sequence[sympy.Symbol], expressions: Iterable[sympy.Expr]):
        self.coordinates = tuple(coordinates)
        expressions = [as_expression(e) for e in expressions]
        self._hyperbolic_as_exp = False
        try:
            self._build(expressions)
        except _HyperbolicCollision:
            self._hyperbolic_as_exp = True
            self._build(expressions)

    def _build(self, expressions: list[sympy.Expr]) -> None:
        scan = _Scan(self.coordinates)
        prepared = []
        for expr in expressions:
            expr = _rewrite_for_field(expr, self._hyperbolic_as_exp)
            scan.visit(expr)
            prepared.append(expr)
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
        self._prepared = prepared
        if not scan.exponentials and not scan.roots:
            self._setup(originals, pairs, (), ())
            return
        base = self._stage(originals, pairs, (), (), None)
        exponentials = base._exponential_generators(scan.exponentials, pairs) if scan.exponentials else ()
        with_exponentials = self._stage(originals, pairs, exponentials, (), base) if exponentials else base
        roots = with_exponentials._root_generators(scan.roots) if scan.roots else ()
        self._base, self._with_exponentials = base, with_exponentials
        self._setup(originals, pairs, exponentials, roots)
        parts = (["the exponentials of rational multiples of the terms of each exponent"] if exponentials else []) + \
                (["square roots s = √p reduced with s² = p, the denominator free of them"] if roots else [])
        self.description = type(self).description + "; with " + " and ".join(parts)

    def _stage(self, originals, pairs, exponentials, roots, base) -> "FieldArithmetic":
        """A field over the first generators only (for reading the exponents and radicands)."""
        stage = object.__new__(FieldArithmetic)
        stage.coordinates = self.coordinates
        stage._hyperbolic_as_exp = self._hyperbolic_as_exp
        stage._prepared = ()
        stage._base = base
        stage._with_exponentials = stage
        stage._setup(originals, pairs, exponentials, roots)
        return stage

    def _setup(self, originals, pairs, exponentials, roots) -> None:
        """The ring, the relations and the derivative rules for these generators.

        ``exponentials``: the :class:`_Exponential` generators after ``originals``; ``roots``: (original,
        radicand as a polynomial of the ring before the roots, key) for the square roots after those."""
        self._exponentials = tuple(exponentials)
        self._roots = tuple(roots)
        self._base_count = len(originals)
        originals = list(originals) + [e.original for e in exponentials] + [r[0] for r in roots]
        self._originals = originals
        names = [f"g{i}" for i in range(len(originals))] or ["g0"]
        self.ring, *gens = ring(",".join(names), sympy.ZZ)
        if not originals:
            gens = []
        self._gen_of = {orig: gen for orig, gen in zip(originals, gens)}
        self._gen_index = {orig: i for i, orig in enumerate(originals)}
        self._relations: list[_Relation] = []
        for k, pair in enumerate(pairs):
            sign = 1 if pair.hyperbolic else -1
            s = gens[2 * k + 1]
            self._relations.append(_Relation(2 * k, self.ring.one + sign * s**2, 2 * k + 1, sign))
        first_root = self._base_count + len(self._exponentials)
        self._root_index = {}
        for k, (_, radicand, key) in enumerate(self._roots):
            self._relations.append(_Relation(first_root + k, _lift(radicand, self.ring)))
            self._root_index[key] = first_root + k
        self._reduction_cache: dict[tuple[int, int], PolyElement] = {}
        self._factor_cache: dict = {}
        self._factorizations: dict = {}
        self._irreducibles: list[PolyElement] = []
        self._display_base: list[PolyElement] | None = None  # None: displays factor completely
        self._test_values: dict = {}
        self.zero = RationalFunction(self, self.ring.zero, self.ring.one)
        self.one = RationalFunction(self, self.ring.one, self.ring.one)
        self._derivative_rules = [self._rules_for(k, x) for k, x in enumerate(self.coordinates)]
        self._check_roots_independent()

    # the exponentials and roots a metric needs ------------------------------
    def _atoms_of(self, argument: sympy.Expr):
        """An exponent split into {atom key: (atom num, atom den, coefficient)} and its constant term."""
        try:
            element = self._convert(_rewrite_for_field(argument, self._hyperbolic_as_exp))
        except (UnsupportedByField, ZeroDivisionError):
            raise UnsupportedByField("an exponential whose argument the field cannot hold", sympy.exp(argument)) from None
        atoms: dict = {}
        constant = sympy.Integer(0)
        for monom, coeff in element.num.items():
            term = self.make(self.ring.from_dict({monom: coeff}), element.den)
            if len(term.num) != 1:
                raise UnsupportedByField("an exponential whose argument does not split into terms",
                                         sympy.exp(argument))
            (t_monom, t_coeff), = term.num.items()
            den_content = sympy.igcd(*[int(c) for c in term.den.values()]) if len(term.den) > 1 else abs(int(term.den.LC))
            coefficient = sympy.Rational(int(t_coeff), den_content)
            atom_num = self.ring.from_dict({t_monom: 1})
            atom_den = term.den.quo_ground(den_content)
            if atom_num == 1 and atom_den == 1:
                constant += coefficient
                continue
            key = (_poly_key(atom_num), _poly_key(atom_den))
            previous = atoms.get(key, (atom_num, atom_den, 0))[2]
            atoms[key] = (atom_num, atom_den, previous + coefficient)
        return atoms, constant

    def _exponential_generators(self, arguments, pairs) -> tuple[_Exponential, ...]:
        """One generator exp(q t) per atom t of the exponents (called on the base field)."""
        atoms: dict = {}
        coefficients: dict = {}
        for argument in sorted(arguments, key=sympy.default_sort_key):
            found, constant = self._atoms_of(argument)
            for key, (num, den, c) in found.items():
                atoms[key] = (num, den)
                coefficients.setdefault(key, []).append(c)
            if constant:
                atoms[None] = (self.ring.one, self.ring.one)
                coefficients.setdefault(None, []).append(constant)
        hyperbolic = {self._gen_of[p.argument] for p in pairs if p.hyperbolic}
        for key, (num, den) in atoms.items():
            if key is not None and den == 1 and num in hyperbolic:
                raise _HyperbolicCollision()
        self._check_atoms_independent(atoms)
        out = []
        for key, (num, den) in atoms.items():
            q = _rational_gcd(coefficients[key])
            atom = self._as_expr(num) / self._as_expr(den)
            out.append(_Exponential(num, den, q, sympy.exp(q * atom)))
        out.sort(key=lambda e: sympy.default_sort_key(e.original))
        return tuple(out)

    def _check_atoms_independent(self, atoms: dict) -> None:
        """No rational combination of the non-constant atoms may be constant (then their exponentials would
        be algebraically dependent); distinct monomials are independent, fractions are checked."""
        fractions = [(num, den) for key, (num, den) in atoms.items() if key is not None]
        if all(den == 1 for _, den in fractions):
            return
        common = self.ring.one
        for _, den in fractions:
            common = common.lcm(den)
        polys = [num * common.exquo(den) for num, den in fractions] + [common]
        monomials = sorted({m for p in polys for m in p.keys()})
        matrix = sympy.Matrix([[p.get(m, 0) for m in monomials] for p in polys])
        if matrix.rank() < len(polys):
            raise UnsupportedByField("exponentials whose arguments combine to a constant",
                                     sympy.Add(*[sympy.exp(self._as_expr(n) / self._as_expr(d)) for n, d in fractions]))

    def _root_generators(self, radicands) -> tuple:
        """One generator s = d sqrt(n/d), s^2 = n d, per distinct radicand n/d (called on the field with the
        exponentials)."""
        found: dict = {}
        for radicand in sorted(radicands, key=sympy.default_sort_key):
            root = sympy.sqrt(radicand)
            try:
                element = self._convert(_rewrite_for_field(radicand, self._hyperbolic_as_exp))
            except (UnsupportedByField, ZeroDivisionError):
                raise UnsupportedByField("a square root of something the field cannot hold", root) from None
            if not element.num:
                raise UnsupportedByField("a square root of zero", root)
            if any(element.num.degree(r.index) > 0 for r in self._relations):
                raise UnsupportedByField("a square root of an expression holding a cosine", root)
            key = (_poly_key(element.num), _poly_key(element.den))
            if key in found:
                continue
            den = element.den
            original = root if den == 1 else self._as_expr(den) * root
            found[key] = (original, element.num * den, key)
        return tuple(found[k] for k in sorted(found, key=lambda k: sympy.default_sort_key(found[k][0])))

    def _check_roots_independent(self) -> None:
        """The radicands (1 -+ sin^2 of the trigonometric pairs included) must be independent modulo
        squares: GF(2)-independent vectors of their odd-multiplicity factors, sign and primes included."""
        if not self._roots:
            return
        columns: dict = {}
        rows = []
        for relation in self._relations:
            content, factors = relation.square.factor_list()
            content = int(content)
            odd = set()
            for f, multiplicity in factors:
                if f.LC < 0:
                    f, content = -f, content * (-1) ** multiplicity
                if multiplicity % 2:
                    odd.add(("factor", _poly_key(f)))
            if content < 0:
                odd.add(("sign",))
            for prime, multiplicity in _small_factorization(abs(content), self._originals[relation.index]).items():
                if multiplicity % 2:
                    odd.add(("prime", prime))
            bits = 0
            for part in odd:
                bits |= 1 << columns.setdefault(part, len(columns))
            rows.append((bits, relation))
        pivots: dict[int, int] = {}
        for bits, relation in rows:
            while bits:
                top = bits.bit_length() - 1
                if top not in pivots:
                    pivots[top] = bits
                    break
                bits ^= pivots[top]
            if not bits:
                original = self._originals[relation.index]
                if relation.sign:
                    raise UnsupportedByField("square roots that, with the trigonometric relations, are not "
                                             "independent modulo squares", original)
                raise UnsupportedByField("a square root of a square (up to the other roots), whose sign is "
                                         "not known", original)

    # construction ------------------------------------------------------
    def constant(self, value) -> RationalFunction:
        value = sympy.Rational(value)
        return self.make(self.ring(int(value.p)), self.ring(int(value.q)))

    def from_expr(self, expr: sympy.Expr) -> RationalFunction:
        """Convert a sympy expression built only from the field's generators."""
        return self._convert(_rewrite_for_field(as_expression(expr), self._hyperbolic_as_exp))

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
        if self._exponentials and (isinstance(expr, sympy.exp) or expr is sympy.E):
            return self._convert_exponential(expr)
        if self._roots and isinstance(expr, sympy.Pow) and expr.exp.is_Rational and expr.exp.q == 2:
            return self._convert_root(expr)
        raise UnsupportedByField("an expression this field does not hold", expr)

    def _convert_exponential(self, expr: sympy.Expr) -> RationalFunction:
        argument = sympy.Integer(1) if expr is sympy.E else expr.args[0]
        atoms, constant = self._base._atoms_of(argument)
        wanted = {key: c for key, (_, _, c) in atoms.items()}
        if constant:
            wanted[None] = constant
        num, den = self.ring.one, self.ring.one
        for k, e in enumerate(self._exponentials):
            key = None if (e.atom_num == 1 and e.atom_den == 1) else (_poly_key(e.atom_num), _poly_key(e.atom_den))
            if key not in wanted:
                continue
            power = wanted.pop(key) / e.q
            if not power.is_Integer:
                break
            gen = self.ring.gens[self._base_count + k]
            if power > 0:
                num *= gen ** int(power)
            else:
                den *= gen ** int(-power)
        else:
            if not wanted:
                return self.make(num, den)
        raise UnsupportedByField("an exponential this field does not hold", expr)

    def _convert_root(self, expr: sympy.Expr) -> RationalFunction:
        element = self._with_exponentials._convert(_rewrite_for_field(expr.base, self._hyperbolic_as_exp))
        index = self._root_index.get((_poly_key(element.num), _poly_key(element.den)))
        if index is None:
            raise UnsupportedByField("a square root this field does not hold", expr)
        root = self.make(self.ring.gens[index], _lift(element.den, self.ring))  # sqrt(n/d) = s/d
        return root ** int(expr.exp.p)

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
            num, den = self._cancel(num, den)
        elif den.LC < 0:
            num, den = -num, -den
        return RationalFunction(self, num, den)

    def _value_at_test_point(self, poly: PolyElement) -> int:
        """poly at the integer point x_k = 2k + 3 (k the generator's index), exactly."""
        total = 0
        for monom, coeff in poly.items():
            term = int(coeff)
            for k, e in enumerate(monom):
                if e:
                    term *= (2 * k + 3) ** e
            total += term
        return total

    def _divide_out(self, poly: PolyElement, factor: PolyElement, most: int | None = None) -> tuple[PolyElement, int]:
        """(poly / factor^m, m) with m the multiplicity of ``factor`` in ``poly`` (at most ``most``).  A trial
        division that would fail is skipped when factor's value at the test point does not divide poly's
        there: f | p in Z[x] gives f(x0) | p(x0)."""
        multiplicity = 0
        at = self._test_values.get(factor)
        if at is None:
            at = self._test_values[factor] = self._value_at_test_point(factor)
        while (most is None or multiplicity < most) and not poly.is_ground:
            if at and self._value_at_test_point(poly) % at:
                break
            quotient, remainder = poly.div(factor)
            if remainder:
                break
            poly, multiplicity = quotient, multiplicity + 1
        return poly, multiplicity

    def _cancel(self, num: PolyElement, den: PolyElement) -> tuple[PolyElement, PolyElement]:
        """num/den in lowest terms with a positive leading coefficient of den: what ``num.cancel(den)`` gives,
        computed by trial division with the irreducible factors of den (known from earlier denominators) where
        those are known; a gcd of a long numerator with a short denominator costs far more."""
        if den.is_ground or len(num) < CANCEL_BY_FACTORS_MIN_TERMS:
            return num.cancel(den)
        factored = self._factorization(den)
        if factored is None:
            return num.cancel(den)
        content, factors = factored
        kept = []
        for f, multiplicity in factors:
            num, divided = self._divide_out(num, f, most=multiplicity)
            if multiplicity - divided:
                kept.append((f, multiplicity - divided))
        common = sympy.igcd(int(num.content()), content)
        if common != 1:
            num, content = num.quo_ground(common), content // common
        den = self.ring(content)
        for f, multiplicity in kept:
            den *= f ** multiplicity
        return num, den

    def _gcd_of_denominators(self, a: PolyElement, b: PolyElement) -> PolyElement:
        """gcd(a, b) of two denominators, from their factorisations where both are known."""
        if a.is_ground or b.is_ground:
            return a.gcd(b)
        fa, fb = self._factorization(a), self._factorization(b)
        if fa is None or fb is None:
            return a.gcd(b)
        multiplicities = dict(fb[1])
        g = self.ring(sympy.igcd(fa[0], fb[0]))
        for f, m in fa[1]:
            k = min(m, multiplicities.get(f, 0))
            if k:
                g *= f ** k
        return g

    def _factorization(self, den: PolyElement):
        """(content, [(irreducible with positive leading coefficient, multiplicity)]) of den, or None when it
        would take a factorisation of a long polynomial; cached, and every factor found is tried first later."""
        cached = self._factorizations.get(den)
        if cached is not None or den in self._factorizations:
            return cached
        content, factors, rest = 1, [], den
        for f in self._irreducibles:
            rest, multiplicity = self._divide_out(rest, f)
            if multiplicity:
                factors.append((f, multiplicity))
            if rest.is_ground:
                break
        if not rest.is_ground:
            if len(rest) > FACTOR_DENOMINATOR_TERMS_LIMIT:
                self._factorizations[den] = None
                return None
            found_content, found = rest.factor_list()
            rest = self.ring(found_content)
            for f, multiplicity in found:
                if f.LC < 0:
                    f, rest = -f, rest * (-1) ** multiplicity
                factors.append((f, multiplicity))
                self._irreducibles.append(f)
        content = int(rest.LC) if rest else 1
        result = (content, factors) if content > 0 else None
        if len(self._factorizations) < 100000:
            self._factorizations[den] = result
        return result

    def _power_of_relation(self, relation: int, half: int) -> PolyElement:
        """square ** half for the given relation (g^(2 half) = square^half)."""
        key = (relation, half)
        if key not in self._reduction_cache:
            self._reduction_cache[key] = self._relations[relation].square ** half
        return self._reduction_cache[key]

    def _reduce(self, poly: PolyElement) -> PolyElement:
        """Replace g^2 by its square (cos^2 by 1 - sin^2, cosh^2 by 1 + sinh^2, s^2 by p) until every such
        generator has degree <= 1 (one pass: no square holds any of these generators)."""
        for relation, rel in enumerate(self._relations):
            c_index = rel.index
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
        """Multiply by the conjugate until no cosine (and no root) is left in the denominator."""
        changed = False
        for rel in self._relations:
            c_index = rel.index
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
    def _rules_for(self, k: int, x: sympy.Symbol) -> list[tuple]:
        """For each generator with non-zero derivative along x: (index, numerator, denominator), the
        denominator None for a polynomial derivative (or the numerator a :class:`_TooDeep` / :class:`_Fails`)."""
        rules = []
        gens = self.ring.gens
        for i, orig in enumerate(self._originals[:self._base_count]):
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
                rules.append((i, d, None))
        if self._exponentials:
            # d exp(q t)/dx = q (dt/dx) exp(q t), dt/dx from the base field.
            for j, e in enumerate(self._exponentials):
                i = self._base_count + j
                try:
                    dt = self._base.diff(self._base.make(e.atom_num, e.atom_den), k)
                except UnsupportedByField as error:
                    rules.append((i, _Fails(error), None))
                    continue
                if not dt.num:
                    continue
                rules.append((i, _lift(dt.num, self.ring) * int(e.q.p) * gens[i],
                              _lift(dt.den, self.ring) * int(e.q.q)))
        if self._roots:
            # d s/dx = p' s / (2 p) from s^2 = p.
            plain_rules = list(rules)
            for rel in self._relations:
                if rel.sign:
                    continue
                try:
                    dp, scale = self._apply_rules(plain_rules, rel.square)
                except UnsupportedByField as error:
                    rules.append((rel.index, _Fails(error), None))
                    continue
                if dp:
                    rules.append((rel.index, dp * gens[rel.index], 2 * rel.square * scale))
        return rules

    def _apply_rules(self, rules, poly: PolyElement) -> tuple[PolyElement, PolyElement]:
        """(numerator, denominator) of the derivative of a polynomial by these rules."""
        result = self.ring.zero
        common = self.ring.one
        terms = []
        for i, d, den in rules:
            if poly.degree(i) <= 0:
                continue
            if isinstance(d, (_TooDeep, _Fails)):
                raise d.error()
            terms.append((poly.diff(self.ring.gens[i]) * d, den))
            if den is not None and den != 1:
                common = common.lcm(den)
        if common == 1:
            for term, _ in terms:
                result += term
            return result, common
        for term, den in terms:
            result += term * (common if den is None else common.exquo(den))
        return result, common

    def _diff_poly(self, poly: PolyElement, coordinate_index: int) -> tuple[PolyElement, PolyElement]:
        return self._apply_rules(self._derivative_rules[coordinate_index], poly)

    def diff(self, element: RationalFunction, coordinate_index: int) -> RationalFunction:
        """Partial derivative along the coordinate with this index (quotient rule)."""
        num, den = element.num, element.den
        dn, ln = self._diff_poly(num, coordinate_index)
        if den == 1:
            return self.make(dn, ln)
        dd, ld = self._diff_poly(den, coordinate_index)
        if not dd:
            return self.make(dn, den * ln if ln != 1 else den)
        # d(n/D) = (n' D - n D') / D^2, with the gcd of D and D' taken out first; n' = dn/ln, D' = dd/ld.
        g = den.gcd(dd)
        den_g, dd_g = den.exquo(g), dd.exquo(g)
        if ln == 1 and ld == 1:
            return self.make(dn * den_g - num * dd_g, den * den_g)
        return self.make(dn * ld * den_g - num * dd_g * ln, ln * ld * den * den_g)

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
            self._factor_cache[key] = self._display_factors(poly)
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

    def learn_display_factors(self, elements: Iterable[RationalFunction]) -> None:
        """Take the irreducible factors of these elements' numerators and denominators (the metric's) as the
        factors a display divides out before factoring what is left.  Called once, at a fixed point of the
        chain, so that what a display shows does not depend on what else was computed before it."""
        found: list[PolyElement] = []
        for element in elements:
            for poly in (element.num, element.den):
                if poly.is_ground or len(poly) > FACTOR_DENOMINATOR_TERMS_LIMIT:
                    continue
                for f, _ in poly.factor_list()[1]:
                    f = -f if f.LC < 0 else f
                    if len(f) > 1 and f not in found:
                        found.append(f)
        self._display_base = found
        self._factor_cache.clear()

    def _display_factors(self, poly: PolyElement) -> tuple[int, list[tuple[PolyElement, int]]]:
        """(content, [(factor, multiplicity)]) with poly = content * prod factor^multiplicity: the complete
        factorisation of a short polynomial, and of every polynomial when no factors were learned (outside the
        chain); for a long one, the metric's factors (``learn_display_factors``) divided out, then the complete
        factorisation of the rest if that is short, else the rest as one factor."""
        if len(poly) <= DISPLAY_FACTOR_TERMS_LIMIT or self._display_base is None:
            if _plainly_irreducible(poly):
                content = poly.content()
                return content, [(poly.quo_ground(content), 1)]
            return poly.factor_list()
        factors, rest = [], poly
        for f in self._display_base:
            rest, multiplicity = self._divide_out(rest, f)
            if multiplicity:
                factors.append((f, multiplicity))
        if len(rest) <= DISPLAY_FACTOR_TERMS_LIMIT:
            content, found = rest.factor_list()
            return content, factors + found
        content = rest.content()
        return content, factors + [(rest.quo_ground(content), 1)]

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
        for rel in self._relations:
            if not rel.sign:
                continue
            c_index, s_index, sign = rel.index, rel.partner, rel.sign
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


def _plainly_irreducible(poly: PolyElement) -> bool:
    """True when poly's primitive part is irreducible because poly = c1 x + c0 in some generator x with
    gcd(c1, c0) = 1 (a factorisation would give one factor free of x, dividing both).  False says nothing.
    poly must have no monomial factor, so that c0 is not 0."""
    for index in range(poly.ring.ngens):
        if poly.degree(index) == 1:
            c1, c0 = _coefficient_in(poly, index, 1), _coefficient_in(poly, index, 0)
            if c0 and c1.gcd(c0).is_ground:
                return True
    return False


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
    #: Why the exact field was not used (:meth:`UnsupportedByField.as_data`), set by :func:`choose_arithmetic`.
    slow_path_because: dict | None = None
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
    except UnsupportedByField as error:
        arithmetic = ExpressionArithmetic(coordinates, list(coordinates) + list(parameters))
        arithmetic.slow_path_because = error.as_data()
        return arithmetic
