"""Guards against hostile text, shared by stepper's two readers of untrusted input.

:mod:`stepper.parse` (expressions in a metric file) and
:mod:`stepper.latex_input` (claimed results in LaTeX) both build sympy
objects from text that may come from anyone.  Each reader subclasses
:class:`GuardedReader`, which refuses, with a one-line
:class:`stepper.errors.InputError` naming the token, its column and the
caller's ``where`` label:

* texts longer than MAX_TEXT_LENGTH characters (:func:`check_text`);
* nesting deeper than MAX_DEPTH (:meth:`GuardedReader.enter`), and nesting
  that exhausts Python's stack inside sympy anyway (:meth:`GuardedReader.read`);
* numbers of more than MAX_NUMBER_BITS bits, estimated *before* sympy is
  asked to compute them (:meth:`GuardedReader.check_size`, :class:`Sum`,
  :meth:`GuardedReader.power`, :meth:`GuardedReader.apply`);
* constants nested more than MAX_CONSTANT_NESTING levels deep, on which
  sympy's numerical checks would take very long
  (:meth:`GuardedReader.check_nesting`);
* undefined values: division by zero, zoo, nan, infinities;
* a declared function called with other arguments than it was declared
  with (:meth:`GuardedReader.check_call`);
* derivatives of an order above MAX_DERIVATIVE_ORDER, more than
  MAX_DERIVATIVE_WORK nodes of expression differentiated in one text, and
  derivatives whose result would multiply out to more than MAX_EXPANDED_TERMS
  terms or hold a number of more than MAX_NUMBER_BITS bits
  (:meth:`GuardedReader.differentiate`).
"""

from __future__ import annotations

from typing import Callable, Generic, NamedTuple, NoReturn, Protocol, Sequence, TypeVar

import sympy
from sympy.core.function import AppliedUndef

from stepper.errors import InputError

__all__ = [
    "MAX_CONSTANT_NESTING",
    "MAX_DEPTH",
    "MAX_DERIVATIVE_ORDER",
    "MAX_DERIVATIVE_WORK",
    "MAX_DIGITS",
    "MAX_NUMBER_BITS",
    "MAX_TEXT_LENGTH",
    "UNDEFINED",
    "Facts",
    "GuardedReader",
    "Located",
    "Sum",
    "brief",
    "check_text",
    "rational_bits",
    "show",
]

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

MAX_DIGITS = 700
"""More significant digits than a number of MAX_NUMBER_BITS bits can have;
a literal this long is refused before it is converted."""

MAX_SUM_EXPONENT = 64
"""Largest integer power of a sum accepted; metrics in use need small powers (squares, cubes)."""

MAX_EXPANDED_TERMS = 20_000
"""Most terms a power of a sum may have multiplied out: ``(1 + x^2 + y^2 + z^2)^2`` has 10,
``(M + r + theta + phi)^1000`` about 1.7 * 10^8, which would fill memory."""

MAX_FUNCTION_NESTING = 12
"""Deepest nesting of elementary functions of the coordinates accepted (``sin(sin(...))``);
simplification time grows steeply with it, and metrics in use need two or three."""

MAX_DERIVATIVE_ORDER = 8
"""Highest order of a derivative in a text, derivatives of derivatives added up (``diff(w, x, 2)`` has order 2,
``\\partial_x\\partial_y w`` order 2, ``\\partial_x (w_{,xx})`` order 3); curvature holds second derivatives of the
metric, and a claim about it rarely more than fourth."""

MAX_DERIVATIVE_WORK = 5_000
"""Most nodes of expression one text may have differentiated, summed over every differentiation (a node
differentiated twice counts twice).  sympy spends up to about half a millisecond per node on large derivatives
(``\\partial_x^8`` of a long product, derivatives nested in derivatives of exp(sin x)), so this bounds the time
a short text can take to a few seconds; a claim differentiates a few hundred nodes at most."""

EXPANSION_CAP = 10**9


def expanded_terms(node: sympy.Basic, child_terms: Sequence[int]) -> int:
    """Estimated number of terms of ``node`` multiplied out, from its children's: a sum adds them, a
    product multiplies them, a sum of t terms to the integer power k has C(t + k - 1, k); capped."""
    if node.is_Add:
        count = sum(child_terms)
    elif node.is_Mul:
        count = 1
        for terms in child_terms:
            count = min(EXPANSION_CAP, count * terms)
    elif node.is_Pow and node.exp.is_Integer and child_terms and child_terms[0] > 1:
        power = min(abs(int(node.exp)), EXPANSION_CAP)
        count = _multichoose(child_terms[0], power)
    else:
        count = 1
    return min(count, EXPANSION_CAP)


