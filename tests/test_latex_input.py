r"""Tests for stepper.latex_input: the safe reader of claimed results in LaTeX.

Expected values are built by hand from sympy objects and Python operators,
never by reading text with sympy, so the reader is checked against an
independent construction.  The curvature values below (connection
coefficients and the invariant R_abcd R^abcd outside a compact star, the
flat expanding universe's Ricci scalar, the spinning black hole's Sigma and
Delta) are common practice, written the way papers print them.
"""

from __future__ import annotations

import ast
import builtins
import inspect
from pathlib import Path

import pytest
import sympy
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

import stepper.guards as guards_module
import stepper.latex_input as latex_input_module
from stepper.errors import InputError
from stepper.latex import ExpressionWriter
from stepper.latex_input import FUNCTION_COMMANDS, GREEK_LETTERS, parse_latex
from stepper.parse import (
    ELEMENTARY_FUNCTIONS,
    MAX_CONSTANT_NESTING,
    MAX_DEPTH,
    MAX_TEXT_LENGTH,
    Vocabulary,
    parse_expression,
)

t, r, theta, phi, M, alpha = sympy.symbols("t r theta phi M alpha")
r_s, r0, chi, k = sympy.symbols("r_s r0 chi k")
a = sympy.Function("a")(t)
Phi = sympy.Function("Phi")(r)
g = sympy.Function("g")(t, r)
SIGMA = r**2 + alpha**2 * sympy.cos(theta) ** 2
DELTA = r**2 - 2 * M * r + alpha**2

VOCABULARY = Vocabulary(
    symbols={"t": t, "r": r, "theta": theta, "phi": phi, "M": M, "alpha": alpha,
             "r_s": r_s, "r0": r0, "chi": chi, "k": k},
    functions={"a": a, "Phi": Phi, "g": g},
    abbreviations={"Sigma": SIGMA, "Delta": DELTA},
    differentials={"dt": sympy.Symbol("dt")},
)
WHERE = "claimed Ricci scalar"

sin, cos, cot, exp, log, sqrt = sympy.sin, sympy.cos, sympy.cot, sympy.exp, sympy.log, sympy.sqrt
half = sympy.Rational(1, 2)
a_dot = sympy.Derivative(a, t)
a_ddot = sympy.Derivative(a, (t, 2))


def parse(text: str, vocabulary: Vocabulary = VOCABULARY) -> sympy.Expr:
    return parse_latex(text, vocabulary, WHERE)


def error_of(text: str, vocabulary: Vocabulary = VOCABULARY) -> str:
    with pytest.raises(InputError) as caught:
        parse(text, vocabulary)
    message = str(caught.value)
    assert "\n" not in message and "\r" not in message
    assert WHERE in message
    return message


def assert_names(message: str, fragment: str, column: int) -> None:
    assert fragment in message, message
    assert f"at column {column} of {WHERE}" in message, message


# -------------------------------------------------- results as papers print them

PUBLISHED = [
    # outside a compact star: connection coefficients, R_abcd R^abcd (common practice)
    (r"\frac{M(r-2M)}{r^{3}}", M * (r - 2 * M) / r**3),
    (r"\frac{M}{r(r-2M)}", M / (r * (r - 2 * M))),
    (r"-\frac{M}{r(r-2M)}", -M / (r * (r - 2 * M))),
    (r"-(r-2M)", -(r - 2 * M)),
    (r"-(r-2M)\sin^2\theta", -((r - 2 * M) * sin(theta) ** 2)),
    (r"\cot\theta", cot(theta)),
    (r"-\sin\theta\cos\theta", -sin(theta) * cos(theta)),
    (r"\frac{2M}{r^2(r-2M)}", 2 * M / (r**2 * (r - 2 * M))),
    (r"\frac{48M^2}{r^6}", 48 * M**2 / r**6),
    (r"\frac{48 M^{2}}{r^{6}}", 48 * M**2 / r**6),
    (r"\left(1-\frac{2M}{r}\right)^{-1}", 1 / (1 - 2 * M / r)),
    (r"\sqrt{1-\frac{2M}{r}}", sqrt(1 - 2 * M / r)),
    (r"1-\frac{2M}{r}", 1 - 2 * M / r),
    (r"-\left(1 - \frac{2 M}{r}\right)", -(1 - 2 * M / r)),
    (r"r^2\sin^2\theta", r**2 * sin(theta) ** 2),
    # flat expanding universe: Ricci scalar and connection coefficients (common practice)
    (r"6\left(\frac{\ddot a}{a}+\frac{\dot a^2}{a^2}\right)",
     6 * (a_ddot / a + a_dot**2 / a**2)),
    (r"6\left(\frac{\ddot{a}}{a} + \frac{\dot{a}^{2}}{a^{2}}\right)",
     6 * (a_ddot / a + a_dot**2 / a**2)),
    (r"\frac{6}{a^2}\left(a\ddot a+\dot a^2\right)", 6 / a**2 * (a * a_ddot + a_dot**2)),
    (r"a\dot a", a * a_dot),
    (r"\frac{\dot a}{a}", a_dot / a),
    (r"\frac{a'}{a}", a_dot / a),
    (r"\frac{a''(t)}{a(t)}", a_ddot / a),
    # spinning black hole (common practice)
    (r"\frac{\Sigma}{\Delta}", SIGMA / DELTA),
    (r"\frac{r^2+\alpha^2\cos^2\theta}{r^2-2Mr+\alpha^2}", SIGMA / DELTA),
    (r"r^2 + \alpha^2 \cos^2\theta", SIGMA),
    (r"-\frac{2M\alpha r\sin^2\theta}{\Sigma}", -2 * M * alpha * r * sin(theta) ** 2 / SIGMA),
    (r"\left(r^2+\alpha^2+\frac{2Mr\alpha^2\sin^2\theta}{\Sigma}\right)\sin^2\theta",
     (r**2 + alpha**2 + 2 * M * r * alpha**2 * sin(theta) ** 2 / SIGMA) * sin(theta) ** 2),
    # other everyday shapes
    (r"\frac12 r", half * r),
    (r"\frac{1}{2}r^2", half * r**2),
    (r"e^{-2M/r}", exp(-2 * M / r)),
    (r"e^{2\Phi}", exp(2 * Phi)),
    (r"e^{2\Phi(r)}", exp(2 * Phi)),
    (r"2\Phi'", 2 * sympy.Derivative(Phi, r)),
    (r"\exp\left(-\frac{2M}{r}\right)", exp(-2 * M / r)),
    (r"\frac{1}{r_s}", 1 / r_s),
]


