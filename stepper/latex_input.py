r"""Safe reading of claimed results written in LaTeX, as copied from a paper.

A user who audits a hand calculation may paste results such as
``\frac{M(r-2M)}{r^{3}}``.  Like :mod:`stepper.parse`, this module never hands
text to ``eval``, ``exec`` or any of sympy's string readers (sympy's own LaTeX
reader included): a tokenizer and a recursive-descent parser build sympy
objects directly, and every name is looked up in the caller's
:class:`stepper.parse.Vocabulary`.  Every problem raises
:class:`stepper.errors.InputError` with a one-line message naming the
offending token, its 1-based column in the text and the caller's ``where``
label.  The guards against huge texts, deep nesting and huge numbers are
those of :mod:`stepper.guards`, shared with :mod:`stepper.parse`.

Accepted subset (highest binding first)::

    expression  term { ("+" | "-") term }
    term        signed { ("*" | "/" | \cdot | \times) signed }
    signed      { "+" | "-" } product
    product     factor { factor }                    juxtaposition
    factor      number [^]
              | name [_sub] ["'"...] [^] [call] [^]  letters, Greek letters, \mathrm{name}
              | \dot name | \ddot name  [call] [^]
              | group [^]                            ( ) [ ] { } \left( \right) \bigl( \bigr) ...
              | \frac A B [^]    (also \dfrac, \tfrac)
              | \sqrt [ "[" n "]" ] A [^]            the n-th root is A^(1/n)
              | function [^p] ( "(" expression ")" [^] | argument )

Reading rules (the decisions a reader of LaTeX has to make):

* Juxtaposition is multiplication and binds tighter than the written
  operators: ``2M`` is 2*M, ``Mr`` is M*r.  A number may only come first in a
  product: in LaTeX ``r^22`` is r^2 followed by 2 and ``2 3`` prints as 23,
  so a later number is refused, with a hint to write ``r^{22}`` or ``\cdot``.
* A ``/`` followed by a product of several factors (``1/2M``) is refused as
  ambiguous; ``\frac{1}{2M}`` or parentheses say what is meant.  Otherwise
  ``*``, ``/``, ``\cdot`` and ``\times`` group to the left, as in
  :mod:`stepper.parse`.
* Without braces, ``^``, ``_``, and the arguments of ``\frac`` and ``\sqrt``
  take one character or one Greek letter, as TeX does: ``\frac12`` is 1/2.
  Braces ``{ }`` group without being printed, so ``{\sin\theta}^2`` is
  (sin theta)^2.
* A plain letter is a one-letter name.  A declared longer name is written
  ``\mathrm{name}``, ``\text{name}`` or ``\operatorname{name}``; Greek
  letters map to the declared name spelled the same (``\theta`` -> ``theta``;
  ``\varphi``, ``\vartheta``, ``\varepsilon``, ``\varrho``, ``\varsigma`` fall
  back to the plain letter's name).  ``X_{sub}`` is the declared name
  ``X_sub`` or else ``Xsub``.  An undeclared ``e`` is Euler's number and an
  undeclared ``\pi`` is pi.
* A function (``\sin \cos \tan \cot \sec \csc \sinh \cosh \tanh \coth \exp
  \ln \log``; ``\log`` is the natural logarithm) takes either a group in
  ``( )`` or ``[ ]`` -- a power after the closing parenthesis applies to the
  function's value, ``\sin(\theta)^2``, also when the group is wrapped in
  braces, ``\log{\left(r\right)}^{2}``, as sympy's printer writes it -- or,
  without parentheses, the
  product that follows, which ends before the next ``+``, ``-``, written
  operator, closing bracket, function, opening ``(`` or ``[``, spacing
  command (``\,`` ...), and before a ``\frac`` or ``\sqrt`` that is not its
  first factor: ``\cos 2\theta`` is cos(2 theta), ``\sin\theta\cos\theta`` is
  a product of two functions, ``\sin\theta^2`` is sin(theta^2),
  ``\sin\theta\,r`` is sin(theta) r.
* ``\sin^2\theta`` is sin(theta)^2; a negative power on a function name is
  refused, because ``\sin^{-1}`` usually means the inverse function.
* A declared function is written ``a`` or ``a(t)``; its derivative with
  respect to its one argument is ``a'``, ``a''``, ``\dot a``, ``\ddot a``
  (``\dot{a}``, ``a'(t)``, ``\dot a^2`` = (da/dt)^2).  A declared function
  followed by ``(`` is always a call, checked against its declaration.
* The Unicode minus sign ``−`` (U+2212) is ``-``; the multiplication signs ``× · ⋅`` are
  ``\times``.
* Spacing (``\, \; \: \! \quad \qquad ~`` and ``\`` followed by a space),
  ``\displaystyle``, ``\left.`` and ``\right.`` are ignored; so is one
  trailing ``.`` or ``,``, and one pair of surrounding ``$...$``,
  ``$$...$$``, ``\(...\)`` or ``\[...\]``.

Everything else -- unknown commands (``\input``, ``\def`` ...), ``=``, ``&``,
``\\``, ``$`` inside, ``%``, ``#``, unbalanced brackets -- is refused.
"""