def _multichoose(kinds: int, power: int) -> int:
    """C(kinds + power - 1, power), stopping as soon as it passes EXPANSION_CAP."""
    count = 1
    for step in range(1, min(power, kinds - 1) + 1):
        count = count * (power + kinds - step) // step
        if count > EXPANSION_CAP:
            return EXPANSION_CAP
    return count


UNDEFINED: frozenset[sympy.Expr] = frozenset({sympy.zoo, sympy.nan, sympy.oo, -sympy.oo})
"""The values a text may not produce."""


class Located(Protocol):
    """A token as the guards see it: its kind ("end" at the end of the text),
    its text as written and its 1-based column."""

    @property
    def kind(self) -> str: ...

    @property
    def text(self) -> str: ...

    @property
    def column(self) -> int: ...


def show(text: str) -> str:
    """Quote a token for a one-line message, shortening long ones."""
    if len(text) > 40:
        text = text[:37] + "..."
    if len(text) == 1 and not text.isprintable():
        return f"U+{ord(text):04X}"
    quoted = f'"{text}"' if "'" in text else f"'{text}'"
    if len(text) == 1 and not text.isascii():
        quoted += f" (U+{ord(text):04X})"
    return quoted


def brief(expression: sympy.Expr) -> str:
    """A short printed form of an expression for messages."""
    printed = str(expression)
    return printed if len(printed) <= 60 else printed[:57] + "..."


def check_text(text: object, where: str) -> str:
    """``text`` itself if it is a string of at most MAX_TEXT_LENGTH characters."""
    if not isinstance(text, str):
        raise InputError(f"{where} must be text, not {type(text).__name__}")
    if len(text) > MAX_TEXT_LENGTH:
        raise InputError(
            f"{where} is too long: {len(text)} characters (the limit is {MAX_TEXT_LENGTH})"
        )
    return text


class Facts(NamedTuple):
    """What the guards need to know about an expression, computed once per node."""

    bits: int  # largest numerator or denominator of an exact number inside, in bits
    magnitude: int  # largest numerator or denominator inside
    nesting: int | None  # powers and functions deep, for a constant; None if it has a symbol
    has_log: bool
    undefined: bool  # contains zoo, nan or an infinity
    terms: int  # terms of the expression multiplied out (an estimate, capped at EXPANSION_CAP)
    functions: int  # elementary functions nested inside one another, symbols or not
    size: int = 1  # nodes of the expression tree, a shared subtree counted at each place (capped at EXPANSION_CAP)
    order: int = 0  # highest order of a derivative inside


def rational_bits(number: sympy.Rational) -> int:
    """Bits of the larger of the numerator and denominator."""
    return max(abs(number.p).bit_length(), number.q.bit_length())


TokenT = TypeVar("TokenT", bound=Located)


