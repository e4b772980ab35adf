"""LaTeX for expressions and text in reports.

:class:`ExpressionWriter` turns sympy expressions into LaTeX that TeX can
break across lines: long results are written as inline math in a ragged
paragraph, with sums in ``\\bigl( \\bigr)`` rather than ``\\left( \\right)``,
so that TeX may break after any ``+`` or ``-`` at the outer level.  Declared
abbreviations (polynomials such as Sigma = r^2 + a^2 cos^2 theta) replace
the factors they equal.  Free functions are written without their arguments
(declared once at the top of the report) and their derivatives with primes
or partial-derivative subscripts.

All settings come in through the constructor; nothing is global.
"""

from __future__ import annotations

import re
import unicodedata
from typing import Iterable, Mapping, Sequence

import sympy
from pylatex.utils import escape_latex
from sympy.core.function import AppliedUndef
from sympy.polys.polyerrors import BasePolynomialError
from sympy.printing.latex import LatexPrinter

from .quantities import QUANTITIES, indexed_tex

#: Results whose LaTeX is shorter than this go into a display equation as is.
SHORT_LATEX = 90
#: Denominators longer than this are written as a factor with exponent -1.
SHORT_DENOMINATOR = 60


#: A run of characters without a space longer than this gets break opportunities (a long label, a title
#: without spaces), so that it cannot run off the page; ordinary words and step ids are shorter.
LONG_RUN = 40
#: In such a run, TeX may break after every this many characters.
BREAK_EVERY = 8

_GREEK = {
    # lower case, with the final sigma; ε and φ as text fonts draw them (\varepsilon, \varphi), ϵ and ϕ below
    "α": r"\alpha", "β": r"\beta", "γ": r"\gamma", "δ": r"\delta", "ε": r"\varepsilon", "ζ": r"\zeta",
    "η": r"\eta", "θ": r"\theta", "ι": r"\iota", "κ": r"\kappa", "λ": r"\lambda", "μ": r"\mu", "ν": r"\nu",
    "ξ": r"\xi", "ο": "o", "π": r"\pi", "ρ": r"\rho", "ς": r"\varsigma", "σ": r"\sigma", "τ": r"\tau",
    "υ": r"\upsilon", "φ": r"\varphi", "χ": r"\chi", "ψ": r"\psi", "ω": r"\omega",
    # upper case: those that look like Latin letters are upright Latin letters
    "Α": r"\mathrm{A}", "Β": r"\mathrm{B}", "Γ": r"\Gamma", "Δ": r"\Delta", "Ε": r"\mathrm{E}",
    "Ζ": r"\mathrm{Z}", "Η": r"\mathrm{H}", "Θ": r"\Theta", "Ι": r"\mathrm{I}", "Κ": r"\mathrm{K}",
    "Λ": r"\Lambda", "Μ": r"\mathrm{M}", "Ν": r"\mathrm{N}", "Ξ": r"\Xi", "Ο": r"\mathrm{O}", "Π": r"\Pi",
    "Ρ": r"\mathrm{P}", "Σ": r"\Sigma", "Τ": r"\mathrm{T}", "Υ": r"\Upsilon", "Φ": r"\Phi",
    "Χ": r"\mathrm{X}", "Ψ": r"\Psi", "Ω": r"\Omega",
    # variant forms
    "ϐ": r"\beta", "ϑ": r"\vartheta", "ϒ": r"\Upsilon", "ϕ": r"\phi", "ϖ": r"\varpi", "ϝ": r"\digamma",
    "ϰ": r"\varkappa", "ϱ": r"\varrho", "ϴ": r"\Theta", "ϵ": r"\epsilon", "϶": r"\backepsilon",
}

#: Accents on Greek letters (as the accented letters decompose), as math accents.
_GREEK_ACCENTS = {"\u0301": r"\acute", "\u0300": r"\grave", "\u0308": r"\ddot", "\u0342": r"\tilde",
                  "\u0304": r"\bar", "\u0306": r"\breve"}