from __future__ import annotations

import re
from types import MappingProxyType
from typing import Mapping, NamedTuple, NoReturn

import sympy

from stepper.errors import InputError
from stepper.guards import (
    MAX_DIGITS,
    MAX_NUMBER_BITS,
    UNDEFINED,
    GuardedReader,
    Sum,
    brief,
    check_text,
    rational_bits,
    show,
)
from stepper.parse import ELEMENTARY_FUNCTIONS, Vocabulary

__all__ = ["FUNCTION_COMMANDS", "GREEK_LETTERS", "parse_latex"]

FUNCTION_COMMANDS: frozenset[str] = frozenset(
    ["sin", "cos", "tan", "cot", "sec", "csc", "sinh", "cosh", "tanh", "coth", "exp", "ln", "log"]
)
"""Commands, without the backslash, that apply an elementary function."""

GREEK_LETTERS: Mapping[str, tuple[str, ...]] = MappingProxyType(
    {
        **{
            letter: (letter,)
            for letter in (
                "alpha beta gamma delta epsilon zeta eta theta iota kappa lambda mu nu xi "
                "rho sigma tau upsilon phi chi psi omega "
                "Gamma Delta Theta Lambda Xi Pi Sigma Upsilon Phi Psi Omega"
            ).split()
        },
        "pi": ("pi",),
        "varepsilon": ("varepsilon", "epsilon"),
        "vartheta": ("vartheta", "theta"),
        "varrho": ("varrho", "rho"),
        "varsigma": ("varsigma", "sigma"),
        "varphi": ("varphi", "phi"),
    }
)
"""Greek-letter commands -> the declared names they stand for, in the order tried."""

_FRACTIONS = frozenset(["frac", "dfrac", "tfrac"])
_DOTS = MappingProxyType({"dot": 1, "ddot": 2})
_NAME_WRAPPERS = frozenset(["mathrm", "text", "operatorname"])
_SPACING = frozenset(["\\,", "\\;", "\\:", "\\!", "\\ ", "\\quad", "\\qquad"])
_IGNORED = frozenset(["displaystyle"])
_SIZES = frozenset(
    size + side for size in ("big", "Big", "bigg", "Bigg") for side in ("", "l", "r")
)
_CLOSING = MappingProxyType({"(": ")", "[": "]", "{": "}"})
_CHARACTER_HINTS = MappingProxyType(
    {
        "=": " (give only the expression, not an equation)",
        "&": " (alignment is not accepted)",
        "$": " (math delimiters are accepted only around the whole text)",
        "%": " (comments are not accepted)",
        "|": " (absolute values are not accepted)",
    }
)
_UNICODE_OPERATORS = MappingProxyType({"\u2212": "-", "\u00d7": "*", "\u00b7": "*", "\u22c5": "*"})
"""Operators as typed in Unicode (copied from a web page or a word processor): the minus sign U+2212 and the
multiplication signs U+00D7, U+00B7 and U+22C5, read as ``-`` and ``*``."""
_DECLARABLE = re.compile(r"[A-Za-z][A-Za-z0-9]*")
_WRAPPERS = (("$$", "$$"), ("$", "$"), ("\\(", "\\)"), ("\\[", "\\]"))
_BLANK = " \t\r\n"


def parse_latex(text: str, vocabulary: Vocabulary, where: str) -> sympy.Expr:
    """Turn LaTeX math ``text`` into a sympy expression using only the names in ``vocabulary``.

    ``where`` labels the text in error messages, e.g. ``"claimed Ricci scalar"``.
    """
    check_text(text, where)
    start, stop = _math_bounds(text)
    tokens = _tokenize(text, start, stop)
    if len(tokens) > 1 and (tokens[-2].kind == "dot" or tokens[-2].text == ","):
        del tokens[-2]  # a sentence's full stop or comma after the formula
    if tokens[0].kind == "end":
        raise InputError(f"empty expression in {where}")
    return _Reader(tokens, vocabulary, where, text).read()