class GuardedReader(Generic[TokenT]):
    """A cursor over the tokens of one text, with the checks a reader makes.

    A reader subclasses this and provides :meth:`parse` (the grammar) and
    :meth:`at`; it calls :meth:`enter` (then ``self.depth -= 1``) around
    every nesting level and builds sums with :class:`Sum`.
    """

    def __init__(self, tokens: list[TokenT], where: str) -> None:
        self.tokens = tokens
        self.index = 0
        self.where = where
        self.depth = 0
        self.memo: dict[sympy.Basic, Facts] = {}
        self.derivative_work = 0  # nodes differentiated so far (MAX_DERIVATIVE_WORK)

    def parse(self) -> sympy.Expr:
        """The whole text as one expression (provided by the reader)."""
        raise NotImplementedError

    def at(self, *operators: str) -> bool:
        """Whether the current token is one of ``operators`` (provided by the reader)."""
        raise NotImplementedError

    def peek(self) -> TokenT:
        return self.tokens[self.index]

    def advance(self) -> TokenT:
        token = self.tokens[self.index]
        if token.kind != "end":
            self.index += 1
        return token

    def read(self) -> sympy.Expr:
        """:meth:`parse`, with stack exhaustion and undefined results reported as InputError."""
        try:
            result = self.parse()
        except RecursionError:
            # sympy itself recurses through nested expressions (several frames per
            # level), so very deep function nesting can exhaust Python's stack
            # before MAX_DEPTH is reached.  Report it like any other bad input.
            token = self.peek()
            near = show(token.text) if token.text else "the end of the text"
            raise InputError(
                f"too deeply nested to evaluate, near {near} at column {token.column} "
                f"of {self.where}"
            ) from None
        if self.facts(result).undefined:
            raise InputError(f"expression in {self.where} is undefined (division by zero?)")
        return result

    def fail(self, message: str, column: int, hint: str = "") -> NoReturn:
        raise InputError(f"{message} at column {column} of {self.where}{hint}")

    def enter(self, token: Located) -> None:
        """One nesting level deeper, opened by ``token``; refused beyond MAX_DEPTH."""
        self.depth += 1
        if self.depth > MAX_DEPTH:
            self.fail(
                f"too deeply nested: {show(token.text)} opens level {self.depth} "
                f"(the limit is {MAX_DEPTH})",
                token.column,
            )

    def check_size(self, bits: int, token: Located) -> None:
        """Refuse a number of more than MAX_NUMBER_BITS bits that ``token`` could make."""
        if bits > MAX_NUMBER_BITS:
            self.fail(
                f"number too large: {show(token.text)} could make a number "
                f"of more than {MAX_NUMBER_BITS} bits",
                token.column,
            )

    def facts(self, expression: sympy.Basic) -> Facts:
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
                bits = rational_bits(node)
                magnitude = max(abs(node.p), node.q)
            nesting: int | None
            if node.is_Symbol or isinstance(node, AppliedUndef):
                nesting = None
            elif any(child.nesting is None for child in children):
                nesting = None
            else:
                own = 1 if (node.is_Pow or node.is_Function) else 0
                nesting = own + max((child.nesting or 0 for child in children), default=0)
            memo[node] = Facts(
                bits=bits,
                magnitude=magnitude,
                nesting=nesting,
                has_log=isinstance(node, sympy.log) or any(c.has_log for c in children),
                undefined=node in UNDEFINED or any(c.undefined for c in children),
                terms=expanded_terms(node, [child.terms for child in children]),
                functions=(1 if node.is_Function and not isinstance(node, AppliedUndef) else 0)
                + max((child.functions for child in children), default=0),
                size=min(EXPANSION_CAP, 1 + sum(child.size for child in children)),
                order=max([node.derivative_count if isinstance(node, sympy.Derivative) else 0]
                          + [child.order for child in children]),
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

    def check_nesting(self, parts: tuple[sympy.Expr, ...], token: Located) -> None:
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
                f"constant too deeply nested: {show(token.text)} makes {level} levels "
                f"of powers and functions (the limit is {MAX_CONSTANT_NESTING})",
                token.column,
            )

    def check_expansion(self, base: sympy.Expr, exponent: sympy.Expr, token: Located) -> None:
        """Refuse a power of a sum that multiplied out (as the chain's arithmetic does) would have
        more than MAX_EXPANDED_TERMS terms, or whose exponent exceeds MAX_SUM_EXPONENT."""
        if not (exponent.is_Integer and abs(exponent) > 1) or self.facts(base).terms < 2:
            return
        power = abs(int(exponent))
        if power > MAX_SUM_EXPONENT:
            self.fail(f"power too large: {show(token.text)} raises a sum to the power {power} "
                      f"(the limit is {MAX_SUM_EXPONENT})", token.column)
        if _multichoose(self.facts(base).terms, power) > MAX_EXPANDED_TERMS:
            self.fail(f"expression too large: {show(token.text)} multiplied out would have more than "
                      f"{MAX_EXPANDED_TERMS} terms", token.column)

    def check_function_nesting(self, argument: sympy.Expr, token: Located) -> None:
        """Refuse functions nested more than MAX_FUNCTION_NESTING deep, on which simplification stalls."""
        if self.facts(argument).functions >= MAX_FUNCTION_NESTING:
            self.fail(f"functions nested too deeply: {show(token.text)} makes more than "
                      f"{MAX_FUNCTION_NESTING} levels (the limit)", token.column)

    def power(self, base: sympy.Expr, exponent: sympy.Expr, token: Located) -> sympy.Expr:
        """``base**exponent``, after estimating the size of what sympy would compute."""
        self.check_expansion(base, exponent, token)
        base_facts = self.facts(base)
        if exponent.is_Rational:
            estimate = base_facts.bits * max(1, abs(exponent.p))
        else:
            # exp(a)^(c*log(b)) becomes b^(a*c).
            estimate = max(base_facts.bits, max(1, base_facts.magnitude) * self.exp_bits(exponent))
        self.check_size(estimate, token)
        self.check_nesting((base, exponent), token)
        result = base**exponent
        if result in UNDEFINED:
            self.fail("division by zero" if base == 0 else "undefined power", token.column)
        return result

    def apply(
        self,
        token: Located,
        function: Callable[[sympy.Expr], sympy.Expr],
        argument: sympy.Expr,
    ) -> sympy.Expr:
        """``function(argument)`` for an elementary function that ``token`` names."""
        if function is sympy.exp:
            self.check_size(self.exp_bits(argument), token)
        self.check_nesting((argument,), token)
        self.check_function_nesting(argument, token)
        result = function(argument)
        if self.facts(result).undefined:
            self.fail(
                f"function {show(token.text)} is undefined for argument {brief(argument)}",
                token.column,
            )
        return result

    def check_call(
        self,
        name: str,
        declared: sympy.Expr,
        arguments: Sequence[sympy.Expr],
        token: Located,
        hint: str = "",
    ) -> None:
        """Refuse a call of the declared function ``declared`` with other arguments."""
        if tuple(arguments) != tuple(declared.args):
            expected = ", ".join(brief(argument) for argument in declared.args)
            actual = ", ".join(brief(argument) for argument in arguments)
            self.fail(
                f"function {show(name)} is declared with arguments ({expected}) "
                f"but called with ({actual})",
                token.column,
                hint,
            )

    def differentiate(self, expression: sympy.Expr, variables: Sequence[sympy.Symbol], token: Located) -> sympy.Expr:
        """``expression`` differentiated once by each of ``variables`` in turn, for a derivative that ``token``
        writes; its order is bounded by MAX_DERIVATIVE_ORDER, and after each differentiation the result's size
        (terms multiplied out, bits of its numbers) is checked, so that repeated derivatives of a product stop
        before they grow large."""
        if len(variables) > MAX_DERIVATIVE_ORDER:
            self.fail(f"derivative of order {len(variables)}: {show(token.text)} differentiates more than "
                      f"{MAX_DERIVATIVE_ORDER} times (the limit)", token.column)
        # Derivatives of derivatives add up; sympy's time for one grows with its order.
        result = expression
        for variable in variables:
            self.derivative_work += self.facts(result).size
            if self.derivative_work > MAX_DERIVATIVE_WORK:
                self.fail(f"derivatives too large to compute: {show(token.text)} brings the expression "
                          f"differentiated in this text to more than {MAX_DERIVATIVE_WORK} nodes (the limit)",
                          token.column)
            result = sympy.diff(result, variable)
            facts = self.facts(result)
            self.check_size(facts.bits, token)
            if facts.terms > MAX_EXPANDED_TERMS:
                self.fail(f"expression too large: {show(token.text)} differentiated would multiply out to more "
                          f"than {MAX_EXPANDED_TERMS} terms", token.column)
            if facts.order > MAX_DERIVATIVE_ORDER:
                self.fail(f"derivative of order {facts.order}: {show(token.text)} makes a derivative of more than "
                          f"{MAX_DERIVATIVE_ORDER} (the limit)", token.column)
            if facts.undefined:
                self.fail(f"the derivative {show(token.text)} is undefined", token.column)
        return result


