r"""Claims as people write them: the derivative notations of the trade in LaTeX and in the plain syntax, Greek
letters typed in Unicode, e^{...}, and the friendly failures of ``stepper audit``.

Expected parse results are sympy objects built here by hand (never read from text, never produced by stepper).
What each notation means is common practice in the differential-geometry and relativity literature (partial
derivatives \partial_x w, w_{,x} and \frac{\partial w}{\partial x}; total derivatives \frac{df}{dr}, f' and
\dot a; e^{x} the exponential).  The curvature values the audits check against carry their sources beside them.
"""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest
import sympy

from stepper.audit import AGREES, DIFFERS, audit
from stepper.chain import derive
from stepper.claims import claim_vocabulary, load_claims
from stepper.cli import main
from stepper.errors import InputError
from stepper.latex_input import parse_latex
from stepper.metricfile import load_metric
from stepper.parse import Vocabulary, check_identifier, parse_expression

ROOT = Path(__file__).resolve().parent.parent
TRIPLE = "'" * 3

t, r, theta, x, y, M, Lam = sympy.symbols("t r theta x y M Lambda", real=True)
w = sympy.Function("w")(x, y)
a = sympy.Function("a")(t)
f = 1 - 2 * M / r  # the abbreviation f of r alone
S = r**2 + theta**2  # an abbreviation of two coordinates

VOCABULARY = Vocabulary(
    symbols={"t": t, "r": r, "theta": theta, "x": x, "y": y, "M": M, "Lambda": Lam},
    functions={"w": w, "a": a},
    abbreviations={"f": f, "S": S},
    coordinates=("t", "r", "theta", "x", "y"),
)
WHERE = "claim 1"

# Derivatives built by hand with sympy.Derivative (doit() only where an abbreviation is differentiated).
w_x, w_y = sympy.Derivative(w, x), sympy.Derivative(w, y)
w_xx, w_yy = sympy.Derivative(w, (x, 2)), sympy.Derivative(w, (y, 2))
w_xy = sympy.Derivative(w, x, y)
a_t, a_tt = sympy.Derivative(a, t), sympy.Derivative(a, (t, 2))
f_r = 2 * M / r**2  # d/dr (1 - 2M/r), by hand
f_rr = -4 * M / r**3


def latex(text: str, vocabulary: Vocabulary = VOCABULARY) -> sympy.Expr:
    return parse_latex(text, vocabulary, WHERE)


def plain(text: str, vocabulary: Vocabulary = VOCABULARY) -> sympy.Expr:
    return parse_expression(text, vocabulary, WHERE)


def refusal(reader, text: str, vocabulary: Vocabulary = VOCABULARY) -> str:
    with pytest.raises(InputError) as caught:
        reader(text, vocabulary, WHERE)
    message = str(caught.value)
    assert "\n" not in message
    return message


# ------------------------------------------------------------------ LaTeX notations

