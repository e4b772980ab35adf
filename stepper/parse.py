"""Safe parsing of expression text taken from a metric file.

A metric file may come from anyone, so its text is never handed to ``eval``,
``exec`` or any of sympy's string readers.  Instead a small tokenizer and a
recursive-descent parser build sympy objects directly (``sympy.Add``,
``sympy.Mul``, ``sympy.Pow``, ``sympy.Rational``, ``sympy.sin`` ...).

Grammar (highest binding first; the ordering is common practice, the same as
Python's and most calculators')::

    primary   number | name | name "(" arguments ")" | "(" expression ")"
    power     primary [ ("^" | "**") operand ]       right-associative
    operand   { "+" | "-" } power                     unary signs bind looser than power
    product   operand { ("*" | "/") operand }         left-associative
    expression product { ("+" | "-") product }

So ``-x^2`` is ``-(x^2)``, ``2^-1`` is ``1/2`` and ``x^-y^2`` is ``x^(-(y^2))``.
Every number is exact: ``0.1`` becomes ``Rational(1, 10)``, never a float.

Every problem raises :class:`stepper.errors.InputError` with a one-line
message naming the offending token, its 1-based column in the text, and the
caller's ``where`` label.
"""

from __future__ import annotations

import builtins
import keyword
import re
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Callable, Mapping, NamedTuple, NoReturn

import sympy
from sympy.core.function import AppliedUndef

from stepper.errors import InputError

MAX_TEXT_LENGTH = 100_000
"""Longest text accepted, in characters."""

MAX_DEPTH = 200
"""Deepest nesting accepted: parentheses, argument lists and chained powers."""

MAX_CONSTANT_NESTING = 8
"""Deepest nesting of powers and functions inside an expression free of symbols.

sympy answers questions about such constants (is it zero? positive?) by
numerical evaluation whose cost grows steeply with this depth; realistic
metrics need two or three levels (``sqrt(1 + sqrt(2))``).
"""

MAX_NUMBER_BITS = 2048
"""Largest exact number (numerator or denominator, in bits) a text may produce.

About 616 decimal digits.  It keeps texts such as ``9^9^9^9`` from tying the
machine up for hours, and keeps every number printable.
"""

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


def _reserved_names() -> frozenset[str]:
    """Names that would be misread if an expression were ever printed and re-read.

    That is: Python keywords and built-in names, every public sympy name
    (sympy's string reader resolves those), the elementary functions and the
    constants listed explicitly below.
    """
    candidates = set(keyword.kwlist) | set(keyword.softkwlist) | set(dir(builtins))
    candidates |= set(sympy.__all__) | set(ELEMENTARY_FUNCTIONS)
    candidates |= {"pi", "E", "I", "oo", "nan", "zoo", "S", "N", "O", "Q"}
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


def check_identifier(name: str, where: str) -> None:
    """Raise InputError unless ``name`` may be declared by a metric file."""
    if not isinstance(name, str) or not _IDENTIFIER.fullmatch(name):
        raise InputError(
            f"invalid name {_show(str(name))} in {where}: a name is a letter "
            "followed by letters, digits or '_'"
        )
    if name in RESERVED_NAMES:
        raise InputError(
            f"name {_show(name)} in {where} is reserved (a function, constant or keyword)"
        )


def parse_expression(text: str, vocabulary: Vocabulary, where: str) -> sympy.Expr:
    """Turn ``text`` into a sympy expression using only the names in ``vocabulary``.

    ``where`` labels the text in error messages, e.g. ``"line_element"``.
    """
    if not isinstance(text, str):
        raise InputError(f"{where} must be text, not {type(text).__name__}")
    if len(text) > MAX_TEXT_LENGTH:
        raise InputError(
            f"{where} is too long: {len(text)} characters (the limit is {MAX_TEXT_LENGTH})"
        )
    tokens = _tokenize(text)
    if tokens[0].kind == "end":
        raise InputError(f"empty expression in {where}")
    parser = _Parser(tokens, vocabulary, where)
    try:
        result = parser.parse()
    except RecursionError:
        # sympy itself recurses through nested expressions (several frames per
        # level), so very deep function nesting can exhaust Python's stack
        # before MAX_DEPTH is reached.  Report it like any other bad input.
        token = parser.peek()
        near = _show(token.text) if token.text else "the end of the text"
        raise InputError(
            f"too deeply nested to evaluate, near {near} at column {token.column} of {where}"
        ) from None
    if _has_undefined(result):
        raise InputError(f"expression in {where} is undefined (division by zero?)")
    return result