_MATH_SYMBOLS = {
    # operators
    "\u2212": "-", "±": r"\pm", "∓": r"\mp", "×": r"\times", "·": r"\cdot", "⋅": r"\cdot", "÷": r"\div",
    "∗": "*", "∘": r"\circ", "√": r"\surd", "⊗": r"\otimes", "⊕": r"\oplus", "⊙": r"\odot", "∧": r"\wedge",
    "∨": r"\vee", "¬": r"\neg", "∪": r"\cup", "∩": r"\cap", "∖": r"\setminus", "†": r"\dagger",
    # relations
    "≤": r"\le", "≥": r"\ge", "⩽": r"\leqslant", "⩾": r"\geqslant", "≠": r"\ne", "≈": r"\approx",
    "≃": r"\simeq", "≅": r"\cong", "≡": r"\equiv", "∼": r"\sim", "∝": r"\propto", "≪": r"\ll", "≫": r"\gg",
    "≲": r"\lesssim", "≳": r"\gtrsim", "∈": r"\in", "∉": r"\notin", "∋": r"\ni", "⊂": r"\subset",
    "⊃": r"\supset", "⊆": r"\subseteq", "⊇": r"\supseteq", "⊥": r"\perp", "∥": r"\parallel", "∣": r"\mid",
    "⊢": r"\vdash", "⊤": r"\top",
    # arrows
    "→": r"\to", "←": r"\leftarrow", "↔": r"\leftrightarrow", "⇒": r"\Rightarrow", "⇐": r"\Leftarrow",
    "⇔": r"\Leftrightarrow", "↦": r"\mapsto", "↑": r"\uparrow", "↓": r"\downarrow", "⟶": r"\longrightarrow",
    "⟵": r"\longleftarrow", "⟹": r"\Longrightarrow", "⟺": r"\Longleftrightarrow", "⇌": r"\rightleftharpoons",
    # big operators, calculus, letter-like symbols
    "∑": r"\sum", "∏": r"\prod", "∫": r"\int", "∬": r"\iint", "∮": r"\oint", "∂": r"\partial",
    "∇": r"\nabla", "∆": r"\Delta", "∞": r"\infty", "∀": r"\forall", "∃": r"\exists", "∄": r"\nexists",
    "∅": r"\emptyset", "ℓ": r"\ell", "ħ": r"\hbar", "ℏ": r"\hbar", "ℜ": r"\Re", "ℑ": r"\Im", "ℵ": r"\aleph",
    "℘": r"\wp", "ℝ": r"\mathbb{R}", "ℂ": r"\mathbb{C}", "ℕ": r"\mathbb{N}", "ℤ": r"\mathbb{Z}",
    "ℚ": r"\mathbb{Q}", "∠": r"\angle", "∴": r"\therefore", "∵": r"\because", "∎": r"\blacksquare",
    "□": r"\square",
    # delimiters, dots, primes, degrees
    "⟨": r"\langle", "⟩": r"\rangle", "⌊": r"\lfloor", "⌋": r"\rfloor", "⌈": r"\lceil", "⌉": r"\rceil",
    "⋯": r"\cdots", "⋮": r"\vdots", "⋱": r"\ddots", "′": "'", "″": "''", "‴": "'" * 3, "°": r"^{\circ}",
}

_SUPERSCRIPTS = dict(zip("⁰¹²³⁴⁵⁶⁷⁸⁹⁺⁻⁼⁽⁾ⁱⁿ", "0123456789+-=()in"))
_SUBSCRIPTS = dict(zip("₀₁₂₃₄₅₆₇₈₉₊₋₌₍₎ₐₑₒₓₕₖₗₘₙₚₛₜ", "0123456789+-=()aeoxhklmnpst"))

#: Characters pdflatex typesets through the report's preamble (T1 fonts, utf8 inputenc, textcomp), kept
#: as they are: Latin-1 Supplement and Latin Extended-A less the few letters inputenc has nothing for
#: (found by compiling every one), and typographic punctuation.
_TYPESET_AS_IS = frozenset(
    [chr(c) for c in range(0xA1, 0x180) if c not in (0x126, 0x127, 0x138, 0x13F, 0x140, 0x149, 0x166, 0x167, 0x17F)]
    + list("‐‑‒–—―‖‘’‚“”„‡•…‰‹›€™")
)

#: Spaces that must not break a line, and their LaTeX.
_NO_BREAK_SPACES = {"\u00a0": "~", "\u2007": "~", "\u202f": r"\,"}


def escape_text(text: str) -> str:
    r"""Text from a metric or claims file as LaTeX that pdflatex always compiles and that prints it literally.

    * ASCII: every special character is escaped, so ``\input{...}`` or ``\write18`` print as written.
    * Greek letters (both cases, the final sigma, the variant forms, with accents) and common mathematical
      symbols (``− ± × · ÷ ≤ ≥ ≠ ≈ ∞ ∂ ∇ → ⇒ ∈ ∑ ∫ √ ° ′ ⊗ ∧ ℓ ħ`` ...) become math-mode commands in
      ``\ensuremath{...}``; superscript and subscript digits, signs and letters become ``^{..}`` and ``_{..}``.
    * Accented Latin letters (Latin-1 Supplement, Latin Extended-A) and typographic punctuation
      (``– — ‘ ’ “ ” … €``) stay UTF-8, which the preamble's inputenc and T1 fonts set; a no-break space
      becomes ``~``.
    * Removed: control characters (C0 and C1, DEL) and invisible format characters (zero-width spaces and
      joiners, bidirectional controls, the byte order mark, soft hyphens); blanks run together as one space.
    * Any other character (CJK, emoji, ...) becomes a visible placeholder such as ``\texttt{[U+1F600]}``,
      after which the line may break.
    * A run of more than ``LONG_RUN`` characters without a blank may break after every ``BREAK_EVERY``.
    """
    return " ".join(_breakable_run(run) for run in _runs(str(text)))


def pdf_string(text: str) -> str:
    r"""Text from an input file for the PDF's metadata (hyperref's ``pdftitle``), where nothing is typeset:
    ASCII escaped and invisible characters removed as by :func:`escape_text`, blanks run together, every other
    character kept as UTF-8, which hyperref writes into the PDF string as it is (a lone surrogate, which
    cannot be written, becomes ``[U+D800]``)."""
    def character(c: str) -> str:
        if c < "\x7f":
            return escape_latex(c)
        return f"[U+{ord(c):04X}]" if unicodedata.category(c) == "Cs" else c
    return " ".join("".join(character(c) for c in run) for run in _runs(str(text)))