LATEX_NOTATIONS = [
    # \partial with a subscript (common practice)
    (r"\partial_x w", w_x),
    (r"\partial_{x} w", w_x),
    (r"\partial_x^2 w", w_xx),
    (r"\partial_x^{2} w", w_xx),
    (r"\partial^2_x w", w_xx),
    (r"\partial_x\partial_y w", w_xy),
    (r"\partial_y\partial_x w", w_xy),  # partial derivatives commute (Schwarz)
    (r"\partial_{xy} w", w_xy),
    (r"\partial_{xx} w", w_xx),
    (r"\partial_x w(x,y)", w_x),
    (r"\partial_x (w^2)", 2 * w * w_x),
    (r"\partial_x\left(w^{2}\right)", 2 * w * w_x),
    (r"\partial_x w\,\partial_y w", w_x * w_y),
    (r"\partial_x w \partial_y w", w_x * w_y),
    (r"(\partial_x w)^2", w_x**2),
    (r"\partial_r f", f_r),
    ("\u2202_x w", w_x),  # the Unicode partial sign
    # fractions with \partial
    (r"\frac{\partial w}{\partial x}", w_x),
    (r"\frac{\partial^{2} w}{\partial x^{2}}", w_xx),
    (r"\frac{\partial^2 w}{\partial x^2}", w_xx),
    (r"\frac{\partial^{2} w}{\partial x \partial y}", w_xy),
    (r"\frac{\partial^2 w}{\partial y\,\partial x}", w_xy),
    (r"\frac{\partial}{\partial x} w", w_x),
    (r"\frac{\partial}{\partial x}\left(w^2\right)", 2 * w * w_x),
    (r"\frac{\partial w^2}{\partial x}", 2 * w * w_x),  # all of the numerator is differentiated
    (r"\dfrac{\partial w}{\partial y}", w_y),
    # comma derivatives (common practice in relativity: w_{,x} = \partial_x w)
    (r"w_{,x}", w_x),
    (r"w_{,xy}", w_xy),
    (r"w_{,x x}", w_xx),  # TeX prints w_{,x x} as w_{,xx}: read the same
    (r"w_{,xx} + w_{,yy}", w_xx + w_yy),
    (r"w_{,x}^2", w_x**2),
    (r"f_{,r}", f_r),
    # total derivatives of what depends on one coordinate
    (r"\frac{d f}{d r}", f_r),
    (r"\frac{df}{dr}", f_r),
    (r"\frac{\mathrm{d}f}{\mathrm{d}r}", f_r),
    (r"\frac{\mathrm{d} f}{\mathrm{d} r}", f_r),
    (r"\frac{d^2 f}{dr^2}", f_rr),
    (r"\frac{d^{2}f}{dr^{2}}", f_rr),
    (r"\frac{d}{dr} f", f_r),
    (r"\frac{d}{dr}\left(r f\right)", sympy.Integer(1)),  # d/dr (r - 2M) = 1, by hand
    (r"\frac{d a}{d t}", a_t),
    (r"\frac{d^2a}{dt^2}", a_tt),
    # primes and dots on a function of one variable (already read before) and on an abbreviation of one coordinate
    ("a'", a_t),
    ("a''(t)", a_tt),
    (r"\dot a", a_t),
    (r"\ddot{a}", a_tt),
    ("f'", f_r),
    ("f''", f_rr),
    ("f'(r)", f_r),
    (r"\dot f", f_r),
    ("f(r)", f),  # an abbreviation of r alone, written with its argument
    # exponentials and logarithms
    (r"e^{2w}", sympy.exp(2 * w)),
    (r"e^{-2w}", sympy.exp(-2 * w)),
    (r"e^{2w(x,y)}", sympy.exp(2 * w)),
    (r"\exp(2w)", sympy.exp(2 * w)),
    (r"\exp{2w}", sympy.exp(2 * w)),
    (r"\ln r", sympy.log(r)),
    (r"\log r", sympy.log(r)),  # the natural logarithm, as in physics papers
    (r"\ln(f)", sympy.log(f)),
    # Greek letters typed in Unicode are their commands
    ("\u03b8", theta),
    ("\\sin \u03b8\\cos \u03b8", sympy.sin(theta) * sympy.cos(theta)),
    ("2M\u03b8", 2 * M * theta),
    ("\u039b r^2", Lam * r**2),
    ("\u2202_\u03b8 S", 2 * theta),
    # a fraction whose numerator is a derivative, not a derivative written as a fraction
    (r"\frac{\partial_x \left(w^2\right)}{2w}", w_x),
    # the whole Laplacian of the surface claim below
    (r"-2e^{-2w}\left(\partial_x^2 w + \partial_y^2 w\right)", -2 * sympy.exp(-2 * w) * (w_xx + w_yy)),
]


@pytest.mark.parametrize(("text", "expected"), LATEX_NOTATIONS)
def test_latex_notation(text: str, expected: sympy.Expr) -> None:
    assert latex(text) == expected


def test_mixed_partials_are_one_object_whatever_the_order() -> None:
    # Schwarz: the mixed partials of a smooth function agree, so every notation gives sympy's one canonical form.
    forms = [r"\partial_x\partial_y w", r"\partial_y\partial_x w", r"\partial_{yx} w", r"w_{,xy}", r"w_{,yx}",
             r"\frac{\partial^{2} w}{\partial x \partial y}", r"\frac{\partial^{2} w}{\partial y \partial x}"]
    assert {latex(text) for text in forms} == {w_xy}
    assert {plain(text) for text in ["diff(w, x, y)", "diff(w, y, x)"]} == {w_xy}


# ------------------------------------------------------------------ plain notations

PLAIN_NOTATIONS = [
    ("diff(w, x)", w_x),
    ("diff(w(x, y), x)", w_x),
    ("diff(w, x, y)", w_xy),
    ("diff(w, x, 2)", w_xx),  # the count form, as sympy users write it
    ("diff(w, x, x)", w_xx),
    ("diff(w, x, 2, y)", sympy.Derivative(w, (x, 2), y)),
    ("diff(w^2, x)", 2 * w * w_x),
    ("diff(f, r)", f_r),
    ("diff(f, r, 2)", f_rr),
    ("diff(a, t, 2)", a_tt),
    ("-2*exp(-2*w)*(diff(w, x, 2) + diff(w, y, 2))", -2 * sympy.exp(-2 * w) * (w_xx + w_yy)),
    ("sin(\u03b8)^2", sympy.sin(theta) ** 2),
    ("diff(S, \u03b8)", 2 * theta),
    ("\u039b*r", Lam * r),
    ("\u03c0*r", sympy.pi * r),  # pi, the constant, as the spelled name is
]


@pytest.mark.parametrize(("text", "expected"), PLAIN_NOTATIONS)
def test_plain_notation(text: str, expected: sympy.Expr) -> None:
    assert plain(text) == expected


def test_a_declared_name_diff_takes_precedence() -> None:
    diff = sympy.Symbol("diff")
    words = Vocabulary({"diff": diff, "x": x}, coordinates=("x",))
    assert plain("2*diff", words) == 2 * diff


# ------------------------------------------------------------------ refusals: column and what to write