# ---------------------------------------------------------------- tokenizer


class _Token(NamedTuple):
    kind: str  # "number", "name", "operator", "bad" (a character outside the grammar) or "end"
    text: str
    column: int  # 1-based


_TOKEN = re.compile(
    r"(?P<space>[ \t\r\n]+)"
    r"|(?P<number>(?:[0-9]+(?:\.[0-9]*)?|\.[0-9]+)(?:[eE][+-]?[0-9]+)?)"
    r"|(?P<name>[A-Za-z_][A-Za-z0-9_]*)"
    r"|(?P<operator>\*\*|[-+*/^(),])"
)
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
        if match is None:
            tokens.append(_Token("bad", text[position], position + 1))
            break
        kind = match.lastgroup
        assert kind is not None
        if kind != "space":
            tokens.append(_Token(kind, match.group(), position + 1))
        position = match.end()
    tokens.append(_Token("end", "", len(text) + 1))
    return tokens


def _show(text: str) -> str:
    """Quote a token for a one-line message, shortening long ones."""
    if len(text) > 40:
        text = text[:37] + "..."
    if len(text) == 1 and not text.isprintable():
        return f"U+{ord(text):04X}"
    quoted = f'"{text}"' if "'" in text else f"'{text}'"
    if len(text) == 1 and not text.isascii():
        quoted += f" (U+{ord(text):04X})"
    return quoted


def _brief(expression: sympy.Expr) -> str:
    """A short printed form of an expression for messages."""
    printed = str(expression)
    return printed if len(printed) <= 60 else printed[:57] + "..."


# ------------------------------------------------------------------- parser

_UNDEFINED = (sympy.zoo, sympy.nan, sympy.oo, -sympy.oo)
_MINUS_ONE = sympy.Integer(-1)
_MAX_DIGITS = 700  # 10**700 has more than MAX_NUMBER_BITS bits


def _unique_nodes(expression: sympy.Basic) -> list[sympy.Basic]:
    """Every distinct sub-expression once, without recursion.

    Shared sub-expressions are visited once, so this stays linear even when
    abbreviations make the expression tree far larger than its text.
    """
    seen = {expression}
    pending = [expression]
    while pending:
        for child in pending.pop().args:
            if child not in seen:
                seen.add(child)
                pending.append(child)
    return list(seen)


def _has_undefined(expression: sympy.Basic) -> bool:
    undefined = set(_UNDEFINED)
    return any(node in undefined for node in _unique_nodes(expression))


def _exp_bits(argument: sympy.Expr) -> int:
    """Bound on the bits of the number sympy may make of ``exp(argument)``.

    sympy rewrites exp(c*log(b)) as b^c, which for numbers b and c is a
    number of about c*bits(b) bits; other terms stay symbolic.
    """
    total = 0
    for term in sympy.Add.make_args(argument):
        coefficient, rest = term.as_coeff_Mul()
        if any(isinstance(node, sympy.log) for node in _unique_nodes(rest)):
            scale = abs(coefficient.p) if coefficient.is_Rational else 1
            total += _largest_number(rest)[0] * max(1, scale)
    return total


def _rational_bits(number: sympy.Rational) -> int:
    return max(abs(number.p).bit_length(), number.q.bit_length())


def _largest_number(expression: sympy.Basic) -> tuple[int, int]:
    """(bits, magnitude): bounds over every exact number inside ``expression``."""
    bits, magnitude = 0, 0
    for node in _unique_nodes(expression):
        if node.is_Rational:
            bits = max(bits, _rational_bits(node))
            magnitude = max(magnitude, abs(node.p), node.q)
    return bits, magnitude


def _outer_number_bits(expression: sympy.Expr) -> int:
    """Bits of the numbers sympy has just combined: the coefficient of the
    expression, or of each of its terms when it is a sum."""
    terms = expression.args if expression.is_Add else (expression,)
    bits = 0
    for term in terms:
        coefficient = term.as_coeff_Mul()[0]
        if coefficient.is_Rational:
            bits = max(bits, _rational_bits(coefficient))
    return bits


