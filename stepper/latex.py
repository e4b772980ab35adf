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

import unicodedata
from typing import Iterable, Mapping, Sequence

import sympy
from pylatex.utils import escape_latex
from sympy.core.function import AppliedUndef
from sympy.printing.latex import LatexPrinter

from .quantities import QUANTITIES, indexed_tex

#: Results whose LaTeX is shorter than this go into a display equation as is.
SHORT_LATEX = 90
#: Denominators longer than this are written as a factor with exponent -1.
SHORT_DENOMINATOR = 70


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


class _Printer(LatexPrinter):
    """sympy's LaTeX printer with free functions written compactly."""

    def _print_Function(self, expr, exp=None):
        if isinstance(expr, AppliedUndef):
            name = self._deal_with_super_sub(expr.func.__name__)
            return f"{name}^{{{exp}}}" if exp else name
        return super()._print_Function(expr, exp)

    def _print_Derivative(self, expr):
        base = expr.expr
        if not isinstance(base, AppliedUndef):
            return super()._print_Derivative(expr)
        name = self._deal_with_super_sub(base.func.__name__)
        if len(base.args) == 1:
            order = sum(int(n) for _, n in expr.variable_count)
            marks = "'" * order if order <= 3 else f"^{{({order})}}"
            return f"{name}{marks}"
        subscript = "".join(self._print(v) * int(n) for v, n in expr.variable_count)
        return rf"\partial_{{{subscript}}} {name}"

    def _print_Pow(self, expr):
        if isinstance(expr.base, sympy.Derivative) and expr.exp.is_Integer and expr.exp > 0:
            return rf"\left({self._print(expr.base)}\right)^{{{self._print(expr.exp)}}}"
        return super()._print_Pow(expr)


class ExpressionWriter:
    """Writes expressions for a report, with the metric's abbreviations."""

    def __init__(self, abbreviations: Sequence[tuple[str, sympy.Expr]] = (), coordinates: Sequence[sympy.Symbol] = (),
                 velocities: dict[str, tuple[sympy.Symbol, str]] | None = None):
        """``velocities`` maps a coordinate name to the symbol standing for its rate d x/d tau and the
        LaTeX to print for it (u_{r_{s}} for the symbol u_r_s)."""
        velocities = dict(velocities or {})
        self.velocities = {name: tex for name, (_, tex) in velocities.items()}
        self._printer = _Printer({"mul_symbol": None,
                                  "symbol_names": {symbol: tex for symbol, tex in velocities.values()}})
        self._abbreviations = [(sympy.Symbol(name), _trig_normal(sympy.expand(value)))
                               for name, value in abbreviations
                               if sympy.expand(value).is_Add and _is_polynomial_like(value)]
        self._coordinates = tuple(coordinates)

    # public -------------------------------------------------------------
    def inline(self, expr: sympy.Expr) -> str:
        """Plain LaTeX of an expression (abbreviated, unbroken)."""
        return self._printer.doprint(self.abbreviate(expr))

    def equation(self, lhs: str, expr: sympy.Expr) -> tuple[str, bool]:
        """LaTeX for ``lhs = expr`` and whether it needs the breakable form."""
        short = self.inline(expr)
        if len(short) + len(lhs) <= SHORT_LATEX:
            return f"{lhs} = {short}", False
        return f"{lhs} = {self.breakable(expr)}", True

    def breakable(self, expr: sympy.Expr, short_denominator: int = SHORT_DENOMINATOR) -> str:
        """LaTeX in which TeX may break lines after a top-level + or -.

        Fractions whose numerator or denominator is longer than ``short_denominator``
        characters are written as a product with a factor to the power -1, which
        can break; narrow table cells pass a smaller width."""
        return self._breakable(self.abbreviate(expr), short_denominator)

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
            match = self._match(expr)
            if match is not None:
                return match
            return sympy.Add(*[self.abbreviate(a) for a in expr.args])
        if isinstance(expr, sympy.Derivative):
            return sympy.Derivative(self.abbreviate(expr.expr), *expr.variable_count)
        if isinstance(expr, (sympy.Mul, sympy.Pow)):
            return expr.func(*[self.abbreviate(a) for a in expr.args])
        return expr

    def _match(self, polynomial: sympy.Expr):
        """The abbreviation times a rational number, when the polynomial is one."""
        content, primitive = _trig_normal(sympy.expand(polynomial)).as_content_primitive()
        for name, value in self._abbreviations:
            value_content, value_primitive = value.as_content_primitive()
            for sign in (1, -1):
                if sympy.expand(primitive - sign * value_primitive) == 0:
                    return sign * content / value_content * name
        return None

    def definition(self, name: str, value: sympy.Expr) -> str:
        """LaTeX for ``name = value`` without abbreviating the value by itself."""
        return f"{self.symbol(name)} = {self._printer.doprint(value)}"

    # breaking -----------------------------------------------------------
    def _breakable(self, expr: sympy.Expr, short: int = SHORT_DENOMINATOR) -> str:
        p = self._printer
        if isinstance(expr, sympy.Add):
            return self._sum(expr.as_ordered_terms(), short)
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
            if len(bottom_tex) <= short and len(top_tex) <= short:
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
                inner = r"\bigl|" + self._sum(base.args[0].as_ordered_terms(), short) + r"\bigr|"
            else:
                inner = r"\bigl(" + self._sum(base.as_ordered_terms(), short) + r"\bigr)"
            parts.append(inner if exponent == 1 else inner + f"^{{{p.doprint(exponent)}}}")
        return sign + r"\,".join(parts)

    def _sum(self, terms: Iterable[sympy.Expr], short: int = SHORT_DENOMINATOR) -> str:
        out = []
        for i, term in enumerate(terms):
            text = (self._breakable(term, short) if isinstance(term, (sympy.Mul, sympy.Derivative))
                    else self._printer.doprint(term))
            if text.startswith("-"):
                out.append(("- " if i else "-") + text[1:].lstrip())
            else:
                out.append(("+ " if i else "") + text)
        return " ".join(out)


def _is_polynomial_like(expr: sympy.Expr) -> bool:
    return all(not (isinstance(f, sympy.Pow) and f.exp.is_negative) for f in sympy.preorder_traversal(expr)
               if isinstance(f, sympy.Pow))


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