LATEX_REFUSALS = [
    # (text, the message, its column, a piece of the advice)
    (r"\partial_M w", "'M' is not a coordinate", 10, "derivatives are taken by the coordinates t, r, theta, x, y"),
    (r"\partial_q w", "unknown coordinate 'q'", 10, "the coordinates are t, r, theta, x, y"),
    (r"\partial w", r"'\partial' without a subscript", 1, r"write \partial_x w, or \frac{\partial w}{\partial x}"),
    (r"\partial_x w^2", r"ambiguous power after '\partial_x w'", 13, r"(\partial_x w)^{2}"),
    (r"\partial_x w(x,y)^2", r"ambiguous power after '\partial_x w'", 18, r"\partial_x(w^{2})"),
    (r"\frac{\partial}{\partial x} w^2", r"ambiguous power after '\frac{\partial}{\partial x} w'", 30, r"(\frac{\partial}{\partial x} w)^{2}"),
    (r"\partial_x 2w", "unexpected '2' after '\\partial'", 12, r"\partial_x applies to a declared name or a bracket"),
    (r"\partial_x \frac{w}{2}", r"unexpected '\frac' after '\partial'", 12, r"write \partial_x w or \partial_x\left(...\right)"),
    (r"\partial_t w", "'w' does not depend on 't'", 1, "declared with arguments (x, y), so this derivative is 0"),
    (r"\partial_{xy}^2 w", r"ambiguous power on '\partial_{xy}'", 1, r"\partial_x^2\partial_y w"),
    (r"\partial_x^{9} w", "derivative of order 9", 11, "a whole number from 1 to 8"),
    (r"\partial_x^{0} w", "derivative of order 0", 11, "a whole number from 1 to 8"),
    (r"\frac{\partial w}{\partial x \partial y}", r"the orders above and below '\frac' differ: 1 and 2", 7,
     r"\frac{\partial^{2} w}{\partial x \partial y}"),
    (r"\frac{\partial w}{d x}", r"'\partial' without a subscript", 7, r"write \partial_x w, or \frac{\partial w}{\partial x}"),
    (r"\frac{\partial w}{\partial x\, d y}", "unexpected 'd'", 32, r"below the line write \partial before each variable"),
    (r"\frac{\partial w}{\partial M}", "'M' is not a coordinate", 28, "coordinates t, r, theta, x, y"),
    (r"\frac{d w}{d x}", "'d' on an expression that depends on 'y' too", 7, r"write \frac{\partial ...}{\partial x}"),
    (r"\frac{d^2 w}{dx\, dy}", "'d' with several variables", 7, r"\frac{\partial^{2} w}{\partial x \partial y}"),
    ("w'", "\"'\" on 'w'", 2, r"write \partial_x w or w_{,x}"),
    (r"\dot w", r"'\dot' on 'w'", 1, r"write \partial_x w or w_{,x}"),
    ("S'", "\"'\" on 'S'", 2, r"depends on 'r' and 'theta'; a dot or prime needs one: write \partial_x S"),
    ("M'", "\"'\" on 'M'", 2, "'M' is not a declared function or abbreviation"),
    ("w_x", "unknown name 'w_x'", 1, r"for a derivative write w_{,x} or \partial_x w"),
    ("w_,x", "unexpected ',' after '_'", 3, "a comma derivative is written in braces: w_{,x}"),
    ("w_{,}", "unexpected '}' after ','", 5, "name the coordinates: w_{,x}"),
    ("w_{,2}", "unexpected '2'", 5, "after the comma of a derivative come coordinates"),
    ("w_{,x}'", "unexpected \"'\"", 7, "not with \\dot or a comma derivative"),
    (r"-2e^{-2w}\nabla^2 w", r"unknown command '\nabla'", 10, r"write the derivatives out: \partial_x^2 w + \partial_y^2 w"),
    (r"w_{;x}", "unexpected character ';'", 4, r"covariant derivatives are not accepted; for a partial derivative write"),
    ("\x0crac{1}{r}", "unexpected character U+000C", 1, f"write LaTeX in a literal string {TRIPLE}...{TRIPLE}"),
]


@pytest.mark.parametrize(("text", "message", "column", "advice"), LATEX_REFUSALS)
def test_latex_refusal_names_column_and_what_to_write(text: str, message: str, column: int, advice: str) -> None:
    said = refusal(parse_latex, text)
    assert f"{message} at column {column} of {WHERE}" in said, said
    assert advice in said, said


PLAIN_REFUSALS = [
    ("diff(w)", "'diff' needs the coordinates to differentiate by", 7, "write diff(w, x), diff(w, x, y)"),
    ("diff(w, 2)", "count 2 before any coordinate in 'diff'", 9, "a count follows the coordinate it repeats"),
    ("diff(w, M)", "'M' is not a coordinate", 9, "diff takes coordinates: t, r, theta, x, y"),
    ("diff(w, x + y)", "'x + y' is not a coordinate", 9, "diff takes coordinates"),
    ("diff(w, t)", "'w' does not depend on 't'", 9, "so this derivative is 0"),
    ("diff(w, x, 0)", "count 0 in 'diff'", 12, "a whole number from 1 to 8"),
    ("diff(w, x, 9)", "count 9 in 'diff'", 12, "a whole number from 1 to 8"),
    ("diff w", "'diff' must be followed by '('", 1, "write diff(w, x)"),
    ("diff(w, x, x, x, x, x, x, x, x, x)", "derivative of order 9: 'diff' differentiates more than 8 times (the limit)",
     1, ""),
    ("a\u03b8", "unknown name 'a\u03b8'", 1, "read as 'atheta'"),
]