@pytest.mark.parametrize(("text", "expected"), PUBLISHED)
def test_published_looking_results(text: str, expected: sympy.Expr) -> None:
    value = parse(text)
    assert value == expected, (text, value)
    assert not value.atoms(sympy.Float)


# ------------------------------------------------------------- the grammar

GRAMMAR_CASES = [
    # juxtaposition, written operators, precedence
    ("2M", 2 * M),
    ("Mr", M * r),
    ("2Mr", 2 * M * r),
    ("M(r-2M)", M * (r - 2 * M)),
    ("(r-M)(r+M)", (r - M) * (r + M)),
    ("[r-M][r+M]", (r - M) * (r + M)),
    (r"\left[r-M\right]^2", (r - M) ** 2),
    (r"\bigl(r-M\bigr)\Bigl(r+M\Bigr)", (r - M) * (r + M)),
    (r"\Big(r\Big)^2", r**2),
    (r"\biggl[ r \biggr]", r),
    ("{r}", r),
    ("{r+M}^2", (r + M) ** 2),
    ("r+M", r + M),
    ("r-M-t", r - M - t),
    ("-r^2", -(r**2)),
    ("--r", r),
    ("r*M", r * M),
    (r"r\cdot M", r * M),
    (r"2\times 3", sympy.Integer(6)),
    (r"2\cdot 3M", 6 * M),
    ("r/M", r / M),
    ("2M/r", 2 * M / r),
    ("r/M/t", r / M / t),
    ("r/M*t", r / M * t),
    (r"r \cdot -M", -r * M),
    (r"M/\sin\theta", M / sin(theta)),
    ("r^{-1}", 1 / r),
    ("r^{n+1}".replace("n", "k"), r ** (k + 1)),
    ("2^{10}", sympy.Integer(1024)),
    ("r^2_s", r_s**2),
    ("r_s^2", r_s**2),
    ("2.5M", sympy.Rational(5, 2) * M),
    ("0.125", sympy.Rational(1, 8)),
    (".5r", half * r),
    ("007", sympy.Integer(7)),
    # fractions and roots
    (r"\frac12", half),
    (r"\frac 1 2", half),
    (r"\frac1r", 1 / r),
    (r"\frac\pi2", sympy.pi / 2),
    (r"\frac{1}2", half),
    (r"\dfrac{M}{r}", M / r),
    (r"\tfrac{M}{r}", M / r),
    (r"\frac{M}{r}^2", (M / r) ** 2),
    (r"\frac{\frac{1}{2}}{\frac{3}{4}}", sympy.Rational(2, 3)),
    (r"\sqrt{r}", sqrt(r)),
    (r"\sqrt r", sqrt(r)),
    (r"\sqrt2", sqrt(2)),
    (r"\sqrt[3]{r}", r ** sympy.Rational(1, 3)),
    (r"\sqrt[3]{8}", sympy.Integer(2)),
    (r"\sqrt[k]{r}", r ** (1 / k)),
    (r"\sqrt{r}^3", r ** sympy.Rational(3, 2)),
    # functions and their arguments
    (r"\sin\theta", sin(theta)),
    (r"\sin \theta", sin(theta)),
    (r"\sin(\theta)", sin(theta)),
    (r"\sin{\theta}", sin(theta)),
    (r"\sin\left(\theta\right)", sin(theta)),
    (r"\sin[\theta]", sin(theta)),
    (r"\sin\,\theta", sin(theta)),
    (r"\cos 2\theta", cos(2 * theta)),
    (r"\cos2\theta", cos(2 * theta)),
    (r"\cos 2\theta\phi", cos(2 * theta * phi)),
    (r"\sin\theta\cos\theta", sin(theta) * cos(theta)),
    (r"\sin\theta\,r", sin(theta) * r),
    (r"\sin\theta\;r", sin(theta) * r),
    (r"\sin\theta~r", sin(theta) * r),
    (r"\sin\theta(r-M)", sin(theta) * (r - M)),
    (r"\sin(\theta)r", sin(theta) * r),
    (r"\sin\theta + r", sin(theta) + r),
    (r"\sin\theta/r", sin(theta) / r),
    (r"\sin\theta^2", sin(theta**2)),
    (r"\sin{\theta}^2", sin(theta**2)),
    (r"\sin(\theta)^2", sin(theta) ** 2),
    (r"{\sin\theta}^2", sin(theta) ** 2),
    (r"\left(\sin\theta\right)^{2}", sin(theta) ** 2),
    (r"\sin^2\theta", sin(theta) ** 2),
    (r"\sin^{2}(\theta)", sin(theta) ** 2),
    (r"\sin^{2}{\left(\theta \right)}", sin(theta) ** 2),
    (r"\log{\left(r \right)}^{2}", log(r) ** 2),
    (r"\sin{(\theta)}^2", sin(theta) ** 2),
    (r"\sin{(\theta)^2}", sin(theta**2)),
    (r"\sin{(\theta) r}", sin(theta * r)),
    (r"\sin{(\theta)}\cos\theta", sin(theta) * cos(theta)),
    (r"\sin^2 2\theta", sin(2 * theta) ** 2),
    (r"\sin^{\frac32}\theta", sin(theta) ** sympy.Rational(3, 2)),
    (r"\sin\frac{\theta}{2}", sin(theta / 2)),
    (r"\cos\frac12\theta", cos(theta / 2)),
    (r"\sin\theta\frac{M}{r}", sin(theta) * M / r),
    (r"\sin\theta\sqrt{r}", sin(theta) * sqrt(r)),
    (r"\sin\sqrt{r}", sin(sqrt(r))),
    (r"\ln\ln r", log(log(r))),
    (r"\ln r", log(r)),
    (r"\log r", log(r)),
    (r"\exp{-r}", exp(-r)),
    (r"\exp(2\Phi)", exp(2 * Phi)),
    (r"\tan\theta\sec\theta\csc\theta", sympy.tan(theta) * sympy.sec(theta) * sympy.csc(theta)),
    (r"\sinh r\cosh r", sympy.sinh(r) * sympy.cosh(r)),
    (r"\tanh(r)\coth(r)", sympy.tanh(r) * sympy.coth(r)),
    (r"\sin a", sin(a)),
    (r"\sin a(t)", sin(a)),
    (r"\operatorname{sin}\theta", sin(theta)),
    (r"\mathrm{cos}(\theta)", cos(theta)),
    # names
    (r"\theta", theta),
    (r"\alpha^2\cos^2\theta", alpha**2 * cos(theta) ** 2),
    (r"\varphi", phi),
    (r"\vartheta", theta),
    (r"\chi", chi),
    (r"\pi", sympy.pi),
    (r"\pi r^2", sympy.pi * r**2),
    ("e", sympy.E),
    ("e^{r}", exp(r)),
    (r"\mathrm{e}^{r}", exp(r)),
    (r"\mathrm{Sigma}", SIGMA),
    (r"\text{Sigma}", SIGMA),
    (r"\operatorname{Delta}", DELTA),
    (r"\mathrm{ r0 }", r0),
    (r"\Sigma\Delta", SIGMA * DELTA),
    ("r_s", r_s),
    ("r_{s}", r_s),
    (r"r_{\mathrm{s}}", r_s),
    ("r_0", r0),
    ("r_{0}", r0),
    ("a", a),
    ("a(t)", a),
    (r"a\left(t\right)", a),
    ("a^2(t)", a**2),
    ("a(t)^2", a**2),
    ("a(t) t", a * t),
    ("g", g),
    ("g(t, r)", g),
    (r"\Phi", Phi),
    (r"\Phi(r)", Phi),
    # derivatives
    (r"\dot a", a_dot),
    (r"\dot{a}", a_dot),
    (r"\dot a(t)", a_dot),
    (r"\dot a^2", a_dot**2),
    (r"\ddot a", a_ddot),
    ("a'", a_dot),
    ("a''", a_ddot),
    ("a'''", sympy.Derivative(a, (t, 3))),
    ("a'(t)", a_dot),
    ("a'^2", a_dot**2),
    ("a'(t)^2", a_dot**2),
    (r"\Phi'", sympy.Derivative(Phi, r)),
    (r"\Phi''(r)", sympy.Derivative(Phi, (r, 2))),
    (r"\dot\Phi", sympy.Derivative(Phi, r)),
    # ignored material
    (r"\displaystyle\frac{M}{r}", M / r),
    (r"\frac{M}{r}\,.", M / r),
    (r"\frac{M}{r},", M / r),
    ("r.", r),
    ("2.", sympy.Integer(2)),
    (r"\left. r \right.", r),
    (r"r \quad + \qquad\ M \! \: \;", r + M),
    ("  \n r \t ", r),
]