def without_invisible(text: str) -> str:
    """``text`` with accents composed (NFC) and without control characters other than blanks (C0, DEL, C1)
    and format characters (zero-width spaces and joiners, bidirectional controls, the byte order mark, soft
    hyphens): what neither a report nor a notebook should carry from an input file."""
    return "".join(c for c in unicodedata.normalize("NFC", str(text)) if not _is_invisible(c))


def _runs(text: str) -> list[str]:
    """The runs of characters between blanks, after composing accents and dropping invisible characters."""
    visible = without_invisible(text)
    runs: list[str] = []
    current = ""
    for c in visible:
        if c.isspace() and c not in _NO_BREAK_SPACES:
            if current:
                runs.append(current)
            current = ""
        else:
            current += c
    return runs + [current] if current else runs


def _is_invisible(c: str) -> bool:
    """A control character other than tab, line and page breaks, or a format character (zero-width,
    bidirectional, BOM, soft hyphen)."""
    category = unicodedata.category(c)
    return (category == "Cc" and c not in "\t\n\r\v\f") or category == "Cf"


def _breakable_run(run: str) -> str:
    """LaTeX for a run of characters without blanks; a long run may break after every ``BREAK_EVERY`` characters."""
    pieces = [_character_tex(c) for c in run]
    if len(pieces) > LONG_RUN:
        pieces = [piece + r"\allowbreak{}" if i % BREAK_EVERY == 0 and i < len(pieces) else piece
                  for i, piece in enumerate(pieces, start=1)]
    return "".join(pieces)


def _character_tex(c: str) -> str:
    """LaTeX for one visible character (see :func:`escape_text`)."""
    if c < "\x7f":
        return escape_latex(c)
    if c in _NO_BREAK_SPACES:
        return _NO_BREAK_SPACES[c]
    math = _math_tex(c)
    if math is not None:
        return rf"\ensuremath{{{math}}}"
    if c in _TYPESET_AS_IS:
        return c
    return rf"\texttt{{[U+{ord(c):04X}]}}\allowbreak{{}}"  # a line of CJK text may break after any character


def _math_tex(c: str) -> str | None:
    """Math-mode LaTeX for a Greek letter, a mathematical symbol or a super- or subscript; None for others."""
    if c in _GREEK:
        return _GREEK[c]
    if c in _MATH_SYMBOLS:
        return _MATH_SYMBOLS[c]
    if c in _SUPERSCRIPTS:
        return f"^{{{_SUPERSCRIPTS[c]}}}"
    if c in _SUBSCRIPTS:
        return f"_{{{_SUBSCRIPTS[c]}}}"
    base, *accents = unicodedata.normalize("NFD", c)
    if base in _GREEK and accents and all(a in _GREEK_ACCENTS for a in accents):
        tex = _GREEK[base]
        for accent in accents:
            tex = f"{_GREEK_ACCENTS[accent]}{{{tex}}}"
        return tex
    return None


#: Accents for the first, second and third derivative by time.
_DOTS = {1: r"\dot", 2: r"\ddot", 3: r"\dddot"}