@pytest.mark.parametrize(("text", "message", "column", "advice"), PLAIN_REFUSALS)
def test_plain_refusal_names_column_and_what_to_write(text: str, message: str, column: int, advice: str) -> None:
    said = refusal(parse_expression, text)
    assert f"{message} at column {column} of {WHERE}" in said, said
    assert advice in said, said


def test_derivative_limits() -> None:
    # stepper.guards: order at most MAX_DERIVATIVE_ORDER = 8, derivatives of derivatives added up ...
    assert latex(r"\partial_x (w_{,xxxxxxx})") == sympy.Derivative(w, (x, 8))
    said = refusal(parse_latex, r"\partial_x (w_{,xxxxxxxx})")
    assert f"derivative of order 9: '\\partial' makes a derivative of more than 8 (the limit) at column 1" in said
    said = refusal(parse_expression, "diff(diff(w, x, 5), y, 4)")
    assert "derivative of order 9: 'diff' makes a derivative of more than 8 (the limit) at column 1" in said
    # ... at most MAX_DERIVATIVE_WORK = 5000 nodes differentiated in one text ...
    long_sum = "+".join(f"x^{{{k}}}" for k in range(2, 1800))  # 3 nodes a term
    said = refusal(parse_latex, r"\partial_x\left(" + long_sum + r"\right)")
    assert "derivatives too large to compute: '\\partial' brings the expression differentiated in this text " \
           "to more than 5000 nodes (the limit) at column 1" in said
    # ... and the numbers and terms of the result within the bounds of every expression.
    said = refusal(parse_latex, r"\partial_x^{8}(x^{" + str(2**300) + "})")
    assert "number too large: '\\partial' could make a number of more than 2048 bits at column 1" in said
    product = r"\cdot ".join(f"(w+{k}x)" for k in range(1, 11))
    said = refusal(parse_latex, r"\partial_x^{8}\left(" + product + r"\right)")
    assert "expression too large: '\\partial' differentiated would multiply out to more than 20000 terms" in said


def test_d_declared_makes_a_d_fraction_ambiguous() -> None:
    d = sympy.Symbol("d")
    words = Vocabulary({"d": d, "r": r, "M": M}, {}, {"f": f}, coordinates=("r",))
    for text, column in [(r"\frac{d f}{d r}", 7), (r"\frac{\mathrm{d}f}{\mathrm{d}r}", 7)]:
        said = refusal(parse_latex, text, words)
        assert f"at column {column} of {WHERE}" in said and "ambiguous" in said, said
        assert r"write \frac{\partial f}{\partial r} for a derivative" in said, said
    # What the advice offers reads as meant: the derivative, and the quotient d f / (d r).
    assert latex(r"\frac{\partial f}{\partial r}", words) == f_r
    assert latex(r"\frac{d \cdot f}{d \cdot r}", words) == d * f / (d * r)
    assert latex(r"\frac{d}{r}", words) == d / r  # no derivative in sight: the declared d


def test_e_declared_makes_e_to_a_power_ambiguous() -> None:
    e = sympy.Symbol("e")
    words = Vocabulary({"e": e, "x": x, "y": y}, {"w": w}, {}, coordinates=("x", "y"))
    said = refusal(parse_latex, r"e^{2w}", words)
    assert f"ambiguous 'e^' at column 1 of {WHERE}" in said
    assert r"write \exp(...) for the exponential function, or {e}^{...} for a power of the declared e" in said
    assert latex(r"\exp(2w)", words) == sympy.exp(2 * w)
    assert latex(r"{e}^{2}", words) == e**2
    assert latex(r"e w", words) == e * w
    # Undeclared, e is Euler's number: e^{x} is exp(x).
    assert latex(r"e^{x}", Vocabulary({"x": x}, coordinates=("x",))) == sympy.exp(x)


def test_coordinate_spelled_by_the_letters_of_a_subscript_is_ambiguous() -> None:
    xy = sympy.Symbol("xy")
    words = Vocabulary({"x": x, "y": y, "xy": xy}, {}, {"q": x * y * xy}, coordinates=("x", "y", "xy"))
    said = refusal(parse_latex, r"\partial_{xy} q", words)
    assert f"ambiguous subscript 'xy' at column 11 of {WHERE}" in said
    assert r"write \mathrm{xy} for it" in said
    assert latex(r"\partial_{\mathrm{xy}} q", words) == x * y
    assert latex(r"\partial_x\partial_y q", words) == xy