@pytest.mark.parametrize(("text", "expected"), GRAMMAR_CASES)
def test_grammar(text: str, expected: sympy.Expr) -> None:
    value = parse(text)
    assert value == expected, (text, value)


@pytest.mark.parametrize(
    "text",
    [r"$\frac{M}{r}$", r"$$\frac{M}{r}$$", r"\(\frac{M}{r}\)", r"\[\frac{M}{r}\]",
     r"  $\frac{M}{r}$  ", r"$\frac{M}{r}$.", r"\[\frac{M}{r}\],", r"$\frac{M}{r}.$"],
)
def test_one_pair_of_math_delimiters_is_stripped(text: str) -> None:
    assert parse(text) == M / r


def test_greek_letters_map_to_declared_names() -> None:
    for command, names in GREEK_LETTERS.items():
        for name in names:
            symbol = sympy.Symbol(name)
            vocabulary = Vocabulary(symbols={name: symbol})
            assert parse(f"\\{command}", vocabulary) == symbol


def test_variant_letters_prefer_their_own_name() -> None:
    vocabulary = Vocabulary(symbols={"phi": phi, "varphi": chi})
    assert parse(r"\varphi", vocabulary) == chi
    assert parse(r"\phi", vocabulary) == phi


def test_declared_e_and_pi_are_names_not_constants() -> None:
    e_symbol, pi_symbol = sympy.Symbol("e"), sympy.Symbol("pi")
    vocabulary = Vocabulary(symbols={"e": e_symbol, "pi": pi_symbol, "r": r})
    assert parse("e r", vocabulary) == e_symbol * r
    assert parse("{e}^{r}", vocabulary) == e_symbol**r
    # e^{r} could be the exponential or a power of the declared e: refused (tests/test_claim_notations.py).
    assert "ambiguous" in error_of("e^{r}", vocabulary)
    assert parse(r"\pi r", vocabulary) == pi_symbol * r


