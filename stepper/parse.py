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
    power     primary [ ("^" | "**") operand ]       right-associative
    operand   { "+" | "-" } power                     unary signs bind looser than power
    product   operand { ("*" | "/") operand }         left-associative
    expression product { ("+" | "-") product }

So ``-x^2`` is ``-(x^2)``, ``2^-1`` is ``1/2`` and ``x^-y^2`` is ``x^(-(y^2))``.
Every number is exact: ``0.1`` becomes ``Rational(1, 10)``, never a float.
A chain ``a*b/c`` is one ``sympy.Mul(a, b, c**-1)`` and a chain ``a - b + c``
one ``sympy.Add(a, -b, c)``.

Guards against hostile text, each a one-line error: length (MAX_TEXT_LENGTH),
nesting (MAX_DEPTH), division by a literal zero and any undefined value
(zoo, nan, oo), numbers too large to compute quickly (MAX_NUMBER_BITS,
checked *before* sympy is asked to compute them) and constants nested so
deep that sympy's numerical checks on them would take very long
(MAX_CONSTANT_NESTING).

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
    if parser.facts(result).undefined:
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

_UNDEFINED = frozenset({sympy.zoo, sympy.nan, sympy.oo, -sympy.oo})
_MAX_DIGITS = 700  # 10**700 has more than MAX_NUMBER_BITS bits


class _Facts(NamedTuple):
    """What the guards need to know about an expression, computed once per node."""

    bits: int  # largest numerator or denominator of an exact number inside, in bits
    magnitude: int  # largest numerator or denominator inside
    nesting: int | None  # powers and functions deep, for a constant; None if it has a symbol
    has_log: bool
    undefined: bool  # contains zoo, nan or an infinity


def _rational_bits(number: sympy.Rational) -> int:
    return max(abs(number.p).bit_length(), number.q.bit_length())