def test_derivatives_need_the_coordinates() -> None:
    # A text read without knowing the coordinates (a metric file's own text) has no derivatives.
    words = Vocabulary({"x": x, "y": y}, {"w": w})
    said = refusal(parse_latex, r"\partial_x w", words)
    assert f"derivative '\\partial' not accepted here at column 1 of {WHERE}" in said
    assert "derivatives are read in claims, where the coordinates are known" in said
    said = refusal(parse_expression, "diff(w, x)", words)
    assert f"'diff' is not accepted here at column 1 of {WHERE}" in said
    assert "derivatives are read in claims, where the coordinates are known" in said


def test_claim_vocabularies_carry_the_coordinates() -> None:
    metric = load_metric(ROOT / "examples" / "compact_star_exterior.toml")
    for quantity in ("christoffel", "geodesic_acceleration", "ansatz_solution"):
        assert claim_vocabulary(metric, quantity).coordinates == ("t", "r", "theta", "phi")


# ------------------------------------------------------------------ a symbol before a bracket multiplies

def test_a_declared_symbol_before_a_bracket_multiplies() -> None:
    # a is a constant here, not a function: a^{2}\left(1 + r\right) is a^2 (1 + r), not a applied to (1 + r).
    a_symbol = sympy.Symbol("a", positive=True)
    words = Vocabulary({"a": a_symbol, "r": r}, {}, {}, coordinates=("r",))
    assert latex(r"a^{2}\left(1 + r\right)", words) == a_symbol**2 * (1 + r)
    assert latex(r"a^2(1 + r)", words) == a_symbol**2 * (1 + r)
    assert latex(r"a\left(r\right)", words) == a_symbol * r
    assert latex(r"a^{2} \left(1 + r\right)^{2}", words) == a_symbol**2 * (1 + r) ** 2


# ------------------------------------------------------------------ Unicode Greek in a metric file

def test_unicode_greek_in_a_metric_file(tmp_path: Path) -> None:
    # The round sphere of radius R: g = diag(R^2, R^2 sin^2 theta) (common practice).
    path = tmp_path / "sphere.toml"
    path.write_text('coordinates = ["theta", "phi"]\n'
                    'line_element = "R^2*(d\u03b8^2 + sin(\u03b8)^2*d\u03c6^2)"\n'
                    '[symbols]\nR = "positive"\n', encoding="utf-8")
    metric = load_metric(path)
    theta_, phi_ = metric.coordinates
    radius = sympy.Symbol("R", positive=True)
    assert (theta_.name, phi_.name) == ("theta", "phi")
    assert metric.matrix == sympy.ImmutableMatrix([[radius**2, 0], [0, radius**2 * sympy.sin(theta_) ** 2]])


def test_a_differential_of_an_undeclared_greek_coordinate_is_named(tmp_path: Path) -> None:
    path = tmp_path / "m.toml"
    path.write_text('coordinates = ["t", "x"]\nline_element = "-dt^2 + d\u03c7^2"\n', encoding="utf-8")
    with pytest.raises(InputError) as caught:
        load_metric(path)
    said = str(caught.value)
    assert "unknown name 'd\u03c7' at column 9 of line_element" in said
    assert "read as 'dchi': the differential of 'chi', which is not a declared coordinate" in said


def test_a_greek_letter_in_a_declared_name_gets_its_spelling() -> None:
    with pytest.raises(InputError) as caught:
        check_identifier("\u03b8", "coordinates")
    assert "write 'theta'" in str(caught.value)


# ------------------------------------------------------------------ friendly failures of stepper audit

def test_audit_of_a_metric_file_says_so(tmp_path: Path, capsys: pytest.CaptureFixture) -> None:
    metric = ROOT / "examples" / "round_sphere.toml"
    with pytest.raises(InputError) as caught:
        load_claims(metric)
    said = str(caught.value)
    assert said.startswith("round_sphere.toml is a metric file; stepper audit expects a claims file (see README")
    assert f"to derive the metric use: stepper derive {metric}" in said
    assert "unknown key" not in said
    assert main(["audit", str(metric), "-o", str(tmp_path / "out"), "--formats", "trace", "--quiet"]) == 2
    assert "is a metric file" in capsys.readouterr().err


def test_a_prime_in_a_single_quoted_literal_gets_the_triple_quoted_form(tmp_path: Path) -> None:
    (tmp_path / "m.toml").write_text('coordinates = ["t", "x"]\nline_element = "-dt^2 + a(t)^2*dx^2"\n'
                                     '[functions]\na = ["t"]\n')
    path = tmp_path / "c.toml"
    path.write_text("metric = 'm.toml'\n[[claim]]\nquantity = 'christoffel'\ncomponent = 'x,t,x'\n"
                    "latex = '\\frac{a'(t)}{a(t)}'\n")
    with pytest.raises(InputError) as caught:
        load_claims(path)
    said = str(caught.value)
    assert "is not valid TOML" in said
    assert f"line 5: a literal string '...' cannot hold a prime" in said
    assert f"latex = {TRIPLE}\\frac{{a'(t)}}{{a(t)}}{TRIPLE}" in said
    # ... and the advice works.
    path.write_text(path.read_text().replace("latex = '\\frac{a'(t)}{a(t)}'",
                                             f"latex = {TRIPLE}\\frac{{a'(t)}}{{a(t)}}{TRIPLE}"))
    _, _, claims = load_claims(path)
    assert claims[0].problem == ""