def test_subscript_tries_underscore_then_joined() -> None:
    both = Vocabulary(symbols={"r_0": r_s, "r0": r0})
    assert parse("r_0", both) == r_s
    assert parse("r_{0}", Vocabulary(symbols={"r0": r0})) == r0
    greek = Vocabulary(symbols={"theta_0": theta, "phi1": phi})
    assert parse(r"\theta_0", greek) == theta
    assert parse(r"\varphi_1", greek) == phi


def test_resolution_order_follows_the_plain_syntax() -> None:
    # A symbol outranks an abbreviation, which outranks a function, as in stepper.parse.
    q = sympy.Symbol("q")
    vocabulary = Vocabulary(symbols={"q": q}, abbreviations={"q": r, "w": M},
                            functions={"w": a})
    assert parse("q", vocabulary) == parse_expression("q", vocabulary, WHERE) == q
    assert parse("w", vocabulary) == parse_expression("w", vocabulary, WHERE) == M


def test_every_function_command() -> None:
    for name in sorted(FUNCTION_COMMANDS):
        assert parse(f"\\{name}(r)") == ELEMENTARY_FUNCTIONS[name](r)
        assert parse(f"\\{name} r") == ELEMENTARY_FUNCTIONS[name](r)


def test_numbers_are_exact() -> None:
    for text, expected in [("0.1", sympy.Rational(1, 10)), ("3.14159", sympy.Rational(314159, 100000)),
                           ("0.000", sympy.Integer(0)), (r"0.1+0.2", sympy.Rational(3, 10))]:
        value = parse(text)
        assert value == expected
        assert not value.atoms(sympy.Float)


@pytest.mark.parametrize(
    "text",
    ["r^2 + 2*M", "(r - 2*M)/r^3", "-M/(r*(r-2*M))", "2*(r + 1)*M", "r - M + t - 1",
     "-r^2", "r/M/t", "0.5*r"],
)
def test_agrees_with_the_plain_syntax_where_both_apply(text: str) -> None:
    assert parse(text) == parse_expression(text, VOCABULARY, WHERE)


# ---------------------------------------------- stepper's own LaTeX, read back

OWN_OUTPUT = [
    M * (r - 2 * M) / r**3,
    -M / (r * (r - 2 * M)),
    -(r - 2 * M) * sin(theta) ** 2,
    -sin(theta) * cos(theta),
    48 * M**2 / r**6,
    6 * (a_ddot / a + a_dot**2 / a**2),
    sqrt(1 - 2 * M / r),
    exp(-2 * M / r),
    SIGMA / DELTA,
    log(r) / 3,
    sympy.Rational(3, 2) * r ** sympy.Rational(1, 3),
    a**2 * sin(2 * theta),
    sin(theta) ** 2 / cos(theta) ** 3,
    sympy.tan(theta + phi),
    sympy.pi * r**2 * exp(2 * Phi) * sympy.Derivative(Phi, r),
]


@pytest.mark.parametrize("expression", OWN_OUTPUT, ids=str)
def test_reads_back_what_the_report_writer_prints(expression: sympy.Expr) -> None:
    printed = ExpressionWriter().inline(expression)
    assert parse(printed) == expression, printed


# ------------------------------------------------------------------- errors