class Sum:
    """The terms of a sum, joined by "+" and "-" and built as one ``sympy.Add``.

    One call for a whole chain keeps long sums linear.  Like terms have
    their coefficients added, so the numbers they may add up to are bounded
    as each term arrives: the common denominator is at most the product of
    the denominators, the numerator at most the count times the largest
    numerator times that product.
    """

    def __init__(self, reader: GuardedReader) -> None:
        self.reader = reader
        self.terms: list[sympy.Expr] = []
        self.numerator_bits = 0
        self.denominator_bits = 0
        self.count = 0

    def add(self, term: sympy.Expr, sign: Located | None) -> None:
        """Append ``term``, negated if ``sign`` is "-"; ``sign`` is None for the first term."""
        if sign is not None:
            if len(self.terms) == 1:
                self.bound(self.terms[0])
            if sign.text == "-":
                term = -term
            self.reader.check_size(self.bound(term), sign)
        self.terms.append(term)

    def bound(self, term: sympy.Expr) -> int:
        """Take in the coefficients of ``term``; return the bound so far, in bits."""
        for part in sympy.Add.make_args(term):
            coefficient = part.as_coeff_Mul()[0]
            if coefficient.is_Rational:
                self.numerator_bits = max(self.numerator_bits, abs(coefficient.p).bit_length())
                if coefficient.q > 1:
                    self.denominator_bits += coefficient.q.bit_length()
                self.count += 1
        return self.numerator_bits + self.denominator_bits + self.count.bit_length()

    def value(self) -> sympy.Expr:
        return self.terms[0] if len(self.terms) == 1 else sympy.Add(*self.terms)