@pytest.mark.parametrize("path", [ROOT / "README.md", *sorted((ROOT / "examples" / "claims").glob("*.toml"))],
                         ids=lambda p: p.name)
def test_claim_examples_write_latex_in_triple_quotes(path: Path) -> None:
    # The form that also holds primes; a single-quoted literal string ends at the first prime (TOML 1.0).
    lines = [line for line in path.read_text(encoding="utf-8").splitlines() if line.startswith("latex = ")]
    assert lines, path
    for line in lines:
        assert line.startswith(f"latex = {TRIPLE}") and line.endswith(TRIPLE), line


# ------------------------------------------------------------------ audits: each notation judged

def outcomes_of(folder: Path, metric: str, claims: list[tuple[str, str, str, str]], derivation=None) -> list[str]:
    """Write a metric file and a claims file with ``claims`` (quantity, component, key, text), load, derive
    (unless ``derivation`` is that metric's) and audit them; the outcomes in order."""
    (folder / "metric.toml").write_text(metric, encoding="utf-8")
    (folder / "claims.toml").write_text(claims_file(claims), encoding="utf-8")
    loaded, _, read = load_claims(folder / "claims.toml")
    assert [claim.problem for claim in read] == [""] * len(read)
    verdicts, _ = audit(derivation or derive(loaded), read)
    return [verdict.outcome for verdict in verdicts]


def claims_file(claims: list[tuple[str, str, str, str]]) -> str:
    lines = ['metric = "metric.toml"', 'title = "Claims as people write them"']
    for quantity, component, key, text in claims:
        lines += ["", "[[claim]]", f'quantity = "{quantity}"']
        if component:
            lines.append(f'component = "{component}"')
        lines.append(f"{key} = {TRIPLE}{text}{TRIPLE}" if key == "latex" else f'{key} = "{text}"')
    return "\n".join(lines) + "\n"


SURFACE = 'coordinates = ["x", "y"]\nline_element = "exp(2*w(x, y))*(dx^2 + dy^2)"\n[functions]\nw = ["x", "y"]\n'

# The surface e^{2w}(dx^2 + dy^2).  Gaussian curvature K = -e^{-2w} (w_xx + w_yy), so R = 2K = -2 e^{-2w} Delta w
# (from memory; do Carmo, Riemannian Geometry, the curvature of a conformal metric).  Christoffel symbols, by
# hand from Gamma^a_bc = 1/2 g^ad (d_b g_dc + d_c g_db - d_d g_bc) (common practice):
# Gamma^x_xx = w_x, Gamma^x_yy = -w_x, Gamma^x_xy = w_y, Gamma^y_yy = w_y, Gamma^y_xx = -w_y, Gamma^y_xy = w_x.
# In two dimensions R_ab = (R/2) g_ab, so R_xy = 0 (common practice): written as the difference of the two mixed
# partials, which commute (Schwarz), it checks that every mixed notation reads as the same derivative.
SURFACE_CLAIMS = [
    ("christoffel", "x,x,x", "latex", r"\partial_x w"),
    ("christoffel", "x,x,x", "latex", r"\frac{\partial_x \left(w^2\right)}{2w}"),
    ("christoffel", "x,y,y", "latex", r"-\frac{\partial w}{\partial x}"),
    ("christoffel", "x,y,y", "latex", r"-\frac{\partial}{\partial x} w"),
    ("christoffel", "x,x,y", "latex", r"\partial_{y} w"),
    ("christoffel", "x,x,y", "value", "diff(w, y)"),
    ("christoffel", "y,y,y", "latex", r"w_{,y}"),
    ("christoffel", "y,y,y", "latex", "\u2202_y w"),
    ("christoffel", "y,x,x", "latex", r"-w_{,y}"),
    ("christoffel", "y,x,x", "value", "-diff(w(x, y), y)"),
    ("christoffel", "y,x,y", "latex", r"\frac{\partial w}{\partial x}"),
    ("scalar", "", "latex", r"-2e^{-2w}\left(\partial_x^2 w + \partial_y^2 w\right)"),
    ("scalar", "", "latex", r"-2\exp(-2w)\left(\frac{\partial^{2} w}{\partial x^{2}} + "
                            r"\frac{\partial^2 w}{\partial y^2}\right)"),
    ("scalar", "", "latex", r"-\frac{2}{e^{2w}}\left(w_{,xx} + w_{,y y}\right)"),
    ("scalar", "", "latex", r"-2e^{-2w}\left(\partial_{xx} w + \frac{\partial}{\partial y}\left(\partial_y w\right)\right)"),
    ("scalar", "", "value", "-2*exp(-2*w)*(diff(w, x, 2) + diff(w, y, y))"),
    ("ricci", "x,y", "latex", r"\partial_x\partial_y w - \frac{\partial^{2} w}{\partial y \partial x}"),
    ("ricci", "x,y", "latex", r"w_{,xy} - \partial_{yx} w"),
    ("ricci", "x,y", "value", "diff(w, x, y) - diff(w, y, x)"),
    # the sign slipped
    ("scalar", "", "latex", r"2e^{-2w}\left(\partial_x^2 w + \partial_y^2 w\right)"),
]