def _math_bounds(text: str) -> tuple[int, int]:
    """Start and stop of the formula: surrounding blanks and one pair of math
    delimiters (with a full stop or comma after it) left out."""
    start, stop = 0, len(text)
    while start < stop and text[start] in _BLANK:
        start += 1
    while stop > start and text[stop - 1] in _BLANK:
        stop -= 1
    ends = [stop]
    if stop > start and text[stop - 1] in ".,":
        end = stop - 1
        while end > start and text[end - 1] in _BLANK:
            end -= 1
        ends.append(end)
    for opener, closer in _WRAPPERS:
        for end in ends:
            if (
                end - start >= len(opener) + len(closer)
                and text.startswith(opener, start)
                and text.endswith(closer, start, end)
            ):
                return start + len(opener), end - len(closer)
    return start, stop


# ---------------------------------------------------------------- tokenizer


class _Token(NamedTuple):
    kind: str
    """number, letter, name, command, open, close, operator, dot, bad or end."""
    text: str
    """As written, for messages."""
    column: int
    """1-based column of the first character in the whole text."""
    start: int
    """0-based offset of the first character in the whole text."""
    value: str
    """Digits; the letter; the name inside \\mathrm{}; the command without its
    backslash; the bracket; the operator (\\cdot and \\times are "*"); for a bad
    token the message."""
    spaced: bool = False
    """A spacing command comes right before this token."""
    hint: str = ""
    """For a bad token: advice appended to the message."""


_PIECE = re.compile(
    r"(?P<blank>[ \t\r\n]+)"
    r"|(?P<number>[0-9]+(?:\.[0-9]+)?|\.[0-9]+)"
    r"|(?P<letter>[A-Za-z])"
    r"|(?P<command>\\(?:[A-Za-z]+|[^A-Za-z]))"
    r"|(?P<character>.)",
    re.DOTALL,
)
_COMMAND = re.compile(r"\\(?:[A-Za-z]+|[^A-Za-z])|.", re.DOTALL)


def _tokenize(text: str, start: int, stop: int) -> list[_Token]:
    """Split ``text[start:stop]`` into tokens, ending with an "end" token.

    Spacing and ignored commands produce no token.  A character outside the
    subset becomes a "bad" token and stops the scan; the parser reports it
    when it gets there, so errors come in reading order.
    """
    tokens: list[_Token] = []
    spaced = False
    position = start

    def add(kind: str, end: int, value: str, hint: str = "") -> None:
        nonlocal spaced
        tokens.append(_Token(kind, text[position:end], position + 1, position, value, spaced, hint))
        spaced = False

    while position < stop:
        match = _PIECE.match(text, position, stop)
        assert match is not None  # the last alternative matches any character
        kind, piece, end = match.lastgroup, match.group(), match.end()
        if kind == "blank":
            pass
        elif kind in ("number", "letter"):
            add(kind, end, piece)
        elif kind == "command":
            name = piece[1:]
            if piece in _SPACING:
                spaced = True
            elif name in _IGNORED:
                pass
            elif name in ("left", "right") or name in _SIZES:
                end = _sized_delimiter(text, position, end, stop, name, add)
                if tokens and tokens[-1].kind == "bad":
                    break
            elif name in _NAME_WRAPPERS:
                end = _wrapped_name(text, position, end, stop, name, add)
                if tokens[-1].kind == "bad":
                    break
            elif name in ("cdot", "times"):
                add("operator", end, "*")
            else:
                add("command", end, name)
        elif piece == "~":
            spaced = True
        elif piece in "([{":
            add("open", end, piece)
        elif piece in ")]}":
            add("close", end, piece)
        elif piece in "+-*/^_',":
            add("operator", end, piece)
        elif piece in _UNICODE_OPERATORS:
            add("operator", end, _UNICODE_OPERATORS[piece])
        elif piece == ".":
            add("dot", end, piece)
        else:
            add("bad", end, f"unexpected character {show(piece)}", _CHARACTER_HINTS.get(piece, ""))
            break
        position = end
    tokens.append(_Token("end", "", stop + 1, stop, "", spaced))
    return tokens