class _SumSize:
    """Bound, in bits, on the numbers the coefficients of a sum may add up to.

    Like terms have their coefficients added; the common denominator is at
    most the product of the denominators, the numerator at most the count
    times the largest numerator times that product.
    """

    def __init__(self) -> None:
        self.numerator_bits = 0
        self.denominator_bits = 0
        self.count = 0

    def add(self, term: sympy.Expr) -> int:
        for part in sympy.Add.make_args(term):
            coefficient = part.as_coeff_Mul()[0]
            if coefficient.is_Rational:
                self.numerator_bits = max(self.numerator_bits, abs(coefficient.p).bit_length())
                if coefficient.q > 1:
                    self.denominator_bits += coefficient.q.bit_length()
                self.count += 1
        return self.numerator_bits + self.denominator_bits + self.count.bit_length()


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
        self.memo: dict[sympy.Basic, _Facts] = {}

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
                f"number too large: {_show(token.text)} could make a number "
                f"of more than {MAX_NUMBER_BITS} bits",
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
        """A sum of products, each chain built by one sympy call.

        ``a*b/c`` becomes ``sympy.Mul(a, b, c**-1)`` and ``a - b + c`` becomes
        ``sympy.Add(a, -b, c)``, with negation and powers written as Python
        operators on sympy objects.  So the result is sympy's usual canonical
        form (``x - y`` is ``Add(x, Mul(-1, y))``; a number is distributed
        over a sum only in a two-factor product, as ``sympy.Mul`` does:
        ``2*(x+1)`` is ``2*x + 2`` while ``2*(x+1)*y`` is ``Mul(2, x + 1, y)``),
        and one call per chain keeps long chains linear instead of quadratic.
        """
        terms: list[sympy.Expr] = []
        sum_size = _SumSize()
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
            term = factors[0] if len(factors) == 1 else sympy.Mul(*factors)
            if sign is not None:
                if sign.text == "-":
                    term = -term
                self.check_size(sum_size.add(term), sign)
            terms.append(term)
            if not self.at("+", "-"):
                break
            sign = self.advance()
            if len(terms) == 1:
                sum_size.add(terms[0])
        return terms[0] if len(terms) == 1 else sympy.Add(*terms)

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
        hopeless = len(digits) > _MAX_DIGITS or len(exponent_digits) > 6
        shift = 0
        if not hopeless:
            sign = -1 if exponent.startswith("-") else 1
            shift = sign * int(exponent_digits) - len(fraction)
            hopeless = not -2 * _MAX_DIGITS <= shift <= _MAX_DIGITS
        if hopeless:
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

    # -- guards and the sympy calls they protect

    def facts(self, expression: sympy.Basic) -> _Facts:
        """Facts about an expression, computed without recursion and memoised.

        Shared sub-expressions are visited once, so this stays linear even
        when abbreviations make the expression tree far larger than its text.
        """
        memo = self.memo
        pending: list[tuple[sympy.Basic, bool]] = [(expression, False)]
        while pending:
            node, children_done = pending.pop()
            if node in memo:
                continue
            if not children_done:
                pending.append((node, True))
                pending.extend((child, False) for child in node.args if child not in memo)
                continue
            children = [memo[child] for child in node.args]
            bits = max((child.bits for child in children), default=0)
            magnitude = max((child.magnitude for child in children), default=0)
            if node.is_Rational:
                bits = _rational_bits(node)
                magnitude = max(abs(node.p), node.q)
            nesting: int | None
            if node.is_Symbol or isinstance(node, AppliedUndef):
                nesting = None
            elif any(child.nesting is None for child in children):
                nesting = None
            else:
                own = 1 if (node.is_Pow or node.is_Function) else 0
                nesting = own + max((child.nesting or 0 for child in children), default=0)
            memo[node] = _Facts(
                bits=bits,
                magnitude=magnitude,
                nesting=nesting,
                has_log=isinstance(node, sympy.log) or any(c.has_log for c in children),
                undefined=node in _UNDEFINED or any(c.undefined for c in children),
            )
        return memo[expression]

    def exp_bits(self, argument: sympy.Expr) -> int:
        """Bound on the bits of the number sympy may make of ``exp(argument)``.

        sympy rewrites exp(c*log(b)) as b^c, which for numbers b and c has
        about c*bits(b) bits; other terms stay symbolic.
        """
        total = 0
        for term in sympy.Add.make_args(argument):
            coefficient, rest = term.as_coeff_Mul()
            facts = self.facts(rest)
            if facts.has_log:
                scale = abs(coefficient.p) if coefficient.is_Rational else 1
                total += facts.bits * max(1, scale)
        return total

    def check_nesting(self, parts: tuple[sympy.Expr, ...], token: _Token) -> None:
        """Bound how deep powers and functions nest inside a constant.

        sympy answers questions about constants (is it zero? an integer?)
        by numerical evaluation whose cost grows steeply with this depth.
        """
        levels = [self.facts(part).nesting for part in parts]
        if any(level is None for level in levels):
            return
        level = 1 + max(level or 0 for level in levels)
        if level > MAX_CONSTANT_NESTING:
            self.fail(
                f"constant too deeply nested: {_show(token.text)} makes {level} levels "
                f"of powers and functions (the limit is {MAX_CONSTANT_NESTING})",
                token.column,
            )

    def power(self, base: sympy.Expr, exponent: sympy.Expr, operator: _Token) -> sympy.Expr:
        # Estimate what sympy would compute *before* asking it to.
        base_facts = self.facts(base)
        if exponent.is_Rational:
            estimate = base_facts.bits * max(1, abs(exponent.p))
        else:
            # exp(a)^(c*log(b)) becomes b^(a*c).
            estimate = max(
                base_facts.bits, max(1, base_facts.magnitude) * self.exp_bits(exponent)
            )
        self.check_size(estimate, operator)
        self.check_nesting((base, exponent), operator)
        result = base**exponent
        if result in _UNDEFINED:
            self.fail("division by zero" if base == 0 else "undefined power", operator.column)
        return result

    def apply(self, token: _Token, argument: sympy.Expr) -> sympy.Expr:
        if token.text == "exp":
            self.check_size(self.exp_bits(argument), token)
        self.check_nesting((argument,), token)
        result = ELEMENTARY_FUNCTIONS[token.text](argument)
        if self.facts(result).undefined:
            self.fail(
                f"function {_show(token.text)} is undefined for argument {_brief(argument)}",
                token.column,
            )
        return result
