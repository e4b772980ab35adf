"""A stronger zero test: rewrites that settle identities the canonical forms of :mod:`stepper.algebra` miss.

The audit asks whether ``claimed - derived`` vanishes.  The exact arithmetic decides that for rational
functions of the coordinates, the parameters, sin and cos (sinh and cosh) of single symbols and free
functions; a claim copied from an old table often leaves that field (``tan(theta/2)``, ``exp(2*x)``,
``log(r*(r - 2*M))``), and sympy's simplifier does not always find the identity.  :func:`prove_zero`
tries a fixed sequence of rewrites, each an identity that holds wherever both sides are defined, and
after each one asks the canonical field whether the result is 0:

``reciprocal functions``
    tan, cot, sec, csc through sin and cos; tanh, coth, sech, csch through sinh and cosh.
``common angles``
    every angle written as an integer multiple of one base angle per symbol (theta/2 and theta become
    u and 2u with theta = 2u, a change of variable), then the multiple-angle formulas, so that half
    and double angles meet: tan(theta/2) = sin(theta)/(1 + cos(theta)) follows.
``exponentials``
    sinh, cosh and exp through powers of one exponential per base: exp(a + b) = exp(a) exp(b).
``logarithms``
    the argument of each logarithm factored, and log(a b) = log a + log b, log(a^k) = k log a applied
    where the declared signs make the factors positive (free functions carry their declared signs).

The last test treats what the field cannot hold (a square root, a logarithm, an angle or exponent that
is not a rational multiple of a symbol, pi) as new independent symbols.  That can only lose identities,
never invent one: an expression that vanishes for independent values vanishes for the particular ones.
So a True answer is a proof; anything else leaves the question open, and the caller keeps its numeric
evidence.  Nothing here ever says an expression is *not* zero.

The work is bounded by counts, not by a clock, so the answer is the same on every machine: at most
:data:`MAX_NODES` nodes in any rewritten expression, multiples of a base angle or exponent up to
:data:`MAX_MULTIPLE`, and at most :data:`MAX_BASES` distinct bases.  Beyond a bound the test stops and
says which bound it met.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Iterable

import sympy
from sympy.core.function import AppliedUndef

from .algebra import RECIPROCAL_FUNCTIONS, FieldArithmetic, UnsupportedByField
from .record import FUNCTION_SIGN_WORDS, FunctionSign, as_expression

#: Largest expression (nodes of its tree) any rewrite may produce.
MAX_NODES = 4000
#: Largest integer multiple of a base angle (or exponent) expanded by the multiple-angle formulas.
MAX_MULTIPLE = 12
#: Most distinct bases (angles and exponents) one expression may hold.
MAX_BASES = 8

#: A declared sign as keyword arguments of a sympy symbol.
_SIGN_ASSUMPTIONS = {word: {k: True for k in keywords} for word, keywords in FUNCTION_SIGN_WORDS.items()}


@dataclass(frozen=True)
class Rewrite:
    """One rewrite of :func:`prove_zero`: its key (the data recorded), what it does, the identities it uses."""

    key: str
    words: str
    identities: str


#: The rewrites, in the order they are applied ("as written" is the canonical test before any of them).
REWRITES = (
    Rewrite("as written", "no rewrite: functions of compound arguments read as functions of new variables",
            "sin^2 + cos^2 = 1, cosh^2 - sinh^2 = 1"),
    Rewrite("reciprocal functions", "tan, cot, sec, csc and their hyperbolic counterparts through sin, cos, "
                                    "sinh and cosh",
            "tan x = sin x/cos x, cot x = cos x/sin x, sec x = 1/cos x, csc x = 1/sin x and their hyperbolic "
            "counterparts"),
    Rewrite("common angles", "the angles as integer multiples of a common angle, expanded (half and double "
                             "angles)",
            "sin(a + b) = sin a cos b + cos a sin b, cos(a + b) = cos a cos b - sin a sin b"),
    Rewrite("exponentials", "sinh, cosh and exp through powers of one exponential per base",
            "sinh x = (e^x - e^-x)/2, cosh x = (e^x + e^-x)/2, e^(a + b) = e^a e^b"),
    Rewrite("logarithms", "logarithms of products and powers split where the declared signs make the "
                          "factors positive",
            "log(a b) = log a + log b and log(a^k) = k log a for a, b > 0"),
)
REWRITE_KEYS = tuple(r.key for r in REWRITES)
_BY_KEY = {r.key: r for r in REWRITES}


@dataclass(frozen=True)
class IdentityTest:
    """What :func:`prove_zero` found, as data.

    ``vanishes`` is True (proven 0) or None (not proven; nothing here proves an expression non-zero).
    ``applied`` are the keys of the rewrites that changed the expression, in order, up to the one after
    which the canonical form was 0; ``decisive`` is that one ("as written" when no rewrite was needed).
    ``signs`` are the declared signs of free functions the expression was read with.  ``stopped`` names
    the bound the work met, if any.
    """

    vanishes: bool | None
    applied: tuple[str, ...] = ()
    decisive: str = ""
    signs: tuple[FunctionSign, ...] = ()
    stopped: str = ""

    def as_data(self) -> dict:
        data: dict = {"vanishes": self.vanishes, "rewrites": list(self.applied), "decisive": self.decisive or None}
        if self.signs:
            data["function_signs"] = [s.as_data() for s in self.signs]
        if self.stopped:
            data["stopped"] = self.stopped
        return data

    def sentence(self) -> str:
        signs = (" (free functions with their declared signs: " + ", ".join(s.words() for s in self.signs) + ")"
                 if self.signs else "")
        if self.vanishes:
            if not self.applied:
                return f"its canonical form is 0 with functions of compound arguments read as independent{signs}"
            steps = ", then ".join(_BY_KEY[k].words for k in self.applied)
            return (f"its canonical form is 0 after rewriting {steps}{signs}; "
                    f"decided by: {_BY_KEY[self.decisive].identities}")
        if self.stopped:
            return f"stepper's identity rewrites stopped at a bound ({self.stopped}) before reducing it to 0"
        return ("stepper's identity rewrites (reciprocal functions, common angles, exponentials, logarithms) "
                f"do not reduce it to 0{signs}")


class _Stop(Exception):
    """A bound of the work was met."""


def _nodes(expr: sympy.Expr) -> int:
    count = 0
    for _ in sympy.preorder_traversal(expr):
        count += 1
        if count > MAX_NODES:
            raise _Stop(f"more than {MAX_NODES} nodes")
    return count


# ---------------------------------------------------------------------------
# Free functions as signed symbols
# ---------------------------------------------------------------------------

def signed_stand_ins(expr: sympy.Expr, signs: Iterable[FunctionSign] = ()) -> tuple[sympy.Expr, tuple[FunctionSign, ...]]:
    """``expr`` with every derivative of a free function, then every free function, replaced by a real
    placeholder symbol carrying the declared sign (first derivatives along the named argument), and the
    declarations that were used.

    A zero test or a sign decision made with independent placeholders holds for every function: the
    value of a function and of its first derivatives at a point can be chosen freely (with their signs)."""
    signs = tuple(signs)
    own = {(s.function, s.along): s for s in signs}
    used: list[FunctionSign] = []
    derivatives = sorted(expr.atoms(sympy.Derivative), key=sympy.default_sort_key)
    mapping = {}
    for k, d in enumerate(derivatives):
        assumptions: dict = {}
        if isinstance(d.expr, AppliedUndef):
            counts = [(v, int(n)) for v, n in d.variable_count]
            if len(counts) == 1 and counts[0][1] == 1 and isinstance(counts[0][0], sympy.Symbol):
                declared = own.get((d.expr.func.__name__, counts[0][0].name))
                if declared is not None:
                    assumptions = _SIGN_ASSUMPTIONS[declared.sign]
                    used.append(declared)
        mapping[d] = sympy.Dummy(f"d{k}", **{"real": True, **assumptions})
    expr = expr.xreplace(mapping)
    functions = sorted(expr.atoms(AppliedUndef), key=sympy.default_sort_key)
    mapping = {}
    for k, f in enumerate(functions):
        declared = own.get((f.func.__name__, ""))
        assumptions = _SIGN_ASSUMPTIONS[declared.sign] if declared is not None else {}
        if declared is not None:
            used.append(declared)
        mapping[f] = sympy.Dummy(f"f{k}", **{"real": True, **assumptions})
    ordered = tuple(s for s in signs if s in used)
    return expr.xreplace(mapping), ordered


# ---------------------------------------------------------------------------
# The rewrites
# ---------------------------------------------------------------------------

_RECIPROCAL = RECIPROCAL_FUNCTIONS


def _reciprocal_functions(expr: sympy.Expr) -> sympy.Expr:
    for head, rule in _RECIPROCAL.items():
        if expr.has(head):
            expr = expr.replace(head, rule)
    return expr


def _linear_parts(argument: sympy.Expr) -> tuple[dict[sympy.Expr, sympy.Rational], sympy.Expr]:
    """``argument`` as sum of rational multiples of monomials (symbols or products without numbers)
    plus a constant: ({monomial: coefficient}, constant)."""
    parts: dict[sympy.Expr, sympy.Rational] = {}
    constant = sympy.Integer(0)
    for term in sympy.Add.make_args(sympy.expand_mul(argument)):
        coefficient, rest = term.as_coeff_Mul()
        if rest.free_symbols and coefficient.is_Rational:
            parts[rest] = parts.get(rest, sympy.Integer(0)) + coefficient
        elif not term.free_symbols:
            constant += term
        else:  # an irrational coefficient: the term is its own monomial
            parts[term] = parts.get(term, sympy.Integer(0)) + 1
    return {m: c for m, c in parts.items() if c != 0}, constant


def _common_angles(expr: sympy.Expr) -> sympy.Expr:
    """Angles of sin, cos, sinh and cosh as integer multiples of one base per monomial, multiple angles
    expanded.

    The base of a monomial whose multiples in the angles have denominators q1, q2, ... is the monomial
    divided by L, the least common multiple.  For a symbol x with L > 1 that is a change of variable,
    x = L u everywhere (u a new symbol with x's sign); a compound monomial (such as H*t) is replaced by L w
    in the angles only, w a new independent symbol."""
    heads = (sympy.sin, sympy.cos, sympy.sinh, sympy.cosh)
    calls = sorted((a for a in expr.atoms(sympy.Function) if isinstance(a, heads)), key=sympy.default_sort_key)
    if not calls:
        return expr
    denominators: dict[sympy.Expr, int] = {}
    for call in calls:
        parts, _ = _linear_parts(call.args[0])
        for monomial, coefficient in parts.items():
            denominators[monomial] = math.lcm(denominators.get(monomial, 1), int(coefficient.q))
    if len(denominators) > MAX_BASES:
        raise _Stop(f"more than {MAX_BASES} distinct angles")
    bases: dict[sympy.Expr, sympy.Expr] = {}
    change: dict[sympy.Symbol, sympy.Expr] = {}  # x = L u, everywhere
    back: dict[sympy.Dummy, sympy.Expr] = {}      # w = m / L, after the expansion
    for k, monomial in enumerate(sorted(denominators, key=sympy.default_sort_key)):
        if denominators[monomial] == 1:
            bases[monomial] = monomial
            continue
        bases[monomial] = sympy.Dummy(f"angle{k}", **_real_assumptions(monomial))
        if monomial.is_Symbol:
            change[monomial] = denominators[monomial] * bases[monomial]
        else:
            back[bases[monomial]] = monomial / denominators[monomial]
    replacement = {}
    for call in calls:
        parts, constant = _linear_parts(call.args[0])
        angle = constant
        for monomial, coefficient in parts.items():
            multiple = coefficient * denominators[monomial]
            if abs(multiple) > MAX_MULTIPLE:
                raise _Stop(f"a multiple {multiple} of an angle above {MAX_MULTIPLE}")
            angle += multiple * bases[monomial]
        replacement[call] = call.func(angle)
    rewritten = expr.xreplace(replacement)
    if change:
        rewritten = rewritten.xreplace(change)
    rewritten = _expand_angles(rewritten)
    return rewritten.xreplace(back) if back else rewritten


def _expand_angles(expr: sympy.Expr) -> sympy.Expr:
    """sin, cos, sinh and cosh of sums and integer multiples expanded (sympy's expand_trig on them alone)."""
    heads = (sympy.sin, sympy.cos, sympy.sinh, sympy.cosh)
    return expr.replace(lambda e: isinstance(e, heads) and not e.args[0].is_Symbol,
                        lambda e: sympy.expand_trig(e))


def _real_assumptions(monomial: sympy.Expr) -> dict:
    if monomial.is_positive:
        return {"positive": True}
    if monomial.is_negative:
        return {"negative": True}
    return {"real": True} if monomial.is_real else {}


def _exponentials(expr: sympy.Expr) -> sympy.Expr:
    """Hyperbolic functions and exp through integer powers of one exponential per base."""
    heads = (sympy.sinh, sympy.cosh, sympy.tanh, sympy.coth, sympy.sech, sympy.csch)
    if expr.has(*heads):
        expr = expr.replace(lambda e: isinstance(e, heads), lambda e: e.rewrite(sympy.exp))
    powers = sorted(expr.atoms(sympy.exp), key=sympy.default_sort_key)
    if not powers:
        return expr
    denominators: dict[sympy.Expr, int] = {}
    decomposed = {}
    for power in powers:
        parts, constant = _linear_parts(power.args[0])
        decomposed[power] = (parts, constant)
        for monomial, coefficient in parts.items():
            denominators[monomial] = math.lcm(denominators.get(monomial, 1), int(coefficient.q))
    if len(denominators) > MAX_BASES:
        raise _Stop(f"more than {MAX_BASES} distinct exponents")
    # Each base exp(m/L) becomes a new positive symbol: sympy would otherwise multiply the powers back into
    # one exponential.  As with every new symbol here, that can lose an identity but never invent one.
    ordered = sorted(denominators, key=sympy.default_sort_key)
    bases = {m: sympy.Dummy(f"exp{k}", positive=True) for k, m in enumerate(ordered)}
    replacement = {}
    for power, (parts, constant) in decomposed.items():
        value = sympy.exp(constant) if constant != 0 else sympy.Integer(1)
        for monomial, coefficient in parts.items():
            multiple = coefficient * denominators[monomial]
            if abs(multiple) > MAX_MULTIPLE:
                raise _Stop(f"a multiple {multiple} of an exponent above {MAX_MULTIPLE}")
            value *= bases[monomial] ** int(multiple)
        replacement[power] = value
    return expr.xreplace(replacement)


def _logarithms(expr: sympy.Expr) -> sympy.Expr:
    """Each logarithm's argument factored, then split under the declared signs (sympy's expand_log without
    force, which splits only what the assumptions allow)."""
    logs = sorted(expr.atoms(sympy.log), key=sympy.default_sort_key)
    if not logs:
        return expr
    replacement = {}
    for entry in logs:
        argument = sympy.factor(entry.args[0])
        replacement[entry] = sympy.expand_log(sympy.log(argument), force=False)
    return expr.xreplace(replacement)


_STEPS = {
    "reciprocal functions": _reciprocal_functions,
    "common angles": _common_angles,
    "exponentials": _exponentials,
    "logarithms": _logarithms,
}


# ---------------------------------------------------------------------------
# The canonical test
# ---------------------------------------------------------------------------

def _generalized(expr: sympy.Expr) -> sympy.Expr:
    """``expr`` with whatever the field cannot hold replaced by new independent symbols (bottom-up, the
    same subexpression always by the same symbol): trigonometric and hyperbolic functions of compound
    arguments get a new symbol as argument, every other non-rational part becomes a new symbol."""
    cache: dict[sympy.Expr, sympy.Expr] = {}
    counter = [0]

    def fresh(kind: str, like: sympy.Expr | None = None) -> sympy.Dummy:
        counter[0] += 1
        assumptions = {}
        if like is not None:
            if like.is_positive:
                assumptions = {"positive": True}
            elif like.is_real:
                assumptions = {"real": True}
        return sympy.Dummy(f"{kind}{counter[0]}", **assumptions)

    def walk(e: sympy.Expr) -> sympy.Expr:
        if e in cache:
            return cache[e]
        if e.is_Rational or e.is_Symbol:
            out = e
        elif isinstance(e, (sympy.Add, sympy.Mul)):
            out = e.func(*(walk(a) for a in e.args))
        elif isinstance(e, sympy.Pow) and e.exp.is_Integer:
            out = sympy.Pow(walk(e.base), e.exp)
        elif isinstance(e, (sympy.sin, sympy.cos, sympy.sinh, sympy.cosh)):
            argument = walk(e.args[0])
            if not argument.is_Symbol:
                key = ("angle", argument)
                if key not in cache:
                    cache[key] = fresh("angle", argument)
                argument = cache[key]
            out = e.func(argument)
        else:
            out = fresh("atom", e)
        cache[e] = out
        return out

    return walk(expr)


def _canonically_zero(expr: sympy.Expr) -> bool:
    general = _generalized(expr)
    if general == 0:
        return True
    symbols = sorted(general.free_symbols, key=lambda s: (s.name, s.dummy_index if isinstance(s, sympy.Dummy) else 0))
    try:
        arithmetic = FieldArithmetic(symbols, [general])
        return not arithmetic.from_expr(general).num
    except (UnsupportedByField, ZeroDivisionError):
        return False


def prove_zero(expr: sympy.Expr, signs: Iterable[FunctionSign] = ()) -> IdentityTest:
    """Try to prove ``expr`` = 0 by the rewrites of :data:`REWRITES`, each followed by the canonical test.

    ``signs`` are the declared signs of the metric's free functions; the functions in ``expr`` are read
    as placeholders with those signs (see :func:`signed_stand_ins`)."""
    expr, used = signed_stand_ins(as_expression(expr), signs)
    applied: list[str] = []
    try:
        _nodes(expr)
        if _canonically_zero(expr):
            return IdentityTest(True, (), "as written", used)
        for key, rewrite in _STEPS.items():
            rewritten = rewrite(expr)
            if rewritten == expr:
                continue
            _nodes(rewritten)
            expr = rewritten
            applied.append(key)
            if _canonically_zero(expr):
                return IdentityTest(True, tuple(applied), key, used)
    except _Stop as stop:
        return IdentityTest(None, tuple(applied), "", used, str(stop))
    except (ArithmeticError, ValueError, TypeError, NotImplementedError, sympy.PolynomialError) as error:
        # sympy could not carry out a rewrite on this expression: nothing is proven, and the caller keeps
        # its own evidence.
        return IdentityTest(None, tuple(applied), "", used, f"a rewrite sympy could not carry out ({type(error).__name__})")
    return IdentityTest(None, tuple(applied), "", used)


def uses_signed_functions(expr: sympy.Expr, signs: Iterable[FunctionSign]) -> bool:
    """Does ``expr`` hold a free function with a declared sign (or one whose derivative has one)?"""
    names = {s.function for s in signs}
    return bool(names) and any(f.func.__name__ in names for f in expr.atoms(AppliedUndef))