class _Parser:
    """Recursive descent over a token list; one instance per text.

    Nesting costs at most three Python frames per level (operand ->
    arguments -> expression), so MAX_DEPTH stays well inside Python's
    default recursion limit.
    """

    def __init__(self, tokens: list[_Token], vocabulary: Vocabulary, where: str) -> None:
        self.tokens = tokens
        self.index = 0
        self.depth = 0
        self.vocabulary = vocabulary
        self.where = where
        self.nesting_memo: dict[sympy.Basic, int | None] = {}

    # -- token helpers and errors

    def peek(self) -> _Token:
        return self.tokens[self.index]

    def advance(self) -> _Token:
        token = self.tokens[self.index]
        if token.kind != "end":
            self.index += 1
        return token

    def at(self, *operators: str) -> bool:
        token = self.tokens[self.index]
        return token.kind == "operator" and token.text in operators

    def fail(self, message: str, column: int, hint: str = "") -> NoReturn:
        raise InputError(f"{message} at column {column} of {self.where}{hint}")

    def unexpected(self, token: _Token) -> NoReturn:
        if token.kind == "end":
            self.fail("unexpected end of text", token.column)
        if token.kind == "bad":
            self.fail(f"unexpected character {_show(token.text)}", token.column)
        # Where an operator was expected, a number, name or "(" means a missing "*".
        starts_operand = token.kind in ("number", "name") or token.text == "("
        self.fail(
            f"unexpected {_show(token.text)}",
            token.column,
            " (missing '*'?)" if starts_operand else "",
        )

    def enter(self, token: _Token) -> None:
        self.depth += 1
        if self.depth > MAX_DEPTH:
            self.fail(
                f"too deeply nested: {_show(token.text)} opens level {self.depth} "
                f"(the limit is {MAX_DEPTH})",
                token.column,
            )

    def check_size(self, bits: int, token: _Token) -> None:
        if bits > MAX_NUMBER_BITS:
            self.fail(
                f"{_show(token.text)} gives a number too large "
                f"(over {MAX_NUMBER_BITS} bits)",
                token.column,
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
        """A sum of products.

        Products are built pair by pair, left to right, exactly as Python
        operators on sympy objects would build them; the sum is built by one
        ``sympy.Add`` call, which gives the same result as pairwise addition
        without its quadratic cost.
        """
        terms: list[sympy.Expr] = []
        sign: _Token | None = None
        while True:
            value = self.operand()
            while self.at("*", "/"):
                operator = self.advance()
                value = self.multiply(value, self.operand(), operator)
            if sign is not None and sign.text == "-":
                value = sympy.Mul(_MINUS_ONE, value)
            terms.append(value)
            if not self.at("+", "-"):
                break
            sign = self.advance()
        if len(terms) == 1:
            return terms[0]
        total = sympy.Add(*terms)
        assert sign is not None
        self.check_size(_outer_number_bits(total), sign)
        return total

    def operand(self) -> sympy.Expr:
        """Unary signs, then a number, name, call or parenthesis, then an optional power."""
        signs: list[_Token] = []
        while self.at("+", "-"):
            signs.append(self.advance())
        token = self.peek()
        if token.kind == "number":
            value: sympy.Expr = self.number(self.advance())
        elif token.kind == "name":
            self.advance()
            kind = self.kind_of(token.text)
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
                value = sympy.Mul(_MINUS_ONE, value)
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
        if len(digits) > _MAX_DIGITS or len(exponent_digits) > 6:
            self.check_size(MAX_NUMBER_BITS + 1, token)
        shift = int(exponent_digits) * (-1 if exponent.startswith("-") else 1) - len(fraction)
        if shift > _MAX_DIGITS or shift < -2 * _MAX_DIGITS:
            self.check_size(MAX_NUMBER_BITS + 1, token)
        if shift >= 0:
            value = sympy.Rational(int(digits) * 10**shift, 1)
        else:
            value = sympy.Rational(int(digits), 10**-shift)
        self.check_size(_rational_bits(value), token)
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
        return None

    def name(
        self, token: _Token, kind: str | None, arguments: list[sympy.Expr] | None
    ) -> sympy.Expr:
        """The value of a name; ``arguments`` is the parsed call, if there was one."""
        name = token.text
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
            if arguments is not None and tuple(arguments) != tuple(declared.args):
                expected = ", ".join(_brief(argument) for argument in declared.args)
                actual = ", ".join(_brief(argument) for argument in arguments)
                self.fail(
                    f"function {_show(name)} is declared with arguments ({expected}) "
                    f"but called with ({actual})",
                    token.column,
                )
            return declared
        if kind == "elementary":
            if arguments is None:
                self.fail(f"function {_show(name)} must be followed by '('", token.column)
            if len(arguments) != 1:
                self.fail(
                    f"function {_show(name)} takes 1 argument but was given {len(arguments)}",
                    token.column,
                )
            return self.apply(token, arguments[0])
        self.fail(f"unknown name {_show(name)}", token.column)

    # -- building sympy objects, with guards

    def nesting(self, expression: sympy.Basic) -> int | None:
        """How many powers and functions deep a constant expression goes.

        None when the expression involves a symbol.  sympy settles questions
        about constants (is it zero? an integer?) by numerical evaluation,
        whose cost grows steeply with this depth, so it is bounded.
        """
        memo = self.nesting_memo
        pending: list[tuple[sympy.Basic, bool]] = [(expression, False)]
        while pending:
            node, children_done = pending.pop()
            if node in memo:
                continue
            if not children_done:
                pending.append((node, True))
                pending.extend((child, False) for child in node.args if child not in memo)
                continue
            if node.is_Symbol or isinstance(node, AppliedUndef):
                memo[node] = None
                continue
            levels = [memo[child] for child in node.args]
            if any(level is None for level in levels):
                memo[node] = None
            else:
                own = 1 if (node.is_Pow or node.is_Function) else 0
                memo[node] = own + max((level for level in levels if level is not None), default=0)
        return memo[expression]

    def check_nesting(self, parts: tuple[sympy.Expr, ...], token: _Token) -> None:
        levels = [self.nesting(part) for part in parts]
        if any(level is None for level in levels):
            return
        level = 1 + max(level for level in levels if level is not None)
        if level > MAX_CONSTANT_NESTING:
            self.fail(
                f"constant too deeply nested: {_show(token.text)} makes {level} levels "
                f"of powers and functions (the limit is {MAX_CONSTANT_NESTING})",
                token.column,
            )

    def multiply(self, left: sympy.Expr, right: sympy.Expr, operator: _Token) -> sympy.Expr:
        if operator.text == "/":
            if right == 0:
                self.fail("division by zero", operator.column)
            result = sympy.Mul(left, sympy.Pow(right, _MINUS_ONE))
        else:
            result = sympy.Mul(left, right)
        if result in _UNDEFINED:
            self.fail("undefined product (division by zero?)", operator.column)
        self.check_size(_outer_number_bits(result), operator)
        return result

    def power(self, base: sympy.Expr, exponent: sympy.Expr, operator: _Token) -> sympy.Expr:
        # Estimate what sympy would compute *before* asking it to.
        base_bits, base_magnitude = _largest_number(base)
        if exponent.is_Rational:
            estimate = base_bits * max(1, abs(exponent.p))
        else:
            # exp(a)^(c*log(b)) becomes b^(a*c).
            estimate = max(base_bits, max(1, base_magnitude) * _exp_bits(exponent))
        self.check_size(estimate, operator)
        self.check_nesting((base, exponent), operator)
        result = sympy.Pow(base, exponent)
        if result in _UNDEFINED:
            self.fail("division by zero" if base == 0 else "undefined power", operator.column)
        self.check_size(_outer_number_bits(result), operator)
        return result

    def apply(self, token: _Token, argument: sympy.Expr) -> sympy.Expr:
        if token.text == "exp":
            self.check_size(_exp_bits(argument), token)
        self.check_nesting((argument,), token)
        result = ELEMENTARY_FUNCTIONS[token.text](argument)
        if _has_undefined(result):
            self.fail(
                f"function {_show(token.text)} is undefined for argument {_brief(argument)}",
                token.column,
            )
        self.check_size(_outer_number_bits(result), token)
        return result