def _sized_delimiter(text: str, position: int, end: int, stop: int, name: str, add) -> int:
    """Read the delimiter after \\left, \\right, \\big ...; return where it ends."""
    after = end
    while after < stop and text[after] in _BLANK:
        after += 1
    piece = _COMMAND.match(text, after, stop) if after < stop else None
    delimiter = piece.group() if piece else ""
    if name == "left":
        allowed = "([."
    elif name == "right":
        allowed = ")]."
    else:
        allowed = {"l": "([", "r": ")]"}.get(name[-1], "()[]")
    if len(delimiter) == 1 and delimiter in allowed:
        if delimiter == ".":
            return after + 1  # \left. and \right. print nothing
        add("open" if delimiter in "([" else "close", after + 1, delimiter)
        return after + 1
    shown = text[position : after + len(delimiter)]
    accepted = " ".join(allowed)
    add(
        "bad",
        after + len(delimiter),
        f"unsupported delimiter {show(shown)}",
        f" (after '\\{name}' only {accepted} are accepted)",
    )
    return after + len(delimiter)


def _wrapped_name(text: str, position: int, end: int, stop: int, name: str, add) -> int:
    """Read ``\\mathrm{name}`` and its kin as one name token; return where it ends."""
    opening = end
    while opening < stop and text[opening] in _BLANK:
        opening += 1
    closing = text.find("}", opening, stop) if opening < stop and text[opening] == "{" else -1
    if closing >= 0:
        inside = text[opening + 1 : closing].strip(_BLANK)
        if _DECLARABLE.fullmatch(inside):
            add("name", closing + 1, inside)
            return closing + 1
    add(
        "bad",
        end,
        f"'\\{name}' must be followed by a name in braces",
        f" (like \\{name}{{rs}})",
    )
    return end


# ------------------------------------------------------------------- parser