@pytest.mark.parametrize(
    ("text", "fragment", "column"),
    [
        # commands outside the subset
        (r"\input{/etc/passwd}", r"unknown command '\input'", 1),
        (r"\write18{touch pwned}", r"unknown command '\write'", 1),
        (r"\def\x{1}", r"unknown command '\def'", 1),
        (r"\newcommand{\x}{1}", r"unknown command '\newcommand'", 1),
        (r"\catcode`\^=7", r"unknown command '\catcode'", 1),
        (r"\csname x\endcsname", r"unknown command '\csname'", 1),
        (r"r + \foo", r"unknown command '\foo'", 5),
        (r"\arcsin r", r"unknown command '\arcsin'", 1),
        (r"\frac{M}{r}\\ r", r"unknown command '\\'", 12),
        (r"r \{ M \}", r"unknown command '\{'", 3),
        # characters outside the subset
        ("r = M", "unexpected character '='", 3),
        ("r & M", "unexpected character '&'", 3),
        ("r % comment", "unexpected character '%'", 3),
        ("r # M", "unexpected character '#'", 3),
        ("r $ M", "unexpected character '$'", 3),
        ("$r$ + $M$", "unexpected character '$'", 3),
        ("$$r$", "unexpected character '$'", 2),
        ("|r|", "unexpected character '|'", 1),
        ("r < M", "unexpected character '<'", 3),
        ("r\u2013M", "unexpected character '\u2013' (U+2013)", 2),
        ("\u0391", "unexpected character '\u0391' (U+0391)", 1),  # Greek capital Alpha, not mapped like \u03b8
        ("r\x00", "unexpected character U+0000", 2),
        ("r \\", "unexpected character '\\'", 3),
        # delimiters
        (r"\left\{ r \right\}", r"unsupported delimiter '\left\{'", 1),
        (r"\left| r \right|", r"unsupported delimiter '\left|'", 1),
        (r"\left\langle r \right\rangle", r"unsupported delimiter '\left\langle'", 1),
        (r"\big| r", r"unsupported delimiter '\big|'", 1),
        (r"\bigr( r", r"unsupported delimiter '\bigr('", 1),
        (r"r \left", r"unsupported delimiter '\left'", 3),
        (r"\mathrm{r s}", r"'\mathrm' must be followed by a name in braces", 1),
        (r"\text r", r"'\text' must be followed by a name in braces", 1),
        # unbalanced brackets
        ("(r", "unmatched '('", 1),
        ("{r", "unmatched '{'", 1),
        (r"\left( r", r"unmatched '\left('", 1),
        ("r)", "unmatched ')'", 2),
        ("r}", "unmatched '}'", 2),
        ("r]", "unmatched ']'", 2),
        (r"r \right)", r"unmatched '\right)'", 3),
        ("(r]", "unexpected ']'", 3),
        (r"\frac{M}{r", "unmatched '{'", 9),
        # names
        ("x", "unknown name 'x'", 1),
        ("2Mq", "unknown name 'q'", 3),
        (r"\omega", r"unknown name '\omega'", 1),
        (r"\theta_1", r"unknown name '\theta_1'", 1),
        ("r_q", "unknown name 'r_q'", 1),
        ("e_1", "unknown name 'e_1'", 1),
        ("dt", "unknown name 'd'", 1),
        (r"\mathrm{rho}", r"unknown name '\mathrm{rho}'", 1),
        # scripts and the one-character rule
        ("r^22", "number '2' follows a factor", 4),
        ("r^10", "number '0' follows a factor", 4),
        ("2 3", "number '3' follows a factor", 3),
        ("r 2", "number '2' follows a factor", 3),
        (r"\frac{1}{2}3", "number '3' follows a factor", 12),
        ("r^-1", "unexpected '-' after '^'", 3),
        (r"r^\frac12", r"unexpected '\frac' after '^'", 3),
        ("r^", "unexpected end of text after '^'", 3),
        ("r^{2}^{3}", "double superscript '^'", 6),
        ("r_s_s", "double subscript '_'", 4),
        ("(r)_s", "unexpected '_'", 4),
        ("2_s", "unexpected '_'", 2),
        ("_r", "unexpected '_'", 1),
        ("r_{0.5}", "unexpected '0.5'", 4),
        ("r_{}", "unexpected '}' after '_'", 4),
        ("(r)'", "unexpected \"'\"", 4),
        (r"\frac{M}", "unexpected end of text after '\\frac'", 9),
        (r"\frac(M)(r)", r"unexpected '(' after '\frac'", 6),
        (r"\sqrt[0]{r}", r"'\sqrt' of index zero", 6),
        # functions
        (r"\sin", r"unexpected end of text", 5),
        (r"\sin + r", "unexpected '+'", 6),
        (r"\sin^{-1}\theta", r"negative power -1 on function '\sin'", 5),
        (r"\cos^{-2}\theta", r"negative power -2 on function '\cos'", 5),
        (r"\sin^2(\theta)^2", "double superscript '^'", 15),
        (r"\log_2 r", r"unexpected '_' after '\log'", 5),
        (r"\sin(\theta, r)", "unexpected ','", 12),
        ("a(r)", "function 'a' is declared with arguments (t) but called with (r)", 1),
        ("a(r-2M)", "function 'a' is declared with arguments (t)", 1),
        ("g(t)", "function 'g' is declared with arguments (t, r) but called with (t)", 1),
        ("a()", "unexpected ')'", 3),
        # derivatives
        (r"\dot r", r"'\dot' on 'r'", 1),
        (r"\ddot\Sigma", r"'\ddot' on 'Sigma'", 1),
        ("r'", "\"'\" on 'r'", 2),
        (r"\dot g", r"'\dot' on 'g'", 1),
        ("g'", "\"'\" on 'g'", 2),
        (r"\dot", r"unexpected end of text after '\dot'", 5),
        (r"\dot{2}", r"unexpected '2' after '\dot'", 6),
        (r"\dot a'", "unexpected \"'\"", 7),
        ("a^2'", "unexpected \"'\"", 4),
        # ambiguity and arithmetic
        ("1/2M", "ambiguous '/'", 2),
        (r"M/r\sin\theta", "ambiguous '/'", 2),
        (r"1/\sin\theta\cos\theta", "ambiguous '/'", 2),
        (r"\frac{M}{0}", "division by zero", 1),
        ("M/0", "division by zero", 2),
        (r"M/(r-r)", "division by zero", 2),
        (r"0^{-1}", "division by zero", 2),
        (r"\frac{1}{\sin\pi}", "division by zero", 1),
        (r"\cot 0", r"function '\cot' is undefined", 1),
        (r"\ln 0", r"function '\ln' is undefined", 1),
        (r"\tan\frac{\pi}{2}", r"function '\tan' is undefined", 1),
        # stray tokens
        ("r.M", "unexpected '.'", 2),
        ("r,M", "unexpected ','", 2),
        ("r + ", "unexpected end of text", 4),  # trailing blanks are not counted
        ("*r", "unexpected '*'", 1),
        (r"r \cdot", "unexpected end of text", 8),
        ("()", "unexpected ')'", 2),
        ("{}", "unexpected '}'", 2),
        ("r..", "unexpected '.'", 2),
    ],
)
def test_refused_constructs_name_token_and_column(text: str, fragment: str, column: int) -> None:
    assert_names(error_of(text), fragment, column)


