"""Safe parsing of expression text taken from a metric file.

A metric file may come from anyone, so its text is never handed to ``eval``,
``exec`` or any of sympy's string readers.  Instead a small tokenizer and a
recursive-descent parser build sympy objects directly: ``sympy.Rational``
for numbers, ``sympy.Add`` for sums, ``sympy.sin`` and friends for
functions, and Python's operators on sympy objects for products, quotients,
powers and negation.

Grammar (highest binding first; the ordering is common practice, the same as
Python's and most calculators')::

    primary   number | name | name "(" arguments ")" | "(" expression ")"
            | "diff" "(" expression "," coordinate [ "," count ] { "," coordinate [ "," count ] } ")"
    power     primary [ ("^" | "**") operand ]       right-associative
    operand   { "+" | "-" } power                     unary signs bind looser than power
    product   operand { ("*" | "/") operand }         left-associative
    expression product { ("+" | "-") product }

So ``-x^2`` is ``-(x^2)``, ``2^-1`` is ``1/2`` and ``x^-y^2`` is ``x^(-(y^2))``.
Every number is exact: ``0.1`` becomes ``Rational(1, 10)``, never a float.
A chain ``a*b/c`` is one ``sympy.Mul(a, b, c**-1)`` and a chain ``a - b + c``
one ``sympy.Add(a, -b, c)``.

``diff(w, x)`` is the derivative of ``w`` (a declared function, an
abbreviation or any expression) with respect to the coordinate ``x``;
``diff(w, x, y)`` differentiates by x, then y; a whole number after a
coordinate repeats it, as in sympy: ``diff(w, x, 2)`` is the second
derivative.  Derivatives are read where the caller names the coordinates
(claims: :attr:`Vocabulary.coordinates`); a declared name ``diff`` takes
precedence.

A Greek letter typed in Unicode is a letter of a name, read as its spelled
name (:data:`UNICODE_GREEK`): ``θ`` is ``theta``, ``dθ`` the differential
``dtheta``, ``Λ`` is ``Lambda``, ``π`` is ``pi``.

Guards against hostile text, each a one-line error: length (MAX_TEXT_LENGTH),
nesting (MAX_DEPTH), derivatives of high order or large work (MAX_DERIVATIVE_ORDER,
MAX_DERIVATIVE_WORK), division by a literal zero and any undefined value
(zoo, nan, oo), numbers too large to compute quickly (MAX_NUMBER_BITS,
checked *before* sympy is asked to compute them) and constants nested so
deep that sympy's numerical checks on them would take very long
(MAX_CONSTANT_NESTING).  The guards and their limits live in
:mod:`stepper.guards`, shared with :mod:`stepper.latex_input`; the limits are
re-exported here.

Every problem raises :class:`stepper.errors.InputError` with a one-line
message naming the offending token, its 1-based column in the text, and the
caller's ``where`` label.
"""

from __future__ import annotations

import keyword
import re
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Callable, Mapping, NamedTuple, NoReturn

import sympy
from sympy.core.function import AppliedUndef

from stepper.errors import InputError
from stepper.guards import (
    MAX_CONSTANT_NESTING,
    MAX_DEPTH,
    MAX_DERIVATIVE_ORDER,
    MAX_DIGITS,
    MAX_NUMBER_BITS,
    MAX_TEXT_LENGTH,
    GuardedReader,
    Sum,
    check_text,
    rational_bits,
    show,
)

__all__ = [
    "ELEMENTARY_FUNCTIONS",
    "MAX_CONSTANT_NESTING",
    "MAX_DEPTH",
    "MAX_DERIVATIVE_ORDER",
    "MAX_NUMBER_BITS",
    "MAX_TEXT_LENGTH",
    "RESERVED_NAMES",
    "UNICODE_GREEK",
    "Vocabulary",
    "check_identifier",
    "parse_expression",
]

ELEMENTARY_FUNCTIONS: Mapping[str, Callable[[sympy.Expr], sympy.Expr]] = MappingProxyType(
    {
        "sin": sympy.sin,
        "cos": sympy.cos,
        "tan": sympy.tan,
        "cot": sympy.cot,
        "sec": sympy.sec,
        "csc": sympy.csc,
        "sinh": sympy.sinh,
        "cosh": sympy.cosh,
        "tanh": sympy.tanh,
        "coth": sympy.coth,
        "exp": sympy.exp,
        "log": sympy.log,
        "ln": sympy.log,
        "sqrt": sympy.sqrt,
        "abs": sympy.Abs,
    }
)
"""The fixed list of one-argument functions a text may call."""