class _Printer(LatexPrinter):
    """sympy's LaTeX printer with free functions written compactly, derivatives by time with dots, and the
    terms of a sum in descending powers of the coordinates.

    ``time`` is the coordinate whose derivatives of one-variable functions are written with dots (\\dot{a});
    derivatives by any other one variable get primes.  ``degrees`` (1 for each coordinate, an abbreviation's
    highest power of them for its symbol) order the terms of sums, after the velocities a term holds
    (``velocity_order``: u^t, u^r, ... in the order of the coordinates)."""

    def __init__(self, settings: dict, time: sympy.Symbol | None = None,
                 degrees: Mapping[sympy.Symbol, sympy.Rational] | None = None,
                 velocity_order: Sequence[sympy.Symbol] = (), braced: Iterable[str] = ()):
        super().__init__(settings)
        self._braced = frozenset(braced)
        self._time = time
        self._degrees = dict(degrees or {})
        self._velocity_order = {symbol: k for k, symbol in enumerate(velocity_order)}

    # a free function is an atom, whatever its name: sympy ranks a function named Lambda (or Sum, Integral,
    # Derivative, ...) by the precedence of the class it shares a name with and would write 2 \left(\Lambda\right)
    def parenthesize(self, item, level, is_neg=False, strict=False) -> str:
        if isinstance(item, AppliedUndef):
            return self._print(item)
        return super().parenthesize(item, level, is_neg, strict)

    def _needs_mul_brackets(self, expr, first=False, last=False) -> bool:
        if isinstance(expr, AppliedUndef):
            return False
        return super()._needs_mul_brackets(expr, first, last)

    def _needs_add_brackets(self, expr) -> bool:
        if isinstance(expr, AppliedUndef):
            return False
        return super()._needs_add_brackets(expr)

    def _as_ordered_terms(self, expr, order=None):
        """sympy's order, stably re-sorted so that higher powers of the coordinates come first (r - 2 M,
        r^2 - 2 M r + a^2, 1 - 2 M / r)."""
        terms = self.ordered_terms(expr, order)
        if any(self._velocity_key(term) for term in terms):
            return terms  # the geodesic equations keep the order of the velocities
        first_positive = next((k for k, term in enumerate(terms) if not term.could_extract_minus_sign()), 0)
        # a sum that is not a factor (those are turned to lead with a positive term) starts with its first
        # positive term: 2 M - r rather than -r + 2 M
        return [terms[first_positive]] + terms[:first_positive] + terms[first_positive + 1:]

    def ordered_terms(self, expr, order=None) -> list:
        """The terms by the velocities they hold, then in descending powers of the coordinates, then in
        sympy's order."""
        terms = super()._as_ordered_terms(expr, order)
        if not self._degrees and not self._velocity_order:
            return terms
        return sorted(terms, key=lambda term: (self._velocity_key(term), -coordinate_degree(term, self._degrees)))

    def _velocity_key(self, term: sympy.Expr) -> tuple[int, ...]:
        """The velocities a term is quadratic (or linear) in, by coordinate order: u^t u^t before u^t u^r."""
        key = []
        for factor in sympy.Mul.make_args(term):
            base, exponent = factor.as_base_exp()
            if base in self._velocity_order and exponent.is_Integer and exponent > 0:
                key += [self._velocity_order[base]] * int(exponent)
        return tuple(sorted(key))

    def _deal_with_super_sub(self, string: str, style: str = "plain") -> str:
        """A name's LaTeX; in braces when it is one the report also uses for a quantity of its own (``braced``),
        which draws the same and tells the metric's symbol from the report's."""
        tex = super()._deal_with_super_sub(string, style)
        return "{" + tex + "}" if tex in self._braced else tex

    def _print_Function(self, expr, exp=None):
        if isinstance(expr, AppliedUndef):
            name = self._deal_with_super_sub(expr.func.__name__)
            return f"{name}^{{{exp}}}" if exp else name
        return super()._print_Function(expr, exp)

    def is_dotted(self, expr) -> bool:
        """A derivative of a function of the time coordinate alone, written with dots."""
        base = expr.expr
        return (self._time is not None and isinstance(base, AppliedUndef) and len(base.args) == 1
                and base.args[0] == self._time and all(v == self._time for v, _ in expr.variable_count))

    def _print_Derivative(self, expr):
        base = expr.expr
        if not isinstance(base, AppliedUndef):
            return super()._print_Derivative(expr)
        name = self._deal_with_super_sub(base.func.__name__)
        order = sum(int(n) for _, n in expr.variable_count)
        if self.is_dotted(expr):
            if order <= 3:
                return _DOTS[order] + "{" + name + "}"
            time = self._print(self._time)
            return rf"\frac{{d^{{{order}}}{name}}}{{d{time}^{{{order}}}}}"
        if len(base.args) == 1:
            marks = "'" * order if order <= 3 else f"^{{({order})}}"
            return f"{name}{marks}"
        subscript = "".join(self._print(v) * int(n) for v, n in expr.variable_count)
        return rf"\partial_{{{subscript}}} {name}"

    def _print_Pow(self, expr):
        if isinstance(expr.base, sympy.Derivative) and expr.exp.is_Integer and expr.exp > 0:
            base = self._print(expr.base)
            if self.is_dotted(expr.base) and not base.startswith(r"\frac"):
                return rf"{base}^{{{self._print(expr.exp)}}}"  # \dot{a}^{2} = (da/dt)^2, unambiguous
            return rf"\left({base}\right)^{{{self._print(expr.exp)}}}"
        return super()._print_Pow(expr)


def coordinate_degree(term: sympy.Expr, degrees: Mapping[sympy.Symbol, sympy.Rational]) -> sympy.Rational:
    """The total power of the coordinates in one term of a sum (r^2 cos(theta) has 2, M/r has -1), each symbol
    counted with its weight in ``degrees``; functions of the coordinates count 0."""
    degree = sympy.Integer(0)
    for factor in sympy.Mul.make_args(term):
        base, exponent = factor.as_base_exp()
        if base in degrees and exponent.is_Rational:
            degree += degrees[base] * exponent
    return degree