def test_columns_count_from_the_start_of_the_original_text() -> None:
    assert_names(error_of("  $r = M$"), "unexpected character '='", 6)
    assert_names(error_of(r"\[ r + \foo \]"), r"unknown command '\foo'", 8)


@pytest.mark.parametrize(
    ("text", "hint"),
    [
        ("r^22", "write ^{22}"),
        ("r_12", "no declared name 'r_1' or 'r1'"),
        ("Sigma", r"write \Sigma or \mathrm{Sigma}"),
        ("2 Delta", r"write \Delta or \mathrm{Delta}"),
        (r"sin\theta", r"write \sin"),
        (r"theta", r"write \theta"),
        (r"\sin^{-1} r", "inverse function"),
        ("r = M", "not an equation"),
        ("1/2M", r"write \frac{...}{...} or use parentheses"),
        (r"\frac{M}{r} \\ M", "line breaks are not accepted"),
        (r"\left\{ r", "after '\\left' only ( [ . are accepted"),
        ("a(r)", r"write \cdot for a product"),
    ],
)
def test_helpful_hints(text: str, hint: str) -> None:
    assert hint in error_of(text)


def test_multi_letter_name_written_plainly() -> None:
    mass = Vocabulary(symbols={"mass": M, "m": r})
    message = error_of("2mass", mass)
    assert_names(message, "unknown name 'a'", 3)
    assert r"(write \mathrm{mass})" in message
    assert parse(r"2\mathrm{mass}", mass) == 2 * M


def test_unknown_letter_in_a_meaningless_word_gets_no_hint() -> None:
    message = error_of("rq")
    assert message == f"unknown name 'q' at column 2 of {WHERE}"


@pytest.mark.parametrize("text", ["", "   ", "$$", "$ $", r"\(\)", ".", r"\,", r"\displaystyle"])
def test_empty_expression(text: str) -> None:
    assert error_of(text) == f"empty expression in {WHERE}"


def test_non_text_is_an_input_error() -> None:
    with pytest.raises(InputError, match="must be text"):
        parse_latex(b"r", VOCABULARY, WHERE)  # type: ignore[arg-type]


# --------------------------------------------------------- size and depth