_IDENTIFIER = re.compile(r"[A-Za-z][A-Za-z0-9_]*")

UNICODE_GREEK: Mapping[str, str] = MappingProxyType(
    {
        **dict(zip("αβγδεζηθικλμνξπρστυφχψω",
                   "alpha beta gamma delta epsilon zeta eta theta iota kappa lambda mu nu xi pi rho sigma tau "
                   "upsilon phi chi psi omega".split())),
        **dict(zip("ΓΔΘΛΞΠΣΥΦΨΩ", "Gamma Delta Theta Lambda Xi Pi Sigma Upsilon Phi Psi Omega".split())),
        # The variant forms, and the micro sign that keyboards type for mu.
        "ϑ": "theta", "ϕ": "phi", "ϵ": "epsilon", "ϱ": "rho", "ς": "sigma", "\u00b5": "mu",
    }
)
"""Greek letters typed in Unicode -> the spelled names they are read as (θ -> theta).  The capitals that look
like Latin letters (Α, Β, Ε, ...) are not among them: they stay unexpected characters."""

DERIVATIVE = "diff"
"""The plain syntax's derivative, ``diff(w, x)``, as sympy users write it."""


def _reserved_names() -> frozenset[str]:
    """Names a metric file may not declare.

    Python keywords (a printed expression could not be read back), the
    elementary functions and constants a text may use, and the few sympy
    names that printed expressions themselves contain.  Everything else --
    Q, N, S, beta, gamma, Lambda, ... -- is free: the trace is read back with
    the declared names as locals, and the notebook renames any variable that
    would clash with a name it uses.
    """
    candidates = set(keyword.kwlist) | set(keyword.softkwlist) | set(ELEMENTARY_FUNCTIONS)
    candidates |= {"pi", "E", "I", "oo", "nan", "zoo", "Derivative", "Rational", "Integer", "Float",
                   "Symbol", "Function", "Abs", "S"}
    return frozenset(name for name in candidates if _IDENTIFIER.fullmatch(name))


RESERVED_NAMES: frozenset[str] = _reserved_names()
"""Names a metric file may not declare for its own symbols, functions or abbreviations."""


@dataclass(frozen=True)
class Vocabulary:
    """Names a text may use."""

    symbols: Mapping[str, sympy.Symbol]
    """Coordinates and declared parameters."""
    functions: Mapping[str, sympy.Expr] = field(default_factory=dict)
    """Name -> the applied function with its declared arguments, e.g. ``"a"`` -> ``a(t)``."""
    abbreviations: Mapping[str, sympy.Expr] = field(default_factory=dict)
    """Name -> an already-parsed expression that the name stands for."""
    differentials: Mapping[str, sympy.Symbol] = field(default_factory=dict)
    """``"dt"`` -> ``Symbol("dt")``; only line elements use these."""
    coordinates: tuple[str, ...] | None = None
    """The names in ``symbols`` that are coordinates, the variables a derivative may be taken by (claims pass
    the metric's); None where derivatives are not read (a metric file's own text)."""


def check_identifier(name: str, where: str) -> None:
    """Raise InputError unless ``name`` may be declared by a metric file."""
    if not isinstance(name, str) or not _IDENTIFIER.fullmatch(name):
        spelled = "".join(UNICODE_GREEK.get(c, c) for c in name) if isinstance(name, str) else ""
        hint = (f" (write {show(spelled)}; in expressions a Greek letter is read as its name)"
                if spelled != name and _IDENTIFIER.fullmatch(spelled) else "")
        raise InputError(
            f"invalid name {show(str(name))} in {where}: a name is a letter "
            f"followed by letters, digits or '_'{hint}"
        )
    if name in RESERVED_NAMES:
        raise InputError(
            f"name {show(name)} in {where} is reserved (a function, constant or keyword)"
        )