class _Reader(GuardedReader[_Token]):
    """Recursive descent over a token list; one instance per text.

    Nesting costs three Python frames per level (expression -> product ->
    factor), so MAX_DEPTH stays inside Python's default recursion limit.
    The token cursor and the guards against hostile text come from
    :class:`stepper.guards.GuardedReader`.
    """

    def __init__(self, tokens: list[_Token], vocabulary: Vocabulary, where: str, text: str) -> None:
        super().__init__(tokens, where)
        self.vocabulary = vocabulary
        self.text = text
        # Token index of each opening bracket read as a group -> index of its closing one.
        self.group_ends: dict[int, int] = {}
        # (offset just after, script operator, digit) of the last one-digit
        # superscript or subscript written without braces, for a hint.
        self.bare_digit: tuple[int, str, str] | None = None

    # -- token helpers and errors

    def at(self, *operators: str) -> bool:
        token = self.tokens[self.index]
        return token.kind == "operator" and token.value in operators

    def at_open(self, brackets: str) -> bool:
        token = self.tokens[self.index]
        return token.kind == "open" and token.value in brackets

    def unexpected(self, token: _Token, after: _Token | None = None, hint: str = "") -> NoReturn:
        if token.kind == "bad":
            self.fail(token.value, token.column, token.hint)
        shown = "end of text" if token.kind == "end" else show(token.text)
        if after is not None:
            shown += f" after {show(after.text)}"
        if token.kind == "dot" and not hint:
            hint = " (a '.' is accepted only at the very end)"
        self.fail(f"unexpected {shown}", token.column, hint)

    def is_name(self, token: _Token) -> bool:
        """A letter, a \\mathrm{} name or a Greek letter: something a name is made of."""
        if token.kind in ("letter", "name"):
            return True
        return token.kind == "command" and token.value in GREEK_LETTERS

    def function_of(self, token: _Token) -> str | None:
        """The elementary function a token applies, if it does."""
        if token.kind == "command" and token.value in FUNCTION_COMMANDS:
            return token.value
        if (
            token.kind == "name"
            and token.value in ELEMENTARY_FUNCTIONS
            and self.lookup(token.value) is None
        ):
            return token.value
        return None

    # -- grammar

    def parse(self) -> sympy.Expr:
        result = self.expression()
        token = self.peek()
        if token.kind == "end":
            return result
        if token.kind == "close":
            self.fail(f"unmatched {show(token.text)}", token.column)
        self.unexpected(token)

    def expression(self) -> sympy.Expr:
        """Terms joined by + and -, each a chain of signed products joined by * and /.

        Each chain is one ``sympy.Mul`` and the sum one ``sympy.Add``, as in
        stepper.parse, so long texts cost linear time.
        """
        terms = Sum(self)
        sign: _Token | None = None
        while True:
            factors: list[tuple[sympy.Expr, _Token]] = []
            operator: _Token | None = None
            while True:
                signs: list[_Token] = []
                while self.at("+", "-"):
                    signs.append(self.advance())
                first = self.peek()
                factor, count = self.product()
                for mark in reversed(signs):  # a sign negates the whole product, as printed
                    if mark.value == "-":
                        factor = -factor
                if operator is not None and operator.value == "/":
                    if count > 1:
                        self.fail(
                            f"ambiguous {show(operator.text)}",
                            operator.column,
                            f" (it is followed by a product of {count} factors: "
                            "write \\frac{...}{...} or use parentheses)",
                        )
                    factor = self.reciprocal(factor, operator)
                factors.append((factor, operator or first))
                if not self.at("*", "/"):
                    break
                operator = self.advance()
            # The sum reads a sign by its text: a Unicode minus passes as the '-' it stands for.
            terms.add(self.multiply(factors), sign if sign is None else sign._replace(text=sign.value))
            if not self.at("+", "-"):
                return terms.value()
            sign = self.advance()

    def starts_factor(self, token: _Token) -> bool:
        return token.kind in ("number", "letter", "name", "command", "open")

    def ends_argument(self, token: _Token) -> bool:
        """Whether ``token`` ends a function's argument written without parentheses
        (asked only once the argument has a factor)."""
        if token.spaced or self.function_of(token) is not None:
            return True
        if token.kind == "open" and token.value in "([":
            return True
        return token.kind == "command" and (token.value in _FRACTIONS or token.value == "sqrt")

    def product(
        self,
        argument_of: _Token | None = None,
        first: tuple[sympy.Expr, _Token] | None = None,
    ) -> tuple[sympy.Expr, int]:
        """Factors written side by side, and how many there were.

        With ``argument_of`` (a function token) this is that function's
        argument written without parentheses, which ends earlier; ``first``
        is a factor already read.
        """
        factors: list[tuple[sympy.Expr, _Token]] = [first] if first is not None else []
        while True:
            token = self.peek()
            if not self.starts_factor(token):
                break
            if factors and argument_of is not None and self.ends_argument(token):
                break
            if factors and token.kind == "number":
                self.number_after_factor(token)
            factors.append((self.factor(), token))
        if not factors:
            if argument_of is not None:
                self.unexpected(token, hint=f" (the argument of {show(argument_of.text)} is missing)")
            self.unexpected(token)
        return self.multiply(factors), len(factors)

    def number_after_factor(self, token: _Token) -> NoReturn:
        hint = " (a number comes first in a product; use \\cdot or \\times otherwise)"
        if self.bare_digit is not None and self.bare_digit[0] == token.start:
            _, script, digit = self.bare_digit
            hint = (
                f" (without braces {script} takes one character: write "
                f"{script}{{{digit}{token.text}}}, or use \\cdot for a product)"
            )
        self.fail(f"number {show(token.text)} follows a factor", token.column, hint)

    def factor(self) -> sympy.Expr:
        token = self.peek()
        if token.kind == "number":
            self.advance()
            return self.scripts_of_value(self.number(token))
        if token.kind == "open":
            start = self.index
            opening = self.advance()
            self.enter(opening)
            value = self.expression()
            self.close(opening)
            self.depth -= 1
            self.group_ends[start] = self.index - 1
            return self.scripts_of_value(value)
        function = self.function_of(token)
        if function is not None:
            return self.function_application(token, function)
        if self.is_name(token) or (token.kind == "command" and token.value in _DOTS):
            return self.named(token)
        if token.kind == "command" and token.value in _FRACTIONS:
            return self.scripts_of_value(self.fraction(self.advance()))
        if token.kind == "command" and token.value == "sqrt":
            return self.scripts_of_value(self.root(self.advance()))
        if token.kind == "command":
            hint = " (line breaks are not accepted)" if token.text == "\\\\" else ""
            self.fail(f"unknown command {show(token.text)}", token.column, hint)
        self.unexpected(token)

    def scripts_of_value(self, value: sympy.Expr) -> sympy.Expr:
        """An optional power after a number, group, fraction or root."""
        if self.at("^"):
            caret = self.advance()
            value = self.power(value, self.superscript(caret), caret)
        self.no_more_scripts()
        return value

    def no_more_scripts(self) -> None:
        token = self.peek()
        if self.at("^"):
            self.fail("double superscript '^'", token.column, " (use braces to group)")
        if self.at("_"):
            self.fail("unexpected '_'", token.column, " (a subscript belongs to a name)")
        if self.at("'"):
            self.fail(
                f"unexpected {show(token.text)}", token.column,
                " (a prime belongs to a declared function)",
            )

    def close(self, opening: _Token) -> None:
        token = self.peek()
        expected = _CLOSING[opening.value]
        if token.kind == "close" and token.value == expected:
            self.advance()
        elif token.kind == "end":
            self.fail(f"unmatched {show(opening.text)}", opening.column)
        elif token.kind == "close":
            self.fail(
                f"unexpected {show(token.text)}",
                token.column,
                f" (expected {show(expected)} to close {show(opening.text)} "
                f"of column {opening.column})",
            )
        else:
            self.unexpected(token)

    def superscript(self, caret: _Token) -> sympy.Expr:
        """What follows ^: a braced group, one digit, or one name."""
        return self._group_or_single(
            caret, True, " (without braces a superscript is one character: write ^{...})")

    def argument(self, command: _Token) -> sympy.Expr:
        """An argument of \\frac or \\sqrt: a braced group, one digit, or one name."""
        return self._group_or_single(
            command, False,
            f" (the arguments of {show(command.text)} are braced groups or single characters)")

    def _group_or_single(self, anchor: _Token, remember: bool, hint: str) -> sympy.Expr:
        """A braced group, or (as TeX reads an undelimited argument) one digit or one name."""
        token = self.peek()
        if self.at_open("{"):
            opening = self.advance()
            self.enter(opening)
            value = self.expression()
            self.close(opening)
            self.depth -= 1
            return value
        if token.kind == "number":
            return self.one_digit(token, anchor, remember=remember)
        if self.is_name(token):
            self.advance()
            return self.resolve(token, None)[0]
        self.unexpected(token, anchor, hint)

    def one_digit(self, token: _Token, script: _Token, remember: bool) -> sympy.Integer:
        """Take the first digit of a number token, leaving the rest as a number."""
        digit = token.text[0]
        if not digit.isdigit():
            self.unexpected(token, script)
        if len(token.text) > 1:
            rest = token.text[1:]
            self.tokens[self.index] = token._replace(
                text=rest, value=rest, column=token.column + 1, start=token.start + 1, spaced=False
            )
        else:
            self.advance()
        self.bare_digit = (token.start + 1, script.text, digit) if remember else None
        return sympy.Integer(int(digit))

    def fraction(self, command: _Token) -> sympy.Expr:
        numerator = self.argument(command)
        denominator = self.argument(command)
        return self.multiply([(numerator, command), (self.reciprocal(denominator, command), command)])

    def root(self, command: _Token) -> sympy.Expr:
        index: sympy.Expr = sympy.Integer(2)
        if self.at_open("[") and self.peek().text == "[":
            opening = self.advance()
            self.enter(opening)
            index = self.expression()
            self.close(opening)
            self.depth -= 1
            if index == 0:
                self.fail(f"{show(command.text)} of index zero", opening.column)
        radicand = self.argument(command)
        exponent = self.reciprocal(index, command)
        return self.power(radicand, exponent, command)

    def function_application(self, token: _Token, function: str) -> sympy.Expr:
        """An elementary function with its optional power and its argument."""
        self.advance()
        self.enter(token)
        caret: _Token | None = None
        exponent: sympy.Expr | None = None
        if self.at("^"):
            caret = self.advance()
            exponent = self.superscript(caret)
            if exponent.could_extract_minus_sign():
                self.fail(
                    f"negative power {brief(exponent)} on function {show(token.text)}",
                    caret.column,
                    f" ({token.text}^{{-1}} often means the inverse function; "
                    f"write \\frac{{1}}{{{token.text} x}} or ({token.text} x)^{{...}})",
                )
        if self.at("_"):
            self.fail(
                f"unexpected '_' after {show(token.text)}", self.peek().column,
                " (a function takes no subscript)",
            )
        late_caret: _Token | None = None
        late_exponent: sympy.Expr | None = None
        visible = self.at_open("([")
        if visible:
            opening = self.advance()
            self.enter(opening)
            argument = self.expression()
            self.close(opening)
            self.depth -= 1
        elif self.at_open("{") and self.tokens[self.index + 1].kind == "open":
            # Braces around a parenthesised argument, {\left( ... \right)}, print
            # like the parentheses alone (sympy's printer writes them so).
            brace = self.advance()
            self.enter(brace)
            start = self.index
            argument = self.expression()
            visible = self.group_ends.get(start) == self.index - 1
            self.close(brace)
            self.depth -= 1
            if not visible:
                argument = self.scripts_of_value(argument)
                argument, _ = self.product(argument_of=token, first=(argument, brace))
        else:
            argument, _ = self.product(argument_of=token)
        if visible:
            if self.at("^"):
                late_caret = self.advance()
                if caret is not None:
                    self.fail("double superscript '^'", late_caret.column, " (use braces to group)")
                late_exponent = self.superscript(late_caret)
        self.depth -= 1
        value = self.apply(token, ELEMENTARY_FUNCTIONS[function], argument)
        if caret is not None and exponent is not None:
            value = self.power(value, exponent, caret)
        if late_caret is not None and late_exponent is not None:
            value = self.power(value, late_exponent, late_caret)
        self.no_more_scripts()
        return value

    def named(self, token: _Token) -> sympy.Expr:
        """A name with its subscript, primes, power and call, or a dotted name."""
        self.advance()
        order = _DOTS.get(token.value, 0) if token.kind == "command" else 0
        base, subscript = (self.dotted(token) if order else (token, None))
        primes: list[_Token] = []
        caret: _Token | None = None
        exponent: sympy.Expr | None = None
        while True:
            mark = self.peek()
            if self.at("_"):
                self.advance()
                if subscript is not None:
                    self.fail("double subscript '_'", mark.column, " (use braces to group)")
                subscript = self.subscript(mark)
            elif self.at("'"):
                self.advance()
                if caret is not None or order:
                    self.fail(f"unexpected {show(mark.text)}", mark.column,
                              " (write primes before the superscript, and not with \\dot)")
                primes.append(mark)
            elif self.at("^"):
                self.advance()
                if caret is not None:
                    self.fail("double superscript '^'", mark.column, " (use braces to group)")
                caret, exponent = mark, self.superscript(mark)
            else:
                break
        value, kind, name = self.resolve(base, subscript)
        if order or primes:
            marker = token if order else primes[0]
            value = self.derivative(value, kind, name, marker, order or len(primes))
        if kind == "function" and self.at_open("(") and not self.sized_product(self.vocabulary.functions[name]):
            self.call(self.vocabulary.functions[name], name, base)
            if self.at("^"):
                mark = self.advance()
                if caret is not None:
                    self.fail("double superscript '^'", mark.column, " (use braces to group)")
                caret, exponent = mark, self.superscript(mark)
        if caret is not None and exponent is not None:
            value = self.power(value, exponent, caret)
        self.no_more_scripts()
        return value

    def dotted(self, dot: _Token) -> tuple[_Token, str | None]:
        """The name after \\dot or \\ddot, bare or in braces, with a subscript inside braces."""
        token = self.peek()
        if self.at_open("{"):
            opening = self.advance()
            name = self.peek()
            if not self.is_name(name):
                self.unexpected(name, dot, f" ({show(dot.text)} takes a declared function)")
            self.advance()
            subscript = None
            if self.at("_"):
                subscript = self.subscript(self.advance())
            self.close(opening)
            return name, subscript
        if self.is_name(token):
            self.advance()
            return token, None
        self.unexpected(token, dot, f" ({show(dot.text)} takes a declared function)")

    def subscript(self, underscore: _Token) -> str:
        """The text of a subscript: letters, digits, Greek letters, \\mathrm{} names."""
        token = self.peek()
        if self.at_open("{"):
            opening = self.advance()
            parts: list[str] = []
            while True:
                part = self.peek()
                if part.kind == "close" and part.value == "}":
                    break
                if part.kind == "number" and part.value.isdigit():
                    parts.append(part.value)
                elif self.is_name(part):
                    parts.append(part.value)
                else:
                    self.unexpected(
                        part, None, " (a subscript holds letters and digits only)"
                    )
                self.advance()
            if not parts:
                self.unexpected(self.peek(), underscore, " (empty subscript)")
            self.close(opening)
            return "".join(parts)
        if token.kind == "number":
            return str(self.one_digit(token, underscore, remember=True))
        if self.is_name(token):
            self.advance()
            return token.value
        self.unexpected(token, underscore, " (a subscript holds letters and digits only)")

    def sized_product(self, declared: sympy.Expr) -> bool:
        """Whether ``\\left( ... \\right)`` after a declared function is a factor rather than its arguments:
        stepper's reports write a(t) times a bracket as ``a \\left(a'\\right)^{2}``, so a sized bracket that
        does not hold the declared arguments multiplies (a plain ``a(r)`` is still read as a call, and refused)."""
        if not self.tokens[self.index].text.startswith("\\"):
            return False
        saved = (self.index, self.depth, self.bare_digit)
        try:
            return tuple(self.bracket_arguments()) != tuple(declared.args)
        except InputError:
            return False
        finally:
            self.index, self.depth, self.bare_digit = saved

    def bracket_arguments(self) -> list[sympy.Expr]:
        """Read ``( expression, ... )``."""
        opening = self.advance()
        self.enter(opening)
        arguments = [self.expression()]
        while self.at(","):
            self.advance()
            arguments.append(self.expression())
        self.close(opening)
        self.depth -= 1
        return arguments

    def call(self, declared: sympy.Expr, name: str, token: _Token) -> None:
        """Read ``( arguments )`` after a declared function and check them."""
        self.check_call(name, declared, self.bracket_arguments(), token, " (write \\cdot for a product)")

    # -- names

    def lookup(self, name: str) -> tuple[sympy.Expr, str] | None:
        """A declared name's value and kind, in the resolution order of stepper.parse."""
        vocabulary = self.vocabulary
        if name in vocabulary.symbols:
            return vocabulary.symbols[name], "symbol"
        if name in vocabulary.abbreviations:
            return vocabulary.abbreviations[name], "abbreviation"
        if name in vocabulary.functions:
            return vocabulary.functions[name], "function"
        return None

    def resolve(self, base: _Token, subscript: str | None) -> tuple[sympy.Expr, str, str]:
        """The value, kind and declared name that a name token (and subscript) stands for."""
        stems = GREEK_LETTERS[base.value] if base.kind == "command" else (base.value,)
        if subscript is None:
            names = list(stems)
        else:
            names = [name for stem in stems for name in (f"{stem}_{subscript}", f"{stem}{subscript}")]
        for name in names:
            found = self.lookup(name)
            if found is not None:
                return found[0], found[1], name
        if subscript is None and base.kind == "command" and base.value == "pi":
            return sympy.pi, "constant", "pi"
        if subscript is None and base.kind != "command" and base.value == "e":
            return sympy.E, "constant", "e"
        shown = base.text if subscript is None else f"{base.text}_{subscript}"
        tried = " or ".join(show(name) for name in names)
        hint = self.word_hint(base) if base.kind == "letter" and subscript is None else ""
        if not hint and (subscript is not None or base.kind == "command"):
            hint = f" (no declared name {tried})"
        self.fail(f"unknown name {show(shown)}", base.column, hint)

    def word_hint(self, letter: _Token) -> str:
        """Advice when an unknown letter begins or sits in a word that means something."""
        text = self.text
        first, last = letter.start, letter.start + 1
        while first > 0 and text[first - 1].isascii() and text[first - 1].isalpha():
            first -= 1
        while last < len(text) and text[last].isascii() and text[last].isalpha():
            last += 1
        for word in (text[first:last], text[letter.start : last]):
            if len(word) < 2:
                continue
            ways = [f"\\{word}"] if word in FUNCTION_COMMANDS or word in GREEK_LETTERS else []
            if self.lookup(word) is not None:
                ways.append(f"\\mathrm{{{word}}}")
            if ways:
                return f" (write {' or '.join(ways)})"
        return ""

    def derivative(
        self, value: sympy.Expr, kind: str, name: str, marker: _Token, order: int
    ) -> sympy.Expr:
        if kind != "function":
            self.fail(
                f"{show(marker.text)} on {show(name)}",
                marker.column,
                f" ({show(name)} is not a declared function)",
            )
        if len(value.args) != 1 or not isinstance(value.args[0], sympy.Symbol):
            arguments = ", ".join(brief(argument) for argument in value.args)
            self.fail(
                f"{show(marker.text)} on {show(name)}",
                marker.column,
                f" ({show(name)} is declared with arguments ({arguments}); a dot or prime "
                "needs a function of one variable)",
            )
        return sympy.Derivative(value, (value.args[0], order))

    # -- numbers and the guarded sympy calls peculiar to LaTeX

    def number(self, token: _Token) -> sympy.Rational:
        """An exact rational from decimal digits: 2.5 -> 5/2."""
        whole, _, fraction = token.value.partition(".")
        digits = (whole + fraction).lstrip("0")
        if len(digits) > MAX_DIGITS:  # refuse hopeless sizes before converting
            self.check_size(MAX_NUMBER_BITS + 1, token)
        value = sympy.Rational(int(digits or "0"), 10 ** len(fraction))
        self.check_size(rational_bits(value), token)
        return value

    def multiply(self, factors: list[tuple[sympy.Expr, _Token]]) -> sympy.Expr:
        """One sympy.Mul for a chain of factors, after bounding its numbers."""
        bits = 0
        for factor, token in factors:
            bits += self.facts(factor).bits  # the numbers of the factors may multiply
            self.check_size(bits, token)
        if len(factors) == 1:
            return factors[0][0]
        result = sympy.Mul(*(factor for factor, _ in factors))
        if result in UNDEFINED:
            self.fail("undefined product (division by zero?)", factors[-1][1].column)
        return result

    def reciprocal(self, value: sympy.Expr, token: _Token) -> sympy.Expr:
        if value == 0:
            self.fail("division by zero", token.column)
        return value**-1