def test_text_length_limit() -> None:
    text = "r+" * (MAX_TEXT_LENGTH // 2) + "r"
    message = error_of(text)
    assert "too long" in message and str(MAX_TEXT_LENGTH) in message


def test_long_texts_within_the_limit_are_quick() -> None:
    assert parse("+".join(["r"] * 20000)) == 20000 * r
    assert parse("".join(["(r+1)"] * 1000)) == (r + 1) ** 1000


def test_nesting_limit() -> None:
    assert parse("{" * MAX_DEPTH + "r" + "}" * MAX_DEPTH) == r
    assert parse("(" * MAX_DEPTH + "r" + ")" * MAX_DEPTH) == r
    message = error_of("{" * (MAX_DEPTH + 1) + "r" + "}" * (MAX_DEPTH + 1))
    assert_names(message, "too deeply nested: '{'", MAX_DEPTH + 1)


@pytest.mark.parametrize(
    "text",
    [
        r"\sin" * 5000 + "r",
        r"\frac{" * 3000 + "r",
        "{" * 50000,
        r"\sqrt{" * 300 + "r" + "}" * 300,
        "r^{" * 300 + "r" + "}" * 300,
        "-" * 20000 + "r",
        r"\left(" * 2000 + "r" + r"\right)" * 2000,
    ],
    ids=["sin-5000", "frac-3000", "open-50000", "sqrt-300", "power-300", "minus-20000", "left-2000"],
)
def test_deep_texts_never_raise_recursion_error(text: str) -> None:
    try:
        value = parse(text)
    except InputError as error:
        assert "\n" not in str(error)
    else:
        assert isinstance(value, sympy.Expr)


def test_constant_nesting_limit() -> None:
    depth = MAX_CONSTANT_NESTING
    assert parse(r"\sin(" * depth + "1" + ")" * depth) is not None
    message = error_of(r"\sin(" * (depth + 1) + "1" + ")" * (depth + 1))
    assert_names(message, r"constant too deeply nested: '\sin'", 1)
    assert parse(r"\sin(" * (depth + 3) + "r" + ")" * (depth + 3)) is not None  # under MAX_FUNCTION_NESTING


@pytest.mark.parametrize(
    ("text", "token", "column"),
    [
        ("9^{9^{9^{9}}}", "'^'", 5),
        ("2^{10000}", "'^'", 2),
        ("1" * 800, "'111", 1),
        ("(2r)^{5000}", "'^'", 5),
        (r"e^{3000\ln 2}", "'^'", 2),
        (r"\exp(3000\ln 2)", r"'\exp'", 1),
        (r"\sqrt[\frac{1}{5000}]{2}", r"'\sqrt'", 1),
        (r"\frac{" + "9" * 500 + "}{" + "7" * 500 + "}", r"'\frac'", 1),
        (r"(\frac{2}{3})^{2000}", "'^'", 14),
    ],
)
def test_numbers_too_large(text: str, token: str, column: int) -> None:
    message = error_of(text)
    assert_names(message, f"number too large: {token}", column)


# ----------------------------------------------------------------- security

HOSTILE_TEXTS = [
    r"\input{/etc/passwd}",
    r"\include{pwned}",
    r"\write18{touch pwned}",
    r"\immediate\write18{touch pwned}",
    r"\openout\f=pwned",
    r"\def\x{\input{/etc/passwd}}\x",
    r"\newcommand{\x}{1}",
    r"\catcode`\{=12",
    r"\csname input\endcsname{/etc/passwd}",
    r"\expandafter\input",
    r"\usepackage{shellesc}",
    r"$\input{/etc/passwd}$",
    r"r + \input /etc/passwd",
    r"\mathrm{\input{x}}",
    "__import__('os').system('touch pwned')",
    'eval("1")',
    "open('pwned', 'w')",
    "().__class__",
    "lambda: 0",
]


@pytest.mark.parametrize("text", HOSTILE_TEXTS)
def test_hostile_texts_are_refused_and_harmless(
    text: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.chdir(tmp_path)
    with pytest.raises(InputError) as caught:
        parse(text)
    assert "\n" not in str(caught.value)
    assert list(tmp_path.iterdir()) == []


def test_reader_never_reaches_a_string_evaluator(monkeypatch: pytest.MonkeyPatch) -> None:
    import sympy.parsing.sympy_parser as sympy_parser

    def forbidden(*args: object, **kwargs: object) -> None:
        raise AssertionError("a string evaluator was called")

    monkeypatch.setattr(sympy_parser, "parse_expr", forbidden)
    monkeypatch.setattr(sympy, "sympify", forbidden)
    monkeypatch.setattr(builtins, "eval", forbidden)
    monkeypatch.setattr(builtins, "exec", forbidden)
    for text, _ in PUBLISHED + GRAMMAR_CASES:
        parse(text)
    for text in HOSTILE_TEXTS:
        with pytest.raises(InputError):
            parse(text)


FORBIDDEN_CALLS = {"eval", "exec", "compile", "sympify", "parse_expr", "parse_latex_lark",
                   "S", "__import__", "getattr", "Symbol", "symbols", "Function", "latex"}


def test_module_source_calls_no_string_evaluator() -> None:
    # stepper.guards holds the checks and sympy calls shared with stepper.parse.
    source = inspect.getsource(latex_input_module) + inspect.getsource(guards_module)
    tree = ast.parse(source)
    called = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Call):
            function = node.func
            if isinstance(function, ast.Name):
                called.add(function.id)
            elif isinstance(function, ast.Attribute) and function.attr != "compile":
                called.add(function.attr)
            elif isinstance(function, ast.Attribute):  # re.compile is the one harmless "compile"
                assert isinstance(function.value, ast.Name) and function.value.id == "re"
        if isinstance(node, (ast.Import, ast.ImportFrom)):
            module = node.module if isinstance(node, ast.ImportFrom) else None
            modules = [module or ""] + [alias.name for alias in node.names]
            assert not any("parsing" in module for module in modules)
    assert not called & FORBIDDEN_CALLS
    assert {"Mul", "Add", "Rational", "diff"} <= called  # objects are built directly (derivatives by sympy.diff)
    # The only use of parse_latex's own name is its definition, never sympy's reader.
    assert "sympy.parsing" not in source


# --------------------------------------------------------- property tests

LATEX_PIECES = [
    "\\frac", "\\dfrac", "\\sqrt", "{", "}", "^", "_", "(", ")", "[", "]", "+", "-", "*", "/",
    " ", "0", "1", "2", "9", "0.5", ".", ",", "r", "M", "a", "e", "t", "x", "s", "'",
    "\\sin", "\\cos", "\\exp", "\\ln", "\\tan", "\\cot", "\\theta", "\\varphi", "\\pi", "\\Sigma",
    "\\alpha", "\\omega", "\\dot", "\\ddot", "\\cdot", "\\times", "\\left(", "\\right)", "\\left.",
    "\\left", "\\right", "\\bigl(", "\\Big", "\\,", "\\!", "\\quad", "~", "\\mathrm{", "\\text{Sigma}",
    "\\input", "\\write18", "\\def", "\\csname", "\\\\", "$", "&", "=", "%", "#", "\\",
    "\\displaystyle", "\\(", "\\)", "__import__", "'os'",
]


@settings(max_examples=600, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(
    text=st.one_of(
        st.lists(st.sampled_from(LATEX_PIECES), max_size=30).map("".join),
        st.text(st.sampled_from("\\frac{}^_()[]+-*/ 0123456789.,'$&=%#~rMaetsinthcol"), max_size=40),
        st.text(st.characters(codec="utf-8", exclude_categories=["Cs"]), max_size=30),
    )
)
@pytest.mark.slow  # a property test over hundreds of generated texts
def test_any_text_parses_or_raises_input_error(
    text: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.chdir(tmp_path)
    try:
        value = parse(text)
    except InputError as error:
        message = str(error)
        assert message and "\n" not in message and WHERE in message
    else:
        assert isinstance(value, sympy.Expr)
        assert not value.atoms(sympy.Float)
        assert not value.has(sympy.zoo, sympy.nan, sympy.oo, -sympy.oo)
    assert list(tmp_path.iterdir()) == []


# Random expressions printed by the project's report writer and read back.

LEAVES = [r, theta, phi, M, alpha, a, Phi, a_dot, a_ddot, sympy.pi, SIGMA, DELTA]


@st.composite
def expressions(draw: st.DrawFn, depth: int = 3) -> sympy.Expr:
    if depth == 0 or draw(st.integers(0, 3)) == 0:
        return draw(st.one_of(
            st.sampled_from(LEAVES),
            st.integers(1, 12).map(sympy.Integer),
            st.builds(sympy.Rational, st.integers(1, 9), st.integers(2, 9)),
        ))
    shape = draw(st.sampled_from(["+", "-", "*", "/", "^", "neg", "f"]))
    left = draw(expressions(depth - 1))
    if shape == "neg":
        return -left
    if shape == "f":
        name = draw(st.sampled_from(["sin", "cos", "tan", "exp", "log", "sqrt", "cosh"]))
        return ELEMENTARY_FUNCTIONS[name](left)
    if shape == "^":
        return left ** draw(st.sampled_from([2, 3, -1, -2, half, sympy.Rational(-3, 2)]))
    right = draw(expressions(depth - 1))
    assume(not (shape == "/" and right == 0))
    return {"+": left + right, "-": left - right, "*": left * right, "/": left / right}[shape]


def same_value(left: sympy.Expr, right: sympy.Expr) -> bool:
    """Equal as sympy objects, or equal once multiplied out.

    Printing loses sympy's grouping of a number and a sum: 1/(2*(r+theta))
    prints as \frac{1}{2 (r+theta)}, which reads back as 1/(2*r + 2*theta).
    """
    if left == right:
        return True
    difference = left - right
    return sympy.expand(difference) == 0 or sympy.simplify(difference) == 0


@pytest.mark.slow  # a property test over hundreds of generated texts
@settings(max_examples=250, deadline=None)
@given(expressions())
def test_printed_expressions_read_back(expression: sympy.Expr) -> None:
    assume(not expression.has(sympy.I, sympy.zoo, sympy.nan, sympy.oo, -sympy.oo))
    printed = ExpressionWriter().inline(expression)
    assert same_value(parse(printed), expression), printed


def test_a_sized_bracket_after_a_function_multiplies_unless_it_holds_its_arguments():
    # The reports print a(t) (a'(t))^2 as "a \left(a'\right)^{2}" (found by the round-trip property above).
    t = sympy.Symbol("t", real=True)
    a = sympy.Function("a")(t)
    words = Vocabulary({"t": t}, {"a": a}, {})
    assert parse_latex(r"a \left(a'\right)^{2}", words, "claim") == a * a.diff(t) ** 2
    assert parse_latex(r"a\left(t\right)", words, "claim") == a
    with pytest.raises(InputError, match="declared with arguments"):
        parse_latex("a(t^2)", words, "claim")