def parse_expression(text: str, vocabulary: Vocabulary, where: str) -> sympy.Expr:
    """Turn ``text`` into a sympy expression using only the names in ``vocabulary``.

    ``where`` labels the text in error messages, e.g. ``"line_element"``.
    """
    tokens = _tokenize(check_text(text, where))
    if tokens[0].kind == "end":
        raise InputError(f"empty expression in {where}")
    return _Parser(tokens, vocabulary, where).read()


# ---------------------------------------------------------------- tokenizer


class _Token(NamedTuple):
    kind: str  # "number", "name", "operator", "bad" (a character outside the grammar) or "end"
    text: str  # as written
    column: int  # 1-based
    spelled: str = ""  # for a name with Greek letters: the name it is read as (dθ -> dtheta)

    @property
    def word(self) -> str:
        """The name a name token stands for."""
        return self.spelled or self.text


_GREEK = "".join(UNICODE_GREEK)
_TOKEN = re.compile(
    r"(?P<space>[ \t\r\n]+)"
    r"|(?P<number>(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?)"
    rf"|(?P<name>[A-Za-z_{_GREEK}][A-Za-z0-9_{_GREEK}]*)"
    r"|(?P<operator>\*\*|[-+*/^(),])"
)
_UNICODE_OPERATORS = {"\u2212": "-", "\u00d7": "*", "\u00b7": "*", "\u22c5": "*"}
"""Operators pasted from typeset text: the minus sign, the times sign and the dots read as * ."""

_NUMBER_PARTS = re.compile(r"([0-9]*)(?:\.([0-9]*))?(?:[eE]([+-]?[0-9]+))?")


def _tokenize(text: str) -> list[_Token]:
    """Split text into tokens, ending with an "end" token.

    A character outside the grammar becomes a "bad" token and stops the
    scan; the parser reports it when it gets there, so errors come in
    reading order.
    """
    tokens: list[_Token] = []
    position = 0
    while position < len(text):
        match = _TOKEN.match(text, position)
        if match is None and text[position] in _UNICODE_OPERATORS:
            tokens.append(_Token("operator", _UNICODE_OPERATORS[text[position]], position + 1))
            position += 1
            continue
        if match is None:
            tokens.append(_Token("bad", text[position], position + 1))
            break
        kind = match.lastgroup
        assert kind is not None
        if kind == "name":
            written = match.group()
            spelled = "".join(UNICODE_GREEK.get(c, c) for c in written)
            tokens.append(_Token(kind, written, position + 1, spelled if spelled != written else ""))
        elif kind != "space":
            tokens.append(_Token(kind, match.group(), position + 1))
        position = match.end()
    tokens.append(_Token("end", "", len(text) + 1))
    return tokens


# ------------------------------------------------------------------- parser