class ExpressionWriter:
    """Writes expressions for a report, with the metric's abbreviations."""

    def __init__(self, abbreviations: Sequence[tuple[str, sympy.Expr]] = (), coordinates: Sequence[sympy.Symbol] = (),
                 velocities: dict[str, tuple[sympy.Symbol, str]] | None = None, time: sympy.Symbol | None = None,
                 braced: Iterable[str] = ()):
        """``velocities`` maps a coordinate name to the symbol standing for its rate d x/d tau and the
        LaTeX to print for it (u^{r} for the symbol u_r); ``time`` is the coordinate by which derivatives of
        functions of it alone are written with dots (None: primes for every function of one variable);
        ``braced`` lists LaTeX symbols (\\Lambda) the metric's names print as in braces, {\\Lambda}, so that
        the report can tell them from its own uses of the same symbol."""
        velocities = dict(velocities or {})
        self._prepared: dict[sympy.Expr, sympy.Expr] = {}  # a report prints one expression several ways
        self.velocities = {name: tex for name, (_, tex) in velocities.items()}
        self._abbreviations = [(sympy.Symbol(name), _trig_normal(sympy.expand(value)))
                               for name, value in abbreviations
                               if sympy.expand(value).is_Add and _is_polynomial_like(value)]
        # a sum larger than this (in nodes) is no abbreviation times a number (the sin^2 and cos^2 forms of one
        # abbreviation differ by a few terms), so it is not expanded to be compared with each
        self._match_nodes = 4 * max((_nodes(value) for _, value in self._abbreviations), default=0) + 20
        self._abbreviated: dict[sympy.Expr, sympy.Expr] = {}
        self._coordinates = tuple(coordinates)
        self.time = time
        # terms of sums in descending powers of the coordinates; an abbreviation counts as its highest power
        degrees = {x: sympy.Integer(1) for x in self._coordinates}
        for name, value in self._abbreviations:
            degrees[name] = max(coordinate_degree(term, degrees) for term in value.args)
        self._printer = _Printer({"mul_symbol": None,
                                  "symbol_names": {symbol: tex for symbol, tex in velocities.values()}},
                                 time=time, degrees=degrees,
                                 velocity_order=[symbol for symbol, _ in velocities.values()], braced=braced)

    # public -------------------------------------------------------------
    def inline(self, expr: sympy.Expr) -> str:
        """Plain LaTeX of an expression (abbreviated, signs normalised, unbroken)."""
        return self._printer.doprint(self.prepare(expr))

    def prepare(self, expr: sympy.Expr) -> sympy.Expr:
        """The expression as it is printed: abbreviated, and every factor that is a sum led by a positive
        term (see :meth:`normal_signs`; only when the coordinates are known, which order the terms). Equal to
        ``expr`` once the abbreviations are written out."""
        if expr not in self._prepared:
            abbreviated = self.abbreviate(expr)
            self._prepared[expr] = self.normal_signs(abbreviated) if self._coordinates else abbreviated
        return self._prepared[expr]

    def equation(self, lhs: str, expr: sympy.Expr, whole_terms: bool = False) -> tuple[str, bool]:
        """LaTeX for ``lhs = expr`` and whether it needs the breakable form (``whole_terms``: see
        :meth:`breakable`)."""
        short = self.inline(expr)
        if len(short) + len(lhs) <= SHORT_LATEX:
            return f"{lhs} = {short}", False
        return f"{lhs} = {self.breakable(expr, whole_terms=whole_terms)}", True

    def breakable(self, expr: sympy.Expr, short_denominator: int = SHORT_DENOMINATOR,
                  whole_terms: bool = False) -> str:
        """LaTeX in which TeX may break lines after a top-level + or -.

        Fractions whose denominator is longer than ``short_denominator`` characters are written as a
        product with a factor to the power -1, which can break; narrow table cells pass a smaller width.
        ``whole_terms``: every top-level term short enough to fit a line is a TeX group, so that lines
        break only between terms, never inside a bracket."""
        prepared = self.prepare(expr)
        if whole_terms and isinstance(prepared, sympy.Add):
            return self._sum(self._printer._as_ordered_terms(prepared), short_denominator, whole=True)
        return self._breakable(prepared, short_denominator)

    def fits(self, expr: sympy.Expr, width: int) -> str:
        """Plain LaTeX when it is at most ``width`` characters long, otherwise the breakable form."""
        text = self.inline(expr)
        return text if len(text) <= width else self.breakable(expr, max(width // 2, 12))

    def symbol(self, name: str) -> str:
        return self._printer.doprint(sympy.Symbol(name))

    # abbreviations ------------------------------------------------------
    def abbreviate(self, expr: sympy.Expr) -> sympy.Expr:
        """Replace each factor equal to a declared abbreviation (or its negative) by its name."""
        if not self._abbreviations or expr.is_Atom:
            return expr
        if isinstance(expr, sympy.Add):
            if expr not in self._abbreviated:  # the same factor recurs in many components
                match = self._match(expr) if _nodes(expr, self._match_nodes + 1) <= self._match_nodes else None
                if match is None:
                    plain = sympy.Add(*[self.abbreviate(a) for a in expr.args])
                    match = self._shortest_in_abbreviations(expr, plain)
                self._abbreviated[expr] = match
            return self._abbreviated[expr]
        if isinstance(expr, sympy.Derivative):
            return sympy.Derivative(self.abbreviate(expr.expr), *expr.variable_count)
        if isinstance(expr, (sympy.Mul, sympy.Pow)):
            return expr.func(*[self.abbreviate(a) for a in expr.args])
        return expr

    def _shortest_in_abbreviations(self, polynomial: sympy.Expr, plain: sympy.Expr) -> sympy.Expr:
        """The polynomial written in powers of one abbreviation, P = c_0 + c_1 A + c_2 A^2 + ... (the c_k by
        repeated division by A's value in the coordinates, sin^2 written 1 - cos^2 and back where shorter),
        when that prints shorter than ``plain``; exact: the written-out form is checked to equal P."""
        if len(polynomial.args) > ABBREVIATION_TERMS or not _is_polynomial_like(polynomial):
            return plain
        best, best_length = plain, len(self._printer.doprint(plain))
        normal = _trig_normal(sympy.expand(polynomial))
        for name, value in self._abbreviations:
            try:
                found = sympy.parallel_poly_from_expr([normal, value])[1].gens
                # the coordinates first, so that division takes away their highest powers
                gens = sorted(found, key=lambda g: (g not in self._coordinates, sympy.default_sort_key(g)))
                coefficients, rest = [], normal
                for _ in range(4):
                    (quotient,), remainder = sympy.reduced(rest, [value], *gens, order="lex")
                    coefficients.append(remainder)
                    rest = quotient
                    if quotient == 0:
                        break
                else:
                    continue
            except BasePolynomialError:
                continue
            if len(coefficients) < 2:
                continue
            candidate = sympy.Add(*[_sin_normal(c) * name**k for k, c in enumerate(coefficients)])
            if sympy.expand(_trig_normal(sympy.expand(candidate.subs(name, value))) - normal) != 0:
                continue
            length = len(self._printer.doprint(candidate))
            if length < best_length:
                best, best_length = candidate, length
        return best

    def _match(self, polynomial: sympy.Expr):
        """The abbreviation times a rational number, when the polynomial is one."""
        content, primitive = _trig_normal(sympy.expand(polynomial)).as_content_primitive()
        for name, value in self._abbreviations:
            value_content, value_primitive = value.as_content_primitive()
            for sign in (1, -1):
                if sympy.expand(primitive - sign * value_primitive) == 0:
                    return sign * content / value_content * name
        return None

    # signs -------------------------------------------------------------
    def normal_signs(self, expr: sympy.Expr) -> sympy.Expr:
        """The same expression with every sum that is a factor (in a numerator or a denominator, to an
        integer power) negated where that leaves it with fewer negative terms or, as many, a positive term
        first in printing order, the signs moved to the front: M/(r (2M - r)) becomes -M/(r (r - 2M)).
        Exact: only factors (-1)^k move."""
        if expr.is_Atom or isinstance(expr, AppliedUndef):
            return expr
        if isinstance(expr, sympy.Add):
            return sympy.Add(*[self.normal_signs(term) for term in expr.args])
        if isinstance(expr, sympy.Derivative):
            return sympy.Derivative(self.normal_signs(expr.expr), *expr.variable_count)
        if isinstance(expr, (sympy.Mul, sympy.Pow)):
            sign, factors = 1, []
            for factor in sympy.Mul.make_args(expr):
                base, exponent = factor.as_base_exp()
                if isinstance(base, sympy.Add):
                    base = self.normal_signs(base)
                    if exponent.is_Integer and self._led_by_minus(base):
                        base, sign = -base, -sign if int(exponent) % 2 else sign
                    factors.append(sympy.Pow(base, exponent))
                elif isinstance(factor, sympy.Pow):
                    factors.append(sympy.Pow(self.normal_signs(base), exponent))
                else:
                    factors.append(self.normal_signs(factor))
            return sympy.Mul(sign, *factors) if sign == -1 else sympy.Mul(*factors)
        if isinstance(expr, sympy.Function) and expr.args:
            return expr.func(*[self.normal_signs(a) for a in expr.args])
        return expr

    def _led_by_minus(self, total: sympy.Add) -> bool:
        """Whether the sum reads better negated: more negative terms than positive ones, or as many and a
        negative one first in printing order (2 M - r is turned, -r + 2 M; r^2 - 2 M r + a^2 is not)."""
        terms = self._printer.ordered_terms(total)
        negative = sum(1 for term in terms if term.could_extract_minus_sign())
        if 2 * negative != len(terms):
            return 2 * negative > len(terms)
        return bool(terms[0].could_extract_minus_sign())

    def definition(self, name: str, value: sympy.Expr) -> str:
        """LaTeX for ``name = value`` without abbreviating the value by itself."""
        return f"{self.symbol(name)} = {self._printer.doprint(value)}"

    # breaking -----------------------------------------------------------
    def _breakable(self, expr: sympy.Expr, short: int = SHORT_DENOMINATOR) -> str:
        p = self._printer
        if isinstance(expr, sympy.Add):
            return self._sum(p._as_ordered_terms(expr), short)
        if isinstance(expr, sympy.Derivative) and not isinstance(expr.expr, AppliedUndef):
            variables = "".join(p.doprint(v) * int(n) for v, n in expr.variable_count)
            return rf"\partial_{{{variables}}}\bigl(" + self._breakable(expr.expr, short) + r"\bigr)"
        if not isinstance(expr, sympy.Mul):
            return p.doprint(expr)
        coefficient, rest = expr.as_coeff_Mul()
        numerator, denominator = [], []
        for factor in sympy.Mul.make_args(rest):
            base, exponent = factor.as_base_exp()
            if exponent.is_Rational and exponent < 0:
                denominator.append(base ** (-exponent))
            else:
                numerator.append(factor)
        sign = "-" if coefficient < 0 else ""
        coefficient = abs(coefficient)
        def breaks(f):
            base = f.as_base_exp()[0]
            return (isinstance(base, sympy.Add) or isinstance(f, sympy.Derivative)
                    or (isinstance(base, sympy.Abs) and isinstance(base.args[0], sympy.Add)))
        simple = [f for f in numerator if not breaks(f)]
        sums = [f for f in numerator if breaks(f)]
        top = sympy.Mul(coefficient.p, *simple)
        bottom = sympy.Mul(coefficient.q, *denominator)
        top_tex = p.doprint(top)
        parts = []
        if bottom != 1:
            bottom_tex = p.doprint(bottom)
            # a short denominator is always a fraction (a long product above it cannot break either way)
            if visible_length(bottom_tex) <= short or not any(isinstance(f.as_base_exp()[0], sympy.Add)
                                                               for f in denominator):
                parts.append(rf"\frac{{{top_tex}}}{{{bottom_tex}}}")
            else:
                if top != 1:
                    parts.append(self._breakable(top, short))
                parts.append(r"\bigl(" + self._breakable(bottom, short) + r"\bigr)^{-1}")
        elif top != 1 or not sums:
            parts.append(top_tex)
        for factor in sums:
            if isinstance(factor, sympy.Derivative):
                parts.append(self._breakable(factor, short))
                continue
            base, exponent = factor.as_base_exp()
            if isinstance(base, sympy.Abs):  # |a + b|: TeX may break inside \bigl| \bigr| but not \left| \right|
                inner = r"\bigl|" + self._sum(p._as_ordered_terms(base.args[0]), short) + r"\bigr|"
            else:
                inner = r"\bigl(" + self._sum(p._as_ordered_terms(base), short) + r"\bigr)"
            parts.append(inner if exponent == 1 else inner + f"^{{{p.doprint(exponent)}}}")
        return sign + r"\,".join(parts)

    def _sum(self, terms: Iterable[sympy.Expr], short: int = SHORT_DENOMINATOR, whole: bool = False) -> str:
        """Terms joined by + and -; ``whole``: a term of at most WHOLE_TERM visible characters is printed
        as one fraction in a TeX group, inside which no line breaks."""
        out = []
        for i, term in enumerate(terms):
            text = None
            if whole:
                inline = self._printer.doprint(term)
                if visible_length(inline) <= WHOLE_TERM:
                    negative = inline.startswith("-")
                    text = ("-" if negative else "") + "{" + inline[1:].lstrip() + "}" if negative else "{" + inline + "}"
            if text is None:
                text = (self._breakable(term, short) if isinstance(term, (sympy.Mul, sympy.Derivative))
                        else self._printer.doprint(term))
            if text.startswith("-"):
                out.append(("- " if i else "-") + text[1:].lstrip())
            else:
                out.append(("+ " if i else "") + text)
        return " ".join(out)


#: Commands that take no room of their own (sizes of brackets, spacing).
_INVISIBLE_COMMANDS = re.compile(r"\\(?:left|right|bigl|bigr|displaystyle|,|;|!)|[{}\s^_]")
_COMMAND = re.compile(r"\\[A-Za-z]+")
#: A top-level term of a geodesic equation up to this many visible characters is kept on one line (short
#: enough for a column of a two-column paper).
WHOLE_TERM = 30


def visible_length(tex: str) -> int:
    """A rough count of the characters a line of math LaTeX shows: bracket sizes, braces, spaces and script
    marks take none, a command (a Greek letter, \\sin) one or three; fractions count both levels."""
    stripped = _INVISIBLE_COMMANDS.sub("", tex.replace(r"\frac", ""))
    return len(_COMMAND.sub(lambda m: "xxx" if len(m.group()) > 4 and m.group() not in _GREEK_COMMANDS else "x",
                            stripped))


_GREEK_COMMANDS = frozenset(_GREEK.values())


def _nodes(expr: sympy.Expr, most: int | None = None) -> int:
    """The number of nodes of an expression tree, counted up to ``most``."""
    count = 0
    for _ in sympy.preorder_traversal(expr):
        count += 1
        if most is not None and count >= most:
            break
    return count


def _is_polynomial_like(expr: sympy.Expr) -> bool:
    return all(not (isinstance(f, sympy.Pow) and f.exp.is_negative) for f in sympy.preorder_traversal(expr)
               if isinstance(f, sympy.Pow))


#: Sums with more terms than this are not rewritten in powers of an abbreviation (it would cost too much).
ABBREVIATION_TERMS = 40


def _sin_normal(expr: sympy.Expr) -> sympy.Expr:
    """``expr`` (a polynomial in cos x) with cos^2 x written 1 - sin^2 x where that is shorter: a^2 cos^2 - a^2
    becomes -a^2 sin^2."""
    cosines = [c for c in expr.atoms(sympy.cos)]
    if not cosines:
        return expr
    other = sympy.expand(expr.subs({c**2: 1 - sympy.sin(c.args[0]) ** 2 for c in cosines}))
    if other.has(*cosines):
        return expr
    return other if sympy.count_ops(other) < sympy.count_ops(expr) else expr


def _trig_normal(expr: sympy.Expr) -> sympy.Expr:
    """Write sin^2 x as 1 - cos^2 x so that equal polynomials compare equal."""
    for s in expr.atoms(sympy.sin):
        expr = expr.subs(s**2, 1 - sympy.cos(s.args[0]) ** 2)
    return sympy.expand(expr)


#: LaTeX head and index placement per quantity: (symbol, number of upper indices).
def frame_index(name: str, writer: ExpressionWriter) -> str:
    """A frame index named after a coordinate, e.g. (\theta)."""
    return "{(" + writer.symbol(name) + ")}"


def component_symbol(quantity: str, names: Sequence[str], writer: ExpressionWriter, positions: str = "") -> str:
    """The LaTeX symbol of a component, e.g. Gamma^r_{tt} for ("christoffel", ["r", "t", "t"]), from the
    quantity's symbol and index positions in the registry; ``positions`` ("ud", ...) places the indices of
    a tensor otherwise (G^t{}_t for ("einstein", ["t", "t"], positions="ud"))."""
    q = QUANTITIES[quantity]
    if positions and names and set(positions) <= {"u", "d"} and len(positions) == len(names):
        return indexed_tex(q.symbol, positions, ["{" + writer.symbol(n) + "}" for n in names], q.staggered)
    if q.positions == "v":  # du^a/dtau
        velocity = writer.velocities.get(names[0]) or writer.symbol(f"u_{names[0]}")
        return r"\frac{d" + velocity + r"}{d\tau}"
    if q.in_frame and len(names) == 1:
        return q.symbol + "_" + frame_index(names[0], writer)
    if q.in_frame:
        return q.symbol + "_{" + "".join(frame_index(n, writer) for n in names) + "}"
    if not names:
        return q.symbol
    tex = ["{" + writer.symbol(n) + "}" for n in names]
    up, down = "".join(tex[:q.upper]), "".join(tex[q.upper:])
    if not down:
        return rf"{q.symbol}^{{{up}}}"
    if not up:
        return rf"{q.symbol}_{{{down}}}"
    spacer = "{}" if q.staggered else ""  # R^a{}_{bcd}: the lower indices start after the upper ones
    return rf"{q.symbol}^{{{up}}}{spacer}_{{{down}}}"


def has_component_symbol(quantity: str) -> bool:
    q = QUANTITIES.get(quantity)
    return q is not None and q.positions != "n" and quantity != "metric_derivatives"


def mapping_lines(mapping: Mapping[str, sympy.Expr], quantity: str, writer: ExpressionWriter) -> list[tuple[str, bool]]:
    """One equation per component of a result keyed by coordinate names."""
    lines = []
    for key, value in mapping.items():
        if quantity == "metric_derivatives":
            k, pair = key.split(":")
            i, j = pair.split(",")
            lhs = rf"\partial_{{{writer.symbol(k)}}} g_{{{{{writer.symbol(i)}}}{{{writer.symbol(j)}}}}}"
        else:
            lhs = component_symbol(quantity, key.split(","), writer)
        lines.append(writer.equation(lhs, value))
    return lines


#: A displayed general formula longer than this many characters of LaTeX source is broken before a
#: top-level + or - so that it fits a column of a two-column paper.
DISPLAY_SOURCE_WIDTH = 110


def display_formula(formula: str) -> str:
    r"""A general formula as a display that fits a narrow column: pieces separated by a top-level
    ``,\quad`` go on lines of their own, and a piece longer than DISPLAY_SOURCE_WIDTH source characters
    breaks before a top-level ``+`` or ``-`` after its ``=``; one line is ``\[...\]``, several ``gather*``."""
    lines = []
    for piece in _top_level_split(formula, r",\quad"):
        lines.extend(_broken_at_signs(piece.strip()))
    if len(lines) == 1:
        return rf"\[ {lines[0]} \]"
    return "\\begin{gather*}\n" + " \\\\\n".join(lines) + "\n\\end{gather*}"


def _top_level_split(text: str, separator: str) -> list[str]:
    """``text`` split at ``separator`` where it stands outside every brace group."""
    pieces, depth, start, position = [], 0, 0, 0
    while position < len(text):
        if text[position] == "{":
            depth += 1
        elif text[position] == "}":
            depth -= 1
        elif depth == 0 and text.startswith(separator, position):
            pieces.append(text[start:position])
            position += len(separator)
            start = position
            continue
        position += 1
    pieces.append(text[start:])
    return pieces


def _broken_at_signs(piece: str) -> list[str]:
    """A long ``lhs = a + b - c`` as lines of at most DISPLAY_SOURCE_WIDTH characters where possible,
    broken before a top-level ``+``/``-`` after the first top-level ``=``; continuation lines indented."""
    if len(piece) <= DISPLAY_SOURCE_WIDTH:
        return [piece]
    breaks, depth, seen_equals = [], 0, False
    for position, character in enumerate(piece):
        if character == "{":
            depth += 1
        elif character == "}":
            depth -= 1
        elif depth == 0 and character == "=":
            seen_equals = True
        elif depth == 0 and seen_equals and character in "+-" and piece[position - 1:position] == " ":
            breaks.append(position)
    lines, start = [], 0
    for number, position in enumerate(breaks):
        following = breaks[number + 1] if number + 1 < len(breaks) else len(piece)
        if following - start > DISPLAY_SOURCE_WIDTH and position > start:
            lines.append(piece[start:position].rstrip())
            start = position
    lines.append(piece[start:])
    return [lines[0]] + [r"\qquad " + line for line in lines[1:]]