@pytest.mark.slow  # derives a metric and runs the command line
def test_surface_claims_in_every_notation(tmp_path: Path) -> None:
    (tmp_path / "surface.toml").write_text(SURFACE, encoding="utf-8")
    path = tmp_path / "claims.toml"
    path.write_text(claims_file(SURFACE_CLAIMS).replace('"metric.toml"', '"surface.toml"'), encoding="utf-8")
    status = main(["audit", str(path), "-o", str(tmp_path / "out"), "--formats", "trace", "--quiet"])
    assert status == 1  # one claim differs
    audited = json.loads((tmp_path / "out" / "trace.json").read_text(encoding="utf-8"))["results"]["audit"]
    outcomes = [claim["outcome"] for claim in audited["claims"]]
    assert outcomes == [AGREES] * (len(SURFACE_CLAIMS) - 1) + [DIFFERS], list(zip(outcomes, SURFACE_CLAIMS))
    assert "sign flip" in audited["claims"][-1]["diagnosis"]


# A Chebyshev net dx^2 + 2 cos(w) dx dy + dy^2 (w the angle between the coordinate lines): K sin w = -w_xy, so
# R = 2K = -2 w_xy / sin w (from memory; the sine-Gordon equation of surfaces of K = -1, e.g. do Carmo,
# Differential Geometry of Curves and Surfaces, on Chebyshev nets).  Mixed partials that do not cancel.
CHEBYSHEV = ('coordinates = ["x", "y"]\nline_element = "dx^2 + 2*cos(w(x, y))*dx*dy + dy^2"\n'
             '[functions]\nw = ["x", "y"]\n')
CHEBYSHEV_CLAIMS = [
    ("scalar", "", "latex", r"-\frac{2\partial_x\partial_y w}{\sin w}"),
    ("scalar", "", "latex", r"-\frac{2}{\sin w}\frac{\partial^{2} w}{\partial x \partial y}"),
    ("scalar", "", "latex", r"-\frac{2 w_{,xy}}{\sin w}"),
    ("scalar", "", "latex", r"-2\frac{\partial_{yx} w}{\sin w(x,y)}"),
    ("scalar", "", "value", "-2*diff(w, x, y)/sin(w)"),
    ("scalar", "", "value", "-2*diff(w, y, x)/sin(w)"),
]


@pytest.fixture(scope="module")
def chebyshev(tmp_path_factory):
    path = tmp_path_factory.mktemp("chebyshev") / "metric.toml"
    path.write_text(CHEBYSHEV, encoding="utf-8")
    return derive(load_metric(path))


@pytest.mark.slow  # derives a metric
def test_mixed_partials_in_every_notation(tmp_path: Path, chebyshev) -> None:
    outcomes = outcomes_of(tmp_path, CHEBYSHEV, CHEBYSHEV_CLAIMS, chebyshev)
    assert outcomes == [AGREES] * len(CHEBYSHEV_CLAIMS)


@pytest.mark.slow  # derives a metric
def test_a_sign_slip_in_a_mixed_partial_differs(tmp_path: Path, chebyshev) -> None:
    slip = [("scalar", "", "latex", r"\frac{2\partial_x\partial_y w}{\sin w}")]
    outcomes = outcomes_of(tmp_path, CHEBYSHEV, slip, chebyshev)
    assert outcomes == [DIFFERS]


# -f dt^2 + dr^2/f with the abbreviation f = 1 - 2M/r.  By hand from the Christoffel formula:
# Gamma^r_tt = f f'/2, Gamma^t_tr = f'/(2f), Gamma^r_rr = -f'/(2f); and R = -f'' for this two-dimensional
# static metric (common practice; for f = 1 - r^2, de Sitter space in two dimensions, R = 2 as it must be).
STATIC = ('coordinates = ["t", "r"]\nline_element = "-f*dt^2 + dr^2/f"\n[symbols]\nM = "positive"\n'
          'r = "positive"\n[abbreviations]\nf = "1 - 2*M/r"\n')
STATIC_CLAIMS = [
    ("christoffel", "t,t,r", "latex", r"\frac{f'}{2f}"),
    ("christoffel", "t,t,r", "latex", r"\frac{f'(r)}{2f(r)}"),
    ("christoffel", "r,t,t", "latex", r"\frac{1}{2} f \frac{df}{dr}"),
    ("christoffel", "r,r,r", "latex", r"-\frac{1}{2f}\frac{\mathrm{d}f}{\mathrm{d}r}"),
    ("christoffel", "r,r,r", "latex", r"-\frac{f_{,r}}{2f}"),
    ("christoffel", "r,r,r", "value", "-diff(f, r)/(2*f)"),
    ("scalar", "", "latex", r"-\frac{d^2 f}{dr^2}"),
    ("scalar", "", "latex", "-f''"),
    ("scalar", "", "value", "-diff(f, r, 2)"),
    ("scalar", "", "latex", "f''"),  # the sign slipped
]