class _Parser(GuardedReader[_Token]):
    """Recursive descent over a token list; one instance per text.

    Nesting costs at most three Python frames per level (operand ->
    arguments -> expression), so MAX_DEPTH stays well inside Python's
    default recursion limit.  The token cursor and the guards against
    hostile text come from :class:`stepper.guards.GuardedReader`.
    """

    def __init__(self, tokens: list[_Token], vocabulary: Vocabulary, where: str) -> None:
        super().__init__(tokens, where)
        self.vocabulary = vocabulary

    # -- token helpers and errors

    def at(self, *operators: str) -> bool:
        token = self.tokens[self.index]
        return token.kind == "operator" and token.text in operators

    def unexpected(self, token: _Token) -> NoReturn:
        if token.kind == "end":
            self.fail("unexpected end of text", token.column)
        if token.kind == "bad":
            self.fail(f"unexpected character {show(token.text)}", token.column)
        # Where an operator was expected, a number, name or "(" means a missing "*".
        starts_operand = token.kind in ("number", "name") or token.text == "("
        self.fail(
            f"unexpected {show(token.text)}",
            token.column,
            " (missing '*'?)" if starts_operand else "",
        )

    # -- grammar

    def parse(self) -> sympy.Expr:
        result = self.expression()
        token = self.peek()
        if token.kind == "end":
            return result
        if token.text == ")":
            self.fail("unmatched ')'", token.column)
        self.unexpected(token)

    def expression(self) -> sympy.Expr:
        """A sum of products, each chain built by one sympy call.

        ``a*b/c`` becomes ``sympy.Mul(a, b, c**-1)`` and ``a - b + c`` becomes
        ``sympy.Add(a, -b, c)``, with negation and powers written as Python
        operators on sympy objects.  So the result is sympy's usual canonical
        form (``x - y`` is ``Add(x, Mul(-1, y))``; a number is distributed
        over a sum only in a two-factor product, as ``sympy.Mul`` does:
        ``2*(x+1)`` is ``2*x + 2`` while ``2*(x+1)*y`` is ``Mul(2, x + 1, y)``),
        and one call per chain keeps long chains linear instead of quadratic.
        """
        terms = Sum(self)
        sign: _Token | None = None
        while True:
            factors = [self.operand()]
            bits = self.facts(factors[0]).bits
            while self.at("*", "/"):
                operator = self.advance()
                factor = self.operand()
                if operator.text == "/":
                    if factor == 0:
                        self.fail("division by zero", operator.column)
                    factor = factor**-1
                # The numbers of the factors may multiply together.
                bits += self.facts(factor).bits
                self.check_size(bits, operator)
                factors.append(factor)
            terms.add(factors[0] if len(factors) == 1 else sympy.Mul(*factors), sign)
            if not self.at("+", "-"):
                return terms.value()
            sign = self.advance()

    def operand(self) -> sympy.Expr:
        """Unary signs, then a number, name, call or parenthesis, then an optional power."""
        signs: list[_Token] = []
        while self.at("+", "-"):
            signs.append(self.advance())
        token = self.peek()
        if token.kind == "number":
            value: sympy.Expr = self.number(self.advance())
        elif token.kind == "name" and self.kind_of(token.word) == "derivative":
            value = self.derivative(self.advance())
        elif token.kind == "name":
            self.advance()
            kind = self.kind_of(token.word)
            called = kind in ("function", "elementary") and self.at("(")
            value = self.name(token, kind, self.arguments() if called else None)
        elif self.at("("):
            opening = self.advance()
            self.enter(opening)
            value = self.expression()
            self.close(opening)
            self.depth -= 1
        else:
            self.unexpected(token)
        if self.at("^", "**"):
            operator = self.advance()
            self.enter(operator)
            exponent = self.operand()
            self.depth -= 1
            value = self.power(value, exponent, operator)
        for sign in reversed(signs):
            if sign.text == "-":
                value = -value
        return value

    def close(self, opening: _Token) -> None:
        token = self.peek()
        if self.at(")"):
            self.advance()
        elif token.kind == "end":
            self.fail("unmatched '('", opening.column)
        else:
            self.unexpected(token)

    def arguments(self) -> list[sympy.Expr]:
        """Parse ``( expression, ... )``; the current token is the "("."""
        opening = self.advance()
        self.enter(opening)
        values: list[sympy.Expr] = []
        if self.at(")"):
            self.advance()
        else:
            values.append(self.expression())
            while self.at(","):
                self.advance()
                values.append(self.expression())
            self.close(opening)
        self.depth -= 1
        return values

    # -- leaves

    def number(self, token: _Token) -> sympy.Rational:
        """An exact rational from decimal digits: 2.5E4 -> 25000, 0.1 -> 1/10."""
        match = _NUMBER_PARTS.fullmatch(token.text)
        assert match is not None
        whole, fraction, exponent = match.group(1), match.group(2) or "", match.group(3) or "0"
        digits = (whole + fraction).lstrip("0")
        if not digits:
            return sympy.Integer(0)
        # Refuse hopeless sizes before converting, so huge literals cost nothing.
        exponent_digits = exponent.lstrip("+-").lstrip("0") or "0"
        hopeless = len(digits) > MAX_DIGITS or len(exponent_digits) > 6
        shift = 0
        if not hopeless:
            sign = -1 if exponent.startswith("-") else 1
            shift = sign * int(exponent_digits) - len(fraction)
            hopeless = not -2 * MAX_DIGITS <= shift <= MAX_DIGITS
        if hopeless:
            self.check_size(MAX_NUMBER_BITS + 1, token)
        if shift >= 0:
            value = sympy.Rational(int(digits) * 10**shift, 1)
        else:
            value = sympy.Rational(int(digits), 10**-shift)
        self.check_size(rational_bits(value), token)
        return value

    def kind_of(self, name: str) -> str | None:
        """What a name stands for, in resolution order; None if unknown."""
        vocabulary = self.vocabulary
        if name in vocabulary.differentials:
            return "differential"
        if name in vocabulary.symbols:
            return "symbol"
        if name in vocabulary.abbreviations:
            return "abbreviation"
        if name in vocabulary.functions:
            return "function"
        if name == "pi":
            return "pi"
        if name in ELEMENTARY_FUNCTIONS:
            return "elementary"
        if name == DERIVATIVE:
            return "derivative"
        return None

    def name(
        self, token: _Token, kind: str | None, arguments: list[sympy.Expr] | None
    ) -> sympy.Expr:
        """The value of a name; ``arguments`` is the parsed call, if there was one."""
        name = token.word
        vocabulary = self.vocabulary
        if kind == "differential":
            return vocabulary.differentials[name]
        if kind == "symbol":
            return vocabulary.symbols[name]
        if kind == "abbreviation":
            return vocabulary.abbreviations[name]
        if kind == "pi":
            return sympy.pi
        if kind == "function":
            declared = vocabulary.functions[name]
            if arguments is not None:
                self.check_call(name, declared, arguments, token)
            return declared
        if kind == "elementary":
            if arguments is None:
                self.fail(f"function {show(name)} must be followed by '('", token.column)
            if len(arguments) != 1:
                self.fail(
                    f"function {show(name)} takes 1 argument but was given {len(arguments)}",
                    token.column,
                )
            return self.apply(token, ELEMENTARY_FUNCTIONS[name], arguments[0])
        self.fail(f"unknown name {show(token.text)}", token.column, self.unknown_hint(token))

    def unknown_hint(self, token: _Token) -> str:
        """Advice for an unknown name: how a Greek letter was read, a differential of an undeclared coordinate."""
        name, parts = token.word, []
        if token.spelled:
            parts.append(f"read as {show(name)}")
        differentials = self.vocabulary.differentials
        if differentials and name.startswith("d") and len(name) > 1:
            parts.append(f"the differential of {show(name[1:])}, which is not a declared coordinate")
        return f" ({': '.join(parts)})" if parts else ""

    # -- derivatives

    def derivative(self, token: _Token) -> sympy.Expr:
        """``diff(expression, coordinate [, count], ...)``; the current token follows the word ``diff``."""
        usage = " (write diff(w, x), diff(w, x, y) or diff(w, x, 2))"
        if not self.at("("):
            self.fail(f"{show(token.text)} must be followed by '('", token.column, usage)
        coordinates = self.vocabulary.coordinates
        if coordinates is None:
            self.fail(f"{show(token.text)} is not accepted here", token.column,
                      " (derivatives are read in claims, where the coordinates are known)")
        opening = self.advance()
        self.enter(opening)
        if self.at(")"):
            self.fail(f"{show(token.text)} needs what to differentiate", self.peek().column, usage)
        expression = self.expression()
        variables: list[sympy.Symbol] = []
        last: sympy.Symbol | None = None
        while self.at(","):
            self.advance()
            start = self.peek()
            value = self.expression()
            if value.is_Integer:
                if last is None:
                    self.fail(f"count {value} before any coordinate in {show(token.text)}", start.column,
                              " (a count follows the coordinate it repeats: diff(w, x, 2))")
                if not 1 <= int(value) <= MAX_DERIVATIVE_ORDER:
                    self.fail(f"count {value} in {show(token.text)}", start.column,
                              f" (a count is a whole number from 1 to {MAX_DERIVATIVE_ORDER})")
                variables.extend([last] * (int(value) - 1))
                last = None
                continue
            if not (value.is_Symbol and value.name in coordinates and self.vocabulary.symbols.get(value.name) == value):
                self.fail(f"{show(str(value))} is not a coordinate", start.column,
                          f" (diff takes coordinates: {', '.join(coordinates)})")
            if isinstance(expression, AppliedUndef) and value not in expression.args:
                arguments = ", ".join(str(argument) for argument in expression.args)
                self.fail(f"{show(str(expression.func))} does not depend on {show(value.name)}", start.column,
                          f" (it is declared with arguments ({arguments}), so this derivative is 0)")
            variables.append(value)
            last = value
        if not variables:
            self.fail(f"{show(token.text)} needs the coordinates to differentiate by", self.peek().column, usage)
        self.close(opening)
        self.depth -= 1
        return self.differentiate(expression, variables, token)
