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
              | name _{[sub] , coordinates} [^] [call] [^]    comma derivative w_{,xy}
              | \dot name | \ddot name  [call] [^]
              | group [^]                            ( ) [ ] { } \left( \right) \bigl( \bigr) ...
              | \frac A B [^]    (also \dfrac, \tfrac)
              | \frac{\partial^n A}{\partial x ...} [^] | \frac{\partial^n}{\partial x ...} operand
              | \frac{d^n A}{d x^n} [^] | \frac{d^n}{d x^n} operand      (also \mathrm{d})
              | \partial_coordinates [^n] operand   operand: name [_sub] [call], \partial..., or a bracket
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
  followed by ``(`` is always a call, checked against its declaration.  An
  abbreviation of one coordinate takes primes and dots too (``f'`` is df/dr
  for f = 1 - 2M/r), and ``f(r)`` names its argument; an abbreviation of
  several coordinates is refused with a hint to write ``\partial``.  A
  declared symbol followed by a bracket multiplies it: ``a^{2}\left(1 +
  r\right)`` is a^2 (1 + r).
* Partial derivatives by the coordinates (the caller's
  ``Vocabulary.coordinates``; refused where none are given): ``\partial_x w``,
  ``\partial_{x} w``, ``\partial_x^2 w``, ``\partial_x\partial_y w``,
  ``\partial_{xy} w`` (each letter one coordinate; refused when the letters
  also spell a coordinate), ``\partial_x (w^2)``, ``∂_x w``; comma
  derivatives ``w_{,x}``, ``w_{,xy}`` (``w_{,x x}`` is ``w_{,xx}``: spaces
  print nothing); fractions ``\frac{\partial w}{\partial x}``,
  ``\frac{\partial^{2} w}{\partial x \partial y}`` (the orders above and below
  must agree; everything after the operator above is differentiated,
  ``\frac{\partial w^2}{\partial x}`` is the derivative of w^2) and
  ``\frac{\partial}{\partial x}`` before an operand.  ``\frac{d f}{d r}``,
  ``\frac{\mathrm{d}f}{\mathrm{d}r}``, ``\frac{d^2 f}{dr^2}`` are derivatives by
  one coordinate of something that depends on no other; with ``d`` declared
  they are refused as ambiguous.  The operand of ``\partial_x`` is one name
  (with its arguments) or one bracket: ``\partial_x w \partial_y w`` is a
  product of two derivatives, and a power after it (``\partial_x w^2``) is
  refused as ambiguous.  The derivative of a declared function by a
  coordinate it does not depend on is refused (it would be 0).  The guards
  bound the order (MAX_DERIVATIVE_ORDER, derivatives of derivatives added
  up) and the work (MAX_DERIVATIVE_WORK) of the derivatives in one text.
* ``e^{...}`` is the exponential unless ``e`` is declared, when it is refused
  as ambiguous (``\exp(...)`` or ``{e}^{...}`` say which is meant).
* Greek letters typed in Unicode are their commands: ``θ`` is ``\theta``,
  ``Λ`` is ``\Lambda`` (:data:`stepper.parse.UNICODE_GREEK`).
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
from sympy.core.function import AppliedUndef

from stepper.errors import InputError
from stepper.guards import (
    MAX_DERIVATIVE_ORDER,
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
from stepper.parse import ELEMENTARY_FUNCTIONS, UNICODE_GREEK, Vocabulary

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
        ";": " (covariant derivatives are not accepted; for a partial derivative write w_{,x} or \\partial_x w)",
        # What a TOML basic string "..." makes of \frac and \beta: write LaTeX in a literal string '''...'''.
        "\x0c": " (a TOML string \"...\" reads the \\f of \\frac as an escape: write LaTeX in a literal "
                "string '''...''')",
        "\x08": " (a TOML string \"...\" reads the \\b of \\beta as an escape: write LaTeX in a literal "
                "string '''...''')",
    }
)
_PARTIAL_SIGN = "\u2202"
"""The partial derivative sign as typed in Unicode, read as \\partial."""
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
        elif piece in UNICODE_GREEK:
            add("command", end, UNICODE_GREEK[piece])  # a typed Greek letter is read as its command
        elif piece == _PARTIAL_SIGN:
            add("command", end, "partial")
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
        # Number tokens split by a one-digit script, (index, token before), so that a trial reading undoes them.
        self.token_edits: list[tuple[int, _Token]] = []
        # Token index of a bracket read as arguments -> (the arguments or None if they cannot be read, the index
        # after it, bare_digit after it): each bracket is tried once, so nested brackets after declared names
        # cost linear time rather than doubling at each level.
        self.bracket_memo: dict[int, tuple[tuple[sympy.Expr, ...] | None, int, tuple[int, str, str] | None]] = {}
        # Token index of each opening bracket -> index of its closing one, found once for look-ahead.
        self.matching: dict[int, int] = {}
        stack: list[int] = []
        for position, token in enumerate(tokens):
            if token.kind == "open":
                stack.append(position)
            elif token.kind == "close" and stack:
                self.matching[stack.pop()] = position

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
        if token.kind == "command" and token.value == "partial":
            return self.partial(token)
        if token.kind == "command" and token.value in _FRACTIONS:
            return self.scripts_of_value(self.fraction(self.advance()))
        if token.kind == "command" and token.value == "sqrt":
            return self.scripts_of_value(self.root(self.advance()))
        if token.kind == "command":
            hint = " (line breaks are not accepted)" if token.text == "\\\\" else ""
            if token.value in ("nabla", "Box", "square", "triangle"):
                hint = " (write the derivatives out: \\partial_x^2 w + \\partial_y^2 w)"
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
            self.token_edits.append((self.index, token))
            self.tokens[self.index] = token._replace(
                text=rest, value=rest, column=token.column + 1, start=token.start + 1, spaced=False
            )
        else:
            self.advance()
        self.bare_digit = (token.start + 1, script.text, digit) if remember else None
        return sympy.Integer(int(digit))

    def fraction(self, command: _Token) -> sympy.Expr:
        form = self.derivative_fraction_form()
        if form is not None:
            return self.derivative_fraction(command, form)
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

    def named(self, token: _Token, operand_of: str | None = None) -> sympy.Expr:
        """A name with its subscript (a comma derivative inside it), primes, power and call, or a dotted name.

        ``operand_of`` is the derivative written before the name (``\\partial_x``), whose operand the name is:
        a power on it is then ambiguous and refused."""
        self.advance()
        order = _DOTS.get(token.value, 0) if token.kind == "command" else 0
        base, subscript = (self.dotted(token) if order else (token, None))
        commas: list[_Token] = []
        comma_mark: _Token | None = None
        primes: list[_Token] = []
        caret: _Token | None = None
        exponent: sympy.Expr | None = None
        while True:
            mark = self.peek()
            if self.at("_"):
                self.advance()
                if subscript is not None or comma_mark is not None:
                    self.fail("double subscript '_'", mark.column, " (use braces to group)")
                subscript, commas = self.subscript(mark, derivatives=not (order or primes))
                comma_mark = mark if commas else None
            elif self.at("'"):
                self.advance()
                if caret is not None or order or comma_mark is not None:
                    self.fail(f"unexpected {show(mark.text)}", mark.column,
                              " (write primes before the superscript, and not with \\dot or a comma derivative)")
                primes.append(mark)
            elif self.at("^"):
                self.advance()
                if caret is not None:
                    self.fail("double superscript '^'", mark.column, " (use braces to group)")
                if operand_of is not None:
                    self.ambiguous_power(operand_of, base.text, mark)
                caret, exponent = mark, self.superscript(mark)
            else:
                break
        value, kind, name = self.resolve(base, subscript)
        if caret is not None and self.declared_e(base, subscript, kind):
            self.fail(
                f"ambiguous {show(base.text + '^')}", base.column,
                " ('e' is declared in the metric file: write \\exp(...) for the exponential function, "
                "or {e}^{...} for a power of the declared e)",
            )
        undifferentiated = value
        if order or primes:
            marker = token if order else primes[0]
            value = self.derivative(value, kind, name, base.text, marker, order or len(primes))
        if commas:
            assert comma_mark is not None
            self.coordinate_names(comma_mark)
            variables = self.coordinate_list(commas)
            value = self.differentiate_checked(value, variables, comma_mark)
        called = False
        if kind == "function" and self.at_open("(") and not self.sized_product(self.vocabulary.functions[name]):
            self.call(self.vocabulary.functions[name], name, base)
            called = True
        elif kind == "abbreviation" and self.at_open("(") and self.vocabulary.coordinates is not None:
            # f(r) for an abbreviation f of r alone names its argument, as for a declared function.
            depends = tuple(self.coordinates_in(undifferentiated))
            if depends and self.holds(depends):
                self.bracket_arguments()
                called = True
        if called and self.at("^"):
            mark = self.advance()
            if caret is not None:
                self.fail("double superscript '^'", mark.column, " (use braces to group)")
            if operand_of is not None:
                self.ambiguous_power(operand_of, base.text, mark)
            caret, exponent = mark, self.superscript(mark)
        if caret is not None and exponent is not None:
            value = self.power(value, exponent, caret)
        self.no_more_scripts()
        return value

    def declared_e(self, base: _Token, subscript: str | None, kind: str) -> bool:
        """Whether ``base`` is a plain ``e`` that the metric file declares (so that e^{...} is ambiguous)."""
        return base.kind in ("letter", "name") and base.value == "e" and subscript is None and kind != "constant"

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
                subscript, _ = self.subscript(self.advance(), derivatives=False)
            self.close(opening)
            return name, subscript
        if self.is_name(token):
            self.advance()
            return token, None
        self.unexpected(token, dot, f" ({show(dot.text)} takes a declared function)")

    def subscript(self, underscore: _Token, derivatives: bool) -> tuple[str | None, list[_Token]]:
        """The text of a subscript (letters, digits, Greek letters, \\mathrm{} names) and, with
        ``derivatives``, the coordinates of a comma derivative after a ',' inside braces (``w_{,xy}``)."""
        token = self.peek()
        if self.at_open("{"):
            opening = self.advance()
            parts: list[str] = []
            commas: list[_Token] = []
            comma: _Token | None = None
            while True:
                part = self.peek()
                if part.kind == "close" and part.value == "}":
                    break
                if comma is None and derivatives and part.kind == "operator" and part.value == ",":
                    comma = part
                elif comma is not None and self.is_name(part):
                    commas.append(part)
                elif comma is not None:
                    self.unexpected(part, None, " (after the comma of a derivative come coordinates: w_{,xy})")
                elif part.kind == "number" and part.value.isdigit():
                    parts.append(part.value)
                elif self.is_name(part):
                    parts.append(part.value)
                else:
                    self.unexpected(
                        part, None, " (a subscript holds letters and digits only)"
                    )
                self.advance()
            if comma is not None and not commas:
                self.unexpected(self.peek(), comma, " (name the coordinates: w_{,x})")
            if not parts and comma is None:
                self.unexpected(self.peek(), underscore, " (empty subscript)")
            self.close(opening)
            return ("".join(parts) or None), commas
        if token.kind == "number":
            return str(self.one_digit(token, underscore, remember=True)), []
        if self.is_name(token):
            self.advance()
            return token.value, []
        hint = " (a comma derivative is written in braces: w_{,x})" if self.at(",") else \
            " (a subscript holds letters and digits only)"
        self.unexpected(token, underscore, hint)

    def sized_product(self, declared: sympy.Expr) -> bool:
        """Whether ``\\left( ... \\right)`` after a declared function is a factor rather than its arguments:
        stepper's reports write a(t) times a bracket as ``a \\left(a'\\right)^{2}``, so a sized bracket that
        does not hold the declared arguments multiplies (a plain ``a(r)`` is still read as a call, and refused)."""
        if not self.tokens[self.index].text.startswith("\\"):
            return False
        return not self.holds(tuple(declared.args))

    def holds(self, arguments: tuple[sympy.Expr, ...]) -> bool:
        """Whether the bracket that comes next holds exactly ``arguments`` (the cursor does not move)."""
        start = self.index
        if start not in self.bracket_memo:
            saved, edits = (self.depth, self.bare_digit), len(self.token_edits)
            try:
                self.bracket_arguments()  # remembers what it read
            except InputError:
                self.bracket_memo[start] = (None, start, None)
            finally:
                self.index, (self.depth, self.bare_digit) = start, saved
                while len(self.token_edits) > edits:
                    position, token = self.token_edits.pop()
                    self.tokens[position] = token
        return self.bracket_memo[start][0] == arguments

    def bracket_arguments(self) -> list[sympy.Expr]:
        """Read ``( expression, ... )``, or take what a trial reading found there."""
        start = self.index
        known = self.bracket_memo.get(start)
        if known is not None and known[0] is not None:
            arguments, self.index, self.bare_digit = known
            return list(arguments)
        opening = self.advance()
        self.enter(opening)
        arguments = [self.expression()]
        while self.at(","):
            self.advance()
            arguments.append(self.expression())
        self.close(opening)
        self.depth -= 1
        self.bracket_memo[start] = (tuple(arguments), self.index, self.bare_digit)
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
        if subscript is not None and any(
            (self.lookup(stem) or (None, ""))[1] in ("function", "abbreviation") for stem in stems
        ):
            by = subscript if len(subscript) == 1 else f"{{{subscript}}}"
            hint = (f" (no declared name {tried}; for a derivative write {base.text}_{{,{subscript}}} "
                    f"or \\partial_{by} {base.text})")
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

    # -- derivatives

    def derivative(
        self, value: sympy.Expr, kind: str, name: str, written: str, marker: _Token, order: int
    ) -> sympy.Expr:
        """Primes or dots on a declared function of one variable, or on an abbreviation of one coordinate."""
        if kind == "abbreviation" and self.vocabulary.coordinates is not None:
            depends = self.coordinates_in(value)
            if len(depends) != 1:
                words = " and ".join(show(symbol.name) for symbol in depends) or "no coordinate"
                self.fail(
                    f"{show(marker.text)} on {show(name)}",
                    marker.column,
                    f" ({show(name)} depends on {words}; a dot or prime needs one: write "
                    f"\\partial_x {written} or \\frac{{\\partial {written}}}{{\\partial x}} for the coordinate x)",
                )
            return self.differentiate(value, depends * order, marker)
        if kind != "function":
            self.fail(
                f"{show(marker.text)} on {show(name)}",
                marker.column,
                f" ({show(name)} is not a declared function or abbreviation)",
            )
        if len(value.args) != 1 or not isinstance(value.args[0], sympy.Symbol):
            arguments = ", ".join(brief(argument) for argument in value.args)
            self.fail(
                f"{show(marker.text)} on {show(name)}",
                marker.column,
                f" ({show(name)} is declared with arguments ({arguments}); a dot or prime "
                f"needs a function of one variable: write \\partial_x {written} or {written}_{{,x}})",
            )
        return self.differentiate(value, [value.args[0]] * order, marker)

    def partial(self, operator: _Token) -> sympy.Expr:
        """``\\partial_x w``, ``\\partial_x^2 w``, ``\\partial_{xy} w``, ``\\partial_x\\partial_y w``,
        ``\\partial_x (w^2)``: the operator with its coordinates, then its operand."""
        self.coordinate_names(operator)
        self.advance()
        self.enter(operator)
        coordinates: list[sympy.Symbol] | None = None
        written = ""
        count: int | None = None
        while True:
            mark = self.peek()
            if self.at("_"):
                self.advance()
                if coordinates is not None:
                    self.fail("double subscript '_'", mark.column, " (use braces to group)")
                names = self.subscript_names(mark)
                coordinates = self.coordinate_list(names)
                written = "".join(name.text for name in names)
            elif self.at("^"):
                self.advance()
                if count is not None:
                    self.fail("double superscript '^'", mark.column, " (use braces to group)")
                count = self.order(self.superscript(mark), mark)
            else:
                break
        if coordinates is None:
            self.fail(f"{show(operator.text)} without a subscript", operator.column,
                      " (write \\partial_x w, or \\frac{\\partial w}{\\partial x})")
        shown = f"\\partial_{written}" if len(written) == 1 else f"\\partial_{{{written}}}"
        if count is not None and len(coordinates) > 1:
            self.fail(f"ambiguous power on {show(shown)}", operator.column,
                      " (give the power of each coordinate: \\partial_x^2\\partial_y w)")
        operand = self.derivative_operand(operator, shown)
        self.depth -= 1
        return self.differentiate_checked(operand, coordinates * (count or 1), operator)

    def subscript_names(self, underscore: _Token) -> list[_Token]:
        """The names in the subscript of \\partial: one name, or names in braces."""
        if self.at_open("{"):
            opening = self.advance()
            names: list[_Token] = []
            while not (self.peek().kind == "close" and self.peek().value == "}"):
                part = self.peek()
                if not self.is_name(part):
                    self.unexpected(part, None, " (the subscript of \\partial holds coordinates: \\partial_{x})")
                names.append(self.advance())
            if not names:
                self.unexpected(self.peek(), underscore, " (empty subscript)")
            self.close(opening)
            return names
        token = self.peek()
        if not self.is_name(token):
            self.unexpected(token, underscore, " (the subscript of \\partial holds coordinates: \\partial_x)")
        return [self.advance()]

    def derivative_operand(self, operator: _Token, shown: str) -> sympy.Expr:
        """What a derivative operator (``\\partial_x``, ``\\frac{d}{dr}``) applies to: a name with its
        arguments, another \\partial, or a bracket; a power after it would be ambiguous."""
        token = self.peek()
        if token.kind == "command" and token.value == "partial":
            return self.partial(token)
        if self.function_of(token) is None and (
            self.is_name(token) or (token.kind == "command" and token.value in _DOTS)
        ):
            return self.named(token, operand_of=shown)
        if token.kind == "open":
            opening = self.advance()
            self.enter(opening)
            value = self.expression()
            self.close(opening)
            self.depth -= 1
            if self.at("^"):
                self.ambiguous_power(shown, "(...)", self.peek())
            self.no_more_scripts()
            return value
        self.unexpected(token, operator, f" ({shown} applies to a declared name or a bracket: "
                                         f"write {shown} w or {shown}\\left(...\\right))")

    def ambiguous_power(self, shown: str, operand: str, caret: _Token) -> NoReturn:
        self.fail(
            f"ambiguous power after {show(shown + ' ' + operand)}", caret.column,
            f" (write ({shown} {operand})^{{2}} for a power of the derivative, or {shown}({operand}^{{2}}) "
            "for the derivative of a power)",
        )

    def order(self, value: sympy.Expr, caret: _Token) -> int:
        """The order a superscript gives a derivative: a whole number from 1 to MAX_DERIVATIVE_ORDER."""
        if not (value.is_Integer and 1 <= int(value) <= MAX_DERIVATIVE_ORDER):
            self.fail(f"derivative of order {brief(value)}", caret.column,
                      f" (the order of a derivative is a whole number from 1 to {MAX_DERIVATIVE_ORDER})")
        return int(value)

    def coordinate_names(self, token: _Token) -> tuple[str, ...]:
        coordinates = self.vocabulary.coordinates
        if coordinates is None:
            self.fail(f"derivative {show(token.text)} not accepted here", token.column,
                      " (derivatives are read in claims, where the coordinates are known)")
        return coordinates

    def coordinate(self, token: _Token) -> sympy.Symbol:
        """The coordinate a name token stands for."""
        coordinates = self.coordinate_names(token)
        stems = GREEK_LETTERS[token.value] if token.kind == "command" else (token.value,)
        for stem in stems:
            if stem in coordinates:
                return self.vocabulary.symbols[stem]
        listed = ", ".join(coordinates)
        if any(self.lookup(stem) is not None for stem in stems):
            self.fail(f"{show(token.text)} is not a coordinate", token.column,
                      f" (derivatives are taken by the coordinates {listed})")
        hint = self.word_hint(token) if token.kind == "letter" else ""
        self.fail(f"unknown coordinate {show(token.text)}", token.column, hint or f" (the coordinates are {listed})")

    def coordinate_list(self, names: list[_Token]) -> list[sympy.Symbol]:
        """The coordinates named by the letters of ``\\partial_{xy}`` or ``w_{,xy}``, one derivative each."""
        if len(names) > 1 and all(name.kind == "letter" for name in names):
            joined = "".join(name.value for name in names)
            if joined in self.coordinate_names(names[0]):
                self.fail(
                    f"ambiguous subscript {show(joined)}", names[0].column,
                    f" ({show(joined)} is a coordinate: write \\mathrm{{{joined}}} for it, or name the "
                    "coordinates one at a time: \\partial_x\\partial_y w)",
                )
        return [self.coordinate(name) for name in names]

    def coordinates_in(self, value: sympy.Expr) -> list[sympy.Symbol]:
        """The coordinates ``value`` depends on, in the metric's order."""
        symbols, free = self.vocabulary.symbols, value.free_symbols
        return [symbols[name] for name in self.vocabulary.coordinates or () if symbols[name] in free]

    def differentiate_checked(
        self, operand: sympy.Expr, variables: list[sympy.Symbol], token: _Token
    ) -> sympy.Expr:
        """The derivative, refused when the operand is a declared function that does not depend on a variable
        (its derivative would be 0, most likely a slip)."""
        if isinstance(operand, AppliedUndef):
            for variable in variables:
                if variable not in operand.args:
                    arguments = ", ".join(brief(argument) for argument in operand.args)
                    self.fail(
                        f"{show(str(operand.func))} does not depend on {show(variable.name)}", token.column,
                        f" (it is declared with arguments ({arguments}), so this derivative is 0)",
                    )
        return self.differentiate(operand, variables, token)

    def derivative_fraction_form(self) -> str | None:
        """``"partial"`` or ``"d"`` when the \\frac that was just read writes a derivative:
        ``\\frac{\\partial w}{\\partial x}``, ``\\frac{d f}{d r}``, ``\\frac{\\mathrm{d}}{\\mathrm{d}r}``.
        With ``d`` declared in the metric file, ``\\frac{d f}{d r}`` could also be a quotient: refused."""
        tokens, start = self.tokens, self.index
        if not (tokens[start].kind == "open" and tokens[start].value == "{"):
            return None
        first = tokens[start + 1]
        partial = first.kind == "command" and first.value == "partial"
        if not (partial or self.is_d(first)):
            return None
        end = self.matching.get(start)  # the closing brace of the numerator
        if end is None:
            return None
        below = tokens[end + 1 : end + 4]
        if not (len(below) == 3 and below[0].kind == "open" and below[0].value == "{"):
            return None
        if partial:  # \frac{\partial_x (w^2)}{2w} is a quotient
            return "partial" if below[1].kind == "command" and below[1].value == "partial" else None
        if not (self.is_d(below[1]) and self.is_name(below[2])):
            return None
        if self.lookup("d") is not None:
            self.fail(
                f"ambiguous {show(first.text)}", first.column,
                " ('d' is declared in the metric file, so this could be a quotient: write "
                "\\frac{\\partial f}{\\partial r} for a derivative, or \\frac{d \\cdot f}{d \\cdot r} for a quotient)",
            )
        return "d"

    @staticmethod
    def is_d(token: _Token) -> bool:
        """The d of a derivative: the letter, or \\mathrm{d} (and its kin)."""
        return token.kind in ("letter", "name") and token.value == "d"

    def derivative_fraction(self, command: _Token, form: str) -> sympy.Expr:
        """``\\frac{\\partial^{2} w}{\\partial x \\partial y}``, ``\\frac{d^2 f}{dr^2}``, or an operator
        ``\\frac{\\partial}{\\partial x}`` followed by what it applies to."""
        sign = "\\partial" if form == "partial" else "d"
        self.coordinate_names(self.tokens[self.index + 1])
        opening = self.advance()
        self.enter(opening)
        operator = self.advance()
        above: int | None = None
        if self.at("^"):
            caret = self.advance()
            above = self.order(self.superscript(caret), caret)
        if self.at("_"):
            self.fail(f"unexpected '_' after {show(operator.text)}", self.peek().column,
                      f" (write the variable below the line: \\frac{{{sign} w}}{{{sign} x}})")
        operand: sympy.Expr | None = None
        if not (self.peek().kind == "close" and self.peek().value == "}"):
            operand = self.expression()
        self.close(opening)
        self.depth -= 1
        if not self.at_open("{"):
            self.unexpected(self.peek(), command, f" (write the variables below the line in braces: "
                                                  f"\\frac{{{sign} w}}{{{sign} x}})")
        opening = self.advance()
        self.enter(opening)
        variables: list[sympy.Symbol] = []
        written: list[str] = []
        while not (self.peek().kind == "close" and self.peek().value == "}"):
            mark = self.peek()
            same = (mark.kind == "command" and mark.value == "partial") if form == "partial" else self.is_d(mark)
            if not same:
                self.unexpected(mark, None, f" (below the line write {sign} before each variable: "
                                            f"{sign} x {sign} y, or {sign} x^{{2}})")
            self.advance()
            name = self.peek()
            if not self.is_name(name):
                self.unexpected(name, mark, f" (a coordinate follows {sign}: {sign} x)")
            self.advance()
            variable = self.coordinate(name)
            written.append(name.text)
            count = 1
            if self.at("^"):
                caret = self.advance()
                count = self.order(self.superscript(caret), caret)
            variables.extend([variable] * count)
        self.close(opening)
        self.depth -= 1
        expected = above or 1
        if len(variables) != expected:
            self.fail(
                f"the orders above and below {show(command.text)} differ: {expected} and {len(variables)}",
                operator.column,
                f" (write \\frac{{{sign}^{{2}} w}}{{{sign} x^{{2}}}} or \\frac{{\\partial^{{2}} w}}"
                "{\\partial x \\partial y})",
            )
        if form == "d" and len(set(variables)) > 1:
            self.fail(f"{show(operator.text)} with several variables", operator.column,
                      " (for partial derivatives write \\frac{\\partial^{2} w}{\\partial x \\partial y})")
        if operand is None:
            shown = f"\\frac{{{sign}}}{{{sign} {written[0]}}}"
            operand = self.derivative_operand(command, shown)
        if form == "d":
            others = [symbol.name for symbol in self.coordinates_in(operand) if symbol != variables[0]]
            if others:
                self.fail(
                    f"{show(operator.text)} on an expression that depends on {show(others[0])} too",
                    operator.column,
                    f" (a derivative by {written[0]} alone is partial: write \\frac{{\\partial ...}}"
                    f"{{\\partial {written[0]}}})",
                )
        return self.differentiate_checked(operand, variables, operator)

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