@pytest.mark.slow  # derives a metric
def test_total_derivatives_and_primes_on_an_abbreviation(tmp_path: Path) -> None:
    outcomes = outcomes_of(tmp_path, STATIC, STATIC_CLAIMS)
    assert outcomes == [AGREES] * 9 + [DIFFERS]


# -dt^2 + a(t)^2 dx^2, an expanding line, with the abbreviation s = a^2.  By hand: Gamma^t_xx = a a',
# Gamma^x_tx = a'/a, R = 2 a''/a (common practice: R^t_xtx = a a'', R_tt = -a''/a, R_xx = a a'').
EXPANDING = ('coordinates = ["t", "x"]\nline_element = "-dt^2 + a(t)^2*dx^2"\n[functions]\na = ["t"]\n'
             '[abbreviations]\ns = "a^2"\n')
EXPANDING_CLAIMS = [
    ("christoffel", "t,x,x", "latex", r"a\dot a"),
    ("christoffel", "t,x,x", "latex", r"\frac{\dot s}{2}"),
    ("christoffel", "t,x,x", "latex", r"\frac{1}{2}\frac{ds}{dt}"),
    ("christoffel", "x,t,x", "latex", r"\frac{a'}{a}"),
    ("christoffel", "x,t,x", "latex", r"\frac{1}{a}\frac{d a}{d t}"),
    ("christoffel", "x,t,x", "latex", r"\partial_t (\ln a)"),
    ("scalar", "", "latex", r"\frac{2\ddot a}{a}"),
    ("scalar", "", "latex", r"\frac{2a''(t)}{a(t)}"),
    ("scalar", "", "latex", r"\frac{2}{a}\frac{d^{2}a}{dt^{2}}"),
    ("scalar", "", "value", "2*diff(a, t, 2)/a"),
    ("scalar", "", "latex", r"\frac{\ddot a}{a}"),  # a factor of 2 lost
]


@pytest.mark.slow  # derives a metric
def test_dots_and_primes_on_functions_and_abbreviations_of_time(tmp_path: Path) -> None:
    outcomes = outcomes_of(tmp_path, EXPANDING, EXPANDING_CLAIMS)
    assert outcomes == [AGREES] * 10 + [DIFFERS]


# The round sphere of radius R, typed with Greek letters: Gamma^theta_phiphi = -sin(theta) cos(theta),
# Gamma^phi_thetaphi = cot(theta), R = 2/R^2 (common practice).
SPHERE = ('coordinates = ["theta", "phi"]\nline_element = "R^2*(d\u03b8^2 + sin(\u03b8)^2*d\u03c6^2)"\n'
          '[symbols]\nR = "positive"\n')
SPHERE_CLAIMS = [
    ("christoffel", "theta,phi,phi", "value", "-sin(\u03b8)*cos(\u03b8)"),
    ("christoffel", "theta,phi,phi", "latex", "-\\sin \u03b8\\cos \u03b8"),
    ("christoffel", "phi,theta,phi", "latex", "\\cot \u03b8"),
    ("christoffel", "phi,theta,phi", "latex", "\\frac{\u2202_\u03b8 \\left(\\sin \u03b8\\right)}{\\sin \u03b8}"),
    ("scalar", "", "value", "2/R^2"),
    ("christoffel", "phi,theta,phi", "latex", "\\tan \u03b8"),  # cot and tan mixed up
]


@pytest.mark.slow  # derives a metric
def test_unicode_greek_in_claims_and_metric(tmp_path: Path) -> None:
    outcomes = outcomes_of(tmp_path, SPHERE, SPHERE_CLAIMS)
    assert outcomes == [AGREES] * 5 + [DIFFERS]


def test_every_notation_of_the_brief_appears_in_an_audit() -> None:
    # Each derivative notation above is judged in at least one audited claim, not only parsed.
    audited = "\n".join(text for rows in (SURFACE_CLAIMS, CHEBYSHEV_CLAIMS, STATIC_CLAIMS, EXPANDING_CLAIMS,
                                           SPHERE_CLAIMS) for _, _, _, text in rows)
    for piece in [r"\partial_x w", r"\partial_x^2 w", r"\partial_x\partial_y w", r"\partial_{y} w",
                  r"\frac{\partial w}{\partial x}", r"\frac{\partial^{2} w}{\partial x^{2}}",
                  r"\frac{\partial^{2} w}{\partial x \partial y}", "w_{,y}", "w_{,xy}", "w_{,xx}",
                  r"\frac{df}{dr}", r"\frac{\mathrm{d}f}{\mathrm{d}r}", r"\frac{d^2 f}{dr^2}", "f'", "f''",
                  r"\dot s", r"\dot a", "a'", r"\partial_x \left(w^2\right)", "e^{-2w}", r"\exp", r"\ln",
                  "diff(w, y)", "diff(w, x, y)", "diff(w, x, 2)", "\u03b8"]:
        assert re.sub(r"\s", "", piece) in re.sub(r"\s", "", audited), piece
